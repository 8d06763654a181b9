"""Yields and performance ratios (analytics.performance_ratio).

References: IEC 61724-1 definitions (Y_r, Y_f, PR, STC-corrected PR) as restated on the
Sandia PVPMC "Performance ratio" page; Dierauf et al. 2013 (NREL/TP-5200-57991), Eq. 4-5;
Hand-worked examples of IEC 61724-1:2021 and Dierauf et al. 2013 (NREL/TP-5200-57991);
hand calculations in the comments.
"""

import numpy as np
import pandas as pd
import pytest

from analytics import performance_ratio as prm

# hand-worked example: two 1-h intervals, G = [1000, 500], T = [55, 35], E = [80, 42] kWh,
# P0 = 100 kWp, δ = -0.4 %/°C (γ = -0.004).
E = np.array([80.0, 42.0])
G = np.array([1000.0, 500.0])
T = np.array([55.0, 35.0])
TAU = 1.0
P0 = 100.0
GAMMA = -0.004


def test_yields_methods_vector():
    # IEC 61724-1 PR = Y_f / Y_r: P0 = 100 kWp, E = 500 kWh/d, H = 6 kWh/m²/d -> Y_f = 5.0 h, Y_r = 6.0 h, PR = 0.8333
    g = np.full(12, 500.0)  # 12 h at 500 W/m² = 6 kWh/m²
    e = np.full(12, 500.0 / 12)
    assert prm.reference_yield_h(g, 1.0) == pytest.approx(6.0)
    assert prm.final_yield_h(e, 100.0) == pytest.approx(5.0)
    assert prm.performance_ratio(e, g, 1.0, 100.0) == pytest.approx(0.8333, abs=5e-5)


def test_pr_hand_worked_quarter_hours():
    # Hand calculation: four 15-min intervals, G = [200, 600, 800, 400] W/m², P_ac = [15, 47, 62, 31] kW,
    # P0 = 80 kWp. H = (200+600+800+400)*0.25/1000 = 0.5 kWh/m²; Y_r = 0.5 h;
    # E = (15+47+62+31)*0.25 = 38.75 kWh; Y_f = 38.75/80 = 0.484375 h; PR = 0.96875.
    g = np.array([200.0, 600.0, 800.0, 400.0])
    e = np.array([15.0, 47.0, 62.0, 31.0]) * 0.25
    assert prm.insolation_kwhm2(g, 0.25) == pytest.approx(0.5)
    assert prm.final_yield_h(e, 80.0) == pytest.approx(0.484375)
    assert prm.performance_ratio(e, g, 0.25, 80.0) == pytest.approx(0.96875)


def test_methods_vector_pr_stc_and_weather_corrected():
    # IEC 61724-1 / Dierauf et al. 2013: PR = 122/150 = 0.81333; PR_STC = 122/136 = 0.89706;
    # Dierauf PR_corr with T_typ = 45: 122/148 = 0.82432; T_typ(same data) = 48.333 -> = PR
    assert prm.performance_ratio(E, G, TAU, P0) == pytest.approx(0.81333, abs=5e-6)
    assert prm.performance_ratio_temperature_corrected(E, G, T, TAU, P0, GAMMA) == pytest.approx(
        0.89706, abs=5e-6)
    assert prm.t_cell_typical_c(G, T) == pytest.approx(48.333, abs=5e-4)
    assert prm.performance_ratio_weather_corrected(E, G, T, TAU, P0, GAMMA, 45.0) == pytest.approx(
        0.82432, abs=5e-6)
    # annual-temperature-equivalent PR (IEC 61724-1) with T̄ = 45 equals Dierauf's with T_typ = 45
    assert prm.performance_ratio_temperature_corrected(E, G, T, TAU, P0, GAMMA, t_ref_c=45.0) == \
        pytest.approx(0.82432, abs=5e-6)


def test_dierauf_identity():
    # Anderson 2021 restating Dierauf 2013 Eq. 5: T_typ from the same period -> PR_corr = PR exactly
    rng = np.random.default_rng(1)
    g = rng.uniform(100, 1100, 200)
    t = rng.uniform(5, 65, 200)
    e = rng.uniform(5, 90, 200) * 0.25
    pr = prm.performance_ratio(e, g, 0.25, 90.0)
    assert prm.performance_ratio_weather_corrected(e, g, t, 0.25, 90.0, -0.0037) == pytest.approx(
        pr, rel=1e-12)


def test_from_sums_match_intervals():
    # Stored daily sums reproduce the interval formulas (Σ over days = Σ over intervals)
    e_ref = prm.reference_energy_kwh(G, TAU, P0)  # [100, 50]
    e_stc = prm.reference_energy_stc_kwh(G, T, TAU, P0, GAMMA)  # [88, 48]
    e_tc = prm.reference_energy_tcell_kwhc(G, T, TAU, P0)  # [5500, 1750]
    assert e_stc.tolist() == pytest.approx([88.0, 48.0])
    assert prm.pr_from_sums(E.sum(), e_ref.sum()) == pytest.approx(0.81333, abs=5e-6)
    assert prm.pr_stc_from_sums(E.sum(), e_stc.sum()) == pytest.approx(0.89706, abs=5e-6)
    assert prm.pr_wc_from_sums(E.sum(), e_ref.sum(), e_tc.sum(), GAMMA, 45.0) == pytest.approx(
        0.82432, abs=5e-6)
    # identity from sums, and T_typ = 25 gives the cell-temperature STC PR
    assert prm.pr_wc_from_sums(E.sum(), e_ref.sum(), e_tc.sum(), GAMMA) == pytest.approx(
        prm.pr_from_sums(E.sum(), e_ref.sum()), rel=1e-12)
    assert prm.pr_wc_from_sums(E.sum(), e_ref.sum(), e_tc.sum(), GAMMA, 25.0) == pytest.approx(
        0.89706, abs=5e-6)
    assert prm.t_cell_typical_from_sums(e_ref, e_tc) == pytest.approx(48.333, abs=5e-4)


def test_summer_and_winter_compare_after_weather_correction():
    # Dierauf et al. 2013 rationale: a plant with a constant "true" performance shows a seasonal
    # uncorrected PR; correcting both seasons to one typical temperature removes it.
    # Model: E = 0.85 * P0 G/1000 (1 + γ (T - 25)) τ. Summer T = 55, winter T = 15 (G = 800).
    def season(t):
        e = 0.85 * prm.reference_energy_stc_kwh(800.0, t, 1.0, P0, GAMMA)
        return e, prm.reference_energy_kwh(800.0, 1.0, P0), prm.reference_energy_tcell_kwhc(
            800.0, t, 1.0, P0)
    (es, rs, ts), (ew, rw, tw) = season(55.0), season(15.0)
    t_typ = prm.t_cell_typical_from_sums([rs, rw], [ts, tw])  # 35 °C
    assert t_typ == pytest.approx(35.0)
    assert prm.pr_from_sums(es, rs) != pytest.approx(prm.pr_from_sums(ew, rw), abs=0.05)
    s, w = (prm.pr_wc_from_sums(e, r, tc, GAMMA, t_typ) for e, r, tc in ((es, rs, ts), (ew, rw, tw)))
    # hand: PR_corr = 0.85 (1 + γ (T - 25)) / (1 + γ (T - 35)):
    # summer 0.85 * 0.88 / 0.92 = 0.81304, winter 0.85 * 1.04 / 1.08 = 0.81852
    assert s == pytest.approx(0.85 * 0.88 / 0.92, rel=1e-12)
    assert w == pytest.approx(0.85 * 1.04 / 1.08, rel=1e-12)
    # uncorrected: 0.748 vs 0.884 (spread 0.136); corrected spread 0.0055, < 5 % of it
    raw = abs(prm.pr_from_sums(es, rs) - prm.pr_from_sums(ew, rw))
    assert raw == pytest.approx(0.136, abs=1e-9)
    assert abs(s - w) < 0.05 * raw


def test_nan_empty_and_types():
    # NaN intervals leave numerator and denominator together (IEC 61724-1:2021; common practice)
    e = np.array([80.0, np.nan, 42.0])
    g = np.array([1000.0, 700.0, 500.0])
    assert prm.performance_ratio(e, g, 1.0, 100.0) == pytest.approx(122.0 / 150.0)
    assert np.isnan(prm.performance_ratio([], [], 1.0, 100.0))
    assert np.isnan(prm.t_cell_typical_c([np.nan], [40.0]))
    s = pd.Series([500.0, 0.0], index=["a", "b"])
    out = prm.pr_from_sums(pd.Series([400.0, 0.0], index=["a", "b"]), s)
    assert isinstance(out, pd.Series) and out["a"] == 0.8 and np.isnan(out["b"])
    assert isinstance(prm.pr_from_sums(1.0, 2.0), float)


def test_period_sums_ratio_of_sums():
    # PR over a period is Σ E / Σ E_ref, not the mean of daily PRs: (400 + 100)/(500 + 200) = 0.714
    d = pd.DataFrame({"day": pd.to_datetime(["2024-01-01", "2024-01-02", "2024-02-01"]),
                      "e_ac_kwh": [400.0, 100.0, 90.0], "e_ref_kwh": [500.0, 200.0, 100.0]})
    m = prm.period_sums(d, "MS")
    assert m["pr"].iloc[0] == pytest.approx(500.0 / 700.0)
    assert m["pr"].iloc[1] == pytest.approx(0.9)
