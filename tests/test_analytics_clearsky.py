"""Clear-sky index (pvlib Ineichen + transposition, Reno & Hansen 2016 clear detection) and the
drifting-irradiance-sensor case of issue #7 (interval data from tests/degradation_synth.py)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pvlib
import pytest
from numpy.testing import assert_allclose

from analytics.clearsky import (
    clearsky_daily_pi,
    clearsky_poa,
    densify_clear_days,
    detect_clear_periods,
)
from analytics.degradation import (
    DRIFT_WARNING,
    compare_methods,
    degradation_yoy,
    peer_relative_pi,
    sensor_clearsky_drift,
)
from tests.degradation_synth import interval_site, sensor_daily_pi

pytestmark = pytest.mark.filterwarnings("ignore::UserWarning")

GEOM = dict(latitude_deg=39.74, longitude_deg=-105.18, altitude_m=1829.0)


def test_horizontal_plane_equals_clearsky_ghi():
    # transposition identity (pvlib get_total_irradiance): on a horizontal plane POA = GHI
    # (sky diffuse = DHI, no ground-reflected part) for the isotropic and Hay-Davies models
    t = pd.date_range("2021-06-21 14:00", periods=8, freq="1h", tz="UTC")
    for model in ("isotropic", "haydavies"):
        cs = clearsky_poa(t, tilt_deg=0.0, azimuth_deg=180.0, transposition=model, **GEOM)
        assert_allclose(cs["poa_clearsky_wm2"], cs["ghi_clearsky_wm2"], rtol=1e-6, atol=1e-6)


def test_clearsky_matches_pvlib_at_interval_midpoints():
    # 15-min interval starts: the model is evaluated at start + 7.5 min (pvlib Location docs)
    t = pd.date_range("2021-03-20 16:00", periods=4, freq="15min", tz="UTC")
    cs = clearsky_poa(t, tilt_deg=30, azimuth_deg=180, **GEOM)
    loc = pvlib.location.Location(GEOM["latitude_deg"], GEOM["longitude_deg"],
                                  altitude=GEOM["altitude_m"])
    ref = loc.get_clearsky(t + pd.Timedelta(minutes=7.5), model="ineichen")
    assert_allclose(cs["ghi_clearsky_wm2"], ref["ghi"], rtol=1e-9)
    assert (cs["poa_clearsky_wm2"] > cs["ghi_clearsky_wm2"]).all()  # tilted south in March
    with pytest.raises(ValueError, match="tz-aware"):
        clearsky_poa(t.tz_localize(None), tilt_deg=30, azimuth_deg=180, **GEOM)


def test_clearsky_daily_pi_clipping_and_clear_fraction():
    t = pd.date_range("2021-06-01 08:00", periods=8, freq="1h", tz="UTC")
    g = pd.Series(800.0, t)
    p = pd.Series(76.8, t)  # = 100 kWp * 0.8 * 0.96 -> PI 1
    p.iloc[0] = 100.0       # clipped: >= 0.98 * p_ac_max_kw = 98 kW
    clear = pd.Series(True, t)
    out = clearsky_daily_pi(p, g, clear, p_dc_kwp=100, gamma_pmp_per_c=-0.004, p_ac_max_kw=100)
    assert_allclose(out["pi_clearsky"].iloc[0], 1.0)
    assert out["n_clear"].iloc[0] == 7
    clear.iloc[:5] = False  # 3 of 8 equal intervals clear -> fraction 0.375 < 0.5 -> NaN
    out = clearsky_daily_pi(p, g, clear, p_dc_kwp=100, gamma_pmp_per_c=-0.004, p_ac_max_kw=100)
    assert np.isnan(out["pi_clearsky"].iloc[0])
    # temperature correction: T_cell = 50 °C, γ = -0.004 -> expected ×0.9 (PVWatts, Dobos 2014)
    out = clearsky_daily_pi(pd.Series(76.8 * 0.9, t), g, pd.Series(True, t), p_dc_kwp=100,
                            gamma_pmp_per_c=-0.004,
                            t_cell_c=pd.Series(50.0, t))
    assert_allclose(out["pi_clearsky"].iloc[0], 1.0)


def test_densify_needs_min_days():
    d = pd.date_range("2021-01-01", periods=40)
    s = pd.Series(np.nan, d)
    s.iloc[[0, 3, 30]] = [1.0, 0.98, 0.9]
    out = densify_clear_days(s, window_days=15, min_days=2)
    assert_allclose(out.loc["2021-01-02"], 0.99)  # median of 1.0 and 0.98
    assert "2021-01-31" not in out.index.strftime("%Y-%m-%d")


@pytest.fixture(scope="module")
def drifting_site():
    return interval_site(years=3, sensor_drift_pct_per_yr=1.0, seed=1)


def test_drifting_sensor_biases_sensor_rate_not_clearsky_or_peers(drifting_site):
    # issue #7: the shared POA sensor drifts +1 %/yr. Sensor-based rates are biased by ≈ -1
    # %/yr (1 - 1/1.01 ≈ 0.99 %/yr); clear-sky rates (clear periods from the fleet's power
    # shape, Reno & Hansen 2016 / Jordan & Hansen 2023 thresholds) recover the injected rate;
    # peer-relative rates recover rate minus fleet median; the disagreement warning fires.
    site = drifting_site
    rates = dict(zip(site["p_ac"].columns, (-0.3, -0.5, -0.5, -0.7, -0.6), strict=True))
    fleet = 1000 * site["p_ac"].sum(axis=1) / (site["p_dc_kwp"] * site["p_ac"].shape[1])
    clear = detect_clear_periods(fleet, site["poa_cs"])
    assert 0.1 < clear.mean() < 0.5  # about half the days are clear, daytime only
    sensor_pi = pd.DataFrame({n: sensor_daily_pi(site, n) for n in site["p_ac"]})
    ratio = peer_relative_pi(sensor_pi)
    fleet_rate = np.median(list(rates.values()))
    for name, truth in rates.items():
        d = clearsky_daily_pi(site["p_ac"][name], site["poa_cs"], clear, p_dc_kwp=site["p_dc_kwp"],
                              gamma_pmp_per_c=site["gamma"], eta_inv_nom=site["eta"],
                              t_cell_c=site["t_cell"])
        cs = degradation_yoy(densify_clear_days(d["pi_clearsky"]), method="modelled_sky_year_pairs")
        sb = degradation_yoy(sensor_pi[name].dropna())
        peer = degradation_yoy(ratio[name].dropna(), method="peer_ratio_year_pairs")
        assert abs(cs.rate_pct_per_yr - truth) < 0.1
        assert abs(sb.rate_pct_per_yr - (truth - 0.99)) < 0.1
        assert abs(peer.rate_pct_per_yr - (truth - fleet_rate)) < 0.15
        # paired drift check: ratio sensor/clear-sky index falls at ≈ 1 - 1/1.01 = 0.99 %/yr
        drift = sensor_clearsky_drift(sensor_pi[name], d["pi_clearsky"])
        assert abs(drift.rate_pct_per_yr + 0.99) < 0.1 and drift.ci_high < 0
        verdict = compare_methods({"sensor_year_pairs": sb, "modelled_sky_year_pairs": cs, "peer_ratio_year_pairs": peer,
                                   "sensor_drift_check": drift})
        assert verdict["agree"] is False
        assert DRIFT_WARNING in verdict["warnings"]


def test_stable_sensor_methods_agree():
    site = interval_site(years=2.2, sensor_drift_pct_per_yr=0.0, seed=2,
                         rates_pct_per_yr=(-0.5, -0.5, -0.5))
    fleet = 1000 * site["p_ac"].sum(axis=1) / (site["p_dc_kwp"] * 3)
    clear = detect_clear_periods(fleet, site["poa_cs"])
    d = clearsky_daily_pi(site["p_ac"]["INV01"], site["poa_cs"], clear, p_dc_kwp=100,
                          gamma_pmp_per_c=site["gamma"], eta_inv_nom=site["eta"],
                          t_cell_c=site["t_cell"])
    cs = degradation_yoy(densify_clear_days(d["pi_clearsky"]), method="modelled_sky_year_pairs")
    sb = degradation_yoy(sensor_daily_pi(site, "INV01").dropna())
    drift = sensor_clearsky_drift(sensor_daily_pi(site, "INV01"), d["pi_clearsky"])
    assert drift.ci_low < 0 < drift.ci_high  # a stable sensor: no drift shown
    verdict = compare_methods({"sensor_year_pairs": sb, "modelled_sky_year_pairs": cs, "sensor_drift_check": drift})
    assert verdict["agree"] is True and verdict["warnings"] == []


def test_clear_periods_from_sensors_symmetric_and_excludes_a_faulty_sensor():
    # Two POA sensors on clear days (pvlib Ineichen clear sky, transposed: our clearsky_poa,
    # checked against pvlib above). Reno & Hansen 2016 calls clear-sky data clear. A third
    # sensor stuck at 300 W/m² for one day disagrees with the others by far more than 5 % that
    # day: it is judged faulty that day and does not veto the others' clear periods. The
    # result does not depend on the order of the sensors.
    from analytics.clearsky import clear_periods_from_sensors, clearsky_poa
    idx = pd.date_range("2021-06-01", periods=96 * 40, freq="15min", tz="UTC")
    cs = clearsky_poa(idx, tilt_deg=30, azimuth_deg=180, **GEOM)["poa_clearsky_wm2"]
    stuck = cs.copy()
    day = idx.floor("D") == pd.Timestamp("2021-06-20", tz="UTC")
    stuck[day & (cs > 0)] = 300.0
    readings = {"POA1": cs * 1.01, "POA2": cs * 0.99, "POA3": stuck}
    refs = {k: cs for k in readings}
    clear, info = clear_periods_from_sensors(readings, refs)
    only_two, _ = clear_periods_from_sensors({k: readings[k] for k in ("POA1", "POA2")}, refs)
    assert info["POA3"]["days_faulty"] >= 1 and info["POA1"]["days_faulty"] == 0
    on_day = clear[day & (cs >= 200)]
    assert on_day.mean() > 0.5 and on_day.equals(only_two[day & (cs >= 200)])
    rev, _ = clear_periods_from_sensors(dict(reversed(list(readings.items()))), refs)
    assert rev.equals(clear)


def test_clearsky_daily_pi_mixed_intervals_hand_sum():
    # issue #11: a day logged at 15 min until 11:00 and at 5 min after. Clear-sky POA 800 W/m²,
    # P0 = 100 kWp, γ = 0, η = 0.96: expected power 76.8 kW. Measured 0.9 × 76.8 kW over the
    # four 15-min rows (1 h), 76.8 kW over the six 5-min rows (0.5 h). Hand sum:
    # PI = (0.9·76.8·1 + 76.8·0.5) / (76.8·1.5) = 1.4 / 1.5 = 0.93333; with the median 5-min
    # interval for every row it would be (0.9·4 + 6) / 10 = 0.96.
    t = pd.DatetimeIndex(list(pd.date_range("2021-06-01 10:00", periods=4, freq="15min", tz="UTC"))
                         + list(pd.date_range("2021-06-01 11:00", periods=6, freq="5min", tz="UTC")))
    tau_h = np.r_[np.full(4, 0.25), np.full(6, 5 / 60)]
    p = pd.Series(np.r_[np.full(4, 0.9 * 76.8), np.full(6, 76.8)], t)
    out = clearsky_daily_pi(p, pd.Series(800.0, t), pd.Series(True, t), p_dc_kwp=100,
                            gamma_pmp_per_c=0.0, eta_inv_nom=0.96, interval_h=tau_h)
    assert_allclose(out["pi_clearsky"].iloc[0], 1.4 / 1.5, rtol=1e-12)
    median = clearsky_daily_pi(p, pd.Series(800.0, t), pd.Series(True, t), p_dc_kwp=100,
                               gamma_pmp_per_c=0.0, eta_inv_nom=0.96)
    assert_allclose(median["pi_clearsky"].iloc[0], 0.96, rtol=1e-12)  # the old reading


def test_detect_clear_periods_on_each_rows_own_interval():
    # issue #11: one month of clear-sky GHI (pvlib Ineichen) logged at 15 min for 15 days and
    # at 5 min after. Tested on each interval's own grid, both halves are clear (Reno & Hansen
    # 2016 call clear-sky data clear); with one median grid for the month, the 15-min half
    # becomes a comb of gaps and nothing there is clear. Rows logged hourly lie outside the
    # 1-30-min range of the Jordan & Hansen (2023) thresholds and are never called clear.
    loc = pvlib.location.Location(GEOM["latitude_deg"], GEOM["longitude_deg"], "UTC",
                                  GEOM["altitude_m"])
    t15 = pd.date_range("2021-06-01", "2021-06-15 23:45", freq="15min", tz="UTC")
    t5 = pd.date_range("2021-06-16", "2021-06-30 23:55", freq="5min", tz="UTC")
    t = t15.append(t5)
    iv = np.r_[np.full(t15.size, 900.0), np.full(t5.size, 300.0)]
    ghi = pd.Series(loc.get_clearsky(t, model="ineichen")["ghi"].to_numpy(), t)
    day = (ghi >= 200).to_numpy()
    own = detect_clear_periods(ghi, ghi, interval_s=iv).to_numpy()
    first = day & (iv == 900)
    second = day & (iv == 300)
    assert own[first].mean() > 0.8 and own[second].mean() > 0.8
    old = detect_clear_periods(ghi, ghi).to_numpy()
    assert old[first].mean() < 0.2  # the median-grid reading loses the 15-min half
    hourly = detect_clear_periods(ghi, ghi, interval_s=np.full(t.size, 3600.0))
    assert not hourly.any()
