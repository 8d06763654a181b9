"""Unit conversion to the stored units, and the plausibility limits applied at ingest.

Stored units (the first unit of each quantity in :data:`ingest.config.QUANTITY_UNITS`):
kW for power, kWh for energy, W/m² for irradiance, °C for temperature, m/s for wind, mm
for rain. Conversions are the standard SI ones (BIPM, *The International System of Units*,
9th ed., 2019): prefixes k = 10³, M = 10⁶; T[°C] = T[K] − 273.15; T[°C] = (T[°F] − 32) × 5/9;
1 km/h = 1000 m / 3600 s.
"""

from __future__ import annotations

import numpy as np

from ingest.config import QUANTITY_UNITS

# (quantity family unit) -> (scale, offset): stored = raw * scale + offset
_LINEAR: dict[str, tuple[float, float]] = {
    "kW": (1.0, 0.0), "W": (1e-3, 0.0), "MW": (1e3, 0.0),
    "kWh": (1.0, 0.0), "Wh": (1e-3, 0.0), "MWh": (1e3, 0.0),
    "W/m2": (1.0, 0.0), "kW/m2": (1e3, 0.0),
    "C": (1.0, 0.0), "K": (1.0, -273.15), "F": (5.0 / 9.0, -32.0 * 5.0 / 9.0),
    "m/s": (1.0, 0.0), "km/h": (1.0 / 3.6, 0.0),
    "mm": (1.0, 0.0),
    "A": (1.0, 0.0), "mA": (1e-3, 0.0), "V": (1.0, 0.0), "kV": (1e3, 0.0),
}
#: DC input voltage above this is no PV string (IEC 60364-7-712 systems are at most 1500 V DC;
#: the margin allows cold open-circuit overshoot; common practice).
V_DC_MAX_V = 2000.0

#: Irradiance below this is impossible rather than sensor offset at night (common practice:
#: thermopile pyranometers read a few W/m² negative at night from thermal offset).
IRRADIANCE_MIN_WM2 = -10.0
#: Power or interval energy above this multiple of the rating is impossible (common practice).
POWER_MAX_FACTOR = 1.5
#: Temperatures outside this range are sensor faults, not weather (common practice).
T_MIN_C, T_MAX_C = -60.0, 100.0
WIND_MAX_MS = 75.0  # above any recorded surface gust (113 m/s is the record; 75 is common practice)


def to_stored(values: np.ndarray, quantity: str, unit: str) -> np.ndarray:
    """Convert ``values`` given in ``unit`` to the stored unit of ``quantity`` (NaN stays NaN).

    Example: ``to_stored(np.array([77.0]), "t_amb_c", "F")`` -> ``[25.0]`` since (77 − 32) × 5/9 = 25.
    """
    if unit not in QUANTITY_UNITS.get(quantity, ()):
        raise ValueError(f"unit {unit!r} is not valid for {quantity}; "
                         f"expected one of {', '.join(QUANTITY_UNITS.get(quantity, ()))}")
    scale, offset = _LINEAR[unit]
    if scale == 1.0 and offset == 0.0:
        return values
    return values * scale + offset


def implausible(values: np.ndarray, quantity: str, *, p_ac_max_kw: float | None = None,
                p_dc_kwp: float | None = None, interval_h: np.ndarray | float | None = None
                ) -> tuple[np.ndarray, str]:
    """Mask of impossible values (already in stored units) and the reason text for them.

    Limits: irradiance < -10 W/m²; AC power or interval AC energy above 1.5 × the AC rating
    (energy: 1.5 × ``p_ac_max_kw`` × ``interval_h``); DC power above 1.5 × DC nameplate;
    negative energy, wind or rain; temperature outside -60..100 °C. Non-finite values
    (``inf``) are the caller's to reject before this check.
    """
    with np.errstate(invalid="ignore"):
        bad = np.zeros(values.shape, dtype=bool)
        reason = ""
        if quantity in ("poa_wm2", "ghi_wm2"):
            bad |= values < IRRADIANCE_MIN_WM2
            reason = f"is impossible: irradiance below {IRRADIANCE_MIN_WM2:g} W/m²"
        elif quantity == "p_ac_kw" and p_ac_max_kw:
            lim = POWER_MAX_FACTOR * p_ac_max_kw
            bad |= (values > lim) | (values < -lim)
            reason = f"is impossible: |AC power| above {POWER_MAX_FACTOR:g} x rating = {lim:g} kW"
        elif quantity == "p_dc_kw" and p_dc_kwp:
            lim = POWER_MAX_FACTOR * p_dc_kwp
            bad |= (values > lim) | (values < -lim)
            reason = f"is impossible: |DC power| above {POWER_MAX_FACTOR:g} x nameplate = {lim:g} kW"
        elif quantity == "e_ac_kwh":
            bad |= values < 0
            reason = "is impossible: negative interval energy"
            if p_ac_max_kw and interval_h is not None:
                bad |= values > POWER_MAX_FACTOR * p_ac_max_kw * np.asarray(interval_h)
                reason = (f"is impossible: interval energy negative or above "
                          f"{POWER_MAX_FACTOR:g} x rating x interval")
        elif quantity == "e_ac_total_kwh":
            bad |= values < 0
            reason = "is impossible: negative energy counter"
        elif quantity in ("t_module_c", "t_amb_c"):
            bad |= (values < T_MIN_C) | (values > T_MAX_C)
            reason = f"is impossible: temperature outside {T_MIN_C:g}..{T_MAX_C:g} °C"
        elif quantity == "wind_ms":
            bad |= (values < 0) | (values > WIND_MAX_MS)
            reason = f"is impossible: wind speed outside 0..{WIND_MAX_MS:g} m/s"
        elif quantity == "v_dc_v":
            bad |= (values < 0) | (values > V_DC_MAX_V)
            reason = f"is impossible: DC voltage outside 0..{V_DC_MAX_V:g} V"
        elif quantity == "rain_mm":
            bad |= values < 0
            reason = "is impossible: negative rainfall"
    return bad, reason
