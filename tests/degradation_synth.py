"""Known-answer synthetic inputs for the degradation tests (invented data, issue #7).

Only our own generator: every series is built from a stated rate, seasonality, noise, gaps
and faults, so a test can check that an estimator recovers what was put in.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from analytics.clearsky import clearsky_poa


def daily_pi(*, years: float = 5, rd_pct_per_yr: float = -0.5, season: float = 0.02,
             noise: float = 0.01, ar1: float = 0.0, gap_fraction: float = 0.0,
             outlier_fraction: float = 0.0, step_day: int | None = None, step: float = 0.0,
             start: str = "2019-01-01", seed: int = 0) -> pd.Series:
    """PI_t = (1 + rd/100)^(t/365) (1 + season sin(2πt/365)) (1 + ε_t) [· (1 + step) after
    step_day], ε an AR(1) process with innovation sd chosen so sd(ε) = noise."""
    rng = np.random.default_rng(seed)
    n = int(round(years * 365))
    t = np.arange(n)
    e = rng.normal(0.0, noise * np.sqrt(1 - ar1 ** 2), n)
    if ar1:
        eps = np.empty(n)
        eps[0] = rng.normal(0.0, noise)
        for i in range(1, n):
            eps[i] = ar1 * eps[i - 1] + e[i]
    else:
        eps = e
    pi = (1 + rd_pct_per_yr / 100) ** (t / 365) * (1 + season * np.sin(2 * np.pi * t / 365))
    pi = pi * (1 + eps)
    if step_day is not None:
        pi = np.where(t >= step_day, pi * (1 + step), pi)
    if outlier_fraction:
        k = rng.random(n) < outlier_fraction
        pi[k] *= rng.uniform(0.5, 0.8, k.sum())
    if gap_fraction:
        pi[rng.random(n) < gap_fraction] = np.nan
    return pd.Series(pi, index=pd.date_range(start, periods=n, freq="D"), name="pi")


def interval_site(*, years: float = 3, rates_pct_per_yr=(-0.3, -0.5, -0.5, -0.7, -0.6),
                  sensor_drift_pct_per_yr: float = 1.0, clear_probability: float = 0.5,
                  freq: str = "30min", seed: int = 1, latitude_deg: float = 40.0,
                  longitude_deg: float = -3.7, tilt_deg: float = 30.0, azimuth_deg: float = 180.0,
                  p_dc_kwp: float = 100.0, gamma: float = -0.0035, eta: float = 0.97) -> dict:
    """Interval data of a small site whose shared POA sensor drifts.

    True POA on clear days = modelled clear-sky POA × (1 + 0.03 sin(2π doy/365)) (a seasonal
    bias of the clear-sky model against "reality", which year-on-year must cancel); cloudy
    days scale it by a random factor per interval. Each inverter's power follows
    PVWatts-like P = P0 (G/1000)(1 + γ (T_cell − 25)) η (1 + rd)^(t/yr) with T_cell =
    T_amb + 25 °C·G/1000. The sensor reads G (1 + drift·t). Returns dict with ``times``,
    ``poa_true``, ``poa_sensor``, ``t_cell``, ``p_ac`` (DataFrame, one column per inverter),
    ``poa_cs`` and the site geometry.
    """
    rng = np.random.default_rng(seed)
    times = pd.date_range("2019-01-01", periods=int(years * 365 * 24 * 2), freq=freq, tz="UTC")
    cs = clearsky_poa(times, latitude_deg=latitude_deg, longitude_deg=longitude_deg,
                      altitude_m=600, tilt_deg=tilt_deg, azimuth_deg=azimuth_deg, albedo=0.2)
    g_cs = cs["poa_clearsky_wm2"].to_numpy()
    doy = times.day_of_year.to_numpy()
    yr = ((times - times[0]) / pd.Timedelta(days=365)).to_numpy(dtype=float)
    days = (times - times[0]).days.to_numpy()
    clear_day = rng.random(days.max() + 1) < clear_probability
    cloud = np.where(clear_day[days], 1.0,
                     np.clip(rng.uniform(0.15, 0.95, len(times)) * rng.uniform(0.5, 1.0), 0, 1))
    g = g_cs * (1 + 0.03 * np.sin(2 * np.pi * doy / 365)) * cloud
    t_amb = 15 + 10 * np.sin(2 * np.pi * (doy - 110) / 365)
    t_cell = t_amb + 25 * g / 1000
    p = {}
    for i, rd in enumerate(rates_pct_per_yr):
        noise = 1 + rng.normal(0, 0.005, len(times))
        p[f"INV{i + 1:02d}"] = (p_dc_kwp * g / 1000 * (1 + gamma * (t_cell - 25)) * eta
                                * (1 + rd / 100) ** yr * noise)
    return {"times": times, "poa_true": pd.Series(g, times),
            "poa_sensor": pd.Series(g * (1 + sensor_drift_pct_per_yr / 100 * yr), times),
            "t_cell": pd.Series(t_cell, times), "p_ac": pd.DataFrame(p, index=times),
            "poa_cs": cs["poa_clearsky_wm2"], "p_dc_kwp": p_dc_kwp, "gamma": gamma, "eta": eta,
            "geometry": dict(latitude_deg=latitude_deg, longitude_deg=longitude_deg,
                             altitude_m=600, tilt_deg=tilt_deg, azimuth_deg=azimuth_deg)}


def sensor_daily_pi(site: dict, name: str, *, min_poa_wm2: float = 200.0) -> pd.Series:
    """Daily sensor-based PI of one inverter: Σ P / Σ P_exp(G_sensor) over G ≥ 200 W/m²
    (IEC 61724-1, the ratio of sums)."""
    g = site["poa_sensor"]
    p_exp = site["p_dc_kwp"] * g / 1000 * (1 + site["gamma"] * (site["t_cell"] - 25)) * site["eta"]
    ok = g >= min_poa_wm2
    p = site["p_ac"][name]
    day = p.index.tz_localize(None).normalize()
    num = p.where(ok, 0.0).groupby(day).sum()
    den = p_exp.where(ok, 0.0).groupby(day).sum()
    return (num / den.where(den > 0)).rename("pi")
