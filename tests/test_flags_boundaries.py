"""Threshold-boundary tests (issue #14), part 1: sensor plausibility and sensor faults.

Every threshold the README *Flags* section documents that had no just-below / at /
just-above test elsewhere is tested here against the documented number (never against the
code's own constant), on small hand-made inputs, through heliaudit's real functions. Which
side "at" falls on follows the documented ≥ / > / ≤ / <. The inventory of all thresholds,
with the test of each, is docs/flags.md (tests/test_flags_boundaries_inventory.py checks it).

Hand-made geometry: one UTC day of 15-min samples (standard offset 0), solar elevation
60° · sin(π (h − 6) / 12) (negative at night), clear-sky POA 1000 W/m² · sin(elevation).
"""

import numpy as np
import pandas as pd
import pytest

from analytics.sensor_qa import (
    ambient_offset_flags,
    clear_sky_level_flags,
    drift_flags,
    dropout_flags,
    flatline_flags,
    high_vs_power_days,
    irradiance_validity,
    module_temperature_validity,
    night_irradiance_flags,
    sibling_jump_flags,
)

IDX = pd.date_range("2024-06-03", periods=96, freq="15min", tz="UTC", name="ts_utc")
HOUR = np.arange(96) / 4 + 0.125
ELEV = 60.0 * np.sin(np.pi * (HOUR - 6) / 12)
CS = 1000.0 * np.clip(np.sin(np.radians(ELEV)), 0, None)


def _irr_days(g, el=ELEV, **kw):
    return irradiance_validity(pd.Series(g, index=IDX), el, CS, std_offset_s=0, **kw)


# ------------------------------------------------------------ irradiance sensor, per day


@pytest.mark.parametrize("elev,invalid", [(-12.01, True), (-12.0, False), (-11.99, False)])
def test_night_reading_elevation_gate_minus_12(elev, invalid):
    # heliaudit's documented choice, README Flags: light at night is >= 2 readings >= 5 W/m²
    # with the sun *below* −12° (nautical dusk, common practice): at −12° exactly the
    # readings are not night evidence
    el = ELEV.copy()
    g = CS.copy()
    pos = [2, 3]  # 00:30-01:00, deep night in the hand-made day
    el[pos] = elev
    g[pos] = 50.0
    days = _irr_days(g, el)
    assert (days["reason"] == "night_reading").any() == invalid


@pytest.mark.parametrize("n_low,invalid", [(19, False), (20, True), (21, True)])
def test_low_vs_power_share_half_of_productive_intervals(n_low, invalid):
    # heliaudit's documented choice, README Flags: low against the array's own power on
    # *at least half* the productive intervals. 40 daytime intervals produce 0.5 kW/kWp
    # (1000 W/m² · 0.5 · 0.25 = 125 W/m² is the limit); n_low of them read 100 W/m²
    p_norm = np.zeros(96)
    day = np.flatnonzero(ELEV >= 15)[:40]
    assert day.size == 40
    p_norm[day] = 0.5
    g = CS.copy()
    g[day] = 500.0
    g[day[:n_low]] = 100.0
    days = _irr_days(g, p_norm=p_norm)
    assert (days["reason"] == "low_vs_power").any() == invalid


@pytest.mark.parametrize("ratio,found", [(0.0299, False), (0.03, True), (0.0301, True)])
def test_jump_vs_sibling_at_3_percent(ratio, found):
    # heliaudit's documented choice, README Flags: two POA sensors whose clear-day ratio
    # steps by >= 3 % and stays (the "at" case was missing: tested 2.9 / 3.1 % before).
    # Sensor a reads 1 + ratio from day 40 on (its own clear-sky ratio steps, b's does not),
    # so the pair ratio a / b steps by exactly `ratio`.
    days = pd.date_range("2024-01-01", periods=80, freq="D")
    a = pd.Series(np.where(np.arange(80) >= 40, 1.0 + ratio, 1.0), index=days)
    b = pd.Series(1.0, index=days)
    fl = sibling_jump_flags({"a": a, "b": b})
    assert (len(fl) == 1) == found
    if found:
        assert fl.iloc[0]["device_id"] == "a"
        assert fl.iloc[0]["details"]["first_day"] == "2024-02-10"  # day 40


@pytest.mark.parametrize("level,found", [(1.2 * (1 - 1e-9), False), (1.2, False),
                                         (1.2 * (1 + 1e-6), True), (0.8 * (1 + 1e-6), False),
                                         (0.8, False), (0.8 * (1 - 1e-6), True)])
def test_off_clear_sky_at_20_percent(level, found):
    # heliaudit's documented choice, README Flags: a 15-clear-day median *more than* 20 %
    # from clear sky; at exactly 1.2 / 0.8 it is not flagged (±20 % inclusive band)
    days = pd.date_range("2024-01-01", periods=60, freq="D")
    r = pd.Series(level, index=days)
    assert (len(clear_sky_level_flags(r, device_id="poa1")) == 1) == found


@pytest.mark.parametrize("n_days,found", [(9, False), (10, True), (11, True)])
def test_off_clear_sky_for_10_clear_days(n_days, found):
    # heliaudit's documented choice, README Flags: off for at least 10 clear days. A block
    # of n days at 1.5 between days at 1.0: the centred 15-day median is off on exactly the
    # block's days (>= 8 of 15 window days in the block, hand count)
    r = np.ones(60)
    r[25:25 + n_days] = 1.5
    s = pd.Series(r, index=pd.date_range("2024-01-01", periods=60, freq="D"))
    fl = clear_sky_level_flags(s, device_id="poa1")
    assert (len(fl) == 1) == found
    if found:
        assert fl.iloc[0]["details"]["n_clear_days"] == n_days


# ------------------------------------------------------------ module / ambient sensors


def _tmod_days(t_mod, poa, t_amb=25.0, **kw):
    return module_temperature_validity(
        pd.Series(t_mod, index=IDX), poa_wm2=np.broadcast_to(poa, (96,)).astype(float),
        t_amb_c=np.full(96, t_amb), std_offset_s=0, **kw)


@pytest.mark.parametrize("span,stuck", [(0.049, True), (0.05, True), (0.051, False)])
def test_module_stuck_span_005c(span, stuck):
    # common practice (|ΔT| < 0.05 °C), README Flags: daytime readings spanning
    # <= 0.05 °C are stuck. Readings alternate 0 and `span` °C (exact binary differences)
    t = np.where(np.arange(96) % 2 == 0, 0.0, span)
    days = module_temperature_validity(pd.Series(t, index=IDX), std_offset_s=0,
                                       day_mask=ELEV >= 15)
    assert (days["reason"] == "stuck").any() == stuck


@pytest.mark.parametrize("poa,judged", [(599.99, False), (600.0, True), (600.01, True)])
def test_colder_than_ambient_full_sun_600(poa, judged):
    # heliaudit's documented choice, README Flags: the module checks use full-sun intervals
    # (POA >= 600 W/m²). A module 10 °C below the air in daylight is cold only when the
    # daylight counts as full sun
    t_mod = 15.0 + 0.01 * np.arange(96)  # moving: not stuck
    days = _tmod_days(t_mod, np.where(ELEV >= 15, poa, 0.0), t_amb=25.0 + 0.01 * 96)
    assert (days["reason"] == "colder_than_ambient").any() == judged


@pytest.mark.parametrize("n_cold,cold", [(19, False), (20, True), (21, True)])
def test_colder_than_ambient_share_half(n_cold, cold):
    # heliaudit's documented choice, README Flags: colder than the air by > 2 °C on *at
    # least half* the full-sun intervals (40 here)
    sun = np.flatnonzero(ELEV >= 15)[:40]
    poa = np.zeros(96)
    poa[sun] = 800.0
    t_mod = 45.0 + 0.01 * np.arange(96)
    t_mod[sun[:n_cold]] = 20.0  # 5 °C below the 25 °C air
    days = _tmod_days(t_mod, poa)
    assert (days["reason"] == "colder_than_ambient").any() == cold


# ------------------------------------------------------------ sensor against its arrays


def _yf(values, n_days=3):
    days = pd.date_range("2024-06-01", periods=n_days, freq="D")
    return days, pd.DataFrame({f"inv{i}": np.full(n_days, v) for i, v in enumerate(values)},
                              index=days)


@pytest.mark.parametrize("yf,judged", [(0.49, False), (0.5, True), (0.51, True)])
def test_high_vs_power_final_yield_gate_half_hour(yf, judged):
    # IEC 61724-1 PR = Y_f / Y_r; heliaudit's documented choice, README Flags: inverters
    # count as producing from Y_f >= 0.5 h. Two inverters at PR 0.2 (H = Y_f / 0.2)
    days, y = _yf([yf, yf])
    h = pd.Series(yf / 0.2, index=days)
    assert high_vs_power_days(h, y).all() == judged


@pytest.mark.parametrize("n_low,high", [(1, False), (2, True), (3, True)])
def test_high_vs_power_two_thirds_of_inverters(n_low, high):
    # heliaudit's documented choice, README Flags: two thirds of the producing inverters at
    # a daily PR below 0.4. Three inverters with Y_f = 2 h under H = 10 kWh/m² (PR 0.2) or
    # 4 h (PR 0.4, not below); 1 of 3 < 2/3 <= 2 of 3
    days, y = _yf([2.0] * n_low + [4.0] * (3 - n_low))
    h = pd.Series(10.0, index=days)
    assert high_vs_power_days(h, y).all() == high


# ------------------------------------------------------------ sensor faults


@pytest.mark.parametrize("value,found", [(4.99, False), (5.0, True), (5.01, True)])
def test_night_irradiance_flag_5_wm2(value, found):
    # common practice (G < 5 W/m² is night; PARAMS sensor.night_wm2): a `sensor_night` flag
    # needs >= 2 readings >= 5 W/m² with the sun below −3°
    g = CS.copy()
    g[[2, 3]] = value
    fl = night_irradiance_flags(pd.Series(g, index=IDX), ELEV, device_id="poa1")
    assert (len(fl) == 1) == found


@pytest.mark.parametrize("elev,found", [(-3.01, True), (-3.0, False), (-2.99, False)])
def test_night_irradiance_flag_sun_below_minus_3(elev, found):
    # common practice (−3° keeps twilight out; PARAMS sensor.night_elevation_deg): the sun
    # must be below −3°, so at −3° exactly a reading of 50 W/m² is twilight, not a flag
    el = ELEV.copy()
    g = CS.copy()
    el[[2, 3]] = elev
    g[[2, 3]] = 50.0
    fl = night_irradiance_flags(pd.Series(g, index=IDX), el, device_id="poa1")
    assert (len(fl) == 1) == found


@pytest.mark.parametrize("n_samples,found", [(1, False), (2, True), (3, True)])
def test_night_irradiance_flag_needs_2_samples(n_samples, found):
    # heliaudit's documented choice (PARAMS; a passing headlight is one sample)
    g = CS.copy()
    g[2:2 + n_samples] = 50.0
    fl = night_irradiance_flags(pd.Series(g, index=IDX), ELEV, device_id="poa1")
    assert (len(fl) == 1) == found


def _drift_series(n_days, rate_pct):
    # noise-free line through 1.0 at its middle day: drift = rate (hand rule, as in
    # tests/test_flag_thresholds.py)
    d = np.arange(n_days) - (n_days - 1) / 2
    return pd.Series(1.0 + rate_pct / 100 / 365.25 * d,
                     index=pd.date_range("2022-01-01", periods=n_days, freq="D"))


@pytest.mark.parametrize("span_days,found", [(364, False), (365, True), (366, True)])
def test_drift_needs_a_year_of_data(span_days, found):
    # common practice, README Flags: drift is judged over at least a year (span = last day
    # minus first day, so span_days + 1 daily values)
    fl = drift_flags(_drift_series(span_days + 1, -3.0), device_id="poa1", method="clearsky")
    assert (len(fl) == 1) == found


@pytest.mark.parametrize("rate,severity", [(1.99, "warning"), (2.0 * (1 - 1e-9), "warning"),
                                           (2.01, "alarm")])
def test_drift_alarm_above_2_percent_per_year(rate, severity):
    # heliaudit's documented choice, docs/flags.md: a drift beyond 1 %/yr is a warning and
    # an alarm above twice that (2 %/yr, where a class A pyranometer's 0.8 %/yr
    # specification, ISO 9060 (from memory), is exceeded more than twofold)
    fl = drift_flags(_drift_series(501, -rate), device_id="poa1", method="clearsky")
    assert len(fl) == 1 and fl.iloc[0]["severity"] == severity


@pytest.mark.parametrize("n,found", [(7, False), (8, True), (9, True)])
def test_temperature_flatline_8_samples(n, found):
    # common practice, README Filters / Flags: a temperature is stuck from 8 samples in a
    # row changing by <= 0.05 °C. Hourly samples, so 7 samples already pass the 6-h flag
    # minimum and only the sample count decides
    idx = pd.date_range("2024-06-01 04:00", periods=n + 2, freq="h", tz="UTC")
    t = pd.Series([20.0] + [25.0] * n + [30.0], index=idx)
    fl = flatline_flags(t, np.ones(n + 2, bool), device_id="tm1", quantity="t_module_c",
                        tau_s=3600)
    assert (len(fl) == 1) == found


@pytest.mark.parametrize("step,found", [(0.049, True), (0.05, True), (0.051, False)])
def test_temperature_flatline_tolerance_005c(step, found):
    # common practice (|ΔT| <= 0.05 °C is no change): 10 hourly samples alternating 0 and
    # `step` °C (exact binary differences) between two moving ones
    idx = pd.date_range("2024-06-01 04:00", periods=12, freq="h", tz="UTC")
    t = pd.Series([-5.0] + [0.0, step] * 5 + [5.0], index=idx)
    fl = flatline_flags(t, np.ones(12, bool), device_id="tm1", quantity="t_module_c",
                        tau_s=3600)
    assert (len(fl) == 1) == found


@pytest.mark.parametrize("n,severity", [(95, "warning"), (96, "warning"), (97, "alarm")])
def test_flatline_alarm_beyond_one_day(n, severity):
    # heliaudit's documented choice, docs/flags.md: a flat line is an alarm when it lasts
    # more than a day (96 x 15 min = 24 h exactly is still a warning)
    x = np.r_[[100.0, 200.0], np.full(n, 300.0), [400.0, 500.0]]
    idx = pd.date_range("2024-06-01", periods=x.size, freq="15min", tz="UTC")
    fl = flatline_flags(pd.Series(x, index=idx), np.ones(x.size, bool), device_id="poa1",
                        quantity="poa_wm2")
    assert len(fl) == 1 and fl.iloc[0]["severity"] == severity


@pytest.mark.parametrize("n,severity", [(11, "info"), (12, "warning"), (13, "warning")])
def test_flatline_warning_from_one_hour(n, severity):
    # heliaudit's documented choice, docs/flags.md: a flat line is a warning from 1 h of
    # stuck samples (12 x 5 min), information below (a logger repeating its last value)
    x = np.r_[[100.0, 200.0], np.full(n, 300.0), [400.0, 500.0]]
    idx = pd.date_range("2024-06-01 08:00", periods=x.size, freq="5min", tz="UTC")
    fl = flatline_flags(pd.Series(x, index=idx), np.ones(x.size, bool), device_id="poa1",
                        quantity="poa_wm2", tau_s=300)
    assert len(fl) == 1 and fl.iloc[0]["severity"] == severity


@pytest.mark.parametrize("n_missing,severity", [(95, "info"), (96, "warning"),
                                                (97, "warning")])
def test_dropout_warning_from_24_hours(n_missing, severity):
    # heliaudit's documented choice, docs/flags.md: a gap of >= 24 daytime hours is a
    # warning, shorter ones information (grid all daytime here: 96 x 15 min = 24 h)
    grid = pd.date_range("2024-06-01", periods=200, freq="15min", tz="UTC")
    x = pd.Series(500.0, index=grid)
    x.iloc[50:50 + n_missing] = np.nan
    fl = dropout_flags(x, pd.Series(True, index=grid), device_id="poa1", quantity="poa_wm2")
    assert len(fl) == 1 and fl.iloc[0]["severity"] == severity


# ------------------------------------------------------------ physical limits


LIMITS = [("poa_wm2", -10.0, 1500.0), ("ghi_wm2", -10.0, 1500.0), ("t_module_c", -40.0, 90.0),
          ("t_amb_c", -40.0, 55.0), ("wind_ms", 0.0, 50.0), ("rain_mm", 0.0, 200.0)]


@pytest.mark.parametrize("quantity,lo,hi", LIMITS)
@pytest.mark.parametrize("side", ["lo", "hi"])
@pytest.mark.parametrize("nudge,flagged", [(-0.01, False), (0.0, False), (0.01, True)])
def test_physical_limits(quantity, lo, hi, side, nudge, flagged):
    # common practice, README Filters / Flags ("values outside physical limits"): G −10…1500
    # W/m², T_mod −40…90 °C, T_amb −40…55 °C, wind 0…50 m/s; rain 0…200 mm per interval
    # (docs/flags.md). The limits themselves are inside; `nudge` moves outwards. Five
    # samples (a warning; fewer than 4 are information) between plausible ones.
    from analytics.sensor_qa import range_flags

    value = lo - nudge if side == "lo" else hi + nudge
    mid = (lo + hi) / 2
    x = pd.Series(np.r_[np.full(10, mid), np.full(5, value), np.full(10, mid)],
                  index=pd.date_range("2024-06-01", periods=25, freq="15min", tz="UTC"))
    fl = range_flags(x, device_id="s1", quantity=quantity)
    assert (len(fl) == 1) == flagged
    if flagged:
        assert fl.iloc[0]["severity"] == "warning"


@pytest.mark.parametrize("n_bad,invalid", [(20, False), (21, True), (22, True)])
def test_irradiance_out_of_range_on_most_daytime_readings(n_bad, invalid):
    # heliaudit's documented choice, README Flags: a day is excluded as out of range when
    # *most* (more than half) of its daytime readings are outside −10…1500 W/m²; 40
    # daytime readings, n_bad of them at 2000 W/m²
    g = CS.copy()
    day = np.flatnonzero(ELEV >= 15)
    g[day[40:]] = np.nan  # exactly 40 daytime readings
    g[day[:n_bad]] = 2000.0
    days = _irr_days(g)
    assert (days["reason"] == "out_of_range").any() == invalid


@pytest.mark.parametrize("n_bad,invalid", [(20, False), (21, True), (22, True)])
def test_module_out_of_range_on_most_daytime_readings(n_bad, invalid):
    # heliaudit's documented choice, README Flags: most daytime module readings outside
    # −40…90 °C; 40 daytime readings (day_mask), n_bad at −60 °C
    mask = np.zeros(96, bool)
    mask[30:70] = True
    t = 30.0 + 0.1 * np.arange(96)
    t[30:30 + n_bad] = -60.0
    days = module_temperature_validity(pd.Series(t, index=IDX), std_offset_s=0, day_mask=mask)
    assert (days["reason"] == "out_of_range").any() == invalid


@pytest.mark.parametrize("extra,found", [(-1, False), (0, True), (1, True)])
def test_ambient_offset_needs_30_days(extra, found):
    # heliaudit's documented choice (docs/flags.md; common practice): the ambient check
    # needs at least 30 days of data (first to last reading). Ambient 6 °C above the module
    # at night and the module 5 °C below the Sandia model in full sun, as in
    # tests/test_analytics_plausibility.py, over 30 days of 15-min data +- one reading
    n = 30 * 96 + 1 + extra
    idx = pd.date_range("2024-06-01", periods=n, freq="15min", tz="UTC")
    el = np.resize(ELEV, n)
    g = np.resize(CS, n)
    t_mod = np.where(el < -12, 14.0, 40.0)
    model = np.where(g >= 600, t_mod + 5.0, t_mod)
    fl = ambient_offset_flags(pd.Series(20.0, index=idx), pd.Series(t_mod, index=idx), model,
                              el, g, device_id="tamb1", module_sensor="tmod1")
    assert (len(fl) == 1) == found
