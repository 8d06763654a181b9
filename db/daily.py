"""The ``daily_inverter`` table: write recomputed days, read them back as a DataFrame.

Writing replaces whole days: for each inverter, the rows of the recomputed day range are
deleted and the new rows inserted in one transaction, so a reader never sees half a
recompute and a day that lost its readings loses its row.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import sqlalchemy as sa

from db import rowcols, schema
from db.engine import is_sqlite

#: Stored columns besides the key (device_pk, day) and computation_id.
VALUE_COLUMNS: tuple[str, ...] = tuple(
    c.name for c in schema.daily_inverter.columns
    if c.name not in ("device_pk", "day", "computation_id"))
_INT_COLUMNS = {"n_intervals", "n_daylight", "n_valid"}
_TEXT_COLUMNS = {"details_json", "irradiance_basis", "t_cell_basis"}


def _device_pks(conn: sa.Connection, site_id: str) -> dict[str, int]:
    d = schema.device
    return {r.device_id: r.device_pk for r in conn.execute(
        sa.select(d.c.device_id, d.c.device_pk).where(d.c.site_id == site_id))}


def _records(rows: pd.DataFrame, pks: dict[str, int], computation_id: int | None,
             iso_days: bool, nan_ok: bool = False) -> list[tuple]:
    cols = ["device_pk", "day", *VALUE_COLUMNS, "computation_id"]
    n = len(rows)
    data: dict[str, list] = {"device_pk": [pks[d] for d in rows["device_id"].tolist()],
                             "day": [x.isoformat() if iso_days else x for x in rows["day"].tolist()],
                             "computation_id": [computation_id] * n}
    for c in VALUE_COLUMNS:
        if c not in rows:
            data[c] = [None] * n
        elif c == "day_valid":
            data[c] = [bool(x) for x in rows[c].tolist()]
        elif c in _TEXT_COLUMNS:
            data[c] = [None if x is None or (isinstance(x, float) and np.isnan(x)) else str(x)
                       for x in rows[c].tolist()]
        elif c in _INT_COLUMNS:
            data[c] = rows[c].to_numpy(dtype=np.int64).tolist()
        elif nan_ok:  # SQLite stores a bound NaN as NULL (sqlite3_bind_double), no per-value test
            data[c] = rows[c].to_numpy(dtype=float, na_value=np.nan).tolist()
        else:
            a = rows[c].to_numpy(dtype=float, na_value=np.nan)
            data[c] = [None if v != v else v for v in a.tolist()]
    return list(zip(*(data[c] for c in cols), strict=True))


def write_daily(engine_or_conn: sa.Engine | sa.Connection, site_id: str, rows: pd.DataFrame,
                *, first_day: dt.date, last_day: dt.date, device_ids=None,
                computation_id: int | None = None) -> int:
    """Replace the days ``[first_day, last_day]`` of the given inverters with ``rows``.

    Parameters
    ----------
    rows : DataFrame
        ``device_id``, ``day`` (``datetime.date``) and the daily columns
        (:data:`analytics.daily.DAILY_COLUMNS`); rows outside the range are refused.
    device_ids : list of str or None
        Inverters whose days are replaced (default: those in ``rows``); an inverter listed
        with no rows has its days in the range deleted.

    Returns the number of rows inserted. One transaction.
    """
    if isinstance(engine_or_conn, sa.Engine):
        with engine_or_conn.begin() as conn:
            return write_daily(conn, site_id, rows, first_day=first_day, last_day=last_day,
                               device_ids=device_ids, computation_id=computation_id)
    conn = engine_or_conn
    pks = _device_pks(conn, site_id)
    in_rows = set(pd.unique(rows["device_id"].to_numpy(dtype=object)).tolist())
    ids = sorted(in_rows if device_ids is None else set(device_ids))
    unknown = sorted((set(ids) | in_rows) - set(pks))
    if unknown:
        raise KeyError(f"site {site_id!r} has no device {', '.join(map(repr, unknown))}")
    days = rows["day"].tolist()
    if days and (min(days) < first_day or max(days) > last_day):
        raise ValueError(f"rows hold days outside {first_day}..{last_day}")
    t = schema.daily_inverter
    conn.execute(t.delete().where(t.c.device_pk.in_([pks[i] for i in ids]),
                                  t.c.day >= first_day, t.c.day <= last_day))
    if not len(rows):
        return 0
    if is_sqlite(conn.engine):
        recs = _records(rows, pks, computation_id, iso_days=True, nan_ok=True)
        cols = ["device_pk", "day", *VALUE_COLUMNS, "computation_id"]
        sql = (f"INSERT INTO daily_inverter ({', '.join(cols)}) "
               f"VALUES ({', '.join('?' * len(cols))})")
        cur = conn.connection.cursor()
        try:
            cur.executemany(sql, recs)
        finally:
            cur.close()
    else:
        recs = _records(rows, pks, computation_id, iso_days=False)
        cols = ["device_pk", "day", *VALUE_COLUMNS, "computation_id"]
        conn.execute(t.insert(), [dict(zip(cols, r, strict=True)) for r in recs])
    return len(rows)


def daily_table(engine: sa.Engine | sa.Connection, site_id: str, device_ids=None,
                start: dt.date | None = None, end: dt.date | None = None, *,
                with_text: bool = True, columns=None) -> pd.DataFrame:
    """Daily rows of a site's inverters, days ``[start, end]`` inclusive, by device and day.

    Columns: ``device_id, day`` (``datetime.date``), every value column of
    ``daily_inverter`` (``day_valid`` as bool) and ``computation_id``. With ``with_text``
    False the text columns (details, bases) are not read and hold None (a third of the time
    of reading a long history; issue #16). ``columns``: only these value columns are read
    and returned (with ``device_id``, ``day`` and ``computation_id``).
    """
    if isinstance(engine, sa.Engine):
        with engine.connect() as conn:
            return daily_table(conn, site_id, device_ids, start, end, with_text=with_text,
                               columns=columns)
    conn = engine
    if columns is not None and (unknown := set(columns) - set(VALUE_COLUMNS)):
        raise KeyError(f"daily_inverter has no column {', '.join(sorted(unknown))}")
    value_cols = [c for c in VALUE_COLUMNS if (with_text or c not in _TEXT_COLUMNS)
                  and (columns is None or c in columns)]
    cols = ["device_id", "day", *value_cols, "computation_id"]
    # raw DBAPI cursor: a year of a 100-inverter site is ~36 000 rows x 30 columns
    ph = rowcols.placeholder(conn)
    sql = (f"SELECT d.device_id, t.day, {', '.join('t.' + c for c in value_cols)}, "
           f"t.computation_id FROM daily_inverter t JOIN device d ON d.device_pk = t.device_pk "
           f"WHERE d.site_id = {ph}")
    args: list = [site_id]
    if device_ids is not None:
        ids = list(device_ids)
        if not ids:
            sql += " AND 1 = 0"
        else:
            sql += f" AND d.device_id IN ({', '.join([ph] * len(ids))})"
            args += ids
    iso = is_sqlite(conn.engine)
    for op, val in ((">=", start), ("<=", end)):
        if val is not None:
            sql += f" AND t.day {op} {ph}"
            args.append(val.isoformat() if iso else val)
    sql += " ORDER BY d.device_id, t.day"
    rows = rowcols.fetchall(conn, sql, args)
    out_cols = ["device_id", "day", *(VALUE_COLUMNS if columns is None else value_cols),
                "computation_id"]
    if not rows:
        out = pd.DataFrame({c: pd.Series(dtype=object) for c in out_cols})
        for c in out_cols[2:-1]:
            if c in _INT_COLUMNS:
                out[c] = out[c].astype("int64")
            elif c == "day_valid":
                out[c] = out[c].astype(bool)
            elif c not in _TEXT_COLUMNS:
                out[c] = out[c].astype("float64")
        return out
    # whole columns converted at once (db.rowcols): ~184 000 rows for 100 inverters x 5 years
    got = dict(zip(cols, rowcols.columns(rows, len(cols)), strict=True))
    data: dict[str, object] = {"device_id": pd.Series(got["device_id"]),
                               "day": pd.Series(rowcols.dates(got["day"]), dtype=object)}
    for c in out_cols[2:-1]:
        v = got.get(c)
        if v is None:  # a text column not read
            data[c] = pd.Series(np.full(len(rows), None, dtype=object), dtype=object)
        elif c == "day_valid":
            data[c] = v.astype(bool)
        elif c in _TEXT_COLUMNS:
            data[c] = pd.Series(v)
        elif c in _INT_COLUMNS:
            data[c] = v.astype(np.int64)
        else:
            data[c] = rowcols.floats(v)
    data["computation_id"] = pd.Series(got["computation_id"].tolist())
    return pd.DataFrame(data)[out_cols]
