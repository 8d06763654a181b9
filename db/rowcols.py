"""Fetched DBAPI rows -> columns, without a Python step per row (issue #16).

A long history is read as ~200 000 rows (a 100-inverter site over five years); building a
DataFrame row by row, or converting each value in a list comprehension, cost as long as the
fetch itself. These helpers turn the fetched tuples into one numpy array per column and
convert whole columns at once, with the same values and missing-value conventions as the
row-wise code they replace: numbers as float64 with NaN for NULL, flags as Python
``True``/``False``/``None`` in an object column, ISO dates (SQLite) as ``datetime.date``.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import sqlalchemy as sa


def columns(rows: list, n_cols: int) -> list[np.ndarray]:
    """The fetched ``rows`` (tuples of ``n_cols`` values) as ``n_cols`` object arrays."""
    if not rows:
        return [np.empty(0, dtype=object) for _ in range(n_cols)]
    a = np.empty((len(rows), n_cols), dtype=object)
    a[:] = rows
    return [a[:, k] for k in range(n_cols)]


def floats(col: np.ndarray) -> np.ndarray:
    """A numeric column as float64, NULL (None) as NaN."""
    return np.asarray(col, dtype=object).astype(float)


def flags(col: np.ndarray) -> np.ndarray:
    """A boolean column (SQLite 0/1, PostgreSQL True/False) as an object array of Python
    ``True``/``False``, NULL and NaN as ``None``."""
    col = np.asarray(col, dtype=object)
    out = np.full(len(col), None, dtype=object)
    have = ~pd.isna(col)
    if have.any():
        out[have] = col[have].astype(bool).astype(object)
    return out


def dates(col: np.ndarray) -> np.ndarray:
    """A date column as an object array of ``datetime.date``: SQLite's ISO text parsed once
    per distinct day; dates given as ``datetime.date`` (PostgreSQL) are kept."""
    col = np.asarray(col, dtype=object)
    if not len(col) or not isinstance(col[0], str):
        return col
    codes, uniq = pd.factorize(col)
    parsed = np.empty(len(uniq), dtype=object)
    parsed[:] = [dt.date.fromisoformat(str(u)) for u in uniq]
    return parsed[codes]


def placeholder(conn: sa.Connection | sa.Engine) -> str:
    """The DBAPI's positional parameter marker: ``?`` (sqlite3) or ``%s`` (psycopg)."""
    return "?" if conn.dialect.paramstyle == "qmark" else "%s"


def fetchall(conn: sa.Connection, sql: str, args) -> list[tuple]:
    """``sql`` (with :func:`placeholder` markers) run on a raw DBAPI cursor of ``conn``, its
    rows as tuples: no SQLAlchemy result objects for a long history (issue #16)."""
    cur = conn.connection.cursor()
    try:
        cur.execute(sql, list(args))
        return cur.fetchall()
    finally:
        cur.close()
