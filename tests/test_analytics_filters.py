"""Interval filters (analytics.filters) and availability (analytics.availability).

Rules and defaults are common practice (no single published source); solar elevation is checked against
pvlib's SPA and the NOAA/astronomical fact that the sun is up at local noon and down at
midnight at mid latitudes (common practice). Small hand-made cases in each test.
"""

import numpy as np
import pandas as pd
import pvlib
import pytest

from analytics import availability as av
from analytics import filters as f


def test_defaults_documented_values():
    # common-practice defaults
    d = f.DEFAULT_FILTERS
    assert (d["poa_min_wm2"], d["poa_max_wm2"], d["night_poa_wm2"]) == (200.0, 1200.0, 5.0)
    assert (d["clip_fraction"], d["outage_fraction"], d["min_coverage"]) == (0.98, 0.01, 0.8)
    assert (d["stuck_samples"], d["stuck_t_samples"], d["stuck_t_tol_c"]) == (4.0, 8.0, 0.05)


def test_resolve_filters_overrides_and_errors():
    assert f.resolve_filters({"clip_fraction": 0.95})["clip_fraction"] == 0.95
    assert f.resolve_filters(None) == f.DEFAULT_FILTERS
    with pytest.raises(ValueError, match=r"filters\.poa_minimum: unknown filter setting"):
        f.resolve_filters({"poa_minimum": 100})
    with pytest.raises(ValueError, match=r"filters\.poa_min_wm2: expected a number"):
        f.resolve_filters({"poa_min_wm2": "high"})


def test_solar_elevation_matches_pvlib_and_day_night():
    idx = pd.date_range("2024-06-21 00:00", periods=4, freq="6h", tz="UTC")
    el = f.solar_elevation_deg(idx, 40.0, 0.0, 0.0)
    # pvlib NREL SPA (Reda & Andreas 2004) as the oracle: ephemeris within 0.02°
    ref = pvlib.solarposition.get_solarposition(idx, 40.0, 0.0, altitude=0.0)["elevation"]
    np.testing.assert_allclose(el.to_numpy(), ref.to_numpy(), atol=0.02)
    spa = f.solar_elevation_deg(idx, 40.0, 0.0, 0.0, method="nrel_numpy")
    np.testing.assert_allclose(spa.to_numpy(), ref.to_numpy(), atol=1e-6)
    # common practice: at 40° N, lon 0, June solstice: sun ~73.4° up at 12 UTC (90 - 40 + 23.4)
    assert el.iloc[2] == pytest.approx(73.4, abs=0.3) and el.iloc[0] < 0
    # midpoints: a 1-h interval starting 11:30 is evaluated at 12:00
    mid = f.solar_elevation_deg(pd.DatetimeIndex(["2024-06-21 11:30"], tz="UTC"), 40.0, 0.0, 0.0, 1.0)
    assert mid.iloc[0] == pytest.approx(el.iloc[2], abs=1e-6)
    with pytest.raises(ValueError, match="tz-aware"):
        f.solar_elevation_deg(pd.DatetimeIndex(["2024-06-21"]), 40.0, 0.0)


def test_night_missing_range():
    assert f.night_mask([-1.0, 5.0, 5.0], [300.0, 4.9, 5.0]).tolist() == [True, True, False]
    assert f.missing_mask([1.0, np.nan, 2.0], [1.0, 1.0, np.nan]).tolist() == [False, True, True]
    assert f.out_of_range_mask([-11.0, np.nan, 1501.0, 1500.0], -10, 1500).tolist() == [
        True, False, True, False]
    s = pd.Series([0.0, 400.0], index=["x", "y"])
    out = f.night_mask(pd.Series([10.0, 10.0], index=["x", "y"]), s)
    assert isinstance(out, pd.Series) and out.tolist() == [True, False]
    assert f.night_mask(-3.0, 100.0) is True  # scalar in, bool out


def test_clipping_and_stuck():
    # common practice: P_ac >= 0.98 P_ac,max is clipped
    assert f.clipping_mask([97.9, 98.0, 100.0, np.nan], 100.0).tolist() == [False, True, True, False]
    # 4 samples within tolerance -> stuck; 3 are not; NaN breaks a run
    assert f.stuck_mask([1, 2, 2, 2, 3], 4, 0.5).tolist() == [False] * 5
    assert f.stuck_mask([1, 2, 2, 2, 2, 3], 4, 0.5).tolist() == [False, True, True, True, True, False]
    assert f.stuck_mask([2, 2, np.nan, 2, 2], 4, 0.5).tolist() == [False] * 5
    assert f.stuck_mask([], 4, 0.5).tolist() == []
    # a run does not continue across a break (samples of two days joined after cutting the night)
    brk = [False, False, True, False, False]
    assert f.stuck_mask([2, 2, 2, 2, 2], 4, 0.5).tolist() == [True] * 5
    assert f.stuck_mask([2, 2, 2, 2, 2], 4, 0.5, run_breaks=brk).tolist() == [False] * 5


def test_classify_order_first_reason_wins():
    # one interval per reason, hand-made; P_ac,max = 100 kW
    g = np.array([0.0, 600.0, 600.0, 1600.0, 600.0, 600.0, 150.0, 1250.0, 600.0])
    t = np.array([20.0, np.nan, 40.0, 40.0, 40.0, 40.0, 30.0, 50.0, 41.0])
    p = np.array([0.0, 50.0, 0.0, 50.0, 99.0, 200.0, 10.0, 90.0, 55.0])
    elev = np.full(9, 30.0)
    codes = f.classify_intervals(g, t, p, 100.0, elev)
    names = [f.REASONS[c] for c in codes]
    assert names == ["night", "missing", "outage", "out_of_range", "clipped", "out_of_range",
                     "low_irradiance", "high_irradiance", "valid"]
    # sun below horizon beats everything; missing G with sun up is "missing"
    c2 = f.classify_intervals([np.nan, np.nan], [np.nan, 40.0], [np.nan, 5.0], 100.0, [-5.0, 10.0])
    assert [f.REASONS[c] for c in c2] == ["night", "missing"]


def test_classify_stuck_sensor_and_overrides():
    # a POA reading frozen at 640 W/m² for 5 samples while power varies -> stuck (common practice)
    g = np.array([500.0, 640.0, 640.0, 640.0, 640.0, 640.0, 700.0])
    p = np.array([40.0, 50.0, 48.0, 52.0, 47.0, 51.0, 55.0])
    codes = f.classify_intervals(g, 40.0 + np.arange(7.0), p, 100.0)
    assert [f.REASONS[c] for c in codes] == ["valid"] + ["stuck"] * 5 + ["valid"]
    # site override: poa_min_wm2 = 100 makes a 150 W/m² interval valid
    assert f.classify_intervals([150.0], [30.0], [10.0], 100.0, filters={"poa_min_wm2": 100})[0] == 0
    s = f.classify_intervals(pd.Series([150.0], index=["k"]), 30.0, 10.0, 100.0)
    assert isinstance(s, pd.Series) and s.index.tolist() == ["k"]


def test_reason_counts_coverage_day_valid():
    assert f.reason_counts([0, 0, 5, 1])["clipped"] == 1
    # coverage = valid insolation / daylight insolation: (900) / (100 + 900) = 0.9
    assert f.coverage_fraction([100.0, 900.0, 0.0], [False, True, True], [True, True, False]) == 0.9
    assert np.isnan(f.coverage_fraction([0.0], [True], [True]))
    assert f.day_valid(pd.Series([0.81, 0.5])).tolist() == [True, False]


def test_availability_hand_cases():
    # common practice: outage = P_ac <= 1 % of rating while G >= 50 W/m²
    p = np.array([0.0, 0.5, 0.0, 60.0, np.nan])
    g = np.array([30.0, 600.0, 600.0, 600.0, 600.0])
    u = av.unavailable_mask(p, g, 100.0)
    assert u.tolist() == [False, True, True, False, False]
    base = av.daylight_mask(g) & np.isfinite(p)  # 3 daylight intervals with power
    # A_t = 1 - 2/3 (two of three 15-min base intervals unavailable)
    assert av.availability_time(u, base, 0.25) == pytest.approx(1 / 3)
    # E_lost = 2 * 80 kW * 0.25 h = 40 kWh; A_E = 15 / (15 + 40) with E = 60 kW * 0.25 h
    lost = av.lost_energy_kwh(np.full(5, 80.0), 0.25, u & base)
    assert lost == pytest.approx(40.0)
    assert av.availability_energy(15.0, lost) == pytest.approx(15.0 / 55.0)
    assert np.isnan(av.availability_time([False], [False], 0.25))
    assert np.isnan(av.availability_energy(0.0, 0.0))


def test_clipping_zone_from_unlimited_expected_power():
    # issue #13: the clipping zone is judged from the expected power without the AC limit as
    # well, so that the selection does not change as the array degrades. Hand check with
    # P_ac,max = 100 kW and the recommended 0.90: expected 89.9 kW is valid, 90.0 kW is clipped,
    # whatever the measured power (a degraded array measuring 80 kW there stays excluded).
    g = [600.0, 600.0, 600.0]
    p = [80.0, 80.0, 99.0]
    codes = f.classify_intervals(g, 40.0, p, 100.0, p_ac_exp_kw=[89.9, 90.0, 50.0],
                                 filters={"clip_expected_fraction": 0.90})
    assert codes.tolist() == [f.VALID, f.CLIPPED, f.CLIPPED]
    codes = f.classify_intervals(g, 40.0, p, 100.0, p_ac_exp_kw=[89.9, 90.0, 50.0],
                                 filters={"clip_expected_fraction": 0.95})
    assert codes.tolist() == [f.VALID, f.VALID, f.CLIPPED]
    # off by default (10 x the rating is never expected): only the measured power clips
    codes = f.classify_intervals(g, 40.0, p, 100.0, p_ac_exp_kw=[89.9, 90.0, 50.0])
    assert codes.tolist() == [f.VALID, f.VALID, f.CLIPPED]
