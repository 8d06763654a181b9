"""A POA sensor with a partial gap is not judged low against the array's power (issue #14).

Known case, made by hand: a site in UTC (37.2° N, 30° tilt, south) with one POA sensor and
two inverters on it for 30 days from 2024-03-01. The sensor reads pvlib's Ineichen clear-sky
POA; each inverter delivers 0.9 × the PVWatts power of that irradiance (pvlib pvwatts_dc,
sapm_cell_from_module, inverter.pvwatts), so its final yield Y_f is about 0.8–0.9 × the
reference yield Y_r, as a working array's is (IEC 61724-1: Y_f = PR · Y_r, PR ≤ 1).

* Day 10 (2024-03-11): the sensor's rows are absent from 23:00 the evening before to 15:00
  (a column gap of 16 h, the shape of the two false flags on the generated fleets): its
  insolation that day is only the late afternoon's, far below 0.25 × Y_f, yet the sensor
  is healthy — it said nothing, it did not read low. Not judged (coverage below 0.8).
* Day 20 (2024-03-21): the sensor reads 5 % of the true irradiance all day (covered by a
  bag or a bird's nest) while the arrays produce as usual: H = 0.05 Y_r ≈ 0.06 Y_f < 0.25 Y_f,
  the ``low_vs_power`` rule must find it.
"""

import json

import numpy as np
import pandas as pd
import pvlib
import pytest

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
START = pd.Timestamp("2024-03-01", tz="UTC")
N_DAYS = 30
GAP = (pd.Timestamp("2024-03-10 23:00", tz="UTC"), pd.Timestamp("2024-03-11 15:00", tz="UTC"))
COVERED_DAY = pd.Timestamp("2024-03-21", tz="UTC")


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    eng = make_store(tmp_path_factory.mktemp("gapday"))
    ts, poa = clearsky_poa_15min(START, N_DAYS, LAT, LON, ALT, TILT, AZ)
    poa = np.nan_to_num(poa).clip(min=0)
    t_mod = 15.0 + 0.03 * poa
    t_cell = pvlib.temperature.sapm_cell_from_module(t_mod, poa, 3.0)
    p_exp = np.nan_to_num(pvlib.inverter.pvwatts(
        pvlib.pvsystem.pvwatts_dc(poa, t_cell, 100.0, -0.004), 95.0 / 0.96, eta_inv_nom=0.96))
    covered = (ts >= COVERED_DAY) & (ts < COVERED_DAY + pd.Timedelta(days=1))
    g = np.where(covered, 0.05 * poa, poa)
    keep = ~((ts >= GAP[0]) & (ts < GAP[1]))  # rows absent: the sensor did not answer
    ts_s = ts.as_unit("s").asi8
    with eng.begin() as c:
        add_site(c, "s1", timezone="UTC", latitude_deg=LAT, longitude_deg=LON, altitude_m=ALT,
                 tilt_deg=TILT, azimuth_deg=AZ)
        add_readings(c, add_sensor(c, "s1", "poa1", "poa_wm2"), ts_s[keep], g[keep])
        add_readings(c, add_sensor(c, "s1", "tmod1", "t_module_c"), ts_s, t_mod)
        for inv in ("inv1", "inv2"):
            ch = add_inverter(c, "s1", inv, poa_sensor_id="poa1", t_module_sensor_id="tmod1",
                              p_dc_kwp=100.0, p_ac_max_kw=95.0, eta_inv_nom=0.96)
            add_readings(c, ch["p_ac_kw"], ts_s, 0.9 * p_exp)
    jobs_daily.recompute_all(eng, "s1")
    run_flags(eng, "s1")
    return eng


def _implausible_days(eng):
    fl = read_flags(eng, "s1", kind="sensor_implausible")
    out = []
    for dev, d in zip(fl["device_id"], fl["details_json"], strict=True):
        d = json.loads(d)
        out.append((dev, d["reason"], d.get("first_day"), d.get("last_day")))
    return out


def test_partial_gap_day_is_not_judged_low(store):
    # the gap day has no sensor_implausible flag; the covered day has exactly one
    days = _implausible_days(store)
    assert not [d for d in days if d[2] is not None and d[2] <= "2024-03-11" <= d[3]]
    assert days == [("poa1", "low_vs_power", "2024-03-21", "2024-03-21")]


def test_partial_gap_is_reported_as_a_data_gap(store):
    # the 16-h silence of a sensor that reports at night is a data gap (>= 6 h), with the
    # exact span of the absent rows (15-min rows labelled at the interval start)
    fl = read_flags(store, "s1", kind="data_dropout")
    spans = {(pd.Timestamp(s, unit="s", tz="UTC"), pd.Timestamp(e, unit="s", tz="UTC"))
             for s, e in zip(fl["start_s"], fl["end_s"], strict=True)}
    assert GAP in spans
