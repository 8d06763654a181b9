"""A POA sensor that jumps against its sibling is excluded downstream (issue #14).

Known answer on a small store: two POA sensors reading pvlib's Ineichen clear-sky POA (plus
0.5 % seeded noise) for 100 days; from day 60 (2024-04-10) one of them reads 8 % high (a
knocked or re-levelled cell). Each inverter's power is 0.9 × the PVWatts expected power
(pvlib pvwatts_dc, sapm_cell_from_module, inverter.pvwatts) of the TRUE irradiance, so a
trusted jumped sensor would drop its inverter's performance index to 0.9 / 1.08 = 0.833.
"""

import json

import numpy as np
import pandas as pd
import pvlib
import pytest

from db.daily import daily_table
from db.flags import read_flags
from heliaudit import jobs_daily
from heliaudit.jobs_flags import run_flags
from tests.helpers_store import (
    add_inverter,
    add_readings,
    add_sensor,
    add_site,
    clearsky_poa_15min,
    make_store,
)

LAT, LON, ALT, TILT, AZ = 37.2, -3.6, 700.0, 30.0, 180.0
START = pd.Timestamp("2024-02-10", tz="UTC")
N_DAYS, JUMP_DAY = 100, 60


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    eng = make_store(tmp_path_factory.mktemp("jump"))
    ts, poa = clearsky_poa_15min(START, N_DAYS, LAT, LON, ALT, TILT, AZ)
    poa = np.nan_to_num(poa).clip(min=0)
    rng = np.random.default_rng(3)
    g1 = poa * (1 + 0.005 * rng.standard_normal(poa.size))
    jump = np.arange(poa.size) >= JUMP_DAY * 96
    g2 = poa * (1 + 0.005 * rng.standard_normal(poa.size)) * np.where(jump, 1.08, 1.0)
    t_mod = 15.0 + 0.03 * poa
    t_cell = pvlib.temperature.sapm_cell_from_module(t_mod, poa, 3.0)
    p_exp = pvlib.inverter.pvwatts(pvlib.pvsystem.pvwatts_dc(poa, t_cell, 100.0, -0.004),
                                   95.0 / 0.96, eta_inv_nom=0.96)
    ts_s = ts.as_unit("s").asi8
    with eng.begin() as c:
        add_site(c, "s1", timezone="UTC", latitude_deg=LAT, longitude_deg=LON, altitude_m=ALT,
                 tilt_deg=TILT, azimuth_deg=AZ)
        add_readings(c, add_sensor(c, "s1", "poa1", "poa_wm2"), ts_s, g1)
        add_readings(c, add_sensor(c, "s1", "poa2", "poa_wm2"), ts_s, g2)
        add_readings(c, add_sensor(c, "s1", "tmod1", "t_module_c"), ts_s, t_mod)
        for inv, sensor in (("inv1", "poa1"), ("inv2", "poa2")):
            ch = add_inverter(c, "s1", inv, poa_sensor_id=sensor, t_module_sensor_id="tmod1",
                              p_dc_kwp=100.0, p_ac_max_kw=95.0, eta_inv_nom=0.96)
            add_readings(c, ch["p_ac_kw"], ts_s, 0.9 * np.nan_to_num(p_exp))
    jobs_daily.recompute_all(eng, "s1")
    run_flags(eng, "s1")
    return eng


def test_jump_flag_names_the_sensor_day_and_exclusions(store):
    fl = read_flags(store, "s1", kind="sensor_implausible")
    det = [json.loads(d) for d in fl["details_json"]]
    jumps = [(dev, d) for dev, d in zip(fl["device_id"], det, strict=True)
             if d["reason"] == "jump_vs_sibling"]
    assert len(jumps) == 1
    dev, d = jumps[0]
    assert dev == "poa2"
    # the pair ratio poa1 / poa2 steps by 1 / 1.08 - 1 = -7.4 %; poa2's own clear-sky
    # ratio by +8 % (tolerance 0.5 %-points: 0.5 % noise, medians of clear days)
    assert d["pair"] == ["poa1", "poa2"]
    assert d["step_pct"] == pytest.approx(100 * (1 / 1.08 - 1), abs=0.5)
    assert d["own_clear_sky_step_pct"]["poa2"] == pytest.approx(8.0, abs=0.5)
    # the step day to ±2 days (median split of clear-day ratios)
    assert abs((pd.Timestamp(d["first_day"]) - pd.Timestamp("2024-04-10")).days) <= 2
    assert {"pr", "degradation", "clock", "soiling", "outage"} <= set(d["excluded_from"])


def test_jumped_sensor_days_left_out_of_the_daily_table(store):
    t = daily_table(store, "s1")
    t["day"] = pd.to_datetime(t["day"])
    before = t[(t["day"] < "2024-04-07") & (t["day"] > "2024-02-10")]
    after = t[t["day"] > "2024-04-13"]
    for inv in ("inv1", "inv2"):  # before the jump both have pi 0.9 (the power fraction)
        b = before[(before.device_id == inv) & before.day_valid.astype(bool)]
        assert len(b) > 40
        np.testing.assert_allclose(b["pi"].median(), 0.9, atol=0.01)
    a1 = after[(after.device_id == "inv1") & after.day_valid.astype(bool)]
    np.testing.assert_allclose(a1["pi"].median(), 0.9, atol=0.01)
    # the jumped sensor gives inv2 no PR evidence after the step (no 0.833 "loss")
    a2 = after[after.device_id == "inv2"]
    assert not a2["day_valid"].astype(bool).any()
    # and nothing downstream reads the step as a loss, a drift or a clock error
    fl = read_flags(store, "s1")
    assert not {"underperformance", "sensor_drift", "clock_shift", "soiling"} & set(fl["kind"])


@pytest.fixture(scope="module")
def high_store(tmp_path_factory):
    """40 days of a steady thin overcast (half the clear-sky POA, so a 2.6 x reading stays
    inside the 1500 W/m² range), three inverters on sensor poaH, which reads 2.6 x the
    irradiance on days 20-29 (2024-03-01..10; a wrong gain after a logger swap); a fourth
    inverter on its own sensor poaA loses 65 % of its power on the same days (its own fault,
    sensor right)."""
    eng = make_store(tmp_path_factory.mktemp("high"))
    start = pd.Timestamp("2024-02-10", tz="UTC")
    ts, poa = clearsky_poa_15min(start, 40, LAT, LON, ALT, TILT, AZ)
    poa = 0.5 * np.nan_to_num(poa).clip(min=0)
    day = np.arange(poa.size) // 96
    bad = (day >= 20) & (day < 30)
    t_mod = 15.0 + 0.03 * poa
    t_cell = pvlib.temperature.sapm_cell_from_module(t_mod, poa, 3.0)
    p_exp = np.nan_to_num(pvlib.inverter.pvwatts(
        pvlib.pvsystem.pvwatts_dc(poa, t_cell, 100.0, -0.004), 95.0 / 0.96, eta_inv_nom=0.96))
    ts_s = ts.as_unit("s").asi8
    with eng.begin() as c:
        add_site(c, "s1", timezone="UTC", latitude_deg=LAT, longitude_deg=LON, altitude_m=ALT,
                 tilt_deg=TILT, azimuth_deg=AZ)
        add_readings(c, add_sensor(c, "s1", "poaH", "poa_wm2"), ts_s,
                     poa * np.where(bad, 2.6, 1.0))
        add_readings(c, add_sensor(c, "s1", "poaA", "poa_wm2"), ts_s, poa)
        add_readings(c, add_sensor(c, "s1", "tmod1", "t_module_c"), ts_s, t_mod)
        for inv, sensor, frac in (("inv1", "poaH", 0.9), ("inv2", "poaH", 0.9),
                                  ("inv3", "poaH", 0.9), ("inv4", "poaA", None)):
            ch = add_inverter(c, "s1", inv, poa_sensor_id=sensor, t_module_sensor_id="tmod1",
                              p_dc_kwp=100.0, p_ac_max_kw=95.0, eta_inv_nom=0.96)
            f = np.where(bad, 0.9 * 0.35, 0.9) if frac is None else frac
            add_readings(c, ch["p_ac_kw"], ts_s, f * p_exp)
    jobs_daily.recompute_all(eng, "s1")
    run_flags(eng, "s1")
    return eng


def test_sensor_reading_high_is_found_and_excluded(high_store):
    # issue #14: the array-power check caught only LOW sensor readings. The three arrays on
    # poaH deliver a PR of 0.9 x 0.9 / 2.6 ~ 0.3 < 0.4 against it on days 20-29
    fl = read_flags(high_store, "s1", kind="sensor_implausible")
    det = [(dev, json.loads(d)) for dev, d in zip(fl["device_id"], fl["details_json"],
                                                  strict=True)]
    high = [(dev, d) for dev, d in det if d["reason"] == "high_vs_power"]
    assert len(high) == 1 and high[0][0] == "poaH"
    # exact days: the check is per local day, the fault is whole UTC days (site in UTC)
    assert (high[0][1]["first_day"], high[0][1]["last_day"]) == ("2024-03-01", "2024-03-10")
    assert "pr" in high[0][1]["excluded_from"]
    t = daily_table(high_store, "s1")
    t["day"] = pd.to_datetime(t["day"])
    on = t[t["device_id"].isin(["inv1", "inv2", "inv3"])]
    inside = on[(on["day"] >= "2024-03-01") & (on["day"] <= "2024-03-10")]
    # PR, filters and degradation get no evidence from those days (no PR 0.3 "loss") ...
    assert len(inside) == 30 and not inside["day_valid"].astype(bool).any()
    outside = on[(on["day"] < "2024-02-28") | (on["day"] > "2024-03-13")]
    np.testing.assert_allclose(outside.loc[outside.day_valid.astype(bool), "pi"], 0.9,
                               rtol=1e-6)
    # ... and no underperformance or outage is read from the high sensor
    allf = read_flags(high_store, "s1")
    assert not allf[allf["device_id"].isin(["inv1", "inv2", "inv3"])
                    & allf["kind"].isin(["underperformance", "outage"])].any().any()


def test_one_inverters_own_loss_is_not_a_high_sensor(high_store):
    # inv4 alone on poaA at PR ~ 0.3 on the same days: one inverter cannot tell its own
    # loss from a sensor reading high, so poaA is not judged and inv4 keeps its low days
    fl = read_flags(high_store, "s1", kind="sensor_implausible")
    assert "poaA" not in set(fl["device_id"])
    t = daily_table(high_store, "s1")
    t["day"] = pd.to_datetime(t["day"])
    r = t[(t["device_id"] == "inv4") & (t["day"] >= "2024-03-02") & (t["day"] <= "2024-03-09")]
    assert r["day_valid"].astype(bool).all()
    np.testing.assert_allclose(r["pi"], 0.9 * 0.35, rtol=1e-6)
