"""Packing of readings into one row per channel and UTC day (schema v6; no SQL here).

A day row holds every reading of one channel whose ``ts_s`` falls in one UTC day
``[day_s, day_s + 86400)``, as three packed parts:

* **timestamps** (``ts_blob``): a 9-byte header ``<kind u8, first offset i32, step u32>``
  (offsets in seconds from ``day_s``; ``step`` is the greatest common divisor of the
  spacings) and then, by kind: ``0`` nothing (a complete run ``first + k * step``,
  ``k = 0 .. n-1``), ``1`` a bit mask over the grid ``first + k * step`` (little-endian bit
  order), ``2`` every offset as ``uint32`` (whichever of 1 and 2 is smaller);
* **values** (``value_blob``): a 2-byte header ``<kind u8, 16 * k + exponent u8>`` and then,
  by kind, ``int16`` (0) or ``int32`` (1) integers ``q`` with
  ``value = (q / 10**exponent) * scale_k + offset_k`` (:data:`FACTORS`: identity, or one of
  ingest's unit conversions applied to a logger's decimal), or the values as ``float64`` (2). A day is stored as scaled integers only when every value comes
  back bit for bit (logger exports carry a few decimals, so they nearly always do); any other
  day keeps its doubles. Nothing is rounded: the store returns exactly what was written
  (``-0.0`` comes back as ``0.0``);
* **interval and batch** of each reading: the columns ``interval_s`` (``NULL``: unknown,
  readings stored before schema v4) and ``batch_id`` when every reading of the day shares
  them, else run-length triples ``<n i32, interval_s i32 (0 = unknown), batch_id i32>`` in
  ``runs_blob`` (then ``interval_s`` is NULL and ``batch_id`` is the day's latest batch).

Encoding and decoding are numpy over whole arrays; Python runs once per day row, never once
per reading.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass, field

import numpy as np

DAY_S = 86_400
TS_RUN, TS_MASK, TS_OFFSETS = 0, 1, 2
V_I16, V_I32, V_F64 = 0, 1, 2
_TS_HDR = struct.Struct("<BiI")
_TS_HDR_DTYPE = np.dtype([("kind", "u1"), ("first", "<i4"), ("step", "<u4")])
_V_DTYPES = {V_I16: np.dtype("<i2"), V_I32: np.dtype("<i4"), V_F64: np.dtype("<f8")}
_RUN_DTYPE = np.dtype([("n", "<i4"), ("interval_s", "<i4"), ("batch_id", "<i4")])
MAX_EXPONENT = 9  # at most 9 decimals as scaled integers
#: Linear maps a decimal may have gone through before it was stored (ingest's unit conversions
#: ``x * scale + offset``: W -> kW, MW -> kW, °F -> °C, K -> °C, km/h -> m/s). Part of the
#: format (the value header's high nibble indexes it): append only, never reorder.
FACTORS = ((1.0, 0.0), (1e-3, 0.0), (1e3, 0.0), (5.0 / 9.0, -32.0 * 5.0 / 9.0), (1.0, -273.15),
           (1.0 / 3.6, 0.0))

#: Column order of a day row as the write path binds it.
ROW_COLUMNS = ("channel_id", "day_s", "n", "ts_blob", "value_blob", "interval_s", "batch_id",
               "runs_blob")


@dataclass
class DayRows:
    """Packed day rows, one entry per row in ``ROW_COLUMNS`` order."""

    channel_id: np.ndarray
    day_s: np.ndarray
    n: np.ndarray
    ts_blob: list = field(default_factory=list)
    value_blob: list = field(default_factory=list)
    interval_s: list = field(default_factory=list)
    batch_id: list = field(default_factory=list)
    runs_blob: list = field(default_factory=list)

    def __len__(self) -> int:
        return len(self.n)

    def rows(self, select: np.ndarray | None = None) -> list[tuple]:
        idx = range(len(self)) if select is None else np.flatnonzero(select).tolist()
        ch, day, n = self.channel_id.tolist(), self.day_s.tolist(), self.n.tolist()
        return [(ch[i], day[i], n[i], self.ts_blob[i], self.value_blob[i], self.interval_s[i],
                 self.batch_id[i], self.runs_blob[i]) for i in idx]


def day_of(ts_s: np.ndarray | int):
    """UTC day start [s] of each timestamp (floor to a multiple of 86 400)."""
    return (np.asarray(ts_s, dtype=np.int64) // DAY_S) * DAY_S


def _decimals(v: np.ndarray, starts: np.ndarray, scale: float, offset: float
              ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per row (segments at ``starts``): whether some ``e`` (0..9) gives integers ``q`` with
    ``(q / 10**e) * scale + offset == v`` bit for bit for every value, the smallest such ``e``,
    and ``q`` (whole arrays per ``e``, no Python per value)."""
    rows = starts.size
    counts = np.diff(np.append(starts, v.size))
    e_row = np.zeros(rows, dtype=np.int64)
    done = np.zeros(rows, dtype=bool)
    q = np.zeros(v.size)
    x = v if (scale, offset) == (1.0, 0.0) else (v - offset) / scale
    with np.errstate(invalid="ignore", over="ignore"):
        for e in range(MAX_EXPONENT + 1):
            p = 10.0 ** e
            q_e = np.rint(x * p)
            back = q_e / p if (scale, offset) == (1.0, 0.0) else (q_e / p) * scale + offset
            ok = (back == v) & (np.abs(q_e) < 2 ** 31)
            row_ok = np.logical_and.reduceat(ok, starts) & ~done
            if row_ok.any():
                e_row[row_ok] = e
                done |= row_ok
                sel = np.repeat(row_ok, counts)
                q[sel] = q_e[sel]
            if done.all():
                break
    return done, e_row, q


def pack(channel_id: np.ndarray, ts_s: np.ndarray, value: np.ndarray, interval_s: np.ndarray,
         batch_id: np.ndarray) -> DayRows:
    """Pack readings sorted by ``(channel_id, ts_s)`` without repeated keys into day rows.

    ``interval_s`` is an integer array with 0 for unknown; ``batch_id`` an integer array."""
    ch = np.asarray(channel_id, dtype=np.int64)
    ts = np.asarray(ts_s, dtype=np.int64)
    v = np.asarray(value, dtype=np.float64)
    iv = np.asarray(interval_s, dtype=np.int64)
    bt = np.asarray(batch_id, dtype=np.int64)
    n = ts.size
    if n == 0:
        e = np.empty(0, dtype=np.int64)
        return DayRows(e, e.copy(), e.copy())
    day = day_of(ts)
    new = np.ones(n, dtype=bool)
    new[1:] = (ch[1:] != ch[:-1]) | (day[1:] != day[:-1])
    starts = np.flatnonzero(new)
    ends = np.append(starts[1:], n)
    counts = ends - starts
    # -- timestamps
    off = ts - day
    d = np.zeros(n, dtype=np.int64)
    d[:-1] = np.where(new[1:], 0, np.diff(off))  # gcd(x, 0) = x: row boundaries are neutral
    step = np.gcd.reduceat(d, starts)
    step[step <= 0] = 1
    first, last = off[starts], off[ends - 1]
    grid = (last - first) // step + 1
    # -- values: scaled decimals when every value of the row comes back exactly
    rows = starts.size
    e_row = np.zeros(rows, dtype=np.int64)
    f_row = np.zeros(rows, dtype=np.int64)
    dec = np.zeros(rows, dtype=bool)
    q = np.zeros(n)
    for k, (scale, offset) in enumerate(FACTORS):
        todo = ~dec
        if not todo.any():
            break
        if k:  # another unit's decimals: only rows whose sample values fit it are tried
            ends_ = starts + counts - 1
            samp = np.stack([v[starts], v[(starts + ends_) // 2], v[ends_]], axis=1).ravel()
            fit, _e, _q = _decimals(samp, np.arange(0, samp.size, 3), scale, offset)
            todo &= fit
            if not todo.any():
                continue
        sel = np.repeat(todo, counts)
        sub_counts = counts[todo]
        sub_starts = np.concatenate(([0], np.cumsum(sub_counts)[:-1]))
        ok, e_sub, q_sub = _decimals(v[sel], sub_starts, scale, offset)
        rows_ok = np.flatnonzero(todo)[ok]
        e_row[rows_ok], f_row[rows_ok] = e_sub[ok], k
        dec[rows_ok] = True
        now = np.zeros(rows, dtype=bool)
        now[rows_ok] = True
        q[np.repeat(now, counts)] = q_sub[np.repeat(ok, sub_counts)]
    amax = np.maximum.reduceat(np.abs(q), starts)
    vkind = np.where(~dec, V_F64, np.where(amax < 2 ** 15, V_I16, V_I32))
    parts = {V_F64: v.astype("<f8").tobytes()}
    if (vkind == V_I16).any():
        parts[V_I16] = np.where(np.abs(q) < 2 ** 15, q, 0).astype("<i2").tobytes()
    if (vkind == V_I32).any():
        parts[V_I32] = np.where(np.abs(q) < 2 ** 31, q, 0).astype("<i4").tobytes()
    mv = {k: memoryview(b) for k, b in parts.items()}
    # -- interval and batch: uniform per row, or run-length
    iv_u = np.minimum.reduceat(iv, starts) == np.maximum.reduceat(iv, starts)
    bt_u = np.minimum.reduceat(bt, starts) == np.maximum.reduceat(bt, starts)
    bt_max = np.maximum.reduceat(bt, starts)

    out = DayRows(ch[starts].copy(), day[starts].copy(), counts.astype(np.int64))
    s_l, e_l, c_l = starts.tolist(), ends.tolist(), counts.tolist()
    f_l, st_l, g_l = first.tolist(), step.tolist(), grid.tolist()
    vk_l, ex_l = vkind.tolist(), np.where(dec, e_row + 16 * f_row, 0).tolist()
    ivu_l, bmax_l = (iv_u & bt_u).tolist(), bt_max.tolist()
    iv_first = iv[starts].tolist()
    for r in range(len(s_l)):
        a, b, cnt = s_l[r], e_l[r], c_l[r]
        hdr = _TS_HDR.pack(TS_RUN, f_l[r], st_l[r])
        if cnt != g_l[r]:
            if g_l[r] <= 32 * cnt:  # a bit mask is smaller than 4 bytes per reading
                k = (off[a:b] - f_l[r]) // st_l[r]
                bits = np.zeros(g_l[r], dtype=np.uint8)
                bits[k] = 1
                hdr = _TS_HDR.pack(TS_MASK, f_l[r], st_l[r]) + \
                    np.packbits(bits, bitorder="little").tobytes()
            else:
                hdr = _TS_HDR.pack(TS_OFFSETS, f_l[r], st_l[r]) + off[a:b].astype("<u4").tobytes()
        out.ts_blob.append(hdr)
        vk = vk_l[r]
        w = _V_DTYPES[vk].itemsize
        out.value_blob.append(bytes((vk, ex_l[r])) + mv[vk][a * w:b * w].tobytes())
        if ivu_l[r]:
            out.interval_s.append(iv_first[r] if iv_first[r] > 0 else None)
            out.batch_id.append(bmax_l[r])
            out.runs_blob.append(None)
        else:
            out.interval_s.append(None)
            out.batch_id.append(bmax_l[r])
            out.runs_blob.append(_runs(iv[a:b], bt[a:b]))
    return out


def _runs(iv: np.ndarray, bt: np.ndarray) -> bytes:
    change = np.ones(iv.size, dtype=bool)
    change[1:] = (iv[1:] != iv[:-1]) | (bt[1:] != bt[:-1])
    at = np.flatnonzero(change)
    runs = np.empty(at.size, dtype=_RUN_DTYPE)
    runs["n"] = np.diff(np.append(at, iv.size))
    runs["interval_s"] = iv[at]
    runs["batch_id"] = bt[at]
    return runs.tobytes()


def _as_bytes(b) -> bytes:
    return b if isinstance(b, bytes) else bytes(b)


def unpack(day_s, n, ts_blob, value_blob, interval_s, batch_id, runs_blob, *,
           values: bool = True, batches: bool = False) -> dict[str, np.ndarray]:
    """Decode day rows (columns as lists, rows in key order) into reading arrays.

    Returns ``{"ts_s", "value", "interval_s", ["batch_id"]}``: ``interval_s`` float with NaN
    where unknown. With ``values=False`` only ``ts_s`` and ``interval_s``."""
    counts = np.asarray(n, dtype=np.int64)
    rows = counts.size
    total = int(counts.sum())
    out: dict[str, np.ndarray] = {}
    if rows == 0:
        out["ts_s"] = np.zeros(0, dtype=np.int64)
        out["value"] = np.zeros(0)
        out["interval_s"] = np.zeros(0)
        if batches:
            out["batch_id"] = np.zeros(0, dtype=np.int64)
        return out
    ts_blob = [_as_bytes(b) for b in ts_blob]
    day = np.asarray(day_s, dtype=np.int64)
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    # -- timestamps: every blob starts with the 9-byte header
    runs_only = all(len(b) == _TS_HDR.size for b in ts_blob)
    head = np.frombuffer(b"".join(ts_blob) if runs_only else
                         b"".join(b[:_TS_HDR.size] for b in ts_blob), dtype=_TS_HDR_DTYPE)
    k_in_row = np.arange(total, dtype=np.int64) - np.repeat(starts, counts)
    ts = (np.repeat(day + head["first"].astype(np.int64), counts)
          + np.repeat(head["step"].astype(np.int64), counts) * k_in_row)
    if not runs_only:
        for r in np.flatnonzero(head["kind"] != TS_RUN).tolist():
            b = ts_blob[r]
            a, m = int(starts[r]), int(counts[r])
            if head["kind"][r] == TS_MASK:
                bits = np.unpackbits(np.frombuffer(b, dtype=np.uint8, offset=_TS_HDR.size),
                                     bitorder="little")
                k = np.flatnonzero(bits)
                ts[a:a + m] = day[r] + int(head["first"][r]) + int(head["step"][r]) * k
            else:
                ts[a:a + m] = day[r] + np.frombuffer(b, dtype="<u4", offset=_TS_HDR.size)
    out["ts_s"] = ts
    if values:
        value_blob = [_as_bytes(b) for b in value_blob]
        heads = [b[:2] for b in value_blob]
        kinds = set(heads)
        if len(kinds) == 1:
            out["value"] = _decode_values(heads[0], b"".join(memoryview(b)[2:] for b in value_blob))
        else:
            val = np.empty(total)
            row_of = np.repeat(np.arange(rows), counts)
            for h in kinds:
                sel = [i for i, x in enumerate(heads) if x == h]
                got = _decode_values(h, b"".join(memoryview(value_blob[i])[2:] for i in sel))
                in_sel = np.zeros(rows, dtype=bool)
                in_sel[sel] = True
                val[in_sel[row_of]] = got
            out["value"] = val
    # -- interval and batch
    has_runs = [i for i, x in enumerate(runs_blob) if x is not None]
    iv_row = np.array([np.nan if x is None else float(x) for x in interval_s])
    iv = np.repeat(iv_row, counts)
    bt = np.repeat(np.asarray(batch_id, dtype=np.int64), counts) if batches else None
    for r in has_runs:
        runs = np.frombuffer(_as_bytes(runs_blob[r]), dtype=_RUN_DTYPE)
        a, m = int(starts[r]), int(counts[r])
        r_iv = np.repeat(runs["interval_s"].astype(float), runs["n"])
        r_iv[r_iv <= 0] = np.nan
        iv[a:a + m] = r_iv
        if batches:
            bt[a:a + m] = np.repeat(runs["batch_id"].astype(np.int64), runs["n"])
    out["interval_s"] = iv
    if batches:
        out["batch_id"] = bt
    return out


def _decode_values(head: bytes, payload: bytes) -> np.ndarray:
    kind, e, k = head[0], head[1] & 15, head[1] >> 4
    arr = np.frombuffer(payload, dtype=_V_DTYPES[kind])
    if kind == V_F64:
        return arr.copy()
    out = arr.astype(np.float64) / (10.0 ** e)
    if k:
        scale, offset = FACTORS[k]
        out = out * scale + offset
    return out
