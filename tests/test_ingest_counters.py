"""Cumulative energy counters to interval energy: differences, rollovers, resets, gaps.

Expected energies are hand-calculated differences of the readings (comments per case).
"""

import numpy as np
from numpy.testing import assert_allclose

from ingest.counters import CounterEvents, interval_energy

T = np.arange(6) * 900  # 15-min interval starts
TAU = np.full(6, 900.0)


def run(c, previous=None, rollover=None, ts=T, tau=TAU):
    ev = CounterEvents()
    e, last = interval_energy(ts, tau, np.asarray(c, dtype=float), previous, p_ac_max_kw=100.0,
                              rollover_kwh=rollover, events=ev)
    return e, last, ev


def test_plain_differences():
    # 100.0 -> 100.5 -> 101.5 ...: 0.5, 1.0, 2.0, 0.0, 3.0 kWh
    e, last, ev = run([100.0, 100.5, 101.5, 103.5, 103.5, 106.5])
    assert np.isnan(e[0])  # no previous reading
    assert_allclose(e[1:], [0.5, 1.0, 2.0, 0.0, 3.0])
    assert last == (5 * 900 + 900, 106.5)
    assert not ev.resets and not ev.rollovers


def test_previous_reading_from_earlier_chunk_or_store():
    e, _, _ = run([100.5, 101.0, 101.5, 102.0, 102.5, 103.0], previous=(0, 100.0))
    assert_allclose(e, [0.5] * 6)


def test_rollover_and_reset():
    # rollover at 10000 kWh: 9995 -> 2 is 2 + 10000 - 9995 = 7 kWh (<= 1.5*100 kW*0.25 h = 37.5)
    # 10 -> 0.5 would be 9990.5 kWh through a rollover: implausible, so a reset (no energy)
    e, _, ev = run([9990.0, 9995.0, 2.0, 10.0, 0.5, 5.5], rollover=10000.0)
    assert_allclose(e[1:4], [5.0, 7.0, 8.0])
    assert np.isnan(e[4]) and e[5] == 5.0
    assert len(ev.rollovers) == 1 and ev.rollovers[0]["e_ac_kwh"] == 7.0
    assert len(ev.resets) == 1 and ev.resets[0]["ts_s"] == 4 * 900
    notes = ev.as_notes("INV1")["INV1"]
    assert notes["resets"]["count"] == 1 and notes["rollovers"]["count"] == 1


def test_without_rollover_setting_a_decrease_is_a_reset():
    e, _, ev = run([9990.0, 9995.0, 2.0, 10.0, 12.0, 14.0])
    assert np.isnan(e[2]) and len(ev.resets) == 1 and not ev.rollovers


def test_gap_is_not_assigned_and_jump_is_reported():
    ts = np.array([0, 900, 3600, 4500, 5400, 6300])  # a 45-min gap after 900 s
    e, _, ev = run([1.0, 2.0, 5.0, 6.0, 100.0, 101.0], ts=ts)
    assert_allclose(e[1], 1.0) and np.isnan(e[2])  # across the gap: not assigned
    assert ev.gaps == 1
    assert np.isnan(e[4]) and len(ev.jumps) == 1  # +94 kWh in 15 min > 37.5 kWh
    assert e[5] == 1.0


def test_missing_readings_are_skipped():
    e, _, _ = run([1.0, np.nan, 3.0, 4.0, 5.0, 6.0])
    assert np.isnan(e[1]) and np.isnan(e[2])  # the reading before 3.0 is missing: a gap
    assert_allclose(e[3:], [1.0, 1.0, 1.0])
