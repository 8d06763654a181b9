"""Yields and performance ratios (IEC 61724-1; Dierauf et al. 2013).

Two families of functions:

* interval functions take the readings of a period (G_k, T_k, E_k, τ_k as arrays or Series)
  and return the period's figure as a float; NaN intervals are excluded from numerator
  **and** denominator together (IEC 61724-1:2021; common practice), and an empty or all-NaN period gives NaN;
* ``*_from_sums`` functions take the stored daily sums (``e_ac_kwh``, ``e_ref_kwh``,
  ``e_ref_stc_kwh``, ``e_ref_tcell_kwhc``) of any period — scalars for one period, or
  arrays/Series for many — and return the ratio elementwise. A PR over a week, a month or a
  year is the ratio of the sums of its days, never the mean of daily ratios.

Temperature correction uses the cell temperature throughout (Dierauf et al. 2013 and γ are
defined for the cell; IEC 61724-1 writes the correction with the measured module
temperature — pass that instead as ``t_c`` to reproduce it, the difference is ΔT·G/1000,
at most ~3 °C or ~1 % of PR for open-rack modules).

References
----------
.. [1] IEC 61724-1:2021, Photovoltaic system performance - Part 1: Monitoring.
.. [2] T. Dierauf, A. Growitz, S. Kurtz, J. L. B. Cruz, E. Riley, C. Hansen,
   "Weather-Corrected Performance Ratio," NREL, NREL/TP-5200-57991, 2013, doi:10.2172/1078057.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from analytics.temperature import _arr, _restore_type

G_REF_WM2 = 1000.0  # IEC 61724-1 reference irradiance, 1 kW/m²


# ------------------------------------------------------------ per-interval terms


def reference_energy_kwh(poa_wm2, interval_h, p_dc_kwp: float, g_ref_wm2: float = G_REF_WM2):
    """Per-interval reference energy P0 G_k τ_k / G_ref (the PR denominator term, IEC 61724-1). [kWh]

    Examples
    --------
    >>> reference_energy_kwh(500.0, 0.25, 100.0)  # 100 kWp * 0.5 * 0.25 h
    12.5
    """
    e = p_dc_kwp * _arr(poa_wm2) / g_ref_wm2 * _arr(interval_h)
    return _restore_type(e, poa_wm2, interval_h)


def reference_energy_stc_kwh(poa_wm2, t_c, interval_h, p_dc_kwp: float, gamma_pmp_per_c: float,
                             t_ref_c: float = 25.0, g_ref_wm2: float = G_REF_WM2):
    """Per-interval temperature-corrected reference energy C_k P0 G_k τ_k / G_ref (IEC 61724-1). [kWh]

    C_k = 1 + γ (T_k - T_ref), T_ref = 25 °C for the STC-corrected PR.

    Examples
    --------
    >>> round(reference_energy_stc_kwh(1000.0, 55.0, 1.0, 100.0, -0.004), 6)  # 100 * (1 - 0.12)
    88.0
    """
    c = 1.0 + gamma_pmp_per_c * (_arr(t_c) - t_ref_c)
    e = c * p_dc_kwp * _arr(poa_wm2) / g_ref_wm2 * _arr(interval_h)
    return _restore_type(e, poa_wm2, t_c, interval_h)


def reference_energy_tcell_kwhc(poa_wm2, t_cell_c, interval_h, p_dc_kwp: float,
                                g_ref_wm2: float = G_REF_WM2):
    """Per-interval P0 G_k T_cell,k τ_k / G_ref: the sum that lets any period correct to any T. [kWh·°C]

    Examples
    --------
    >>> reference_energy_tcell_kwhc(1000.0, 50.0, 1.0, 100.0)  # 100 kWh * 50 °C
    5000.0
    """
    e = p_dc_kwp * _arr(poa_wm2) / g_ref_wm2 * _arr(t_cell_c) * _arr(interval_h)
    return _restore_type(e, poa_wm2, t_cell_c, interval_h)


# ------------------------------------------------------------ a period from its intervals


def _valid(*arrays) -> np.ndarray:
    ok = np.ones(np.broadcast_shapes(*(np.shape(a) for a in arrays)), dtype=bool)
    for a in arrays:
        ok &= np.isfinite(a)
    return ok


def _ratio(num: float, den: float) -> float:
    return float(num / den) if den > 0 and np.isfinite(den) else float("nan")


def insolation_kwhm2(poa_wm2, interval_h) -> float:
    """POA insolation H = Σ G_k τ_k / 1000 over the finite intervals (IEC 61724-1). [kWh/m²]

    Examples
    --------
    >>> insolation_kwhm2([1000.0, 500.0], [1.0, 1.0])
    1.5
    """
    g, tau = np.broadcast_arrays(_arr(poa_wm2), _arr(interval_h))
    ok = _valid(g, tau)
    return float(np.sum(g[ok] * tau[ok]) / 1000.0)


def reference_yield_h(poa_wm2, interval_h, g_ref_wm2: float = G_REF_WM2) -> float:
    """Reference yield Y_r = H / G_ref (IEC 61724-1). [h]

    Examples
    --------
    >>> reference_yield_h([1000.0] * 6, [1.0] * 6)  # 6 kWh/m² / 1 kW/m²
    6.0
    """
    return insolation_kwhm2(poa_wm2, interval_h) * 1000.0 / g_ref_wm2


def final_yield_h(e_ac_kwh, p_dc_kwp: float) -> float:
    """Final yield Y_f = E_out / P0 (IEC 61724-1). [h = kWh/kWp]

    Examples
    --------
    >>> final_yield_h(500.0, 100.0)
    5.0
    """
    e = _arr(e_ac_kwh)
    return float(np.nansum(e) / p_dc_kwp) if np.isfinite(e).any() else float("nan")


def performance_ratio(e_ac_kwh, poa_wm2, interval_h, p_dc_kwp: float,
                      g_ref_wm2: float = G_REF_WM2) -> float:
    """IEC 61724-1 performance ratio PR = Y_f / Y_r = Σ E_k / Σ (P0 G_k τ_k / G_ref).

    Parameters
    ----------
    e_ac_kwh : array or Series
        AC energy of each interval. [kWh]
    poa_wm2 : array or Series
        Plane-of-array irradiance of each interval. [W/m²]
    interval_h : float, array or Series
        Interval length τ_k. [h]
    p_dc_kwp : float
        DC nameplate at STC. [kWp]

    Returns
    -------
    pr : float
        Performance ratio [fraction]; NaN when no interval has both energy and irradiance.

    Examples
    --------
    >>> round(performance_ratio([80.0, 42.0], [1000.0, 500.0], 1.0, 100.0), 5)  # 122 / 150
    0.81333
    """
    e, g, tau = np.broadcast_arrays(_arr(e_ac_kwh), _arr(poa_wm2), _arr(interval_h))
    ok = _valid(e, g, tau)
    return _ratio(e[ok].sum(), (p_dc_kwp * g[ok] * tau[ok] / g_ref_wm2).sum())


def performance_ratio_temperature_corrected(e_ac_kwh, poa_wm2, t_c, interval_h, p_dc_kwp: float,
                                            gamma_pmp_per_c: float, t_ref_c: float = 25.0,
                                            g_ref_wm2: float = G_REF_WM2) -> float:
    """Temperature-corrected PR: Σ E_k / Σ (C_k P0 G_k τ_k / G_ref), C_k = 1 + γ (T_k - T_ref).

    With ``t_ref_c = 25`` this is the STC-corrected PR of IEC 61724-1; with ``t_ref_c`` the
    irradiance-weighted mean temperature of a representative year it is IEC 61724-1's
    annual-temperature-equivalent PR.

    Examples
    --------
    >>> # IEC 61724-1 C_k = 1 + γ (T_k − 25): C = [0.88, 0.96]; 122 / (100*1*0.88 + 100*0.5*0.96) = 122 / 136
    >>> round(performance_ratio_temperature_corrected(
    ...     [80.0, 42.0], [1000.0, 500.0], [55.0, 35.0], 1.0, 100.0, -0.004), 5)
    0.89706
    """
    e, g, t, tau = np.broadcast_arrays(_arr(e_ac_kwh), _arr(poa_wm2), _arr(t_c), _arr(interval_h))
    ok = _valid(e, g, t, tau)
    c = 1.0 + gamma_pmp_per_c * (t[ok] - t_ref_c)
    return _ratio(e[ok].sum(), (c * p_dc_kwp * g[ok] * tau[ok] / g_ref_wm2).sum())


def t_cell_typical_c(poa_wm2, t_cell_c, interval_h=1.0) -> float:
    """Irradiance-weighted mean cell temperature T_typ = Σ G T τ / Σ G τ (Dierauf et al. 2013, Eq. 5). [°C]

    Computed from a typical year (TMY or long-term data) for the weather-corrected PR.

    Examples
    --------
    >>> round(t_cell_typical_c([1000.0, 500.0], [55.0, 35.0]), 3)  # (55000 + 17500) / 1500
    48.333
    """
    g, t, tau = np.broadcast_arrays(_arr(poa_wm2), _arr(t_cell_c), _arr(interval_h))
    ok = _valid(g, t, tau)
    w = g[ok] * tau[ok]
    return _ratio((w * t[ok]).sum(), w.sum())


def performance_ratio_weather_corrected(e_ac_kwh, poa_wm2, t_cell_c, interval_h, p_dc_kwp: float,
                                        gamma_pmp_per_c: float, t_cell_typ_c: float | None = None,
                                        g_ref_wm2: float = G_REF_WM2) -> float:
    """Weather-corrected PR (Dierauf et al. 2013, NREL/TP-5200-57991, Eq. 4).

    PR_corr = Σ E_k / Σ [P0 (G_k / G_ref)(1 - γ (T_typ - T_cell,k)) τ_k].

    ``t_cell_typ_c`` is the typical (irradiance-weighted) cell temperature of the site,
    :func:`t_cell_typical_c` of a typical year. When it is None it is taken from the same
    period, and PR_corr then equals the uncorrected PR exactly (the identity noted by
    Anderson 2021), which makes periods comparable only when a common T_typ is passed.

    Examples
    --------
    >>> round(performance_ratio_weather_corrected(
    ...     [80.0, 42.0], [1000.0, 500.0], [55.0, 35.0], 1.0, 100.0, -0.004, 45.0), 5)
    0.82432
    """
    e, g, t, tau = np.broadcast_arrays(_arr(e_ac_kwh), _arr(poa_wm2), _arr(t_cell_c),
                                       _arr(interval_h))
    ok = _valid(e, g, t, tau)
    if t_cell_typ_c is None:
        t_cell_typ_c = t_cell_typical_c(g[ok], t[ok], tau[ok])
    den = p_dc_kwp * g[ok] / g_ref_wm2 * (1.0 - gamma_pmp_per_c * (t_cell_typ_c - t[ok])) * tau[ok]
    return _ratio(e[ok].sum(), den.sum())


# ------------------------------------------------------------ from stored sums


def _ratio_like(num, den, *inputs):
    n, d = _arr(num), _arr(den)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = np.where(d > 0, n / np.where(d > 0, d, 1.0), np.nan)
    return _restore_type(r, *inputs)


def _sum_period(x):
    """Sum of a period (Series/array -> scalar with NaN skipped; all-NaN -> NaN)."""
    a = _arr(x)
    return float(np.nansum(a)) if np.isfinite(a).any() else float("nan")


def pr_from_sums(e_ac_kwh, e_ref_kwh):
    """PR = e_ac_kwh / e_ref_kwh from stored sums (IEC 61724-1), elementwise; NaN when e_ref <= 0.

    Examples
    --------
    >>> round(pr_from_sums(500.0, 600.0), 4)  # IEC 61724-1 PR = Y_f / Y_r: 5.0 h / 6.0 h
    0.8333
    """
    return _ratio_like(e_ac_kwh, e_ref_kwh, e_ac_kwh, e_ref_kwh)


def pr_stc_from_sums(e_ac_kwh, e_ref_stc_kwh):
    """STC-temperature-corrected PR = e_ac_kwh / e_ref_stc_kwh (IEC 61724-1), elementwise.

    Examples
    --------
    >>> round(pr_stc_from_sums(122.0, 136.0), 5)
    0.89706
    """
    return _ratio_like(e_ac_kwh, e_ref_stc_kwh, e_ac_kwh, e_ref_stc_kwh)


def t_cell_typical_from_sums(e_ref_kwh, e_ref_tcell_kwhc):
    """Irradiance-weighted mean cell temperature of a period: Σ e_ref_tcell / Σ e_ref. [°C]

    Pass the days of a typical year (e.g. the first full year of operation, or a TMY run
    through the same temperature model) to get Dierauf's T_cell_typ_avg.

    Examples
    --------
    >>> round(t_cell_typical_from_sums([100.0, 50.0], [5500.0, 1750.0]), 3)
    48.333
    """
    return _ratio_like(_sum_period(e_ref_tcell_kwhc), _sum_period(e_ref_kwh), 0.0)


def pr_wc_from_sums(e_ac_kwh, e_ref_kwh, e_ref_tcell_kwhc, gamma_pmp_per_c: float,
                    t_cell_typ_c=None):
    """Weather-corrected PR from stored sums (Dierauf et al. 2013, Eq. 4), elementwise.

    Σ_k P0 G_k/G_ref τ_k (1 + γ (T_k - T_typ)) = e_ref (1 - γ T_typ) + γ e_ref_tcell, so
    PR_corr = e_ac / (e_ref (1 - γ T_typ) + γ e_ref_tcell). With ``t_cell_typ_c = None`` the
    typical temperature is that of the same sums (then PR_corr = PR, Anderson 2021);
    with ``t_cell_typ_c = 25`` it equals the STC-corrected PR computed with cell temperature.

    Examples
    --------
    >>> # hand-worked Dierauf et al. 2013 example: e_ac 122, e_ref 150, e_ref_tcell 100*55 + 50*35 = 7250
    >>> round(pr_wc_from_sums(122.0, 150.0, 7250.0, -0.004, 45.0), 5)
    0.82432
    """
    if t_cell_typ_c is None:
        t_cell_typ_c = _ratio_like(e_ref_tcell_kwhc, e_ref_kwh, e_ref_kwh)
    den = _arr(e_ref_kwh) * (1.0 - gamma_pmp_per_c * _arr(t_cell_typ_c)) \
        + gamma_pmp_per_c * _arr(e_ref_tcell_kwhc)
    return _ratio_like(e_ac_kwh, den, e_ac_kwh, e_ref_kwh, e_ref_tcell_kwhc)


def period_sums(daily: pd.DataFrame, freq: str | None = None) -> pd.DataFrame:
    """Sum the stored daily columns over periods (``freq`` a pandas offset like 'MS', 'W', 'YS').

    ``daily`` has a ``day`` column or a date index and any of the sum columns
    (``e_ac_kwh, e_ref_kwh, e_ref_stc_kwh, e_ref_tcell_kwhc, e_exp_kwh, e_ac_valid_kwh,
    e_exp_valid_kwh, h_poa_kwhm2``). With ``freq=None`` the whole frame is one period.
    Adds ``pr``, ``pr_stc``, ``pi`` (ratios of the sums). A period sum is NaN only when all
    its days are NaN.

    Examples
    --------
    >>> d = pd.DataFrame({"e_ac_kwh": [400.0, 100.0], "e_ref_kwh": [500.0, 100.0]})
    >>> round(float(period_sums(d)["pr"].iloc[0]), 4)  # 500 / 600
    0.8333
    """
    cols = [c for c in ("e_ac_kwh", "e_ref_kwh", "e_ref_stc_kwh", "e_ref_tcell_kwhc", "e_exp_kwh",
                        "e_ac_valid_kwh", "e_exp_valid_kwh", "h_poa_kwhm2") if c in daily]
    d = daily
    if "day" in d.columns:
        d = d.set_index(pd.DatetimeIndex(pd.to_datetime(d["day"])))
    if freq is None:
        out = d[cols].sum(min_count=1).to_frame().T
    else:
        out = d[cols].resample(freq).sum(min_count=1)
    if "e_ref_kwh" in out:
        out["pr"] = pr_from_sums(out["e_ac_kwh"], out["e_ref_kwh"])
    if "e_ref_stc_kwh" in out:
        out["pr_stc"] = pr_stc_from_sums(out["e_ac_kwh"], out["e_ref_stc_kwh"])
    if "e_exp_valid_kwh" in out:
        out["pi"] = pr_from_sums(out["e_ac_valid_kwh"], out["e_exp_valid_kwh"])
    return out
