"""Unit conversion to stored units and the plausibility limits.

Conversions are the SI definitions (BIPM, The International System of Units, 9th ed. 2019):
k = 1e3, M = 1e6; T[°C] = T[K] − 273.15; T[°C] = (T[°F] − 32) × 5/9 (the Fahrenheit scale is
defined by 32 °F = 0 °C and 212 °F = 100 °C); 1 km/h = 1000 m / 3600 s.
"""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from ingest.config import normalise_unit
from ingest.units import implausible, to_stored


@pytest.mark.parametrize("quantity, unit, raw, expected", [
    ("p_ac_kw", "W", 50500.0, 50.5),  # 50 500 W / 1000 = 50.5 kW
    ("p_ac_kw", "MW", 0.0505, 50.5),  # 0.0505 MW * 1000 = 50.5 kW
    ("p_dc_kw", "kW", 12.0, 12.0),
    ("e_ac_kwh", "Wh", 1500.0, 1.5),
    ("e_ac_total_kwh", "MWh", 2.5, 2500.0),
    ("poa_wm2", "kW/m2", 0.8, 800.0),
    ("ghi_wm2", "W/m2", 640.0, 640.0),
    ("t_module_c", "F", 212.0, 100.0),  # boiling point of water, 212 °F = 100 °C (BIPM)
    ("t_amb_c", "F", 32.0, 0.0),  # ice point, 32 °F = 0 °C
    ("t_amb_c", "F", -40.0, -40.0),  # the scales cross at -40 (from (F-32)*5/9)
    ("t_module_c", "K", 273.15, 0.0),  # 0 °C = 273.15 K (BIPM)
    ("t_module_c", "K", 313.65, 40.5),
    ("wind_ms", "km/h", 36.0, 10.0),  # 36 000 m / 3600 s = 10 m/s
])
def test_to_stored(quantity, unit, raw, expected):
    assert_allclose(to_stored(np.array([raw]), quantity, unit), [expected], rtol=1e-12, atol=1e-12)


def test_to_stored_keeps_nan_and_refuses_wrong_unit():
    out = to_stored(np.array([np.nan, 1000.0]), "p_ac_kw", "W")
    assert np.isnan(out[0]) and out[1] == 1.0
    with pytest.raises(ValueError, match="unit 'K' is not valid for p_ac_kw"):
        to_stored(np.array([1.0]), "p_ac_kw", "K")


@pytest.mark.parametrize("spelling, canonical", [
    ("W/m²", "W/m2"), ("kW/m²", "kW/m2"), ("°C", "C"), ("degF", "F"), ("kw", "kW"), ("KWH", "kWh"),
])
def test_unit_spellings(spelling, canonical):
    assert normalise_unit(spelling) == canonical


def test_irradiance_tolerance_minus_10():
    # night-time thermopile offset of a few W/m² negative is normal (common practice); -10 is the limit
    bad, why = implausible(np.array([-9.9, -10.0, -10.1, 1400.0]), "poa_wm2")
    assert bad.tolist() == [False, False, True, False]
    assert "irradiance below -10" in why[2] and why[3] is None


def test_power_above_one_and_a_half_times_rating():
    bad, why = implausible(np.array([149.9, 150.0, 150.1]), "p_ac_kw", p_ac_max_kw=100.0)
    assert bad.tolist() == [False, False, True]  # 1.5 x 100 kW = 150 kW
    assert "above 150 kW" in why[2]


def test_interval_energy_limit_uses_interval():
    # 100 kW for 0.25 h = 25 kWh; 1.5x = 37.5 kWh is the limit
    bad, _ = implausible(np.array([37.5, 37.6, -0.1]), "e_ac_kwh", p_ac_max_kw=100.0,
                         interval_h=np.array([0.25, 0.25, 0.25]))
    assert bad.tolist() == [False, True, True]


def test_temperature_and_wind_limits():
    assert implausible(np.array([-61.0, 25.0, 101.0]), "t_module_c")[0].tolist() == [True, False, True]
    assert implausible(np.array([-1.0, 10.0, 80.0]), "wind_ms")[0].tolist() == [True, False, True]


def test_irradiance_upper_limit_keeps_cloud_enhancement():
    # Cloud enhancement to 1500-1800 W/m² POA is real (Gueymard 2017); the BSRN physically
    # possible limit at the sun overhead is 1.5 x 1361 + 100 = 2141.5 W/m² (Long & Shi 2008)
    bad, why = implausible(np.array([1500.0, 1800.0, 2141.5, 2142.0, 9999.0, 1e300]), "poa_wm2")
    assert bad.tolist() == [False, False, False, True, True, True]
    assert "irradiance above 2141.5 W/m²" in why[3]


def test_negative_power_beyond_night_consumption():
    # night consumption is well under 1 % of the rating (common practice): -5 % is the limit
    bad, why = implausible(np.array([-0.5, -5.0, -5.1, -50.0]), "p_ac_kw", p_ac_max_kw=100.0)
    assert bad.tolist() == [False, False, True, True]
    assert "below -5 kW" in why[2]
    assert implausible(np.array([-6.1, -5.9]), "p_dc_kw", p_dc_kwp=120.0)[0].tolist() == [True, False]


def test_counter_limits():
    # 100 years x 8784 h x 100 kW = 87.84 GWh; 1e308 is no counter reading
    bad, _ = implausible(np.array([1e6, 8.784e7, 8.8e7, 1e308, -1.0]), "e_ac_total_kwh",
                         p_ac_max_kw=100.0)
    assert bad.tolist() == [False, False, True, True, True]
    bad, why = implausible(np.array([999_999.0, 1_000_001.0]), "e_ac_total_kwh", p_ac_max_kw=100.0,
                           rollover_kwh=1e6)
    assert bad.tolist() == [False, True] and "counter_rollover_kwh" in why[1]


def test_air_temperature_and_rain_records():
    # WMO archive: -89.2 °C (Vostok) .. 56.7 °C (Death Valley); 1825 mm in 24 h (Foc-Foc)
    assert implausible(np.array([-91.0, -89.2, 56.7, 61.0]), "t_amb_c")[0].tolist() == [
        True, False, False, True]
    assert implausible(np.array([-0.1, 0.0, 1825.0, 1900.0]), "rain_mm")[0].tolist() == [
        True, False, False, True]


def test_dc_current_limits_from_the_nameplate():
    # 120 kWp: 1.5 x 120 kW / 150 V = 1200 A (common practice bound); -5 % of it below zero
    bad, why = implausible(np.array([-61.0, -59.0, 1199.0, 1201.0]), "i_dc_a", p_dc_kwp=120.0)
    assert bad.tolist() == [True, False, False, True]
    assert "DC current" in why[3]
