"""Incremental flags (issue #16): recompute only the window new data can change.

Each detector declares how far back it has to look (:data:`LOOKBACK`). Three groups:

* **each inverter's own flags from its intervals** (outage, clipping by month, power-channel
  range / flatline / dropout, energy-counter check by month, input mismatch): recomputed from
  a *cut* on, reading the intervals from the cut minus the look-back. Flags that start before
  the cut are kept from the store (``flag_part``) as the detectors gave them. The cut is the
  start of the local month two days before the first new reading (or before the last reading
  the previous run saw, if earlier: data loaded out of order), moved back to the start of
  any kept flag still open at it (an outage across nights, a flat line, a month of clipping),
  so an event is always recomputed whole and never split at the cut;
* **whole-history detectors on daily inputs** (soiling and cleanings, underperformance with
  its 90-day own history, fleet-power drift, each inverter's clock shift from its daily
  offsets): rerun over the whole history every time, from the daily table and the daily
  inputs kept in ``flag_day`` (unclipped daily index, energy withheld by a power limit, clock
  offset and clear-day mark per inverter and day) with the new days computed from the window;
* **sensors** (store v7): each sensor's interval checks (range, flatline, dropout, night) are
  kept in ``flag_part`` and recomputed from the cut like an inverter's; its day judgements
  (validity and its reason, the clear-period and clear-day ratios to clear-sky POA, the clock
  offset, daily rain, the night and full-sun samples of the ambient-offset check) are kept
  per day in ``flag_day``, computed for the days from the cut on and joined with the stored
  ones; the detectors over whole histories of days (validity runs, drift, clear-sky level,
  sibling drift and jumps, sensor clock shifts, the ambient offset's medians) then run on the
  joined days as in a full run. A sibling jump (found now or by the last run) makes the
  sensors be judged whole: its invalid days change the judgement of days before the cut.

Then the site-wide merging (simultaneous outages, clipping by month, clock agreement, shared
dropouts, root causes) runs over all of it, as in a full run, and only flags that changed are
replaced in the store. An inverter with a power limit is read whole (the limit's level is
estimated from every high-irradiance interval); a limit appearing for the first time is found
by the next full run (``compute --full``, or the schedule in ``heliaudit.cmd_compute``).
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from analytics.outliers import FLAG_COLUMNS

#: Look-back of each detector [days] (how far before the cut its input must reach), or
#: "history" for those rerun over the whole history from daily inputs or whole channels.
LOOKBACK = {
    "outage": 1,              # runs bridge nights; daily window edges and whole-day counts
    "sensor_range": 1,        # runs of the power channel, merged across short gaps
    "sensor_flatline": 1,     # >= 4-8 equal samples
    "data_dropout": 1,        # missing power while the sun is up
    "clipping": 0,            # per local month: the cut is a month start
    "counter_mismatch": 1,    # per local month; one day for the first counter difference
    "input_mismatch": 30,     # >= 3 of 5 valid days, cleared after 3 normal days
    "power_limit": "history",     # one level from every high-irradiance interval
    "clock_shift": "history",     # rolling median of 7 clear days, from stored daily offsets
    "underperformance": "history",  # peers, 90-day own history, persistence (daily table)
    "soiling": "history",     # intervals between cleanings (daily table + stored daily index)
    "sensor_night": 2,        # night irradiance runs merge across 36 h
    # sensors' day judgements (validity, ratios, clock offset, rain, ambient samples): the
    # day alone, stored; their whole-history detectors run on the stored days
    "sensor_days": 0,
    "stopped_reporting": "history",  # each device's last reading (kept per inverter)
}
#: Days before the first new reading from which flags are recomputed (then back to a month start).
MARGIN_DAYS = 2


def _lookback_days(kinds) -> int:
    return max(int(LOOKBACK[k]) for k in kinds if LOOKBACK[k] != "history")


INTERVAL_LOOKBACK_DAYS = _lookback_days(k for k in LOOKBACK if k != "input_mismatch")
INPUT_LOOKBACK_DAYS = int(LOOKBACK["input_mismatch"])


def _day_ts(day_no: int) -> pd.Timestamp:
    return pd.Timestamp(int(day_no) * 86400, unit="s")


def month_start_s(t_s: int, std_offset_s: int) -> int:
    """UTC epoch seconds of the start of the local standard month containing ``t_s``."""
    d = dt.datetime.fromtimestamp(int(t_s) + int(std_offset_s), dt.UTC).date().replace(day=1)
    return int(dt.datetime(d.year, d.month, 1, tzinfo=dt.UTC).timestamp()) - int(std_offset_s)


def find_cut(first_new_s: int, through_s: int | None, parts: pd.DataFrame,
             std_offset_s: int, full_devices=()) -> int:
    """The cut (UTC s, a local month start): flags starting from it are recomputed.

    Starts at the month of ``MARGIN_DAYS`` before the earlier of the first new reading and
    the last reading the previous run saw, and moves back to the month start of any kept
    flag that is still open at it, until none is.
    """
    t = int(first_new_s) if through_s is None else min(int(first_new_s), int(through_s))
    cut = month_start_s(t - MARGIN_DAYS * 86400, std_offset_s)
    if parts.empty:
        return cut
    p = parts[~parts["device_id"].isin(list(full_devices))]
    start, end = p["start_s"].to_numpy(np.int64), p["end_s"].to_numpy(np.int64)
    while True:
        open_ = (start < cut) & (end >= cut)
        if not open_.any():
            return cut
        cut = month_start_s(int(start[open_].min()), std_offset_s)


def day_products(withheld: dict, soiling_pi: dict, clock_days: dict, *,
                 from_day: int | None = None, keep=()) -> pd.DataFrame:
    """One row per inverter and local day with the daily inputs of the whole-history
    detectors (the ``flag_day`` columns); ``clock_clear`` is None on days without an offset.
    With ``from_day`` only days from it on (all days of the inverters in ``keep``).

    Rows: every inverter with a withheld energy or soiling index on every day any of them
    has one (NaN where it has none), and every day with a clock offset; a day given twice in
    one input keeps its first non-NaN value. Built on whole arrays (issue #16)."""
    if from_day is not None:
        cut = _day_ts(from_day)

        def tail(src):
            return {d: (x if d in keep or x is None else x[x.index >= cut])
                    for d, x in src.items()}

        withheld, soiling_pi, clock_days = tail(withheld), tail(soiling_pi), tail(clock_days)
    cols = ["device_id", "day_no", "soiling_pi", "withheld_kwh", "clock_delta_min", "clock_clear"]
    srcs = {"withheld_kwh": {d: x for d, x in withheld.items() if x is not None and len(x)},
            "soiling_pi": {d: x for d, x in soiling_pi.items() if x is not None and len(x)},
            "clock": {d: x for d, x in clock_days.items() if x is not None and len(x)}}
    devs = sorted({str(d) for s in srcs.values() for d in s})
    if not devs:
        return pd.DataFrame(columns=cols)
    code = {d: k for k, d in enumerate(devs)}  # code order = device order

    def keys(src) -> np.ndarray:  # (device code, day number) as one sortable int64
        if not src:
            return np.empty(0, np.int64)
        return np.concatenate([code[str(d)] * _KEY_DAYS + _day_numbers(x.index) + _KEY_DAYS // 2
                               for d, x in src.items()])

    def values(src, get) -> np.ndarray:
        return np.concatenate([get(x) for x in src.values()]) if src else np.empty(0)

    k = {n: keys(src) for n, src in srcs.items()}
    # the withheld energy and soiling index: every device with either, on every day any of
    # them has (the cartesian product pandas' pivot_table(dropna=False) gave before), then
    # the clock days
    ws = np.concatenate([k["withheld_kwh"], k["soiling_pi"]])
    grid = (np.unique(ws // _KEY_DAYS)[:, None] * _KEY_DAYS
            + np.unique(ws % _KEY_DAYS)[None, :]).ravel()
    key = np.unique(np.concatenate([grid, k["clock"]]))  # sorted: by device, then day
    out = {"device_id": np.asarray(devs, dtype=object)[key // _KEY_DAYS],
           "day_no": key % _KEY_DAYS - _KEY_DAYS // 2}
    for n in ("soiling_pi", "withheld_kwh"):
        v = values(srcs[n], lambda x: x.to_numpy(float))
        out[n] = np.full(len(key), np.nan)
        if len(v):  # the first non-NaN value of each key (pivot_table's "first")
            o = np.lexsort((np.isnan(v), k[n]))
            uk, first = np.unique(k[n][o], return_index=True)
            out[n][np.searchsorted(key, uk)] = v[o][first]
    delta = np.full(len(key), np.nan)
    clear = np.full(len(key), None, dtype=object)
    if srcs["clock"]:
        at = np.searchsorted(key, k["clock"])
        delta[at] = values(srcs["clock"], lambda x: x["delta_min"].to_numpy(float))
        clear[at] = values(srcs["clock"], lambda x: x["clear"].to_numpy(bool)).astype(object)
    out["clock_delta_min"], out["clock_clear"] = delta, clear
    res = pd.DataFrame({c: out[c] for c in cols})
    res["clock_clear"] = res["clock_clear"].astype(object)
    return res


#: Day numbers per device code in :func:`day_products`' row keys (days from 1970 +- 2**31).
_KEY_DAYS = 1 << 32


def sensor_day_rows(products: dict) -> pd.DataFrame:
    """``flag_day`` rows of the sensors from their day products: sensor id -> DataFrame
    indexed by local standard day (Timestamp) with any of ``valid_reason``, ``sky_ratio``,
    ``jump_ratio``, ``clock_delta_min``, ``clock_clear``, ``rain_mm``, ``amb_night_c``,
    ``amb_day_c``."""
    cols = ["device_id", "day_no", "valid_reason", "sky_ratio", "jump_ratio",
            "clock_delta_min", "clock_clear", "rain_mm", "amb_night_c", "amb_day_c"]
    pieces = []
    for sid, tab in products.items():
        if tab is None or not len(tab):
            continue
        t = tab.reindex(columns=cols[2:])
        t.insert(0, "day_no", _day_numbers(tab.index))
        t.insert(0, "device_id", sid)
        pieces.append(t.reset_index(drop=True))
    if not pieces:
        return pd.DataFrame(columns=cols)
    out = pd.concat(pieces, ignore_index=True)
    out["clock_clear"] = pd.Series([None if v is None or v != v else bool(v)
                                    for v in out["clock_clear"]], dtype=object)
    return out


def stored_sensor_days(rows: pd.DataFrame | None) -> pd.DataFrame | None:
    """The stored day judgements of one sensor indexed by local standard day (Timestamp)."""
    if rows is None or not len(rows):
        return None
    out = rows.drop(columns=["device_id"]).copy()
    out.index = _day_ts_index(rows["day_no"].to_numpy(np.int64))
    return out.drop(columns=["day_no"])


def _day_ts_index(day_no: np.ndarray) -> pd.DatetimeIndex:
    return pd.DatetimeIndex(pd.to_datetime(np.asarray(day_no, np.int64) * 86400, unit="s"))


def _day_numbers(index) -> np.ndarray:
    return pd.DatetimeIndex(index).as_unit("s").asi8 // 86400


@dataclass
class Prior:
    """What an incremental run takes from the store: each inverter's own flags before
    ``cut_s``, the daily inputs before ``cut_day``, each inverter's last reading, the
    inverters that ever had data, and those read whole (``full_devices``)."""

    cut_s: int
    cut_day: int
    parts: pd.DataFrame
    late_parts: pd.DataFrame  # input mismatch: added after the site-wide merging
    last_seen: dict = field(default_factory=dict)
    seen: set = field(default_factory=set)
    full_devices: set = field(default_factory=set)
    #: sensor id -> its stored day judgements before ``cut_day`` (``flag_day`` rows)
    sensor_days: dict = field(default_factory=dict)
    #: sensor id -> (last valid reading [UTC s], quantity); (first row, last row) [UTC s]
    sensor_last: dict = field(default_factory=dict)
    sensor_span: dict = field(default_factory=dict)
    #: sensors read and judged whole (a sibling jump, now or in the last run)
    sensors_whole: bool = False
    #: the sensors' interval flags (range, flatline, dropout, night) before the cut
    sensor_parts: pd.DataFrame | None = None
    #: sensors whose flags and days this run replaces whole (all of them when sensors_whole)
    whole_sensors: set = field(default_factory=set)
    #: inverter id -> its packed daily inputs before ``cut_day`` (:func:`db.flags.
    #: read_inverter_days` arrays)
    inverter_days: dict = field(default_factory=dict)

    @property
    def sensor_window(self) -> bool:
        return not self.sensors_whole

    @classmethod
    def from_store(cls, cut_s: int, cut_day: int, parts: pd.DataFrame, days: pd.DataFrame,
                   state: dict, sensor_ids=(), inverter_days: dict | None = None) -> Prior:
        sensors_whole = bool(state.get("sensors_whole", False))
        sensor_ids = set(sensor_ids)
        is_sensor = days["device_id"].isin(list(sensor_ids))
        sdays = days[is_sensor & (days["day_no"] < cut_day)]
        if sensors_whole:  # the sensors' stored parts are replaced whole too
            parts = parts[~parts["device_id"].isin(list(sensor_ids))]
        full = set(state.get("full_devices", []))
        keep = (parts["start_s"] < cut_s) & ~parts["device_id"].isin(list(full))
        kept = parts[keep]
        s_kept = kept["device_id"].isin(list(sensor_ids))
        sensor_parts = kept[s_kept][list(FLAG_COLUMNS)].reset_index(drop=True)
        kept = kept[~s_kept]
        late = kept["kind"] == "input_mismatch"
        packed = {}
        for dev, arr in (inverter_days or {}).items():
            k = int(np.searchsorted(arr["day_no"], int(cut_day)))
            if dev not in full and k:
                packed[dev] = {c: a[:k] for c, a in arr.items()}
        return cls(cut_s=int(cut_s), cut_day=int(cut_day), inverter_days=packed,
                   parts=kept[~late][list(FLAG_COLUMNS)].reset_index(drop=True),
                   late_parts=kept[late][list(FLAG_COLUMNS)].reset_index(drop=True),
                   last_seen={k: int(v) for k, v in state.get("last_seen", {}).items()},
                   seen=set(state.get("seen", [])), full_devices=full,
                   sensor_days={} if sensors_whole else {
                       sid: g.reset_index(drop=True) for sid, g in sdays.groupby("device_id")},
                   sensor_last={k: (int(v[0]), str(v[1]))
                                for k, v in state.get("sensor_last", {}).items()},
                   sensor_span={k: (int(v[0]), int(v[1]))
                                for k, v in state.get("sensor_span", {}).items()},
                   sensors_whole=sensors_whole, sensor_parts=sensor_parts,
                   whole_sensors=sensor_ids if sensors_whole else set())

    def keep_new(self, part: pd.DataFrame) -> pd.DataFrame:
        """Rows of a window's flags that the window decides: from the cut on, or of an
        inverter read whole."""
        if part.empty:
            return part
        m = (part["start_s"].to_numpy(np.int64) >= self.cut_s) | \
            part["device_id"].isin(list(self.full_devices | self.whole_sensors)).to_numpy()
        return part[m]

    def merge(self, inv_parts, withheld, soiling_pi, clock_days):
        """Window results joined with the stored ones: flags before the cut and daily
        inputs before the cut day from the store, the rest from the window."""
        parts = [self.parts] if len(self.parts) else []
        parts += [k for k in (self.keep_new(p) for p in inv_parts if len(p)) if len(k)]
        cut = _day_ts(self.cut_day)
        by_dev = self._stored_by_device()

        def join(stored, window):
            if window is not None and len(window):
                window = window[window.index >= cut]
            pieces = [x for x in (stored, window) if x is not None and len(x)]
            return pd.concat(pieces) if len(pieces) > 1 else (pieces[0] if pieces else None)

        out_w, out_s, out_c = {}, {}, {}
        for dev in set(by_dev) | set(withheld) | set(soiling_pi) | set(clock_days):
            if dev in self.full_devices:
                for out, src in ((out_w, withheld), (out_s, soiling_pi), (out_c, clock_days)):
                    if dev in src:
                        out[dev] = src[dev]
                continue
            sw, ss, sc = by_dev.get(dev, (None, None, None))
            for out, stored, src in ((out_w, sw, withheld), (out_s, ss, soiling_pi),
                                     (out_c, sc, clock_days)):
                got = join(stored, src.get(dev))
                if got is not None:
                    out[dev] = got
        return parts, out_w, out_s, out_c

    def _stored_by_device(self) -> dict:
        """Inverter id -> its stored (withheld, soiling index, clock offsets) before the cut
        day, each None when it has no value: slices of its packed arrays (issue #16)."""
        out = {}
        for dev, arr in self.inverter_days.items():
            i = _day_ts_index(arr["day_no"])
            w, so, delta, code = (arr["withheld_kwh"], arr["soiling_pi"],
                                  arr["clock_delta_min"], arr["clock_clear"])
            mw, ms, mc = ~np.isnan(w), ~np.isnan(so), code >= 0
            out[dev] = (
                pd.Series(w[mw], index=i[mw]) if mw.any() else None,
                pd.Series(so[ms], index=i[ms]) if ms.any() else None,
                pd.DataFrame({"delta_min": delta[mc], "clear": code[mc] == 1},
                             index=i[mc]) if mc.any() else None)
        return out
