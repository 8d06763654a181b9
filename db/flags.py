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


def read_flag_days(engine: sa.Engine, site_id: str, sensor_ids=None) -> pd.DataFrame:
    """The per-device daily inputs kept by the last flags run (``flag_day``): inverters'
    daily inputs and sensors' day judgements (arrays as numpy float arrays, None where
    absent), by device and day. With ``sensor_ids`` the other devices' rows are read without
    the sensor columns (NULL for an inverter; half the values of a long history; issue #16).
    Columns are converted whole (:mod:`db.rowcols`), not row by row."""
    ph = "?" if engine.dialect.paramstyle == "qmark" else "%s"
    inv_cols = DAY_COLUMNS[:6]
    with engine.connect() as conn:
        # raw DBAPI cursor: a 100-inverter site keeps ~37 000 rows a year
        cur = conn.connection.cursor()
        try:
            if sensor_ids is None:
                cur.execute(f"SELECT {', '.join(DAY_COLUMNS)} FROM flag_day WHERE site_id = "
                            f"{ph} ORDER BY device_id, day_no", [site_id])
                got = [(cur.fetchall(), len(DAY_COLUMNS))]
            else:
                ids = [str(i) for i in sensor_ids]
                inl = ", ".join([ph] * len(ids)) if ids else "NULL"
                cur.execute(f"SELECT {', '.join(inv_cols)} FROM flag_day WHERE site_id = {ph} "
                            f"AND device_id NOT IN ({inl})", [site_id, *ids])
                got = [(cur.fetchall(), len(inv_cols))]
                if ids:
                    cur.execute(f"SELECT {', '.join(DAY_COLUMNS)} FROM flag_day WHERE "
                                f"site_id = {ph} AND device_id IN ({inl})", [site_id, *ids])
                    got.append((cur.fetchall(), len(DAY_COLUMNS)))
        finally:
            cur.close()
    # each query's rows as columns; the inverters' rows have no sensor columns (NULL)
    cols: dict[str, list[np.ndarray]] = {c: [] for c in DAY_COLUMNS}
    for rows, n_cols in got:
        have = rowcols.columns(rows, n_cols)
        for k, c in enumerate(DAY_COLUMNS):
            cols[c].append(have[k] if k < n_cols else np.full(len(rows), None, dtype=object))
    col = {c: np.concatenate(v) if len(v) > 1 else v[0] for c, v in cols.items()}
    dev, day_no = col["device_id"], col["day_no"].astype(np.int64)
    order = None
    if sensor_ids is not None:  # by device (code-point order, as a Python sort) and day
        codes, _u = pd.factorize(dev, sort=True)
        order = np.lexsort((day_no, codes))
    data = {"device_id": pd.Series(dev, dtype=None if len(dev) else object), "day_no": day_no}
    for c in _FLOAT_DAY_COLUMNS:
        data[c] = rowcols.floats(col[c])
    data["clock_clear"] = pd.Series(rowcols.flags(col["clock_clear"]), dtype=object)
    data["valid_reason"] = pd.Series(col["valid_reason"], dtype=None if len(dev) else object)
    for c in _ARRAY_DAY_COLUMNS:
        v = np.full(len(dev), None, dtype=object)
        blobs = col[c]
        for k in np.flatnonzero(pd.notna(blobs)):  # sensors' days only
            v[k] = np.frombuffer(bytes(blobs[k]), dtype="<f8")
        data[c] = pd.Series(v, dtype=object)
    out = pd.DataFrame({c: data[c] for c in DAY_COLUMNS})
    if order is not None:
        out = out.iloc[order].reset_index(drop=True)
    return out


def store_flags(conn: sa.Connection, site_id: str, flags_df: pd.DataFrame,
                computation_id: int | None, *, parts: pd.DataFrame, days: pd.DataFrame,
                cut_s: int | None = None, cut_day: int | None = None,
                full_devices=()) -> dict:
    """Store a flags run in ``conn``'s transaction: the site's flags, and what the next
    incremental run needs.

    Flags: only what changed is replaced (a flag identical to a stored one keeps its row and
    id), so after an incremental run the table holds exactly the flags of this run.
    ``flag_part`` rows starting at or after ``cut_s`` and ``flag_day`` rows from ``cut_day``
    on (everything when None; every row of ``full_devices``) are replaced by ``parts`` and
    ``days``. Returns ``{"flags", "inserted", "deleted"}``. Raises ``ValueError`` (nothing
    written) on an unknown kind or severity or an end before the start.
    """
    rows = _rows(site_id, flags_df, computation_id)
    part_rows = [{k: v for k, v in r.items() if k != "computation_id"}
                 for r in _rows(site_id, parts, None)]
    t, tp, td = schema.flag, schema.flag_part, schema.flag_day
    day_rows = _day_tuples(site_id, days)
    full_devices = [str(d) for d in full_devices]
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
            out.append([_flag(x) for x in v.tolist()])
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


def _flag(v) -> bool | None:
    return None if v is None or (isinstance(v, float) and not np.isfinite(v)) else bool(v)
