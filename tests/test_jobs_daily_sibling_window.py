"""The daily job's sibling check on a window equals the check on the whole history (#16).

The daily job leaves out the days a POA sensor jumped against its siblings. It used to read
and judge every POA reading of the site's history on every run; a range run now takes the
days before a cut from the day judgements the last flags run stored and reads the readings
from the cut only. The reference is the daily job itself on the whole history
(``recompute_all``): after one more stretch of data, the rows the range run wrote must be
the rows a full recompute writes for those days, value for value, whether the jump lies in the stored
history or in the new data, and on a site whose flags state cannot be trusted (another
detector setting) the range run must fall back to the whole history.

The data are those of ``tests/test_jobs_sensor_exclusions.py``: two POA sensors reading
pvlib's Ineichen clear-sky POA with 0.5 % noise, one 8 % high from day 60 (2024-04-10),
inverters at 0.9 x the PVWatts expected power of the true irradiance.
"""

import json

import numpy as np
import pandas as pd
import pvlib
import pytest
import sqlalchemy as sa

from db import schema
from db.daily import daily_table
from heliaudit import jobs_daily, jobs_flags
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


def _data():
    ts, poa = clearsky_poa_15min(START, N_DAYS, LAT, LON, ALT, TILT, AZ)
    poa = np.nan_to_num(poa).clip(min=0)
    rng = np.random.default_rng(3)
    g1 = poa * (1 + 0.005 * rng.standard_normal(poa.size))
    g2 = poa * (1 + 0.005 * rng.standard_normal(poa.size)) * np.where(
        np.arange(poa.size) >= JUMP_DAY * 96, 1.08, 1.0)
    t_mod = 15.0 + 0.03 * poa
    t_cell = pvlib.temperature.sapm_cell_from_module(t_mod, poa, 3.0)
    p = 0.9 * np.nan_to_num(pvlib.inverter.pvwatts(
        pvlib.pvsystem.pvwatts_dc(poa, t_cell, 100.0, -0.004), 95.0 / 0.96, eta_inv_nom=0.96))
    return ts.as_unit("s").asi8, {"poa1": g1, "poa2": g2, "tmod1": t_mod, "inv1": p, "inv2": p}


def _store(eng, boundary_day: int, poa=("poa1", "poa2")):
    """History to ``boundary_day``, daily table and flags computed; then the rest loaded.
    Returns the engine and the UTC s span of the new readings."""
    ts, v = _data()
    v = {k: a for k, a in v.items() if k in poa or not k.startswith("poa")}
    old = ts < ts[0] + boundary_day * 86400
    with eng.begin() as c:
        add_site(c, "s1", timezone="UTC", latitude_deg=LAT, longitude_deg=LON, altitude_m=ALT,
                 tilt_deg=TILT, azimuth_deg=AZ)
        ch = {q: add_sensor(c, "s1", q, "poa_wm2") for q in poa}
        ch["tmod1"] = add_sensor(c, "s1", "tmod1", "t_module_c")
        for inv, sensor in (("inv1", poa[0]), ("inv2", poa[-1])):
            ch[inv] = add_inverter(c, "s1", inv, poa_sensor_id=sensor, t_module_sensor_id="tmod1",
                                   p_dc_kwp=100.0, p_ac_max_kw=95.0, eta_inv_nom=0.96)["p_ac_kw"]
        for k, arr in v.items():
            add_readings(c, ch[k], ts[old], arr[old])
    jobs_daily.recompute_all(eng, "s1")
    jobs_flags.run_flags(eng, "s1")
    with eng.begin() as c:
        for k, arr in v.items():
            add_readings(c, ch[k], ts[~old], arr[~old])
    return eng, int(ts[~old][0]), int(ts[-1])


def _rows(eng) -> pd.DataFrame:
    t = daily_table(eng, "s1").drop(columns=["computation_id"])
    return t.sort_values(["device_id", "day"]).reset_index(drop=True)


def _new_days(rows: pd.DataFrame, lo: int) -> pd.DataFrame:
    """The rows of the days a range run from ``lo`` (UTC s, site in UTC) recomputes: older
    rows keep what the run that wrote them found (a jump found later does not rewrite them,
    before or after issue #16)."""
    keep = pd.to_datetime(rows["day"]) >= pd.Timestamp(lo, unit="s").normalize()
    return rows[keep].reset_index(drop=True)


def _window_then_whole(eng, lo, hi, monkeypatch) -> tuple[pd.DataFrame, pd.DataFrame, list]:
    starts = []
    read = jobs_flags.read_sensors

    def spy(*a, **k):
        starts.append(k.get("start_s"))
        return read(*a, **k)

    monkeypatch.setattr(jobs_flags, "read_sensors", spy)
    jobs_daily.recompute_range(eng, "s1", lo, hi)
    after_range = _new_days(_rows(eng), lo)
    jobs_daily.recompute_all(eng, "s1")
    return after_range, _new_days(_rows(eng), lo), starts


def _same(window: pd.DataFrame, whole: pd.DataFrame) -> None:
    """Equal rows: flags, counts and text exactly, numbers to float rounding (a range run
    and a full run batch the daily sums differently: 1e-13 relative, before issue #16 too)."""
    pd.testing.assert_frame_equal(window, whole, check_exact=False, rtol=1e-9, atol=0)
    for c in ("day_valid", "n_intervals", "n_valid"):
        assert window[c].tolist() == whole[c].tolist()


# boundary 45: the jump (day 60) comes with the new data, the range run judges the sensors
# from the cut; boundary 80: the last flags run found the jump, so the sensors are judged
# whole (as the flags job does after a jump)
@pytest.mark.parametrize("boundary_day,windowed", [(45, True), (80, False)])
def test_range_run_equals_whole_history(tmp_path, monkeypatch, boundary_day, windowed):
    eng, lo, hi = _store(make_store(tmp_path), boundary_day)
    window, whole, starts = _window_then_whole(eng, lo, hi, monkeypatch)
    _same(window, whole)
    # a windowed run read the POA sensors from the cut (the day of the last reading the
    # flags run saw, the day before the new readings, less the sensors' two-day look-back);
    # the full run read them whole
    assert starts == [lo - 3 * 86400 if windowed else None, None]
    # and the jumped sensor's inverter has no valid day after the step, as issue #14 wants
    after = whole[(whole["device_id"] == "inv2")
                  & (pd.to_datetime(whole["day"]) > pd.Timestamp("2024-04-13"))]
    assert len(after) > 10 and not after["day_valid"].astype(bool).any()


def test_untrusted_flags_state_means_the_whole_history(tmp_path, monkeypatch):
    eng, lo, hi = _store(make_store(tmp_path), 45)
    with eng.begin() as c:  # as if the last flags run had other detector settings
        t = schema.computation
        cid, params = c.execute(sa.select(t.c.computation_id, t.c.params_json).where(
            t.c.kind == "flags").order_by(t.c.computation_id.desc()).limit(1)).one()
        p = json.loads(params)
        p["sensor"] = {**p["sensor"], "changed": True}
        c.execute(t.update().where(t.c.computation_id == cid).values(params_json=json.dumps(p)))
    window, whole, starts = _window_then_whole(eng, lo, hi, monkeypatch)
    _same(window, whole)
    assert starts == [None, None]


def test_range_run_equals_whole_history_on_postgres(pg_engine, monkeypatch):
    """The same on PostgreSQL: the stored POA days (``flag_day``) read back as on SQLite."""
    eng, lo, hi = _store(pg_engine, 45)
    window, whole, starts = _window_then_whole(eng, lo, hi, monkeypatch)
    _same(window, whole)
    assert starts == [lo - 3 * 86400, None]


def test_one_poa_sensor_reads_only_the_run_days(tmp_path, monkeypatch):
    """No sibling to compare with: the range run reads its POA sensor from the day before
    its first day (its insolation feeds the high-reading check of the run's days only)."""
    eng, lo, hi = _store(make_store(tmp_path), 45, poa=("poa1",))
    window, whole, starts = _window_then_whole(eng, lo, hi, monkeypatch)
    _same(window, whole)
    assert starts == [lo - 86400, None]
