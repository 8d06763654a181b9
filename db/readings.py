"""The readings store: every statement on ``reading_day`` (schema v6), writes and reads.

Readings are stored packed, one row per channel and UTC day (:mod:`db.daypack`), but this
module's functions speak readings: ``(channel_id, ts_s, value, interval_s, batch_id)``.

Writing (:func:`write_readings`) still upserts **at the value level**, in the caller's
transaction: the stored rows of the days a batch touches are read (PostgreSQL: ``FOR
UPDATE``), the new readings merged in (a new value replaces a stored one at the same
``ts_s``: the last file loaded wins, with its batch and interval), and the days written back:
new days with one multi-row ``INSERT`` per statement batch (SQLite ``executemany``) or
``COPY ... (FORMAT BINARY)`` (PostgreSQL), changed days with ``UPDATE``. Duplicates and
conflicts are counted by ingest (``ingest.load``) against :func:`stored_values` before it
writes, exactly as before v6.

Reading (:func:`read_rows`, :func:`read_many`) fetches the day rows of a window with one
range scan on the ``(channel_id, day_s)`` key through the raw DBAPI cursor and decodes them
with numpy (no Python per reading), then cuts the window ``[start_s, end_s)``.

Keys are encoded as one int64, ``channel_id * 2**34 + ts_s`` (:func:`key`), to compare
incoming readings with stored ones by ``numpy.searchsorted``.
"""

from __future__ import annotations

import numpy as np
import sqlalchemy as sa

from db import daypack, rowcols, schema
from db.daypack import DAY_S, ROW_COLUMNS

TS_BITS = 34  # ts_s < 2**34 s: until the year 2514
#: Intervals of 2**20 s (12 days) or more are not logging intervals: stored as unknown (NULL).
MAX_INTERVAL_S = 1 << 20
#: Day rows per executemany / COPY slice (bounds the Python objects alive at once).
WRITE_SLICE = 20_000
TABLE = "reading_day"
_SELECT = "day_s, n, ts_blob, value_blob, interval_s, batch_id, runs_blob"


def key(channel_id: np.ndarray, ts_s: np.ndarray) -> np.ndarray:
    return (channel_id.astype(np.int64) << TS_BITS) + ts_s.astype(np.int64)


def _fetch(conn: sa.Connection, channel_id: int, day_lo: int | None, day_hi: int | None, *,
           desc: bool = False, limit: int | None = None, for_update: bool = False,
           cols: str = _SELECT) -> list[tuple]:
    """Day rows of one channel with ``day_lo <= day_s <= day_hi`` (None: open), key order."""
    ph = rowcols.placeholder(conn)
    sql = f"SELECT {cols} FROM {TABLE} WHERE channel_id = {ph}"
    args: list = [int(channel_id)]
    if day_lo is not None:
        sql += f" AND day_s >= {ph}"
        args.append(int(day_lo))
    if day_hi is not None:
        sql += f" AND day_s <= {ph}"
        args.append(int(day_hi))
    sql += " ORDER BY day_s" + (" DESC" if desc else "")
    if limit is not None:
        sql += f" LIMIT {int(limit)}"
    if for_update and conn.dialect.name == "postgresql":
        sql += " FOR UPDATE"
    return rowcols.fetchall(conn, sql, args)


def _decode(rows: list[tuple], *, values: bool = True, batches: bool = False) -> dict:
    if not rows:
        return daypack.unpack([], [], [], [], [], [], [], values=values, batches=batches)
    cols = list(zip(*rows, strict=True))
    return daypack.unpack(*cols, values=values, batches=batches)


def _cut(got: dict, start_s: int | None, end_s: int | None) -> dict:
    ts = got["ts_s"]
    a = 0 if start_s is None else int(np.searchsorted(ts, int(start_s), side="left"))
    b = ts.size if end_s is None else int(np.searchsorted(ts, int(end_s), side="left"))
    if a == 0 and b == ts.size:
        return got
    return {k: v[a:b] for k, v in got.items()}


def read_rows(conn: sa.Connection, channel_id: int, start_s: int | None = None,
              end_s: int | None = None, *, batches: bool = False) -> dict[str, np.ndarray]:
    """Readings of one channel in ``[start_s, end_s)`` in time order: ``{"ts_s", "value",
    "interval_s"}`` (interval float, NaN where unknown) and with ``batches`` ``"batch_id"``."""
    day_lo = None if start_s is None else int(daypack.day_of(int(start_s)))
    day_hi = None if end_s is None else int(end_s) - 1
    got = _decode(_fetch(conn, channel_id, day_lo, day_hi), batches=batches)
    return _cut(got, start_s, end_s)


def read_many(conn: sa.Connection, channel_ids, start_s: int | None = None,
              end_s: int | None = None, *, batches: bool = False) -> dict[str, np.ndarray]:
    """:func:`read_rows` of several channels, concatenated in ``(channel_id, ts_s)`` order,
    with a ``"channel_id"`` array."""
    parts, chans = [], []
    for ch in sorted({int(c) for c in channel_ids}):
        got = read_rows(conn, ch, start_s, end_s, batches=batches)
        parts.append(got)
        chans.append(np.full(got["ts_s"].size, ch, dtype=np.int64))
    if not parts:
        got = _decode([], batches=batches)
        return {"channel_id": np.zeros(0, dtype=np.int64), **got}
    out = {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}
    out["channel_id"] = np.concatenate(chans)
    return out


def stored_range(conn: sa.Connection, channel_ids: list[int]) -> dict[int, tuple[int, int]]:
    """``{channel_id: (min ts_s, max ts_s)}`` of stored readings (two index seeks per channel)."""
    out = {}
    for ch in channel_ids:
        first = _fetch(conn, ch, None, None, limit=1)
        if not first:
            continue
        last = _fetch(conn, ch, None, None, desc=True, limit=1)
        lo = _decode(first, values=False)["ts_s"]
        hi = _decode(last, values=False)["ts_s"]
        out[ch] = (int(lo[0]), int(hi[-1]))
    return out


def stored_values(conn: sa.Connection, channel_ids: list[int], lo: int, hi: int
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Stored readings of ``channel_ids`` with ``lo <= ts_s <= hi``: sorted keys, values, batch ids."""
    got = read_many(conn, channel_ids, int(lo), int(hi) + 1, batches=True)
    return key(got["channel_id"], got["ts_s"]), got["value"], got["batch_id"]


def previous_reading(conn: sa.Connection, channel_id: int, before_s: int) -> tuple[int, float] | None:
    """The last stored ``(ts_s, value)`` of a channel strictly before ``before_s``, or None."""
    rows = _fetch(conn, channel_id, None, int(before_s) - 1, desc=True, limit=2)
    got = _decode(rows[::-1])
    k = int(np.searchsorted(got["ts_s"], int(before_s), side="left")) - 1
    return (int(got["ts_s"][k]), float(got["value"][k])) if k >= 0 else None


def next_reading(conn: sa.Connection, channel_id: int, after_s: int) -> tuple[int, float] | None:
    """The first stored ``(ts_s, value)`` of a channel strictly after ``after_s``, or None."""
    rows = _fetch(conn, channel_id, int(daypack.day_of(int(after_s) + 1)), None, limit=2)
    got = _decode(rows)
    k = int(np.searchsorted(got["ts_s"], int(after_s), side="right"))
    return (int(got["ts_s"][k]), float(got["value"][k])) if k < got["ts_s"].size else None


def has_reading(conn: sa.Connection, channel_id: int, ts_s: int) -> bool:
    """Whether a reading is stored for ``(channel_id, ts_s)``."""
    day = int(daypack.day_of(int(ts_s)))
    got = _decode(_fetch(conn, channel_id, day, day), values=False)
    k = int(np.searchsorted(got["ts_s"], int(ts_s)))
    return k < got["ts_s"].size and int(got["ts_s"][k]) == int(ts_s)


def count_readings(conn: sa.Connection, channel_ids=None) -> int:
    """Number of stored readings (of ``channel_ids``, or all)."""
    t = schema.reading_day
    q = sa.select(sa.func.coalesce(sa.func.sum(t.c.n), 0))
    if channel_ids is not None:
        q = q.where(t.c.channel_id.in_([int(c) for c in channel_ids]))
    return int(conn.execute(q).scalar())


def channel_stats(conn: sa.Connection, channel_ids) -> list[tuple]:
    """Per channel with readings: ``(channel_id, n, first ts_s, last ts_s, sum of known
    intervals [s], readings with a known interval)``."""
    t = schema.reading_day
    chans = [int(c) for c in channel_ids]
    if not chans:
        return []
    uniform = t.c.runs_blob.is_(None)
    per = conn.execute(sa.select(
        t.c.channel_id, sa.func.sum(t.c.n),
        sa.func.sum(sa.case((uniform, t.c.interval_s * t.c.n), else_=0)),
        sa.func.sum(sa.case((uniform & t.c.interval_s.is_not(None), t.c.n), else_=0)))
        .where(t.c.channel_id.in_(chans)).group_by(t.c.channel_id)).all()
    mixed: dict[int, tuple[float, int]] = {}
    for ch, d, n, tb, vb, iv, b, runs in conn.execute(sa.select(
            t.c.channel_id, t.c.day_s, t.c.n, t.c.ts_blob, t.c.value_blob, t.c.interval_s,
            t.c.batch_id, t.c.runs_blob).where(t.c.channel_id.in_(chans), ~uniform)):
        got = daypack.unpack([d], [n], [tb], [vb], [iv], [b], [runs], values=False)
        known = np.isfinite(got["interval_s"])
        s, k = mixed.get(ch, (0.0, 0))
        mixed[ch] = (s + float(got["interval_s"][known].sum()), k + int(known.sum()))
    out = []
    for ch, n, iv_sum, iv_n in per:
        rng = stored_range(conn, [ch])[ch]
        s, k = mixed.get(ch, (0.0, 0))
        out.append((int(ch), int(n), rng[0], rng[1], float(iv_sum or 0) + s, int(iv_n or 0) + k))
    return out


def batch_counts(conn: sa.Connection, channel_ids, start_s: int | None = None,
                 end_s: int | None = None) -> dict[int, int]:
    """``{batch_id: readings}`` of the stored readings of ``channel_ids`` in ``[start_s, end_s)``."""
    got = read_many(conn, channel_ids, start_s, end_s, batches=True)
    ids, n = np.unique(got["batch_id"], return_counts=True)
    return {int(b): int(c) for b, c in zip(ids.tolist(), n.tolist(), strict=True)}


def daily_counts(conn: sa.Connection, channel_ids, start_s: int, end_s: int,
                 offset_s: int) -> dict[int, tuple[np.ndarray, np.ndarray]]:
    """Per channel: ``(day numbers, readings)`` of the local day ``floor((ts_s + offset_s) /
    86400)`` in ``[start_s, end_s)``."""
    out = {}
    for ch in channel_ids:
        got = read_rows(conn, ch, start_s, end_s)
        if got["ts_s"].size:
            out[int(ch)] = np.unique((got["ts_s"] + int(offset_s)) // DAY_S, return_counts=True)
    return out


def write_readings(conn: sa.Connection, channel_id: np.ndarray, ts_s: np.ndarray,
                   value: np.ndarray, batch_id: int, *, upsert: bool = True,
                   interval_s: np.ndarray | None = None) -> int:
    """Write readings in the caller's transaction; return how many were written.

    A reading replaces a stored one with the same ``(channel_id, ts_s)`` (with its value,
    batch and interval); others are added to their day. ``interval_s`` is each reading's
    interval length [s] as recorded at ingest (None or NaN: unknown, stored as NULL).
    ``upsert`` is kept for callers; the stored days a batch touches are always merged (a
    day row may hold readings of another file even when the time ranges do not overlap).
    Repeated keys in the input: the last one wins.
    """
    n = len(ts_s)
    if n == 0:
        return 0
    ch = np.asarray(channel_id, dtype=np.int64)
    ts = np.asarray(ts_s, dtype=np.int64)
    v = np.asarray(value, dtype=np.float64)
    iv = (np.zeros(n, dtype=np.int64) if interval_s is None else
          np.where(np.isfinite(interval_s), np.asarray(interval_s, dtype=float), 0)
          .round().astype(np.int64))
    iv[(iv <= 0) | (iv >= MAX_INTERVAL_S)] = 0  # unknown or implausible: stored as NULL
    k = key(ch, ts)
    if n > 1 and not (np.diff(k) > 0).all():
        order = np.argsort(k, kind="stable")
        k, ch, ts, v, iv = k[order], ch[order], ts[order], v[order], iv[order]
        last = np.append(k[1:] != k[:-1], True)  # of repeated keys the last one wins
        k, ch, ts, v, iv = k[last], ch[last], ts[last], v[last], iv[last]
    bt = np.full(ch.size, int(batch_id), dtype=np.int64)
    day = daypack.day_of(ts)
    # stored rows of the days touched, channel by channel (one range seek each)
    old_parts, old_days = [], set()
    bounds = np.flatnonzero(np.append(True, ch[1:] != ch[:-1]))
    ends = np.append(bounds[1:], ch.size)
    for a, b in zip(bounds.tolist(), ends.tolist(), strict=True):
        c = int(ch[a])
        rows = _fetch(conn, c, int(day[a]), int(day[b - 1]), for_update=True)
        if not rows:
            continue
        got = _decode(rows, batches=True)
        old_days.update((c, int(r[0])) for r in rows)
        old_parts.append((np.full(got["ts_s"].size, c, dtype=np.int64), got))
    if old_parts:
        o_ch = np.concatenate([p[0] for p in old_parts])
        o = {f: np.concatenate([p[1][f] for p in old_parts]) for f in old_parts[0][1]}
        o_k = key(o_ch, o["ts_s"])
        pos = np.minimum(np.searchsorted(k, o_k), k.size - 1)  # k is sorted and unique
        keep = k[pos] != o_k  # stored readings the batch does not replace
        o_iv = np.nan_to_num(o["interval_s"][keep]).astype(np.int64)
        k = np.concatenate([k, o_k[keep]])
        ch = np.concatenate([ch, o_ch[keep]])
        ts = np.concatenate([ts, o["ts_s"][keep]])
        v = np.concatenate([v, o["value"][keep]])
        iv = np.concatenate([iv, o_iv])
        bt = np.concatenate([bt, o["batch_id"][keep]])
        order = np.argsort(k, kind="stable")
        ch, ts, v, iv, bt = ch[order], ts[order], v[order], iv[order], bt[order]
    packed = daypack.pack(ch, ts, v, iv, bt)
    if old_days:
        exists = np.array([(c, d) in old_days for c, d in zip(
            packed.channel_id.tolist(), packed.day_s.tolist(), strict=True)], dtype=bool)
    else:
        exists = np.zeros(len(packed), dtype=bool)
    _insert(conn, packed, ~exists)
    if exists.any():
        _update(conn, packed, exists)
    return n


def write_day_rows(conn: sa.Connection, packed: daypack.DayRows) -> None:
    """Insert packed day rows that are not stored yet (migration, copies)."""
    _insert(conn, packed, np.ones(len(packed), dtype=bool))


def _insert(conn: sa.Connection, packed: daypack.DayRows, select: np.ndarray) -> None:
    if not select.any():
        return
    idx = np.flatnonzero(select)
    cols = ", ".join(ROW_COLUMNS)
    for a in range(0, idx.size, WRITE_SLICE):
        part = np.zeros(len(packed), dtype=bool)
        part[idx[a:a + WRITE_SLICE]] = True
        rows = packed.rows(part)
        if conn.dialect.name == "postgresql":
            raw = conn.connection.driver_connection
            with raw.cursor() as cur, cur.copy(
                    f"COPY {TABLE} ({cols}) FROM STDIN (FORMAT BINARY)") as cp:
                cp.set_types(["int4", "int8", "int4", "bytea", "bytea", "int4", "int4", "bytea"])
                for row in rows:
                    cp.write_row(row)
        elif conn.dialect.name == "sqlite":
            cur = conn.connection.driver_connection.cursor()
            cur.executemany(f"INSERT INTO {TABLE} ({cols}) VALUES (?, ?, ?, ?, ?, ?, ?, ?)", rows)
            cur.close()
        else:
            conn.execute(schema.reading_day.insert(), [dict(zip(ROW_COLUMNS, r, strict=True))
                                                       for r in rows])


def _update(conn: sa.Connection, packed: daypack.DayRows, select: np.ndarray) -> None:
    rows = [(*r[2:], r[0], r[1]) for r in packed.rows(select)]
    ph = rowcols.placeholder(conn)
    sets = ", ".join(f"{c} = {ph}" for c in ROW_COLUMNS[2:])
    sql = f"UPDATE {TABLE} SET {sets} WHERE channel_id = {ph} AND day_s = {ph}"
    if conn.dialect.name in ("sqlite", "postgresql"):
        raw = conn.connection.driver_connection
        cur = raw.cursor()
        try:
            cur.executemany(sql, rows)
        finally:
            cur.close()
    else:
        t = schema.reading_day
        stmt = t.update().where(t.c.channel_id == sa.bindparam("k_ch"),
                                t.c.day_s == sa.bindparam("k_day"))
        conn.execute(stmt, [dict(zip(ROW_COLUMNS[2:], r[:-2], strict=True), k_ch=r[-2],
                                 k_day=r[-1]) for r in rows])
