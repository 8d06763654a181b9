"""Cell and module temperature models: Sandia (King et al. 2004) and Faiman (2008).

Functions take scalars, ndarrays or Series and return the same type (a Series keeps its
index); NaN in gives NaN out. Negative irradiance (thermopile night offsets) is treated as
0 W/m² (common practice), so a model never cools a module below its input temperature.

References
----------
.. [1] D. L. King, W. E. Boyson, J. A. Kratochvil, "Photovoltaic Array Performance Model,"
   Sandia National Laboratories, SAND2004-3535, 2004, doi:10.2172/919131.
.. [2] D. Faiman, "Assessing the outdoor operating temperature of photovoltaic modules,"
   Prog. Photovolt. 16(4):307-315, 2008, doi:10.1002/pip.813.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

#: Sandia module-temperature coefficients a, b [s/m] and the cell - back-of-module
#: difference ΔT [°C] at 1000 W/m², by module construction and mounting: King et al. 2004,
#: SAND2004-3535, Table 1 (the first four keys are those of
#: ``pvlib.temperature.TEMPERATURE_MODEL_PARAMETERS['sapm']``).
SAPM_PARAMETERS: dict[str, dict[str, float]] = {
    "open_rack_glass_glass": {"a": -3.47, "b": -0.0594, "delta_t_c": 3.0},
    "close_mount_glass_glass": {"a": -2.98, "b": -0.0471, "delta_t_c": 1.0},
    "open_rack_glass_polymer": {"a": -3.56, "b": -0.0750, "delta_t_c": 3.0},
    "insulated_back_glass_polymer": {"a": -2.81, "b": -0.0455, "delta_t_c": 0.0},
    "open_rack_polymer_thinfilm_steel": {"a": -3.58, "b": -0.113, "delta_t_c": 3.0},
    "tracker_22x_concentrator": {"a": -3.23, "b": -0.130, "delta_t_c": 13.0},
}


def sapm_parameters(mounting: str) -> dict[str, float]:
    """Sandia coefficients ``{'a', 'b', 'delta_t_c'}`` for a mounting key (King et al. 2004, Table 1).

    Raises
    ------
    ValueError
        If ``mounting`` is not a key of :data:`SAPM_PARAMETERS`.
    """
    try:
        return dict(SAPM_PARAMETERS[mounting])
    except KeyError:
        raise ValueError(f"unknown mounting {mounting!r}; expected one of "
                         f"{', '.join(SAPM_PARAMETERS)}") from None


def _restore_type(values, *inputs):
    """Return ``values`` as the type of the inputs: Series (first Series' index), float or array."""
    for x in inputs:
        if isinstance(x, pd.Series):
            return pd.Series(np.asarray(values, dtype=float), index=x.index)
    if all(np.ndim(x) == 0 for x in inputs):
        return float(np.asarray(values))
    return np.asarray(values, dtype=float)


def _arr(x) -> np.ndarray:
    return np.asarray(x, dtype=float)


def _poa(poa_wm2) -> np.ndarray:
    g = _arr(poa_wm2)
    return np.where(g < 0, 0.0, g)  # NaN stays NaN (NaN < 0 is False)


def cell_temperature_from_module(t_module_c, poa_wm2, delta_t_c: float = 3.0,
                                 irrad_ref_wm2: float = 1000.0):
    """Cell temperature from measured back-of-module temperature (King et al. 2004, Eq. 12).

    Parameters
    ----------
    t_module_c : scalar, array or Series
        Back-of-module temperature. [°C]
    poa_wm2 : scalar, array or Series
        Plane-of-array irradiance E; negative values count as 0. [W/m²]
    delta_t_c : float, default 3.0
        Cell - back-of-module difference at ``irrad_ref_wm2``; 3 °C for open-rack glass/polymer
        (King et al. 2004, Table 1; see :data:`SAPM_PARAMETERS`). [°C]
    irrad_ref_wm2 : float, default 1000.0
        Reference irradiance E0. [W/m²]

    Returns
    -------
    t_cell_c : same type as the inputs
        Cell temperature. [°C]

    Notes
    -----
    T_c = T_m + (E / E0) ΔT   (SAND2004-3535, Eq. 12). Use with measured back-of-module
    temperature averaged over >= 15 min, as the module lags irradiance by minutes.

    Examples
    --------
    >>> cell_temperature_from_module(45.0, 800.0, delta_t_c=3.0)  # 45 + 0.8 * 3
    47.4
    """
    t = _arr(t_module_c) + _poa(poa_wm2) / irrad_ref_wm2 * delta_t_c
    return _restore_type(t, t_module_c, poa_wm2)


def module_temperature_sandia(poa_wm2, t_amb_c, wind_ms, a: float = -3.56, b: float = -0.0750):
    """Back-of-module temperature from ambient temperature and wind (King et al. 2004, Eq. 11).

    Parameters
    ----------
    poa_wm2 : scalar, array or Series
        Plane-of-array irradiance E; negative values count as 0. [W/m²]
    t_amb_c : scalar, array or Series
        Ambient air temperature. [°C]
    wind_ms : scalar, array or Series
        Wind speed at 10 m height. [m/s]
    a, b : float
        Coefficients [-] and [s/m]; defaults are open-rack glass/polymer (King et al. 2004,
        Table 1).

    Returns
    -------
    t_module_c : same type as the inputs
        Back-of-module temperature. [°C]

    Notes
    -----
    T_m = E exp(a + b WS) + T_a   (SAND2004-3535, Eq. 11).

    Examples
    --------
    >>> round(module_temperature_sandia(1000.0, 25.0, 1.0), 3)  # 1000 e^(-3.635) + 25
    51.384
    """
    t = _poa(poa_wm2) * np.exp(a + b * _arr(wind_ms)) + _arr(t_amb_c)
    return _restore_type(t, poa_wm2, t_amb_c, wind_ms)


def cell_temperature_sandia(poa_wm2, t_amb_c, wind_ms, a: float = -3.56, b: float = -0.0750,
                            delta_t_c: float = 3.0, irrad_ref_wm2: float = 1000.0):
    """Cell temperature from ambient temperature and wind: King et al. 2004, Eq. 11 then Eq. 12.

    Parameters are those of :func:`module_temperature_sandia` and
    :func:`cell_temperature_from_module`. Returns the cell temperature [°C].

    Examples
    --------
    >>> round(cell_temperature_sandia(1000.0, 25.0, 1.0), 3)  # 51.384 + 3
    54.384
    """
    t_m = module_temperature_sandia(poa_wm2, t_amb_c, wind_ms, a=a, b=b)
    t = _arr(t_m) + _poa(poa_wm2) / irrad_ref_wm2 * delta_t_c
    return _restore_type(t, poa_wm2, t_amb_c, wind_ms)


def cell_temperature_faiman(poa_wm2, t_amb_c, wind_ms=1.0, u0: float = 25.0, u1: float = 6.84):
    """Module (≈ cell) temperature from ambient temperature and wind (Faiman 2008).

    Parameters
    ----------
    poa_wm2 : scalar, array or Series
        Plane-of-array irradiance E; negative values count as 0. [W/m²]
    t_amb_c : scalar, array or Series
        Ambient air temperature. [°C]
    wind_ms : scalar, array or Series, default 1.0
        Wind speed at the height where U1 was fitted. [m/s]
    u0 : float, default 25.0
        Constant heat-loss factor (Faiman 2008, 7 c-Si modules, open rack). [W/(m²·K)]
    u1 : float, default 6.84
        Wind heat-loss factor (Faiman 2008). [W·s/(m³·K)]

    Returns
    -------
    t_cell_c : same type as the inputs
        Module temperature; the model makes no cell/module distinction (adopted in IEC 61853). [°C]

    Notes
    -----
    T = T_a + E / (U0 + U1 WS).

    Examples
    --------
    >>> round(cell_temperature_faiman(1000.0, 25.0, 1.0), 3)  # 25 + 1000 / 31.84
    56.407
    """
    t = _arr(t_amb_c) + _poa(poa_wm2) / (u0 + u1 * _arr(wind_ms))
    return _restore_type(t, poa_wm2, t_amb_c, wind_ms)


def cell_temperature_best_available(poa_wm2, t_module_c, t_amb_c, wind_ms, a: float = -3.56,
                                    b: float = -0.0750, delta_t_c: float = 3.0) -> np.ndarray:
    """Cell temperature from the best input each interval has (issue #11).

    1. a back-of-module reading: King et al. 2004, Eq. 12;
    2. else ambient temperature and wind: module temperature by King et al. 2004, Eq. 11,
       then Eq. 12;
    3. else ambient temperature alone: Faiman (2008) at an assumed 1 m/s wind.
    NaN where none of these exists. Negative irradiance counts as 0. Arrays of one length
    (the coefficients may be per row). [°C]

    Examples
    --------
    >>> import numpy as np
    >>> t = cell_temperature_best_available([1000.0] * 3, [50.0, np.nan, np.nan],
    ...                                     [25.0, 25.0, 25.0], [1.0, 1.0, np.nan])
    >>> [round(float(x), 3) for x in t]  # Eq. 12; Eq. 11 + 12 (51.384 + 3); Faiman at 1 m/s
    [53.0, 54.384, 56.407]
    """
    g = np.maximum(_arr(poa_wm2), 0.0)
    t_meas = _arr(t_module_c)
    t_sandia = module_temperature_sandia(g, _arr(t_amb_c), _arr(wind_ms), a=a, b=b)
    t_mod = np.where(np.isfinite(t_meas), t_meas, t_sandia)
    return np.where(np.isfinite(t_mod), cell_temperature_from_module(t_mod, g, delta_t_c),
                    cell_temperature_faiman(g, _arr(t_amb_c), 1.0))
