"""The readings store (schema v6): value-level upsert into day rows (last wins), stored ranges and
lookups, the packed layout (db.daypack) returning every value exactly."""

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
    """Every stored reading as (ts_s, value, batch_id) in key order."""
    with engine.connect() as conn:
        ch = conn.execute(sa.select(schema.reading_day.c.channel_id).distinct()).scalars().all()
        got = readings.read_many(conn, ch, batches=True)
    return list(zip(got["ts_s"].tolist(), got["value"].tolist(), got["batch_id"].tolist(),
                    strict=True))


def day_rows(engine):
    with engine.connect() as conn:
        return conn.execute(sa.select(schema.reading_day).order_by("channel_id", "day_s")).all()


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
    assert rows(engine) == [(0, 1.0, b1), (900, 20.0, b2), (1800, 3.0, b1), (2700, 4.0, b2)]
    # one row for the one UTC day, its readings from two batches kept per reading
    (day,) = day_rows(engine)
    assert (day.day_s, day.n, day.batch_id, day.interval_s) == (0, 4, b2, None)
    assert day.runs_blob is not None


def test_a_later_file_merges_into_the_stored_day(engine):
    """Non-overlapping files sharing a UTC day (morning, then afternoon) end in one day row,
    whatever ``upsert`` says; a file spanning midnight makes two rows."""
    ch = _chan(engine)
    b1, b2 = _batches(engine, 2)
    write(engine, ch, [36_000, 36_900], [1.5, 2.5], b1, upsert=False)
    write(engine, ch, [50_400, 86_100, 86_400], [3.5, 4.5, 5.5], b2, upsert=False)
    assert [(r.day_s, r.n) for r in day_rows(engine)] == [(0, 4), (86_400, 1)]
    assert rows(engine) == [(36_000, 1.5, b1), (36_900, 2.5, b1), (50_400, 3.5, b2),
                            (86_100, 4.5, b2), (86_400, 5.5, b2)]


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


def test_previous_next_and_has_reading_across_days(engine):
    ch = _chan(engine)
    (b,) = _batches(engine, 1)
    write(engine, ch, [3600, 86_000, 3 * 86_400 + 600], [1, 2, 3], b, upsert=False)
    with engine.connect() as conn:
        assert readings.previous_reading(conn, ch, 3 * 86_400 + 600) == (86_000, 2.0)
        assert readings.previous_reading(conn, ch, 86_000) == (3600, 1.0)
        assert readings.next_reading(conn, ch, 86_000) == (3 * 86_400 + 600, 3.0)
        assert readings.next_reading(conn, ch, 3600) == (86_000, 2.0)
        assert readings.next_reading(conn, ch, 3 * 86_400 + 600) is None
        assert readings.has_reading(conn, ch, 86_000)
        assert not readings.has_reading(conn, ch, 86_100)
        assert readings.count_readings(conn, [ch]) == 3


def test_each_reading_keeps_its_interval(engine):
    """A channel that changes from 15 to 5 minutes mid-day keeps 900 s on its old readings and
    300 s on its new ones; unknown (NaN) stays unknown (schema v4 semantics)."""
    ch = _chan(engine)
    (b,) = _batches(engine, 1)
    ts = np.array([0, 900, 1800, 2100, 2400, 2700])
    iv = np.array([900, 900, 900, 300, 300, np.nan])
    with engine.begin() as conn:
        readings.write_readings(conn, np.full(6, ch), ts, np.arange(6.0), b, upsert=False,
                                interval_s=iv)
    with engine.connect() as conn:
        got = readings.read_rows(conn, ch)
    assert_array_equal(got["interval_s"], iv)


@pytest.mark.parametrize("values", [
    np.round(np.linspace(-50, 400, 288), 2),  # 2 decimals: int16 / int32 scaled integers
    np.round(np.linspace(0, 1.2e6, 288), 3),  # a lifetime energy counter [kWh], 1 Wh resolution
    np.linspace(0, 1, 288) ** 0.5,  # full doubles: kept as doubles
    np.array([0.1, 0.2, 0.3, 1e-9, 123456.789, 2.0 ** 40, -0.0] * 41 + [5e-324]),
    # ingest's unit conversions of logger decimals (W -> kW, °F -> °C, km/h -> m/s)
    np.round(np.linspace(0, 90_000, 288), 1) * 1e-3,
    np.round(np.linspace(20, 100, 288), 1) * (5.0 / 9.0) + (-32.0 * 5.0 / 9.0),
    np.round(np.linspace(0, 50, 288), 1) * (1.0 / 3.6),
])
def test_every_value_comes_back_exactly(engine, values):
    """Nothing is rounded: a reading reads back bit for bit (only -0.0 becomes 0.0)."""
    ch = _chan(engine)
    (b,) = _batches(engine, 1)
    ts = np.arange(values.size) * 300
    write(engine, ch, ts, values, b, upsert=False)
    with engine.connect() as conn:
        got = readings.read_rows(conn, ch)
    assert_array_equal(got["ts_s"], ts)
    assert (got["value"] == values).all()


def test_packed_sizes_by_hand():
    """Bytes of one day row's packed parts, computed by hand from the layout (db.daypack)."""
    from db import daypack
    ts = np.arange(288) * 300  # a complete 5-min day: the timestamps are a 9-byte run header
    p = daypack.pack(np.ones(288), ts, np.round(np.linspace(0, 300, 288), 2), np.full(288, 300),
                     np.ones(288))
    assert len(p.ts_blob[0]) == 9
    assert len(p.value_blob[0]) == 2 + 288 * 2  # 300.00 -> 30000 < 2**15: int16
    p = daypack.pack(np.ones(288), ts, np.round(np.linspace(0, 400, 288), 2), np.full(288, 300),
                     np.ones(288))
    assert len(p.value_blob[0]) == 2 + 288 * 4  # 400.00 -> 40000 >= 2**15: int32
    # power logged in W with one decimal, stored in kW (ingest multiplies by 1e-3): kept as
    # the logger's decimals, 900000.0 -> 9000000 needs int32
    kw = np.round(np.linspace(0, 90_000, 288), 1) * 1e-3
    p = daypack.pack(np.ones(288), ts, kw, np.full(288, 300), np.ones(288))
    assert len(p.value_blob[0]) == 2 + 288 * 4 and p.value_blob[0][0] == daypack.V_I32
    gaps = ts[(ts < 20_000) | (ts > 70_000)]  # a logger silent mid-day: grid mask of 286 bits
    p = daypack.pack(np.ones(gaps.size), gaps, np.zeros(gaps.size), np.zeros(gaps.size),
                     np.ones(gaps.size))
    assert len(p.ts_blob[0]) == 9 + 36  # ceil(286 / 8) = 36 bytes
    assert len(p.value_blob[0]) == 2 + gaps.size * 2 and p.interval_s == [None]


def test_reading_day_is_one_row_per_channel_and_utc_day(engine):
    ch = _chan(engine)
    (b,) = _batches(engine, 1)
    ts = np.arange(3 * 288) * 300 + 86_400
    write(engine, ch, ts, np.ones(ts.size), b, upsert=False)
    got = day_rows(engine)
    assert [(r.day_s, r.n, r.interval_s) for r in got] == [
        (86_400, 288, None), (2 * 86_400, 288, None), (3 * 86_400, 288, None)]


def test_multi_day_upsert_roundtrip(engine):
    # 1234 rows over 5 days, then an upsert of every other one from another batch
    ch = _chan(engine)
    b1, b2 = _batches(engine, 2)
    ts = np.arange(1234) * 300
    write(engine, ch, ts, ts / 300.0, b1, upsert=False)
    write(engine, ch, ts[::2], -1.0 * np.ones(617), b2, upsert=True)
    got = rows(engine)
    assert len(got) == 1234
    assert [r[1] for r in got[:4]] == [-1.0, 1.0, -1.0, 3.0]
    assert sum(r[2] == b2 for r in got) == 617


def test_pack_roundtrip_on_seeded_patterns():
    """Complete runs, days with gaps (grid mask), irregular seconds (offsets), one reading
    alone, mixed intervals and batches within a day: decode(encode(x)) == x exactly (the
    input is the reference; seed fixed)."""
    from db import daypack
    rng = np.random.default_rng(42)
    for _ in range(60):
        chans, stamps = [], []
        for c in range(1, int(rng.integers(2, 5))):
            kind = int(rng.integers(0, 4))
            if kind == 0:
                t = np.arange(int(rng.integers(1, 2000))) * 300 + int(rng.integers(0, 3 * 86_400))
            elif kind == 1:
                t = np.arange(int(rng.integers(2, 3000))) * 900
                t = t[rng.random(t.size) > 0.3]
            elif kind == 2:
                t = np.unique(rng.integers(0, 5 * 86_400, int(rng.integers(1, 500))))
            else:
                t = np.array([int(rng.integers(0, 2 ** 33))])
            t = t if t.size else np.array([7])
            chans.append(np.full(t.size, c))
            stamps.append(t)
        ch, ts = np.concatenate(chans), np.concatenate(stamps)
        v = [np.round(rng.normal(0, 100, ts.size), 2), rng.normal(0, 1e6, ts.size),
             np.round(rng.normal(0, 1e5, ts.size), 3)][int(rng.integers(0, 3))]
        iv = np.where(rng.random(ts.size) < 0.05, 0, 300)
        bt = np.where(rng.random(ts.size) < 0.05, 7, 3)
        p = daypack.pack(ch, ts, v, iv, bt)
        cols = list(zip(*p.rows(), strict=True))
        got = daypack.unpack(*cols[1:], batches=True)
        assert_array_equal(np.repeat(cols[0], cols[2]), ch)
        assert_array_equal(got["ts_s"], ts)
        assert (got["value"] == v).all()
        assert_array_equal(np.nan_to_num(got["interval_s"]), iv)
        assert_array_equal(got["batch_id"], bt)
