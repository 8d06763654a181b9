"""The flags job's packed copy of the daily table (store v9, issue #16).

The whole-history detectors (underperformance, soiling, fleet drift, the sensors' checks
against yield) read a few columns of every inverter's every day. Fetched row by row that is
~184 000 rows for 100 inverters over five years, about a quarter of an incremental flags run.
``flag_daily_pack`` keeps those columns as one row per inverter with its days as packed
arrays (as :mod:`db.daypack` packs readings), written by each flags run from what it read.

It is a cache, never the source: :func:`read_daily_inputs` takes a packed day only when the
``daily_inverter`` rows before the boundary day are provably the ones packed — per inverter
the same number of rows, none written by a daily computation newer than the pack (a daily
recomputation stamps every row it writes with its own, larger ``computation_id``, and
computation rows are never deleted, so ids only grow; a deleted row lowers the count). Anything else, or a pack of other columns, is read from the table.
"""

from __future__ import annotations

import datetime as dt
import json

import numpy as np
import pandas as pd
import sqlalchemy as sa

from db import rowcols, schema
from db.daily import _INT_COLUMNS, VALUE_COLUMNS, daily_table
from db.engine import is_sqlite

_EPOCH = dt.date(1970, 1, 1)


def _day_numbers(days: pd.Series) -> np.ndarray:
    """Days (``datetime64`` midnights, or ``datetime.date`` values, converted once per
    distinct day) as days since 1970-01-01."""
    if pd.api.types.is_datetime64_any_dtype(days):
        return days.to_numpy("datetime64[D]").astype(np.int64)
    codes, uniq = pd.factorize(days.to_numpy(object))
    return np.array([(d - _EPOCH).days for d in uniq], dtype=np.int64)[codes] if len(uniq) \
        else np.empty(0, np.int64)


def _as_datetime64(frame: pd.DataFrame) -> pd.DataFrame:
    """``day`` as ``datetime64[ns]`` midnights (from ``datetime.date``, one conversion per
    distinct day), ``computation_id`` numeric (int64, float64 with NaN where unknown)."""
    frame = frame.copy()
    frame["day"] = (_day_numbers(frame["day"]) * 86400 * 10**9).astype("datetime64[ns]")
    frame["computation_id"] = pd.to_numeric(frame["computation_id"])
    return frame


def _value_columns(columns) -> list[str]:
    """The packed columns, in ``daily_inverter`` order, then ``computation_id``."""
    if unknown := set(columns) - set(VALUE_COLUMNS):
        raise KeyError(f"daily_inverter has no column {', '.join(sorted(unknown))}")
    return [c for c in VALUE_COLUMNS if c in set(columns)] + ["computation_id"]


def read_daily_inputs(engine: sa.Engine, site_id: str, columns, *,
                      from_day: int | None = None) -> tuple[pd.DataFrame, dict]:
    """The daily rows of a site's inverters with ``columns``, as
    ``daily_table(engine, site_id, with_text=False, columns=columns)`` returns them (same
    columns, values and types, except ``day``: ``datetime64[ns]`` midnights instead of
    ``datetime.date`` objects, which cost more to build and to compare than the rest of a
    long history; and ``computation_id`` always numeric), rows by device (code-point order)
    and day.

    With ``from_day`` (days since 1970-01-01) the days before it come from the pack where
    the pack provably holds them (see the module notes), the rest from ``daily_inverter``.
    Returns ``(frame, info)``: ``info["packed_days"]`` days taken from the pack,
    ``info["rows_read"]`` rows read from the table, ``info["whole"]`` the inverters read
    whole (no valid pack), ``info["pack_last_day"]`` the last day any pack holds (None
    without packs of these columns).
    """
    names = _value_columns(columns)
    info = {"packed_days": 0, "rows_read": 0, "whole": [], "pack_last_day": None}
    kept: dict[str, tuple[np.ndarray, np.ndarray]] = {}
    if from_day is None:
        parts = [daily_table(engine, site_id, with_text=False, columns=columns)]
    else:
        b = int(from_day)
        ph = rowcols.placeholder(engine)
        b_arg = _EPOCH + dt.timedelta(days=b)
        with engine.connect() as conn:
            packs = rowcols.fetchall(
                conn, f"SELECT device_id, n_days, columns_json, day_no_blob, values_blob "
                      f"FROM flag_daily_pack WHERE site_id = {ph}", [site_id])
            # per inverter: rows before the boundary, and the newest computation among them
            before = {str(r[0]): (int(r[1]), r[2]) for r in rowcols.fetchall(
                conn, f"SELECT d.device_id, COUNT(*), MAX(t.computation_id) FROM "
                      f"daily_inverter t JOIN device d ON d.device_pk = t.device_pk "
                      f"WHERE d.site_id = {ph} AND t.day < {ph} GROUP BY d.device_id",
                [site_id, b_arg.isoformat() if is_sqlite(engine) else b_arg])}
            for dev, n_days, cols_json, day_blob, val_blob in packs:
                dev = str(dev)
                if dev not in before or json.loads(cols_json) != names:
                    continue
                day_no = np.frombuffer(bytes(day_blob), dtype="<i4").astype(np.int64)
                if len(day_no):
                    info["pack_last_day"] = max(int(day_no[-1]),
                                                info["pack_last_day"] or -2**31)
                vals = np.frombuffer(bytes(val_blob), dtype="<f8").reshape(len(names), -1)
                if len(day_no) != int(n_days) or vals.shape[1] != len(day_no):
                    continue  # a damaged pack: read the table
                k = int(np.searchsorted(day_no, b))
                comp = vals[-1]
                n_table, newest = before[dev]
                if (k == n_table and np.isfinite(comp).all() and newest is not None
                        and len(comp) and int(newest) <= int(comp.max())):
                    kept[dev] = (day_no[:k], vals[:, :k])
            info["whole"] = sorted(set(before) - set(kept))
            parts = [daily_table(conn, site_id, start=b_arg, with_text=False,
                                 columns=columns)]
            if info["whole"]:
                parts.append(daily_table(conn, site_id, device_ids=info["whole"],
                                         end=b_arg - dt.timedelta(days=1), with_text=False,
                                         columns=columns))
    parts = [_as_datetime64(p) for p in parts]
    info["rows_read"] = sum(len(p) for p in parts)
    # each part's device codes (code-point order) and day numbers, for one sort of the rows
    rank = {d: k for k, d in enumerate(sorted(
        {str(x) for p in parts for x in pd.unique(p["device_id"])} | set(kept)))}
    keys = [(p["device_id"].astype(str).map(rank).to_numpy(np.int64), _day_numbers(p["day"]))
            for p in parts]
    if kept:
        devs = sorted(kept)
        parts.append(_frame_of_packs(kept, devs, names, parts[0].columns))
        info["packed_days"] = len(parts[-1])
        keys.append((np.repeat(np.array([rank[d] for d in devs], dtype=np.int64),
                               [len(kept[d][0]) for d in devs]),
                     np.concatenate([kept[d][0] for d in devs])))
    keep = [k for k, p in enumerate(parts) if len(p)] or [0]
    frame = pd.concat([parts[k] for k in keep], ignore_index=True) if len(keep) > 1 \
        else parts[keep[0]]
    order = np.lexsort((np.concatenate([keys[k][1] for k in keep]),
                        np.concatenate([keys[k][0] for k in keep])))
    if (np.diff(order) == 1).all():
        return frame.reset_index(drop=True), info
    return frame.iloc[order].reset_index(drop=True), info


def _frame_of_packs(kept: dict, devs: list[str], names: list[str], out_cols) -> pd.DataFrame:
    """Packed days of ``devs`` as daily-table rows (the types :func:`db.daily.daily_table`
    gives)."""
    n = np.array([len(kept[d][0]) for d in devs], dtype=np.int64)
    vals = np.concatenate([kept[d][1] for d in devs], axis=1)
    data: dict[str, object] = {
        "device_id": pd.Series(np.repeat(np.array(devs, dtype=object), n)),
        "day": (np.concatenate([kept[d][0] for d in devs]) * 86400 * 10**9
                ).astype("datetime64[ns]")}
    for j, c in enumerate(names):
        v = vals[j]
        if c == "day_valid":
            data[c] = v.astype(bool)
        elif c in _INT_COLUMNS or c == "computation_id":
            data[c] = v.astype(np.int64)
        else:
            data[c] = v.copy()
    return pd.DataFrame(data)[list(out_cols)]


def write_daily_pack(conn: sa.Connection, site_id: str, frame: pd.DataFrame, columns) -> int:
    """Replace the site's packs by ``frame`` (daily-table rows with ``columns`` and
    ``computation_id``, one row per inverter and day) in ``conn``'s transaction; return the
    days packed. An inverter with a row without its ``computation_id`` is not packed (its
    rows could not be checked later; it is read from the table). Raises ``ValueError``
    (nothing written) on a day given twice for one inverter."""
    names = _value_columns(columns)
    t = schema.flag_daily_pack
    rows = []
    if len(frame):
        day_no = _day_numbers(frame["day"])
        codes, devs = pd.factorize(frame["device_id"].to_numpy(object), sort=True)
        order = np.lexsort((day_no, codes))
        codes, day_no = codes[order], day_no[order]
        if ((np.diff(codes) == 0) & (np.diff(day_no) == 0)).any():
            raise ValueError("flag_daily_pack: a day given twice for one inverter")
        vals = np.empty((len(names), len(frame)), dtype="<f8")
        for j, c in enumerate(names):
            vals[j] = pd.to_numeric(frame[c], errors="coerce").to_numpy(float)[order]
        bounds = np.searchsorted(codes, np.arange(len(devs) + 1))
        cols_json = json.dumps(names)
        for k, dev in enumerate(devs):
            sl = slice(bounds[k], bounds[k + 1])
            if not np.isfinite(vals[-1, sl]).all():
                continue  # a row without its computation cannot be checked later: not packed
            rows.append({"site_id": site_id, "device_id": str(dev), "n_days": int(sl.stop - sl.start),
                         "columns_json": cols_json,
                         "day_no_blob": day_no[sl].astype("<i4").tobytes(),
                         "values_blob": np.ascontiguousarray(vals[:, sl]).tobytes()})
    conn.execute(t.delete().where(t.c.site_id == site_id))
    if rows:
        conn.execute(t.insert(), rows)
    return sum(r["n_days"] for r in rows)
