"""Threshold-boundary checks (issue #14) for documented flag thresholds not covered by the
detector-specific test files: each at just below, at and just above its value.

Where a threshold is a strict inequality and float rounding could decide the "at" case, the
"at" value is the threshold nudged by 1e-9 relative to the side the rule leaves it on (as in
tests/test_analytics_soiling.py). Hand-computed values name their rule.
"""

import numpy as np
import pandas as pd
import pytest

from analytics.clock import clock_shift_flags
from analytics.outliers import underperformance_flags
from analytics.sensor_qa import (
    drift_flags,
    dropout_flags,
    flatline_mask,
    validity_flags,
)
from analytics.soiling import detect_cleanings

DAYS = pd.date_range("2024-06-01", periods=20, freq="D")
#: nine peers whose daily pi has median 1.0 and MAD 0.015 once a tenth, lower inverter is
#: added (sorted |deviations| 0, 0, 0, .01, .01, .02, .02, .03, .03, x -> MAD (.01+.02)/2)
PEERS = [0.97, 0.98, 0.99, 1.0, 1.0, 1.0, 1.01, 1.02, 1.03]
SIGMA = 0.015 * 1.482602218505602  # 1.4826 MAD (scipy median_abs_deviation scale='normal')


def _table(target_pi, low_days=None, e_exp=100.0):
    """Daily table of 10 inverters over DAYS; 'T' has ``target_pi`` on ``low_days``
    (default all) and 1.0 otherwise."""
    rows = []
    for k, d in enumerate(DAYS):
        for j, p in enumerate(PEERS):
            rows.append(dict(device_id=f"P{j}", day=d, pi=p, day_valid=True, e_exp_kwh=e_exp))
        low = low_days is None or k in low_days
        rows.append(dict(device_id="T", day=d, pi=target_pi if low else 1.0, day_valid=True,
                         e_exp_kwh=e_exp))
    return pd.DataFrame(rows)


@pytest.mark.parametrize("z,low", [(-2.99, False), (-3.0 * (1 - 1e-9), False), (-3.01, True)])
def test_underperformance_z_threshold(z, low):
    # documented: robust z < -3 (with a peer deficit > 4 %: here 1 + z * sigma ~ 0.933,
    # a 6.7 % deficit, so z decides); z = (x - median) / (1.4826 MAD), Iglewicz & Hoaglin
    fl = underperformance_flags(_table(1.0 + z * SIGMA))
    assert (len(fl) == 1) == low


@pytest.mark.parametrize("n_days,severity", [(13, "warning"), (14, "alarm"), (15, "alarm")])
def test_underperformance_escalation_days(n_days, severity):
    # documented: a warning becomes an alarm once the event spans 14 days
    fl = underperformance_flags(_table(0.85, low_days=set(range(2, 2 + n_days))))
    assert len(fl) == 1
    assert fl.iloc[0]["details"]["n_days"] == n_days
    assert fl.iloc[0]["severity"] == severity


def test_underperformance_exact_lost_energy_noise_free():
    # noise-free table: T at pi 0.85 against a peer median of exactly 1.0 on 10 days, each
    # with 100 kWh expected: lost = sum e_exp (1 - R) = 10 x 100 x 0.15 = 150 kWh (hand rule)
    fl = underperformance_flags(_table(0.85, low_days=set(range(5, 15))))
    assert len(fl) == 1 and fl.iloc[0]["lost_kwh"] == pytest.approx(150.0, rel=1e-12)


@pytest.mark.parametrize("mm,event", [(4.99, False), (5.0, True), (5.01, True)])
def test_rain_threshold_5mm(mm, event):
    # documented: rain of at least 5 mm in a day is a cleaning event (flat pi: no step)
    days = pd.date_range("2024-01-01", periods=30, freq="D")
    pi = pd.Series(0.97, index=days)
    rain = pd.Series(np.where(np.arange(30) == 15, mm, 0.0), index=days)
    cl = detect_cleanings(pi, rain_mm=rain)
    assert (pd.Timestamp("2024-01-16") in cl.index) == event


@pytest.mark.parametrize("step,event", [(0.0099, False), (0.01, False), (0.0101, True)])
def test_cleaning_step_above_1_percent(step, event):
    # documented: an upward step of pi counts when it exceeds max(Tukey fence, 0.01); flat
    # pi levels 0 and `step` make the forward-minus-backward median step exactly `step` and
    # the fence 0 (all other steps are 0)
    days = pd.date_range("2024-01-01", periods=40, freq="D")
    pi = pd.Series(np.where(np.arange(40) >= 20, step, 0.0), index=days)
    cl = detect_cleanings(pi)
    assert (len(cl) == 1) == event
    if event:
        # a 7-day forward median already holds the step 3 days before it (4 of 7 days)
        assert 0 <= (pd.Timestamp("2024-01-21") - cl.index[0]).days <= 3


@pytest.mark.parametrize("delta,flagged", [(9.99, False), (10.0, False), (10.01, True)])
def test_clock_threshold_10_minutes(delta, flagged):
    # documented: the 7-clear-day median |delta| must exceed 10 min
    days = pd.date_range("2024-05-01", periods=40, freq="D")
    off = pd.DataFrame({"delta_min": delta, "clear": True}, index=days)
    assert (len(clock_shift_flags(off, device_id="poa1")) == 1) == flagged


@pytest.mark.parametrize("rate,flagged", [(0.99, False), (1.0 * (1 - 1e-9), False),
                                          (1.01, True)])
def test_drift_threshold_1_percent_per_year(rate, flagged):
    # documented: |Theil-Sen drift| > 1 %/yr over >= 365 days. A noise-free line through
    # 1.0 at its middle day: drift = slope x 365.25 / median = rate (hand rule)
    n = 501
    d = np.arange(n) - (n - 1) / 2
    days = pd.date_range("2022-01-01", periods=n, freq="D")
    ratio = pd.Series(1.0 - rate / 100 / 365.25 * d, index=days)
    fl = drift_flags(ratio, device_id="poa1", method="clearsky")
    assert (len(fl) == 1) == flagged
    if flagged:
        assert fl.iloc[0]["details"]["drift_pct_per_yr"] == pytest.approx(-rate, rel=1e-9)


@pytest.mark.parametrize("n_days,severity", [(6, "warning"), (7, "alarm"), (8, "alarm")])
def test_invalid_sensor_period_alarm_from_7_days(n_days, severity):
    # documented: a faulty-sensor period is an alarm from 7 days, else a warning
    days = pd.date_range("2024-07-01", periods=20, freq="D")
    bad = np.arange(20) < n_days
    tab = pd.DataFrame({"valid": ~bad, "reason": np.where(bad, "stuck", "")}, index=days)
    fl = validity_flags(tab, device_id="rc1", quantity="poa_wm2")
    assert len(fl) == 1 and fl.iloc[0]["severity"] == severity
    assert fl.iloc[0]["details"]["n_days_excluded"] == n_days


@pytest.mark.parametrize("n,stuck", [(3, False), (4, True), (5, True)])
def test_irradiance_flatline_from_4_samples(n, stuck):
    # documented: a daytime run of >= 4 samples without change (irradiance and power)
    x = np.concatenate([[100.0, 200.0], np.full(n, 300.0), [400.0, 500.0]])
    m = flatline_mask(x, np.ones(x.size, bool), abs_tol=0.01)
    assert m.any() == stuck
    if stuck:
        assert m.sum() == n


@pytest.mark.parametrize("n_missing,found", [(3, False), (4, True), (5, True)])
def test_dropout_from_1_hour(n_missing, found):
    # documented: missing daytime samples for >= 1 h (15-min data: 4 samples)
    grid = pd.date_range("2024-06-01 08:00", periods=24, freq="15min", tz="UTC")
    x = pd.Series(500.0, index=grid)
    x.iloc[6:6 + n_missing] = np.nan
    fl = dropout_flags(x, pd.Series(True, index=grid), device_id="poa1",
                       quantity="poa_wm2", tau_s=900)
    assert (len(fl) == 1) == found
    if found:
        assert fl.iloc[0]["details"]["missing_daytime_hours"] == pytest.approx(n_missing / 4)
