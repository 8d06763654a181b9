"""Degradation estimators (issue #7) against hand-checkable test vectors, statsmodels and
known-answer synthetic series (tests/degradation_synth.py, our own generator)."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
import scipy.stats
import statsmodels.api as sm
from numpy.testing import assert_allclose

from analytics.degradation import (
    DRIFT_WARNING,
    InsufficientDataError,
    RateResult,
    acf_block_length,
    block_bootstrap,
    compare_methods,
    degradation_rlm,
    degradation_stl,
    degradation_yoy,
    monthly_pi,
    peer_relative_pi,
    rlm_rate,
    usable_daily_pi,
    yoy_rates,
)
from tests.degradation_synth import daily_pi

pytestmark = pytest.mark.filterwarnings("ignore::UserWarning")


def _days(n, start="2020-01-01"):
    return pd.date_range(start, periods=n, freq="D")


# ---------------------------------------------------------------- year-on-year


def test_yoy_every_pair_is_minus_half_percent():
    # hand-checkable test vector: PI_t = (1-0.005)^(t/365) (1 + 0.02 sin(2πt/365)), 3 years ->
    # every pairwise r_d = -0.500 %/yr exactly (seasonal factor identical one year apart).
    t = np.arange(3 * 365)
    pi = pd.Series(0.995 ** (t / 365) * (1 + 0.02 * np.sin(2 * np.pi * t / 365)), _days(len(t)))
    r = yoy_rates(pi)
    assert len(r) == 2 * 365
    assert_allclose(r.to_numpy(), -0.5, atol=1e-10)
    res = degradation_yoy(pi)
    assert_allclose([res.rate_pct_per_yr, res.ci_low, res.ci_high], -0.5, atol=1e-10)
    assert res.n_points == 730


def test_yoy_seasonal_only_gives_zero():
    # hand-checkable test vector: PI_t = 1 + 0.02 sin(2πt/365) -> Rd = 0.
    t = np.arange(3 * 365)
    res = degradation_yoy(pd.Series(1 + 0.02 * np.sin(2 * np.pi * t / 365), _days(len(t))))
    assert_allclose(res.rate_pct_per_yr, 0.0, atol=1e-12)


def test_yoy_year0_reference_differs_second_order_only():
    # Jordan et al. 2018: pairwise vs year-0 reference differ at second order:
    # -0.5 %/yr vs -0.5 * 0.995^k: hand value for the 2nd year's pairs -0.4975.
    t = np.arange(3 * 365)
    pi = pd.Series(0.995 ** (t / 365), _days(len(t)))
    r0 = yoy_rates(pi, reference="year0")
    assert_allclose(r0.iloc[0], -0.5 * 0.995 ** 0 / np.median(0.995 ** (t[:365] / 365)), rtol=1e-9)
    assert abs(float(r0.median()) + 0.5) < 0.01


def test_yoy_recovers_rate_with_noise_outliers_gaps():
    # known answer of our generator: -0.5 %/yr, 2 % season, 1 % noise, 5 % outliers, 20 % gaps
    pi = daily_pi(rd_pct_per_yr=-0.5, noise=0.01, ar1=0.5, outlier_fraction=0.05,
                  gap_fraction=0.2, seed=42)
    res = degradation_yoy(pi.dropna())
    assert abs(res.rate_pct_per_yr + 0.5) < 0.1
    assert res.ci_low < -0.5 < res.ci_high
    hist = res.details["pair_rate_distribution"]
    assert sum(hist["counts"]) == res.n_points
    assert len(hist["edges_pct_per_yr"]) == len(hist["counts"]) + 1


def test_yoy_interval_coverage_over_seeds():
    # Moving-block bootstrap (Künsch 1989): with AR(1) noise (φ = 0.6) the nominal 95 %
    # interval must cover the true rate in about 95 % of series; assert >= 90 % (issue #7).
    covered, n = 0, 120
    for seed in range(n):
        pi = daily_pi(years=3, rd_pct_per_yr=-0.7, noise=0.01, ar1=0.6, seed=1000 + seed)
        res = degradation_yoy(pi, n_resamples=500, rng=seed)
        covered += res.ci_low <= -0.7 <= res.ci_high
    assert covered / n >= 0.90


def test_bootstrap_reproducible_with_seed():
    pi = daily_pi(years=3, noise=0.01, ar1=0.5, seed=3)
    a = degradation_yoy(pi, rng=123)
    b = degradation_yoy(pi, rng=np.random.default_rng(123))
    c = degradation_yoy(pi, rng=124)
    assert (a.ci_low, a.ci_high) == (b.ci_low, b.ci_high)
    assert (a.ci_low, a.ci_high) != (c.ci_low, c.ci_high)


def test_block_bootstrap_median_path_equals_generic():
    # the rank-based median path must equal np.median on the same resamples (exactness)
    x = np.random.default_rng(5).normal(size=501)
    fast, _ = block_bootstrap(x, np.median, n_resamples=50, block_length=7, rng=9)
    slow, _ = block_bootstrap(x, lambda a, axis: np.median(a, axis=axis), n_resamples=50,
                              block_length=7, rng=9)
    assert_allclose(fast, slow, rtol=0, atol=0)
    x2 = x[:500]  # even length: mean of the two middle values
    f2, _ = block_bootstrap(x2, np.median, n_resamples=50, block_length=7, rng=9)
    s2, _ = block_bootstrap(x2, lambda a, axis: np.median(a, axis=axis), n_resamples=50,
                            block_length=7, rng=9)
    assert_allclose(f2, s2, rtol=0, atol=0)


def test_acf_block_length_ar1():
    # AR(1) with φ = 0.8 has ACF φ^k, below 0.2 first at k = ceil(ln 0.2 / ln 0.8) = 8
    # (hand calculation: 7.21 -> 8); a sampled series lands near it.
    rng = np.random.default_rng(0)
    e = rng.normal(size=20000)
    x = np.empty_like(e)
    x[0] = e[0]
    for i in range(1, len(e)):
        x[i] = 0.8 * x[i - 1] + e[i]
    assert 7 <= acf_block_length(x) <= 9
    assert acf_block_length(rng.normal(size=5000)) == 1  # white noise: lag 1 already < 0.2


def test_minimum_data_refused_and_warned():
    with pytest.raises(InsufficientDataError, match="at least 2 years"):
        degradation_yoy(daily_pi(years=1.5, seed=1))
    with pytest.warns(UserWarning, match="3 or more are recommended"):
        res = degradation_yoy(daily_pi(years=2.5, seed=1))
    assert any("recommended" in w for w in res.warnings)
    with pytest.raises(InsufficientDataError, match="at least 2 years"):
        degradation_rlm(daily_pi(years=1.0, seed=1))


def test_too_few_pairs_refused():
    pi = daily_pi(years=3, seed=2)
    sparse = pi.iloc[::10]  # a day every 10 days: pairs 365 days apart never coincide
    with pytest.raises(InsufficientDataError, match="pairs"):
        degradation_yoy(sparse)


def test_invalid_input():
    with pytest.raises(ValueError, match="confidence"):
        degradation_yoy(daily_pi(years=3), confidence=1.5)
    with pytest.raises(ValueError, match="Series"):
        degradation_yoy(np.ones(1000))
    assert yoy_rates(pd.Series([], dtype=float, index=pd.DatetimeIndex([]))).empty


def test_usable_daily_pi_counts_and_stabilisation():
    pi = daily_pi(years=3, seed=4)
    valid = pd.Series(True, pi.index)
    valid.iloc[:10] = False
    pi.iloc[20] = 2.0  # implausible (IEC 61724-1 filtering practice: 0.3 <= PI <= 1.3)
    s, rep = usable_daily_pi(pi, valid, commissioned=pi.index[0].date(), stabilisation_days=180)
    assert rep["n_days_input"] == len(pi)
    assert rep["n_days_valid"] == len(pi) - 10
    assert rep["n_days_after_stabilisation"] == len(pi) - 180
    assert s.index[0] == pi.index[180]
    assert rep["n_days_used"] == len(s)


# ---------------------------------------------------------------- regression


def test_rlm_noise_free_monthly():
    # hand-checkable test vector: y = 1 - 0.005 t + 0.02 sin(2πt), 60 months -> Rd = -0.5000 %/yr
    t = np.arange(60) / 12
    res = rlm_rate(t, 1 - 0.005 * t + 0.02 * np.sin(2 * np.pi * t))
    assert_allclose(res.rate_pct_per_yr, -0.5, atol=5e-5)


def test_rlm_beats_ols_with_outliers():
    # Lindig et al. 2018: add N(0, 0.003) noise (default_rng(0)) and lower three points by 0.15 (here
    # the first three months): assert |Rd_RLM + 0.5| < 0.1 and RLM closer to -0.5 than OLS.
    t = np.arange(60) / 12
    y = 1 - 0.005 * t + 0.02 * np.sin(2 * np.pi * t) + np.random.default_rng(0).normal(0, 0.003, 60)
    y[:3] -= 0.15
    rlm = rlm_rate(t, y).rate_pct_per_yr
    X = np.column_stack([np.ones_like(t), t, np.sin(2 * np.pi * t), np.cos(2 * np.pi * t)])
    ols = sm.OLS(y, X).fit().params
    ols_rd = 100 * ols[1] / ols[0]
    assert abs(rlm + 0.5) < 0.1
    assert abs(rlm + 0.5) < abs(ols_rd + 0.5)


def test_rlm_rate_matches_statsmodels_rlm():
    # Reference: statsmodels RLM with Huber's T (t = 1.345) and the MAD scale, fitted to the
    # same design [1, t] (statsmodels docs, "Robust Linear Models"). heliaudit's rlm_rate must
    # give the same coefficients, the rate 100·b1/b0 and, with hac=False, the interval
    # rate ± t(0.975, n-2)·se from the delta method on statsmodels' own H1 covariance.
    rng = np.random.default_rng(3)
    t = np.arange(48) / 12
    y = 0.95 - 0.006 * t + rng.normal(0, 0.004, 48)
    y[[5, 30]] -= 0.08  # two outliers that the Huber norm down-weights
    ours = rlm_rate(t, y, harmonics=0, hac=False)
    X = np.column_stack([np.ones_like(t), t])
    ref = sm.RLM(y, X, M=sm.robust.norms.HuberT(t=1.345)).fit(scale_est="mad", cov="H1")
    b0, b1 = ref.params
    assert_allclose(ours.details["params"], ref.params, rtol=1e-6)
    assert_allclose(ours.rate_pct_per_yr, 100 * b1 / b0, rtol=1e-6)
    cov = ref.cov_params()
    g = np.array([-100 * b1 / b0 ** 2, 100 / b0])
    se = float(np.sqrt(g @ cov @ g))
    q = scipy.stats.t.ppf(0.975, 46)
    assert_allclose([ours.ci_low, ours.ci_high], [100 * b1 / b0 - q * se, 100 * b1 / b0 + q * se],
                    rtol=1e-5)


def test_rlm_hac_wider_than_independent_for_correlated_residuals():
    # Newey & West 1987: positively autocorrelated residuals make the i.i.d. covariance too
    # small; on average over series the HAC interval must be wider. Monthly AR(1), φ = 0.8.
    rng = np.random.default_rng(8)
    t = np.arange(120) / 12
    w_hac, w_iid = [], []
    for _ in range(30):
        e = np.zeros(120)
        for i in range(1, 120):
            e[i] = 0.8 * e[i - 1] + rng.normal(0, 0.003)
        y = 1 - 0.005 * t + 0.02 * np.sin(2 * np.pi * t) + e
        hac, iid = rlm_rate(t, y, hac=True), rlm_rate(t, y, hac=False)
        assert hac.rate_pct_per_yr == iid.rate_pct_per_yr  # same point estimate
        w_hac.append(hac.ci_high - hac.ci_low)
        w_iid.append(iid.ci_high - iid.ci_low)
    assert np.mean(w_hac) > 1.3 * np.mean(w_iid)


def test_monthly_pi_is_ratio_of_sums():
    # Σ w PI / Σ w = Σ E_meas / Σ E_exp (IEC 61724-1 filtering practice): E_exp = [1, 3], PI = [1.0, 0.8]
    # -> (1 + 2.4)/4 = 0.85, not the mean 0.9.
    d = _days(12)
    pi = pd.Series([1.0, 0.8] * 6, d)
    w = pd.Series([1.0, 3.0] * 6, d)
    assert_allclose(monthly_pi(pi, w, min_days=10).iloc[0], 0.85)
    assert np.isnan(monthly_pi(pi, w, min_days=13).iloc[0])


@pytest.mark.parametrize("fn,tol", [(degradation_rlm, 0.1), (degradation_stl, 0.15)])
def test_regressions_recover_rate(fn, tol):
    pi = daily_pi(years=5, rd_pct_per_yr=-0.8, noise=0.01, ar1=0.5, outlier_fraction=0.03,
                  gap_fraction=0.15, seed=11)
    res = fn(pi.dropna())
    assert abs(res.rate_pct_per_yr + 0.8) < tol
    assert res.ci_low < res.rate_pct_per_yr < res.ci_high


def test_rlm_daily_aggregate():
    pi = daily_pi(years=4, rd_pct_per_yr=-0.5, noise=0.01, seed=12)
    res = degradation_rlm(pi, aggregate="daily")
    assert abs(res.rate_pct_per_yr + 0.5) < 0.1
    assert res.n_points == len(pi)


def test_stl_refuses_sparse_months():
    pi = daily_pi(years=3, seed=13)
    pi[(pi.index.month % 2) == 0] = np.nan  # every other month empty: 50 % missing
    with pytest.raises(InsufficientDataError, match="months"):
        degradation_stl(pi.dropna())


# ---------------------------------------------------------------- peers and verdict


def test_peer_relative_rate_is_relative_to_fleet():
    # Inverter rates -0.5 (x5) and -1.0 with a common +1 %/yr factor (e.g. sensor drift) in
    # every PI: the peer ratio of the last drifts at (1-0.01)/(1-0.005) - 1 = -0.5025 %/yr
    # (hand calculation), independent of the common factor; the others' ratios at ≈ 0.
    rates = [-0.5, -0.5, -0.5, -0.5, -0.5, -1.0]
    frame = pd.DataFrame({f"I{i}": daily_pi(years=5, rd_pct_per_yr=r, noise=0.005, seed=i)
                          for i, r in enumerate(rates)})
    common = 1.01 ** (np.arange(len(frame)) / 365)
    ratio = peer_relative_pi(frame.mul(common, axis=0))
    # the common factor cancels exactly
    assert_allclose(ratio.to_numpy(), peer_relative_pi(frame).to_numpy(), rtol=1e-12)
    res = degradation_yoy(ratio["I5"].dropna())
    assert abs(res.rate_pct_per_yr + 0.5025) < 0.08
    res0 = degradation_yoy(ratio["I0"].dropna())
    assert abs(res0.rate_pct_per_yr) < 0.08


def test_peer_relative_min_peers():
    f = pd.DataFrame({"a": [1.0, 1.0], "b": [1.0, np.nan], "c": [1.0, np.nan]})
    out = peer_relative_pi(f, min_peers=2)
    assert_allclose(out.iloc[0].to_numpy(), 1.0)
    assert out.iloc[1].isna().all()


def _r(m, rd, lo, hi):
    return RateResult(method=m, rate_pct_per_yr=rd, ci_low=lo, ci_high=hi, confidence=0.95)


def test_compare_methods_verdicts():
    ok = compare_methods({"sensor_year_pairs": _r("sensor_year_pairs", -0.5, -0.6, -0.4), "sensor_monthly_robust_line": _r("sensor_monthly_robust_line", -0.55, -0.7, -0.45),
                          "modelled_sky_year_pairs": _r("modelled_sky_year_pairs", -0.45, -0.6, -0.3)})
    assert ok["agree"] is True and ok["warnings"] == []
    bad = compare_methods({"sensor_year_pairs": _r("sensor_year_pairs", -1.5, -1.6, -1.4),
                           "modelled_sky_year_pairs": _r("modelled_sky_year_pairs", -0.5, -0.6, -0.4),
                           "peer_ratio_year_pairs": _r("peer_ratio_year_pairs", 0.0, -0.1, 0.1)})
    assert bad["agree"] is False
    assert DRIFT_WARNING in bad["warnings"]
    assert "peer_ratio_year_pairs" not in bad["compared"]
    one = compare_methods({"sensor_year_pairs": _r("sensor_year_pairs", -0.5, -0.6, -0.4),
                           "sensor_monthly_trend_line": RateResult.refused("sensor_monthly_trend_line", "too few months")})
    assert one["agree"] is None


def test_sanity_band_warning():
    # Jordan et al. 2018: flag Rd < -2 %/yr for review (common practice; Jordan & Kurtz 2013)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = degradation_yoy(daily_pi(years=3, rd_pct_per_yr=-3.0, seed=5))
    assert any("outside" in w for w in res.warnings)


def test_deseasonalised_monthly_removes_annual_cycle():
    # noise-free PI = 0.995^(t/365) (1 + 0.03 sin(2πt/365)): after dividing by the fitted
    # annual cycle each month must sit on the trend 0.995^(t/365) within 0.15 % (the monthly
    # mean of a multiplicative cycle is not exactly removable by an additive harmonic fit).
    from analytics.degradation import deseasonalised_monthly
    pi = daily_pi(years=4, noise=0.0, season=0.03, rd_pct_per_yr=-0.5)
    d = deseasonalised_monthly(pi)
    t_mid = ((d.index + pd.Timedelta(days=14.5)) - pi.index[0]).days.to_numpy()
    assert_allclose(d.to_numpy(), 0.995 ** (t_mid / 365), rtol=1.5e-3)
    with pytest.raises(InsufficientDataError):
        deseasonalised_monthly(pi.iloc[:150])


def test_stl_interval_not_narrower_than_model_a():
    pi = daily_pi(years=3, rd_pct_per_yr=-0.6, noise=0.01, ar1=0.7, seed=21)
    stl, rlm = degradation_stl(pi), degradation_rlm(pi)
    assert stl.ci_high - stl.ci_low >= (rlm.ci_high - rlm.ci_low) * 0.999


def test_stable_segments_drop_seasonally_unbalanced_segment():
    # issue #7 (demo INV-05): a 6 % drop 455 days after the start leaves only ~90 days of
    # pairs before it, all in one season. Here that season (days 365-455, the later day of
    # those pairs) carries an extra 4 % loss, as a dirtier summer would: the median of those
    # pairs is about -0.9 - 4 = -4.9 %/yr. Segments whose pairs cover fewer than 9 calendar
    # months are left out, so the within-segment rate is the -0.9 %/yr put in (pairwise
    # r_d = 100 (PI_{d+365}/PI_d - 1) = -0.9 exactly for the noise-free part, Jordan et al. 2018).
    pi = daily_pi(years=4, rd_pct_per_yr=-0.9, season=0.02, noise=0.003, step_day=455,
                  step=-0.06, seed=5)
    pi.iloc[365:455] *= 0.96
    brk = pi.index[455]
    res = degradation_yoy(pi, breaks=[brk], n_resamples=300)
    seg = [s for s in res.details["segments"] if "segment" in s]
    assert [s["used"] for s in seg] == [False, True]
    assert seg[0]["n_months_covered"] <= 4 and seg[0]["median_pct_per_yr"] < -4.0
    assert abs(res.rate_pct_per_yr + 0.9) < 0.1
    assert res.ci_low < res.rate_pct_per_yr < res.ci_high


# ---------------------------------------------------------------- recommended rate (#13)


def _r(method, rate, lo, hi, **det):
    from analytics.degradation import RateResult
    return RateResult(method, rate, lo, hi, 0.95, 500, details=det)


def test_interval_68_normal_reading_matches_scipy():
    # A 95 % interval of half-width h read as normal: σ = h / z(0.975); the 68.27 % interval
    # is ±z(0.84135)·σ = ±1.0·σ (scipy.stats.norm.ppf).
    from analytics.degradation import interval_68
    h = 0.3
    sigma = h / scipy.stats.norm.ppf(0.975)
    lo, hi = interval_68(_r("sensor_monthly_robust_line", -0.5, -0.5 - h, -0.5 + h))
    assert_allclose([lo, hi], [-0.5 - sigma * scipy.stats.norm.ppf(0.841345),
                               -0.5 + sigma * scipy.stats.norm.ppf(0.841345)], rtol=1e-4)
    # a bootstrap's own 68 % interval is used as is
    assert interval_68(_r("sensor_year_pairs", -0.5, -0.8, -0.2, ci_68=[-0.6, -0.4])) == (-0.6, -0.4)


def test_judge_sensor_drift_needs_size_and_agreement():
    # rule (issue #13): |median drift| >= 0.35 %/yr and at least half of the checks exclude 0
    from analytics.degradation import judge_sensor_drift
    big = [_r("sensor_drift_check", 1.0, 0.6, 1.4), _r("sensor_drift_check", 0.9, 0.4, 1.3),
           _r("sensor_drift_check", 0.3, -0.2, 0.8)]
    j = judge_sensor_drift(big)
    assert j["judged"] and j["drift_pct_per_yr"] == 0.9 and j["n_excluding_zero"] == 2
    # small drifts with tight intervals (a drift-free sensor against a clear-sky model with a
    # slight trend) are not judged: the size rule keeps the false alarms down
    small = [_r("sensor_drift_check", 0.25, 0.1, 0.4)] * 4
    assert not judge_sensor_drift(small)["judged"]
    # a large median whose intervals all include 0 is not judged either
    wide = [_r("sensor_drift_check", 0.8, -0.5, 2.0)] * 3
    assert not judge_sensor_drift(wide)["judged"]
    assert judge_sensor_drift([None])["n_checks"] == 0


def test_recommended_rules_in_order():
    from analytics.degradation import recommend_rate
    res = {"sensor_year_pairs": _r("sensor_year_pairs", -0.45, -0.55, -0.35, ci_68=[-0.5, -0.4]),
           "sensor_monthly_robust_line": _r("sensor_monthly_robust_line", -0.47, -0.6, -0.34),
           "modelled_sky_year_pairs": _r("modelled_sky_year_pairs", -1.1, -1.4, -0.8),
           "sensor_year_pairs_between_shifts": _r("sensor_year_pairs_between_shifts", -0.6, -0.8, -0.4),
           "sensor_year_pairs_unsoiled": _r("sensor_year_pairs_unsoiled", -0.5, -0.6, -0.4)}
    plain = recommend_rate(res)
    assert plain.details["chosen_method"] == "sensor_year_pairs"
    assert (plain.rate_pct_per_yr, plain.ci_low, plain.ci_high) == (-0.45, -0.55, -0.35)
    assert (plain.details["ci68_low"], plain.details["ci68_high"]) == (-0.5, -0.4)
    # the clear-sky rate disagrees (intervals apart): said, naming the method
    kinds = {(c["kind"], c["method"]) for c in plain.details["caveats"]}
    assert ("methods_disagree", "modelled_sky_year_pairs") in kinds
    # drift judged -> the sensor-independent rate, and no "disagree" caveat about it
    d = recommend_rate(res, drift={"judged": True, "drift_pct_per_yr": 0.7}, sensor_id="POA1")
    assert d.details["chosen_method"] == "modelled_sky_year_pairs" and d.rate_pct_per_yr == -1.1
    assert d.details["caveats"][0]["kind"] == "sensor_drift" and "POA1" in d.details["caveats"][0]["text"]
    # drift and a step -> the clear-sky rate between the shifts
    both = recommend_rate(dict(res, modelled_sky_between_shifts=_r(
        "modelled_sky_between_shifts", -0.8, -1.1, -0.5)),
        drift={"judged": True, "drift_pct_per_yr": 1.2},
        shifts=[{"day": "2023-05-02", "kind": "drop", "size_pct": -8.0}])
    assert both.details["chosen_method"] == "modelled_sky_between_shifts"
    assert {c["kind"] for c in both.details["caveats"]} >= {"sensor_drift", "level_shift"}
    # a persistent step -> the rate between shifts, the shift beside it with date, size, energy
    shift = [{"day": "2023-05-02", "kind": "drop", "size_pct": -4.1, "energy_kwh": -12345.0}]
    s = recommend_rate(res, shifts=shift)
    assert s.details["chosen_method"] == "sensor_year_pairs_between_shifts"
    cav = next(c for c in s.details["caveats"] if c["kind"] == "level_shift")
    assert "2023-05-02" in cav["text"] and "-4.1 %" in cav["text"] and "-12,345 kWh" in cav["text"]
    # recoveries (cleanings) are not shifts
    assert recommend_rate(res, shifts=[dict(shift[0], kind="recovery")]).details[
        "chosen_method"] == "sensor_year_pairs"
    # material soiling (>= 2 %) -> the soiling-corrected rate, whether or not it moved the
    # rate (its interval carries the correction's uncertainty); soiling below 2 % does not
    # switch
    moved = dict(res, sensor_year_pairs_unsoiled=_r(
        "sensor_year_pairs_unsoiled", -0.2, -0.3, -0.1))
    assert recommend_rate(moved, soiling={"loss_pct": 3.2}).details["chosen_method"] == \
        "sensor_year_pairs_unsoiled"
    same = recommend_rate(res, soiling={"loss_pct": 3.2})
    assert same.details["chosen_method"] == "sensor_year_pairs_unsoiled"
    assert any(c["kind"] == "soiling" for c in same.details["caveats"])
    assert "material soiling found" not in " ".join(same.details["reasons"])
    assert recommend_rate(moved, soiling={"loss_pct": 1.5}).details["chosen_method"] == \
        "sensor_year_pairs"
    # material soiling whose corrected rate was refused: the plain rate, and the reason says
    # the soiling rule gave no rate (not "no material soiling found")
    from analytics.degradation import RateResult as _RR
    ref = recommend_rate(dict(res, sensor_year_pairs_unsoiled=_RR.refused(
        "sensor_year_pairs_unsoiled", "x")), soiling={"loss_pct": 3.2})
    assert ref.details["chosen_method"] == "sensor_year_pairs"
    assert "gave no rate" in ref.details["reasons"][-1]
    assert "material soiling" not in ref.details["reasons"][-1]
    # a rule whose method was refused falls through
    from analytics.degradation import RateResult
    no_sky = dict(res, modelled_sky_year_pairs=RateResult.refused("modelled_sky_year_pairs", "x"))
    f = recommend_rate(no_sky, drift={"judged": True, "drift_pct_per_yr": 0.7})
    assert f.details["chosen_method"] == "sensor_year_pairs"
    assert any(c["kind"] == "sensor_drift" for c in f.details["caveats"])
    assert "no sensor drift" not in " ".join(f.details["reasons"])
    # every caveat names a method (issue #13)
    for r in (plain, d, s, f):
        assert all(c["method"] for c in r.details["caveats"])


def test_recommended_out_of_range_and_refused():
    # Jordan & Kurtz 2013: field rates outside -2..+0.5 %/yr are for review
    from analytics.degradation import RateResult, recommend_rate
    r = recommend_rate({"sensor_year_pairs": _r("sensor_year_pairs", 0.9, 0.5, 1.3)})
    assert any(c["kind"] == "out_of_range" for c in r.details["caveats"])
    none = recommend_rate({"sensor_year_pairs": RateResult.refused("sensor_year_pairs", "short")})
    assert none.rate_pct_per_yr is None and "short" in none.reason


# ---------------------------------------------------------------- issue #13: reference, onset, years


def test_start_reference_recovers_a_linear_loss_of_the_initial_level():
    # A linear warranty states the loss in % of the initial power per year: P(t) = P0 (1 + R t)
    # (common practice; the validation generator and the demo define their truth the same way).
    # Pairwise rates (Jordan et al. 2018) read it as R / (1 + R t), too steep by about R^2 t;
    # the 'start' reference gives R back.
    days = _days(4 * 365)
    t = np.arange(len(days)) / 365.25
    pi = pd.Series(1 - 0.012 * t, days)
    pair = degradation_yoy(pi, reference="pairwise", n_resamples=200).rate_pct_per_yr
    start = degradation_yoy(pi, reference="start", n_resamples=200).rate_pct_per_yr
    t_mid = (len(days) - 365) / 2 / 365.25          # the median pair starts mid-way
    assert pair == pytest.approx(-1.2 / (1 - 0.012 * t_mid), abs=2e-3)
    assert start == pytest.approx(-1.2, abs=2e-3)


def test_start_reference_with_a_level_shift_keeps_the_rate():
    # the step (6 % of the level) cancels in r (1 + R t): pairs across it are dropped and the
    # rate within the segments is the injected linear rate
    days = _days(4 * 365)
    t = np.arange(len(days)) / 365.25
    step = np.where(days >= pd.Timestamp("2021-09-01"), 0.94, 1.0)
    pi = pd.Series((1 - 0.009 * t) * step, days)
    res = degradation_yoy(pi, reference="start", breaks=["2021-09-01"], n_resamples=200)
    assert res.rate_pct_per_yr == pytest.approx(-0.9, abs=3e-3)


def test_drift_onset_finds_a_late_drift_and_its_rate():
    # a sensor that starts to read 1 %/yr low on 2022-07-01 (the demo's kind of fault), with
    # day-to-day noise of 1 % (seeded): the onset within six weeks and the rate since then
    # within 0.25 %/yr (its interval is conditional on the onset, so it is not tested for
    # coverage here); the whole-period year-pair median reads it at about half
    from analytics.degradation import drift_onset
    days = _days(3 * 365, "2021-01-01")
    t = (days - days[0]).days.to_numpy() / 365.25
    onset_yr = (pd.Timestamp("2022-07-01") - days[0]).days / 365.25
    rng = np.random.default_rng(5)
    q = pd.Series(np.exp(0.01 * np.clip(t - onset_yr, 0, None)
                         + 0.01 * rng.standard_normal(len(t))), days)
    out = drift_onset(q)
    assert out["accepted"]
    assert abs((pd.Timestamp(out["onset_day"]) - pd.Timestamp("2022-07-01")).days) <= 42
    assert out["rate_pct_per_yr"] == pytest.approx(1.0, abs=0.25)
    assert out["ci"][0] < out["rate_pct_per_yr"] < out["ci"][1]
    whole = yoy_rates(q).median()
    assert 0.2 < whole < 0.7


def test_drift_onset_steady_drift_has_no_onset():
    # a drift from the first day is not given an onset (Schwarz criterion, penalty 2)
    from analytics.degradation import drift_onset
    days = _days(3 * 365, "2021-01-01")
    t = (days - days[0]).days.to_numpy() / 365.25
    rng = np.random.default_rng(6)
    q = pd.Series(np.exp(0.01 * t + 0.01 * rng.standard_normal(len(t))), days)
    out = drift_onset(q)
    assert not out["accepted"] and out["onset_day"] is None
    assert out["rate_pct_per_yr"] == pytest.approx(1.0, abs=0.15)


def test_judge_sensor_drift_reports_onset_only_when_checks_agree():
    from analytics.degradation import judge_sensor_drift

    def chk(rate, lo, hi, onset, k):
        r = _r("sensor_drift_check", rate, lo, hi)
        r.details = {"onset_fit": {"onset_day": onset, "rate_pct_per_yr": k},
                     "first_ratio_day": "2022-01-01"}
        return r
    agree = [chk(0.4, 0.1, 0.8, d, k) for d, k in
             (("2023-05-01", 0.6), ("2023-05-15", 0.7), ("2023-04-20", 0.65))]
    j = judge_sensor_drift(agree)
    assert j["judged"] and j["onset_day"] == "2023-05-01"
    assert j["drift_pct_per_yr"] == 0.65 and j["whole_period_pct_per_yr"] == 0.4
    scatter = [chk(0.4, 0.1, 0.8, d, 0.6) for d in ("2022-11-01", "2023-06-01", "2024-03-01")]
    j = judge_sensor_drift(scatter)
    assert j["judged"] and j["onset_day"] is None and j["drift_pct_per_yr"] == 0.4
    # an onset in the first 270 days is a drift all along
    early = [chk(0.4, 0.1, 0.8, "2022-03-01", 0.5)] * 3
    assert judge_sensor_drift(early)["onset_day"] is None


def test_year_component_matches_monte_carlo_spread():
    # Monte Carlo (400 seeded fleets): every year's level carries an error a_y ~ N(0, 0.1 %)
    # shared by all its days, on top of 1 % day-to-day noise. The spread of the year-pair
    # median around the truth must match the bootstrap variance plus year_component's
    # variance on average (method of moments, one-way random effects, Searle et al. 1992):
    # the mean ratio of estimated to empirical variance within 0.6 .. 1.6.
    from analytics.degradation import year_component
    rng = np.random.default_rng(11)
    days = _days(4 * 365)
    t = np.arange(len(days)) / 365.25
    year = np.arange(len(days)) // 365
    errs, est = [], []
    for _ in range(400):
        a = 0.001 * rng.standard_normal(5)
        pi = pd.Series((1 - 0.006 * t) * (1 + a[year]) * (1 + 0.01 * rng.standard_normal(len(t))),
                       days)
        r = yoy_rates(pi)
        m = float(np.median(r))
        v_day = np.pi / 2 * float(np.var(r)) / len(r)     # variance of a median, iid pairs
        yc = year_component(r, v_day)
        errs.append(m - (-0.6 / (1 - 0.006 * 1.5)))
        est.append(v_day + yc["sd_pct_per_yr"] ** 2)
    ratio = float(np.mean(est)) / float(np.var(errs))
    assert 0.6 < ratio < 1.6, ratio


def test_pi_draws_add_the_correction_uncertainty_in_quadrature():
    # Each draw multiplies the index by (1 + c_k t), c_k ~ N(0, 0.002/yr): a correction whose
    # uncertainty is a trend of 0.2 %/yr (one standard deviation). Propagating the draws by
    # Monte Carlo (JCGM 101:2008) must give that spread on the rate, and independent errors
    # add in quadrature (JCGM 100:2008, law of propagation of uncertainty): the 95 % half-width
    # with the draws ≈ 1.96 · √(se_boot² + 0.2²), within 10 %.
    pi = daily_pi(years=4, noise=0.01, seed=3)
    t = ((pi.index - pi.index[0]).days / 365.25).to_numpy()
    c = np.random.default_rng(5).normal(0.0, 0.002, 2000)
    draws = pi.to_numpy()[None, :] * (1 + c[:, None] * t[None, :])
    plain = degradation_yoy(pi, reference="start", n_resamples=2000, rng=1)
    both = degradation_yoy(pi, reference="start", n_resamples=2000, rng=1, pi_draws=draws)
    assert both.rate_pct_per_yr == plain.rate_pct_per_yr  # the point is unchanged
    assert 0.18 < both.details["correction_sd_pct_per_yr"] < 0.22
    se_boot = (plain.ci_high - plain.ci_low) / (2 * 1.96)
    expect = 1.96 * np.hypot(se_boot, 0.2)
    half = (both.ci_high - both.ci_low) / 2
    assert abs(half / expect - 1) < 0.10, (half, expect)
    # the draws must match the index day by day
    with pytest.raises(ValueError, match="pi_draws"):
        degradation_yoy(pi, pi_draws=draws[:, :-1])


def test_short_record_interval_carries_the_assumed_between_year_error():
    # Two years: one year of pairs, so the year pairs' median is about a_2 - a_1, whose
    # variance is 2 σ_a² for independent yearly errors (variance of a difference of two
    # independent variables). No data can measure σ_a then; with an assumed σ_a = 0.1 % the
    # interval must widen to about 1.96 · √(se_boot² + 2 · 0.1²), within 10 %.
    pi = daily_pi(years=2.2, noise=0.01, seed=4)
    plain = degradation_yoy(pi, n_resamples=2000, rng=2)
    assumed = degradation_yoy(pi, n_resamples=2000, rng=2, min_year_sd_pct_per_yr=0.1)
    yc = assumed.details["year_component"]
    assert yc["assumed"] and yc["added_to_interval"] and yc["n_years"] < 2
    assert abs(yc["sd_pct_per_yr"] - np.sqrt(2) * 0.1) < 0.01
    se = (plain.ci_high - plain.ci_low) / (2 * 1.96)
    half = (assumed.ci_high - assumed.ci_low) / 2
    assert abs(half / (1.96 * np.hypot(se, np.sqrt(2) * 0.1)) - 1) < 0.10
    # with two or more year groups the component is measured, not assumed
    long = degradation_yoy(daily_pi(years=4, noise=0.01, seed=4), n_resamples=200,
                           min_year_sd_pct_per_yr=0.1)
    assert not long.details["year_component"].get("assumed", False)
