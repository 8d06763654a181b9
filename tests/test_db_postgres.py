"""The same ingest round trip on PostgreSQL (COPY fast path, temp-table upsert, Core queries).

Expected values as in test_ingest_load.py (read off tests/data, SI conversions, zoneinfo).
"""

import datetime as dt
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest

from db import readings
from db.ingest_log import ingest_log, rejected_rows, site_summary
from ingest.config import load_site_config
from ingest.load import ingest_paths
from tests.helpers_store import stored_readings

pytestmark = pytest.mark.postgres
DATA = Path(__file__).resolve().parent / "data"


def utc(y, mo, d, h, mi):
    return int(dt.datetime(y, mo, d, h, mi, tzinfo=dt.UTC).timestamp())


def series(engine, device, quantity):
    df = stored_readings(engine, None, device, quantity)
    return dict(zip(df.ts_s.tolist(), df.value.tolist(), strict=True))


def test_round_trip_on_postgres(pg_engine, tmp_path):
    cfg = load_site_config(DATA / "dialects.toml")
    names = ["d_semicolon_latin1.csv", "d_dst_autumn.csv", "d_counter.csv", "d_dst_spring.csv"]
    res = ingest_paths(pg_engine, cfg, [DATA / n for n in names])
    assert [r.status for r in res] == ["loaded"] * 4, [r.message for r in res]
    t = [utc(2023, 6, 2, 10, m) for m in (0, 15, 30, 45)]
    assert series(pg_engine, "INV1", "p_ac_kw")[t[1]] == 52.0005  # 52000,5 W
    mad = ZoneInfo("Europe/Madrid")
    second_0200 = int(dt.datetime(2023, 10, 29, 2, 0, tzinfo=mad, fold=1).timestamp()) - 1800
    assert series(pg_engine, "INV1", "p_ac_kw")[second_0200] == 4.0
    assert series(pg_engine, "INV1", "e_ac_kwh") == pytest.approx(
        {utc(2023, 6, 4, 10, 0): 5.0, utc(2023, 6, 4, 10, 15): 7.0, utc(2023, 6, 4, 10, 30): 8.0,
         utc(2023, 6, 4, 11, 0): 5.0})
    assert rejected_rows(pg_engine, "dialects").line_no.tolist() == [4]

    # unchanged file: nothing happens
    (again,) = ingest_paths(pg_engine, cfg, [DATA / "d_counter.csv"])
    assert again.status == "unchanged"

    # overlapping export: temp-table upsert, conflicts counted, last wins
    f = tmp_path / "d_semicolon_x.csv"
    f.write_bytes((DATA / "d_semicolon_latin1.csv").read_bytes().replace(b"54000;54000,0", b"54000;99000,0"))
    (over,) = ingest_paths(pg_engine, cfg, [f])
    assert over.counts["values_conflict"] == 1 and over.counts["values_duplicate"] == 13
    assert series(pg_engine, "INV2", "p_ac_kw")[t[3]] == 99.0

    # a failing file leaves the store as it was
    with pg_engine.connect() as conn:
        before = readings.count_readings(conn)
    bad = tmp_path / "d_dst_bad.csv"
    bad.write_text("Time,INV1_PAC,Extra\n2023-07-01 10:00,1,2\n")
    (failed,) = ingest_paths(pg_engine, cfg, [bad])
    assert failed.status == "failed" and "unmapped columns: 'Extra'" in failed.message
    with pg_engine.connect() as conn:
        assert readings.count_readings(conn) == before
    assert ingest_log(pg_engine, "dialects").status.tolist()[0] == "failed"
    s = site_summary(pg_engine).iloc[0]
    assert s.batches_loaded == 5 and s.batches_failed == 1 and s.batches_unchanged == 1
