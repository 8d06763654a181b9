"""Interval frames read from the store: one inverter with its sensors, or a whole site.

Reading was the bottleneck of every recompute (about 1 M rows/s one row per reading, measured
on this machine); since schema v6 each channel's window is one range scan over its packed day
rows (:mod:`db.readings`, :mod:`db.daypack`), decoded with numpy without per-reading Python
objects, and aligned in numpy.

Conventions:

* ``start_s`` is inclusive, ``end_s`` exclusive (UTC epoch seconds of interval starts);
* ``interval_h`` is each reading's own interval as recorded at ingest (``reading.interval_s``):
  a channel that changes from 15 to 5 minutes keeps 15-min intervals on its old rows. Only
  readings stored before schema v4 (NULL interval) fall back to the spacing of their
  neighbours (:func:`interval_h_from_ts`);
* an ``instant`` channel (samples at the timestamp, ``channel.sampling``) becomes interval
  means on its own sample grid first: the interval from one sample to the next gets the mean
  of the two (trapezoidal rule, :func:`instant_to_means`);
* an inverter frame is indexed by the union of its power and energy channels' timestamps,
  with the intervals that have no row added as NaN rows (:func:`fill_gaps`: inside gaps,
  and out to the window's ``start_s`` / ``end_s`` when given); each configured sensor (POA, module temperature, ambient temperature, wind) is averaged
  into those intervals, weighted by the time each sensor reading's own interval overlaps
  the inverter interval (:func:`overlap_mean`: a sensor at the same spacing maps one to one,
  5-min readings into a 15-min interval are averaged, one 15-min reading spans three 5-min
  intervals). Missing readings are NaN.
"""

from __future__ import annotations

import queue
import threading
from collections.abc import Iterable, Iterator

import numpy as np
import pandas as pd
import sqlalchemy as sa

from db import readings, runcache, schema

INVERTER_FRAME_COLUMNS = ("p_ac_kw", "e_ac_kwh", "poa_wm2", "t_module_c", "t_amb_c", "wind_ms",
                          "interval_h")
#: inverter column -> the inverter-table column naming the sensor that delivers it
SENSOR_REFS = {"poa_wm2": "poa_sensor_id", "t_module_c": "t_module_sensor_id",
               "t_amb_c": "t_amb_sensor_id", "wind_ms": "wind_sensor_id"}


def interval_h_from_ts(ts_s: np.ndarray) -> np.ndarray:
    """Interval length [h] of each sample from the spacing of sorted timestamps [s].

    Each sample's interval is the smaller of the gaps to its neighbours (so a gap of missing
    rows on one side does not lengthen it); a sample isolated by gaps on both sides, or with
    a spacing above twice the channel's median, gets the median spacing. One sample alone
    gets 15 min (the common logger interval, common practice).

    Examples
    --------
    >>> interval_h_from_ts(np.array([0, 900, 1800, 7200, 8100])).tolist()
    [0.25, 0.25, 0.25, 0.25, 0.25]
    """
    ts = np.asarray(ts_s, dtype=np.int64)
    if ts.size == 0:
        return np.zeros(0)
    if ts.size == 1:
        return np.array([0.25])
    d = np.diff(ts).astype(float)
    prev = np.concatenate(([np.inf], d))
    nxt = np.concatenate((d, [np.inf]))
    out = np.minimum(prev, nxt)
    med = float(np.median(d))
    # a sample inside a regular run keeps the run's spacing (a 15-min stretch of a channel
    # that logs every 5 min later); only an isolated one falls back to the median
    prev2 = np.concatenate(([np.nan, np.nan], d[:-1])) if d.size > 1 else np.full(ts.size, np.nan)
    nxt2 = np.concatenate((d[1:], [np.nan, np.nan])) if d.size > 1 else np.full(ts.size, np.nan)
    regular = (prev == nxt) | ((out == prev) & (prev == prev2)) | ((out == nxt) & (nxt == nxt2))
    out = np.where((out > 2 * med) & ~regular, med, out)
    return out / 3600.0


def read_channel(conn: sa.Connection, channel_id: int, start_s: int | None = None,
                 end_s: int | None = None, *, with_interval: bool = False) -> tuple[np.ndarray, ...]:
    """``(ts_s int64, value float)`` arrays of one channel in ``[start_s, end_s)``, by key order.

    With ``with_interval`` a third array: each reading's interval [s] as recorded at ingest,
    NaN for readings stored before schema v4 (:func:`fill_unknown_intervals`). The day rows
    of the window are read with one range scan and decoded with numpy (:mod:`db.readings`).
    Inside :func:`db.runcache.read_once` a channel is read from the store once per run."""
    if runcache.active():
        return runcache.read(conn, channel_id, start_s, end_s, with_interval, read_channel)
    got = readings.read_rows(conn, channel_id, start_s, end_s)
    if not with_interval:
        return got["ts_s"], got["value"]
    return got["ts_s"], got["value"], got["interval_s"]


def fill_unknown_intervals(ts_s: np.ndarray, interval_s: np.ndarray) -> np.ndarray:
    """Interval [s] per reading: the recorded one, else (readings stored before the interval
    was recorded) the spacing of the neighbouring timestamps (:func:`interval_h_from_ts`)."""
    iv = np.asarray(interval_s, dtype=float)
    unknown = ~np.isfinite(iv)
    if not unknown.any():
        return iv
    iv = iv.copy()
    iv[unknown] = (interval_h_from_ts(ts_s) * 3600.0)[unknown]
    return iv


def instant_to_means(ts_s: np.ndarray, values: np.ndarray, interval_s: np.ndarray
                     ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Instantaneous samples -> interval means on the samples' own grid (trapezoidal rule).

    The interval starting at sample j runs to sample j+1 when that follows within 1.5 of
    sample j's recorded interval, and its mean is ``(v_j + v_{j+1}) / 2`` (the exact mean of
    the straight line between the two samples); the last sample before a gap keeps its
    recorded interval with a NaN mean (nothing is known of its end).

    >>> instant_to_means(np.array([0, 300, 600]), np.array([0.0, 2.0, 4.0]),
    ...                  np.array([300.0, 300.0, 300.0]))[1].tolist()
    [1.0, 3.0, nan]
    """
    ts = np.asarray(ts_s, dtype=np.int64)
    v = np.asarray(values, dtype=float)
    iv = np.asarray(interval_s, dtype=float).copy()
    mean = np.full(ts.size, np.nan)
    if ts.size < 2:
        return ts, mean, iv
    step = np.diff(ts).astype(float)
    nxt = step <= 1.5 * iv[:-1]
    mean[:-1] = np.where(nxt, (v[:-1] + v[1:]) / 2.0, np.nan)
    iv[:-1] = np.where(nxt, step, iv[:-1])
    return ts, mean, iv


def overlap_mean(base_ts: np.ndarray, base_interval_s: np.ndarray, ts: np.ndarray,
                 interval_s: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Time-weighted mean of readings over each base interval ``[base_ts, base_ts + interval)``.

    Reading j covers ``[ts_j, ts_j + interval_j)`` (cut at the next reading); its weight in a
    base interval is the time the two overlap. NaN where no finite reading overlaps.

    >>> overlap_mean(np.array([0, 300, 600]), np.full(3, 300.0), np.array([0]),
    ...              np.array([900.0]), np.array([5.0])).tolist()
    [5.0, 5.0, 5.0]
    """
    base_ts = np.asarray(base_ts, dtype=np.int64)
    out = np.full(base_ts.size, np.nan)
    ts = np.asarray(ts, dtype=np.int64)
    if ts.size == 0 or base_ts.size == 0:
        return out
    v = np.asarray(values, dtype=float)
    length = np.asarray(interval_s, dtype=float).copy()
    length[:-1] = np.minimum(length[:-1], np.diff(ts))
    good = np.isfinite(v) & (length > 0)
    length = np.where(good, length, 0.0)
    v = np.where(good, v, 0.0)
    cum_v = np.concatenate(([0.0], np.cumsum(v * length)))
    cum_l = np.concatenate(([0.0], np.cumsum(length)))
    t0 = ts.astype(float)

    def integral(t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        k = np.searchsorted(ts, t, side="right") - 1
        kk = np.maximum(k, 0)
        part = np.where(k >= 0, np.clip(t - t0[kk], 0.0, length[kk]), 0.0)
        return cum_v[kk] + v[kk] * part * (k >= 0), cum_l[kk] * (k >= 0) + part

    a = base_ts.astype(float)
    fa, la = integral(a)
    fb, lb = integral(a + np.asarray(base_interval_s, dtype=float))
    cover = lb - la
    has = cover > 1e-9
    out[has] = (fb[has] - fa[has]) / cover[has]
    return out


def bin_mean(base_ts: np.ndarray, base_interval_s: np.ndarray, ts: np.ndarray,
             values: np.ndarray) -> np.ndarray:
    """Mean of ``values`` (at ``ts``) over each base interval ``[base_ts, base_ts + interval)``."""
    out = np.full(base_ts.size, np.nan)
    if ts.size == 0 or base_ts.size == 0:
        return out
    k = np.searchsorted(base_ts, ts, side="right") - 1
    ok = (k >= 0) & np.isfinite(values)
    ok[ok] &= ts[ok] < base_ts[k[ok]] + base_interval_s[k[ok]]
    if not ok.any():
        return out
    s = np.bincount(k[ok], weights=values[ok], minlength=base_ts.size)
    c = np.bincount(k[ok], minlength=base_ts.size)
    has = c > 0
    out[has] = s[has] / c[has]
    return out


def _to_index(ts_s: np.ndarray) -> pd.DatetimeIndex:
    return pd.DatetimeIndex(pd.to_datetime(ts_s, unit="s", utc=True), name="ts_utc")


def site_channels(conn: sa.Connection, site_id: str) -> dict[tuple[str, str], int]:
    """``{(device_id, quantity): channel_id}`` of a site's whole-device channels (inverter
    inputs: :func:`input_channels`)."""
    return dict(runcache.memo(conn, "site_channels", site_id,
                              lambda: _site_channels(conn, site_id)))


def _site_channels(conn: sa.Connection, site_id: str):
    d, c = schema.device, schema.channel
    q = (sa.select(d.c.device_id, c.c.quantity, c.c.channel_id)
         .join(c, c.c.device_pk == d.c.device_pk)
         .where(d.c.site_id == site_id, c.c.input_id == ""))
    return {(r.device_id, r.quantity): r.channel_id for r in conn.execute(q)}


def instant_channels(conn: sa.Connection, site_id: str) -> set[int]:
    """Channel ids of a site whose readings are instantaneous samples."""
    return set(runcache.memo(conn, "instant_channels", site_id,
                             lambda: _instant_channels(conn, site_id)))


def _instant_channels(conn: sa.Connection, site_id: str):
    d, c = schema.device, schema.channel
    q = (sa.select(c.c.channel_id).join(d, c.c.device_pk == d.c.device_pk)
         .where(d.c.site_id == site_id, c.c.sampling == "instant"))
    return set(conn.execute(q).scalars())


def input_channels(conn: sa.Connection, site_id: str, inverter_id: str | None = None
                   ) -> dict[tuple[str, str, str], int]:
    """``{(device_id, input_id, quantity): channel_id}`` of a site's inverter-input channels."""
    d, c = schema.device, schema.channel
    q = (sa.select(d.c.device_id, c.c.input_id, c.c.quantity, c.c.channel_id)
         .join(c, c.c.device_pk == d.c.device_pk)
         .where(d.c.site_id == site_id, c.c.input_id != ""))
    if inverter_id is not None:
        q = q.where(d.c.device_id == inverter_id)
    return {(r.device_id, r.input_id, r.quantity): r.channel_id for r in conn.execute(q)}


def input_dc_power(engine_or_conn: sa.Engine | sa.Connection, site_id: str, inverter_id: str,
                   start_s: int | None = None, end_s: int | None = None) -> pd.DataFrame:
    """DC power [kW] of each input (MPPT / string group) of one inverter.

    One column per input id, indexed by ``ts_utc`` (interval start; the union of the inputs'
    timestamps), plus ``interval_h``. An input's power is its ``p_dc_kw`` reading, or
    ``i_dc_a × v_dc_v / 1000`` where only current and voltage are logged. Instantaneous
    inputs are turned into interval means (:func:`instant_to_means`) first. Empty when the
    inverter has no input channels.
    """
    if isinstance(engine_or_conn, sa.Engine):
        with engine_or_conn.connect() as conn:
            return input_dc_power(conn, site_id, inverter_id, start_s, end_s)
    conn = engine_or_conn
    chans = input_channels(conn, site_id, inverter_id)
    inst = instant_channels(conn, site_id)

    def read(ch):
        ts, v, iv = read_channel(conn, ch, start_s, end_s, with_interval=True)
        iv = fill_unknown_intervals(ts, iv)
        return instant_to_means(ts, v, iv) if ch in inst else (ts, v, iv)

    series: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
    for inp in sorted({k[1] for k in chans}):
        p = chans.get((inverter_id, inp, "p_dc_kw"))
        got = read(p) if p is not None else None
        if got is None or not got[0].size:
            i_ch = chans.get((inverter_id, inp, "i_dc_a"))
            v_ch = chans.get((inverter_id, inp, "v_dc_v"))
            if i_ch is None or v_ch is None:
                continue
            ti, vi, ivi = read(i_ch)
            tv, vv, _ = read(v_ch)
            both, a, b = np.intersect1d(ti, tv, return_indices=True)
            got = (both, vi[a] * vv[b] / 1000.0, ivi[a])
        if got[0].size:
            series[inp] = got
    if not series:
        return pd.DataFrame(index=_to_index(np.zeros(0, dtype=np.int64)))
    ts = _union_sorted([v[0] for v in series.values()])
    cols: dict[str, np.ndarray] = {}
    interval = np.full(ts.size, np.nan)
    for inp, (t, v, iv) in series.items():
        col = np.full(ts.size, np.nan)
        pos = np.searchsorted(ts, t)
        col[pos] = v
        interval[pos] = np.where(np.isnan(interval[pos]), iv, interval[pos])
        cols[inp] = col
    cols["interval_h"] = interval / 3600.0
    return pd.DataFrame(cols, index=_to_index(ts))


def site_inverters(conn: sa.Connection, site_id: str) -> pd.DataFrame:
    """The site's inverter rows with ``device_id`` and ``device_pk``, ordered by device_id."""
    return runcache.memo(conn, "site_inverters", site_id,
                         lambda: _site_inverters(conn, site_id)).copy()


def _site_inverters(conn: sa.Connection, site_id: str):
    d, i = schema.device, schema.inverter
    q = (sa.select(d.c.device_id, i).join(i, i.c.device_pk == d.c.device_pk)
         .where(d.c.site_id == site_id).order_by(d.c.device_id))
    rows = conn.execute(q).mappings().all()
    cols = ["device_id"] + [c.name for c in i.columns]
    return pd.DataFrame([dict(r) for r in rows], columns=cols)


def _empty_inverter_frame() -> pd.DataFrame:
    return pd.DataFrame({c: pd.Series([], dtype=float) for c in INVERTER_FRAME_COLUMNS},
                        index=_to_index(np.zeros(0, dtype=np.int64)))


def _union_sorted(arrays: list[np.ndarray]) -> np.ndarray:
    arrays = [a for a in arrays if a.size]
    if len(arrays) == 1 and (arrays[0].size < 2 or (np.diff(arrays[0]) > 0).all()):
        return arrays[0]  # one channel read in key order: already sorted and unique
    return np.unique(np.concatenate(arrays))


def fill_gaps(ts_s: np.ndarray, interval_s: np.ndarray, start_s: int | None = None,
              end_s: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Add the interval starts that have no row: inside gaps, and back to ``start_s`` / on to
    ``end_s`` (exclusive) when given, stepping by the neighbouring row's interval.

    A logger that was down (or does not log at night) leaves no rows; the daily figures
    must see those intervals as missing, not as absent, or a day's coverage would be
    overstated. Returns ``(ts_s, interval_s)`` sorted.

    Examples
    --------
    >>> ts, iv = fill_gaps(np.array([900, 3600]), np.array([900.0, 900.0]), 0, 4500)
    >>> ts.tolist()
    [0, 900, 1800, 2700, 3600]
    """
    ts = np.asarray(ts_s, dtype=np.int64)
    step = np.maximum(np.asarray(interval_s, dtype=float), 1.0).round().astype(np.int64)
    if ts.size == 0:
        return ts, step.astype(float)
    last_end = ts[-1] + step[-1] if end_s is None else max(int(end_s), ts[-1] + step[-1])
    nxt = np.append(ts[1:], last_end)
    n_ins = np.maximum((nxt - ts) // step - 1, 0)
    n_ins[-1] = max((last_end - ts[-1]) // step[-1] - 1, 0) if end_s is not None else 0
    n_lead = max((ts[0] - int(start_s)) // step[0], 0) if start_s is not None else 0
    if not n_ins.any() and not n_lead:
        return ts, step.astype(float)
    total = int(n_ins.sum())
    owner = np.repeat(np.arange(ts.size), n_ins)
    j = np.arange(total) - np.repeat(np.cumsum(n_ins) - n_ins, n_ins) + 1
    new_ts = ts[owner] + j * step[owner]
    lead = ts[0] - step[0] * np.arange(n_lead, 0, -1, dtype=np.int64)
    all_ts = np.concatenate((lead, ts, new_ts))
    all_step = np.concatenate((np.full(n_lead, step[0]), step, step[owner]))
    order = np.argsort(all_ts, kind="stable")
    return all_ts[order], all_step[order].astype(float)


def _assemble(channels: dict, inv: dict, read, binned: dict, start_s=None, end_s=None
              ) -> pd.DataFrame:
    own = [(q, channels.get((inv["device_id"], q))) for q in ("p_ac_kw", "e_ac_kwh")]
    data = {q: read(ch) for q, ch in own if ch is not None}
    if not data or all(v[0].size == 0 for v in data.values()):
        return _empty_inverter_frame()
    ts = _union_sorted([v[0] for v in data.values()])
    # each row's interval as recorded at ingest: from power where it has a row, else energy
    iv = np.full(ts.size, np.nan)
    pos_of = {}
    for q in ("e_ac_kwh", "p_ac_kw"):
        if q in data and data[q][0].size:
            pos_of[q] = pos = (np.arange(ts.size) if data[q][0].size == ts.size
                               else np.searchsorted(ts, data[q][0]))
            iv[pos] = data[q][2]
    ts, int_s = fill_gaps(ts, fill_unknown_intervals(ts, iv), start_s, end_s)
    interval_h = int_s / 3600.0
    cols: dict[str, np.ndarray] = {}
    for q in ("p_ac_kw", "e_ac_kwh"):
        col = np.full(ts.size, np.nan)
        if q in data and data[q][0].size:
            col[np.searchsorted(ts, data[q][0])] = data[q][1]
        cols[q] = col
    for q, ref in SENSOR_REFS.items():
        sid = inv.get(ref)
        ch = channels.get((sid, q)) if sid else None
        if ch is None:
            cols[q] = np.full(ts.size, np.nan)
            continue
        # inverters of a site usually share one timestamp grid: bin each sensor once per grid
        hit = binned.get(ch)
        if hit is not None and hit[0].size == ts.size and np.array_equal(hit[0], ts):
            cols[q] = hit[1]
            continue
        st, sv, siv = read(ch)
        cols[q] = overlap_mean(ts, int_s, st, siv, sv)
        binned[ch] = (ts, cols[q])
    cols["interval_h"] = interval_h
    return pd.DataFrame(cols, index=_to_index(ts))[list(INVERTER_FRAME_COLUMNS)]


def _prefetched(engine: sa.Engine, site_id: str, start_s, end_s, inverter_ids,
                depth: int = 2) -> Iterator[tuple[dict, pd.DataFrame]]:
    """Run :func:`inverter_frames` in a reader thread with its own connection, ``depth``
    frames ahead, so reading the store (mostly in SQLite, outside the GIL) overlaps the
    caller's computing."""
    q: queue.Queue = queue.Queue(maxsize=depth)
    stop = threading.Event()
    done = object()

    def produce():
        try:
            with engine.connect() as conn:
                for item in inverter_frames(conn, site_id, start_s, end_s, inverter_ids):
                    while not stop.is_set():
                        try:
                            q.put(item, timeout=0.2)
                            break
                        except queue.Full:
                            continue
                    if stop.is_set():
                        return
            q.put(done)
        except BaseException as exc:  # noqa: BLE001 - re-raised in the consumer
            q.put(exc)

    th = threading.Thread(target=produce, name="heliaudit-reader", daemon=True)
    th.start()
    try:
        while True:
            item = q.get()
            if item is done:
                return
            if isinstance(item, BaseException):
                raise item
            yield item
    finally:
        stop.set()
        th.join()


def _select_inverters(invs: pd.DataFrame, site_id: str, inverter_ids) -> pd.DataFrame:
    if inverter_ids is None:
        return invs
    wanted = list(inverter_ids)
    unknown = sorted(set(wanted) - set(invs["device_id"]))
    if unknown:
        raise KeyError(f"site {site_id!r} has no inverter {', '.join(map(repr, unknown))}")
    return invs[invs["device_id"].isin(wanted)]


def _channel_reader(conn: sa.Connection, records: list[dict], channels: dict, start_s, end_s,
                    instant: set[int] = frozenset()):
    """``read(channel_id) -> (ts_s, value, interval_s)`` on ``conn``, instantaneous channels
    as interval means; keeps sensor channels (shared by inverters)."""
    cache: dict[int, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
    sensor_channels = {channels.get((inv[ref], q)) for inv in records
                       for q, ref in SENSOR_REFS.items() if inv.get(ref)}

    def read(ch: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        if ch in cache:
            return cache[ch]
        got = read_channel(conn, ch, start_s, end_s, with_interval=True)
        if ch in sensor_channels:  # an inverter's own channels: filled on the frame's union
            got = (got[0], got[1], fill_unknown_intervals(got[0], got[2]))
        if ch in instant:
            got = instant_to_means(*got)
        if ch in sensor_channels:
            cache[ch] = got
        return got

    return read


def inverter_frames(engine_or_conn: sa.Engine | sa.Connection, site_id: str,
                    start_s: int | None = None, end_s: int | None = None,
                    inverter_ids: Iterable[str] | None = None, *, prefetch: bool = False
                    ) -> Iterator[tuple[dict, pd.DataFrame]]:
    """Yield ``(inverter row as dict, frame)`` for the site's inverters, each sensor read once.

    The frame is that of :func:`inverter_frame`. Sensor channels shared by several inverters
    are read once and kept while the generator runs. With ``prefetch`` (an Engine only) the
    frames are read in a background thread while the caller works on the previous one.
    """
    if prefetch and isinstance(engine_or_conn, sa.Engine):
        yield from _prefetched(engine_or_conn, site_id, start_s, end_s, inverter_ids)
        return
    if isinstance(engine_or_conn, sa.Engine):
        with engine_or_conn.connect() as conn:
            yield from inverter_frames(conn, site_id, start_s, end_s, inverter_ids)
        return
    conn = engine_or_conn
    channels = site_channels(conn, site_id)
    records = _select_inverters(site_inverters(conn, site_id), site_id,
                                inverter_ids).to_dict("records")
    read = _channel_reader(conn, records, channels, start_s, end_s,
                           instant_channels(conn, site_id))
    binned: dict[int, tuple[np.ndarray, np.ndarray]] = {}
    for inv in records:
        yield inv, _assemble(channels, inv, read, binned, start_s, end_s)


def inverter_frame(engine: sa.Engine | sa.Connection, site_id: str, inverter_id: str,
                   start_s: int | None = None, end_s: int | None = None) -> pd.DataFrame:
    """One inverter's interval frame joined with its configured sensors.

    Returns
    -------
    DataFrame indexed by ``ts_utc`` (tz-aware UTC, interval start) with columns
    ``p_ac_kw, e_ac_kwh, poa_wm2, t_module_c, t_amb_c, wind_ms, interval_h`` (NaN where a
    channel has no reading or the inverter has no such sensor). Empty when the inverter
    has no power or energy readings in the window.

    Raises
    ------
    KeyError
        If the site has no inverter ``inverter_id``.
    """
    for _inv, frame in inverter_frames(engine, site_id, start_s, end_s, [inverter_id]):
        return frame
    raise KeyError(f"site {site_id!r} has no inverter {inverter_id!r}")  # pragma: no cover


def site_frame(engine: sa.Engine | sa.Connection, site_id: str, start_s: int | None = None,
               end_s: int | None = None) -> pd.DataFrame:
    """Every channel of a site side by side.

    Returns
    -------
    DataFrame indexed by ``ts_utc`` (the union of all channels' timestamps), columns a
    MultiIndex ``(device_id, quantity)``; each device also gets ``(device_id, 'interval_h')``
    from the spacing of its own timestamps (NaN where the device has no reading).
    """
    if isinstance(engine, sa.Engine):
        with engine.connect() as conn:
            return site_frame(conn, site_id, start_s, end_s)
    conn = engine
    channels = site_channels(conn, site_id)
    got = {key: read_channel(conn, ch, start_s, end_s, with_interval=True)
           for key, ch in sorted(channels.items())}
    got = {k: v for k, v in got.items() if v[0].size}
    if not got:
        return pd.DataFrame(index=_to_index(np.zeros(0, dtype=np.int64)),
                            columns=pd.MultiIndex.from_tuples([], names=["device_id", "quantity"]))
    ts = np.unique(np.concatenate([v[0] for v in got.values()]))
    cols: dict[tuple[str, str], np.ndarray] = {}
    devices = sorted({d for d, _q in got})
    for dev in devices:
        iv = np.full(ts.size, np.nan)
        for (d, q), (t, v, t_iv) in got.items():
            if d == dev:
                col = np.full(ts.size, np.nan)
                pos = np.searchsorted(ts, t)
                col[pos] = v
                cols[(d, q)] = col
                iv[pos] = np.where(np.isnan(iv[pos]), t_iv, iv[pos])
        has = np.flatnonzero(np.isfinite(iv) | np.any([np.isfinite(cols[(dev, q)])
                                                       for (d, q) in got if d == dev], axis=0))
        dev_ts = ts[has]
        iv[has] = fill_unknown_intervals(dev_ts, iv[has])
        cols[(dev, "interval_h")] = iv / 3600.0
    out = pd.DataFrame(cols, index=_to_index(ts))
    out.columns = pd.MultiIndex.from_tuples(out.columns, names=["device_id", "quantity"])
    return out
