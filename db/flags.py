"""Flags: short, dated statements of what is wrong, how sure, and what it costs.

``write_flags`` replaces a site's flags in one transaction (a recomputation never leaves
a half-written set); ``read_flags`` is the one query the results export and the dashboard
use.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import sqlalchemy as sa

from db import rowcols, schema
from db.jsontext import to_json

#: Stable flag kinds (issues #5, #14); other strings are refused.
FLAG_KINDS = ("underperformance", "outage", "clipping", "soiling", "cleaning", "sensor_range",
              "sensor_flatline", "sensor_dropout", "sensor_night", "sensor_drift",
              "clock_shift", "counter_mismatch", "sensor_implausible", "stopped_reporting",
              "power_limit", "input_mismatch", "data_dropout")
SEVERITIES = ("info", "warning", "alarm")
READ_COLUMNS = ("flag_id", "site_id", "device_id", "kind", "start_s", "end_s", "severity",
                "lost_kwh", "details_json")


def details_to_json(details) -> str | None:
    """A flag's evidence as JSON text (dicts are serialised; text is checked and kept)."""
    if details is None or (isinstance(details, float) and math.isnan(details)):
        return None
    if isinstance(details, str):
        json.loads(details)
        return details
    return to_json(details)


def _rows(site_id: str, flags: pd.DataFrame, computation_id: int | None) -> list[dict]:
    need = {"kind", "start_s", "end_s", "severity"}
    if missing := need - set(flags.columns):
        raise ValueError(f"flags frame lacks columns {sorted(missing)}")
    rows = []
    for n, r in enumerate(flags.to_dict("records")):
        kind, sev = r["kind"], r["severity"]
        if kind not in FLAG_KINDS:
            raise ValueError(f"flag row {n}: unknown kind {kind!r}; known: {', '.join(FLAG_KINDS)}")
        if sev not in SEVERITIES:
            raise ValueError(f"flag row {n}: severity {sev!r} is not one of {', '.join(SEVERITIES)}")
        start, end = int(r["start_s"]), int(r["end_s"])
        if end < start:
            raise ValueError(f"flag row {n} ({kind}): end_s {end} is before start_s {start}")
        dev = r.get("device_id")
        lost = r.get("lost_kwh")
        det = r["details_json"] if "details_json" in r else r.get("details")
        rows.append(dict(
            site_id=site_id,
            device_id=None if dev is None or (isinstance(dev, float) and math.isnan(dev)) else str(dev),
            kind=kind, start_s=start, end_s=end, severity=sev,
            lost_kwh=None if lost is None or not np.isfinite(lost) else float(lost),
            details_json=details_to_json(det), computation_id=computation_id))
    return rows


def write_flags(engine: sa.Engine, site_id: str, flags_df: pd.DataFrame,
                computation_id: int | None) -> int:
    """Replace all flags of ``site_id`` by ``flags_df`` in one transaction.

    Parameters
    ----------
    flags_df : DataFrame
        Columns ``device_id`` (None for site-wide), ``kind``, ``start_s``, ``end_s``
        (UTC epoch seconds), ``severity``, ``lost_kwh`` (NaN/None where it does not apply)
        and ``details`` (dict) or ``details_json`` (text).
    computation_id : int or None
        The ``computation`` row that produced them.

    Returns
    -------
    int, rows written. Raises ``ValueError`` (nothing written) on an unknown kind or
    severity or an end before the start.
    """
    rows = _rows(site_id, flags_df, computation_id)
    t = schema.flag
    with engine.begin() as conn:
        conn.execute(t.delete().where(t.c.site_id == site_id))
        if rows:
            conn.execute(t.insert(), rows)
    return len(rows)


def read_flags(engine: sa.Engine, site_id: str, device_id: str | None = None,
               kind: str | None = None, start_s: int | None = None,
               end_s: int | None = None) -> pd.DataFrame:
    """Flags of a site, optionally of one device and kind, overlapping [start_s, end_s).

    Returns
    -------
    DataFrame with columns flag_id, site_id, device_id, kind, start_s, end_s, severity,
    lost_kwh, details_json, ordered by start_s then flag_id.
    """
    t = schema.flag
    q = sa.select(*(t.c[c] for c in READ_COLUMNS)).where(t.c.site_id == site_id)
    if device_id is not None:
        q = q.where(t.c.device_id == device_id)
    if kind is not None:
        q = q.where(t.c.kind == kind)
    if start_s is not None:
        q = q.where(t.c.end_s > int(start_s))
    if end_s is not None:
        q = q.where(t.c.start_s < int(end_s))
    q = q.order_by(t.c.start_s, t.c.flag_id)
    with engine.connect() as conn:
        res = conn.execute(q)
        rows = res.fetchall()
    cols = list(zip(*rows, strict=True)) if rows else [()] * len(READ_COLUMNS)
    num = {"flag_id": "int64", "start_s": "int64", "end_s": "int64", "lost_kwh": "float64"}
    # text columns stay object so a site-wide flag's device_id is None, not NaN
    return pd.DataFrame({c: pd.Series(v, dtype=num.get(c, object))
                         for c, v in zip(READ_COLUMNS, cols, strict=True)})


# ---------------------------------------------------------------- incremental runs (#16)

DAY_COLUMNS = ("device_id", "day_no", "soiling_pi", "withheld_kwh", "clock_delta_min",
               "clock_clear", "valid_reason", "sky_ratio", "jump_ratio", "rain_mm",
               "amb_night_c", "amb_day_c")
_FLOAT_DAY_COLUMNS = ("soiling_pi", "withheld_kwh", "clock_delta_min", "sky_ratio",
                      "jump_ratio", "rain_mm")
_ARRAY_DAY_COLUMNS = ("amb_night_c", "amb_day_c")  # float arrays, stored as little-endian f8


def _flag_key(r: dict) -> tuple:
    """What makes two stored flags the same flag (lost energy to a millionth of a kWh)."""
    lost = r.get("lost_kwh")
    lost = None if lost is None or not np.isfinite(lost) else round(float(lost), 6)
    return (r.get("device_id"), r["kind"], int(r["start_s"]), int(r["end_s"]), r["severity"],
            lost, r.get("details_json"))


def read_flag_parts(engine: sa.Engine, site_id: str) -> pd.DataFrame:
    """The per-inverter flags kept by the last flags run (``flag_part``), details as dicts."""
    t = schema.flag_part
    cols = ("device_id", "kind", "start_s", "end_s", "severity", "lost_kwh", "details_json")
    with engine.connect() as conn:
        rows = conn.execute(sa.select(*(t.c[c] for c in cols)).where(t.c.site_id == site_id)
                            .order_by(t.c.part_id)).all()
    out = pd.DataFrame([dict(zip(cols, r, strict=True)) for r in rows], columns=list(cols))
    out["lost_kwh"] = pd.to_numeric(out["lost_kwh"], errors="coerce").astype(float)
    out["details"] = [json.loads(d) if d else {} for d in out.pop("details_json")]
    for c in ("start_s", "end_s"):
        out[c] = out[c].astype("int64")
    return out


def read_flag_days(engine: sa.Engine, site_id: str, sensor_ids=None, *,
                   inverters: bool = True) -> pd.DataFrame:
    """The per-device daily inputs kept by the last flags run: the inverters' daily inputs
    (``flag_day_pack``, and any ``flag_day`` rows of a store not yet migrated) and the
    sensors' day judgements (``flag_day``; arrays as numpy float arrays, None where absent),
    one row per device and day, by device (code-point order) and day. With ``sensor_ids``
    the other devices' ``flag_day`` rows are read without the sensor columns (NULL for an
    inverter; issue #16); with ``inverters`` False as well, only those sensors' rows are read
    (an incremental run takes the inverters' packs with :func:`read_inverter_days`).
    Columns are built whole (:mod:`db.rowcols`), not row by row."""
    ph = rowcols.placeholder(engine)
    inv_cols = DAY_COLUMNS[:6]
    with engine.connect() as conn:
        # raw DBAPI cursor: a 100-inverter site keeps ~37 000 days a year
        packs = _fetch_packs(conn, site_id) if inverters or sensor_ids is None else []
        if sensor_ids is None:
            got = [(rowcols.fetchall(conn, f"SELECT {', '.join(DAY_COLUMNS)} FROM flag_day "
                                           f"WHERE site_id = {ph}", [site_id]),
                    len(DAY_COLUMNS))]
        else:
            ids = [str(i) for i in sensor_ids]
            inl = ", ".join([ph] * len(ids)) if ids else "NULL"
            got = []
            if inverters:
                got.append((rowcols.fetchall(
                    conn, f"SELECT {', '.join(inv_cols)} FROM flag_day WHERE site_id = {ph} "
                          f"AND device_id NOT IN ({inl})", [site_id, *ids]), len(inv_cols)))
            if ids:
                got.append((rowcols.fetchall(
                    conn, f"SELECT {', '.join(DAY_COLUMNS)} FROM flag_day WHERE site_id = {ph} "
                          f"AND device_id IN ({inl})", [site_id, *ids]), len(DAY_COLUMNS)))
    got = got or [([], len(DAY_COLUMNS))]
    # each source as whole columns; columns a source lacks are NULL
    cols: dict[str, list[np.ndarray]] = {c: [] for c in DAY_COLUMNS}
    for rows, n_cols in got:
        have = rowcols.columns(rows, n_cols)
        for k, c in enumerate(DAY_COLUMNS):
            cols[c].append(have[k] if k < n_cols else np.full(len(rows), None, dtype=object))
    n_rows = sum(len(r) for r, _n in got)
    col = {c: np.concatenate(v) for c, v in cols.items()}
    fl = {c: rowcols.floats(col[c]) for c in _FLOAT_DAY_COLUMNS}
    clear = rowcols.flags(col["clock_clear"])
    dev, day_no = col["device_id"], col["day_no"].astype(np.int64)
    if packs:  # the inverters' packed days, after the rows
        unpacked = _unpack_days(packs)
        n_p = len(unpacked["day_no"])
        dev = np.concatenate([dev, unpacked["device_id"]])
        day_no = np.concatenate([day_no, unpacked["day_no"]])
        for c in _FLOAT_DAY_COLUMNS:
            fl[c] = np.concatenate([fl[c], unpacked[c] if c in unpacked else np.full(n_p, np.nan)])
        clear = np.concatenate([clear, unpacked["clock_clear"]])
        for c in ("valid_reason", *_ARRAY_DAY_COLUMNS):
            col[c] = np.concatenate([col[c], np.full(n_p, None, dtype=object)])
    n = len(day_no)
    data = {"device_id": pd.Series(dev, dtype=object), "day_no": day_no, **fl,
            "clock_clear": pd.Series(clear, dtype=object),
            "valid_reason": pd.Series(col["valid_reason"], dtype=None if n else object)}
    for c in _ARRAY_DAY_COLUMNS:
        v = np.full(n, None, dtype=object)
        blobs = col[c]
        for k in np.flatnonzero(pd.notna(blobs[:n_rows])):  # sensors' days only
            v[k] = np.frombuffer(bytes(blobs[k]), dtype="<f8")
        data[c] = pd.Series(v, dtype=object)
    out = pd.DataFrame({c: data[c] for c in DAY_COLUMNS})
    if n:  # by device (code-point order, as a Python sort) and day
        codes, _u = pd.factorize(dev, sort=True)
        order = np.lexsort((day_no, codes))
        if (np.diff(order) != 1).any():
            out = out.iloc[order].reset_index(drop=True)
    return out


#: flag_day columns kept per inverter in flag_day_pack (store v8), and the packed columns.
PACK_COLUMNS = ("day_no", "soiling_pi", "withheld_kwh", "clock_delta_min", "clock_clear")
_PACK_BLOBS = tuple(f"{c}_blob" for c in PACK_COLUMNS)
_PACK_DTYPES = {"day_no": "<i4", "soiling_pi": "<f8", "withheld_kwh": "<f8",
                "clock_delta_min": "<f8", "clock_clear": "<i1"}
_CLEAR_OF_CODE = np.array([None, False, True], dtype=object)  # code + 1 -> flag


def pack_days(device_days: pd.DataFrame) -> dict:
    """One inverter's daily inputs (``day_no`` and the flag_day inverter columns, days
    unique) as a ``flag_day_pack`` row without its key: arrays sorted by day, non-finite
    numbers as NaN (NULL in flag_day), ``clock_clear`` as 1 / 0 / -1 (none)."""
    d = device_days
    day = d["day_no"].to_numpy(np.int64)
    order = np.argsort(day, kind="stable")
    day = day[order]
    if len(day) and (np.diff(day) == 0).any():
        raise ValueError(f"flag_day_pack: day {int(day[np.flatnonzero(np.diff(day) == 0)[0]])} "
                         "given twice for one device")
    if len(day) and (day.min() < -2**31 or day.max() >= 2**31):
        raise ValueError("flag_day_pack: day number out of the 32-bit range")
    n = len(d)
    out = {"n_days": n, "day_no_blob": day.astype("<i4").tobytes()}
    for c in PACK_COLUMNS[1:4]:
        v = (pd.to_numeric(d[c], errors="coerce").to_numpy(float) if c in d
             else np.full(n, np.nan))[order]
        out[f"{c}_blob"] = np.where(np.isfinite(v), v, np.nan).astype("<f8").tobytes()
    clear = rowcols.flags(d["clock_clear"].to_numpy(object) if "clock_clear" in d
                          else np.full(n, None, dtype=object))[order]
    code = np.full(n, -1, dtype=np.int8)
    have = clear != None  # noqa: E711 - elementwise on an object array
    code[have] = clear[have].astype(bool).astype(np.int8)
    out["clock_clear_blob"] = code.astype("<i1").tobytes()
    return out


def _fetch_packs(conn: sa.Connection, site_id: str) -> list[tuple]:
    """The site's ``flag_day_pack`` rows as ``(device_id, n_days, *blobs)`` tuples."""
    return rowcols.fetchall(conn, f"SELECT device_id, n_days, {', '.join(_PACK_BLOBS)} FROM "
                                  f"flag_day_pack WHERE site_id = {rowcols.placeholder(conn)}",
                            [site_id])


def _pack_arrays(r) -> dict[str, np.ndarray]:
    """One fetched ``(device_id, n_days, *blobs)`` row as its stored arrays (length-checked)."""
    n = int(r[1])
    out = {c: np.frombuffer(bytes(r[2 + k]), dtype=_PACK_DTYPES[c])
           for k, c in enumerate(PACK_COLUMNS)}
    for c, a in out.items():
        if len(a) != n:
            raise ValueError(f"flag_day_pack: {c} of {r[0]} holds {len(a)} values for {n} days")
    return out


def read_inverter_days(engine: sa.Engine, site_id: str) -> dict[str, dict[str, np.ndarray]]:
    """Each inverter's packed daily inputs (``flag_day_pack``) as arrays sorted by day:
    ``day_no`` (int64), ``soiling_pi``, ``withheld_kwh``, ``clock_delta_min`` (float, NaN =
    none) and ``clock_clear`` (int8: 1, 0, -1 = none); no DataFrame of every day is built
    (issue #16: an incremental run takes each inverter's days before its cut as slices)."""
    with engine.connect() as conn:
        packs = _fetch_packs(conn, site_id)
    out = {}
    for r in packs:
        out[str(r[0])] = {c: a.astype(np.int64 if c == "day_no" else np.int8
                                      if c == "clock_clear" else float)
                          for c, a in _pack_arrays(r).items()}
    return out


def _unpack_days(packs: list) -> dict:
    """Fetched ``(device_id, n_days, *blobs)`` rows as whole columns of all their days."""
    arrays = [_pack_arrays(r) for r in packs]
    n = [int(r[1]) for r in packs]
    out = {"device_id": np.repeat(np.array([str(r[0]) for r in packs], dtype=object), n)}
    for c in PACK_COLUMNS:
        a = np.concatenate([x[c] for x in arrays])
        out[c] = a.astype(np.int64) if c == "day_no" else (
            _CLEAR_OF_CODE[a.astype(np.int64) + 1] if c == "clock_clear" else a.astype(float))
    return out


def store_flags(conn: sa.Connection, site_id: str, flags_df: pd.DataFrame,
                computation_id: int | None, *, parts: pd.DataFrame, days: pd.DataFrame,
                cut_s: int | None = None, cut_day: int | None = None,
                full_devices=()) -> dict:
    """Store a flags run in ``conn``'s transaction: the site's flags, and what the next
    incremental run needs.

    Flags: only what changed is replaced (a flag identical to a stored one keeps its row and
    id), so after an incremental run the table holds exactly the flags of this run.
    ``flag_part`` rows starting at or after ``cut_s`` and the daily inputs from ``cut_day``
    on (everything when None; every day of ``full_devices``) are replaced by ``parts`` and
    ``days``: a sensor's days as ``flag_day`` rows, every other device's packed in its
    ``flag_day_pack`` row (store v8). Returns ``{"flags", "inserted", "deleted"}``. Raises
    ``ValueError`` (nothing written) on an unknown kind or severity, an end before the
    start, or a day given twice for one inverter.
    """
    rows = _rows(site_id, flags_df, computation_id)
    part_rows = [{k: v for k, v in r.items() if k != "computation_id"}
                 for r in _rows(site_id, parts, None)]
    t, tp, td = schema.flag, schema.flag_part, schema.flag_day
    sensors = _sensor_ids(conn, site_id)
    is_sensor = days["device_id"].astype(str).isin(sensors).to_numpy(bool) if len(days) \
        else np.zeros(0, bool)
    day_rows = _day_tuples(site_id, days[is_sensor])
    full_devices = [str(d) for d in full_devices]
    _store_packs(conn, site_id, days[~is_sensor], cut_day, set(full_devices))
    have = conn.execute(sa.select(t.c.flag_id, t.c.device_id, t.c.kind, t.c.start_s,
                                  t.c.end_s, t.c.severity, t.c.lost_kwh, t.c.details_json)
                        .where(t.c.site_id == site_id)).mappings().all()
    stored: dict[tuple, list[int]] = {}
    for r in have:
        stored.setdefault(_flag_key(dict(r)), []).append(int(r["flag_id"]))
    new = []
    for r in rows:
        ids = stored.get(_flag_key(r))
        if ids:
            ids.pop()
        else:
            new.append(r)
    gone = [i for ids in stored.values() for i in ids]
    for k in range(0, len(gone), 500):
        conn.execute(t.delete().where(t.c.flag_id.in_(gone[k:k + 500])))
    if new:
        conn.execute(t.insert(), new)
    qp, qd = tp.delete().where(tp.c.site_id == site_id), td.delete().where(td.c.site_id == site_id)
    if cut_s is not None:
        qp = qp.where(sa.or_(tp.c.start_s >= int(cut_s), tp.c.device_id.in_(full_devices)))
    if cut_day is not None:
        qd = qd.where(sa.or_(td.c.day_no >= int(cut_day), td.c.device_id.in_(full_devices)))
    conn.execute(qp)
    conn.execute(qd)
    if part_rows:
        conn.execute(tp.insert(), part_rows)
    if day_rows:
        cols = ("site_id", *DAY_COLUMNS)
        if conn.dialect.name == "sqlite":
            # raw executemany of tuples: building a parameter dict per row through the
            # SQL layer took a quarter of a full flags run (issue #16)
            cur = conn.connection.cursor()
            try:
                cur.executemany(f"INSERT INTO flag_day ({', '.join(cols)}) VALUES "
                                f"({', '.join('?' * len(cols))})", day_rows)
            finally:
                cur.close()
        else:
            conn.execute(td.insert(), [dict(zip(cols, r, strict=True)) for r in day_rows])
    return {"flags": len(rows), "inserted": len(new), "deleted": len(gone)}


def _sensor_ids(conn: sa.Connection, site_id: str) -> set[str]:
    """The site's sensors: their daily judgements are kept as ``flag_day`` rows."""
    d, sn = schema.device, schema.sensor
    return {r[0] for r in conn.execute(
        sa.select(d.c.device_id).join(sn, sn.c.device_pk == d.c.device_pk)
        .where(d.c.site_id == site_id))}


def _store_packs(conn: sa.Connection, site_id: str, days: pd.DataFrame,
                 cut_day: int | None, full_devices: set) -> None:
    """Replace the packed days from ``cut_day`` on (all of them when None, and all of each
    device in ``full_devices``) by ``days`` (one row per inverter and day)."""
    t = schema.flag_day_pack
    new = {str(dev): g for dev, g in days.groupby("device_id", sort=False)} if len(days) else {}
    if cut_day is None:
        conn.execute(t.delete().where(t.c.site_id == site_id))
        out = {dev: pack_days(g) for dev, g in new.items()}
    else:
        have = _fetch_packs(conn, site_id)
        out = {}
        for r in have:
            dev = str(r[0])
            days_old = np.frombuffer(bytes(r[2]), dtype="<i4")
            k = 0 if dev in full_devices else int(np.searchsorted(days_old, int(cut_day)))
            g = new.pop(dev, None)
            if g is not None and k and g["day_no"].to_numpy(np.int64).min() < int(cut_day):
                # a new day before the cut (not what a flags run gives): merge day by day
                old = _unpack_days([r])
                kept = pd.DataFrame({c: old[c][:k] for c in PACK_COLUMNS})
                out[dev] = pack_days(pd.concat([kept, g.reindex(columns=list(PACK_COLUMNS))],
                                               ignore_index=True))
                continue
            if g is None and k == int(r[1]):
                continue  # unchanged: nothing from the cut on, none new
            tail = pack_days(g) if g is not None else None
            width = {c: np.dtype(_PACK_DTYPES[c]).itemsize for c in PACK_COLUMNS}
            out[dev] = {"n_days": k + (tail["n_days"] if tail else 0),
                        **{b: bytes(r[2 + j])[:k * width[c]] + (tail[b] if tail else b"")
                           for j, (c, b) in enumerate(zip(PACK_COLUMNS, _PACK_BLOBS,
                                                          strict=True))}}
        out.update({dev: pack_days(g) for dev, g in new.items()})  # inverters new to the store
        ids = list(out)
        for k in range(0, len(ids), 500):
            conn.execute(t.delete().where(t.c.site_id == site_id,
                                          t.c.device_id.in_(ids[k:k + 500])))
    rows = [{"site_id": site_id, "device_id": dev, **p} for dev, p in out.items() if p["n_days"]]
    if rows:
        conn.execute(t.insert(), rows)


def _day_tuples(site_id: str, days: pd.DataFrame) -> list[tuple]:
    """``flag_day`` rows as tuples (``site_id`` then :data:`DAY_COLUMNS`): non-finite numbers
    and missing values as NULL, arrays as little-endian float64 bytes."""
    n = len(days)
    if not n:
        return []
    out = [[site_id] * n]
    for c in DAY_COLUMNS:
        v = days[c] if c in days else pd.Series([None] * n, index=days.index, dtype=object)
        if c == "device_id":
            out.append([str(x) for x in v.tolist()])
        elif c == "day_no":
            out.append(v.to_numpy(np.int64).tolist())
        elif c in _FLOAT_DAY_COLUMNS:
            a = pd.to_numeric(v, errors="coerce").to_numpy(float)
            o = a.astype(object)
            o[~np.isfinite(a)] = None
            out.append(o.tolist())
        elif c == "clock_clear":
            out.append(rowcols.flags(v.to_numpy(object)).tolist())
        elif c in _ARRAY_DAY_COLUMNS:
            out.append([_blob(x) for x in v.tolist()])
        else:
            out.append([_text(x) for x in v.tolist()])
    return list(zip(*out, strict=True))


def _num(v) -> float | None:
    return None if v is None or not np.isfinite(v) else float(v)


def _text(v) -> str | None:
    return None if v is None or (isinstance(v, float) and v != v) else str(v)


def _blob(v) -> bytes | None:
    if v is None or (isinstance(v, float) and v != v):
        return None
    return np.ascontiguousarray(v, dtype="<f8").tobytes()

