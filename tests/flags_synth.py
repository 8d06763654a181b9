"""Hand-made interval data for the flag tests (not a test module).

Clear-sky POA comes from pvlib (Ineichen clear sky, isotropic transposition) at interval
midpoints, so the tests' reference is pvlib's solar geometry, not our own code. Clouds are
seeded random multiplicative dips; power follows PVWatts (Dobos 2014) with a 1.2 DC/AC ratio.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pvlib

LAT, LON, ALT = 39.74, -105.0, 1800.0  # Golden, Colorado (transit check values from a pvlib 0.16 run)
TILT, AZ = 30.0, 180.0
STD_OFFSET_S = -7 * 3600  # UTC-7 standard time
ZONE = "America/Denver"


def clearsky_poa(index: pd.DatetimeIndex, tau_h: float = 0.25, tilt=TILT, azimuth=AZ):
    """pvlib clear-sky POA [W/m²], solar elevation [°] and AOI [°] at interval midpoints."""
    mid = index + pd.Timedelta(hours=tau_h / 2)
    loc = pvlib.location.Location(LAT, LON, "UTC", ALT)
    cs = loc.get_clearsky(mid, model="ineichen")
    sp = loc.get_solarposition(mid)
    poa = pvlib.irradiance.get_total_irradiance(tilt, azimuth, sp["apparent_zenith"],
                                                sp["azimuth"], cs["dni"], cs["ghi"], cs["dhi"],
                                                model="isotropic")["poa_global"]
    aoi = pvlib.irradiance.aoi(tilt, azimuth, sp["apparent_zenith"], sp["azimuth"])
    out = pd.DataFrame({"poa_cs": poa.to_numpy(), "elev": sp["elevation"].to_numpy(),
                        "aoi": aoi.to_numpy()}, index=index)
    out["poa_cs"] = out["poa_cs"].fillna(0.0).clip(lower=0)
    return out


def site_weather(start="2024-04-01", days=30, tau_h=0.25, cloudy_share=0.4, seed=0):
    """Interval frame: poa_wm2 with clouds on a share of days, plus clear-sky columns."""
    rng = np.random.default_rng(seed)
    idx = pd.date_range(pd.Timestamp(start, tz="UTC") - pd.Timedelta(seconds=STD_OFFSET_S),
                        periods=int(days * 24 / tau_h), freq=f"{int(tau_h * 60)}min")
    cs = clearsky_poa(idx, tau_h)
    day = (idx.asi8 // 10**9 + STD_OFFSET_S) // 86400
    uday, inv = np.unique(day, return_inverse=True)
    cloudy = rng.random(len(uday)) < cloudy_share
    f = np.ones(len(idx))
    for k in np.flatnonzero(cloudy):
        m = inv == k
        # smooth random cloud field between 0.2 and 1
        z = np.convolve(rng.standard_normal(m.sum() + 8), np.ones(5) / 5, mode="same")[4:-4]
        f[m] = np.clip(0.6 + 0.5 * z, 0.15, 1.0)
    g = cs["poa_cs"].to_numpy() * f
    cs["poa_wm2"] = g
    cs["t_module_c"] = 15 + g / 1000 * 30
    cs["interval_h"] = tau_h
    cs["cloudy_day"] = cloudy[inv]
    return cs


def inverter_power(weather: pd.DataFrame, p_dc_kwp=120.0, p_ac_max_kw=100.0, gamma=-0.0035):
    """PVWatts-style AC power [kW] (Dobos 2014) from the frame's poa_wm2 and t_module_c."""
    g = weather["poa_wm2"].to_numpy()
    tc = weather["t_module_c"].to_numpy() + g / 1000 * 3
    p = p_dc_kwp * g / 1000 * (1 + gamma * (tc - 25)) * 0.96
    return pd.Series(np.clip(p, 0, p_ac_max_kw), index=weather.index)
