"""The ``degradation_result`` table: one row per site, device (inverter id or ``"(site)"``) and
method, plus the ``computation`` rows of degradation runs (issue #7).

``write_degradation`` replaces all of a site's rows in one transaction, so a reader never
sees half a recompute. ``degradation_results`` reads them back as a DataFrame with the
details JSON parsed.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import sqlalchemy as sa

from db import schema
from db.computations import finish_computation
from db.jsontext import clean, to_json

SITE_DEVICE = "(site)"
RESULT_COLUMNS = ("site_id", "device_id", "method", "rate_pct_per_yr", "ci_low", "ci_high",
                  "confidence", "n_points", "reason", "details", "computation_id")


def write_degradation(engine: sa.Engine, site_id: str, rows: list[dict], computation_id: int) -> int:
    """Replace the site's degradation rows with ``rows`` and mark the computation finished.

    Each row: ``device_id``, ``method``, ``rate_pct_per_yr``, ``ci_low``, ``ci_high``,
    ``confidence``, ``n_points``, ``reason`` (any may be None) and ``details`` (a dict).
    Returns the number of rows written.
    """
    t = schema.degradation_result
    recs = []
    for r in rows:
        num = {k: clean(r.get(k)) for k in ("rate_pct_per_yr", "ci_low", "ci_high", "confidence")}
        recs.append(dict(site_id=site_id, device_id=str(r["device_id"]), method=str(r["method"]),
                         n_points=None if r.get("n_points") is None else int(r["n_points"]),
                         reason=r.get("reason"), details_json=to_json(r.get("details") or {}),
                         computation_id=computation_id, **num))
    keys = [(x["device_id"], x["method"]) for x in recs]
    if len(set(keys)) != len(keys):
        raise ValueError("duplicate (device_id, method) in degradation rows")
    with engine.begin() as conn:
        conn.execute(t.delete().where(t.c.site_id == site_id))
        if recs:
            conn.execute(t.insert(), recs)
        finish_computation(conn, computation_id)
    return len(recs)


def degradation_results(engine: sa.Engine, site_id: str) -> pd.DataFrame:
    """A site's degradation rows, ordered by device and method.

    Columns: site_id, device_id, method, rate_pct_per_yr, ci_low, ci_high, confidence,
    n_points, reason, details (dict parsed from details_json), computation_id.
    """
    t = schema.degradation_result
    q = (sa.select(t.c.site_id, t.c.device_id, t.c.method, t.c.rate_pct_per_yr, t.c.ci_low,
                   t.c.ci_high, t.c.confidence, t.c.n_points, t.c.reason, t.c.details_json,
                   t.c.computation_id)
         .where(t.c.site_id == site_id).order_by(t.c.device_id, t.c.method))
    with engine.connect() as conn:
        rows = conn.execute(q).all()
    out = pd.DataFrame([tuple(r) for r in rows],
                       columns=[*RESULT_COLUMNS[:9], "details_json", "computation_id"])
    for c in ("rate_pct_per_yr", "ci_low", "ci_high", "confidence"):
        out[c] = pd.to_numeric(out[c], errors="coerce").astype("float64")
    out["n_points"] = pd.array(out["n_points"], dtype="Int64")
    out["details"] = [json.loads(x) if x else {} for x in out.pop("details_json")]
    return out[list(RESULT_COLUMNS)]


def last_computation(engine: sa.Engine, site_id: str, kind: str = "degradation") -> dict | None:
    """The latest finished computation of ``kind`` for the site, params parsed; None if none."""
    c = schema.computation
    q = (sa.select(c).where(c.c.site_id == site_id, c.c.kind == kind, c.c.finished_utc.is_not(None))
         .order_by(c.c.computation_id.desc()).limit(1))
    with engine.connect() as conn:
        row = conn.execute(q).mappings().first()
    if row is None:
        return None
    out = dict(row)
    out["params"] = json.loads(out.pop("params_json") or "{}")
    return out


def ghi_channels(engine: sa.Engine, site_id: str) -> list[tuple[str, int]]:
    """``(sensor_id, channel_id)`` of the site's GHI sensors."""
    d, c = schema.device, schema.channel
    q = (sa.select(d.c.device_id, c.c.channel_id).join(c, c.c.device_pk == d.c.device_pk)
         .where(d.c.site_id == site_id, c.c.quantity == "ghi_wm2").order_by(d.c.device_id))
    with engine.connect() as conn:
        return [(r[0], int(r[1])) for r in conn.execute(q)]


def irradiance_channels(engine: sa.Engine, site_id: str) -> list[tuple[str, str, int]]:
    """``(sensor_id, quantity, channel_id)`` of every GHI and POA sensor of the site, by id."""
    d, c = schema.device, schema.channel
    q = (sa.select(d.c.device_id, c.c.quantity, c.c.channel_id)
         .join(c, c.c.device_pk == d.c.device_pk)
         .where(d.c.site_id == site_id, c.c.quantity.in_(("ghi_wm2", "poa_wm2")))
         .order_by(d.c.device_id, c.c.quantity))
    with engine.connect() as conn:
        return [(r[0], r[1], int(r[2])) for r in conn.execute(q)]


def clearsky_inputs(engine: sa.Engine, site_id: str, inverters: pd.DataFrame, *,
                    with_interval: bool = False) -> tuple:
    """Interval inputs of the clear-sky method, and nothing else: AC power and module
    temperature of every inverter on one interval grid.

    Reads one channel per inverter (``p_ac_kw``, or ``e_ac_kwh`` / interval length when the
    inverter has no power channel or it is empty) and each distinct module-temperature
    sensor once — not the irradiance, ambient and wind channels or both power channels that
    the full interval frames carry. Intervals without a row inside the period are added as
    NaN (``db.timeseries.fill_gaps``), so the series are regular for the clear-period windows.

    Returns ``(p_ac_kw, t_module_c)``: float32 DataFrames indexed by ``ts_utc`` (interval
    start, UTC), one column per inverter that has power readings; ``t_module_c`` is NaN where
    the inverter has no module-temperature sensor. [kW], [°C] With ``with_interval`` a third
    element: each grid row's interval [s] (the recorded interval of the readings there; a
    filled gap steps by its neighbour's), aligned with the index.
    """
    from db.timeseries import (
        fill_gaps,
        fill_unknown_intervals,
        instant_channels,
        instant_to_means,
        overlap_mean,
        read_channel,
        site_channels,
    )

    # each reading's own interval as recorded at ingest (#11), never a channel-wide spacing
    power: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
    sensor_of: dict[str, int | None] = {}
    temps: dict[int, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
    with engine.connect() as conn:
        ch = site_channels(conn, site_id)
        inst = instant_channels(conn, site_id)

        def read(c):
            ts, v, iv = read_channel(conn, c, with_interval=True)
            iv = fill_unknown_intervals(ts, iv)
            return instant_to_means(ts, v, iv) if c in inst else (ts, v, iv)

        for _, inv in inverters.iterrows():
            dev = inv["device_id"]
            ts = np.zeros(0, dtype=np.int64)
            val = iv = np.zeros(0)
            pc = ch.get((dev, "p_ac_kw"))
            if pc is not None:
                ts, val, iv = read(pc)
            if not np.isfinite(val).any():
                ec = ch.get((dev, "e_ac_kwh"))
                if ec is not None:
                    ts, e, iv = read(ec)
                    val = e / (iv / 3600.0) if ts.size else e
            if not ts.size:
                continue
            power[dev] = (ts, val, iv)
            sid = inv.get("t_module_sensor_id")
            tc = ch.get((sid, "t_module_c")) if isinstance(sid, str) and sid else None
            sensor_of[dev] = tc
            if tc is not None and tc not in temps:
                temps[tc] = read(tc)
    if not power:
        empty = pd.DataFrame(index=pd.DatetimeIndex([], tz="UTC", name="ts_utc"))
        return (empty, empty.copy(), np.zeros(0)) if with_interval else (empty, empty.copy())
    arrays = [v[0] for v in power.values()]
    first = arrays[0]
    if all(a.size == first.size and np.array_equal(a, first) for a in arrays[1:]):
        grid = first  # inverters of one logger share the timestamps: no union needed
    else:
        grid = np.unique(np.concatenate(arrays))
    grid_iv = np.full(grid.size, np.nan)
    for ts, _v, iv in power.values():
        pos = np.searchsorted(grid, ts)
        grid_iv[pos] = np.where(np.isnan(grid_iv[pos]), iv, grid_iv[pos])
    grid, step_s = fill_gaps(grid, grid_iv)
    p = np.full((grid.size, len(power)), np.nan, dtype=np.float32)
    t = np.full((grid.size, len(power)), np.nan, dtype=np.float32)
    binned: dict[int, np.ndarray] = {}
    for j, (dev, (ts, val, _iv)) in enumerate(power.items()):
        p[np.searchsorted(grid, ts), j] = val
        tc = sensor_of.get(dev)
        if tc is not None:
            if tc not in binned:
                tt, tv, tiv = temps[tc]
                binned[tc] = overlap_mean(grid, step_s, tt, tiv, tv)
            t[:, j] = binned[tc]
    idx = pd.DatetimeIndex(pd.to_datetime(grid, unit="s", utc=True), name="ts_utc")
    cols = list(power)
    out = pd.DataFrame(p, index=idx, columns=cols), pd.DataFrame(t, index=idx, columns=cols)
    return (*out, np.asarray(step_s, dtype=float)) if with_interval else out
