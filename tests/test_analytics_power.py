"""Expected power (analytics.power): PVWatts V5 (Dobos 2014).

Oracles: pvlib.pvsystem.pvwatts_dc and pvlib.inverter.pvwatts on a grid; PVWatts (Dobos 2014, NREL/TP-6A20-62641) hand-worked check
value; trade facts as property checks.
"""

import numpy as np
import pandas as pd
import pvlib
import pytest
from numpy.testing import assert_allclose

from analytics import power

G = np.linspace(0.0, 1300.0, 27)
TC = np.linspace(-20.0, 80.0, 21)
GG, TT = (a.ravel() for a in np.meshgrid(G, TC, indexing="ij"))


@pytest.mark.parametrize("gamma", [-0.005, -0.0035, -0.0025])
def test_dc_against_pvlib(gamma):
    # pvlib.pvsystem.pvwatts_dc(effective_irradiance, temp_cell, pdc0, gamma_pdc), W -> kW
    ref = pvlib.pvsystem.pvwatts_dc(GG, TT, 250e3, gamma) / 1000.0
    assert_allclose(power.dc_power_pvwatts(GG, TT, 250.0, gamma), ref, rtol=1e-12, atol=1e-9)


@pytest.mark.parametrize("eta", [0.96, 0.98])
def test_inverter_against_pvlib(eta):
    # pvlib.inverter.pvwatts(pdc, pdc0, eta_inv_nom): pdc0 is the DC input limit = P_ac0 / η_nom
    pdc = np.linspace(0.0, 130.0, 131)
    p_ac_max = 96.0
    ref = pvlib.inverter.pvwatts(pdc, p_ac_max / eta, eta_inv_nom=eta)
    assert_allclose(power.ac_power_pvwatts(pdc, p_ac_max, eta), ref, rtol=1e-12, atol=1e-12)


def test_methods_check_value():
    # PVWatts (Dobos 2014): G = 800, T_cell = 50, P_dc0 = 100 kW, γ = -0.0035 -> 100*0.8*(1-0.0875) = 73.0
    assert power.dc_power_pvwatts(800.0, 50.0, 100.0, -0.0035) == pytest.approx(73.0, abs=1e-12)


def test_stc_gives_nameplate():
    # common practice (definition of STC, IEC 60904-3): 1000 W/m², 25 °C cell -> P_dc = P0
    assert power.dc_power_pvwatts(1000.0, 25.0, 123.4, -0.0037) == pytest.approx(123.4)
    # at ζ = 1 the PVWatts curve gives η_nom exactly (Dobos 2014, Eq. 6), here capped at P_ac0
    assert power.ac_power_pvwatts(100.0, 96.0, 0.96) == pytest.approx(96.0)


def test_proportional_to_irradiance_at_fixed_temperature():
    # common practice: the linear model is proportional to G at fixed cell temperature
    p = power.dc_power_pvwatts(G, 45.0, 100.0, -0.004)
    assert_allclose(p[1:] / G[1:], p[-1] / G[-1], rtol=1e-12)


def test_lower_at_higher_temperature_for_negative_gamma():
    # common practice: c-Si loses power when hotter (γ < 0)
    p = power.dc_power_pvwatts(800.0, TC, 100.0, -0.004)
    assert np.all(np.diff(p) < 0)


def test_ac_limit_and_types():
    # the AC limit holds however high the DC input (Dobos 2014, P_ac = min(η P_dc, P_ac0))
    s = pd.Series([0.0, 50.0, 500.0, np.nan], index=list("abcd"))
    out = power.ac_power_pvwatts(s, 90.0)
    assert isinstance(out, pd.Series) and list(out.index) == list("abcd")
    assert out["a"] == 0.0 and out["c"] == 90.0 and np.isnan(out["d"])
    assert isinstance(power.expected_ac_power(1000.0, 25.0, 100.0, -0.004, 96.0), float)
    assert power.expected_ac_power(np.array([]), np.array([]), 100.0, -0.004, 96.0).shape == (0,)
    # negative irradiance gives no power (pvlib clips negative pdc to 0)
    assert power.dc_power_pvwatts(-5.0, 10.0, 100.0, -0.004) == 0.0
