"""Sensor plausibility (issue #14): judged day by day before any diagnosis.

Known-answer cases mimic the real-plant findings of issue #14 on data of our own making
(pvlib clear-sky geometry, tests/flags_synth.py): a reference cell stuck at 3.0 W/m², a
dead cell reading up to 160 W/m² at night, a module sensor at −19 °C in July, an ambient
sensor 5.5 °C high. Each documented threshold is tested just below, at and just above.
"""

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_array_equal

from analytics.sensor_qa import (
    ambient_offset_flags,
    frame_sensor_validity,
    invalid_interval_mask,
    irradiance_validity,
    module_temperature_validity,
    validity_flags,
)
from analytics.temperature import module_temperature_sandia
from tests.flags_synth import STD_OFFSET_S, inverter_power, site_weather


@pytest.fixture(scope="module")
def july():
    return site_weather(start="2024-07-01", days=20, seed=5)


def _judge(w, g, **kw):
    return irradiance_validity(g, w["elev"].to_numpy(), w["poa_cs"].to_numpy(),
                               std_offset_s=STD_OFFSET_S, **kw)


def test_normal_irradiance_days_are_valid(july):
    days = _judge(july, july["poa_wm2"])
    assert len(days) >= 20 and days["valid"].all()


def test_cell_stuck_at_3_wm2_is_stuck_every_day(july):
    # issue #14: a reference cell stuck at exactly 3.0 W/m² for months
    g = july["poa_wm2"].copy()
    g[:] = 3.0
    days = _judge(july, g)
    full = days.iloc[1:-1]  # whole local days inside the UTC-aligned sample
    assert (~full["valid"]).all() and set(full["reason"]) == {"stuck"}


@pytest.mark.parametrize("spread,stuck", [(0.49, True), (0.5, True), (0.51, False)])
def test_stuck_tolerance_boundary(july, spread, stuck):
    # documented threshold: daytime span <= 0.5 W/m² while the clear sky changes
    g = july["poa_wm2"].copy()
    day = july["elev"].to_numpy() >= 15
    alt = np.where(np.arange(len(g)) % 2 == 0, 3.0, 3.0 + spread)
    g[:] = np.where(day, alt, 0.0)
    days = _judge(july, g).iloc[1:-1]
    assert (days["reason"] == "stuck").all() == stuck


def test_dead_cell_reading_at_night(july):
    # issue #14: a dead cell reading up to 160 W/m² at night
    g = july["poa_wm2"].copy()
    night = july["elev"].to_numpy() < -12
    rng = np.random.default_rng(3)
    g[night] = rng.uniform(40, 160, night.sum())
    days = _judge(july, g).iloc[1:-1]
    assert (~days["valid"]).all() and set(days["reason"]) == {"night_reading"}


def test_thermopile_night_offset_is_normal(july):
    # from memory: small negative thermopile offsets at night are normal
    g = july["poa_wm2"].copy()
    g[july["elev"].to_numpy() < 0] = -3.0
    assert _judge(july, g)["valid"].all()


@pytest.mark.parametrize("value,n,invalid", [(4.99, 5, False), (5.0, 1, False),
                                             (5.0, 2, True), (5.01, 2, True)])
def test_night_reading_boundaries(july, value, n, invalid):
    # documented: >= 2 readings >= 5 W/m² with the sun below −12° make the day invalid
    g = july["poa_wm2"].copy()
    pos = np.flatnonzero((july["elev"].to_numpy() < -12)
                         & (july.index >= pd.Timestamp("2024-07-05 08:00", tz="UTC")))[:n]
    g.iloc[pos] = value
    days = _judge(july, g)
    assert (~days["valid"]).any() == invalid


@pytest.mark.parametrize("factor,invalid", [(0.24, True), (0.25, False), (0.26, False)])
def test_low_vs_power_boundary(july, factor, invalid):
    # documented: G < 0.25 x 1000 W/m² x P_ac/P_dc on >= half the productive intervals
    p_norm = july["poa_wm2"].to_numpy() / 1000.0  # an array at PR 1 for a round number
    g = pd.Series(factor * 1000.0 * p_norm, index=july.index)
    days = _judge(july, g, p_norm=p_norm).iloc[1:-1]
    bad = days["reason"] == "low_vs_power"
    assert bad.all() if invalid else not bad.any()


def test_module_minus_19_in_july_is_colder_than_ambient(july):
    # issue #14: a module sensor reading −19 °C in July (cell temperature −17 °C was used)
    t_amb = pd.Series(25.0, index=july.index)
    t_mod = pd.Series(-19.0, index=july.index) + 0.01 * np.arange(len(july)) % 0.5
    days = module_temperature_validity(t_mod, poa_wm2=july["poa_wm2"].to_numpy(),
                                       t_amb_c=t_amb.to_numpy(), std_offset_s=STD_OFFSET_S)
    day = (july.index.as_unit("s").asi8 + STD_OFFSET_S) // 86400
    n_sun = pd.Series(july["poa_wm2"].to_numpy() >= 600).groupby(day).sum().to_numpy()
    # every day with full sun (>= 4 intervals >= 600 W/m²) is judged, and found cold
    assert (n_sun >= 4).sum() >= 10
    assert_array_equal(days["reason"].to_numpy() == "colder_than_ambient", n_sun >= 4)


@pytest.mark.parametrize("below,cold", [(1.99, False), (2.0, False), (2.01, True)])
def test_colder_than_ambient_margin_boundary(july, below, cold):
    # documented: module more than 2 °C below ambient in full sun (>= 600 W/m²)
    sun = july["poa_wm2"].to_numpy() >= 600
    t_amb = np.full(len(july), 25.0)
    t_mod = np.where(sun, 25.0 - below, 25.0 + 0.1 * np.arange(len(july)) % 3)
    days = module_temperature_validity(pd.Series(t_mod, index=july.index),
                                       poa_wm2=july["poa_wm2"].to_numpy(), t_amb_c=t_amb,
                                       std_offset_s=STD_OFFSET_S)
    assert (days["reason"] == "colder_than_ambient").any() == cold


def test_healthy_module_sensor_valid(july):
    # Sandia module model (King et al. 2004 Eq. 11, pvlib-equivalent) as the module reading
    t_amb = 22 + 8 * np.sin(np.arange(len(july)) / 96 * 2 * np.pi)
    tm = module_temperature_sandia(july["poa_wm2"].to_numpy(), t_amb, 2.0)
    days = module_temperature_validity(pd.Series(tm, index=july.index),
                                       poa_wm2=july["poa_wm2"].to_numpy(), t_amb_c=t_amb,
                                       t_mod_model_c=tm, std_offset_s=STD_OFFSET_S,
                                       day_mask=july["elev"].to_numpy() >= 15)
    assert days["valid"].all()


def test_ambient_reading_high_flagged_with_its_offset(july):
    # issue #14: an ambient sensor reading 5–6 °C high for years. Truth: the air follows a
    # daily cycle; the module follows the Sandia model of the TRUE air (night: 1.5 °C of sky
    # cooling below the air); the ambient sensor reads the air + 5.5 °C.
    air = 20 + 6 * np.sin((np.arange(len(july)) / 96 - 0.4) * 2 * np.pi)
    g = july["poa_wm2"].to_numpy()
    t_mod = module_temperature_sandia(g, air, 2.0) - np.where(july["elev"] < 0, 1.5, 0.0)
    t_amb_read = pd.Series(air + 5.5, index=july.index)
    model = module_temperature_sandia(g, t_amb_read.to_numpy(), 2.0)
    kw = dict(device_id="tamb1", module_sensor="tmod1", min_days=10)
    fl = ambient_offset_flags(t_amb_read, pd.Series(t_mod, index=july.index), model,
                              july["elev"].to_numpy(), g, **kw)
    assert len(fl) == 1 and fl.iloc[0]["details"]["reason"] == "ambient_offset"
    # the full-sun residual is exactly −5.5 °C (same model both sides, noise-free)
    assert fl.iloc[0]["details"]["offset_c"] == pytest.approx(5.5, abs=1e-6)
    good = pd.Series(air, index=july.index)
    model_ok = module_temperature_sandia(g, air, 2.0)
    assert ambient_offset_flags(good, pd.Series(t_mod, index=july.index), model_ok,
                                july["elev"].to_numpy(), g, **kw).empty


def test_validity_flags_runs_and_exclusion_report(july):
    g = july["poa_wm2"].copy()
    g["2024-07-05":"2024-07-12"] = 3.0
    days = _judge(july, g)
    fl = validity_flags(days, device_id="rc1", quantity="poa_wm2", std_offset_s=STD_OFFSET_S)
    assert len(fl) == 1
    d = fl.iloc[0]["details"]
    assert d["reason"] == "stuck" and "clock" in d["excluded_from"]
    assert fl.iloc[0]["severity"] == "alarm" and d["n_days_excluded"] >= 7
    m = invalid_interval_mask(g.index, days, std_offset_s=STD_OFFSET_S)
    assert (g[m] == 3.0).mean() > 0.95  # what is masked is the stuck period


def test_frame_validity_masks_the_faulty_days_only(july):
    f = july.copy()
    f["p_ac_kw"] = inverter_power(f)
    f["t_amb_c"] = 25.0
    f.loc["2024-07-08":"2024-07-10", "poa_wm2"] = 3.0
    f.loc["2024-07-14":"2024-07-15", "t_module_c"] = -19.0
    g_bad, t_bad = frame_sensor_validity(f, f["elev"].to_numpy(), f["poa_cs"].to_numpy(),
                                         p_dc_kwp=120.0, std_offset_s=STD_OFFSET_S)
    assert g_bad.sum() > 0 and t_bad.sum() > 0
    local = (f.index + pd.Timedelta(seconds=STD_OFFSET_S)).tz_localize(None).normalize()
    # the whole local days touched by the faults are masked, nothing else
    assert set(local[g_bad]) <= set(pd.date_range("2024-07-07", "2024-07-10"))
    assert set(local[t_bad]) <= set(pd.date_range("2024-07-13", "2024-07-15"))
    sunny = f["elev"].to_numpy() >= 15
    assert g_bad[(f["poa_wm2"] == 3.0).to_numpy() & sunny & (local >= "2024-07-08")].all()
    assert_array_equal(g_bad & t_bad, np.zeros(len(f), bool))


def test_frame_validity_memo_gives_the_same_masks(july):
    """Inverters on one set of sensors share the sensor-only judgements through ``memo``
    (issue #16); each inverter's own power still decides its low-vs-power days: with a memo
    kept across three frames the masks equal those judged without one."""
    base = july.copy()
    base["t_amb_c"] = 25.0
    base.loc["2024-07-08":"2024-07-10", "poa_wm2"] = 3.0
    base.loc["2024-07-14":"2024-07-15", "t_module_c"] = -19.0
    frames = []
    for k, scale in enumerate((1.0, 0.9, 1.0)):
        f = base.copy()
        f["p_ac_kw"] = inverter_power(f) * scale
        if k == 1:  # this inverter's sensor reads far too low on one day: its own evidence
            f.loc["2024-07-20", "poa_wm2"] = f.loc["2024-07-20", "poa_wm2"] * 0.1
        frames.append(f)
    memo: dict = {}
    for f in frames:
        kw = dict(p_dc_kwp=120.0, std_offset_s=STD_OFFSET_S)
        want = frame_sensor_validity(f, f["elev"].to_numpy(), f["poa_cs"].to_numpy(), **kw)
        got = frame_sensor_validity(f, f["elev"].to_numpy(), f["poa_cs"].to_numpy(), memo=memo,
                                    **kw)
        assert_array_equal(got[0], want[0])
        assert_array_equal(got[1], want[1])
    assert "irradiance" in memo and "t_module" in memo


@pytest.mark.parametrize("step,found", [(0.029, False), (0.031, True), (-0.05, True)])
def test_sibling_jump_boundary_and_suspect(step, found):
    # documented: the clear-day ratio of two sensors steps by >= 3 % and stays; the suspect
    # is the sensor whose own clear-sky ratio steps (A steps here, B is steady)
    from analytics.sensor_qa import sibling_jump_flags

    days = pd.date_range("2024-01-01", periods=120, freq="D")
    rng = np.random.default_rng(9)
    rb = pd.Series(0.97 + 0.002 * rng.standard_normal(120), index=days)
    ra = pd.Series(np.where(np.arange(120) >= 70, 0.97 * (1 + step), 0.97)
                   + 0.002 * rng.standard_normal(120), index=days)
    fl = sibling_jump_flags({"A": ra, "B": rb})
    assert (len(fl) == 1) == found
    if found:
        d = fl.iloc[0]["details"]
        assert fl.iloc[0]["device_id"] == "A" and d["reason"] == "jump_vs_sibling"
        assert d["step_pct"] == pytest.approx(100 * step, abs=0.3)
        # the step day within 2 days of the truth (day 70 = 2024-03-11)
        assert abs((pd.Timestamp(d["meaning"].split(" on ")[1][:10])
                    - pd.Timestamp("2024-03-11")).days) <= 2


def test_sibling_drift_is_not_a_jump():
    # a sensor drifting −1.5 %/yr for 5 years (7.5 % in all) against a steady sibling: the
    # halves differ by > 3 % but no 20-day window steps; drift has its own check
    from analytics.sensor_qa import sibling_jump_flags

    days = pd.date_range("2020-01-01", periods=1826, freq="D")
    rng = np.random.default_rng(4)
    t = np.arange(1826) / 365.25
    ra = pd.Series(0.97 * (1 - 0.015 * t) + 0.002 * rng.standard_normal(1826), index=days)
    rb = pd.Series(0.97 + 0.002 * rng.standard_normal(1826), index=days)
    assert sibling_jump_flags({"A": ra, "B": rb}).empty


@pytest.mark.parametrize("level,found", [(1.19, False), (1.21, True), (0.79, True),
                                         (0.81, False)])
def test_off_clear_sky_boundary(level, found):
    # documented: the 15-clear-day median of measured / clear-sky POA outside [0.8, 1.2]
    # for >= 10 clear days (clear-sky models carry 5–10 % bias, from memory)
    from analytics.sensor_qa import clear_sky_level_flags

    days = pd.date_range("2024-05-01", periods=40, freq="D")
    r = pd.Series(level, index=days)
    fl = clear_sky_level_flags(r, device_id="rc1")
    assert (len(fl) == 1) == found
    if found:
        assert fl.iloc[0]["details"]["reason"] == "off_clear_sky"
        assert fl.iloc[0]["details"]["median_clear_day_ratio"] == pytest.approx(level)


@pytest.mark.parametrize("night,day,found", [(3.99, 5.0, False), (4.0, 5.0, False),
                                             (4.01, 5.0, True), (6.0, 2.99, False),
                                             (6.0, 3.0, False), (6.0, 3.01, True)])
def test_ambient_offset_thresholds(july, night, day, found):
    # documented: night median T_amb − T_mod > 4 °C and full-sun median T_mod − T_model
    # < −3 °C (exact constructed medians: ambient 20 °C; module 20 − night at night; the
    # model `day` °C above the module in full sun)
    n = len(july)
    el = july["elev"].to_numpy()
    g = july["poa_wm2"].to_numpy()
    t_amb = pd.Series(np.full(n, 20.0), index=july.index)
    t_mod = np.where(el < -12, 20.0 - night, 40.0)
    model = np.where(g >= 600, t_mod + day, t_mod)
    fl = ambient_offset_flags(t_amb, pd.Series(t_mod, index=july.index), model, el, g,
                              device_id="tamb1", module_sensor="tmod1", min_days=10)
    assert (len(fl) == 1) == found


@pytest.mark.parametrize("off,bad", [(19.99, False), (20.0, False), (20.01, True)])
def test_module_model_margin_boundary(july, off, bad):
    # documented: more than 20 °C from the Sandia module model on >= half the full-sun
    # intervals makes the day invalid (implausible_vs_model)
    g = july["poa_wm2"].to_numpy()
    model = np.asarray(module_temperature_sandia(g, 25.0, 2.0), dtype=float)
    t = pd.Series(np.where(g >= 600, model + off, model), index=july.index)
    days = module_temperature_validity(t, poa_wm2=g, t_mod_model_c=model,
                                       std_offset_s=STD_OFFSET_S)
    assert (days["reason"] == "implausible_vs_model").any() == bad


@pytest.mark.parametrize("pr,high", [(0.39, True), (0.40, False), (0.41, False)])
def test_high_vs_power_boundary(pr, high):
    # documented: a sensor reads far more than the arrays under it deliver when, with at
    # least 2 available inverters producing, 2/3 of them have PR = Y_f / Y_r < 0.4 (IEC
    # 61724-1 PR). H = 6 kWh/m² (Y_r = 6 h); just below (0.39), at (0.40), above (0.41).
    from analytics.sensor_qa import high_vs_power_days

    days = pd.date_range("2024-07-01", periods=3, freq="D")
    h = pd.Series(6.0, index=days)
    yf = pd.DataFrame({"i1": [6 * 0.8, 6 * pr, 6 * 0.8], "i2": [6 * 0.8, 6 * pr, 6 * 0.8],
                       "i3": [6 * 0.8, 6 * pr, 6 * 0.8]}, index=days)
    got = high_vs_power_days(h, yf)
    assert list(got) == [False, high, False]


def test_high_vs_power_needs_two_agreeing_inverters():
    # one inverter at PR 0.3 among healthy ones is that inverter's loss, not the sensor;
    # an inverter on its own cannot tell the two apart; an unavailable inverter (NaN) is
    # no evidence
    from analytics.sensor_qa import high_vs_power_days

    days = pd.date_range("2024-07-01", periods=1, freq="D")
    h = pd.Series(6.0, index=days)
    assert not high_vs_power_days(h, pd.DataFrame({"a": [1.8], "b": [4.8], "c": [4.8]},
                                                  index=days)).iloc[0]
    assert not high_vs_power_days(h, pd.DataFrame({"a": [1.8]}, index=days)).iloc[0]
    assert not high_vs_power_days(h, pd.DataFrame({"a": [1.8], "b": [np.nan]},
                                                  index=days)).iloc[0]
    assert high_vs_power_days(h, pd.DataFrame({"a": [1.8], "b": [1.9]}, index=days)).iloc[0]


def test_jump_marks_the_suspect_invalid_from_the_step_on():
    # issue #14: a jump against the sibling was reported but not masked. Sensor A steps
    # +6 % on day 70 (2024-03-11) and stays; its days from the step on are invalid with
    # reason jump_vs_sibling (to ±2 days, the step-day tolerance above), B keeps all days
    from analytics.sensor_qa import jump_validity, sibling_jump_flags

    days = pd.date_range("2024-01-01", periods=120, freq="D")
    rng = np.random.default_rng(9)
    rb = pd.Series(0.97 + 0.002 * rng.standard_normal(120), index=days)
    ra = pd.Series(np.where(np.arange(120) >= 70, 0.97 * 1.06, 0.97)
                   + 0.002 * rng.standard_normal(120), index=days)
    fl = sibling_jump_flags({"A": ra, "B": rb}, std_offset_s=STD_OFFSET_S)
    tabs = jump_validity(fl, {"A": days, "B": days}, std_offset_s=STD_OFFSET_S)
    assert set(tabs) == {"A"}
    bad = tabs["A"].index[~tabs["A"]["valid"]]
    assert abs((bad[0] - pd.Timestamp("2024-03-11")).days) <= 2 and bad[-1] == days[-1]
    assert set(tabs["A"].loc[bad, "reason"]) == {"jump_vs_sibling"}
    assert tabs["A"]["valid"].iloc[:68].all()
    assert "degradation" in fl.iloc[0]["details"]["excluded_from"]
