"""Soiling from yield: cleaning/rain events, soiling rates, soiling ratio, when to clean.

Dust builds up between rains or cleanings and lowers the performance index ``pi`` slowly;
a rain or a cleaning brings it back in one step. Following the stochastic rate and
recovery idea (Deceglie, Micheli and Muller 2018):

1. the site-median daily ``pi`` (soiling is plant-wide: the median over inverters keeps
   one faulty inverter out of the soiling signal), each inverter's pi taken relative to its
   own level first (:func:`fleet_relative_pi`), is the input, with daily insolation H;
2. cleanings are days where a forward rolling median of ``pi`` sits clearly above the
   backward one (an upper Tukey-fence outlier among those steps), or where the rain
   sensor reads at least 5 mm that day;
3. within each dry interval a Theil–Sen line (``scipy.stats.theilslopes(y, x)``) gives
   the soiling rate, relative to the line's clean level at the interval start; intervals
   with a positive slope or fewer than 10 valid days count as unsoiled, and so do intervals
   whose clear days alone do not show the decline (cloudy days read low in ``pi``: the
   expected-power model over-predicts at low irradiance, see :func:`soiling_intervals`);
4. the soiling ratio SR_d = 1 + rate · (d − d_start) is weighted by insolation,
   SR_iw = Σ SR_d H_d / Σ H_d, with a Monte-Carlo interval from the slopes' confidence
   intervals and a partial-to-full recovery at each cleaning.

Degradation (≈0.5 %/yr, i.e. ≈0.04 % per month) is negligible inside dry intervals of
weeks and is not removed here; seasonal model artefacts can mimic soiling (Deceglie,
Micheli, Muller 2018) and are the main limitation.

References
----------
.. [1] M. G. Deceglie, L. Micheli, M. Muller, "Quantifying soiling loss directly from PV
   yield," IEEE J. Photovolt. 8(2):547–551, 2018, doi:10.1109/JPHOTOV.2017.2784682.
.. [2] SciPy documentation, ``scipy.stats.theilslopes``.
"""

from __future__ import annotations

import heapq
import math

import numpy as np
import pandas as pd
from scipy import stats

from analytics.outliers import day_start_s, flag_frame


def soiling_ratio_insolation_weighted(sr, h_kwhm2) -> float:
    """Insolation-weighted soiling ratio SR_iw = Σ SR_d H_d / Σ H_d (Deceglie, Micheli, Muller 2018).

    NaN days are left out of both sums.

    Examples
    --------
    >>> round(soiling_ratio_insolation_weighted([1.0, 0.99, 0.98], [2, 4, 6]), 5)
    0.98667
    """
    sr = np.asarray(sr, dtype=float)
    h = np.asarray(h_kwhm2, dtype=float)
    ok = np.isfinite(sr) & np.isfinite(h)
    if not ok.any() or h[ok].sum() <= 0:
        return float("nan")
    return float(np.sum(sr[ok] * h[ok]) / np.sum(h[ok]))


def cleaning_interval_days(cleaning_cost: float, tariff_per_kwh: float, e_day_kwh: float,
                           soiling_rate_per_day: float) -> float:
    """Cleaning interval that minimises cost per day, T* = √(2C / (p E_d r)) (derived: minimum of (C + p E_d r T²/2) / T; common practice).

    With a linear soiling rate r the revenue lost T days after a cleaning is
    L(T) = p E_d r T² / 2; (C + L(T)) / T is smallest where L(T*) = C.

    Parameters
    ----------
    cleaning_cost : float
        C, cost of one cleaning. [currency]
    tariff_per_kwh : float
        p. [currency/kWh]
    e_day_kwh : float
        E_d, daily energy of the clean plant. [kWh]
    soiling_rate_per_day : float
        r, loss of SR per day (either sign; the magnitude is used). [1/day]

    Returns
    -------
    float, days; inf when the rate or the energy is zero.

    Examples
    --------
    >>> round(cleaning_interval_days(1500, 0.08, 4500, 0.001), 1)
    91.3
    """
    r = abs(soiling_rate_per_day)
    denom = tariff_per_kwh * e_day_kwh * r
    if not denom > 0:
        return float("inf")
    return math.sqrt(2.0 * cleaning_cost / denom)


def fleet_relative_pi(pi_by_inverter: pd.DataFrame) -> pd.Series:
    """Site daily pi for soiling: the median over inverters of each inverter's pi divided by
    its own level relative to the site.

    Soiling is plant-wide, so the site median keeps one faulty inverter out of the signal
    (Deceglie, Micheli, Muller 2018 read one system's index; a fleet needs one series).
    But inverters sit at different levels (sensor calibration, model bias, DC capacity
    tolerance): a plain median over the inverters valid that day hops between those levels
    whenever the set of valid inverters changes (issue #14: on a desert fleet whose high
    DC/AC inverters drop out of the valid set on clear days, the site median jumped by 3–5 %
    from day to day between two groups 4 % apart, and 23 of 31 missed soiling episodes were
    read as steps or as slopes too uncertain to report). Each inverter's level ``rel_i`` is
    the median over days of pi_i / (site median that day), on days with at least two
    inverters; the result is median_i(pi_i / rel_i) over the inverters present each day,
    so a change of membership no longer moves the series, and its level stays that of the
    site median (the rates are relative to the clean level anyway).

    Parameters
    ----------
    pi_by_inverter : DataFrame
        Daily pi, index = days, one column per inverter, NaN where an inverter's day is not
        usable. [-]

    Returns
    -------
    Series of the days with at least one inverter. [-]

    Examples
    --------
    Two inverters at 0.90 and 0.94 of the same soiling ratio; the lower one is missing on
    day 2: the plain median jumps to 0.94, the relative one stays on 0.92 · SR (hand
    calculation: rel = 0.90/0.92 and 0.94/0.92).

    >>> w = pd.DataFrame({"a": [0.90, 0.90 * 0.99, np.nan, 0.90 * 0.97],
    ...                   "b": [0.94, 0.94 * 0.99, 0.94 * 0.98, 0.94 * 0.97]})
    >>> [round(v, 4) for v in w.median(axis=1)]
    [0.92, 0.9108, 0.9212, 0.8924]
    >>> [round(v, 4) for v in fleet_relative_pi(w)]
    [0.92, 0.9108, 0.9016, 0.8924]
    """
    w = pi_by_inverter.astype(float)
    if w.shape[1] < 2:
        return w.median(axis=1).dropna()
    med = w.median(axis=1)
    several = w.notna().sum(axis=1) >= 2
    rel = w[several].div(med[several], axis=0).median()
    rel = rel.where(np.isfinite(rel) & (rel > 0), 1.0)
    return w.div(rel, axis=1).median(axis=1).dropna()


def site_clear_days(clear_by_inverter: pd.DataFrame, min_share: float = 0.5) -> pd.Series:
    """Site clear days: days on which at least ``min_share`` of the inverters judged that
    day call it clear (each inverter's power profile as smooth as the clear-sky one,
    :func:`analytics.clock.clear_day_mask`, the variability index of Stein et al. 2012).

    Parameters
    ----------
    clear_by_inverter : DataFrame
        Index = days, one bool column per inverter, NaN where an inverter has no verdict.
    min_share : float
        Share of the judged inverters (0.5: the majority; a cloud over part of a large
        plant, or one inverter's outage, does not decide the site's day). [-]

    Returns
    -------
    Series of bool on the days with at least one verdict.

    Examples
    --------
    >>> w = pd.DataFrame({"a": [True, True, False], "b": [True, False, False],
    ...                   "c": [np.nan, False, True]}, index=pd.date_range("2024-05-01", periods=3))
    >>> site_clear_days(w).tolist()  # 2/2, 1/3, 1/3 of the inverters with a verdict
    [True, False, False]
    """
    w = clear_by_inverter.astype(float)
    n = w.notna().sum(axis=1)
    share = w.sum(axis=1) / n.where(n > 0)
    out = (share >= min_share)[n > 0]
    out.index = pd.DatetimeIndex(out.index)
    return out


def _fwd_bwd_step(pi: pd.Series, window: int) -> pd.Series:
    """median(pi[d .. d+w-1]) − median(pi[d-w .. d-1]): the step into day d."""
    back = pi.rolling(window, min_periods=max(3, window // 2)).median().shift(1)
    fwd = pi[::-1].rolling(window, min_periods=max(3, window // 2)).median()[::-1]
    return fwd - back


def detect_cleanings(pi: pd.Series, *, rain_mm: pd.Series | None = None,
                     window: int = 7, min_step: float = 0.01,
                     rain_threshold_mm: float = 5.0, fence_k: float = 1.5) -> pd.DataFrame:
    """Cleaning and rain events: upward steps of the daily ``pi`` and rainy days.

    Parameters
    ----------
    pi : Series
        Daily performance index, index = consecutive days (NaN for invalid days). [-]
    rain_mm : Series, optional
        Daily rainfall on the same index. [mm]
    window : int
        Days in the backward and forward rolling medians (Deceglie et al. 2018 use a rolling median; 1–3 weeks is common practice). [d]
    min_step : float
        Smallest step of ``pi`` counted as a cleaning, besides the fence. [-]
    rain_threshold_mm : float
        Daily rain that cleans (common practice: 5 mm, site-tunable). [mm]
    fence_k : float
        Tukey fence Q3 + k·IQR on the steps (Tukey fence, Tukey 1977, from memory: 1.5).

    Returns
    -------
    DataFrame indexed by day with columns ``step`` (pi step, NaN for rain-only events),
    ``source`` ('pi_step', 'rain' or 'pi_step+rain') and ``rain_mm``.
    """
    pi = pi.astype(float)
    step = _fwd_bwd_step(pi, window)
    q1, q3 = np.nanpercentile(step, [25, 75]) if step.notna().sum() >= 4 else (np.nan, np.nan)
    fence = max(q3 + fence_k * (q3 - q1), min_step) if np.isfinite(q3) else np.inf
    cand = step > fence
    # one event per step: keep the day with the largest step in each run of candidates
    keep = []
    vals = step.where(cand)
    run_id = (cand != cand.shift()).cumsum()
    for _rid, grp in vals[cand].groupby(run_id[cand]):
        keep.append(grp.idxmax())
    # merge candidates closer than a window (the two medians see the same step)
    merged = []
    for d in keep:
        if merged and (pd.Timestamp(d) - pd.Timestamp(merged[-1])).days < window:
            if step[d] > step[merged[-1]]:
                merged[-1] = d
        else:
            merged.append(d)
    events = {d: dict(step=float(step[d]), source="pi_step", rain_mm=np.nan) for d in merged}
    if rain_mm is not None:
        rain = rain_mm.reindex(pi.index)
        for d in rain.index[rain.to_numpy(float) >= rain_threshold_mm]:
            near = [e for e in events if abs((pd.Timestamp(e) - pd.Timestamp(d)).days) <= 1]
            if near:
                events[near[0]]["source"] = "pi_step+rain"
                events[near[0]]["rain_mm"] = float(rain[d])
            else:
                events[d] = dict(step=np.nan, source="rain", rain_mm=float(rain[d]))
    out = pd.DataFrame.from_dict(events, orient="index", columns=["step", "source", "rain_mm"])
    return out.sort_index()


def line_vs_step(y, x, line: tuple[float, float] | None = None) -> float:
    """How much better a straight line explains a dry interval than a single step:
    Σ|y − Theil–Sen line| / min over split days k of Σ|y − median of its side| (L1 costs;
    the step is the two-median split of :func:`analytics.sensor_qa.level_step`). Dust builds
    up gradually, so soiling gives a ratio well below 1; a weather regime or an event that
    drops ``pi`` at one moment in an otherwise flat interval fits a step better (> 1).
    NaN with fewer than 4 points. ``line``: the Theil–Sen ``(slope, intercept)`` of ``y`` on
    ``x`` when the caller has it (``scipy.stats.theilslopes``, default method), else computed.

    The split costs of every k come from running medians (two heaps, O(n log n)); the few
    splits within rounding of the cheapest are then summed directly, so the result is the
    direct minimum over all splits (a five-year dry interval has ~1 800 splits; issue #16).

    Examples
    --------
    A linear decline 1.00, 0.99, ..., 0.90 gives 0 (the line is exact, to float rounding);
    1, 1, 1, 1, 0.96, 0.96, 0.96, 0.96 gives inf (the step is exact).
    """
    y = np.asarray(y, dtype=float)
    x = np.asarray(x, dtype=float)
    if y.size < 4:
        return float("nan")
    if line is None:
        res = stats.theilslopes(y, x)
        line = (res.slope, res.intercept)
    cost_line = float(np.abs(y - (line[1] + line[0] * x)).sum())
    n = y.size
    yc = y - np.median(y)  # centred: running sums without large cancellations
    fast = _l1_prefix_costs(yc)[2:n - 1] + _l1_prefix_costs(yc[::-1])[n - 2:1:-1]
    tol = 1e-9 * (float(np.abs(yc).sum()) + 1e-12)
    step = min(float(np.abs(y[:k] - np.median(y[:k])).sum()
                     + np.abs(y[k:] - np.median(y[k:])).sum())
               for k in 2 + np.flatnonzero(fast <= fast.min() + tol))
    if step <= 0:
        return float("inf") if cost_line > 0 else 0.0
    return cost_line / step


def _l1_prefix_costs(y: np.ndarray) -> np.ndarray:
    """``out[k] = Σ_{i<k} |y_i − median(y[:k])|`` for k = 0 … n, by running medians: a
    max-heap of the lower half and a min-heap of the upper half with their sums; the L1
    distance to the median is (upper sum − lower sum) + median · (n_lower − n_upper)."""
    lo: list[float] = []  # lower half, negated (max-heap), holds the extra element
    hi: list[float] = []
    s_lo = s_hi = 0.0
    out = np.zeros(y.size + 1)
    for k, v in enumerate(y.tolist(), start=1):
        if lo and v > -lo[0]:
            heapq.heappush(hi, v)
            s_hi += v
        else:
            heapq.heappush(lo, -v)
            s_lo += v
        if len(lo) > len(hi) + 1:
            m = -heapq.heappop(lo)
            s_lo -= m
            heapq.heappush(hi, m)
            s_hi += m
        elif len(hi) > len(lo):
            m = heapq.heappop(hi)
            s_hi -= m
            heapq.heappush(lo, -m)
            s_lo += m
        out[k] = s_hi - s_lo + (-lo[0]) * (len(lo) - len(hi))
    return out


def _ar1_inflation(resid, x, step: float = 1.0) -> float:
    """√((1 + ρ₁)/(1 − ρ₁)), ρ₁ the lag-1 autocorrelation of ``resid`` over pairs of
    consecutive points (``x`` one ``step`` apart: 1 for daily values, 3 for 3-day medians),
    clipped to 0–0.9 (Santer et al. 2000).

    Examples
    --------
    >>> round(_ar1_inflation([1.0, -1.0, 1.0, -1.0], [0, 1, 2, 3]), 3)  # anti-correlated: 1
    1.0
    """
    r = np.asarray(resid, float) - np.mean(resid)
    x = np.asarray(x, float)
    nxt = np.isclose(np.diff(x), step)
    den = float(np.sum(r * r))
    if nxt.sum() < 3 or den <= 0:
        return 1.0
    rho = float(np.clip(np.sum(r[:-1][nxt] * r[1:][nxt]) / den * len(r) / nxt.sum(), 0.0, 0.9))
    return math.sqrt((1.0 + rho) / (1.0 - rho))


def _clear_day_rate(seg: pd.Series, clear_days: pd.Series, start, min_clear_days: int) -> float:
    """Theil–Sen rate of the clear days of one dry interval, relative to that line's level at
    ``start`` [1/day]; NaN with fewer than ``min_clear_days`` clear days or a level ≤ 0."""
    clear = seg[clear_days.reindex(seg.index).fillna(False).to_numpy(bool)]
    if len(clear) < max(min_clear_days, 2):
        return float("nan")
    x = (pd.DatetimeIndex(clear.index) - start).days.to_numpy(float)
    res = stats.theilslopes(clear.to_numpy(float), x)
    return float(res.slope / res.intercept) if res.intercept > 0 else float("nan")


def soiling_intervals(pi: pd.Series, cleanings, *, min_days: int = 7,
                      alpha: float = 0.95, min_rate_per_day: float = 0.0004,
                      max_line_vs_step: float = 1.25, step_days: float = 1.0,
                      clear_days: pd.Series | None = None,
                      min_clear_days: int = 3) -> pd.DataFrame:
    """Theil–Sen soiling rate of each dry interval between cleanings.

    Parameters
    ----------
    pi : Series
        Daily performance index over consecutive days. [-]
    cleanings : sequence of days
        First clean days; each starts a new interval (so does the first day of ``pi``).
    min_days : int
        Intervals with fewer valid days are treated as unsoiled (about 10 is common practice
        for Deceglie et al. 2018; 7 here: fast soiling of 0.3 %/day builds a 2 % loss in a
        week between two winter rains, and the shape test below keeps weather regimes out). [d]
    alpha : float
        Confidence of the slope interval (``theilslopes(..., alpha)``). An interval counts
        as soiled only when the whole interval lies below zero (issue #14: soiling flags on
        generated fleets without soiling came from slopes indistinguishable from zero).
    min_rate_per_day : float
        ... and the rate is at least this steep (0.04 %/day: a seasonal model artefact of
        ±1.5 % a year changes pi by at most 0.026 %/day, while soiling rates of
        0.05–0.4 %/day are typical of dry climates; Deceglie et al. 2018 report rates of
        that order, from memory). Slower soiling is left to the degradation analysis. [1/day]
    max_line_vs_step : float
        ... and a single step does not explain the interval clearly better than the line
        (:func:`line_vs_step` ≤ this; issue #14: a flat desert interval that dropped 2 % in
        a cloudy, hot last week read as 4.5 % "soiling" on a fleet without soiling, its
        ratio 7.5; the linear build-up is the model of Deceglie et al. 2018). Why 1.25,
        not 1: under weather regimes of several days (AR(1) noise, ρ = 0.7, 1 %) true linear
        soiling intervals have ratios up to 1.21 at their 95th percentile and 1.33 at the
        99th (160 intervals, the autocorrelated-noise test case); 1.25 keeps about 95 % of
        them (a limit of 1 rejected 26 of the 160, 1.25 rejects 3). [-]
    step_days : float
        Spacing of consecutive points of ``pi`` for the autocorrelation of ``rate_sigma``
        (1 for a daily index, 3 for the 3-day medians of the degradation job). [d]
    clear_days : Series of bool, optional
        The site's clear days (e.g. most inverters' power profiles as smooth as the
        clear-sky one, :func:`analytics.clock.clear_day_mask`). When given, a soiled interval
        must also show the decline on its clear days: the Theil–Sen rate of its clear days
        alone, relative to that line's level at the interval start
        (``clear_rate_per_day``), must reach ``min_rate_per_day`` too. Why: the daily pi of
        a cloudy day reads low on every inverter alike, because the expected-power model
        (PVWatts, no low-light or diffuse terms) over-predicts at low and diffuse
        irradiance, while dust lowers clear and cloudy days alike. Measured on the 15
        generated fleets of the flags scorecard (quick, full and extra suites; each day's pi
        against the 15-day median of the clear days around it): the days that are not clear
        read 0.4–1.6 % low (median per fleet; a quarter of them 0.9–2.7 % or more), so an overcast week at the end of a dry
        interval fits a soiling line of about 0.2 %/day (issue #14: a false flag on a clean
        fleet, −0.23 %/day and 2.7 % at its end, six cloudy days closing an 11-day
        interval; its four clear days alone: −0.017 %/day). On the same fleets the 97
        flagged intervals that matched true soiling episodes had clear-day rates of
        −0.10 %/day or steeper (4–81 clear days each). Not applied when fewer than
        ``min_clear_days`` clear days remain: the verdict of all days stands. [-]
    min_clear_days : int
        Fewest clear days for the clear-day check (3, a documented choice: with two the
        Theil–Sen rate is the one slope of one pair of days, whose weather noise alone can
        reach the limit; the true soiled intervals of the scorecard fleets had 4–81 clear
        days, so the check itself has no measured cost at 2–4). [d]

    Returns
    -------
    DataFrame, one row per interval: ``start``, ``end`` (days, inclusive), ``n_valid``,
    ``soiling_rate_per_day`` and its ``rate_low``/``rate_high`` (slope / clean level,
    [1/day]; 0 where unsoiled), ``rate_sigma`` (standard error of the rate for the
    Monte-Carlo interval, see Notes; 0 where unsoiled), ``clean_level`` (the line's pi at
    the start), ``line_vs_step``, ``clear_rate_per_day`` (rate of the clear days alone; NaN
    where not computed), ``soiled``.

    Notes
    -----
    ``scipy.stats.theilslopes(y, x, alpha, method='separate')`` returns the median of the
    pairwise slopes and its confidence bounds (argument order y, x: SciPy docs). The rate
    is relative to the fitted clean level so that a model bias in ``pi`` (a clean plant
    at pi = 0.97) does not count as soiling.

    The slope's confidence interval assumes independent residuals; daily residuals of
    ``pi`` are autocorrelated (weather regimes of several days), which makes it too narrow.
    ``rate_sigma`` is the interval's half-width / 1.96 inflated by √((1 + ρ₁)/(1 − ρ₁)),
    ρ₁ the lag-1 autocorrelation of the residuals on consecutive days (clipped to 0–0.9):
    the variance inflation of a trend slope under AR(1) noise, i.e. an effective sample
    size n(1 − ρ₁)/(1 + ρ₁) (Santer et al. 2000, J. Geophys. Res. 105(D6):7337). Only the
    Monte-Carlo interval uses it; the ``soiled`` test keeps the plain interval.
    """
    days = pd.DatetimeIndex(pi.index)
    bounds = sorted({pd.Timestamp(c) for c in cleanings if days[0] < pd.Timestamp(c) <= days[-1]})
    starts = [days[0], *bounds]
    ends = [*(b - pd.Timedelta(days=1) for b in bounds), days[-1]]
    rows = []
    for s, e in zip(starts, ends, strict=True):
        seg = pi[(days >= s) & (days <= e)].dropna()
        row = dict(start=s, end=e, n_valid=len(seg), soiling_rate_per_day=0.0, rate_low=0.0,
                   rate_high=0.0, rate_sigma=0.0, clean_level=np.nan, line_vs_step=np.nan,
                   clear_rate_per_day=np.nan, soiled=False)
        if len(seg) >= max(min_days, 3):
            x = (pd.DatetimeIndex(seg.index) - s).days.to_numpy(float)
            res = stats.theilslopes(seg.to_numpy(float), x, alpha=alpha, method="separate")
            level = res.intercept  # line value at x = 0 (interval start)
            row["clean_level"] = float(level)
            shape = line_vs_step(seg.to_numpy(float), x, line=(res.slope, res.intercept))
            row["line_vs_step"] = shape
            clear_ok = True
            if clear_days is not None:
                rate_clear = _clear_day_rate(seg, clear_days, s, min_clear_days)
                row["clear_rate_per_day"] = rate_clear
                clear_ok = not rate_clear > -min_rate_per_day
            if (level > 0 and res.high_slope < 0 and res.slope / level <= -min_rate_per_day
                    and not shape > max_line_vs_step and clear_ok):
                half = (res.high_slope - res.low_slope) / (2 * stats.norm.ppf(0.5 + alpha / 2))
                row.update(soiling_rate_per_day=float(res.slope / level),
                           rate_low=float(res.low_slope / level),
                           rate_high=float(res.high_slope / level),
                           rate_sigma=float(half / level * _ar1_inflation(
                               seg.to_numpy(float) - (res.intercept + res.slope * x), x, step_days)),
                           soiled=True)
        rows.append(row)
    return pd.DataFrame(rows)


def soiling_ratio_series(index, intervals: pd.DataFrame) -> pd.Series:
    """Daily SR_d = 1 + rate_j · (d − start_j) within each interval, floored at 0.

    Examples
    --------
    A 30-day interval at −0.001/day: SR = 1, 0.999, ..., 0.971, mean 0.9855 (hand calculation).
    """
    days = pd.DatetimeIndex(index)
    sr = pd.Series(1.0, index=days, name="sr")
    for row in intervals.itertuples():
        m = (days >= row.start) & (days <= row.end)
        t = (days[m] - row.start).days.to_numpy(float)
        sr[m] = np.clip(1.0 + row.soiling_rate_per_day * t, 0.0, 1.0)
    return sr


def soiling_ratio_draws(index, intervals: pd.DataFrame, *, n_runs: int = 1000,
                        recovery_min: float = 1.0,
                        rng: np.random.Generator | int | None = 0) -> np.ndarray:
    """Monte-Carlo draws of the daily soiling ratio, shape ``(n_runs, len(index))``
    (Deceglie et al. 2018, step 4).

    Each run draws every soiled interval's rate from a normal centred on its Theil–Sen
    rate with the standard error ``rate_sigma`` (the 95 % interval read as ±1.96 σ when
    the column is absent), truncated at 0 (dust does not raise the output), and the recovery
    at each cleaning uniformly between ``recovery_min`` and 1 (full); SR(t) is rebuilt
    piecewise linearly. Unsoiled intervals keep a rate of 0. Used by
    :func:`soiling_ratio_insolation_weighted_mc` and to carry the correction's uncertainty
    into a soiling-corrected degradation rate.

    Examples
    --------
    One 11-day interval at −1 %/day ± 0.1 (σ): on its last day (t = 10) SR = 0.9 ± 0.01
    (hand calculation).

    >>> iv = pd.DataFrame(dict(start=[pd.Timestamp("2024-01-01")], end=[pd.Timestamp("2024-01-11")],
    ...                        soiling_rate_per_day=[-0.01], rate_low=[-0.012], rate_high=[-0.008],
    ...                        rate_sigma=[0.001], soiled=[True]))
    >>> d = soiling_ratio_draws(pd.date_range("2024-01-01", periods=11), iv, n_runs=20000)
    >>> d.shape, round(float(d[:, -1].mean()), 3), round(float(d[:, -1].std()), 3)
    ((20000, 11), 0.9, 0.01)
    """
    gen = rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)
    days = pd.DatetimeIndex(index)
    sr = np.ones((n_runs, len(days)))
    level = np.ones(n_runs)
    for j, row in enumerate(intervals.itertuples()):
        m = (days >= row.start) & (days <= row.end)
        t = (days[m] - row.start).days.to_numpy(float)
        if j > 0:
            f = gen.uniform(recovery_min, 1.0, n_runs)
            level = level + f * (1.0 - level)
        sigma = getattr(row, "rate_sigma", None)
        if sigma is None or not np.isfinite(sigma):
            # the 95 % slope interval read as ±1.96 σ of a normal
            lo, hi = sorted((row.rate_low, row.rate_high))
            sigma = (hi - lo) / (2 * 1.959964)
        # truncated at 0: dust does not raise the output
        rate = (np.minimum(gen.normal(row.soiling_rate_per_day, sigma, n_runs), 0.0)
                if row.soiled else np.zeros(n_runs))
        seg = np.clip(level[:, None] + rate[:, None] * t[None, :], 0.0, 1.0)
        sr[:, m] = seg
        if len(t):
            level = seg[:, -1] + rate * 1.0  # one more day of soiling before the cleaning
    return sr


def soiling_ratio_insolation_weighted_mc(index, intervals: pd.DataFrame, h_kwhm2, *, n_runs: int = 1000,
                        recovery_min: float = 1.0, seed: int = 0,
                        percentiles=(2.5, 50.0, 97.5)) -> dict:
    """Monte-Carlo distribution of the insolation-weighted SR (Deceglie et al. 2018, step 4).

    Each run draws every soiled interval's rate from a normal centred on its Theil–Sen
    rate with the standard error ``rate_sigma`` (the 95 % interval read as ±1.96 σ when
    the column is absent), truncated at 0 (no gain), and the recovery at each cleaning
    uniformly between ``recovery_min`` and 1 (full); SR(t) is rebuilt piecewise linearly
    and weighted by insolation.

    The default ``recovery_min = 1`` is the assumption of the point estimate
    (:func:`soiling_ratio_series`: every detected cleaning restores the clean level), so
    the interval spreads around the point estimate. A ``recovery_min`` below 1 is a
    sensitivity case, not an interval of the same estimate: partial recoveries can only
    lower SR, so its whole distribution lies below the full-recovery value.

    Returns
    -------
    dict with ``soiling_ratio_weighted`` (median of the runs),
    ``soiling_ratio_weighted_low``, ``soiling_ratio_weighted_high`` (the given
    percentiles), ``recovery_min`` and ``n_runs``.

    Examples
    --------
    One 11-day interval at −1 %/day ± 0.1 (σ), equal insolation: SR_iw = 1 − 0.01·5 = 0.95
    (hand calculation), and the 95 % interval is 0.95 ± 1.96 · 0.001 · 5.

    >>> iv = pd.DataFrame(dict(start=[pd.Timestamp("2024-01-01")], end=[pd.Timestamp("2024-01-11")],
    ...                        soiling_rate_per_day=[-0.01], rate_low=[-0.012], rate_high=[-0.008],
    ...                        rate_sigma=[0.001], soiled=[True]))
    >>> mc = soiling_ratio_insolation_weighted_mc(pd.date_range("2024-01-01", periods=11), iv,
    ...                                           np.ones(11), n_runs=20000)
    >>> [round(mc[k], 3) for k in ("soiling_ratio_weighted_low", "soiling_ratio_weighted",
    ...                            "soiling_ratio_weighted_high")]
    [0.94, 0.95, 0.96]
    """
    rng = np.random.default_rng(seed)
    h = np.nan_to_num(np.asarray(h_kwhm2, dtype=float), nan=0.0)
    sr = soiling_ratio_draws(index, intervals, n_runs=n_runs, recovery_min=recovery_min,
                             rng=rng)
    w = h.sum()
    sr_weighted = (sr * h[None, :]).sum(axis=1) / w if w > 0 else np.full(n_runs, np.nan)
    lo, med, hi = np.percentile(sr_weighted, percentiles)
    return dict(soiling_ratio_weighted=float(med), soiling_ratio_weighted_low=float(lo), soiling_ratio_weighted_high=float(hi),
                recovery_min=float(recovery_min), n_runs=int(n_runs))


def soiling_site_summary(sr_weighted: float, mc: dict, days) -> dict:
    """The site's insolation-weighted soiling ratio over the whole period, for every soiling
    flag: the point estimate is the full-recovery value (a cleaning or a rain of at least the
    threshold restores the clean level; Deceglie et al. 2018, step 4 with full recovery) and
    the interval is the Monte-Carlo one under the same assumption
    (:func:`soiling_ratio_insolation_weighted_mc` with ``recovery_min = 1``), which spreads
    around the point. Should Monte-Carlo noise leave the point a hair outside, the interval
    is stretched to it (``interval_stretched_to_point``)."""
    lo = mc.get("soiling_ratio_weighted_low", sr_weighted)
    hi = mc.get("soiling_ratio_weighted_high", sr_weighted)
    point = float(sr_weighted)
    stretched = bool(point < lo or point > hi)
    return dict(soiling_ratio_weighted=point, interval_stretched_to_point=stretched,
                soiling_ratio_weighted_low=float(min(lo, point)),
                soiling_ratio_weighted_high=float(max(hi, point)),
                soiling_loss_pct=100.0 * (1.0 - point),
                soiling_ratio_weighted_period=[str(pd.Timestamp(days[0]).date()),
                                               str(pd.Timestamp(days[-1]).date())])


def soiling_flags(pi: pd.Series, h_kwhm2: pd.Series, e_exp_kwh: pd.Series, *,
                  rain_mm: pd.Series | None = None, tariff_per_kwh: float = 0.05,
                  cleaning_cost: float = 0.0, currency: str = "EUR",
                  window: int = 7, min_days: int = 7, rain_threshold_mm: float = 5.0,
                  min_loss: float = 0.01, horizon_days: int = 30, n_runs: int = 1000,
                  clear_days: pd.Series | None = None, min_clear_days: int = 3,
                  std_offset_s: int = 0, device_id: str | None = None) -> pd.DataFrame:
    """Soiling and cleaning flags of a site from its daily series.

    Parameters
    ----------
    pi : Series
        Site-median daily performance index, index = days (local standard time). [-]
    h_kwhm2 : Series
        Daily POA insolation. [kWh/m²]
    e_exp_kwh : Series
        Daily expected AC energy of the whole site (the clean plant's energy). [kWh]
    rain_mm : Series, optional
        Daily rainfall. [mm]
    tariff_per_kwh, cleaning_cost, currency
        Site economics (configuration ``[economics]``).
    min_loss : float
        A dry interval is flagged when its soiling loss reaches this at its end, also when
        computed with the shallow end of the rate's 95 % interval. [-]
    clear_days, min_clear_days
        The site's clear days (bool by day) and the fewest of them for the clear-day check
        of :func:`soiling_intervals` (a soiled interval's decline must show on its clear
        days too); no check without ``clear_days``.
    horizon_days : int
        Look-ahead for the cleaning recommendation: cleaning now is worth it when the
        current loss, held over this horizon, costs more than a cleaning,
        p · E_d · (1 − SR_now) · horizon > C (common practice; a dry interval restarts
        the same build-up after a cleaning, so the saving is the present loss). [d]

    Returns
    -------
    DataFrame with :data:`~analytics.outliers.FLAG_COLUMNS`: kind 'cleaning' (info) for
    each detected cleaning/rain that ends a soiled interval, kind 'soiling' for each soiled
    dry interval ('warning' if
    a cleaning is recommended, else 'info'); the last soiling flag carries the current
    loss, the site SR_iw with its Monte-Carlo interval, T* and the recommendation.
    """
    days = pd.date_range(pd.Timestamp(pi.index.min()), pd.Timestamp(pi.index.max()), freq="D")
    pi = pi.reindex(days).astype(float)
    h = h_kwhm2.reindex(days).astype(float)
    e_exp = e_exp_kwh.reindex(days).astype(float)
    rain = rain_mm.reindex(days) if rain_mm is not None else None
    cl = detect_cleanings(pi, rain_mm=rain, window=window, min_step=0.01,
                          rain_threshold_mm=rain_threshold_mm)
    iv = soiling_intervals(pi, cl.index, min_days=min_days, clear_days=clear_days,
                           min_clear_days=min_clear_days)
    sr = soiling_ratio_series(days, iv)
    records = []
    kept = []
    for k, row in enumerate(iv.itertuples()):
        if not row.soiled:
            continue
        m = (days >= row.start) & (days <= row.end)
        loss_end = 1.0 - float(sr[m].iloc[-1])
        # the loss must reach min_loss even at the shallow end of the slope's 95 % interval
        # (issue #14: short noisy intervals gave 1 % "soiling" on clean fleets)
        loss_end_low = -row.rate_high * float((row.end - row.start).days)
        if loss_end < min_loss or loss_end_low < min_loss:
            continue
        kept.append((k, row, m, loss_end))
    # a cleaning (or rain) is reported only when it ends a reported soiling interval: rain on
    # a clean plant is weather, not news (issue #14: 81 "cleaning" flags on a fleet without
    # soiling, and one "cleaning" after an interval too weak to report)
    ends_soiled = {pd.Timestamp(row.end) + pd.Timedelta(days=1) for _k, row, _m, _l in kept}
    for d, row in cl.iterrows():
        if pd.Timestamp(d) not in ends_soiled:
            continue
        s0 = int(day_start_s([d], std_offset_s)[0])
        records.append(dict(
            device_id=device_id, kind="cleaning", start_s=s0, end_s=s0 + 86400,
            severity="info", lost_kwh=np.nan,
            details=dict(day=str(pd.Timestamp(d).date()), source=row["source"],
                         pi_step=None if np.isnan(row["step"]) else float(row["step"]),
                         rain_mm=None if np.isnan(row["rain_mm"]) else float(row["rain_mm"]),
                         method="forward minus backward rolling median of site pi above the "
                                "Tukey fence Q3 + 1.5 IQR, or rain >= "
                                f"{rain_threshold_mm:g} mm/day (Deceglie et al. 2018)")))
    mc = soiling_ratio_insolation_weighted_mc(days, iv, h, n_runs=n_runs) if n_runs else {}
    # sensitivity: cleanings that restore only half to all of the lost output
    mc_partial = (soiling_ratio_insolation_weighted_mc(days, iv, h, n_runs=n_runs, recovery_min=0.5)
                  if n_runs else {})
    sr_weighted = soiling_ratio_insolation_weighted(sr, h)
    e_day = float(np.nanmedian(e_exp.iloc[-30:])) if e_exp.notna().any() else float("nan")
    site = soiling_site_summary(sr_weighted, mc, days)
    for k, row, m, loss_end in kept:
        lost = float(np.nansum(e_exp[m] * (1.0 - sr[m])))
        last = k == len(iv) - 1
        t_star = cleaning_interval_days(cleaning_cost, tariff_per_kwh, e_day,
                                        row.soiling_rate_per_day)
        details = dict(
            first_day=str(row.start.date()), last_day=str(row.end.date()),
            n_valid_days=int(row.n_valid),
            soiling_rate_pct_per_day=100 * row.soiling_rate_per_day,
            soiling_rate_ci_pct_per_day=[100 * row.rate_low, 100 * row.rate_high],
            clear_day_rate_pct_per_day=(None if not np.isfinite(row.clear_rate_per_day)
                                        else 100 * row.clear_rate_per_day),
            loss_at_end_pct=100 * loss_end,
            lost_revenue=lost * tariff_per_kwh, currency=currency,
            method="Theil-Sen slope of site-median daily pi in the dry interval, relative to "
                   "its clean level (Deceglie et al. 2018; scipy.stats.theilslopes)",
            **site)
        sev = "info"
        if last:
            saving = tariff_per_kwh * e_day * loss_end * horizon_days
            recommend = bool(cleaning_cost > 0 and saving > cleaning_cost)
            details.update(
                current_loss_pct=100 * loss_end, ongoing=True,
                soiling_ratio_weighted_site=sr_weighted, soiling_ratio_weighted_period=[str(days[0].date()), str(days[-1].date())],
                soiling_ratio_weighted_mc=mc, soiling_ratio_weighted_mc_assumption=(
                    "each soiled interval's rate drawn from a normal around its Theil-Sen rate "
                    "(standard error widened for day-to-day autocorrelation, Santer et al. "
                    "2000), full recovery at each detected cleaning as in the point estimate"),
                soiling_ratio_weighted_partial_recovery=mc_partial.get("soiling_ratio_weighted"),
                soiling_ratio_weighted_partial_recovery_assumption=(
                    "sensitivity, not an interval: recovery at each cleaning drawn between half "
                    "and full; partial recoveries can only lower the soiling ratio"),
                cleaning_interval_days_opt=t_star,
                expected_saving_next_days=saving, horizon_days=horizon_days,
                cleaning_cost=cleaning_cost, tariff_per_kwh=tariff_per_kwh,
                recommend_cleaning=recommend,
                recommendation=(
                    "no cleaning cost configured ([economics] cleaning_cost = 0): the "
                    f"present loss of {100 * loss_end:.1f} % costs about {saving:.0f} "
                    f"{currency} over the next {horizon_days} days" if cleaning_cost <= 0 else
                    f"clean: the present loss of {100 * loss_end:.1f} % costs about "
                    f"{saving:.0f} {currency} over the next {horizon_days} days, more than a "
                    f"cleaning ({cleaning_cost:.0f} {currency}); optimal interval "
                    f"T* = {t_star:.0f} days" if recommend else
                    f"no cleaning yet: the present loss of {100 * loss_end:.1f} % costs about "
                    f"{saving:.0f} {currency} over the next {horizon_days} days, less than a "
                    f"cleaning ({cleaning_cost:.0f} {currency}); optimal interval "
                    f"T* = {t_star:.0f} days"),
                economics="T* = sqrt(2C/(p E_d r)) (derived, common practice)",
                caution="Cleaning is work at height near energised equipment; follow the "
                        "site's safety rules and the module maker's cleaning instructions.")
            sev = "warning" if recommend else "info"
        s0 = int(day_start_s([row.start], std_offset_s)[0])
        e0 = int(day_start_s([row.end], std_offset_s)[0]) + 86400
        records.append(dict(device_id=device_id, kind="soiling", start_s=s0, end_s=e0,
                            severity=sev, lost_kwh=lost, details=details))
    return flag_frame(records)
