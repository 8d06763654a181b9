"""Logger timestamps to the store key: integer UTC epoch seconds of the interval start (``ts_s``).

Steps, in order, for each row (see docs/config.md "Ingest rules"):

1. Parse the text with the source's ``format`` (a strptime pattern, ``iso8601`` or ``epoch_s``).
   Text that does not parse rejects the row ("bad timestamp").
2. Apply ``clock_corrections``: a timestamp within ``[start, end]`` (the export's own, wrong
   time) gets ``shift_minutes`` added.
3. Convert to UTC according to ``zone``: ``UTC``; a fixed offset ``+01:00`` (UTC = wall − offset);
   or ``local``, the site's IANA zone with DST through :mod:`zoneinfo`'s tz database:
   * a wall time inside the spring-forward gap does not exist; the row is rejected and the
     batch notes count it per date;
   * a wall time in the repeated autumn hour is ambiguous; ``ambiguous = "infer"`` takes the
     file order (the first pass through the hour is summer time; once the wall clock steps back,
     the rest of the hour is standard time), ``"first"`` takes summer time, ``"second"``
     standard time, ``"reject"`` rejects the rows. The notes say what was done.
4. Interval: from the distinct UTC labels in order. For interval-end labels a row's interval
   is the step since the previous label, for interval-start labels the step to the next one,
   unless that step is a gap (larger than the step on the other side and different from the
   step before it), in which case the other side's step is used; a step that no neighbouring
   step confirms is capped at the file's most common step (a row after a gap never takes the
   whole gap as its interval). This follows a change of
   interval mid-file (15 -> 5 min) from its first row. The key is the label for interval-start
   loggers and label − interval for interval-end loggers.
"""

from __future__ import annotations

import datetime as dt
import re
from collections import Counter

import numpy as np
import pandas as pd

from ingest.config import EARLIEST_DEFAULT, ClockCorrection, TimestampSpec

NAT = np.iinfo(np.int64).min
_OFFSET = re.compile(r"(?:Z|[+-]\d\d:?\d\d)\s*$")


def _epoch_s(day: dt.date) -> int:
    return int((day - dt.date(1970, 1, 1)).total_seconds())


_PER_S = {"s": 1, "ms": 10**3, "us": 10**6, "ns": 10**9}
#: Seconds range representable as int64 nanoseconds (pandas' 1677-09-21 .. 2262-04-11).
_NS_LO_S, _NS_HI_S = -9_223_372_036, 9_223_372_036


def _seconds(idx: pd.DatetimeIndex) -> np.ndarray:
    """int64 epoch seconds of a (naive or UTC) index, NAT where NaT; any resolution."""
    if idx.tz is not None:
        idx = idx.tz_convert("UTC").tz_localize(None)
    vals = idx.asi8
    per = _PER_S.get(str(idx.unit), 10**9)
    return np.where(vals == NAT, NAT, vals // per)


def has_offset(raw: np.ndarray) -> np.ndarray:
    """Whether each text timestamp ends with a UTC offset (``Z``, ``+hh:mm``, ``+hhmm``)."""
    s = pd.Series(raw, dtype=object)
    if not len(s):
        return np.zeros(0, dtype=bool)
    return s.str.contains(_OFFSET, na=False).to_numpy(dtype=bool)


def parse_wall(raw: np.ndarray, fmt: str, offsets: bool = False) -> np.ndarray:
    """Parse text timestamps to int64 epoch **seconds** (NAT where unparseable).

    With ``offsets`` (``%z``, ISO 8601 with ``Z``/``+hh:mm``, or ``epoch_s``) the seconds are
    UTC, else wall-clock time. Any year pandas can read is returned (the caller applies the
    plausible-date window); nothing overflows.
    """
    s = pd.Series(raw, dtype=object)
    if fmt == "epoch_s":
        num = pd.to_numeric(s, errors="coerce").to_numpy(dtype=float)
        out = np.full(len(num), NAT, dtype=np.int64)
        ok = np.isfinite(num) & (np.abs(num) < 1e11)
        out[ok] = np.round(num[ok]).astype(np.int64)
        return out
    if not len(s):
        return np.empty(0, dtype=np.int64)
    kw = {"format": "ISO8601" if fmt == "iso8601" else fmt, "errors": "coerce"}
    if offsets:
        kw["utc"] = True
    text = s.map(lambda x: x.strip() if isinstance(x, str) else x)
    try:
        parsed = pd.to_datetime(text, **kw)
    except (ValueError, OverflowError, TypeError):  # e.g. mixed offsets without utc: row by row
        parsed = pd.Series([_one(x, kw) for x in text], dtype=object)
        parsed = pd.to_datetime(parsed, utc=offsets, errors="coerce")
    return _seconds(pd.DatetimeIndex(parsed))


def _one(x, kw):
    try:
        return pd.to_datetime(x, **kw)
    except (ValueError, OverflowError, TypeError):
        return pd.NaT


class TimestampConverter:
    """Stateful converter for one file: text labels -> UTC epoch seconds of the label.

    State carries the ``infer`` decision for the repeated autumn hour across chunks; ``notes``
    collects what was done (clock corrections, DST gaps and repeats) for the batch record.
    """

    def __init__(self, spec: TimestampSpec, timezone: str,
                 corrections: tuple[ClockCorrection, ...] = ()):
        self.spec = spec
        self.timezone = timezone
        self.corrections = corrections
        self._corr = [(np.datetime64(c.start, "ns").astype(np.int64),
                       np.datetime64(c.end, "ns").astype(np.int64),
                       np.int64(c.shift_minutes) * 60 * 10**9, c) for c in corrections]
        self.corrected = Counter()  # correction index -> rows shifted
        self.gap_rows = Counter()  # local date -> rows rejected (nonexistent time)
        self.repeat_rows: dict[str, Counter] = {}  # local date -> {"summer": n, "standard": n, "rejected": n}
        self._infer_state: dict[str, tuple[int, bool]] = {}  # date -> (last wall ns, stepped back)
        self.earliest = spec.earliest or EARLIEST_DEFAULT
        self.latest = spec.latest or (dt.datetime.now(dt.UTC).date() + dt.timedelta(days=1))
        self._earliest_s = _epoch_s(self.earliest)
        self._latest_s = _epoch_s(self.latest + dt.timedelta(days=1))  # the latest day included
        self.offsets: bool | None = None  # timestamps carry UTC offsets: decided at the first one
        self.offsets_from = "the file's first timestamp"  # where the decision came from
        self.offset_s = None
        if spec.zone not in ("local", "UTC"):
            sign = -1 if spec.zone[0] == "-" else 1
            hh, mm = spec.zone[1:].split(":")
            self.offset_s = sign * (int(hh) * 3600 + int(mm) * 60)

    def convert(self, raw: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Return (UTC label seconds as int64, NAT where rejected) and the reason per row (or None).

        Whether timestamps carry a UTC offset is decided once per source: by its earlier
        loaded files (set ``offsets`` before the first call), else at this file's first
        timestamp (``%z`` formats and ``epoch_s``: always); a row of the other kind is
        rejected, never silently read in another zone.
        """
        fmt = self.spec.format
        n = len(raw)
        reasons = np.full(n, None, dtype=object)
        if fmt == "epoch_s" or "%z" in fmt:
            aware = np.ones(n, dtype=bool)
        elif fmt == "iso8601":
            aware = has_offset(raw)
        else:
            aware = np.zeros(n, dtype=bool)
        present = (pd.Series(raw, dtype=object).str.strip().str.len().fillna(0).to_numpy() > 0
                   if n else np.zeros(0, dtype=bool))
        if self.offsets is None and present.any():
            self.offsets = bool(aware[np.flatnonzero(present)[0]])
        mixed = present & (aware != bool(self.offsets))
        for i in np.flatnonzero(mixed):
            reasons[i] = (f"timestamp {str(raw[i]).strip()!r} "
                          + ("has no UTC offset" if self.offsets else "has a UTC offset")
                          + f", unlike {self.offsets_from}"
                          + "; mixed offset / no-offset rows are not read (which zone would apply?)")
        wall_s = parse_wall(raw, fmt, bool(self.offsets))
        wall_s[mixed] = NAT
        bad = (wall_s == NAT) & ~mixed
        for i in np.flatnonzero(bad):
            reasons[i] = (f"timestamp {str(raw[i])!r} does not match format {fmt!r}"
                          if fmt != "epoch_s" else
                          f"timestamp {str(raw[i])!r} is not epoch seconds")
        bad |= mixed
        out_w = ~bad & ((wall_s < self._earliest_s) | (wall_s >= self._latest_s))
        for i in np.flatnonzero(out_w):
            reasons[i] = (f"timestamp {str(raw[i]).strip()!r} is outside the plausible dates "
                          f"{self.earliest} .. {self.latest} (timestamp.earliest / latest)")
        bad |= out_w
        wall = np.where(bad, NAT, wall_s * np.int64(10**9))  # within the window: no overflow
        for k, (lo, hi, shift, _c) in enumerate(self._corr):
            m = (wall >= lo) & (wall <= hi) & ~bad
            cnt = int(m.sum())
            if cnt:
                wall[m] += shift
                self.corrected[k] += cnt
        if self.offsets or self.spec.zone == "UTC":
            utc = wall
        elif self.offset_s is not None:
            utc = np.where(bad, NAT, wall - np.int64(self.offset_s) * 10**9)
        else:
            utc = self._local(wall, bad, reasons)
        out = np.where(utc == NAT, NAT, utc // 10**9)
        return out, reasons

    def _local(self, wall: np.ndarray, bad: np.ndarray, reasons: np.ndarray) -> np.ndarray:
        idx = pd.DatetimeIndex(np.where(bad, NAT, wall).view("M8[ns]"))
        loc = idx.tz_localize(self.timezone, ambiguous="NaT", nonexistent="NaT")
        utc = loc.tz_convert("UTC").tz_localize(None).asi8.copy() if len(idx) else wall.copy()
        odd = (utc == NAT) & ~bad
        if not odd.any():
            return utc
        # Nonexistent (spring gap) vs ambiguous (autumn repeat): only the gap stays NaT
        # when every ambiguous time is given as summer time.
        as_dst = idx.tz_localize(self.timezone, ambiguous=np.ones(len(idx), dtype=bool),
                                 nonexistent="NaT")
        dst_utc = as_dst.tz_convert("UTC").tz_localize(None).asi8
        gap = odd & (dst_utc == NAT)
        for i in np.flatnonzero(gap):
            t = pd.Timestamp(wall[i])
            reasons[i] = (f"local time {t:%Y-%m-%d %H:%M:%S} does not exist in {self.timezone} "
                          "(clocks move forward for DST); the logger clock may not follow DST")
            self.gap_rows[f"{t:%Y-%m-%d}"] += 1
        amb = np.flatnonzero(odd & ~gap)
        if len(amb) == 0:
            return utc
        is_dst = np.ones(len(amb), dtype=bool)
        rule = self.spec.ambiguous
        for j, i in enumerate(amb):
            t = pd.Timestamp(wall[i])
            day = f"{t:%Y-%m-%d}"
            c = self.repeat_rows.setdefault(day, Counter())
            if rule == "reject":
                reasons[i] = (f"local time {t:%Y-%m-%d %H:%M:%S} occurs twice in {self.timezone} "
                              "(clocks move back for DST) and timestamp.ambiguous = \"reject\"")
                c["rejected"] += 1
                continue
            if rule == "second":
                is_dst[j] = False
            elif rule == "infer":
                last, stepped = self._infer_state.get(day, (None, False))
                if not stepped and last is not None and wall[i] <= last:
                    stepped = True
                is_dst[j] = not stepped
                self._infer_state[day] = (int(wall[i]), stepped)
            c["summer" if is_dst[j] else "standard"] += 1
        keep = np.array([reasons[i] is None for i in amb], dtype=bool)
        sel = amb[keep]
        if len(sel):
            sub = pd.DatetimeIndex(wall[sel].view("M8[ns]")).tz_localize(
                self.timezone, ambiguous=is_dst[keep])
            utc[sel] = sub.tz_convert("UTC").tz_localize(None).asi8
        return utc

    def notes(self) -> dict:
        out: dict = {}
        if self.offsets is not None:
            out["timestamp_offsets"] = self.offsets
        if self.corrected:
            out["clock_corrections"] = [
                {"start": c.start.isoformat(), "end": c.end.isoformat(),
                 "shift_minutes": c.shift_minutes, "note": c.note, "rows": self.corrected[n]}
                for n, (_lo, _hi, _s, c) in enumerate(self._corr) if self.corrected[n]]
        if self.gap_rows:
            out["dst_gap_rejected"] = dict(self.gap_rows)
        if self.repeat_rows:
            out["dst_repeated_hour"] = {
                d: {**dict(c), "rule": self.spec.ambiguous} for d, c in self.repeat_rows.items()}
        return out


def infer_intervals(labels: np.ndarray, label: str, nominal: float | None = None) -> np.ndarray:
    """Interval length [s] for each of the sorted distinct ``labels`` (NaN where unknown).

    ``label`` is "end" or "start"; see the module docstring for the rule. A step that no
    neighbouring step confirms (a row next to a gap, with no equal step before or across it)
    is a gap, not an interval: it is capped at ``nominal``, the file's most common step
    (default: the most common step of ``labels``), so a row after a gap never takes the whole
    gap as its interval.
    """
    u = labels.astype(float)
    n = len(u)
    d = np.diff(u)
    nan = np.array([np.nan])
    d_prev = np.concatenate([nan, d])  # u[k] - u[k-1]
    d_next = np.concatenate([d, nan])  # u[k+1] - u[k]
    if label == "end":
        primary, alt = d_prev, d_next
        before = np.concatenate([nan, d_prev[:-1]]) if n else d_prev
    else:
        primary, alt = d_next, d_prev
        before = np.concatenate([d_next[1:], nan]) if n else d_next
    with np.errstate(invalid="ignore"):
        take = ~np.isnan(primary) & ((primary <= alt) | np.isnan(alt) | (primary == before))
    iv = np.where(take, primary, alt)
    if nominal is None:
        nominal = most_common_step(u)
    if nominal is not None and n:
        # the four steps around each label; the chosen one (d_prev or d_next) is confirmed
        # when another of them equals it
        around = [np.concatenate([nan, d_prev[:-1]]), d_prev, d_next,
                  np.concatenate([d_next[1:], nan])]
        with np.errstate(invalid="ignore"):
            same = sum((iv == x).astype(int) for x in around)
            iv = np.where((same < 2) & (iv > nominal), nominal, iv)
    return iv


def most_common_step(labels: np.ndarray) -> float | None:
    """The most common positive step between sorted distinct labels, or None (ties: the smaller)."""
    d = np.diff(np.asarray(labels, dtype=float))
    d = d[d > 0]
    if len(d) == 0:
        return None
    vals, counts = np.unique(d, return_counts=True)
    return float(vals[np.argmax(counts)])


def describe_intervals(intervals_s: np.ndarray, min_run: int = 3) -> str | None:
    """``"900"`` or ``"900->300"``: the interval values in file order, runs shorter than ``min_run`` dropped."""
    v = intervals_s[~np.isnan(intervals_s)].astype(np.int64)
    if len(v) == 0:
        return None
    change = np.flatnonzero(np.diff(v)) + 1
    starts = np.concatenate([[0], change])
    ends = np.concatenate([change, [len(v)]])
    seq: list[int] = []
    for a, b in zip(starts, ends, strict=True):
        if b - a >= min_run and (not seq or seq[-1] != v[a]):
            seq.append(int(v[a]))
    if not seq:
        seq = [int(np.bincount(np.unique(v, return_inverse=True)[1]).argmax())]
        seq = [int(np.unique(v)[seq[0]])]
    return "->".join(str(x) for x in seq)


def fmt_utc(ts_s: int | None) -> str:
    if ts_s is None:
        return "-"
    return dt.datetime.fromtimestamp(int(ts_s), dt.UTC).strftime("%Y-%m-%d %H:%M")
