"""Warranty screening (hand-checkable test vector; hand calculations in comments)."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from analytics.warranty import (
    DISCLAIMER,
    one_sided_upper,
    warranted_fraction,
    warranty_envelope,
    warranty_rate_test,
)


@pytest.mark.parametrize("w1_loss,dw,year,expected", [
    (3.0, 0.7, 25, 0.802),   # Hand calculation: 97 %, 0.7 %/yr -> 80.2 % at year 25
    (2.0, 0.55, 25, 0.848),  # 98 %, 0.55 %/yr -> 84.8 % at 25
    (1.0, 0.4, 30, 0.874),   # 99 %, 0.4 %/yr -> 87.4 % at 30
])
def test_warranted_fraction_examples(w1_loss, dw, year, expected):
    assert_allclose(warranted_fraction(year, first_year_loss_pct=w1_loss, annual_loss_pct=dw,
                                       term_years=30), expected, atol=1e-9)


def test_warranted_fraction_shape_and_types():
    y = np.array([0.0, 0.5, 1.0, 2.0, 26.0, -1.0, np.nan])
    w = warranted_fraction(y, first_year_loss_pct=3, annual_loss_pct=0.7, term_years=25)
    # year 1 flat at W1 = 0.97, then 0.97 - 0.007 (y - 1); NaN outside the term
    assert_allclose(w[:4], [0.97, 0.97, 0.97, 0.963])
    assert np.isnan(w[4:]).all()
    s = pd.Series([1.0, 2.0], index=["a", "b"])
    out = warranted_fraction(s, first_year_loss_pct=3, annual_loss_pct=0.7)
    assert list(out.index) == ["a", "b"]


def test_methods_11_vectors_with_the_interval_as_given():
    # Hand calculation: Rd = -0.62, 95 % CI [-0.80, -0.45], d_w = 0.55 -> not shown;
    # CI [-0.95, -0.70] -> breach indicated (-0.70 < -0.55). The upper bound of the two-sided
    # 95 % interval is the one-sided 97.5 % bound.
    a = warranty_rate_test(-0.62, -0.45, 0.95, annual_loss_pct=0.55, confidence=0.975)
    assert a["exceeds"] is False
    assert_allclose(a["one_sided_upper_pct_per_yr"], -0.45, atol=1e-12)
    b = warranty_rate_test(-0.825, -0.70, 0.95, annual_loss_pct=0.55, confidence=0.975)
    assert b["exceeds"] is True
    assert_allclose(b["one_sided_upper_pct_per_yr"], -0.70, atol=1e-12)


def test_one_sided_95_and_extra_uncertainty():
    # σ_up = 0.17/1.95996 = 0.086737; one-sided 95 %: -0.62 + 1.644854·σ = -0.477330
    assert_allclose(one_sided_upper(-0.62, -0.45, 0.95, confidence=0.95), -0.477330, atol=1e-5)
    # adding σ_drift = 0.2 in quadrature: σ = √(0.086737² + 0.2²) = 0.217999 -> -0.261424
    assert_allclose(one_sided_upper(-0.62, -0.45, 0.95, confidence=0.95,
                                    sigma_extra_pct_per_yr=0.2), -0.261424, atol=1e-5)
    # a clear breach can disappear once sensor-drift uncertainty is added (linear power warranty, common practice)
    assert warranty_rate_test(-0.825, -0.70, 0.95, annual_loss_pct=0.55)["exceeds"]
    assert not warranty_rate_test(-0.825, -0.70, 0.95, annual_loss_pct=0.55,
                                  sigma_extra_pct_per_yr=0.3)["exceeds"]


def test_envelope_shortfall_hand_calculation():
    # 24 months from the warranty start, measured index 0.9 for 12 months then 0.855; energy
    # 100 kWh/month. Reference = 0.9 (first 12 months, rate 0) -> relative 1.0 then 0.95.
    # Warranty W1 = 0.97 (3 %), 0.7 %/yr: in year 2 (y = 1.04..1.96) W = 0.97 - 0.007 (y-1)
    # ≈ 0.9697..0.9633 > 0.95 -> shortfall_m = 100 (W/0.95 - 1) ≈ 1.40..2.07 kWh each month.
    m = pd.date_range("2020-01-01", periods=24, freq="MS")
    pi = pd.Series([0.9] * 12 + [0.855] * 12, m)
    out = warranty_envelope(pi, pd.Series(100.0, m), start_date=dt.date(2020, 1, 1),
                            first_year_loss_pct=3, annual_loss_pct=0.7)
    assert out["months_below"] == 12
    y = np.array([row["years"] for row in out["months"][12:]])
    expected = np.sum(100 * ((0.97 - 0.007 * (y - 1)) / 0.95 - 1))
    assert_allclose(out["shortfall_kwh"], expected, atol=0.01)  # months rounded to 0.001 yr
    assert 12 * 1.39 < out["shortfall_kwh"] < 12 * 2.08
    assert_allclose(out["reference_pi"], 0.9)


def test_disclaimer_states_screening_and_contract():
    assert "Screening evidence" in DISCLAIMER and "IEC 60891" in DISCLAIMER
    assert "screening" in warranty_rate_test(-0.6, -0.5, 0.95, annual_loss_pct=0.5)["verdict"]
