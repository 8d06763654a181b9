"""Cell and module temperature models (analytics.temperature).

Oracles: pvlib.temperature (sapm_cell_from_module, sapm_module, sapm_cell, faiman and
TEMPERATURE_MODEL_PARAMETERS), and hand-worked check values of King et al. 2004 (SAND2004-3535, Eqs. 11-12) and
Faiman 2008 (Prog. Photovolt. 16:307), which agree with pvlib 0.16.
"""

import numpy as np
import pandas as pd
import pvlib
import pytest
from numpy.testing import assert_allclose

from analytics import temperature as t

G = np.array([0.0, 50.0, 200.0, 500.0, 800.0, 1000.0, 1200.0])
TA = np.array([-10.0, 0.0, 15.0, 25.0, 35.0, 45.0])
WS = np.array([0.0, 1.0, 3.0, 8.0])
GG, TT, WW = (a.ravel() for a in np.meshgrid(G, TA, WS, indexing="ij"))


@pytest.mark.parametrize("key", ["open_rack_glass_glass", "close_mount_glass_glass",
                                 "open_rack_glass_polymer", "insulated_back_glass_polymer"])
def test_parameter_table_matches_pvlib(key):
    # pvlib.temperature.TEMPERATURE_MODEL_PARAMETERS['sapm'] (King et al. 2004, Table 1)
    ref = pvlib.temperature.TEMPERATURE_MODEL_PARAMETERS["sapm"][key]
    ours = t.sapm_parameters(key)
    assert (ours["a"], ours["b"], ours["delta_t_c"]) == (ref["a"], ref["b"], ref["deltaT"])


@pytest.mark.parametrize("key", list(pvlib.temperature.TEMPERATURE_MODEL_PARAMETERS["sapm"]))
def test_grid_against_pvlib(key):
    # pvlib.temperature.sapm_module / sapm_cell / sapm_cell_from_module on a grid of inputs
    p = pvlib.temperature.TEMPERATURE_MODEL_PARAMETERS["sapm"][key]
    ours = t.sapm_parameters(key)
    tm_ref = pvlib.temperature.sapm_module(GG, TT, WW, p["a"], p["b"])
    tm = t.module_temperature_sandia(GG, TT, WW, a=ours["a"], b=ours["b"])
    assert_allclose(tm, tm_ref, rtol=0, atol=1e-9)
    tc_ref = pvlib.temperature.sapm_cell(GG, TT, WW, p["a"], p["b"], p["deltaT"])
    assert_allclose(t.cell_temperature_sandia(GG, TT, WW, ours["a"], ours["b"], ours["delta_t_c"]),
                    tc_ref, rtol=0, atol=1e-9)
    tcm_ref = pvlib.temperature.sapm_cell_from_module(tm_ref, GG, p["deltaT"])
    assert_allclose(t.cell_temperature_from_module(tm_ref, GG, ours["delta_t_c"]), tcm_ref,
                    rtol=0, atol=1e-9)


def test_faiman_grid_against_pvlib():
    # pvlib.temperature.faiman(poa_global, temp_air, wind_speed, u0=25.0, u1=6.84)
    assert_allclose(t.cell_temperature_faiman(GG, TT, WW),
                    pvlib.temperature.faiman(GG, TT, WW), rtol=0, atol=1e-9)
    assert_allclose(t.cell_temperature_faiman(GG, TT, WW, u0=30.0, u1=5.0),
                    pvlib.temperature.faiman(GG, TT, WW, u0=30.0, u1=5.0), rtol=0, atol=1e-9)


@pytest.mark.parametrize("key, t_m, t_c", [
    # King et al. 2004 Eq. 11-12 / Faiman 2008 check values, E = 1000 W/m², T_a = 25 °C, WS = 1 m/s
    ("open_rack_glass_polymer", 51.384, 54.384),  # 1000 * exp(-3.56 - 0.075) = 26.384
    ("open_rack_glass_glass", 54.323, 57.323),  # 1000 * exp(-3.5294) = 29.323
    ("close_mount_glass_glass", None, 74.456),
    ("insulated_back_glass_polymer", None, 82.527),
])
def test_methods_check_values(key, t_m, t_c):
    p = t.sapm_parameters(key)
    if t_m is not None:
        assert_allclose(t.module_temperature_sandia(1000.0, 25.0, 1.0, p["a"], p["b"]), t_m, atol=1e-3)
    assert_allclose(t.cell_temperature_sandia(1000.0, 25.0, 1.0, p["a"], p["b"], p["delta_t_c"]),
                    t_c, atol=1e-3)


def test_methods_check_values_from_module_and_faiman():
    # King et al. 2004 Eq. 12: T_m = 45, E = 800, ΔT = 3 -> 45 + 0.8 * 3 = 47.4
    assert t.cell_temperature_from_module(45.0, 800.0, 3.0) == pytest.approx(47.4, abs=1e-12)
    # Faiman: (1000, 25, 1) -> 25 + 1000 / 31.84 = 56.407; (800, 20, 3) -> 20 + 800/45.52 = 37.575
    assert t.cell_temperature_faiman(1000.0, 25.0, 1.0) == pytest.approx(56.407, abs=1e-3)
    assert t.cell_temperature_faiman(800.0, 20.0, 3.0) == pytest.approx(37.575, abs=1e-3)


def test_types_nan_empty():
    # project convention: scalar -> float, array -> array, Series keeps its index, NaN -> NaN, empty -> empty
    s = pd.Series([800.0, np.nan], index=pd.date_range("2024-01-01", periods=2, freq="h", tz="UTC"))
    out = t.cell_temperature_from_module(pd.Series([45.0, 40.0], index=s.index), s)
    assert isinstance(out, pd.Series) and out.index.equals(s.index)
    assert out.iloc[0] == pytest.approx(47.4) and np.isnan(out.iloc[1])  # 45 + 0.8 * 3
    assert isinstance(t.cell_temperature_faiman(1000.0, 25.0), float)
    arr = t.module_temperature_sandia(np.array([0.0, 1000.0]), np.array([10.0, 25.0]), 1.0)
    assert isinstance(arr, np.ndarray) and arr[0] == 10.0  # no sun: module at ambient
    assert t.cell_temperature_faiman(np.array([]), np.array([])).shape == (0,)


def test_negative_irradiance_treated_as_zero():
    # common practice: clip E < 0 to 0 (a thermopile's night offset must not cool the module)
    assert t.cell_temperature_from_module(10.0, -5.0) == 10.0
    assert t.cell_temperature_faiman(-5.0, 10.0) == 10.0


def test_unknown_mounting():
    with pytest.raises(ValueError, match="unknown mounting 'roof'"):
        t.sapm_parameters("roof")


def test_best_available_cell_temperature_against_pvlib():
    # each branch against pvlib's implementation of the published model on the same inputs:
    # module sensor -> King et al. 2004 Eq. 12 (pvlib.temperature.sapm_cell_from_module);
    # ambient + wind -> Eq. 11 then Eq. 12 (pvlib.temperature.sapm_cell);
    # ambient only -> Faiman 2008 at 1 m/s (pvlib.temperature.faiman).
    import pvlib

    from analytics.temperature import cell_temperature_best_available

    g = np.array([850.0, 850.0, 850.0, -5.0])
    t_mod = np.array([48.0, np.nan, np.nan, np.nan])
    t_amb = np.array([22.0, 22.0, 22.0, 5.0])
    wind = np.array([2.0, 2.0, np.nan, np.nan])
    a, b, dt_c = -3.47, -0.0594, 3.0  # open rack glass/glass (King et al. 2004, Table 1)
    got = cell_temperature_best_available(g, t_mod, t_amb, wind, a=a, b=b, delta_t_c=dt_c)
    want = [
        pvlib.temperature.sapm_cell_from_module(48.0, 850.0, dt_c),
        pvlib.temperature.sapm_cell(850.0, 22.0, 2.0, a, b, dt_c),
        pvlib.temperature.faiman(850.0, 22.0, 1.0),
        pvlib.temperature.faiman(0.0, 5.0, 1.0),  # negative irradiance counts as 0
    ]
    np.testing.assert_allclose(got, want, rtol=1e-9)
