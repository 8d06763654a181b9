"""Incremental flags equal a full recompute (issue #16).

A site of 6 inverters gets 10 weeks of data, a full daily table and full flags; then one more
week is appended and only the daily rows of that week and the flags window are recomputed.
The flags table must then hold exactly what a full recompute of the same store gives: the
same events with the same dates, severity, details and lost energy. The reference is the
full recompute (the detectors as they run on the whole history), not a copy of the window
logic; the faults injected across the boundary make events that the window has to merge.
Sensor faults too (issue #16, store v7: sensors are judged day by day from the cut on and
joined with their stored days): an ambient sensor stuck from before the cut into the new
week (a flat line open at the cut moves the cut back a month) and otherwise reading ~8 °C
high (its offset check takes medians over the whole history, joined from the stored days'
samples), a POA reference cell stuck for two days and a short POA gap in the new week.
"""

import json

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa

from db import schema
from db.flags import read_flags
from heliaudit.jobs_daily import recompute_all, recompute_range
from heliaudit.jobs_flags import run_flags
from tests.flags_synth import ALT, AZ, LAT, LON, TILT, inverter_power, site_weather
from tests.helpers_store import add_inverter, add_readings, add_sensor, add_site, make_store

BOUNDARY = pd.Timestamp("2024-07-10 07:00", tz="UTC")  # first reading of the new week


def _s(t) -> int:
    return int(pd.Timestamp(t).value // 10**9)


def _site_data():
    w = site_weather(start="2024-05-01", days=77, seed=5)
    rng = np.random.default_rng(11)
    power = {}
    for i in range(6):
        dev = f"inv{i + 1}"
        kwp = 120.0 if dev == "inv6" else 100.0  # inv6 clips (DC/AC 1.2)
        p = inverter_power(w, p_dc_kwp=kwp, p_ac_max_kw=100.0) * (
            1 + 0.005 * rng.standard_normal(len(w)))
        if dev == "inv2":  # an outage across the boundary: two days before to a day after
            p[BOUNDARY - pd.Timedelta("2D"):BOUNDARY + pd.Timedelta("1D")] = 0.0
        if dev == "inv3":  # a lost string from 2024-06-20 on: underperformance still open
            p["2024-06-20 07:00":] *= 5 / 6
        if dev == "inv4":  # a flat power reading inside the new week
            p["2024-07-13 17:00":"2024-07-13 20:00"] = 42.0
        if dev == "inv5":  # stops reporting four days before the end
            p[w.index[-1] - pd.Timedelta("4D"):] = np.nan
        power[dev] = p.clip(0, 100.0)
    w = w.copy()
    # sensor faults across the cut and the boundary (after the power, which stays normal)
    w.loc["2024-07-14 07:00":"2024-07-16 06:45", "poa_wm2"] = 3.0  # stuck cell, 2 local days
    w.loc["2024-07-12 17:00":"2024-07-12 21:00", "poa_wm2"] = np.nan  # a short gap
    hour = (w.index.hour.to_numpy() - 7) % 24  # local standard time (UTC-7)
    w["t_amb_c"] = 24.0 + 4.0 * np.sin(2 * np.pi * (hour - 9) / 24)  # reads ~8 C high
    w.loc["2024-06-29 12:00":"2024-07-12 20:00", "t_amb_c"] = 27.0  # stuck ambient sensor
    return w, power


def _load(eng, w, power, lo, hi, first: bool) -> None:
    m = (w.index >= lo) & (w.index < hi)
    ts = w.index[m].as_unit("s").asi8
    with eng.begin() as conn:
        if first:
            add_site(conn, "s1", timezone="America/Denver", latitude_deg=LAT,
                     longitude_deg=LON, altitude_m=ALT, tilt_deg=TILT, azimuth_deg=AZ)
            add_sensor(conn, "s1", "poa1", "poa_wm2", instrument="reference_cell")
            add_sensor(conn, "s1", "tmod1", "t_module_c")
            add_sensor(conn, "s1", "tamb1", "t_amb_c")
            for dev in power:
                add_inverter(conn, "s1", dev, poa_sensor_id="poa1", t_module_sensor_id="tmod1",
                             p_dc_kwp=120.0 if dev == "inv6" else 100.0, p_ac_max_kw=100.0,
                             gamma_pmp_per_c=-0.0035)
        chans = {(r.device_id, r.quantity): r.channel_id for r in conn.execute(
            sa.select(schema.device.c.device_id, schema.channel.c.quantity,
                      schema.channel.c.channel_id).join(
                schema.channel, schema.channel.c.device_pk == schema.device.c.device_pk))}
        add_readings(conn, chans[("poa1", "poa_wm2")], ts, w["poa_wm2"][m])
        add_readings(conn, chans[("tmod1", "t_module_c")], ts, w["t_module_c"][m])
        add_readings(conn, chans[("tamb1", "t_amb_c")], ts, w["t_amb_c"][m])
        for dev, p in power.items():
            add_readings(conn, chans[(dev, "p_ac_kw")], ts, p[m])


def _table(eng) -> pd.DataFrame:
    fl = read_flags(eng, "s1")
    fl["details"] = [json.loads(d) if d else None for d in fl.pop("details_json")]
    fl = fl.drop(columns=["flag_id"])
    key = ["kind", "device_id", "start_s", "end_s"]
    return fl.assign(device_id=fl["device_id"].fillna("")).sort_values(key).reset_index(drop=True)


def _full_then_new_week(eng) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Load the history up to BOUNDARY, compute it whole, then load the rest and compute
    the daily table and the flags incrementally; the flags table after each step."""
    w, power = _site_data()
    _load(eng, w, power, w.index[0], BOUNDARY, first=True)
    recompute_all(eng, "s1")
    run_flags(eng, "s1", full=True)
    before = _table(eng)
    _load(eng, w, power, BOUNDARY, w.index[-1] + pd.Timedelta("1h"), first=False)
    recompute_range(eng, "s1", _s(BOUNDARY), int(w.index[-1].value // 10**9))
    run_flags(eng, "s1", full=False, since_s=_s(BOUNDARY))
    return before, _table(eng)


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    eng = make_store(tmp_path_factory.mktemp("flags_incremental"))
    before, incremental = _full_then_new_week(eng)
    with eng.connect() as conn:
        comps = conn.execute(sa.select(schema.computation.c.scope,
                                       schema.computation.c.params_json).where(
            schema.computation.c.kind == "flags").order_by(
            schema.computation.c.computation_id)).all()
    run_flags(eng, "s1", full=True)
    return before, incremental, _table(eng), [c[0] for c in comps], eng, [
        json.loads(c[1])["window"]["daily_read"] for c in comps]


def test_incremental_run_used_a_window(runs):
    _before, _inc, _full, scopes, _eng, reads = runs
    assert scopes[0] == "full"
    # the cut is the start of the local month two days before the new week, 2024-07-01 00:00
    # local standard time (UTC-7), moved back to the month start of the module sensor's flat
    # line still open at it (the ambient sensor, from 2024-06-29): 2024-06-01 00:00 local = 07:00 UTC
    assert scopes[1] == "window from 2024-06-01 07:00 UTC"
    # the daily rows before the cut came from the flags' packed copy (store v9), written by
    # the full run: 31 days of May for each of the 6 inverters; June on from the table
    assert reads[0]["packed_days"] == 0 and reads[1]["packed_days"] == 6 * 31
    assert reads[1]["inverters_whole"] == 0 and reads[0]["rows_read"] == 6 * 70
    assert reads[1]["rows_read"] == 6 * 46  # 2024-06-01 .. 07-16 (local days)


def test_incremental_flags_equal_full_recompute(runs):
    _before, inc, full, _scopes, _eng, _reads = runs
    cols = ["kind", "device_id", "start_s", "end_s", "severity"]
    assert inc[cols].to_dict("records") == full[cols].to_dict("records")
    np.testing.assert_allclose(inc["lost_kwh"].to_numpy(float), full["lost_kwh"].to_numpy(float),
                               rtol=1e-9, equal_nan=True)
    assert inc["details"].tolist() == full["details"].tolist()


def test_boundary_events_are_merged_not_split(runs):
    before, _inc, full, _scopes, _eng, _reads = runs
    b = _s(BOUNDARY)
    out = full[(full["kind"] == "outage") & (full["device_id"] == "inv2")]
    # one outage from two days before the boundary to a day after (±1 h for the sunny-gate
    # edges), not one piece on each side
    assert len(out) == 1
    assert out.iloc[0]["start_s"] < b < out.iloc[0]["end_s"]
    assert out.iloc[0]["end_s"] - out.iloc[0]["start_s"] >= 2.5 * 86400
    # before the new week the same outage was open at the end of the data
    old = before[(before["kind"] == "outage") & (before["device_id"] == "inv2")]
    assert len(old) == 1 and old.iloc[0]["details"]["ongoing"]
    assert old.iloc[0]["lost_kwh"] < out.iloc[0]["lost_kwh"]
    # the lost string's underperformance starts in the old data and runs into the new week
    up = full[(full["kind"] == "underperformance") & (full["device_id"] == "inv3")]
    assert len(up) == 1 and up.iloc[0]["start_s"] < b < up.iloc[0]["end_s"]
    assert (full["kind"] == "stopped_reporting").any()


def test_sensor_faults_across_the_boundary(runs):
    """The sensor events that straddle the cut or the boundary are each one event, equal to
    the full recompute's (checked by the equality test), and the incremental run kept the
    sensors' day judgements (it read them from the cut's look-back only)."""
    _before, inc, full, _scopes, eng, _reads = runs
    b = _s(BOUNDARY)

    def one(kind, dev, reason=None):
        f = full[(full["kind"] == kind) & (full["device_id"] == dev)]
        if reason is not None:
            f = f[[d.get("reason") == reason for d in f["details"]]]
        return f

    flat = one("sensor_flatline", "tamb1")
    assert len(flat) == 1 and flat.iloc[0]["start_s"] < _s("2024-07-01 07:00") < b \
        < flat.iloc[0]["end_s"]
    cell = one("sensor_implausible", "poa1", "stuck")
    assert len(cell) == 1 and cell.iloc[0]["details"]["n_days_excluded"] == 2
    amb = one("sensor_implausible", "tamb1", "ambient_offset")
    # over the module sensor's whole period, from its first reading
    assert len(amb) == 1 and amb.iloc[0]["start_s"] == _s("2024-05-01 07:00") \
        and amb.iloc[0]["end_s"] > b
    # both runs give the same (equality test), and the store holds the sensors' days
    from db.flags import read_flag_days
    days = read_flag_days(eng, "s1")
    poa = days[days["device_id"] == "poa1"]
    assert poa["valid_reason"].notna().sum() >= 70
    assert days[days["device_id"] == "tmod1"]["amb_night_c"].notna().sum() >= 70


def test_configuration_change_makes_the_next_run_full(runs):
    """Stored flags were made with the old inverter ratings and sensors: recompute all."""
    eng = runs[4]
    with eng.begin() as conn:
        conn.execute(schema.site.update().values(config_sha256="1" * 64))
    run_flags(eng, "s1", full=False)
    with eng.connect() as conn:
        scope = conn.execute(sa.select(schema.computation.c.scope).where(
            schema.computation.c.kind == "flags").order_by(
            schema.computation.c.computation_id.desc()).limit(1)).scalar()
    assert scope == "full"


def test_incremental_flags_equal_full_recompute_on_postgres(pg_engine):
    """The same week on PostgreSQL: the sensors' stored days (BYTEA samples, booleans) and
    parts read back as on SQLite, and the window gives the full recompute's flags."""
    eng = pg_engine
    _before, inc = _full_then_new_week(eng)
    with eng.connect() as conn:
        scope = conn.execute(sa.select(schema.computation.c.scope).where(
            schema.computation.c.kind == "flags").order_by(
            schema.computation.c.computation_id.desc()).limit(1)).scalar()
    assert scope.startswith("window")
    run_flags(eng, "s1", full=True)
    full = _table(eng)
    cols = ["kind", "device_id", "start_s", "end_s", "severity"]
    assert inc[cols].to_dict("records") == full[cols].to_dict("records")
    assert inc["details"].tolist() == full["details"].tolist()
    assert ((full["kind"] == "sensor_implausible") & (full["device_id"] == "tamb1")).any()
