"""Outages and clipping on interval data."""

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_array_equal

from analytics.outages import clipping_flags, clipping_mask, outage_flags, outage_mask
from analytics.outliers import FIELD_CAUTION
from tests.flags_synth import STD_OFFSET_S, inverter_power, site_weather

P_AC_MAX = 100.0


def test_outage_mask_rule():
    # common practice: P_ac <= 1 % of rating while G >= 50 W/m² (1 kW of 100 kW is still "out").
    p = pd.Series([0.0, 1.0, 1.01, 0.0, np.nan, 50.0])
    g = pd.Series([600, 600, 600, 49, 600, 600])
    m = outage_mask(p, g, P_AC_MAX)
    assert isinstance(m, pd.Series)
    assert_array_equal(m.to_numpy(), [True, True, False, False, False, False])


def test_clipping_mask_rule():
    # common practice: P_ac >= 0.98 P_ac,max.
    assert_array_equal(clipping_mask(np.array([97.9, 98.0, 101.0, np.nan]), P_AC_MAX),
                       [False, True, True, False])


def _frame(days=20, seed=3):
    w = site_weather(days=days, seed=seed)
    w["p_ac_kw"] = inverter_power(w)
    return w


def test_partial_and_multi_day_outages_found_with_times_and_energy():
    f = _frame()
    exp = f["p_ac_kw"].copy()  # the model is the truth here
    # Injected: (a) 3-hour trip on day 4 from 17:00 UTC (10:00 local standard),
    # (b) a whole-day-plus outage from day 9 09:00 local to day 11 12:00 local.
    a0 = pd.Timestamp("2024-04-05 17:00", tz="UTC")
    a1 = a0 + pd.Timedelta(hours=3)
    b0 = pd.Timestamp("2024-04-10 16:00", tz="UTC")
    b1 = pd.Timestamp("2024-04-12 19:00", tz="UTC")
    for s, e in ((a0, a1), (b0, b1)):
        f.loc[(f.index >= s) & (f.index < e), "p_ac_kw"] = 0.0
    fl = outage_flags(f, P_AC_MAX, device_id="inv01", p_ac_exp_kw=exp,
                      std_offset_s=STD_OFFSET_S)
    assert len(fl) == 2, fl
    fa, fb = fl.iloc[0], fl.iloc[1]
    # Tolerance: start/end to the interval (15 min) where the sun is up (>= 50 W/m²).
    assert fa["start_s"] == a0.value // 10**9 and fa["end_s"] == a1.value // 10**9
    assert fa["details"]["hours_out"] == pytest.approx(3.0)
    assert fa["details"]["partial"] and fa["severity"] == "warning"
    # Lost energy = Σ expected power x τ over the outage (hand: same sum computed here).
    m = (f.index >= a0) & (f.index < a1)
    assert fa["lost_kwh"] == pytest.approx(exp[m].sum() * 0.25, rel=1e-9)
    assert fb["start_s"] == b0.value // 10**9 and fb["end_s"] == b1.value // 10**9
    assert fb["details"]["whole_days"] == 1  # 2024-04-11 local lost completely
    assert fb["severity"] == "alarm"
    assert FIELD_CAUTION in fb["details"]["caution"]


def test_dawn_wakeup_and_missing_data_are_not_outages():
    f = _frame(days=10)
    # Each morning the inverter starts 15 min late (one sunny interval at 0 kW): < 0.5 h.
    sunny = f["poa_wm2"] >= 50
    first = sunny & ~sunny.shift(1, fill_value=False)
    f.loc[first, "p_ac_kw"] = 0.0
    # Missing power for 4 hours is a dropout, not an outage.
    f.loc["2024-04-04 17:00":"2024-04-04 20:45", "p_ac_kw"] = np.nan
    assert outage_flags(f, P_AC_MAX, device_id="inv01").empty


def test_clean_control_has_no_outages():
    # 5 seeds x 30 days of clean data: zero outage flags (false-alarm rate 0 / 150 days).
    n = sum(len(outage_flags(_frame(days=30, seed=s), P_AC_MAX, device_id="x")) for s in range(5))
    assert n == 0


def test_clipping_monthly_hours():
    f = _frame(days=40)
    fl = clipping_flags(f, P_AC_MAX, device_id="inv01", std_offset_s=STD_OFFSET_S)
    # Hand count of clipped hours per local month from the same rule, 0.25 h each.
    clip = f["p_ac_kw"] >= 98.0
    local = (f.index + pd.Timedelta(seconds=STD_OFFSET_S)).tz_localize(None).to_period("M")
    hours = (clip.groupby(local).sum() * 0.25)
    hours = hours[hours >= 0.25]
    assert list(fl["details"].map(lambda d: d["month"])) == [str(p) for p in hours.index]
    assert [d["clipped_hours"] for d in fl["details"]] == pytest.approx(list(hours))
    assert set(fl["severity"]) == {"info"} and set(fl["kind"]) == {"clipping"}
    assert clipping_flags(f.assign(p_ac_kw=f["p_ac_kw"] * 0.5), P_AC_MAX, device_id="x").empty
