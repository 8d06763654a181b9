"""Degradation rates with uncertainty from the daily performance index (Jordan et al. 2018; Lindig et al. 2018).

Every estimator here returns a :class:`RateResult`: a rate ``rd_pct_per_yr`` (negative = loss),
its confidence interval, the number of points or pairs it rests on, the warnings raised, and
details for the dashboard (distribution, fitted parameters). Too little data raises
:class:`InsufficientDataError` (a ``ValueError``) with the reason in words; fewer than three
years is valid but warned about.

Methods
-------
* :func:`degradation_yoy` — year-on-year (Jordan et al. 2018): the median of the rates of all
  pairs of days one year apart, with a moving-block bootstrap interval (Künsch 1989) whose
  block length comes from the autocorrelation of the pair rates.
* :func:`degradation_rlm` — robust regression (statsmodels RLM, Huber's T norm) of the
  monthly insolation-weighted index on time with annual harmonics.
* :func:`degradation_stl` — RLM of the trend of a robust STL decomposition (Cleveland et al.
  1990), the variant Lindig et al. 2018 found most accurate among simple models.
* :func:`peer_relative_pi` — each inverter's index divided by the median of its peers, whose
  rate is the inverter's rate relative to the fleet (irradiance and sensor effects common to
  the site cancel).
* :func:`compare_methods` — verdict on whether the methods agree within their intervals.

Field data at system level are screening evidence: they include balance-of-system losses,
soiling and sensor drift. A warranty claim follows its contract and the test procedure it
names (IEC 60891 flash tests), see :mod:`analytics.warranty`.

References
----------
.. [1] D. C. Jordan, C. Deline, S. R. Kurtz, G. M. Kimball, M. Anderson, "Robust PV
   degradation methodology and application," IEEE J. Photovolt. 8(2):525-531, 2018,
   doi:10.1109/JPHOTOV.2017.2779779.
.. [2] H. R. Künsch, "The jackknife and the bootstrap for general stationary observations,"
   Ann. Statist. 17(3):1217-1241, 1989, doi:10.1214/aos/1176347265.
.. [3] R. B. Cleveland, W. S. Cleveland, J. E. McRae, I. Terpenning, "STL: a seasonal-trend
   decomposition procedure based on loess," J. Official Statistics 6(1):3-73, 1990.
.. [4] S. Lindig, I. Kaaya, K.-A. Weiss, D. Moser, M. Topic, "Review of statistical and
   analytical degradation models for photovoltaic modules and systems as well as related
   improvements," IEEE J. Photovolt. 8(6):1773-1786, 2018, doi:10.1109/JPHOTOV.2018.2870532.
.. [5] W. K. Newey, K. D. West, "A simple, positive semi-definite, heteroskedasticity and
   autocorrelation consistent covariance matrix," Econometrica 55(3):703-708, 1987.
.. [6] D. C. Jordan, S. R. Kurtz, "Photovoltaic degradation rates — an analytical review,"
   Prog. Photovolt. 21(1):12-29, 2013, doi:10.1002/pip.1182.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import asdict, dataclass, field

import numpy as np
import pandas as pd
import scipy.stats
import statsmodels.api as sm
from statsmodels.tsa.seasonal import STL

DAYS_PER_YEAR = 365.25


class InsufficientDataError(ValueError):
    """Too little usable data for a rate; the message says how much there is and is needed."""


@dataclass
class RateResult:
    """One degradation estimate. ``rate_pct_per_yr`` is negative for a loss [%/yr]."""

    method: str
    rate_pct_per_yr: float | None
    ci_low: float | None = None
    ci_high: float | None = None
    confidence: float | None = None
    n_points: int = 0
    reason: str | None = None
    warnings: list[str] = field(default_factory=list)
    details: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def refused(cls, method: str, reason: str, **details) -> RateResult:
        return cls(method=method, rate_pct_per_yr=None, reason=reason, details=details)



def _years_below(span: float) -> str:
    """A span of years to two decimals, rounded down, so a record just short of a limit is
    never printed as the limit itself ("2.99 years; 3 or more are recommended", not 3.00).

    >>> _years_below(2.9986), _years_below(1.54)
    ('2.99', '1.54')
    """
    return f"{math.floor(span * 100 + 1e-9) / 100:.2f}"

def _warn(result: RateResult, message: str) -> None:
    result.warnings.append(message)
    warnings.warn(message, stacklevel=3)


# ---------------------------------------------------------------- input preparation


def _as_daily(pi: pd.Series) -> pd.Series:
    """``pi`` with a daily DatetimeIndex (dates accepted), sorted, NaN removed."""
    if not isinstance(pi, pd.Series):
        raise ValueError("pi must be a pandas Series indexed by day")
    idx = pi.index
    if (isinstance(idx, pd.DatetimeIndex) and idx.tz is None and idx.is_monotonic_increasing
            and idx.is_unique and not (idx.as_unit("s").asi8 % 86400).any()):
        return pi.astype(float).dropna()  # fast path: already midnight days, sorted, unique
    s = pi.astype(float).copy()
    s.index = pd.DatetimeIndex(pd.to_datetime(s.index)).normalize()
    if s.index.tz is not None:
        s.index = s.index.tz_localize(None)
    if s.index.has_duplicates:
        raise ValueError("pi has duplicate days")
    return s.sort_index().dropna()


def usable_daily_pi(pi: pd.Series, day_valid: pd.Series | None = None, *,
                    commissioned=None, stabilisation_days: int = 180,
                    pi_min: float = 0.3, pi_max: float = 1.3) -> tuple[pd.Series, dict]:
    """Select the days that enter a degradation fit, and count what survived each step.

    Parameters
    ----------
    pi : Series
        Daily performance index, measured / expected energy, indexed by day. [fraction]
    day_valid : Series of bool, optional
        The daily table's coverage verdict (IEC 61724-1 filtering practice: ≥80 % of insolation in valid intervals).
    commissioned : date, optional
        Commissioning date; the first ``stabilisation_days`` after it are skipped.
    stabilisation_days : int, default 180
        Days skipped after commissioning for light-induced and metastable effects (LID, LeTID,
        CdTe): Jordan et al. 2018, first 3–6 months (from memory); 180 d is the upper end.
    pi_min, pi_max : float
        Plausibility window for a daily index, IEC 61724-1 filtering practice (common practice).

    Returns
    -------
    (Series, dict)
        The usable daily index, and ``{"n_days_input", "n_days_valid", "n_days_after_stabilisation",
        "n_days_used", "fraction_used"}``.
    """
    s = pd.Series(np.asarray(pi, dtype=float), index=pd.DatetimeIndex(pd.to_datetime(pi.index)))
    report = {"n_days_input": int(len(s))}
    keep = s.notna().to_numpy().copy()
    if day_valid is not None:
        keep &= np.asarray(day_valid, dtype=bool)
    report["n_days_valid"] = int(keep.sum())
    if commissioned is not None:
        first = pd.Timestamp(commissioned) + pd.Timedelta(days=stabilisation_days)
        keep &= (s.index >= first)
        report["stabilisation_until"] = first.date().isoformat()
    report["n_days_after_stabilisation"] = int(keep.sum())
    keep &= ((s >= pi_min) & (s <= pi_max)).to_numpy()
    report["n_days_used"] = int(keep.sum())
    report["fraction_used"] = round(report["n_days_used"] / max(1, len(s)), 4)
    return _as_daily(s[keep]), report


def trend_index(d: pd.DataFrame) -> pd.DataFrame:
    """Daily rows with ``pi``, ``day_valid``, ``e_ac_valid_kwh`` and ``e_exp_valid_kwh``
    replaced by the daily index for trends (``details_json`` → ``trend`` of
    :mod:`analytics.daily`: valid intervals outside the clipping zone judged from the expected
    power without the AC limit, a selection that does not move as the array degrades);
    rows computed before it keep their values. Frame in, frame out.

    Examples
    --------
    >>> d = pd.DataFrame({"pi": [0.9], "day_valid": [False], "e_ac_valid_kwh": [9.0],
    ...                   "e_exp_valid_kwh": [10.0], "details_json": ['{"trend": {"pi": 0.95, '
    ...                   '"day_valid": true, "e_ac_kwh": 9.5, "e_exp_kwh": 10.0}}']})
    >>> t = trend_index(d)
    >>> float(t["pi"].iloc[0]), bool(t["day_valid"].iloc[0])
    (0.95, True)
    """
    import json

    if "details_json" not in d or not len(d):
        return d
    t = [(json.loads(x).get("trend") if isinstance(x, str) and '"trend"' in x else None)
         for x in d["details_json"]]
    have = np.array([x is not None for x in t])
    if not have.any():
        return d
    d = d.copy()
    def pick(key):
        return np.array([x[key] if x is not None and x[key] is not None else np.nan
                         for x in t], dtype=float)

    d.loc[have, "pi"] = pick("pi")[have]
    d.loc[have, "e_ac_valid_kwh"] = pick("e_ac_kwh")[have]
    d.loc[have, "e_exp_valid_kwh"] = pick("e_exp_kwh")[have]
    d.loc[have, "day_valid"] = [bool(x["day_valid"]) for x in t if x is not None]
    return d


def check_span(days: pd.DatetimeIndex, *, min_years: float = 2.0, warn_years: float = 3.0,
               what: str = "daily index") -> tuple[float, str | None]:
    """Years spanned by ``days``; raise below ``min_years``, return a warning below ``warn_years``.

    Two years give one year of year-on-year pairs, the hard minimum; three or more are
    recommended (Jordan et al. 2018, from memory).
    """
    if len(days) < 2:
        raise InsufficientDataError(f"{what}: {len(days)} usable days; at least "
                                    f"{min_years:g} years are needed")
    span = ((days.max() - days.min()).days + 1) / DAYS_PER_YEAR
    if span < min_years:
        raise InsufficientDataError(
            f"{what}: usable data span {_years_below(span)} years ({len(days)} days); at least "
            f"{min_years:g} years are needed for a degradation rate")
    msg = None
    if span < warn_years:
        msg = (f"{what}: only {_years_below(span)} years of usable data; {warn_years:g} or more are "
               "recommended, the interval is wide and seasonal effects may not average out")
    return span, msg


# ---------------------------------------------------------------- year-on-year


def yoy_rates(pi: pd.Series, *, lag_days: int = 365, reference: str = "pairwise") -> pd.Series:
    """Rate of every pair of days ``lag_days`` apart, indexed by the earlier day [%/yr].

    Notes
    -----
    Jordan et al. 2018 (Jordan et al. 2018):
    ``r_d = 100 (PI_{d+365} - PI_d) / PI_ref``, ``PI_ref = PI_d`` (``reference='pairwise'``)
    or the median of the first 365 days (``'year0'``). ``'start'`` expresses each pairwise
    rate relative to the level on the series' first day, ``r_d (1 + R t_d / 100)`` with ``R``
    the median pairwise rate and ``t_d`` years since the first day: the rate of a *linear*
    loss in % of the initial level per year, as linear power warranties state it. Pairwise
    rates read such a loss too steep by ``R² t / 100`` (−0.02 %/yr for −1.2 %/yr after
    1.5 years; measured on the validation fleets, tests/validation). The lag is fixed at 365 days, so a
    pair spanning 29 February is one day short of a calendar year; the rate is still
    expressed per 365 days (0.07 % relative, negligible).

    Examples
    --------
    >>> days = pd.date_range("2020-01-01", periods=731, freq="D")
    >>> t = np.arange(731)
    >>> r = yoy_rates(pd.Series(0.995 ** (t / 365), index=days))
    >>> round(float(r.median()), 6)
    -0.5
    """
    if reference not in ("pairwise", "year0", "start"):
        raise ValueError("reference must be 'pairwise', 'year0' or 'start'")
    s = _as_daily(pi)
    if s.empty:
        return pd.Series(dtype=float, name="rd_pct_per_yr")
    full = s.reindex(pd.date_range(s.index[0], s.index[-1], freq="D"))
    later = full.shift(-lag_days)
    if reference == "year0":
        ref = float(full.iloc[:365].median())
    else:
        ref = full
    r = 100.0 * (later - full) / ref * (365.0 / lag_days)
    r = r[np.isfinite(r)].rename("rd_pct_per_yr")  # a zero reference gives no pair
    if reference == "start":
        r = _pairs_to_start(r, s.index[0])
    return r


def _pairs_to_start(r: pd.Series, first_day) -> pd.Series:
    """Pairwise rates re-expressed relative to the level on ``first_day``.

    For a linear loss ``P(t) = P0 (1 + R t)`` the pair starting at ``t`` has
    ``r = R / (1 + R t)``, so ``r (1 + R t) = R``; ``R`` is the pairs' median (one fixed-point
    step, the remainder is of order R³t²). A level shift (``P`` times a constant after it)
    cancels in both factors.
    """
    if r.empty:
        return r
    t_yr = ((r.index - pd.Timestamp(first_day)).days / DAYS_PER_YEAR).to_numpy()
    return r * (1 + float(np.median(r)) / 100.0 * t_yr)


def acf_block_length(x, *, threshold: float = 0.2, max_block: int | None = None) -> int:
    """Smallest lag at which the autocorrelation of ``x`` falls below ``threshold`` (≥ 1).

    The block of a moving-block bootstrap must be long enough that observations in different
    blocks are nearly independent (Künsch 1989); the 0.2 threshold is common practice (Jordan et al. 2018 use a bootstrap)
    (common practice). Capped at ``max_block`` (default n/4) so enough blocks remain.

    Examples
    --------
    >>> acf_block_length(np.arange(10) % 2 * 1.0)  # lag-1 ACF is -0.9 < 0.2
    1
    """
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    n = len(x)
    if n < 4:
        return 1
    cap = max(1, n // 4 if max_block is None else max_block)
    d = x - x.mean()
    denom = float(d @ d)
    if denom == 0:
        return 1
    # ACF by FFT: O(n log n) for long series
    nfft = 1 << (2 * n - 1).bit_length()
    f = np.fft.rfft(d, nfft)
    acf = np.fft.irfft(f * np.conj(f), nfft)[: cap + 1] / denom
    below = np.nonzero(acf[1:] < threshold)[0]
    return int(min(cap, below[0] + 1)) if below.size else cap


def block_bootstrap(x, stat=np.median, *, n_resamples: int = 1000, block_length: int | None = None,
                    rng: np.random.Generator | int | None = None) -> tuple[np.ndarray, int]:
    """Moving-block bootstrap (Künsch 1989) distribution of ``stat`` over resamples of ``x``.

    Each resample concatenates blocks of ``block_length`` consecutive values whose starts are
    drawn uniformly from ``0 .. n - block_length`` and is cut to ``n`` values. ``stat`` must
    accept ``axis=1``; for ``np.median`` a faster exact path works on ranks (same result).
    Returns ``(values, block_length)``; pass a seed or a ``numpy.random.Generator`` for
    reproducible results.

    Examples
    --------
    >>> vals, b = block_bootstrap(np.arange(100.0), n_resamples=200, block_length=5, rng=1)
    >>> b, bool(40 < np.median(vals) < 60)
    (5, True)
    """
    x = np.asarray(x, dtype=float)
    n = len(x)
    if n < 2:
        raise InsufficientDataError(f"{n} values; a bootstrap needs at least 2")
    b = acf_block_length(x) if block_length is None else int(block_length)
    b = max(1, min(b, n))
    gen = rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)
    n_blocks = -(-n // b)
    # block starts, uniform on 0 .. n-b; 16-bit draws (numpy's exact bounded-integer method
    # for that width) halve the cost of the draws, the largest part of a bootstrap
    small = n - b + 1 <= np.iinfo(np.uint16).max
    starts = gen.integers(0, n - b + 1, size=(n_resamples, n_blocks),
                          dtype=np.uint16 if small else np.int64)
    if stat is not np.median:
        idx = (starts.astype(np.int64)[:, :, None] + np.arange(b)).reshape(n_resamples, -1)[:, :n]
        return stat(x[idx], axis=1), b
    # Median on ranks, exact: sort x once, resample its ranks, select the middle rank of every
    # resample in one vectorised partition with a single kth (numpy's SIMD quickselect path
    # for 32-bit types is ~3x faster than a two-kth partition of int16); for even n the
    # lower middle rank is the largest rank left of the kth after that partition.
    order = np.argsort(x, kind="stable")
    xs = x[order]
    rank = np.empty(n, dtype=np.int32)
    rank[order] = np.arange(n, dtype=np.int32)
    windows = np.lib.stride_tricks.sliding_window_view(rank, b)  # row s = block starting at s
    r = windows[starts].reshape(n_resamples, -1)[:, :n]  # a fresh (B, n) copy
    k = n // 2
    r.partition(k, axis=1)
    if n % 2:
        return xs[r[:, k]], b
    return (xs[r[:, :k].max(axis=1)] + xs[r[:, k]]) / 2, b


def degradation_yoy(pi: pd.Series, *, confidence: float = 0.95, n_resamples: int = 1000,
                    rng: np.random.Generator | int | None = 0, lag_days: int = 365,
                    reference: str = "pairwise", block_length: int | None = None,
                    min_years: float = 2.0, warn_years: float = 3.0, min_pairs: int = 90,
                    hist_bin_pct: float = 0.25, breaks=None, min_segment_months: int = 9,
                    year_effects: bool = False, method: str = "sensor_year_pairs",
                    pi_draws: np.ndarray | None = None,
                    min_year_sd_pct_per_yr: float = 0.0) -> RateResult:
    """Year-on-year degradation rate with a moving-block bootstrap interval.

    Parameters
    ----------
    pi : Series
        Usable daily (temperature-corrected) performance index indexed by day, e.g. from
        :func:`usable_daily_pi`. [fraction]
    confidence : float, default 0.95
        Two-sided level of the percentile interval.
    n_resamples : int, default 1000
        Bootstrap resamples (Jordan et al. 2018: ≥ 1000).
    rng : Generator or int, default 0
        Seed or generator: the same seed gives the same interval.
    block_length : int, optional
        Default: :func:`acf_block_length` of the pair rates in time order.
    min_years, warn_years : float
        Refuse below, warn below (Jordan et al. 2018 minimum data).
    min_pairs : int, default 90
        Refuse with fewer pairs (a season's worth; common practice).
    breaks : list of dates, optional
        Change points (:mod:`analytics.changepoint`): pairs whose year spans one are dropped,
        giving the rate within stable segments.
    year_effects : bool, default False
        Add the between-year component (:func:`year_component`, always reported in
        ``details["year_component"]``) to the bootstrap distribution before its quantiles are
        read. Off by default: on 11 drift-free validation fleets (88 inverters) the bootstrap
        alone covered the truth for 98 % (95 % interval) and 73 % (68 %) of inverters, with
        the component 99 % and 80 %, above the 68 % target (tests/validation).
    pi_draws : array (n_draws, len(pi)), optional
        Monte-Carlo draws of the index itself under an uncertain correction (e.g. the index
        divided by draws of its soiling ratio, :func:`analytics.soiling.soiling_ratio_draws`),
        aligned with ``pi`` (its non-NaN days, in order). Each draw's median pair rate minus
        the point rate is added to one bootstrap resample, so the interval carries both the
        day-to-day sampling error and the correction's own uncertainty, read as independent
        (propagation of distributions by Monte Carlo, JCGM 101:2008).
        ``details["correction_sd_pct_per_yr"]`` reports the correction's part.
    min_year_sd_pct_per_yr : float, default 0
        With fewer than two year groups of pairs (under three years of data) the between-year
        component cannot be estimated from the data (:func:`year_component` gives 0); this
        standard deviation of a yearly level error ``σ_a`` is then assumed instead and its
        component, ``√2 · σ_a`` (one year group: the median reads about ``a_2 − a_1``), added
        to the bootstrap distribution (``details["year_component"]["assumed"]``). 0 keeps
        the bootstrap alone.
    min_segment_months : int, default 9
        With ``breaks``: a segment's pairs enter only if their first days cover at least this
        many calendar months (three quarters of the year, so that season-specific
        differences between years average out as in a whole-period rate; common practice).
        ``details["segments"]`` lists each segment's pairs, months and median.

    Returns
    -------
    RateResult
        ``rate_pct_per_yr`` = median pair rate [%/yr]; ``n_points`` = number of pairs;
        ``details``: the distribution of the pair rates (``pair_rate_distribution``), block length, 68.2 % interval, P90/P95
        exceedance (10th/5th percentile of the bootstrap rates, Jordan et al. 2018).

    Notes
    -----
    Jordan et al. 2018: each pair compares the same season, so seasonal temperature,
    spectral, angle-of-incidence and soiling patterns cancel to first order; the median
    tolerates up to half the pairs being bad. A consecutive pair rate is correlated with its
    neighbours (weather regimes, soiling), so the bootstrap resamples blocks whose length is
    the lag at which the pair rates' autocorrelation drops below 0.2 (Künsch 1989). Errors
    that every pair of one year shares (that year's weather against the expected-power model,
    common to a whole fleet) are invisible to a resampling of days; :func:`year_component`
    estimates them from the spread of the per-year medians (reported; added to the bootstrap
    distribution as a normal draw per resample only with ``year_effects``).

    Examples
    --------
    >>> days = pd.date_range("2020-01-01", periods=3 * 365, freq="D")
    >>> t = np.arange(len(days))
    >>> pi = pd.Series(0.995 ** (t / 365) * (1 + 0.02 * np.sin(2 * np.pi * t / 365)), days)
    >>> res = degradation_yoy(pi)
    >>> round(res.rate_pct_per_yr, 3), res.n_points
    (-0.5, 730)
    """
    if not 0 < confidence < 1:
        raise ValueError("confidence must be between 0 and 1")
    s = _as_daily(pi)
    span, msg = check_span(s.index, min_years=min_years, warn_years=warn_years)
    r = yoy_rates(s, lag_days=lag_days, reference="pairwise" if reference == "start" else reference)
    n_spanning = 0
    segment_info = []
    if breaks:
        first = r.index.to_numpy()
        spans = np.zeros(len(r), dtype=bool)
        bdays = np.sort(pd.DatetimeIndex(pd.to_datetime(list(breaks))).to_numpy())
        for bday in bdays:
            spans |= (first < bday) & (first + np.timedelta64(lag_days, "D") >= bday)
        n_spanning = int(spans.sum())
        r = r[~spans]
        # Seasonal balance: a segment whose pairs start in only a few calendar months gives a
        # rate of those months, biased by what differs between years in that season (soiling
        # before the rains, a hot summer). Only segments whose pairs cover at least
        # ``min_segment_months`` calendar months enter; if none does, all kept pairs do.
        seg = np.searchsorted(bdays, r.index.to_numpy(), side="right")
        months = r.index.month.to_numpy()
        use = np.zeros(len(r), dtype=bool)
        for k in np.unique(seg):
            m = seg == k
            n_months = int(np.unique(months[m]).size)
            ok = n_months >= min_segment_months
            use |= m & ok
            segment_info.append({"segment": int(k), "n_pairs": int(m.sum()),
                                 "n_months_covered": n_months, "used": bool(ok),
                                 "median_pct_per_yr": float(np.median(r.to_numpy()[m]))})
        if use.any():
            r = r[use]
        elif len(r):
            segment_info.append({"note": f"no segment covers {min_segment_months} calendar "
                                         "months: all pairs within segments used"})
    if len(r) < min_pairs:
        raise InsufficientDataError(
            f"{len(r)} year-on-year pairs (days with a valid day {lag_days} days later); "
            f"at least {min_pairs} are needed")
    if reference == "start":  # after the pairs spanning a shift are gone (their rate is the step)
        r = _pairs_to_start(r, s.index[0])
    vals = r.to_numpy()
    gen = rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)
    boot, b = block_bootstrap(vals, np.median, n_resamples=n_resamples,
                              block_length=block_length, rng=gen)
    yc = year_component(r, float(np.var(boot)), lag_days=lag_days)
    yc["added_to_interval"] = bool(year_effects and yc["sd_pct_per_yr"] > 0)
    if yc["n_years"] < 2 and min_year_sd_pct_per_yr > 0:
        # too few years to measure the shared yearly error: assume the stated one; the
        # median of one year group of pairs reads about a_2 - a_1, variance 2 σ_a²
        yc.update(sd_pct_per_yr=float(np.sqrt(2.0) * min_year_sd_pct_per_yr),
                  assumed=True, assumed_sigma_a_pct=float(min_year_sd_pct_per_yr),
                  added_to_interval=True)
    if yc["added_to_interval"]:
        boot = boot + gen.normal(0.0, yc["sd_pct_per_yr"], len(boot))
    corr_sd = None
    if pi_draws is not None:
        delta = _draw_deltas(s, r, np.asarray(pi_draws, dtype=float), lag_days=lag_days,
                             reference=reference)
        corr_sd = float(np.std(delta))
        boot = boot + delta[gen.integers(0, len(delta), len(boot))]
    alpha = 1 - confidence
    lo, hi = np.quantile(boot, [alpha / 2, 1 - alpha / 2])
    lo68, hi68 = np.quantile(boot, [0.159, 0.841])
    rd = float(np.median(vals))
    res = RateResult(method=method, rate_pct_per_yr=rd, ci_low=float(lo), ci_high=float(hi),
                     confidence=confidence, n_points=int(len(vals)))
    if msg:
        _warn(res, msg)
    _sanity(res)
    edges = _hist_edges(vals, hist_bin_pct)
    counts, edges = np.histogram(np.clip(vals, edges[0], edges[-1]), bins=edges)
    res.details = {
        "n_days": int(len(s)), "span_years": round(span, 3), "lag_days": lag_days,
        "reference": reference, "block_length": b, "n_resamples": n_resamples,
        "n_pairs_spanning_breaks_dropped": n_spanning,
        "year_component": yc,
        **({"correction_sd_pct_per_yr": corr_sd, "n_correction_draws": int(len(pi_draws))}
           if corr_sd is not None else {}),
        **({"segments": segment_info, "min_segment_months": min_segment_months}
           if breaks else {}),
        "ci_68": [float(lo68), float(hi68)],
        "p90_pct_per_yr": float(np.quantile(boot, 0.10)),
        "p95_pct_per_yr": float(np.quantile(boot, 0.05)),
        "first_pair_day": r.index[0].date().isoformat(),
        "last_pair_day": (r.index[-1] + pd.Timedelta(days=lag_days)).date().isoformat(),
        "pair_rate_distribution": {"edges_pct_per_yr": [round(float(e), 4) for e in edges],
                      "counts": [int(c) for c in counts]},
    }
    return res


def _draw_deltas(s: pd.Series, r: pd.Series, draws: np.ndarray, *, lag_days: int,
                 reference: str) -> np.ndarray:
    """Median pair rate of each draw of the index minus that of ``r`` (the point's pairs,
    same days): the draws' own spread of the rate [%/yr]."""
    if draws.ndim != 2 or draws.shape[1] != len(s):
        raise ValueError(f"pi_draws must have shape (n_draws, {len(s)}), got {draws.shape}")
    i1 = s.index.get_indexer(r.index)
    i2 = s.index.get_indexer(r.index + pd.Timedelta(days=lag_days))
    ok = (i1 >= 0) & (i2 >= 0)
    a, b = draws[:, i1[ok]], draws[:, i2[ok]]
    with np.errstate(divide="ignore", invalid="ignore"):
        rk = 100.0 * (b - a) / a * (365.0 / lag_days)
    # np.median partitions in place and is far faster than np.nanmedian; rows with a
    # non-finite pair (a zero in a draw) are dropped
    good = np.isfinite(rk).all(axis=1)
    rk = rk[good]
    if reference == "start":
        # the factor (1 + R t / 100) with the point's pairwise R: a draw's own R differs by a
        # few hundredths of %/yr, which changes a pair's rate by under 0.3 % of itself
        t_yr = ((r.index[ok] - s.index[0]).days / DAYS_PER_YEAR).to_numpy()
        a0, b0 = s.to_numpy()[i1[ok]], s.to_numpy()[i2[ok]]
        r_pt = float(np.median(100.0 * (b0 - a0) / a0 * (365.0 / lag_days)))
        rk *= (1 + r_pt / 100.0 * t_yr)[None, :]
    med = np.median(rk, axis=1)
    return med - float(np.median(r.to_numpy()[ok]))


def year_component(r: pd.Series, boot_var: float, *, lag_days: int = 365,
                   min_pairs: int = 180) -> dict:
    """Between-year error component of a year-on-year rate [%/yr], from the pairs' per-year medians.

    Pairs are grouped by the year (counted from the first pair) they start in; groups with
    at least ``min_pairs`` pairs give medians ``m_1 … m_k``. If every year's level carries an
    error ``a_y`` shared by all its days (weather against the model), the pairs of year ``j``
    see ``a_{j+1} − a_j`` and the median of all pairs about ``(a_{k+1} − a_1) / k``, whose
    variance is ``2 σ_a² / k²``; the sample variance of the ``m_j`` is about
    ``2 σ_a² (1 + 1/k) + k · v`` (``v`` = ``boot_var``, the day-to-day part already in the
    bootstrap). Hence the component's variance ``max(0, s²_m − k v) / (k (k + 1))``, a
    method-of-moments estimate of a one-way random-effects variance (Searle, Casella &
    McCulloch 1992, ch. 3). It needs two year groups (``k ≥ 2``, three years of data);
    otherwise it is 0 and ``n_years`` says so.

    Examples
    --------
    >>> d = pd.date_range("2020-01-01", periods=3 * 365, freq="D")
    >>> r = pd.Series(np.repeat([-0.4, -0.6, -0.5], 365), d)   # year medians -0.4 -0.6 -0.5
    >>> round(year_component(r, 0.0)["sd_pct_per_yr"], 4)        # sqrt(0.01 / (3 * 4))
    0.0289
    """
    if r.empty:
        return {"sd_pct_per_yr": 0.0, "n_years": 0, "year_medians_pct_per_yr": []}
    j = ((r.index - r.index[0]).days // lag_days).to_numpy()
    vals = r.to_numpy()
    meds = [float(np.median(vals[j == q])) for q in np.unique(j) if (j == q).sum() >= min_pairs]
    k = len(meds)
    var = max(0.0, float(np.var(meds, ddof=1)) - k * boot_var) / (k * (k + 1)) if k >= 2 else 0.0
    return {"sd_pct_per_yr": float(np.sqrt(var)), "n_years": k,
            "year_medians_pct_per_yr": [round(m, 4) for m in meds]}


def _hist_edges(vals: np.ndarray, width: float) -> np.ndarray:
    """Histogram edges of fixed ``width`` covering the 1st-99th percentile (tails clipped in)."""
    lo, hi = np.quantile(vals, [0.01, 0.99])
    lo = np.floor(lo / width) * width
    hi = max(np.ceil(hi / width) * width, lo + width)
    n = min(400, int(round((hi - lo) / width)))
    return np.linspace(lo, hi, n + 1)


def _sanity(res: RateResult, *, low: float = -2.0, high: float = 0.5) -> None:
    """Flag rates outside the review band (common practice; Jordan & Kurtz 2013)."""
    rd = res.rate_pct_per_yr
    if rd is not None and not low <= rd <= high:
        _warn(res, f"{res.method}: rate {rd:+.2f} %/yr is outside {low:+.1f}..{high:+.1f} %/yr, "
                   "the range of published field rates (Jordan & Kurtz 2013): review the data "
                   "(steps, sensor drift, soiling, outages) before using it")


# ---------------------------------------------------------------- regression


def monthly_pi(pi: pd.Series, weights: pd.Series | None = None, *, min_days: int = 10) -> pd.Series:
    """Monthly insolation-weighted performance index, ``Σ w_d PI_d / Σ w_d`` per month.

    With ``weights`` = the day's expected energy over valid intervals (``e_exp_valid_kwh``)
    this equals Σ measured / Σ expected energy, the ratio of sums IEC 61724-1 filtering practice asks for.
    Months with fewer than ``min_days`` usable days are NaN (common practice). The index is
    the first day of each month.

    Examples
    --------
    >>> d = pd.date_range("2021-01-01", periods=31)
    >>> round(float(monthly_pi(pd.Series(0.9, d), pd.Series(2.0, d)).iloc[0]), 6)
    0.9
    """
    s = _as_daily(pi)
    if s.empty:
        return pd.Series(dtype=float, index=pd.DatetimeIndex([]), name="pi")
    if weights is None:
        w = np.ones(len(s))
    else:
        wd = weights if weights.index.equals(s.index) else _as_daily(weights).reindex(s.index)
        w = np.nan_to_num(wd.to_numpy(dtype=float), nan=0.0)
    if (w < 0).any():
        raise ValueError("weights must be non-negative")
    m = (s.index.year * 12 + s.index.month - 1).to_numpy()
    m0 = m.min()
    k = m - m0
    size = int(m.max() - m0 + 1)
    num = np.bincount(k, weights=s.to_numpy() * w, minlength=size)
    den = np.bincount(k, weights=w, minlength=size)
    n = np.bincount(k, minlength=size)
    with np.errstate(invalid="ignore", divide="ignore"):
        vals = np.where((n >= min_days) & (den > 0), num / den, np.nan)
    # months since 1970-01 as numpy month datetimes (first day of each month)
    months = np.arange(m0 - 1970 * 12, m0 - 1970 * 12 + size).astype("datetime64[M]")
    idx = pd.DatetimeIndex(months.astype("datetime64[ns]"))
    return pd.Series(vals, index=idx, name="pi")


def deseasonalised_monthly(pi: pd.Series, weights: pd.Series | None = None, *,
                           harmonics: int = 1, min_days: int = 10) -> pd.Series:
    """Monthly insolation-weighted index divided by its fitted annual cycle.

    The cycle is the harmonic part of the RLM model A fit (:func:`rlm_rate`):
    PI_m / (1 + Σ (a_k sin 2πkt + b_k cos 2πkt)/β0). What remains is level, trend and noise,
    which is what a warranty envelope should be compared with.
    """
    m = monthly_pi(pi, weights, min_days=min_days).dropna()
    s = _as_daily(pi)
    if len(m) < 2 + 2 * harmonics + 3:
        raise InsufficientDataError(f"{len(m)} months; too few to fit an annual cycle")
    t = ((m.index + pd.Timedelta(days=14.5) - s.index[0]) / pd.Timedelta(days=1)).to_numpy(
        dtype=float) / DAYS_PER_YEAR
    par = rlm_rate(t, m.to_numpy(), harmonics=harmonics, hac=False).details["params"]
    season = sum(par[2 * k] * np.sin(2 * np.pi * k * t) + par[2 * k + 1] * np.cos(2 * np.pi * k * t)
                 for k in range(1, harmonics + 1)) / par[0]
    return (m / (1 + season)).rename("pi")


def _hac_lags(resid: np.ndarray) -> int:
    """HAC truncation lag: the larger of the Newey–West rule floor(4 (T/100)^(2/9)) (the
    statsmodels ``cov_hac`` default) and the lag where the residual ACF drops below 0.2,
    so that long soiling or weather correlations are not cut off."""
    t = len(resid)
    nw = int(np.floor(4 * (t / 100.0) ** (2.0 / 9.0)))
    return int(max(1, nw, acf_block_length(resid)))


def rlm_rate(t_yr, y, *, harmonics: int = 1, confidence: float = 0.95, weights=None,
             hac: bool = True, hac_maxlags: int | None = None, method: str = "sensor_monthly_robust_line") -> RateResult:
    """Robust (Huber) regression rate of ``y`` on time with annual harmonic terms.

    Parameters
    ----------
    t_yr : array
        Time in years from the start of the series (t = 0 at the first point). [yr]
    y : array
        Performance index. [fraction]
    harmonics : int, default 1
        Number of annual harmonic pairs sin(2πkt), cos(2πkt); 0 for none.
    weights : array, optional
        Not used by the fit; recorded for callers that aggregate.
    hac : bool, default True
        Interval from a Newey–West (HAC) covariance, see Notes; False gives statsmodels' RLM
        'H1' covariance, which assumes independent residuals.

    Returns
    -------
    RateResult
        Rate = 100 β1/β0 [%/yr], β0 the de-seasonalised level at t = 0 (the start),
        interval by the delta method (Lindig et al. 2018).

    Notes
    -----
    The linear model with annual harmonics (Lindig et al. 2018): PI = β0 + β1 t + Σ_k (a_k sin 2πkt + b_k cos 2πkt), fitted with
    ``statsmodels.api.RLM(y, X, M=HuberT(t=1.345))`` (statsmodels docs). Interval: RLM's own
    covariances assume independent errors, but monthly residuals are serially correlated
    (soiling, weather regimes), which makes them too narrow. We therefore re-fit the
    converged IRLS step — weighted least squares with RLM's final weights, which reproduces
    RLM's coefficients — with ``cov_type='HAC'`` (Newey & West 1987, Bartlett kernel) and a
    lag that is the larger of the Newey–West rule and the residual-ACF lag
    (:func:`_hac_lags`). HAC was chosen over a block bootstrap because it costs one extra
    fit instead of ~1000 RLM refits per inverter, and because with ~60 monthly points a
    block bootstrap has too few blocks to be reliable. Student-t quantiles with the residual
    degrees of freedom are used. Var(Rd) by the delta method:
    (100/β0)² [Var β1 − 2 (β1/β0) Cov(β0, β1) + (β1/β0)² Var β0].

    Examples
    --------
    >>> t = np.arange(60) / 12
    >>> round(rlm_rate(t, 1 - 0.005 * t + 0.02 * np.sin(2 * np.pi * t)).rate_pct_per_yr, 4)
    -0.5
    """
    t = np.asarray(t_yr, dtype=float)
    y = np.asarray(y, dtype=float)
    ok = np.isfinite(t) & np.isfinite(y)
    t, y = t[ok], y[ok]
    n_par = 2 + 2 * harmonics
    if len(y) < n_par + 3:
        raise InsufficientDataError(f"{len(y)} points; a fit with {n_par} parameters needs "
                                    f"at least {n_par + 3}")
    cols = [np.ones_like(t), t]
    for k in range(1, harmonics + 1):
        cols += [np.sin(2 * np.pi * k * t), np.cos(2 * np.pi * k * t)]
    X = np.column_stack(cols)
    # conv='coefs' (statsmodels RLM.fit option): stop when the coefficients change < tol;
    # half the iterations of conv='dev' for the same rate to ~1e-7 %/yr
    fit = sm.RLM(y, X, M=sm.robust.norms.HuberT(t=1.345)).fit(
        maxiter=50, tol=1e-8, scale_est="mad", cov="H1", conv="coefs")
    b0, b1 = float(fit.params[0]), float(fit.params[1])
    if hac:
        lags = hac_maxlags if hac_maxlags is not None else _hac_lags(fit.resid)
        w = np.clip(fit.weights, 1e-6, None)
        wls = sm.WLS(y, X, weights=w).fit(cov_type="HAC", cov_kwds={"maxlags": lags})
        cov = np.asarray(wls.cov_params())[:2, :2]
        cov_kind = f"HAC (Newey-West, maxlags={lags}) on RLM weights"
    else:
        cov = np.asarray(fit.cov_params())[:2, :2]
        cov_kind = "RLM H1 (independent errors)"
        lags = 0
    g = np.array([-100 * b1 / b0 ** 2, 100 / b0])  # gradient of Rd = 100 b1/b0 wrt (b0, b1)
    se = float(np.sqrt(max(g @ cov @ g, 0.0)))
    rd = 100 * b1 / b0
    q = scipy.stats.t.ppf(0.5 + confidence / 2, df=max(1, len(y) - n_par))
    res = RateResult(method=method, rate_pct_per_yr=rd, ci_low=float(rd - q * se), ci_high=float(rd + q * se),
                     confidence=confidence, n_points=int(len(y)))
    res.details = {
        "params": [float(p) for p in fit.params], "se_pct_per_yr": se, "covariance": cov_kind,
        "hac_maxlags": lags, "harmonics": harmonics,
        "n_downweighted": int((fit.weights < 0.999).sum()),
        "level_at_start": b0,
    }
    return res


def _decimal_years(idx: pd.DatetimeIndex) -> np.ndarray:
    return ((idx - idx[0]) / pd.Timedelta(days=1)).to_numpy(dtype=float) / DAYS_PER_YEAR


def degradation_rlm(pi: pd.Series, weights: pd.Series | None = None, *,
                    aggregate: str = "monthly", harmonics: int = 1, confidence: float = 0.95,
                    min_years: float = 2.0, warn_years: float = 3.0, min_days_per_month: int = 10,
                    method: str = "sensor_monthly_robust_line") -> RateResult:
    """Robust-regression degradation rate of the daily index (Lindig et al. 2018, linear model with harmonics).

    ``aggregate='monthly'`` first forms the monthly insolation-weighted index
    (:func:`monthly_pi`) — fewer, less correlated points; ``'daily'`` fits every usable day.
    Time is in decimal years from the first point, so the rate is relative to the fitted
    start level. See :func:`rlm_rate` for the fit and its HAC interval.
    """
    s = _as_daily(pi)
    span, msg = check_span(s.index, min_years=min_years, warn_years=warn_years)
    if aggregate == "monthly":
        m = monthly_pi(s, weights, min_days=min_days_per_month).dropna()
        # months are placed at their mid-point
        idx = m.index + pd.Timedelta(days=14.5)
        t = ((idx - s.index[0]) / pd.Timedelta(days=1)).to_numpy(dtype=float) / DAYS_PER_YEAR
        y = m.to_numpy()
    elif aggregate == "daily":
        t, y = _decimal_years(s.index), s.to_numpy()
    else:
        raise ValueError("aggregate must be 'monthly' or 'daily'")
    res = rlm_rate(t, y, harmonics=harmonics, confidence=confidence, method=method)
    if msg:
        _warn(res, msg)
    _sanity(res)
    res.details.update({"aggregate": aggregate, "span_years": round(span, 3), "n_days": len(s)})
    return res


def degradation_stl(pi: pd.Series, weights: pd.Series | None = None, *, confidence: float = 0.95,
                    seasonal: int = 7, min_years: float = 2.0, warn_years: float = 3.0,
                    min_days_per_month: int = 10, max_missing_fraction: float = 0.25,
                    method: str = "sensor_monthly_trend_line") -> RateResult:
    """Degradation rate from the trend of a robust STL decomposition (Lindig et al. 2018, STL trend).

    Steps: monthly insolation-weighted index; months without enough data linearly
    interpolated (STL needs a regular series; refused above ``max_missing_fraction``);
    ``statsmodels.tsa.seasonal.STL(x, period=12, seasonal=7, robust=True)`` (Cleveland et al.
    1990); RLM (Huber) of the trend on time; rate relative to the fitted start level.

    Interval: the STL trend is a smoother, so its residuals about a line are strongly
    autocorrelated by construction and any covariance computed from them is meaningless.
    The half-width is therefore taken from the HAC RLM fit of the de-seasonalised series
    (trend + remainder = index − seasonal), whose scatter is the data's own, or from the HAC
    harmonic RLM (model A) on the same months if that is wider (with few cycles STL's
    seasonal absorbs part of the year-to-year scatter), and centred on the trend rate.
    ``n_points`` counts the months with real data.
    """
    s = _as_daily(pi)
    span, msg = check_span(s.index, min_years=min_years, warn_years=warn_years)
    m = monthly_pi(s, weights, min_days=min_days_per_month)
    n_real = int(m.notna().sum())
    missing = 1 - n_real / len(m)
    if len(m) < 24:
        raise InsufficientDataError(f"{len(m)} months; STL with a 12-month period needs 24")
    if missing > max_missing_fraction:
        raise InsufficientDataError(
            f"{missing:.0%} of months lack {min_days_per_month} usable days; STL needs a "
            f"regular series (at most {max_missing_fraction:.0%} may be interpolated)")
    x = m.interpolate(limit_direction="both")
    dec = STL(x.to_numpy(), period=12, seasonal=seasonal, robust=True).fit()
    t = _decimal_years(x.index)
    trend_fit = rlm_rate(t, dec.trend, harmonics=0, hac=False, method=method)
    real = m.notna().to_numpy()
    deseason = (x.to_numpy() - dec.seasonal)[real]
    spread = rlm_rate(t[real], deseason, harmonics=0, confidence=confidence, method=method)
    # With few cycles STL's per-cycle seasonal absorbs part of the year-to-year variation, so
    # the de-seasonalised scatter understates the uncertainty: never report a narrower
    # interval than the harmonic RLM (model A) on the same months.
    model_a = rlm_rate(t[real], x.to_numpy()[real], harmonics=1, confidence=confidence)
    rd = trend_fit.rate_pct_per_yr
    half = max(spread.ci_high - spread.ci_low, model_a.ci_high - model_a.ci_low) / 2
    res = RateResult(method=method, rate_pct_per_yr=rd, ci_low=float(rd - half), ci_high=float(rd + half),
                     confidence=confidence, n_points=n_real)
    if msg:
        _warn(res, msg)
    _sanity(res)
    res.details = {"span_years": round(span, 3), "n_months": len(m), "n_months_interpolated":
                   len(m) - n_real, "seasonal": seasonal, "interval_from": "HAC RLM of the "
                   "de-seasonalised monthly index", "deseasonalised_rate_pct_per_yr":
                   spread.rate_pct_per_yr, "hac_maxlags": spread.details["hac_maxlags"],
                   "trend_level_at_start": trend_fit.details["level_at_start"]}
    return res


# ---------------------------------------------------------------- peers and comparison


def peer_relative_pi(pi_frame: pd.DataFrame, *, min_peers: int = 3) -> pd.DataFrame:
    """Each inverter's daily index divided by the median of its peers' on the same day.

    Parameters
    ----------
    pi_frame : DataFrame
        Daily index, one column per inverter of one peer group, NaN where not usable.
    min_peers : int, default 3
        Days with fewer usable peers (excluding the inverter itself) are NaN. peer alarms (Iglewicz & Hoaglin 1993 robust z) ask
        for ≥ 5 peers for outlier alarms; a degradation trend averages over years, so 3 is
        accepted here (common practice).

    Returns
    -------
    DataFrame
        Same shape: R_i,d = PI_i,d / median_{j≠i} PI_j,d (peer-median ratio, common practice). Its year-on-year
        rate is the inverter's rate relative to the fleet; what the site shares (irradiance
        sensor, weather, clear-sky model) cancels, so a drifting site sensor does not appear
        in it — but neither does degradation common to the whole fleet.

    Examples
    --------
    >>> f = pd.DataFrame({"a": [0.9], "b": [1.0], "c": [1.0], "d": [1.1]})
    >>> peer_relative_pi(f, min_peers=3).round(4).iloc[0].tolist()
    [0.9, 1.0, 1.0, 1.1]
    """
    arr = pi_frame.to_numpy(dtype=float)
    out = np.full_like(arr, np.nan)
    for i in range(arr.shape[1]):
        peers = np.delete(arr, i, axis=1)
        n = np.isfinite(peers).sum(axis=1)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN rows
            med = np.nanmedian(peers, axis=1)
        out[:, i] = np.where(n >= min_peers, arr[:, i] / med, np.nan)
    return pd.DataFrame(out, index=pi_frame.index, columns=pi_frame.columns)


def drift_onset(ratio: pd.Series, *, step_days: int = 14, min_before_days: int = 180,
                min_after_days: int = 180, harmonics: int = 2, penalty: float = 2.0,
                confidence: float = 0.95) -> dict:
    """Onset and rate of a sensor drift that starts part-way through the record.

    Model of the daily sensor / clear-sky ratio ``q`` (clear days only):
    ``ln q = a + Σ annual harmonics + k · max(0, t − t0)`` [t in years], fitted by least
    squares for every candidate onset ``t0`` on a ``step_days`` grid that leaves at least
    ``min_before_days`` and ``min_after_days`` of record on either side; ``t0`` at the first
    day is the drift that runs all along. The best onset is kept when it beats the drift all
    along by a Schwarz (1978) criterion counted in effectively independent days (``n``
    divided by :func:`acf_block_length` of the residuals):
    ``n_eff · ln(RSS_all / RSS_onset) > penalty · ln(n_eff)`` (``penalty`` 2: the onset is
    searched, a change-point's position costs about two parameters; common practice). The
    rate ``k`` [%/yr] gets a Newey & West (1987) HAC interval with the onset fixed (it does
    not include the onset's own uncertainty, so it is too narrow when the onset is unsure). The
    year-on-year median of the whole record reads such a drift at about the share of the
    record after the onset (the demo's 0.8 %/yr drift from mid-2023 read +0.41).

    Returns ``{"onset_day", "rate_pct_per_yr", "ci": [lo, hi], "accepted", "rss_ratio",
    "n_eff"}`` (``onset_day`` None and the all-along fit when not accepted).

    Examples
    --------
    >>> days = pd.date_range("2021-01-01", "2023-12-31", freq="D")
    >>> t = (days - days[0]).days.to_numpy() / 365.25
    >>> noise = 0.003 * np.sin(np.arange(len(days)) * 1.3)
    >>> q = pd.Series(np.exp(0.01 * np.clip(t - 1.5, 0, None) + noise), days)
    >>> out = drift_onset(q)
    >>> out["accepted"], out["onset_day"][:7], round(out["rate_pct_per_yr"], 1)  # grid: 2 weeks
    (True, '2022-06', 1.0)
    """
    q = ratio.dropna()
    q = q[q > 0]
    out = {"onset_day": None, "rate_pct_per_yr": None, "ci": [None, None], "accepted": False,
           "rss_ratio": 1.0, "n_eff": float(len(q))}
    if len(q) < 120:
        return out
    t = ((q.index - q.index[0]).days / DAYS_PER_YEAR).to_numpy()
    doy = 2 * np.pi * q.index.dayofyear.to_numpy() / DAYS_PER_YEAR
    cols = [np.ones_like(t)]
    for h in range(1, harmonics + 1):
        cols += [np.cos(h * doy), np.sin(h * doy)]
    base = np.column_stack(cols)
    y = np.log(q.to_numpy())

    def fit(t0_yr):
        X = np.column_stack([base, np.clip(t - t0_yr, 0, None)])
        beta, *_ = np.linalg.lstsq(X, y, rcond=None)
        resid = y - X @ beta
        return float(resid @ resid), X, resid

    rss_all, X_all, res_all = fit(0.0)
    # every candidate at once (Frisch-Waugh-Lovell): with y and each hinge column h residualised
    # on the seasonal base, RSS(t0) = |y_r|^2 - (y_r . h_r)^2 / |h_r|^2
    grid = np.arange(min_before_days / DAYS_PER_YEAR, t[-1] - min_after_days / DAYS_PER_YEAR,
                     step_days / DAYS_PER_YEAR)
    t0 = 0.0
    rss_on = rss_all
    if grid.size:
        M = np.column_stack([y, np.clip(t[:, None] - grid[None, :], 0, None)])
        Q, _ = np.linalg.qr(base)             # orthonormal basis of the seasonal columns
        R = M - Q @ (Q.T @ M)
        yr, hr = R[:, 0], R[:, 1:]
        hh = np.einsum("ij,ij->j", hr, hr)
        rss = float(yr @ yr) - np.where(hh > 0, (yr @ hr) ** 2 / np.where(hh > 0, hh, 1), 0.0)
        j = int(np.argmin(rss))
        if rss[j] < rss_all:
            t0 = float(grid[j])
    if t0 > 0:
        rss_on, X, resid = fit(t0)
    else:
        X, resid = X_all, res_all
    n_eff = len(y) / acf_block_length(resid)
    accepted = t0 > 0 and n_eff * np.log(rss_all / rss_on) > penalty * np.log(max(n_eff, 2.0))
    if not accepted:
        t0, X, resid = 0.0, X_all, res_all
    lags = max(1, acf_block_length(resid))
    fitres = sm.OLS(y, X).fit(cov_type="HAC", cov_kwds={"maxlags": lags})
    k = 100 * float(fitres.params[-1])
    half = 100 * float(fitres.bse[-1]) * scipy.stats.norm.ppf(0.5 + confidence / 2)
    out.update({"rate_pct_per_yr": k, "ci": [k - half, k + half], "accepted": bool(accepted),
                "rss_ratio": float(rss_all / rss_on), "n_eff": float(n_eff),
                "se_pct_per_yr": 100 * float(fitres.bse[-1])})
    if accepted:
        out["onset_day"] = (q.index[0] + pd.Timedelta(days=float(t0 * DAYS_PER_YEAR))
                            ).date().isoformat()
    return out


def sensor_clearsky_drift(pi_sensor: pd.Series, pi_clearsky: pd.Series, *,
                          window_days: int = 15, onset: bool = True, **yoy_kwargs) -> RateResult:
    """Year-on-year rate of the ratio sensor-based / clear-sky index on clear days [%/yr].

    On a clear day both indices see the same energy; their ratio is
    ``E_exp(clear-sky POA) / E_exp(sensor POA)`` ≈ G_clearsky / G_sensor, so module
    degradation, soiling and weather cancel and what remains is the irradiance sensor's
    drift against the clear-sky model (a clear-sky drift check, here from yield; Reno & Hansen 2016 clear periods). A rate
    whose interval excludes 0 means the sensor-based and clear-sky degradation rates differ
    by that much. The ratio's centred rolling median over ``window_days`` (at least two clear
    days) is used, as for the clear-sky index. Negative = the sensor reads increasingly high
    (apparent degradation); positive = it reads increasingly low (hidden degradation).
    """
    a, b = _as_daily(pi_sensor), _as_daily(pi_clearsky)
    q = (a / b.reindex(a.index)).dropna()
    q = q[(q > 0.5) & (q < 2.0)]
    if q.empty:
        raise InsufficientDataError("no day with both a sensor-based and a clear-sky index")
    full = q.reindex(pd.date_range(q.index[0], q.index[-1], freq="D"))
    dense = full.rolling(window_days, center=True, min_periods=2).median().dropna()
    res = degradation_yoy(dense, method="sensor_drift_check", **yoy_kwargs)
    res.details["whole_period_pct_per_yr"] = res.rate_pct_per_yr
    res.details["whole_period_ci"] = [res.ci_low, res.ci_high]
    res.details["onset_day"] = None
    if not onset:
        return res
    # where the drift began: the best onset of the log ratio (drift_onset without a
    # penalty); one inverter's day-to-day noise rarely lets it pass the criterion on its own,
    # so judge_sensor_drift accepts it only when the checks of a sensor agree on it
    fit = drift_onset(q, penalty=0.0, confidence=yoy_kwargs.get("confidence", 0.95))
    res.details["onset_fit"] = {k: fit.get(k) for k in (
        "onset_day", "rate_pct_per_yr", "ci", "rss_ratio", "n_eff")}
    res.details["first_ratio_day"] = q.index[0].date().isoformat()
    return res


SENSOR_METHODS = ("sensor_year_pairs", "sensor_monthly_robust_line", "sensor_monthly_trend_line")
DRIFT_WARNING = ("sensor_drift_check: the POA sensor drifts against the modelled clear sky: "
                 "check its calibration before using sensor_year_pairs or any sensor-based rate")


def compare_methods(results: dict[str, RateResult], *, clearsky_method: str = "modelled_sky_year_pairs",
                    drift: dict | None = None) -> dict:
    """Verdict on whether absolute-rate methods agree within their intervals.

    Two methods agree when their intervals overlap (a lenient, easily explained rule; the
    methods share data, so their errors are positively correlated). The peer-relative rate is
    relative to the fleet and is not compared with absolute rates. The POA-drift warning also
    fires when ``results["sensor_drift_check"]`` (:func:`sensor_clearsky_drift`, a much
    tighter paired test) has an interval that excludes zero — unless ``drift`` (the sensor's
    judgement over all its inverters, :func:`judge_sensor_drift`) is given, which then alone
    decides: one inverter's interval is too narrow a basis (drift warnings fired on 27 % of
    the inverters of drift-free validation fleets, issue #13). Returns
    ``{"agree": bool | None, "compared": [...], "disagreements": [[a, b], ...],
    "warnings": [...]}``; ``agree`` is None when fewer than two methods have an interval.
    """
    have = {k: r for k, r in results.items()
            if k not in ("peer_ratio_year_pairs", "sensor_drift_check") and r is not None and r.rate_pct_per_yr is not None
            and r.ci_low is not None and r.ci_high is not None}
    names = sorted(have)
    bad = []
    for i, a in enumerate(names):
        for b in names[i + 1:]:
            ra, rb = have[a], have[b]
            if ra.ci_high < rb.ci_low or rb.ci_high < ra.ci_low:
                bad.append([a, b])
    msgs = []
    check = results.get("sensor_drift_check")
    drift_shown = (check is not None and check.rate_pct_per_yr is not None
                   and check.ci_low is not None and (check.ci_low > 0 or check.ci_high < 0))
    if drift is not None:
        drift_shown = bool(drift.get("judged"))
    elif any(clearsky_method in p and (set(p) & set(SENSOR_METHODS)) for p in bad):
        drift_shown = True
    if drift_shown:
        msgs.append(DRIFT_WARNING)
    sensor_bad = [p for p in bad if set(p) <= set(SENSOR_METHODS)]
    if sensor_bad:
        msgs.append("sensor-based methods disagree (" + "; ".join(" vs ".join(p) for p in sensor_bad)
                    + "): look for steps (change points), soiling or seasonal artefacts")
    return {"agree": None if len(names) < 2 else not bad, "compared": names,
            "disagreements": bad, "warnings": msgs}


# ---------------------------------------------------------------- the recommended rate

#: Method codes (README "Degradation rates").
YEAR_PAIRS = "sensor_year_pairs"
ROBUST_LINE = "sensor_monthly_robust_line"
TREND_LINE = "sensor_monthly_trend_line"
PEER_PAIRS = "peer_ratio_year_pairs"
SKY_PAIRS = "modelled_sky_year_pairs"
DRIFT_CHECK = "sensor_drift_check"
BETWEEN_SHIFTS = "sensor_year_pairs_between_shifts"
SKY_BETWEEN_SHIFTS = "modelled_sky_between_shifts"
SOILING_CORRECTED = "sensor_year_pairs_unsoiled"
#: Rates that rest on the irradiance sensor (a drift of the sensor shifts them one to one).
SENSOR_BASED = (YEAR_PAIRS, ROBUST_LINE, TREND_LINE, BETWEEN_SHIFTS, SOILING_CORRECTED)


def interval_68(res: RateResult) -> tuple[float | None, float | None]:
    """The 68 % interval of a rate: the bootstrap's own (year-on-year methods,
    ``details["ci_68"]``), else the stated interval scaled to one standard error under a
    normal reading (half-width · z(0.84) / z(0.5 + confidence/2)).

    Examples
    --------
    >>> r = RateResult("x", -0.5, ci_low=-0.696, ci_high=-0.304, confidence=0.95)
    >>> [round(v, 3) for v in interval_68(r)]   # half-width 0.196 / 1.96 * 1.000 = 0.100
    [-0.6, -0.4]
    """
    if res.rate_pct_per_yr is None or res.ci_low is None or res.ci_high is None:
        return None, None
    c68 = res.details.get("ci_68") if isinstance(res.details, dict) else None
    if c68 and len(c68) == 2 and all(np.isfinite(c68)):
        return float(c68[0]), float(c68[1])
    conf = res.confidence or 0.95
    z = scipy.stats.norm.ppf(0.5 + conf / 2)
    z68 = scipy.stats.norm.ppf(0.5 + 0.6827 / 2)
    lo = res.rate_pct_per_yr - (res.rate_pct_per_yr - res.ci_low) * z68 / z
    hi = res.rate_pct_per_yr + (res.ci_high - res.rate_pct_per_yr) * z68 / z
    return float(lo), float(hi)


def judge_sensor_drift(checks: list[RateResult], *, min_drift_pct_per_yr: float = 0.35,
                       min_share: float = 0.5, min_onset_days: int = 270,
                       onset_spread_days: int = 60) -> dict:
    """Whether an irradiance sensor drifts, from the drift checks of the inverters it serves.

    Each inverter's :func:`sensor_clearsky_drift` measures the same sensor against the modelled
    clear sky; their median is the sensor's drift. It is judged to drift when that median is
    at least ``min_drift_pct_per_yr`` in size **and** at least ``min_share`` of the checks
    have an interval that excludes zero on that side. The size threshold: the checks of
    drift-free sensors on the project's validation fleets scatter by about ±0.2 %/yr around a
    small model bias (tests/validation scorecard). ISO 9060 class A pyranometers are specified to
    a non-stability within 0.8 %/yr (from memory).

    A drift that starts part-way through the period shows in the median of all year pairs at
    about the share of the period after its onset (the demo's 0.8 %/yr drift from mid-2023
    reads +0.41). Once the sensor is judged to drift, each check's best onset
    (:func:`drift_onset` on its daily ratio) is compared: when at least ``min_share`` of the
    checks place it within ``onset_spread_days`` of their median, at least
    ``min_onset_days`` after the first day, with a rate of the drift's sign, that median is
    the sensor's ``onset_day`` and ``drift_pct_per_yr`` becomes the median of their rates
    since the onset (``whole_period_pct_per_yr`` keeps the year-pair median). The inverters
    of one sensor share it, so their agreement is what separates a real onset from noise
    (their other errors differ: clipping, temperature, the array).

    Returns ``{"judged": bool, "drift_pct_per_yr": float | None, "whole_period_pct_per_yr",
    "n_checks": int, "n_excluding_zero": int, "onset_day": str | None, "n_with_onset": int}``.

    Examples
    --------
    >>> mk = lambda r, lo, hi: RateResult(DRIFT_CHECK, r, lo, hi, 0.95)
    >>> judge_sensor_drift([mk(1.1, 0.8, 1.4), mk(0.9, 0.5, 1.2), mk(0.2, -0.1, 0.5)])["judged"]
    True
    >>> judge_sensor_drift([mk(0.3, 0.1, 0.5), mk(0.2, 0.05, 0.4)])["judged"]
    False
    """
    ok = [c for c in checks if c is not None and c.rate_pct_per_yr is not None
          and c.ci_low is not None and c.ci_high is not None]
    if not ok:
        return {"judged": False, "drift_pct_per_yr": None, "n_checks": 0, "n_excluding_zero": 0,
                "onset_day": None, "n_with_onset": 0}
    med = float(np.median([c.rate_pct_per_yr for c in ok]))
    side = [c for c in ok if (c.ci_low > 0 if med > 0 else c.ci_high < 0)]
    judged = abs(med) >= min_drift_pct_per_yr and len(side) >= min_share * len(ok)
    out = {"judged": bool(judged), "drift_pct_per_yr": med, "whole_period_pct_per_yr": med,
           "n_checks": len(ok), "n_excluding_zero": len(side), "onset_day": None,
           "n_with_onset": 0}
    if not judged:
        return out
    # the onset: the checks' best onsets (drift_onset) agree within onset_spread_days, lie
    # at least min_onset_days after the ratio's first day and have a rate of the same sign
    fits = [(pd.Timestamp(c.details["onset_fit"]["onset_day"]),
             c.details["onset_fit"]["rate_pct_per_yr"], pd.Timestamp(c.details["first_ratio_day"]))
            for c in ok if isinstance(c.details, dict) and (c.details.get("onset_fit") or {}).get(
                "onset_day") and c.details["onset_fit"].get("rate_pct_per_yr") is not None]
    fits = [f for f in fits if (f[0] - f[2]).days >= min_onset_days and f[1] * med > 0]
    if len(fits) >= min_share * len(ok):
        days = np.array([f[0].value for f in fits])
        mid = float(np.median(days))
        near = [f for f in fits if abs(f[0].value - mid) <= onset_spread_days * 86400e9]
        if len(near) >= min_share * len(ok):
            out.update({"onset_day": pd.Timestamp(int(mid)).date().isoformat(),
                        "drift_pct_per_yr": float(np.median([f[1] for f in near])),
                        "n_with_onset": len(near)})
    return out


def _lbl(code: str) -> str:
    """A method's name in words (analytics.labels), for reasons and caveat texts: the code
    itself travels in the caveat's ``method`` and the row's ``chosen_method``."""
    from analytics.labels import METHOD_LABELS
    name = METHOD_LABELS.get(code, code)
    return f"'{name}'"


def _fallback_evidence(drift, shifts, loss, min_soiling_loss_pct: float,
                       soiling_cancels: bool) -> str:
    """Why the plain rate is recommended, in words that agree with the reasons before it.

    >>> _fallback_evidence(None, [], 0.5, 2.0, False)
    'no sensor drift, level shift or material soiling found'
    >>> _fallback_evidence({"judged": True}, [], 3.0, 2.0, True)
    'no level shift found; the soiling cancels in the year pairs; the rule for the evidence above gave no rate'
    """
    seen = {"sensor drift": bool(drift and drift.get("judged")), "level shift": bool(shifts),
            "material soiling": loss is not None and loss >= min_soiling_loss_pct}
    absent = [w for w, s in seen.items() if not s]
    parts = []
    if absent:
        words = absent[0] if len(absent) == 1 else ", ".join(absent[:-1]) + " or " + absent[-1]
        parts.append(f"no {words} found")
    if soiling_cancels:
        parts.append("the soiling cancels in the year pairs")
    if seen["sensor drift"] or seen["level shift"] or (seen["material soiling"]
                                                       and not soiling_cancels):
        parts.append("the rule for the evidence above gave no rate")
    return "; ".join(parts)


def recommend_rate(results: dict[str, RateResult], *, drift: dict | None = None,
                   shifts: list[dict] | None = None, soiling: dict | None = None,
                   sensor_id: str | None = None, low: float = -2.0, high: float = 0.5,
                   min_soiling_loss_pct: float = 2.0) -> RateResult:
    """The one rate to lead with, chosen by the evidence, with its reasons and caveats.

    Rules, in order (each names the evidence):

    1. the irradiance sensor is judged to drift (:func:`judge_sensor_drift`): the rate that
       does not use it, ``modelled_sky_year_pairs`` (clear-sky index, Jordan et al. 2018
       pairs), or ``modelled_sky_between_shifts`` when a level shift was found
       too; every sensor-based rate is shifted by about the drift;
    2. a persistent level shift was found (``shifts``: drops/rises from
       :func:`analytics.changepoint.detect_level_shifts`): the rate within the segments
       between shifts, ``sensor_year_pairs_between_shifts``; each shift is reported beside it
       (date, size, energy);
    3. soiling is material (``soiling["loss_pct"]`` ≥ ``min_soiling_loss_pct``, 2 %): the
       soiling-corrected rate ``sensor_year_pairs_unsoiled`` (soiling ratio after
       Deceglie et al. 2018), whose interval carries the correction's own uncertainty
       (draws of the soiling ratio in its bootstrap, ``correction_sd_pct_per_yr``): soiling
       that differs from year to year leaks into year-on-year pairs (on the synthetic arid
       fleets of tests/validation year pairs read up to 0.6 %/yr too pessimistic); on a
       clean fleet the correction finds spurious "soiling" below 1.2 % and is not used;
    4. otherwise the best-calibrated method on the validation fleets, ``sensor_year_pairs``
       (then ``sensor_monthly_robust_line`` if it was refused).

    A rule whose method was refused falls through to the next. Caveats (kinds of the results
    contract): ``sensor_drift``, ``level_shift``, ``soiling``, ``out_of_range`` (outside
    ``low``..``high`` %/yr, the band of published field rates, Jordan & Kurtz 2013),
    ``little_data`` (fewer than 3 years), ``methods_disagree`` (another absolute method's
    interval does not overlap the chosen one); each names the method it is about.

    Returns a :class:`RateResult` with ``method = "recommended"``, the chosen method's rate,
    interval, confidence and ``n_points``; ``details`` = ``{"chosen_method", "reasons",
    "caveats", "ci68_low", "ci68_high"}``.

    Examples
    --------
    >>> r = {YEAR_PAIRS: RateResult(YEAR_PAIRS, -0.5, -0.6, -0.4, 0.95, 700),
    ...      SKY_PAIRS: RateResult(SKY_PAIRS, -0.7, -0.9, -0.5, 0.95, 600)}
    >>> recommend_rate(r).details["chosen_method"]
    'sensor_year_pairs'
    >>> rec = recommend_rate(r, drift={"judged": True, "drift_pct_per_yr": 1.0})
    >>> rec.details["chosen_method"], rec.rate_pct_per_yr
    ('modelled_sky_year_pairs', -0.7)
    """
    shifts = [c for c in (shifts or []) if c.get("kind") in ("drop", "rise")]
    reasons: list[str] = []
    caveats: list[dict] = []

    def have(m):
        r = results.get(m)
        return r is not None and r.rate_pct_per_yr is not None

    chosen = None
    sensor = f"POA sensor {sensor_id}" if sensor_id else "the POA sensor"
    if drift and drift.get("judged"):
        d = drift.get("drift_pct_per_yr")
        # d is the rate of (sensor-based index / clear-sky index) ~ G_clearsky / G_sensor:
        # positive when the sensor reads lower year by year (sensor_clearsky_drift)
        since = f" since about {drift['onset_day']}" if drift.get("onset_day") else ""
        text = (f"{sensor} reads about {abs(d):.2f} % {'lower' if d > 0 else 'higher'} each "
                f"year{since} against the modelled clear sky ({_lbl(DRIFT_CHECK)}), so the "
                f"sensor-based rates ({_lbl(YEAR_PAIRS)} and the others) are shifted by up to "
                f"about {d:+.2f} %/yr: check the sensor's calibration")
        caveats.append({"kind": "sensor_drift", "method": YEAR_PAIRS, "text": text})
        if shifts and have(SKY_BETWEEN_SHIFTS):
            chosen = SKY_BETWEEN_SHIFTS
            reasons.append(f"{sensor} is judged to drift ({d:+.2f} %/yr) and a persistent level "
                           f"shift was found: the rate that does not use the sensor, between the "
                           f"shifts, {_lbl(SKY_BETWEEN_SHIFTS)}, is recommended")
        elif have(SKY_PAIRS):
            chosen = SKY_PAIRS
            reasons.append(f"{sensor} is judged to drift ({d:+.2f} %/yr): the rate that does not "
                           f"use it, {_lbl(SKY_PAIRS)}, is recommended")
        else:
            reasons.append(f"{sensor} is judged to drift but {_lbl(SKY_PAIRS)} was not computed "
                           f"({results.get(SKY_PAIRS).reason if results.get(SKY_PAIRS) else 'absent'}): "
                           "the sensor-based rate is shown, read it with the drift in mind")
    if shifts:
        txt = "; ".join(f"{c['day']}: {c['size_pct']:+.1f} %"
                        + (f", {c['energy_kwh']:+,.0f} kWh since" if c.get("energy_kwh") is not None
                           else "") for c in shifts)
        caveats.append({"kind": "level_shift", "method": YEAR_PAIRS,
                        "text": f"level shift(s) {txt}: a step is a failure or repair (string, "
                                f"module, inverter), not degradation; {_lbl(YEAR_PAIRS)} over the whole "
                                f"period mixes it in, {_lbl(BETWEEN_SHIFTS)} leaves it out. Inspection is "
                                "for qualified people (PV arrays are energised whenever lit)"})
        if chosen is None and have(BETWEEN_SHIFTS):
            chosen = BETWEEN_SHIFTS
            reasons.append(f"{len(shifts)} persistent level shift(s) found: the rate within the "
                           f"segments between them, {_lbl(BETWEEN_SHIFTS)}, is recommended")
    loss = None if not soiling else soiling.get("loss_pct")
    soiling_cancels = False
    if loss is not None and loss >= min_soiling_loss_pct:
        caveats.append({"kind": "soiling", "method": YEAR_PAIRS,
                        "text": f"soiling costs about {loss:.1f} % of the expected energy of the days the rate uses; soiling that differs "
                                f"from year to year leaks into {_lbl(YEAR_PAIRS)}; {_lbl(SOILING_CORRECTED)} "
                                "divides it out"})
        if chosen is None and have(SOILING_CORRECTED):
            chosen = SOILING_CORRECTED
            b = results[SOILING_CORRECTED]
            sd = b.details.get("correction_sd_pct_per_yr") if isinstance(b.details, dict) else None
            gap = (f"; it differs from {_lbl(YEAR_PAIRS)} by "
                   f"{b.rate_pct_per_yr - results[YEAR_PAIRS].rate_pct_per_yr:+.2f} %/yr"
                   if have(YEAR_PAIRS) else "")
            reasons.append(f"soiling is material ({loss:.1f} % energy loss): soiling that differs "
                           f"between years leaks into year pairs, so the soiling-corrected rate "
                           f"{_lbl(SOILING_CORRECTED)} is recommended{gap}; its interval carries "
                           "the soiling correction's own uncertainty"
                           + (f" (±{sd:.2f} %/yr, one standard deviation)" if sd is not None
                              else ""))
    if chosen is None:
        for m in (YEAR_PAIRS, ROBUST_LINE):
            if have(m):
                chosen = m
                reasons.append(f"{_fallback_evidence(drift, shifts, loss, min_soiling_loss_pct, soiling_cancels)}: "
                               f"{_lbl(m)}, the best-calibrated method on the validation "
                               "fleets, is recommended")
                break
    if chosen is None:
        why = "; ".join(f"{m}: {r.reason}" for m, r in results.items() if r is not None and r.reason)
        res = RateResult.refused("recommended", "no method gave a rate" + (f" ({why})" if why else ""))
        res.details = {"chosen_method": None, "reasons": reasons, "caveats": caveats,
                       "ci68_low": None, "ci68_high": None}
        return res
    r = results[chosen]
    if chosen in (SKY_PAIRS, SKY_BETWEEN_SHIFTS) and loss is not None \
            and loss >= min_soiling_loss_pct / 2:
        caveats.append({"kind": "soiling", "method": chosen,
                        "text": f"soiling costs about {loss:.1f} % of the expected energy of the days the rate uses; {_lbl(chosen)} "
                                "rests on clear days, mostly in the dry season when soiling is "
                                "highest, so soiling that differs from year to year does not cancel "
                                "in its pairs (on the demo site it reads the rate about 0.2 %/yr "
                                "too steep); read it as an upper bound of the loss"})
    if r.rate_pct_per_yr is not None and not low <= r.rate_pct_per_yr <= high:
        caveats.append({"kind": "out_of_range", "method": chosen,
                        "text": f"{_lbl(chosen)}: {r.rate_pct_per_yr:+.2f} %/yr is outside "
                                f"{low:+.1f}..{high:+.1f} %/yr, the range of published field rates "
                                "(Jordan & Kurtz 2013): review the data before using it"})
    span = r.details.get("span_years") if isinstance(r.details, dict) else None
    if span is not None and span < 3:
        caveats.append({"kind": "little_data", "method": chosen,
                        "text": f"{_lbl(chosen)} rests on {_years_below(span)} years of usable data; 3 or more are "
                                "recommended, seasonal effects may not average out"})
    if r.ci_low is not None:
        for m in (YEAR_PAIRS, ROBUST_LINE, SKY_PAIRS):
            o = results.get(m)
            if (m == chosen or o is None or o.ci_low is None or o.rate_pct_per_yr is None
                    or (m in SENSOR_BASED and drift and drift.get("judged"))):
                continue
            if o.ci_high < r.ci_low or r.ci_high < o.ci_low:
                caveats.append({"kind": "methods_disagree", "method": m,
                                "text": f"{_lbl(m)} ({o.rate_pct_per_yr:+.2f} %/yr) disagrees with "
                                        f"{_lbl(chosen)} ({r.rate_pct_per_yr:+.2f} %/yr): their intervals "
                                        "do not overlap"})
    lo68, hi68 = interval_68(r)
    out = RateResult(method="recommended", rate_pct_per_yr=r.rate_pct_per_yr, ci_low=r.ci_low,
                     ci_high=r.ci_high, confidence=r.confidence, n_points=r.n_points)
    out.details = {"chosen_method": chosen, "reasons": reasons, "caveats": caveats,
                   "ci68_low": lo68, "ci68_high": hi68}
    return out
