"""Logger timestamps to the store key: integer UTC epoch seconds of the interval start (``ts_s``).

Steps, in order, for each row (see README "Ingest rules"):

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
   step before it), in which case the other side's step is used. This follows a change of
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


def _ns(day: dt.date) -> np.int64:
    return np.datetime64(day, "ns").astype(np.int64)


def parse_wall(raw: np.ndarray, fmt: str) -> tuple[np.ndarray, bool]:
    """Parse text timestamps; return (int64 ns, NAT where unparseable) and whether they carry offsets.

    With offsets (``%z`` or ISO 8601 with ``Z``/``+hh:mm``) the ns are UTC, else wall-clock time.
    """
    s = pd.Series(raw, dtype=object)
    if fmt == "epoch_s":
        num = pd.to_numeric(s, errors="coerce").to_numpy(dtype=float)
        out = np.full(len(num), NAT, dtype=np.int64)
        ok = np.isfinite(num) & (np.abs(num) < 1e11)
        out[ok] = np.round(num[ok] * 1e9).astype(np.int64)
        return out, True
    aware = "%z" in fmt or (fmt == "iso8601" and bool(
        s.dropna().astype(str).str.contains(_OFFSET).any()))
    kw = {"format": "ISO8601" if fmt == "iso8601" else fmt, "errors": "coerce"}
    if aware:
        kw["utc"] = True
    parsed = pd.to_datetime(s.str.strip() if len(s) else s, **kw)
    idx = pd.DatetimeIndex(parsed)
    if idx.tz is not None:
        idx = idx.tz_convert("UTC").tz_localize(None)
    return idx.as_unit("ns").asi8.copy(), aware


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
        self._earliest = _ns(self.earliest)
        self._latest = _ns(self.latest + dt.timedelta(days=1))  # inclusive of the latest day
        self.offset_s = None
        if spec.zone not in ("local", "UTC"):
            sign = -1 if spec.zone[0] == "-" else 1
            hh, mm = spec.zone[1:].split(":")
            self.offset_s = sign * (int(hh) * 3600 + int(mm) * 60)

    def convert(self, raw: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Return (UTC label seconds as int64, NAT where rejected) and the reason per row (or None)."""
        wall, aware = parse_wall(raw, self.spec.format)
        reasons = np.full(len(wall), None, dtype=object)
        bad = wall == NAT
        if bad.any():
            fmt = self.spec.format
            for i in np.flatnonzero(bad):
                reasons[i] = (f"timestamp {str(raw[i])!r} does not match format {fmt!r}"
                              if fmt != "epoch_s" else
                              f"timestamp {str(raw[i])!r} is not epoch seconds")
        out_w = ~bad & ((wall < self._earliest) | (wall >= self._latest))
        if out_w.any():
            for i in np.flatnonzero(out_w):
                reasons[i] = (f"timestamp {str(raw[i]).strip()!r} is outside the plausible dates "
                              f"{self.earliest} .. {self.latest} (timestamp.earliest / latest)")
            wall[out_w] = NAT
            bad = bad | out_w
        for n, (lo, hi, shift, _c) in enumerate(self._corr):
            m = (wall >= lo) & (wall <= hi) & ~bad
            k = int(m.sum())
            if k:
                wall[m] += shift
                self.corrected[n] += k
        if aware or self.spec.zone == "UTC":
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


def infer_intervals(labels: np.ndarray, label: str) -> np.ndarray:
    """Interval length [s] for each of the sorted distinct ``labels`` (NaN where unknown).

    ``label`` is "end" or "start"; see the module docstring for the rule.
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
    return np.where(take, primary, alt)


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
