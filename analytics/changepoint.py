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
    estimate; the differences of independent noise have variance 2σ²; common practice)."""
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
                        recovery_slope_pct_per_yr: float = -3.0) -> dict:
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
    edges = [0] + [b for b, *_ in kept] + [len(y)]
    for i, (b, size, before, after) in enumerate(kept):
        a = edges[i]
        _, slope = _segment_fit(tday[a:b] / DAYS_PER_YEAR, y[a:b])
        slope_before = 100 * slope / before if before else 0.0
        # an upward step after a falling segment is what a cleaning does to a soiled array
        kind = ("drop" if size < 0 else
                "recovery" if slope_before <= recovery_slope_pct_per_yr else "rise")
        result["change_points"].append({"day": x.index[b].date().isoformat(),
                                        "size_pct": round(float(size), 3),
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
