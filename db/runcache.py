"""Read once per run (issue #16): within :func:`read_once`, each channel's readings and each
site's configuration rows come from the store once and are shared by the daily table, the
flags and the degradation jobs of the run.

A channel read whole (or a wider range) serves every later request for a range inside it;
a request outside is read from the store and replaces the kept range with the union. Kept
arrays count against a budget (``HELIAUDIT_READ_CACHE_MB``, default 1024 MB; 24 bytes per
reading): beyond it channels are read again when asked for, as without the cache. Nothing is
kept after the ``with`` block; the store is not written while a run reads through it (a
``compute`` run writes results, never readings).
"""

from __future__ import annotations

import os
import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager

import numpy as np

_LOCK = threading.RLock()
_LOCAL = threading.local()
_RUN: dict | None = None


def active() -> bool:
    """True inside :func:`read_once` (and not while the cache itself reads the store)."""
    return _RUN is not None and not getattr(_LOCAL, "bypass", False)


@contextmanager
def read_once(budget_mb: float | None = None) -> Iterator[dict]:
    """Share reads within the block; yields counters ``{"hits", "reads", "readings_read"}``."""
    global _RUN
    if _RUN is not None:  # nested: the outer run's cache serves
        yield _RUN["stats"]
        return
    mb = float(os.environ.get("HELIAUDIT_READ_CACHE_MB", 1024)) if budget_mb is None else budget_mb
    _RUN = {"channels": {}, "memo": {}, "bytes": 0, "budget": mb * 1e6,
            "stats": {"hits": 0, "reads": 0, "readings_read": 0}}
    try:
        yield _RUN["stats"]
    finally:
        _RUN = None


def _store_key(conn) -> str:
    return str(conn.engine.url)


def _covers(lo, hi, start_s, end_s) -> bool:
    lo_ok = lo is None or (start_s is not None and start_s >= lo)
    hi_ok = hi is None or (end_s is not None and end_s <= hi)
    return lo_ok and hi_ok


def read(conn, channel_id: int, start_s, end_s, with_interval: bool,
         reader: Callable) -> tuple[np.ndarray, ...]:
    """``reader(conn, channel_id, start_s, end_s, with_interval=True)`` through the cache."""
    run = _RUN
    key = (_store_key(conn), int(channel_id))
    with _LOCK:
        got = run["channels"].get(key)
    if got is not None and not _covers(got[0], got[1], start_s, end_s) and \
            _holds_all(conn, channel_id, got):
        got = (None, None, got[2])  # the kept range holds every stored reading of the channel
        with _LOCK:
            run["channels"][key] = got
    if got is not None and _covers(got[0], got[1], start_s, end_s):
        run["stats"]["hits"] += 1
        ts, v, iv = got[2]
    else:
        lo, hi = start_s, end_s
        if got is not None:  # read the union, so the kept range only grows
            lo = None if lo is None or got[0] is None else min(lo, got[0])
            hi = None if hi is None or got[1] is None else max(hi, got[1])
        _LOCAL.bypass = True
        try:
            ts, v, iv = reader(conn, channel_id, lo, hi, with_interval=True)
        finally:
            _LOCAL.bypass = False
        run["stats"]["reads"] += 1
        run["stats"]["readings_read"] += int(ts.size)
        size = 24 * ts.size
        with _LOCK:
            old = run["channels"].pop(key, None)
            if old is not None:
                run["bytes"] -= 24 * old[2][0].size
            if run["bytes"] + size <= run["budget"]:
                run["channels"][key] = (lo, hi, (ts, v, iv))
                run["bytes"] += size
    a = 0 if start_s is None else int(np.searchsorted(ts, start_s, side="left"))
    b = ts.size if end_s is None else int(np.searchsorted(ts, end_s, side="left"))
    out = (ts[a:b].copy(), v[a:b].copy())
    return (*out, iv[a:b].copy()) if with_interval else out


def _holds_all(conn, channel_id: int, got: tuple) -> bool:
    """Whether the kept range ``[lo, hi)`` contains the channel's first and last stored
    reading (two index seeks), e.g. a full daily recompute's day-aligned range."""
    from db.readings import stored_range

    span = stored_range(conn, [int(channel_id)]).get(int(channel_id))
    if span is None:
        return True
    lo, hi = got[0], got[1]
    return (lo is None or lo <= span[0]) and (hi is None or hi > span[1])


def memo(conn, name: str, key, fn: Callable):
    """``fn()`` once per run for ``(store, name, key)`` (site rows, channel maps); a fresh
    call outside :func:`read_once`."""
    run = _RUN
    if run is None:
        return fn()
    k = (_store_key(conn), name, key)
    with _LOCK:
        if k in run["memo"]:
            return run["memo"][k]
    out = fn()
    with _LOCK:
        run["memo"][k] = out
    return out
