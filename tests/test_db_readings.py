"""The bulk write path: insert, upsert (last wins), stored ranges and lookups, WITHOUT ROWID."""

import sqlite3
from pathlib import Path

import numpy as np
import pytest
import sqlalchemy as sa
from numpy.testing import assert_array_equal

from db import readings, schema
from db.registry import register_site
from ingest.config import load_site_config

DATA = Path(__file__).resolve().parent / "data"


def _chan(engine):
    cfg = load_site_config(DATA / "site_basic.toml")
    return register_site(engine, cfg)[("INV1", "p_ac_kw")]


def rows(engine):
    with engine.connect() as conn:
        return conn.execute(sa.select(schema.reading).order_by("channel_id", "ts_s")).all()


def write(engine, ch, ts, v, batch, upsert):
    with engine.begin() as conn:
        readings.write_readings(conn, np.full(len(ts), ch), np.asarray(ts), np.asarray(v, float),
                                batch, upsert=upsert)


def _batches(engine, n):
    from db.ingest_log import start_batch
    with engine.begin() as conn:
        return [start_batch(conn, site_id="testsite", source_name="s", file_name=f"f{i}",
                            file_path="/x", sha256=str(i), size_bytes=1) for i in range(n)]


def test_insert_then_upsert_last_wins(engine):
    ch = _chan(engine)
    b1, b2 = _batches(engine, 2)
    write(engine, ch, [0, 900, 1800], [1, 2, 3], b1, upsert=False)
    write(engine, ch, [900, 2700], [20, 4], b2, upsert=True)
    assert [(r.ts_s, r.value, r.batch_id) for r in rows(engine)] == [
        (0, 1.0, b1), (900, 20.0, b2), (1800, 3.0, b1), (2700, 4.0, b2)]


def test_plain_insert_refuses_existing_key(engine):
    ch = _chan(engine)
    (b,) = _batches(engine, 1)
    write(engine, ch, [0], [1], b, upsert=False)
    with pytest.raises((sa.exc.IntegrityError, sqlite3.IntegrityError)):
        write(engine, ch, [0], [2], b, upsert=False)


def test_stored_range_values_previous(engine):
    ch = _chan(engine)
    (b,) = _batches(engine, 1)
    write(engine, ch, [0, 900, 1800], [1, 2, 3], b, upsert=False)
    with engine.connect() as conn:
        assert readings.stored_range(conn, [ch, 9999]) == {ch: (0, 1800)}
        k, v, bb = readings.stored_values(conn, [ch], 900, 1800)
        assert_array_equal(k, readings.key(np.array([ch, ch]), np.array([900, 1800])))
        assert v.tolist() == [2.0, 3.0] and bb.tolist() == [b, b]
        assert readings.previous_reading(conn, ch, 1800) == (900, 2.0)
        assert readings.previous_reading(conn, ch, 0) is None


def test_key_roundtrip():
    ch, ts = np.array([1, 7, 123456]), np.array([0, 1_700_000_000, 2**34 - 1])
    k = readings.key(ch, ts)
    assert_array_equal(k >> readings.TS_BITS, ch)
    assert_array_equal(k & ((1 << readings.TS_BITS) - 1), ts)
    assert np.all(np.diff(readings.key(np.array([1, 1, 2]), np.array([5, 9, 0]))) > 0)  # key order


def test_reading_table_is_without_rowid(engine):
    with engine.connect() as conn:
        sql = conn.exec_driver_sql("SELECT sql FROM sqlite_master WHERE name = 'reading'").scalar()
    assert "WITHOUT ROWID" in sql.upper()


def test_multi_row_statements_with_remainder_roundtrip(engine):
    # 1234 rows = 4 statements of 250 rows + 234 single-row inserts; then an upsert of half
    ch = _chan(engine)
    b1, b2 = _batches(engine, 2)
    ts = np.arange(1234) * 300
    write(engine, ch, ts, ts / 300.0, b1, upsert=False)
    write(engine, ch, ts[::2], -1.0 * np.ones(617), b2, upsert=True)
    got = rows(engine)
    assert len(got) == 1234
    assert [r.value for r in got[:4]] == [-1.0, 1.0, -1.0, 3.0]
    assert sum(r.batch_id == b2 for r in got) == 617
