"""The flags job's packed copy of daily columns (store v9, issue #16).

The reference is the source itself: a cache must give back exactly what the table it copies
holds (common practice for any cache), whatever happened to the table since the pack was
written. Each check compares :func:`db.dailypack.read_daily_inputs` with
:func:`db.daily.daily_table` of the same store, value for value and type for type (days as
datetime64 midnights on both sides), after
the ways a daily table changes: days recomputed before the boundary, a day deleted, a new
inverter, a pack of other columns.
"""

import datetime as dt

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa

from db import schema
from db.computations import begin_computation
from db.daily import daily_table, write_daily
from db.dailypack import read_daily_inputs, write_daily_pack
from tests.helpers_store import add_inverter, add_sensor, add_site, make_store

COLS = ("day_valid", "pi", "e_exp_kwh", "h_poa_kwhm2", "e_ac_kwh", "e_exp_valid_kwh",
        "avail_time", "n_intervals")
D0 = dt.date(2024, 3, 1)
B = (dt.date(2024, 3, 25) - dt.date(1970, 1, 1)).days  # boundary: day numbers before it packed


def _rows(devs, first: int, n: int, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    out = []
    for dev in devs:
        for k in range(first, first + n):
            pi = float(rng.normal(0.95, 0.02))
            out.append(dict(device_id=dev, day=D0 + dt.timedelta(days=k), n_intervals=96,
                            n_daylight=48, n_valid=40, e_ac_kwh=float(rng.uniform(100, 600)),
                            h_poa_kwhm2=float(rng.uniform(1, 7)), e_exp_kwh=float(rng.uniform(100, 650)),
                            e_exp_valid_kwh=None if k % 7 == 3 else float(rng.uniform(90, 600)),
                            pi=None if k % 11 == 5 else pi, day_valid=bool(k % 5),
                            avail_time=float(rng.uniform(0.9, 1.0))))
    return pd.DataFrame(out)


def _comp(eng) -> int:
    with eng.begin() as conn:
        return begin_computation(conn, "s1", "daily", {}, software_version="test")


def _store(eng, devs=("inv1", "inv2", "inv3")) -> None:
    with eng.begin() as conn:
        add_site(conn, "s1")
        add_sensor(conn, "s1", "poa1", "poa_wm2")
        add_sensor(conn, "s1", "tmod1", "t_module_c")
        for dev in (*devs, "inv4"):
            add_inverter(conn, "s1", dev, poa_sensor_id="poa1", t_module_sensor_id="tmod1")
    write_daily(eng, "s1", _rows(devs, 0, 40, seed=1), first_day=D0,
                last_day=D0 + dt.timedelta(days=39), computation_id=_comp(eng))


def _table(eng, cols=COLS) -> pd.DataFrame:
    """The table's rows as the pack reader gives them: by device and day, ``day`` as
    datetime64[ns] midnights and ``computation_id`` numeric (the types it changes, on
    purpose)."""
    t = daily_table(eng, "s1", with_text=False, columns=cols)
    t["day"] = pd.to_datetime(t["day"]).astype("datetime64[ns]")
    t["computation_id"] = pd.to_numeric(t["computation_id"])
    return t.sort_values(["device_id", "day"], key=lambda s: s.astype(str)).reset_index(drop=True)


def _same(got: pd.DataFrame, eng) -> None:
    pd.testing.assert_frame_equal(got, _table(eng), check_exact=True)


def _pack(eng) -> None:
    with eng.begin() as conn:
        write_daily_pack(conn, "s1", daily_table(conn, "s1", with_text=False, columns=COLS),
                         COLS)


def _check_pack_follows_the_table(eng) -> None:
    _store(eng)
    got, info = read_daily_inputs(eng, "s1", COLS, from_day=B)  # no pack yet: the table
    _same(got, eng)
    assert info["packed_days"] == 0 and sorted(info["whole"]) == ["inv1", "inv2", "inv3"]
    _pack(eng)
    got, info = read_daily_inputs(eng, "s1", COLS, from_day=B)
    _same(got, eng)
    assert info["packed_days"] == 3 * 24 and info["whole"] == []
    assert info["rows_read"] == 3 * 16 and info["pack_last_day"] == B + 15
    # new days after the pack, and an inverter new to the table: read from the table
    write_daily(eng, "s1", _rows(["inv1", "inv2", "inv3", "inv4"], 40, 5, seed=2),
                first_day=D0 + dt.timedelta(days=40), last_day=D0 + dt.timedelta(days=44),
                computation_id=_comp(eng))
    got, info = read_daily_inputs(eng, "s1", COLS, from_day=B)
    _same(got, eng)
    assert info["packed_days"] == 3 * 24 and info["whole"] == []
    # days before the boundary recomputed for one inverter (a later file of old data): that
    # inverter is read whole from the table, the others still from the pack
    write_daily(eng, "s1", _rows(["inv2"], 5, 3, seed=3), first_day=D0 + dt.timedelta(days=5),
                last_day=D0 + dt.timedelta(days=7), computation_id=_comp(eng))
    got, info = read_daily_inputs(eng, "s1", COLS, from_day=B)
    _same(got, eng)
    assert info["whole"] == ["inv2"] and info["packed_days"] == 2 * 24
    # a day before the boundary deleted, nothing written in its place
    write_daily(eng, "s1", _rows([], 0, 0, seed=4).reindex(columns=["device_id", "day"]),
                first_day=D0 + dt.timedelta(days=2), last_day=D0 + dt.timedelta(days=2),
                device_ids=["inv3"], computation_id=_comp(eng))
    got, info = read_daily_inputs(eng, "s1", COLS, from_day=B)
    _same(got, eng)
    assert info["whole"] == ["inv2", "inv3"]
    # repacked: everything from the pack again; a pack of other columns is not used
    _pack(eng)
    got, info = read_daily_inputs(eng, "s1", COLS, from_day=B)
    _same(got, eng)
    assert info["whole"] == [] and info["packed_days"] == 3 * 24 - 1
    got, info = read_daily_inputs(eng, "s1", COLS[:3], from_day=B)
    pd.testing.assert_frame_equal(got, _table(eng, COLS[:3]), check_exact=True)
    assert info["packed_days"] == 0


def test_pack_gives_back_the_table_after_each_kind_of_change(tmp_path):
    _check_pack_follows_the_table(make_store(tmp_path))


def test_pack_gives_back_the_table_on_postgres(pg_engine):
    _check_pack_follows_the_table(pg_engine)


def test_without_a_boundary_the_table_is_read_whole(tmp_path):
    eng = make_store(tmp_path)
    _store(eng)
    _pack(eng)
    got, info = read_daily_inputs(eng, "s1", COLS)
    _same(got, eng)
    assert info["packed_days"] == 0 and info["rows_read"] == 3 * 40


def test_pack_refuses_a_day_twice_and_writes_nothing(tmp_path):
    eng = make_store(tmp_path)
    _store(eng)
    frame = daily_table(eng, "s1", with_text=False, columns=COLS)
    with pytest.raises(ValueError, match="twice"):
        with eng.begin() as conn:
            write_daily_pack(conn, "s1", pd.concat([frame, frame.iloc[:1]]), COLS)
    with eng.connect() as conn:
        assert conn.execute(sa.select(sa.func.count()).select_from(
            schema.flag_daily_pack)).scalar() == 0


def test_rows_without_a_computation_are_not_packed_but_read(tmp_path):
    # a row whose computation is unknown (written outside a daily job) could not be checked
    # against the pack later: that inverter is not packed and is read from the table
    eng = make_store(tmp_path)
    _store(eng)
    write_daily(eng, "s1", _rows(["inv3"], 0, 40, seed=5), first_day=D0,
                last_day=D0 + dt.timedelta(days=39), computation_id=None)
    with eng.begin() as conn:
        n = write_daily_pack(conn, "s1", daily_table(conn, "s1", with_text=False, columns=COLS),
                             COLS)
    assert n == 2 * 40
    got, info = read_daily_inputs(eng, "s1", COLS, from_day=B)
    _same(got, eng)
    assert info["whole"] == ["inv3"] and info["packed_days"] == 2 * 24
