"""The readings write path: bulk upsert of (channel_id, ts_s, value, interval_s) in the caller's transaction.

This is the one measured fast path with a per-dialect branch (measured by
tests/bench/bench_ingest.py); everything else in ``db/`` is SQLAlchemy Core.

* SQLite: one prepared multi-row statement (250 rows per ``VALUES``) through the raw DBAPI
  connection, ``executemany`` over rows in key order. ``INSERT`` when nothing stored overlaps the batch, otherwise
  ``INSERT ... ON CONFLICT(channel_id, ts_s) DO UPDATE`` (the last file loaded wins).
* PostgreSQL (psycopg 3): ``COPY`` straight into ``reading`` when nothing overlaps, else
  ``COPY`` into a temporary table and ``INSERT ... SELECT ... ON CONFLICT DO UPDATE``.

Each reading carries the interval length ``interval_s`` that ingest recorded for its row (the
logger's interval at that time: a channel that changes from 15 to 5 minutes keeps 900 on its
old rows and 300 on its new ones). On SQLite the interval is written as a literal of the
prepared statement, one statement per distinct interval of the batch, so a row still binds
three parameters.

Keys are encoded as one int64, ``channel_id * 2**34 + ts_s`` (:func:`key`), to compare incoming
readings with stored ones by ``numpy.searchsorted``.
"""

from __future__ import annotations

import numpy as np
import sqlalchemy as sa

from db import schema

TS_BITS = 34  # ts_s < 2**34 s: until the year 2514
WRITE_SLICE = 100_000  # a multiple of ROWS_PER_STATEMENT
#: Rows per INSERT statement on SQLite: one prepared multi-row VALUES statement run by
#: executemany is ~2.5x faster than one row per statement (measured, tests/bench); 250 rows
#: x 3 parameters stays far below SQLite's 32766 host-parameter limit.
ROWS_PER_STATEMENT = 250
#: Intervals of 2**20 s (12 days) or more are not logging intervals: stored as unknown (NULL).
#: db.timeseries packs ts_s and interval_s into one integer below this bound.
MAX_INTERVAL_S = 1 << 20


def _sqlite_insert(batch_id: int, rows: int, upsert: bool, interval_s: int | None = None) -> str:
    iv = "NULL" if interval_s is None else str(int(interval_s))
    values = ", ".join([f"(?, ?, ?, {batch_id}, {iv})"] * rows)
    sql = f"INSERT INTO reading (channel_id, ts_s, value, batch_id, interval_s) VALUES {values}"
    if upsert:
        sql += (" ON CONFLICT(channel_id, ts_s) DO UPDATE SET value = excluded.value, "
                "batch_id = excluded.batch_id, interval_s = excluded.interval_s")
    return sql


def key(channel_id: np.ndarray, ts_s: np.ndarray) -> np.ndarray:
    return (channel_id.astype(np.int64) << TS_BITS) + ts_s.astype(np.int64)


def stored_range(conn: sa.Connection, channel_ids: list[int]) -> dict[int, tuple[int, int]]:
    """``{channel_id: (min ts_s, max ts_s)}`` of stored readings (two index seeks per channel)."""
    r = schema.reading
    out = {}
    lo_q = sa.select(sa.func.min(r.c.ts_s)).where(r.c.channel_id == sa.bindparam("ch"))
    hi_q = sa.select(sa.func.max(r.c.ts_s)).where(r.c.channel_id == sa.bindparam("ch"))
    for ch in channel_ids:
        lo = conn.execute(lo_q, {"ch": ch}).scalar()
        if lo is not None:
            out[ch] = (int(lo), int(conn.execute(hi_q, {"ch": ch}).scalar()))
    return out


def stored_values(conn: sa.Connection, channel_ids: list[int], lo: int, hi: int
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Stored readings of ``channel_ids`` with ``lo <= ts_s <= hi``: sorted keys, values, batch ids."""
    r = schema.reading
    rows = conn.execute(sa.select(r.c.channel_id, r.c.ts_s, r.c.value, r.c.batch_id).where(
        r.c.channel_id.in_([int(c) for c in channel_ids]), r.c.ts_s.between(int(lo), int(hi)))).all()
    if not rows:
        e = np.empty(0, dtype=np.int64)
        return e, np.empty(0), e
    a = np.array([(x[0], x[1], x[3]) for x in rows], dtype=np.int64)
    v = np.array([x[2] for x in rows], dtype=np.float64)
    k = key(a[:, 0], a[:, 1])
    order = np.argsort(k, kind="stable")
    return k[order], v[order], a[order, 2]


def previous_reading(conn: sa.Connection, channel_id: int, before_s: int) -> tuple[int, float] | None:
    """The last stored ``(ts_s, value)`` of a channel strictly before ``before_s``, or None."""
    r = schema.reading
    row = conn.execute(sa.select(r.c.ts_s, r.c.value).where(
        r.c.channel_id == channel_id, r.c.ts_s < before_s).order_by(r.c.ts_s.desc()).limit(1)).first()
    return (int(row[0]), float(row[1])) if row else None


def next_reading(conn: sa.Connection, channel_id: int, after_s: int) -> tuple[int, float] | None:
    """The first stored ``(ts_s, value)`` of a channel strictly after ``after_s``, or None."""
    r = schema.reading
    row = conn.execute(sa.select(r.c.ts_s, r.c.value).where(
        r.c.channel_id == channel_id, r.c.ts_s > after_s).order_by(r.c.ts_s).limit(1)).first()
    return (int(row[0]), float(row[1])) if row else None


def has_reading(conn: sa.Connection, channel_id: int, ts_s: int) -> bool:
    """Whether a reading is stored for ``(channel_id, ts_s)``."""
    r = schema.reading
    return conn.execute(sa.select(r.c.ts_s).where(
        r.c.channel_id == channel_id, r.c.ts_s == ts_s)).first() is not None


def write_readings(conn: sa.Connection, channel_id: np.ndarray, ts_s: np.ndarray,
                   value: np.ndarray, batch_id: int, *, upsert: bool,
                   interval_s: np.ndarray | None = None) -> int:
    """Write readings in the caller's transaction; return how many were written.

    ``interval_s`` is each reading's interval length [s] as recorded at ingest (None or NaN:
    unknown, stored as NULL)."""
    n = len(ts_s)
    if n == 0:
        return 0
    batch_id = int(batch_id)
    iv = (np.full(n, -1, dtype=np.int64) if interval_s is None else
          np.where(np.isfinite(interval_s), np.asarray(interval_s, dtype=float), -1)
          .round().astype(np.int64))
    iv[(iv <= 0) | (iv >= MAX_INTERVAL_S)] = -1  # unknown or implausible: stored as NULL
    if conn.dialect.name == "postgresql":
        _write_pg(conn, channel_id, ts_s, value, batch_id, upsert, iv)
        return n
    if conn.dialect.name == "sqlite":
        uniq = np.unique(iv)
        for u in uniq:  # one prepared statement per distinct interval (usually one)
            sel = slice(None) if len(uniq) == 1 else iv == u
            _write_sqlite(conn, channel_id[sel], ts_s[sel], value[sel], batch_id, upsert,
                          None if u < 0 else int(u))
        return n
    # any other dialect: SQLAlchemy Core, slower but neutral
    r = schema.reading
    rows = [dict(channel_id=c, ts_s=t, value=v, batch_id=batch_id, interval_s=None if i < 0 else i)
            for c, t, v, i in zip(channel_id.tolist(), ts_s.tolist(), value.tolist(), iv.tolist(),
                                  strict=True)]
    keys = set(zip(channel_id.tolist(), ts_s.tolist(), strict=True))
    if upsert:
        for c, t in keys:
            conn.execute(r.delete().where(r.c.channel_id == c, r.c.ts_s == t))
    conn.execute(r.insert(), rows)
    return n


def _write_sqlite(conn: sa.Connection, channel_id, ts_s, value, batch_id: int, upsert: bool,
                  interval_s: int | None) -> None:
    n = len(ts_s)
    raw = conn.connection.driver_connection
    cur = raw.cursor()
    multi = _sqlite_insert(batch_id, ROWS_PER_STATEMENT, upsert, interval_s)
    single = _sqlite_insert(batch_id, 1, upsert, interval_s)
    for a in range(0, n, WRITE_SLICE):  # slices bound the Python objects alive at once
        b = min(n, a + WRITE_SLICE)
        flat = np.empty(3 * (b - a), dtype=object)
        flat[0::3] = channel_id[a:b].tolist()
        flat[1::3] = ts_s[a:b].tolist()
        flat[2::3] = value[a:b].tolist()
        m = ((b - a) // ROWS_PER_STATEMENT) * ROWS_PER_STATEMENT
        if m:
            cur.executemany(multi, flat[:3 * m].reshape(-1, 3 * ROWS_PER_STATEMENT).tolist())
        if m < b - a:
            cur.executemany(single, flat[3 * m:].reshape(-1, 3).tolist())
    cur.close()


def _write_pg(conn: sa.Connection, channel_id, ts_s, value, batch_id: int, upsert: bool,
              iv: np.ndarray) -> None:
    raw = conn.connection.driver_connection
    # COPY text: repr(float) is the shortest text that reads back to the same double; \N = NULL
    tail = f"\t{batch_id}\t"
    iv_text = [str(i) if i >= 0 else "\\N" for i in iv.tolist()]
    data = "".join(f"{c}\t{t}\t{v!r}{tail}{i}\n" for c, t, v, i in zip(
        channel_id.tolist(), ts_s.tolist(), value.tolist(), iv_text, strict=True))
    cols = "(channel_id, ts_s, value, batch_id, interval_s)"
    with raw.cursor() as cur:
        if not upsert:
            with cur.copy(f"COPY reading {cols} FROM STDIN") as cp:
                cp.write(data)
            return
        cur.execute("CREATE TEMP TABLE IF NOT EXISTS reading_in (channel_id integer, "
                    "ts_s bigint, value double precision, batch_id integer, interval_s integer) "
                    "ON COMMIT DROP")
        with cur.copy(f"COPY reading_in {cols} FROM STDIN") as cp:
            cp.write(data)
        cur.execute(f"INSERT INTO reading {cols} "
                    f"SELECT channel_id, ts_s, value, batch_id, interval_s FROM reading_in "
                    "ON CONFLICT (channel_id, ts_s) DO UPDATE SET value = excluded.value, "
                    "batch_id = excluded.batch_id, interval_s = excluded.interval_s")
        cur.execute("TRUNCATE reading_in")
