"""Interval filters applied before PI, PR trends and degradation (IEC 61724-1 filtering practice; common practice).

Every interval gets one **reason code** (:data:`REASONS`); the first failing check in this
order wins, so an interval excluded for two reasons is counted once, under the earlier one:

==  ===================  =====================================================================
 0  ``valid``            passed every check; enters the performance index (pi)
 1  ``night``            solar elevation < 0° (pvlib solar position), or G < 5 W/m²
 2  ``missing``          a needed input (power/energy, POA, module temperature) is missing
 3  ``out_of_range``     G, T_mod, T_amb, wind or P_ac outside its plausible range
 4  ``outage``           P_ac <= 1 % of the AC rating while G >= 50 W/m² (unavailable)
 5  ``clipped``          P_ac >= 0.98 · P_ac,max (inverter at its AC limit; biases PI low), or
                         the expected AC power without the limit >= ``clip_expected_fraction``
                         · P_ac,max (off by default; 0.90 recommended for trends, see below)
 6  ``stuck``            a daytime flat line: >= 4 samples of G or P_ac changing by < 0.1 % of
                         span, or >= 8 samples of T_mod changing by < 0.05 °C
 7  ``low_irradiance``   G < 200 W/m² (low-light, AOI and cosine errors)
 8  ``high_irradiance``  G > 1200 W/m² (cloud enhancement, sensor error)
==  ===================  =====================================================================

Why clipping is also judged from the expected power: a filter on the measured power alone
selects a set of intervals that changes as the array degrades (a degraded array reaches its
AC limit less often, so intervals whose expected power is at the limit enter the index with
measured / capped-expected > the array's true ratio). Year after year more such intervals
enter and the index falls more slowly than the array: an optimistic degradation bias that
grows with the DC/AC ratio and the clearness of the site. Excluding the intervals whose
*unlimited* expected AC power reaches 0.90 of the rating keeps the selection independent of
the array's state for arrays up to ~9 % above their model (measured by the validation
scorecard in tests/validation/, issue #13: year-on-year bias on a clear desert fleet with
DC/AC 1.25-1.38 from +0.14 to -0.01 %/yr). The daily table applies it to a separate index
for trends (``trend_clip_expected_fraction``); in ``pi``, which feeds the underperformance
flags and needs the clear summer hours, it is off by default (``clip_expected_fraction``).

Outage and clipping come before "stuck" because an inverter at 0 kW or at its limit reads
flat by nature. Only ``night`` intervals are left out of the energy PR's intervals
altogether; the others stay in the energy PR (IEC 61724-1) and leave only the PI.

Each threshold is a key of :data:`DEFAULT_FILTERS`; a site overrides any of them in the
``[filters]`` table of its configuration (``SiteConfig.filters``).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from analytics.availability import unavailable_mask
from analytics.temperature import _arr

REASONS: tuple[str, ...] = ("valid", "night", "missing", "out_of_range", "outage", "clipped",
                            "stuck", "low_irradiance", "high_irradiance")
VALID, NIGHT, MISSING, OUT_OF_RANGE, OUTAGE, CLIPPED, STUCK, LOW_IRR, HIGH_IRR = range(9)
#: Reasons that mean the data are incomplete or implausible (they lower a day's coverage);
#: the others are states of the plant or of the sky.
DATA_PROBLEMS: tuple[int, ...] = (MISSING, OUT_OF_RANGE, STUCK)

#: Default thresholds (common practice unless noted; IEC 61724-1); site-configurable.
DEFAULT_FILTERS: dict[str, float] = {
    "night_elevation_deg": 0.0,  # sun below the horizon = night
    "night_poa_wm2": 5.0,  # G below this = night
    "poa_min_wm2": 200.0,  # PI irradiance window, lower end
    "poa_max_wm2": 1200.0,  # PI irradiance window, upper end
    "poa_range_min_wm2": -10.0,  # plausible range of G
    "poa_range_max_wm2": 1500.0,
    "t_module_min_c": -40.0,  # plausible range of T_mod
    "t_module_max_c": 90.0,
    "t_amb_min_c": -40.0,  # plausible range of T_amb
    "t_amb_max_c": 55.0,
    "wind_min_ms": 0.0,  # plausible range of wind speed
    "wind_max_ms": 50.0,
    "p_ac_min_fraction": -0.02,  # plausible P_ac as a fraction of P_ac,max
    "p_ac_max_fraction": 1.05,
    "outage_fraction": 0.01,  # P_ac <= this * P_ac,max with G >= outage_poa_wm2: unavailable
    "outage_poa_wm2": 50.0,  # also the daylight base of availability
    "clip_fraction": 0.98,  # P_ac >= this * P_ac,max: clipped
    # unlimited expected P_ac >= this * P_ac,max: clipped too. Off (10) by default: 0.90 removes
    # the degradation bias described above but leaves too few valid hours on clear summer days
    # for the underperformance flags of high-DC/AC inverters (issue #13; a separate index for
    # trends in the daily table is the way to have both). Sites may set it in [filters].
    "clip_expected_fraction": 10.0,
    # the same rule for the daily index of degradation trends (daily details "trend"), on
    "trend_clip_expected_fraction": 0.90,
    "stuck_samples": 4.0,  # G / P_ac flat-line run length [samples]
    "stuck_rel_tol": 0.001,  # ... with |Δx| below this fraction of the sensor span
    "stuck_t_samples": 8.0,  # T_mod flat-line run length [samples]
    "stuck_t_tol_c": 0.05,  # ... with |ΔT| below this [°C]
    "min_coverage": 0.8,  # day valid when >= this share of its insolation has complete, plausible data
    "min_valid_fraction": 0.5,  # ... and >= this share of its insolation is in valid (pi) intervals
}


def resolve_filters(overrides: dict | None = None) -> dict[str, float]:
    """Defaults updated with a site's ``[filters]`` overrides.

    Raises
    ------
    ValueError
        Naming the configuration key (``filters.<name>``) of an unknown or non-numeric setting.

    Examples
    --------
    >>> resolve_filters({"poa_min_wm2": 150})["poa_min_wm2"]
    150.0
    """
    out = dict(DEFAULT_FILTERS)
    for key, val in (overrides or {}).items():
        if key not in DEFAULT_FILTERS:
            raise ValueError(f"filters.{key}: unknown filter setting; known: "
                             f"{', '.join(sorted(DEFAULT_FILTERS))}")
        if isinstance(val, bool) or not isinstance(val, int | float | np.floating | np.integer):
            raise ValueError(f"filters.{key}: expected a number, got {val!r}")
        out[key] = float(val)
    return out


def _mask_like(mask: np.ndarray, *inputs):
    for x in inputs:
        if isinstance(x, pd.Series):
            return pd.Series(mask, index=x.index)
    if all(np.ndim(x) == 0 for x in inputs):
        return bool(mask)
    return mask


def solar_elevation_deg(ts_utc, latitude_deg: float, longitude_deg: float,
                        altitude_m: float = 0.0, interval_h=None, method: str = "ephemeris"):
    """True solar elevation at each interval's midpoint (pvlib ``get_solarposition``). [°]

    ``method='ephemeris'`` (pvlib's own ephemeris) is about ten times faster than the NREL
    SPA (``'nrel_numpy'``, Reda & Andreas 2004) and within 0.012° of it over five years of
    15-min midpoints at 38.9° N (measured with pvlib 0.16): ample for a day/night test.

    Parameters
    ----------
    ts_utc : DatetimeIndex (tz-aware) or Series of timestamps
        Interval starts.
    interval_h : float, array or None
        Interval length; the position is taken at start + τ/2 (None: at the start). [h]

    Returns
    -------
    Series indexed by ``ts_utc`` (interval start).
    """
    idx = pd.DatetimeIndex(ts_utc)
    if idx.tz is None:
        raise ValueError("ts_utc must be tz-aware (UTC)")
    mid = idx if interval_h is None else idx + pd.to_timedelta(_arr(interval_h) * 3600.0 / 2,
                                                               unit="s")
    if len(idx) == 0:
        return pd.Series([], index=idx, dtype=float)
    import pvlib

    sp = pvlib.solarposition.get_solarposition(mid, latitude_deg, longitude_deg,
                                               altitude=altitude_m, method=method)
    return pd.Series(sp["elevation"].to_numpy(dtype=float), index=idx)


def sun_and_clearsky(ts_utc, latitude_deg: float, longitude_deg: float, altitude_m: float,
                     tilt_deg: float, azimuth_deg: float, albedo: float = 0.2, interval_h=None,
                     method: str = "ephemeris"):
    """Solar elevation [°] and clear-sky POA [W/m²] at interval midpoints, for one site grid.

    Solar position as :func:`solar_elevation_deg` (``method``).

    Clear-sky irradiance from Ineichen & Perez 2002 (``pvlib`` ``Location.get_clearsky``,
    monthly Linke turbidity), transposed to the plane with the isotropic sky model
    (``pvlib.irradiance.get_total_irradiance``). Used only to weight coverage where the
    POA reading is missing, so its few-per-cent bias does not matter. Compute it once per
    site timestamp grid and share it among the site's inverters.

    Returns
    -------
    DataFrame indexed by ``ts_utc`` with columns ``solar_elevation_deg``, ``poa_clearsky_wm2``.
    """
    import pvlib

    idx = pd.DatetimeIndex(ts_utc)
    if idx.tz is None:
        raise ValueError("ts_utc must be tz-aware (UTC)")
    if len(idx) == 0:
        return pd.DataFrame({"solar_elevation_deg": [], "poa_clearsky_wm2": []}, index=idx)
    mid = idx if interval_h is None else idx + pd.to_timedelta(_arr(interval_h) * 1800.0, unit="s")
    sp = pvlib.solarposition.get_solarposition(mid, latitude_deg, longitude_deg,
                                               altitude=altitude_m, method=method)
    loc = pvlib.location.Location(latitude_deg, longitude_deg, "UTC", altitude_m)
    cs = loc.get_clearsky(mid, model="ineichen", solar_position=sp)
    poa = pvlib.irradiance.get_total_irradiance(
        tilt_deg, azimuth_deg, sp["apparent_zenith"], sp["azimuth"], cs["dni"], cs["ghi"],
        cs["dhi"], albedo=albedo, model="isotropic")["poa_global"]
    return pd.DataFrame({"solar_elevation_deg": sp["elevation"].to_numpy(dtype=float),
                         "poa_clearsky_wm2": np.nan_to_num(poa.to_numpy(dtype=float))},
                        index=idx)


def night_mask(solar_elevation_deg, poa_wm2, night_elevation_deg: float = 0.0,
               night_poa_wm2: float = 5.0):
    """True at night: elevation < 0° or G < 5 W/m² (IEC 61724-1 practice). NaN inputs do not make night.

    Examples
    --------
    >>> night_mask([-5.0, 10.0, 10.0, 10.0], [0.0, 3.0, 300.0, float("nan")]).tolist()
    [True, True, False, False]
    """
    m = (_arr(solar_elevation_deg) < night_elevation_deg) | (_arr(poa_wm2) < night_poa_wm2)
    return _mask_like(m, solar_elevation_deg, poa_wm2)


def missing_mask(*inputs):
    """True where any input is NaN (an interval missing a needed input).

    Examples
    --------
    >>> missing_mask([1.0, float("nan")], [2.0, 3.0]).tolist()
    [False, True]
    """
    arrays = np.broadcast_arrays(*(_arr(x) for x in inputs))
    m = np.zeros(arrays[0].shape, dtype=bool)
    for a in arrays:
        m |= ~np.isfinite(a)
    return _mask_like(m, *inputs)


def out_of_range_mask(x, lo: float, hi: float):
    """True where x < lo or x > hi (NaN -> False: missing is a separate reason).

    Examples
    --------
    >>> out_of_range_mask([-20.0, 0.0, 1600.0], -10.0, 1500.0).tolist()
    [True, False, True]
    """
    a = _arr(x)
    return _mask_like((a < lo) | (a > hi), x)


def clipping_mask(p_ac_kw, p_ac_max_kw: float, clip_fraction: float = 0.98):
    """True where P_ac >= ``clip_fraction`` · P_ac,max: the inverter limits its output (IEC 61724-1 practice).

    Examples
    --------
    >>> clipping_mask([50.0, 97.9, 98.0], 100.0).tolist()
    [False, False, True]
    """
    return _mask_like(_arr(p_ac_kw) >= clip_fraction * p_ac_max_kw, p_ac_kw)


def stuck_mask(x, min_samples: int = 4, tol: float = 1.5, run_breaks=None):
    """True for samples inside a flat line: >= ``min_samples`` consecutive samples whose
    successive differences are all below ``tol`` (IEC 61724-1 practice). NaN breaks a run.

    Parameters
    ----------
    x : array or Series
        Samples in time order (set excluded samples, e.g. night, to NaN first).
    min_samples : int, default 4
        Run length that counts as stuck (4 = one hour of 15-min data). [samples]
    tol : float or array like x
        Largest |Δx| that counts as "no change" (an array: the value at the later sample), in the unit of x (0.1 % of span: 1.5 W/m²
        for a 0-1500 W/m² sensor).
    run_breaks : bool array or None
        True where a sample starts a new stretch (e.g. the first daytime sample after a
        night that was cut out): no run continues across it.

    Examples
    --------
    >>> stuck_mask([1.0, 5.0, 5.0, 5.0, 5.0, 7.0], 4, 0.5).tolist()
    [False, True, True, True, True, False]
    """
    a = _arr(x).ravel()
    tol_a = np.asarray(tol, dtype=float)
    flat = np.abs(np.diff(a)) < (tol_a.ravel()[1:] if tol_a.ndim else tol_a)  # NaN -> False
    if run_breaks is not None and a.size > 1:
        flat &= ~np.asarray(run_breaks, dtype=bool).ravel()[1:]
    m = np.zeros(a.shape, dtype=bool)
    if flat.any():
        edges = np.diff(np.concatenate(([0], flat.astype(np.int8), [0])))
        starts, ends = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)  # diff indices
        long = (ends - starts + 1) >= min_samples  # a run of L diffs covers L + 1 samples
        cover = np.zeros(a.size + 1, dtype=np.int64)
        np.add.at(cover, starts[long], 1)
        np.add.at(cover, ends[long] + 1, -1)
        m = np.cumsum(cover[:-1]) > 0
    return _mask_like(m.reshape(np.shape(x)) if np.ndim(x) else m, x)


def classify_intervals(poa_wm2, t_module_c, p_ac_kw, p_ac_max_kw: float, solar_elevation_deg=None,
                       t_amb_c=None, wind_ms=None, filters: dict | None = None, run_breaks=None,
                       p_ac_exp_kw=None):
    """Reason code of each interval (index into :data:`REASONS`; 0 = valid), first failing wins.

    Parameters
    ----------
    poa_wm2, t_module_c, p_ac_kw : array or Series (same length, time order)
        POA irradiance [W/m²], back-of-module temperature [°C], mean AC power [kW].
    p_ac_max_kw : float
        AC rating. [kW]
    solar_elevation_deg : array, Series or None
        Sun elevation (see :func:`solar_elevation_deg`); None: night from G alone. [°]
    t_amb_c, wind_ms : array, Series or None
        Checked for range only when given (they are not needed inputs). [°C], [m/s]
    filters : dict or None
        Overrides of :data:`DEFAULT_FILTERS`.
    run_breaks : bool array or None
        Passed to :func:`stuck_mask` (where the samples given are not contiguous in time).
    p_ac_exp_kw : array, Series or None
        Expected AC power *without* the inverter's limit (``expected_ac_power(...,
        limit=False)``); intervals where it reaches ``clip_expected_fraction`` · P_ac,max are
        ``clipped`` as well, so the selection does not drift as the array degrades. [kW]

    Returns
    -------
    codes : int8 ndarray, or Series with the input's index.

    Examples
    --------
    >>> classify_intervals([0.0, 600.0, 600.0, 100.0], 40.0, [0.0, 0.0, 99.0, 10.0], 100.0).tolist()
    [1, 4, 5, 7]
    """
    f = resolve_filters(filters)
    g = _arr(poa_wm2).ravel()
    n = g.size
    t = np.broadcast_to(_arr(t_module_c), g.shape) if np.ndim(t_module_c) == 0 else _arr(t_module_c)
    p = np.broadcast_to(_arr(p_ac_kw), g.shape) if np.ndim(p_ac_kw) == 0 else _arr(p_ac_kw)
    elev = (np.full(n, 90.0) if solar_elevation_deg is None else _arr(solar_elevation_deg))
    codes = np.zeros(n, dtype=np.int8)

    def assign(mask, code):
        codes[(codes == VALID) & mask] = code

    assign(night_mask(elev, g, f["night_elevation_deg"], f["night_poa_wm2"]), NIGHT)
    assign(missing_mask(g, t, p), MISSING)
    rng = (out_of_range_mask(g, f["poa_range_min_wm2"], f["poa_range_max_wm2"])
           | out_of_range_mask(t, f["t_module_min_c"], f["t_module_max_c"])
           | out_of_range_mask(p, f["p_ac_min_fraction"] * p_ac_max_kw,
                               f["p_ac_max_fraction"] * p_ac_max_kw))
    if t_amb_c is not None:
        rng |= out_of_range_mask(np.broadcast_to(_arr(t_amb_c), g.shape), f["t_amb_min_c"],
                                 f["t_amb_max_c"])
    if wind_ms is not None:
        rng |= out_of_range_mask(np.broadcast_to(_arr(wind_ms), g.shape), f["wind_min_ms"],
                                 f["wind_max_ms"])
    assign(rng, OUT_OF_RANGE)
    assign(unavailable_mask(p, g, p_ac_max_kw, f["outage_fraction"], f["outage_poa_wm2"]), OUTAGE)
    clip = clipping_mask(p, p_ac_max_kw, f["clip_fraction"])
    if p_ac_exp_kw is not None:
        pe = np.broadcast_to(_arr(p_ac_exp_kw), g.shape)
        with np.errstate(invalid="ignore"):
            clip = clip | (pe >= f["clip_expected_fraction"] * p_ac_max_kw)
    assign(clip, CLIPPED)
    day = codes == VALID  # flat lines are looked for in the remaining daytime samples only
    g_span = f["poa_range_max_wm2"] - f["poa_range_min_wm2"]
    p_span = (f["p_ac_max_fraction"] - f["p_ac_min_fraction"]) * p_ac_max_kw
    k = int(f["stuck_samples"])
    rb = run_breaks
    stuck = (stuck_mask(np.where(day, g, np.nan), k, f["stuck_rel_tol"] * g_span, rb)
             | stuck_mask(np.where(day, p, np.nan), k, f["stuck_rel_tol"] * p_span, rb)
             | stuck_mask(np.where(day, t, np.nan), int(f["stuck_t_samples"]), f["stuck_t_tol_c"],
                          rb))
    assign(stuck, STUCK)
    assign(g < f["poa_min_wm2"], LOW_IRR)
    assign(g > f["poa_max_wm2"], HIGH_IRR)
    for x in (poa_wm2, p_ac_kw, t_module_c):
        if isinstance(x, pd.Series):
            return pd.Series(codes, index=x.index)
    return codes


def reason_counts(codes) -> dict[str, int]:
    """Number of intervals per reason name (all reasons listed, zeros included).

    Examples
    --------
    >>> reason_counts([0, 0, 1])["valid"]
    2
    """
    c = np.bincount(np.asarray(codes, dtype=np.int64).ravel(), minlength=len(REASONS))
    return {name: int(c[i]) for i, name in enumerate(REASONS)}


def coverage_fraction(poa_weight_wm2, valid, considered, interval_h=1.0) -> float:
    """Share of the insolation of ``considered`` intervals that falls in ``valid`` ones. [fraction]

    coverage = Σ_valid G τ / Σ_considered G τ, the weight G being measured POA where it is
    plausible (clear-sky POA may stand in where it is missing). NaN when the base is 0.
    The daily table passes as ``valid`` the intervals whose reason is not one of
    :data:`DATA_PROBLEMS` (data coverage).

    Examples
    --------
    >>> coverage_fraction([100.0, 900.0], [False, True], [True, True])
    0.9
    """
    g, v, c, tau = np.broadcast_arrays(_arr(poa_weight_wm2), _arr(valid) > 0, _arr(considered) > 0,
                                       _arr(interval_h))
    w = np.where(np.isfinite(g) & np.isfinite(tau), g * tau, 0.0)
    base = w[c].sum()
    return float(w[c & v].sum() / base) if base > 0 else float("nan")


def day_valid(coverage, min_coverage: float = 0.8):
    """A day enters trends when its coverage >= ``min_coverage`` (80 %, IEC 61724-1 practice). NaN -> False.

    Examples
    --------
    >>> day_valid([0.79, 0.8, float("nan")]).tolist()
    [False, True, False]
    """
    return _mask_like(_arr(coverage) >= min_coverage, coverage)


__all__ = ["REASONS", "DEFAULT_FILTERS", "resolve_filters", "solar_elevation_deg", "night_mask",
           "missing_mask", "out_of_range_mask", "clipping_mask", "stuck_mask",
           "classify_intervals", "reason_counts", "coverage_fraction", "day_valid"]
