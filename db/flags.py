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

from db import schema
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
