"""Expected power: PVWatts linear DC model and inverter efficiency curve (Dobos 2014).

The DC model takes the irradiance the cells actually use. When POA comes from a crystalline
silicon **reference cell** in the module plane, that cell already sees the modules' angle of
incidence (glass reflection) and, to first order, their spectral response, so no AOI or
spectral correction is applied. A **thermopile pyranometer** is spectrally flat and has no
glass reflection loss, so it reads more than the modules can use at large angles of incidence;
multiply its POA by an incidence-angle modifier (e.g. ``pvlib.iam.ashrae``, b0 = 0.05) before
calling :func:`dc_power_pvwatts` if the expected power must match the module. PRs computed
from the two sensor types differ by a few per cent (Dunn, Gostein, Emery 2012, NREL/CP-5200-55487), so
the sensor type is kept with the results.

References
----------
.. [1] A. P. Dobos, "PVWatts Version 5 Manual," NREL, NREL/TP-6A20-62641, 2014,
   doi:10.2172/1158421.
"""

from __future__ import annotations

import numpy as np

from analytics.temperature import _arr, _restore_type


def dc_power_pvwatts(poa_wm2, t_cell_c, p_dc_kwp: float, gamma_pmp_per_c: float,
                     t_ref_c: float = 25.0, g_ref_wm2: float = 1000.0):
    """Expected DC power from the linear irradiance-temperature model (Dobos 2014, PVWatts V5).

    Parameters
    ----------
    poa_wm2 : scalar, array or Series
        Irradiance the cells use (reference-cell POA, or pyranometer POA times an IAM). [W/m²]
    t_cell_c : scalar, array or Series
        Cell temperature. [°C]
    p_dc_kwp : float
        DC nameplate at STC, P_dc0. [kWp]
    gamma_pmp_per_c : float
        Max-power temperature coefficient γ, negative for c-Si (-0.0035 for -0.35 %/°C). [1/°C]
    t_ref_c : float, default 25.0
        Reference cell temperature (STC, IEC 60904-3). [°C]
    g_ref_wm2 : float, default 1000.0
        Reference irradiance (STC). [W/m²]

    Returns
    -------
    p_dc_exp_kw : same type as the inputs
        Expected DC power. [kW]

    Notes
    -----
    P_dc = P_dc0 (G / 1000) (1 + γ (T_cell - 25 °C))   (Dobos 2014, Eq. 2; as
    ``pvlib.pvsystem.pvwatts_dc``). Negative irradiance gives 0 kW.

    Examples
    --------
    >>> round(dc_power_pvwatts(800.0, 50.0, 100.0, -0.0035), 6)  # 100 * 0.8 * (1 - 0.0875)
    73.0
    """
    g = _arr(poa_wm2)
    p = p_dc_kwp * np.where(g < 0, 0.0, g) / g_ref_wm2 * (
        1.0 + gamma_pmp_per_c * (_arr(t_cell_c) - t_ref_c))
    return _restore_type(p, poa_wm2, t_cell_c)


def ac_power_pvwatts(p_dc_kw, p_ac_max_kw: float, eta_inv_nom: float = 0.96,
                     eta_inv_ref: float = 0.9637, *, limit: bool = True):
    """Expected AC power through the PVWatts inverter curve, limited to the AC rating (Dobos 2014).

    Parameters
    ----------
    p_dc_kw : scalar, array or Series
        DC input power. [kW]
    p_ac_max_kw : float
        AC power rating of the inverter, P_ac0. [kW]
    eta_inv_nom : float, default 0.96
        Nominal inverter efficiency (PVWatts default). [-]
    eta_inv_ref : float, default 0.9637
        Reference efficiency of the CEC curve used by PVWatts. [-]
    limit : bool, default True
        Cap at the AC rating. ``False`` gives what the inverter would deliver without its
        limit, which tells the filters where clipping can occur whatever the array's state.

    Returns
    -------
    p_ac_exp_kw : same type as the input
        Expected AC power, 0 <= P_ac <= P_ac0. [kW]

    Notes
    -----
    ζ = P_dc / P_dc0 with P_dc0 = P_ac0 / η_nom;
    η = (η_nom / η_ref)(-0.0162 ζ - 0.0059 / ζ + 0.9858); P_ac = min(η P_dc, P_ac0), >= 0
    (Dobos 2014, Eqs. 6-7; as ``pvlib.inverter.pvwatts(pdc, pdc0, eta_inv_nom, eta_inv_ref)``).

    Examples
    --------
    >>> round(ac_power_pvwatts(100.0, 96.0), 4)  # ζ = 1: η = 0.96/0.9637 * 0.9637 = 0.96
    96.0
    """
    pdc = _arr(p_dc_kw)
    pdc0 = p_ac_max_kw / eta_inv_nom
    zeta = pdc / pdc0
    with np.errstate(divide="ignore", invalid="ignore"):
        inv = np.where(pdc != 0, 0.0059 / np.where(zeta == 0, 1.0, zeta), 0.0)
    eta = eta_inv_nom / eta_inv_ref * (-0.0162 * zeta - inv + 0.9858)
    pac = np.maximum(0.0, np.minimum(p_ac_max_kw, eta * pdc) if limit else eta * pdc)  # NaN propagates
    return _restore_type(pac, p_dc_kw)


def expected_ac_power(poa_wm2, t_cell_c, p_dc_kwp: float, gamma_pmp_per_c: float,
                      p_ac_max_kw: float, eta_inv_nom: float = 0.96, *, limit: bool = True):
    """Expected AC power: :func:`dc_power_pvwatts` then :func:`ac_power_pvwatts` (Dobos 2014).

    Returns the expected AC power [kW] with the type of the inputs.

    Examples
    --------
    >>> round(expected_ac_power(1000.0, 25.0, 100.0, -0.004, 96.0), 4)  # STC: P_dc = 100 kW
    96.0
    """
    p_dc = dc_power_pvwatts(poa_wm2, t_cell_c, p_dc_kwp, gamma_pmp_per_c)
    return _restore_type(_arr(ac_power_pvwatts(p_dc, p_ac_max_kw, eta_inv_nom, limit=limit)),
                         poa_wm2, t_cell_c)
