"""Level shifts in the daily performance index: steps are not slopes (issue #7).

A failed string, a replaced module row, an inverter swap or a sensor recalibration changes the
index in one day; a degradation rate fitted across such a step mixes the two. We detect steps
with PELT (pruned exact linear time, Killick et al. 2012) — the recursion of ``ruptures.Pelt``,
vectorised here (:func:`pelt_line`, tested to give ruptures' breakpoints) — on
14-day medians of the de-seasonalised index with a piecewise-linear cost (each segment has
its own level and slope, so slow degradation is not cut into a staircase), a penalty tied to
the noise, then refine each break to the day and size it from the medians of the 30 days on either side.

References
----------
.. [1] R. Killick, P. Fearnhead, I. A. Eckley, "Optimal detection of changepoints with a
   linear computational cost," J. Am. Stat. Assoc. 107(500):1590-1598, 2012,
   doi:10.1080/01621459.2012.737745.
.. [2] C. Truong, L. Oudre, N. Vayatis, "Selective review of offline change point detection
   methods," Signal Processing 167:107299, 2020 (the ``ruptures`` library),
   doi:10.1016/j.sigpro.2019.107299.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import ruptures

DAYS_PER_YEAR = 365.25


def deseasonalise(pi: pd.Series, *, harmonics: int = 1) -> pd.Series:
    """Divide the daily index by its fitted annual cycle (1 + Σ a_k sin 2πkt + b_k cos 2πkt).

    The cycle comes from a least-squares fit of PI on [1, t, harmonics]; over whole years a step
    is nearly orthogonal to the harmonics, so it survives, and outliers are handled later by
    the 14-day medians. Series in, Series out.
    """
    s = pi.dropna()
    if len(s) < 30:
        return pi.copy()
    t = ((s.index - s.index[0]) / pd.Timedelta(days=1)).to_numpy(dtype=float) / DAYS_PER_YEAR
    cols = [np.ones_like(t), t]
    for k in range(1, harmonics + 1):
        cols += [np.sin(2 * np.pi * k * t), np.cos(2 * np.pi * k * t)]
    X = np.column_stack(cols)
    beta = np.linalg.lstsq(X, s.to_numpy(), rcond=None)[0]
    season = X[:, 2:] @ beta[2:] / beta[0]
    out = pi.copy()
    out.loc[s.index] = s.to_numpy() / (1.0 + season)
    return out


def noise_sigma(x) -> float:
    """Robust noise level: 1.4826·MAD of first differences / √2 (a level-shift-insensitive
    estimate; the differences of independent noise have variance 2σ²; common practice).

    Examples
    --------
    >>> round(noise_sigma([0.0, 1.0, 3.0, 6.0, 10.0]), 4)   # d = 1 2 3 4: MAD 1, 1.4826/√2
    1.0484
    >>> noise_sigma([1.0, 1.0, 5.0, 5.0, 5.0])                   # one step: MAD ignores it
    0.0
    """
    d = np.diff(np.asarray(x, dtype=float)[np.isfinite(x)])
    if d.size < 2:
        return float("nan")
    return float(1.4826 * np.median(np.abs(d - np.median(d))) / np.sqrt(2))


def _segment_fit(t: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """OLS line (intercept, slope) of y on t."""
    if len(t) < 2:
        return float(np.mean(y)), 0.0
    slope, icpt = np.polyfit(t, y, 1)
    return float(icpt), float(slope)


class _CostLine(ruptures.base.BaseCost):
    """Piecewise-linear least-squares cost for ``ruptures``: SSE of an OLS line per segment,
    in O(1) from prefix sums (same cost as ruptures' ``CostLinear`` with regressors [t, 1],
    without a least-squares solve per call)."""

    model = "line_prefix_sums"
    min_size = 3

    def fit(self, signal):
        self.signal = signal
        y, t = signal[:, 0], signal[:, 1]
        z = np.zeros(1)
        self._c = [np.concatenate([z, np.cumsum(v)]) for v in
                   (np.ones_like(t), t, t * t, y, t * y, y * y)]
        return self

    def error(self, start, end):
        n, st, stt, sy, sty, syy = (float(c[end] - c[start]) for c in self._c)
        det = n * stt - st * st
        if n < 2 or det <= 1e-12 * max(1.0, n * stt):
            return max(syy - sy * sy / n, 0.0) if n else 0.0
        # SSE = Syy - [Sy Sty] inv([[n St][St Stt]]) [Sy Sty]'
        fitted = (stt * sy * sy - 2 * st * sy * sty + n * sty * sty) / det
        return max(syy - fitted, 0.0)


def _prefix(y: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Prefix sums of (1, t, t², y, ty, y²): row k, column i = sum over the first i samples."""
    c = np.zeros((6, len(y) + 1))
    for k, v in enumerate((np.ones_like(t), t, t * t, y, t * y, y * y)):
        c[k, 1:] = np.cumsum(v)
    return c


def _line_sse(c: np.ndarray, start, end) -> np.ndarray:
    """Vectorised :meth:`_CostLine.error`: SSE of an OLS line on samples [start, end) from the
    prefix sums ``c`` (:func:`_prefix`); ``start`` and ``end`` broadcast."""
    n, st, stt, sy, sty, syy = (c[k, end] - c[k, start] for k in range(6))
    det = n * stt - st * st
    with np.errstate(divide="ignore", invalid="ignore"):
        fitted = (stt * sy * sy - 2 * st * sy * sty + n * sty * sty) / det
        flat = sy * sy / n
    degenerate = (n < 2) | (det <= 1e-12 * np.maximum(1.0, n * stt))
    return np.maximum(syy - np.where(degenerate, flat, fitted), 0.0)


def pelt_line(y, t, *, pen: float, min_size: int) -> list[int]:
    """PELT (Killick et al. 2012) with the piecewise-linear cost, vectorised over candidates.

    Same recursion, pruning rule and tie-breaking as ``ruptures.Pelt(jump=1)`` with
    :class:`_CostLine` (``ruptures`` loops in Python over the candidate set; this evaluates
    it in one numpy expression per step). Returns the breakpoints, ending with ``len(y)``
    like ``ruptures``' ``predict``.
    """
    y = np.asarray(y, dtype=float)
    t = np.asarray(t, dtype=float)
    n_s = len(y)
    c = _prefix(y, t)
    best = np.full(n_s + 1, np.inf)
    best[0] = 0.0
    prev = np.zeros(n_s + 1, dtype=int)
    adm = np.zeros(0, dtype=int)
    for bkp in [*range(min_size, n_s), n_s]:
        new = bkp - min_size
        adm = np.append(adm, new)
        have = adm[np.isfinite(best[adm])]  # candidates with a partition of 0:t
        vals = best[have] + _line_sse(c, have, bkp) + pen
        j = int(np.argmin(vals))
        best[bkp], prev[bkp] = vals[j], have[j]
        adm = have[vals <= best[bkp] + pen]
    out, k = [], n_s
    while k > 0:
        out.append(k)
        k = prev[k]
    return sorted(out)


def detect_level_shifts(pi: pd.Series, *, penalty_factor: float = 3.0, min_segment_days: int = 90,
                        min_step_pct: float = 2.0, resample_days: int = 14,
                        refine_days: int = 14, deseason: bool = True,
                        recovery_slope_pct_per_yr: float = -3.0, persist_lag_days: int = 365,
                        persist_min_pairs: int = 60, persist_min_months: int = 9,
                        slope_before_days: int = 90) -> dict:
    """Find steps in a daily index with PELT and report them with dates and sizes.

    Parameters
    ----------
    pi : Series
        Daily index (PI, or better the peer-relative ratio, which has no seasonal cycle)
        indexed by day, NaN where unusable. [fraction]
    penalty_factor : float, default 3.0
        PELT penalty = factor · σ_w² · ln(n_w), σ_w the robust noise of the weekly medians
        (:func:`noise_sigma`) and n_w their number: the Schwarz (BIC) form Killick et al. 2012
        use, with one unit per segment parameter (level, slope, location: 3).
    min_segment_days : int, default 90
        Shortest segment (PELT ``min_size``).
    min_step_pct : float, default 2.0
        Breaks whose level jump is smaller are merged away: a slope change is not a step.
    recovery_slope_pct_per_yr : float, default -3.0
        An upward step whose preceding segment falls faster than this is labelled
        ``"recovery"`` (probable cleaning of a soiled array: soiling rates of 0.04–0.13 %/day
        are 15–50 %/yr; common practice) rather than ``"rise"`` (e.g. a repair).
    resample_days : int, default 14
        PELT runs on medians of this many days (fast, robust); each break is then refined to
        the day within ± ``refine_days`` by least squares of two lines.
    slope_before_days : int, default 90
        The slope that tells a recovery from a rise is fitted to at most this many days
        before the break (the soiling ramp just before a cleaning), within its segment.
    persist_lag_days, persist_min_pairs, persist_min_months : int, default 365, 60, 9
        Persistence test (:func:`_yoy_sizes`): a break with at least ``persist_min_pairs``
        day pairs ``persist_lag_days`` apart spanning it, whose first days cover at least
        ``persist_min_months`` calendar months (seasonal balance), is sized by their median ratio, less
        the median rate of the pairs that span no break. Compared season with season, a
        failure stays and a soiling or cleaning difference between arrays cancels, as it does
        in year-on-year rates (Jordan et al. 2018). Breaks whose year-on-year size is below
        ``min_step_pct`` are dropped (listed under ``"not_persistent"``); the others report
        this size as ``size_pct`` (``size_local_pct`` keeps the 30-day-median size).

    Returns
    -------
    dict
        ``{"method", "penalty", "sigma", "change_points": [{"day", "size_pct", "level_before",
        "level_after", "kind", "slope_before_pct_per_yr"}], "segments": [{"start", "end",
        "n_days", "slope_pct_per_yr"}]}``; ``kind`` is "drop", "rise" or "recovery";
        ``day`` is the first day at the new level; ``size_pct`` = 100 (after − before)/before
        from the medians of the 30 days on either side (negative = drop).
    """
    s = pi.astype(float).copy()
    s.index = pd.DatetimeIndex(pd.to_datetime(s.index))
    s = s.sort_index().dropna()
    result = {"method": "PELT (Killick et al. 2012, ruptures), piecewise-linear cost on "
                        f"{resample_days}-day medians", "change_points": [], "segments": []}
    if len(s) < 2 * min_segment_days:
        result["reason"] = f"{len(s)} usable days; change-point search needs {2 * min_segment_days}"
        return result
    x = deseasonalise(s) if deseason else s
    day0 = x.index[0]
    tday = ((x.index - day0) / pd.Timedelta(days=1)).to_numpy(dtype=float)
    y = x.to_numpy()
    # weekly medians
    bins = (tday // resample_days).astype(int)
    wk = pd.Series(y).groupby(bins).median()
    wt = pd.Series(tday).groupby(bins).median()
    sigma = noise_sigma(wk.to_numpy())
    result["sigma"] = sigma
    if not np.isfinite(sigma) or sigma == 0:
        sigma = max(float(np.std(wk)), 1e-6)
    tw = wt.to_numpy() / DAYS_PER_YEAR
    signal = np.column_stack([wk.to_numpy(), tw])
    pen = penalty_factor * sigma ** 2 * np.log(len(wk))
    result["penalty"] = pen
    min_size = max(3, int(round(min_segment_days / resample_days)))
    bk_w = pelt_line(signal[:, 0], signal[:, 1], pen=pen, min_size=min_size)[:-1]
    # to the day: position in the daily array of each weekly break, then refine
    cday = _prefix(y, tday / DAYS_PER_YEAR)
    breaks = []
    for bw in bk_w:
        tb = wt.iloc[bw]
        k0 = int(np.searchsorted(tday, tb - resample_days / 2))
        lo_seg = breaks[-1] if breaks else 0
        cands = range(max(lo_seg + 2, k0 - refine_days), min(len(y) - 2, k0 + refine_days) + 1)
        left = lo_seg
        right_w = [b for b in bk_w if b > bw]
        right = (int(np.searchsorted(tday, wt.iloc[right_w[0]] - resample_days / 2))
                 if right_w else len(y))
        ks = np.arange(cands.start, cands.stop)
        if ks.size:  # two separate lines, split before k: least total SSE
            sse = _line_sse(cday, left, ks) + _line_sse(cday, ks, right)
            breaks.append(int(ks[int(np.argmin(sse))]))
        else:
            breaks.append(int(k0))
    # size each break from local medians; drop small ones (slope changes)
    kept = _size_and_filter(tday, y, breaks, min_step_pct)
    # persistence: a step is still there a year later, a soiling or cleaning difference is not
    yoy = _yoy_sizes(x, [b for b, *_ in kept], lag_days=persist_lag_days,
                     min_pairs=persist_min_pairs, min_months=persist_min_months)
    gone = [b for (b, *_), z in zip(kept, yoy, strict=True)
            if z is not None and abs(z) < min_step_pct]
    if gone:
        result["not_persistent"] = [
            {"day": x.index[b].date().isoformat(), "size_pct": round(float(sz), 3),
             "size_year_pairs_pct": round(float(z), 3)}
            for (b, sz, *_), z in zip(kept, yoy, strict=True) if b in gone]
        kept = _size_and_filter(tday, y, [b for b, *_ in kept if b not in gone], min_step_pct)
        yoy = _yoy_sizes(x, [b for b, *_ in kept], lag_days=persist_lag_days,
                         min_pairs=persist_min_pairs, min_months=persist_min_months)
    edges = [0] + [b for b, *_ in kept] + [len(y)]
    for i, ((b, size_local, before, after), size_yoy) in enumerate(zip(kept, yoy, strict=True)):
        size = size_local if size_yoy is None else size_yoy
        a = max(edges[i], int(np.searchsorted(tday, tday[b] - slope_before_days)))
        _, slope = _segment_fit(tday[a:b] / DAYS_PER_YEAR, y[a:b])
        slope_before = 100 * slope / before if before else 0.0
        # an upward step after a falling segment is what a cleaning does to a soiled array
        kind = ("drop" if size < 0 else
                "recovery" if slope_before <= recovery_slope_pct_per_yr else "rise")
        result["change_points"].append({"day": x.index[b].date().isoformat(),
                                        "size_pct": round(float(size), 3),
                                        "size_local_pct": round(float(size_local), 3),
                                        "size_from": ("year-on-year pairs spanning the step"
                                                      if size_yoy is not None else
                                                      f"medians of {30} days either side"),
                                        "level_before": round(float(before), 5),
                                        "level_after": round(float(after), 5),
                                        "kind": kind,
                                        "slope_before_pct_per_yr": round(float(slope_before), 3)})
    for a, b in zip(edges[:-1], edges[1:], strict=True):
        icpt, slope = _segment_fit(tday[a:b] / DAYS_PER_YEAR, y[a:b])
        level0 = icpt + slope * tday[a] / DAYS_PER_YEAR
        result["segments"].append({
            "start": x.index[a].date().isoformat(), "end": x.index[b - 1].date().isoformat(),
            "n_days": int(b - a),
            "slope_pct_per_yr": round(float(100 * slope / level0), 4) if level0 else None})
    return result


def _size_and_filter(tday, y, breaks, min_step_pct, window_days: float = 30.0):
    """Size every break from the medians of the ``window_days`` before and after it (bounded
    by the neighbouring breaks: robust to outliers and to non-linear segments such as a
    soiling ramp); iteratively drop the smallest below ``min_step_pct`` and re-size."""
    breaks = sorted(set(breaks))
    while True:
        edges = [0] + breaks + [len(y)]
        sized = []
        for i, b in enumerate(breaks):
            a, c = edges[i], edges[i + 2]
            lo = max(a, int(np.searchsorted(tday, tday[b] - window_days)))
            hi = min(c, int(np.searchsorted(tday, tday[b] + window_days)))
            before = float(np.median(y[lo:b]))
            after = float(np.median(y[b:hi]))
            sized.append((b, 100 * (after - before) / before, before, after))
        small = [z for z in sized if abs(z[1]) < min_step_pct]
        if not small:
            return sized
        breaks.remove(min(small, key=lambda z: abs(z[1]))[0])


def _yoy_sizes(x: pd.Series, breaks: list[int], *, lag_days: int = 365,
               min_pairs: int = 60, min_months: int = 9) -> list[float | None]:
    """Size of each break [%] from the day pairs ``lag_days`` apart that span it.

    Every pair ratio ``100 (x_{d+lag}/x_d − 1)`` (a year-on-year pair, Jordan et al. 2018) is
    modelled as the within-segment change ``r_w`` plus the sizes of the breaks with
    ``d < break ≤ d + lag``, fitted by median backfitting, so that a step and a wash-off less
    than a year apart are told apart. None where fewer than ``min_pairs`` pairs span the break or their
    first days cover fewer than ``min_months`` calendar months (a few months' pairs carry
    that season's year-to-year soiling difference).
    ``x`` is the daily series (DatetimeIndex), ``breaks`` positions in it.
    """
    if not breaks:
        return []
    full = x.reindex(pd.date_range(x.index[0], x.index[-1], freq="D"))
    v = full.to_numpy(dtype=float)
    days = full.index.to_numpy()
    n = len(v)
    if n <= lag_days:
        return [None] * len(breaks)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = 100 * (v[lag_days:] / v[:-lag_days] - 1)  # pair starting at day d
    first = days[:-lag_days]
    last = first + np.timedelta64(lag_days, "D")
    bdays = [x.index[b].to_datetime64() for b in breaks]
    spans = np.zeros((len(bdays), r.size), dtype=bool)
    for i, bd in enumerate(bdays):
        spans[i] = (first < bd) & (last >= bd)
    ok = np.isfinite(r)
    r, spans = r[ok], spans[:, ok]
    month = full.index[:-lag_days].month.to_numpy()[ok]
    if r.size < min_pairs:
        return [None] * len(bdays)
    # every pair's change = within-segment change + the sizes of the breaks it spans; fitted
    # robustly by median backfitting (median polish, Tukey 1977): each size is the median of
    # its spanning pairs with the other sizes and the within change taken out
    size = np.zeros(len(bdays))
    span_f = spans.astype(float)
    r_w = float(np.median(r))
    for _ in range(20):
        old = size.copy()
        for k in range(len(bdays)):
            if spans[k].any():
                rest = r - r_w - size @ span_f + size[k] * span_f[k]
                size[k] = float(np.median(rest[spans[k]]))
        r_w = float(np.median(r - size @ span_f))
        if np.max(np.abs(size - old)) < 1e-6:
            break
    out: list[float | None] = []
    for k in range(len(bdays)):
        n_months = np.unique(month[spans[k]]).size
        out.append(float(size[k]) if spans[k].sum() >= min_pairs and n_months >= min_months
                   else None)
    return out
