"""Fleet outliers: robust z, peer ratio, persistence rule, underperformance flags."""

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import stats

from analytics.outliers import (
    FIELD_CAUTION,
    peer_ratio,
    persistent_low_events,
    robust_z,
    underperformance_flags,
)


def test_robust_z_methods_vector():
    # Iglewicz & Hoaglin 1993 / NIST e-Handbook robust z: [1, 2, 3, 4, 100] -> median 3, scaled MAD 1.4826,
    # |z| = [1.349, 0.674, 0, 0.674, 65.43]; only 100 beyond 3.5 (Iglewicz & Hoaglin 1993).
    z = robust_z([1, 2, 3, 4, 100])
    assert_allclose(np.abs(z), [1.349, 0.674, 0.0, 0.674, 65.43], atol=5e-3)  # 3-4 digits
    assert list(np.abs(z) > 3.5) == [False, False, False, False, True]


def test_robust_z_matches_scipy_scaled_mad():
    # Oracle: scipy.stats.median_abs_deviation(scale='normal') (SciPy docs).
    x = np.random.default_rng(42).normal(10, 2, 200)
    expect = (x - np.median(x)) / stats.median_abs_deviation(x, scale="normal")
    assert_allclose(robust_z(x), expect, rtol=1e-12)


def test_robust_z_mad_zero_fallback_and_types():
    # More than half identical -> MAD = 0; fallback 1.253314 * mean|x - median| (E|X − μ| = σ·√(2/π) for normal data):
    # x = [1,1,1,1,2]: median 1, mean|dev| = 0.2, scale 0.2506628 -> z(2) = 3.98942.
    z = robust_z(np.array([1.0, 1, 1, 1, 2]))
    assert_allclose(z, [0, 0, 0, 0, 1 / (1.253314 * 0.2)], rtol=1e-6)
    s = pd.Series([1.0, 2, np.nan, 3, 4, 100], index=list("abcdef"))
    zs = robust_z(s)
    assert isinstance(zs, pd.Series) and list(zs.index) == list("abcdef")
    assert np.isnan(zs["c"])
    assert_allclose(zs.drop("c").to_numpy(), robust_z([1, 2, 3, 4, 100]))
    assert robust_z(np.array([])).size == 0
    # Row-wise on a DataFrame: each row relative to its own median.
    df = pd.DataFrame([[1, 2, 3, 4, 100], [2, 4, 6, 8, 200]], dtype=float)
    zr = robust_z(df, axis=1)
    assert_allclose(zr.iloc[0], zr.iloc[1])  # scale-free


def test_peer_ratio_needs_min_peers():
    # Hand calculation: median(1.0, 0.98, 1.02, 0.5, 1.0) = 1.0 -> ratios equal pi.
    wide = pd.DataFrame({"a": [1.0, 1.0], "b": [0.98, np.nan], "c": [1.02, np.nan],
                         "d": [0.5, 0.5], "e": [1.0, 1.0]})
    r = peer_ratio(wide, min_peers=5)
    assert_allclose(r.iloc[0], [1.0, 0.98, 1.02, 0.5, 1.0])
    assert r.iloc[1].isna().all()  # only 3 valid peers


def test_persistence_rule_known_answer():
    # Rule (common practice): >= 3 low of the last 5 valid days opens an event,
    # starting at the first low day of that window; 3 normal days close it.
    days = pd.date_range("2024-01-01", periods=16, freq="D")
    low = pd.Series([0, 1, 0, 0, 0, 1, 0, 1, 1, 1, 0, 1, 0, 0, 0, 0], index=days).astype(bool)
    valid = pd.Series(True, index=days)
    valid.iloc[2] = False  # an invalid day is neither low nor normal
    ev = persistent_low_events(low, valid)
    # day 1 alone never reaches 3/5; window at day 7 holds days 3,4,5,6,7 (low: 5,7) = 2;
    # day 8: days 4..8 -> low 5,7,8 = 3 -> opens at day 5. Normal 10; low 11; normal 12,13,14
    # -> closes, last low day 11; low days inside: 5, 7, 8, 9, 11 = 5.
    assert ev == [(days[5], days[11], 5)]
    # a single low day never opens an event
    one = pd.Series(False, index=days)
    one.iloc[4] = True
    assert persistent_low_events(one, valid) == []


def _daily_table(n_inv=8, n_days=120, seed=1, faults=()):
    """Daily table of healthy inverters: common weather factor + 1 % inverter noise."""
    rng = np.random.default_rng(seed)
    days = pd.date_range("2024-03-01", periods=n_days, freq="D")
    weather = 0.97 + 0.02 * rng.standard_normal(n_days)  # shared model error, cancels
    rows = []
    for i in range(n_inv):
        pi = weather * (1 + 0.01 * rng.standard_normal(n_days))
        for dev, first, last, factor in faults:
            if dev == f"inv{i:02d}":
                m = (days >= first) & (days <= last)
                pi[m] *= factor
        rows.append(pd.DataFrame({"device_id": f"inv{i:02d}", "day": days, "pi": pi,
                                  "day_valid": True, "e_exp_kwh": 400.0}))
    return pd.concat(rows, ignore_index=True)


def test_string_failure_found_with_dates_and_lost_energy():
    # Injected: inv03 loses 1 of 10 strings (factor 0.9) 2024-04-10 .. 2024-05-09 (30 days).
    faults = [("inv03", pd.Timestamp("2024-04-10"), pd.Timestamp("2024-05-09"), 0.9)]
    d = _daily_table(faults=faults)
    fl = underperformance_flags(d)
    assert list(fl["device_id"]) == ["inv03"] and list(fl["kind"]) == ["underperformance"]
    f = fl.iloc[0]
    # Tolerance: start and end within 2 days of the truth (persistence rule looks back).
    first = pd.Timestamp(f["details"]["first_day"])
    last = pd.Timestamp(f["details"]["last_day"])
    assert abs((first - pd.Timestamp("2024-04-10")).days) <= 2
    assert abs((last - pd.Timestamp("2024-05-09")).days) <= 2
    assert f["start_s"] == pd.Timestamp(first).value // 10**9
    assert f["severity"] == "alarm"  # 30 days >= 14: escalated (common practice)
    # Lost energy ≈ 30 days x 400 kWh x (1 − 0.9) = 1200 kWh (hand calculation), ±20 %.
    assert 0.8 * 1200 <= f["lost_kwh"] <= 1.2 * 1200
    assert FIELD_CAUTION in f["details"]["caution"]
    assert f["details"]["median_peer_ratio"] == pytest.approx(0.9, abs=0.015)


def test_one_cloudy_edge_day_is_not_an_alarm():
    # Two isolated bad days (factor 0.6) are below -3 z but never 3 of 5 -> no flag.
    faults = [("inv02", pd.Timestamp("2024-04-01"), pd.Timestamp("2024-04-01"), 0.6),
              ("inv02", pd.Timestamp("2024-04-20"), pd.Timestamp("2024-04-20"), 0.6)]
    assert underperformance_flags(_daily_table(faults=faults)).empty


def test_fault_interrupted_by_a_few_normal_days_is_one_event():
    # A failed string (factor 0.9) whose index looks normal for 5 days in the middle (e.g.
    # heavy soiling on the peers): the persistence rule closes after 3 normal days, and the
    # re-opened event within 14 days is merged back (alarm hysteresis, common practice).
    faults = [("inv03", pd.Timestamp("2024-04-01"), pd.Timestamp("2024-04-20"), 0.9),
              ("inv03", pd.Timestamp("2024-04-26"), pd.Timestamp("2024-05-20"), 0.9)]
    d = _daily_table(faults=faults)
    fl = underperformance_flags(d)
    assert len(fl) == 1
    f = fl.iloc[0]["details"]
    assert abs((pd.Timestamp(f["first_day"]) - pd.Timestamp("2024-04-01")).days) <= 2
    assert abs((pd.Timestamp(f["last_day"]) - pd.Timestamp("2024-05-20")).days) <= 2
    # without merging it is two events (the persistence rule alone)
    assert len(underperformance_flags(d, merge_gap_days=0)) == 2


def test_short_event_is_warning():
    faults = [("inv05", pd.Timestamp("2024-04-01"), pd.Timestamp("2024-04-06"), 0.85)]
    fl = underperformance_flags(_daily_table(faults=faults))
    assert len(fl) == 1 and fl.iloc[0]["severity"] == "warning"


def test_clean_control_false_alarm_rate():
    # 20 clean fleets x 8 inverters x 120 days (19 200 inverter-days) of 1 % noise:
    # measured false alarms must stay below 1 per 10 000 inverter-days (our stated rate).
    n_flags = sum(len(underperformance_flags(_daily_table(seed=s))) for s in range(20))
    assert n_flags / (20 * 8 * 120) < 1e-4


def test_invalid_days_and_missing_columns():
    d = _daily_table(faults=[("inv01", pd.Timestamp("2024-04-01"), pd.Timestamp("2024-05-01"),
                              0.8)])
    d.loc[d["device_id"] == "inv01", "day_valid"] = False  # nothing valid -> nothing flagged
    assert underperformance_flags(d).empty
    with pytest.raises(ValueError, match="lacks columns"):
        underperformance_flags(d.drop(columns=["pi"]))
