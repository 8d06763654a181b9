"""Sensor QA: range, flatline, dropout, night irradiance, drift."""

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_array_equal
from scipy import stats

from analytics.clock import clear_day_mask
from analytics.sensor_qa import (
    clear_period_ratio,
    drift_flags,
    drift_rate_pct_per_yr,
    dropout_flags,
    flatline_flags,
    flatline_mask,
    night_irradiance_flags,
    range_flags,
    range_mask,
)
from tests.flags_synth import STD_OFFSET_S, site_weather


def _ts(s):
    return pd.Timestamp(s, tz="UTC").value // 10**9


@pytest.fixture(scope="module")
def month():
    return site_weather(start="2024-06-01", days=30, seed=11)


def test_range_limits_methods_table():
    # common practice: G −10…1500 W/m²; inclusive limits are in range.
    assert_array_equal(range_mask(np.array([-10.0, -10.5, 1500, 1500.1, np.nan]), -10, 1500),
                       [False, True, False, True, False])


def test_range_event(month):
    g = month["poa_wm2"].copy()
    g["2024-06-10 18:00":"2024-06-10 19:45"] = 1800.0  # 8 samples of a wiring fault
    fl = range_flags(g, device_id="poa1", quantity="poa_wm2")
    assert len(fl) == 1
    assert fl.iloc[0]["start_s"] == _ts("2024-06-10 18:00")
    assert fl.iloc[0]["end_s"] == _ts("2024-06-10 20:00")
    assert fl.iloc[0]["details"]["n_samples"] == 8 and fl.iloc[0]["severity"] == "warning"
    assert range_flags(month["poa_wm2"], device_id="poa1", quantity="poa_wm2").empty


def test_flatline_mask_rule():
    # common practice: >= 4 samples with |Δx| < tol; night samples break a run.
    x = np.array([1.0, 5, 5, 5, 5, 5, 2, 3, 3, 3, 4])
    day = np.ones(11, bool)
    assert_array_equal(flatline_mask(x, day, abs_tol=0.01),
                       [0, 1, 1, 1, 1, 1, 0, 0, 0, 0, 0])
    day[3] = False
    assert not flatline_mask(x, day, abs_tol=0.01).any()  # runs 1-2 and 4-5: too short


def test_flatline_stuck_sensor_multi_day(month):
    g = month["poa_wm2"].copy()
    stuck = slice("2024-06-12 16:00", "2024-06-14 02:00")
    g[stuck] = 412.0  # logger holds the last value for ~1.5 days
    day = month["elev"] > 10
    fl = flatline_flags(g, day, device_id="poa1", quantity="poa_wm2")
    assert len(fl) == 1
    f = fl.iloc[0]
    # Tolerance: starts and ends within the daytime part of the stuck window (±1 day).
    assert _ts("2024-06-12 16:00") <= f["start_s"] <= _ts("2024-06-12 17:00")
    assert _ts("2024-06-13 18:00") <= f["end_s"] <= _ts("2024-06-14 02:00")
    assert f["severity"] == "alarm" and f["details"]["stuck_value"] == 412.0
    # clean control: cloudy and clear days never look stuck while the sun is up
    assert flatline_flags(month["poa_wm2"], day, device_id="poa1", quantity="poa_wm2").empty


def test_temperature_flatline_uses_005c():
    idx = pd.date_range("2024-06-01 15:00", periods=12, freq="15min", tz="UTC")
    t = pd.Series([30, 31, 32, 33.0, 33.01, 33.02, 33.0, 33.03, 33.01, 33.02, 33.0, 35],
                  index=idx)
    # documented (common practice): >= 8 samples within 0.05 °C are stuck (33.0 .. 33.0, 8)
    assert flatline_mask(t.to_numpy(), np.ones(12, bool), min_run=8, abs_tol=0.05).sum() == 8
    # ... but 2 h flat is a calm spell, not a sensor to fix: no flag (issue #14)
    assert flatline_flags(t, np.ones(12, bool), device_id="tm1", quantity="t_module_c").empty


@pytest.mark.parametrize("n,found", [(23, False), (24, True), (25, True)])
def test_temperature_flatline_flag_from_6_hours(n, found):
    # documented threshold: a temperature flag needs 6 h of stuck samples (24 of 15 min);
    # just below (23 = 5 h 45 min), at (24) and just above (25)
    idx = pd.date_range("2024-06-01 06:00", periods=n + 2, freq="15min", tz="UTC")
    t = pd.Series([20.0] + [25.0] * n + [30.0], index=idx)
    fl = flatline_flags(t, np.ones(n + 2, bool), device_id="tm1", quantity="t_module_c",
                        tau_s=900)
    assert (len(fl) == 1) == found
    if found:
        assert fl.iloc[0]["severity"] == "warning" and fl.iloc[0]["details"]["n_samples"] == n


@pytest.mark.parametrize("n,severity", [(3, "info"), (4, "warning"), (5, "warning")])
def test_range_isolated_values_are_information(month, n, severity):
    # documented: fewer than 4 out-of-range samples are a data glitch (info)
    g = month["poa_wm2"].copy()
    g.iloc[1000:1000 + n] = 9999.0
    fl = range_flags(g, device_id="poa1", quantity="poa_wm2")
    assert len(fl) == 1 and fl.iloc[0]["severity"] == severity


def test_dropout_merges_nights(month):
    day = month["elev"] > 0
    g = month["poa_wm2"].copy()
    g = g.drop(g["2024-06-05 15:00":"2024-06-08 03:00"].index)  # rows absent
    g["2024-06-20 17:00":"2024-06-20 17:30"] = np.nan  # 45 min: below the 1-h minimum
    fl = dropout_flags(g, day, device_id="poa1", quantity="poa_wm2")
    assert len(fl) == 1
    f = fl.iloc[0]
    assert f["start_s"] == _ts("2024-06-05 15:00")
    # the device reports at night, so the silence is exact: the absent rows end with the
    # one labelled 03:00 (string slices include their end), whose interval ends at 03:15
    assert f["end_s"] == _ts("2024-06-08 03:15")
    assert f["severity"] == "warning"
    # a device that sends nothing at night: its daytime runs merge across the nights
    sleepy = g[month["elev"].reindex(g.index) > 0]
    fl = dropout_flags(sleepy, day, device_id="inv1", quantity="p_ac_kw")
    assert len(fl) == 1
    assert fl.iloc[0]["start_s"] == _ts("2024-06-05 15:00")
    assert _ts("2024-06-08 01:00") <= fl.iloc[0]["end_s"] <= _ts("2024-06-08 03:15")


def test_night_irradiance(month):
    g = month["poa_wm2"].copy()
    night = month["elev"] < -3
    nights = night & (month.index >= "2024-06-15") & (month.index < "2024-06-17")
    g[nights] = 20.0  # a lamp on the sensor for two nights
    fl = night_irradiance_flags(g, month["elev"], device_id="poa1")
    assert len(fl) == 1  # two consecutive nights merge (18-h gap rule)
    assert fl.iloc[0]["details"]["max_value"] == 20.0
    assert night_irradiance_flags(month["poa_wm2"], month["elev"], device_id="poa1").empty


def test_drift_rate_matches_theilslopes():
    # Oracle: scipy.stats.theilslopes(y, x). A ratio 1 − 0.02 t/yr -> −2 %/yr at level ≈1.
    days = pd.date_range("2022-01-01", periods=730, freq="D")
    t = np.arange(730.0)
    rng = np.random.default_rng(5)
    y = pd.Series(1.0 - 0.02 * t / 365.25 + 0.01 * rng.standard_normal(730), index=days)
    r = drift_rate_pct_per_yr(y)
    expect = stats.theilslopes(y.to_numpy(), t).slope * 36525 / np.median(y)
    assert r["drift_pct_per_yr"] == pytest.approx(expect, rel=1e-12)
    assert r["drift_pct_per_yr"] == pytest.approx(-2.0, abs=0.2)


def test_clearsky_drift_found_and_clean_control():
    # 2 years of weather; the POA sensor loses 1.5 %/yr (e.g. a darkening dome).
    w = site_weather(start="2023-01-01", days=730, seed=13)
    t_yr = (w.index - w.index[0]).total_seconds() / (365.25 * 86400)
    clear = clear_day_mask(w["poa_wm2"], w["poa_cs"], std_offset_s=STD_OFFSET_S,
                           ratio_range=(0.7, 1.3))
    for rate, expect_flag in ((-0.015, True), (0.0, False)):
        g = w["poa_wm2"] * (1 + rate * t_yr)
        q = clear_period_ratio(g, w["poa_cs"], w["aoi"], clear, std_offset_s=STD_OFFSET_S)
        fl = drift_flags(q, device_id="poa1", method="clearsky", std_offset_s=STD_OFFSET_S)
        assert len(fl) == int(expect_flag)
        if expect_flag:
            # Tolerance: ±0.2 %/yr of the injected drift.
            assert fl.iloc[0]["details"]["drift_pct_per_yr"] == pytest.approx(-1.5, abs=0.2)
    # less than a year of data is never read as drift (seasons)
    q = clear_period_ratio(w["poa_wm2"][: 96 * 200], w["poa_cs"], w["aoi"][: 96 * 200], clear,
                           std_offset_s=STD_OFFSET_S)
    assert drift_flags(q * np.linspace(1, 0.9, len(q)), device_id="poa1",
                       method="clearsky").empty


def test_fleet_power_rule_only_rising():
    days = pd.date_range("2022-01-01", periods=800, freq="D")
    falling = pd.Series(np.linspace(1.0, 0.96, 800), index=days)  # real degradation
    assert drift_flags(falling, device_id="poa1", method="fleet_power",
                       sign_rule="rising").empty
    rising = pd.Series(np.linspace(1.0, 1.05, 800), index=days)
    fl = drift_flags(rising, device_id="poa1", method="fleet_power", sign_rule="rising")
    assert len(fl) == 1 and fl.iloc[0]["details"]["sensor_drift_pct_per_yr"] < -2


def test_dropout_counts_each_missing_intervals_own_length():
    # issue #11: a grid of 15-min rows then 5-min rows, all daytime. Four missing 15-min rows
    # are 1 h missing (hand sum 4 × 0.25 h) and reach the 1-h minimum; four missing 5-min rows
    # are 20 min and do not. One median interval (5 min) would count the first gap as 20 min.
    t15 = pd.date_range("2024-06-01 08:00", periods=16, freq="15min", tz="UTC")
    t5 = pd.date_range("2024-06-01 12:00", periods=36, freq="5min", tz="UTC")
    grid = t15.append(t5)
    tau = np.r_[np.full(16, 900.0), np.full(36, 300.0)]
    x = pd.Series(500.0, grid)
    x.iloc[4:8] = np.nan     # 09:00-10:00, 15-min rows
    x.iloc[30:34] = np.nan   # 13:10-13:30, 5-min rows
    fl = dropout_flags(x, pd.Series(True, grid), device_id="poa1", quantity="poa_wm2",
                       tau_s=tau)
    assert len(fl) == 1
    f = fl.iloc[0]
    assert f["details"]["missing_daytime_hours"] == pytest.approx(1.0)
    assert (f["start_s"], f["end_s"]) == (_ts("2024-06-01 09:00"), _ts("2024-06-01 10:00"))
    median = dropout_flags(x, pd.Series(True, grid), device_id="poa1", quantity="poa_wm2",
                           tau_s=300)
    assert median.empty  # the old reading: 4 × 5 min < 1 h


def _grid_gap(month, start, end, *, night_rows=True):
    """The month's readings with rows absent over [start, end); ``night_rows=False``: a
    device that sends nothing at night (a sleeping inverter)."""
    g = month["poa_wm2"].copy()
    if not night_rows:
        g = g[month["elev"] > 0]
    return g.drop(g[(g.index >= start) & (g.index < end)].index)


def test_night_silence_of_a_device_that_reports_at_night_is_a_gap(month):
    # a logger silent 21:30-04:45 (7.25 h, all of it night at 45° N in June): the device
    # reports at night, so the absent rows are a gap; hand count: 29 rows of 15 min
    day = month["elev"] > 0
    a, b = pd.Timestamp("2024-06-10 21:30", tz="UTC"), pd.Timestamp("2024-06-11 04:45", tz="UTC")
    fl = dropout_flags(_grid_gap(month, a, b), day, device_id="poa1", quantity="poa_wm2",
                       min_silence_h=6.0)
    assert len(fl) == 1
    f = fl.iloc[0]
    assert (f["start_s"], f["end_s"]) == (_ts("2024-06-10 21:30"), _ts("2024-06-11 04:45"))
    d = f["details"]
    assert d["missing_hours"] == pytest.approx(7.25) and d["silence_hours"] == pytest.approx(7.25)
    assert d["night_only"] == (d["missing_daytime_hours"] == 0)
    assert f["severity"] == "info"


def test_night_silence_of_a_sleeping_device_is_not_a_gap(month):
    # issue #14: real inverters send nothing at night; the same silence on such a device
    # is its habit, not a gap (about 1,000 false night "dropouts" on a real plant)
    day = month["elev"] > 0
    a, b = pd.Timestamp("2024-06-10 21:30", tz="UTC"), pd.Timestamp("2024-06-11 04:45", tz="UTC")
    fl = dropout_flags(_grid_gap(month, a, b, night_rows=False), day, device_id="inv1",
                       quantity="p_ac_kw", min_silence_h=6.0)
    assert fl.empty


def test_two_daytime_gaps_with_a_reported_night_between_are_two(month):
    # the device reported through the night between the gaps: two silences, not one
    day = month["elev"] > 0
    g = _grid_gap(month, pd.Timestamp("2024-06-12 12:00", tz="UTC"),
                  pd.Timestamp("2024-06-12 19:00", tz="UTC"))
    g = g.drop(g[(g.index >= pd.Timestamp("2024-06-13 06:00", tz="UTC"))
                 & (g.index < pd.Timestamp("2024-06-13 13:00", tz="UTC"))].index)
    fl = dropout_flags(g, day, device_id="poa1", quantity="poa_wm2", min_silence_h=6.0)
    assert sorted(fl["start_s"]) == [_ts("2024-06-12 12:00"), _ts("2024-06-13 06:00")]


@pytest.mark.parametrize("n_rows,flagged", [(23, False), (24, True), (25, True)])
def test_gap_flag_from_a_6_hour_silence(month, n_rows, flagged):
    # documented: a gap is a flag from a 6-h silence (24 rows of 15 min), shorter gaps stay
    # in the daily coverage; midday rows, so every missing hour is daytime
    a = pd.Timestamp("2024-06-14 07:00", tz="UTC")
    g = _grid_gap(month, a, a + pd.Timedelta(minutes=15 * n_rows))
    fl = dropout_flags(g, month["elev"] > 0, device_id="poa1", quantity="poa_wm2",
                       min_silence_h=6.0)
    assert (len(fl) == 1) == flagged
