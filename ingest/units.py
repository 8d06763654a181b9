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
#: DC current above 1.5 x the nameplate power at this voltage is impossible: no PV input
#: delivers full power below ~150 V (common practice); the lower bound is -5 % of that, as power.
I_DC_MIN_V = 150.0

#: Irradiance below this is impossible rather than sensor offset at night (common practice:
#: thermopile pyranometers read a few W/m² negative at night from thermal offset).
IRRADIANCE_MIN_WM2 = -10.0
#: Irradiance above this is impossible: the BSRN "physically possible" upper limit of global
#: irradiance, 1.5 · S0 · cos(zenith)^1.2 + 100 W/m² (Long & Shi 2008, from memory), at the
#: sun overhead with S0 = 1361 W/m² (Kopp & Lean 2011) = 2141.5 W/m². Cloud enhancement of
#: 1500-1800 W/m² in the plane of array is real (Gueymard 2017) and stays well inside it.
IRRADIANCE_MAX_WM2 = 1.5 * 1361.0 + 100.0
#: Power or interval energy above this multiple of the rating is impossible (common practice).
POWER_MAX_FACTOR = 1.5
#: AC or DC power more negative than this share of the rating is more than an inverter's night
#: consumption (auxiliaries, transformer no-load losses: well under 1 % of the rating) can
#: explain (common practice); the analysis filters judge smaller negative values.
POWER_MIN_FRACTION = -0.05
#: Module temperatures outside this range are sensor faults, not weather (common practice).
T_MIN_C, T_MAX_C = -60.0, 100.0
#: Air temperatures outside the world records (-89.2 °C Vostok 1983; 56.7 °C Death Valley 1913,
#: WMO World Weather and Climate Extremes Archive) with a few degrees' margin.
T_AMB_MIN_C, T_AMB_MAX_C = -90.0, 60.0
WIND_MAX_MS = 75.0  # above any recorded surface gust (113 m/s is the record; 75 is common practice)
#: Rain in one interval above the world 24-hour record (1825 mm, Foc-Foc 1966, WMO archive).
RAIN_MAX_MM = 1825.0
#: An energy counter above this many years of the inverter at its full AC rating all day
#: (100 years x 8784 h) cannot be a reading (common practice: guards against 1e308 and garbage).
COUNTER_MAX_YEARS_AT_RATING = 100.0


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
                p_dc_kwp: float | None = None, interval_h: np.ndarray | float | None = None,
                rollover_kwh: float | None = None,
                dc_label: str = "nameplate") -> tuple[np.ndarray, np.ndarray]:
    """Mask of impossible values (already in stored units) and the reason for each (else None).

    Every quantity is bounded in both directions (docs/config.md "Ingest rules"): irradiance
    -10..2141.5 W/m²; AC power -0.05..1.5 × ``p_ac_max_kw``, DC power -0.05..1.5 × ``p_dc_kwp``;
    interval energy 0..1.5 × ``p_ac_max_kw`` × ``interval_h``; counters 0..100 years at the AC
    rating (and below ``rollover_kwh`` when set); module temperature -60..100 °C, air
    temperature -90..60 °C; wind 0..75 m/s; rain 0..1825 mm. Non-finite values (``inf``) are
    the caller's to reject before this check. For an inverter input's DC channels
    ``p_dc_kwp`` is that input's own declared capacity, named by ``dc_label`` in the reason.
    """
    v = np.asarray(values, dtype=float)
    lo = np.full(v.shape, -np.inf)
    hi = np.full(v.shape, np.inf)
    what, unit = quantity, ""
    if quantity in ("poa_wm2", "ghi_wm2"):
        lo[:], hi[:], what, unit = IRRADIANCE_MIN_WM2, IRRADIANCE_MAX_WM2, "irradiance", "W/m²"
    elif quantity == "p_ac_kw" and p_ac_max_kw:
        lo[:], hi[:] = POWER_MIN_FRACTION * p_ac_max_kw, POWER_MAX_FACTOR * p_ac_max_kw
        what, unit = f"AC power (rating {p_ac_max_kw:g} kW)", "kW"
    elif quantity == "p_dc_kw" and p_dc_kwp:
        lo[:], hi[:] = POWER_MIN_FRACTION * p_dc_kwp, POWER_MAX_FACTOR * p_dc_kwp
        what, unit = f"DC power ({dc_label} {p_dc_kwp:g} kWp)", "kW"
    elif quantity == "e_ac_kwh":
        lo[:], what, unit = 0.0, "interval energy", "kWh"
        if p_ac_max_kw and interval_h is not None:
            hi[:] = POWER_MAX_FACTOR * p_ac_max_kw * np.asarray(interval_h, dtype=float)
            what = f"interval energy ({POWER_MAX_FACTOR:g} x rating x interval)"
    elif quantity == "e_ac_total_kwh":
        lo[:], what, unit = 0.0, "energy counter", "kWh"
        if p_ac_max_kw:
            hi[:] = COUNTER_MAX_YEARS_AT_RATING * 8784.0 * p_ac_max_kw
            what = f"energy counter ({COUNTER_MAX_YEARS_AT_RATING:g} years at the rating)"
        if rollover_kwh:
            hi[:] = np.minimum(hi, rollover_kwh)
            what = "energy counter (below counter_rollover_kwh)"
    elif quantity == "t_module_c":
        lo[:], hi[:], what, unit = T_MIN_C, T_MAX_C, "module temperature", "°C"
    elif quantity == "t_amb_c":
        lo[:], hi[:], what, unit = T_AMB_MIN_C, T_AMB_MAX_C, "air temperature", "°C"
    elif quantity == "wind_ms":
        lo[:], hi[:], what, unit = 0.0, WIND_MAX_MS, "wind speed", "m/s"
    elif quantity == "v_dc_v":
        lo[:], hi[:], what, unit = 0.0, V_DC_MAX_V, "DC voltage", "V"
    elif quantity == "i_dc_a" and p_dc_kwp:
        i_max = POWER_MAX_FACTOR * p_dc_kwp * 1000.0 / I_DC_MIN_V
        lo[:], hi[:] = POWER_MIN_FRACTION * i_max, i_max
        what, unit = (f"DC current ({POWER_MAX_FACTOR:g} x {dc_label} {p_dc_kwp:g} kWp at "
                      f"{I_DC_MIN_V:g} V)", "A")
    elif quantity == "rain_mm":
        lo[:], hi[:], what, unit = 0.0, RAIN_MAX_MM, "rainfall", "mm"
    with np.errstate(invalid="ignore"):
        low = v < lo
        high = v > hi
    reasons = np.full(v.shape, None, dtype=object)
    for k in np.flatnonzero(low):
        reasons[k] = f"is impossible: {what} below {lo[k]:.6g} {unit}".rstrip()
    for k in np.flatnonzero(high):
        reasons[k] = f"is impossible: {what} above {hi[k]:.6g} {unit}".rstrip()
    return low | high, reasons
