"""Irradiance in an array's plane: sun geometry, single-axis trackers, decomposition, transposition.

Thin, documented wrappers over pvlib with the published models named in each function:

* solar position: :func:`pvlib.solarposition.get_solarposition` at interval midpoints, its
  fast ``ephemeris`` method for the daily job and NREL SPA (Reda & Andreas 2004) for the
  clear-sky cross-checks;
* single-axis tracker rotation with optional backtracking: Marion & Dobos (2013),
  NREL/TP-6A20-58891, :func:`pvlib.tracking.singleaxis`;
* GHI -> DNI/DHI: DIRINT, Perez, Ineichen, Maxwell, Seals & Zelenka (1992), "Dynamic
  global-to-direct irradiance conversion models", ASHRAE Trans. 98(1) 354-369,
  :func:`pvlib.irradiance.dirint` (the default: it uses the sun height and the variability
  of the clearness index, and on the demo site halves the winter error of Erbs); or Erbs,
  Klein & Duffie (1982), Solar Energy 28(4) 293-302, doi:10.1016/0038-092X(82)90302-4,
  :func:`pvlib.irradiance.erbs`;
* POA of one plane -> GHI/DNI/DHI: GTI-DIRINT, Marion (2015), Solar Energy 122, 1037-1046,
  doi:10.1016/j.solener.2015.10.024, :func:`pvlib.irradiance.gti_dirint`;
* sky-diffuse transposition: Perez et al. (1990), Solar Energy 44(5) 271-289,
  doi:10.1016/0038-092X(90)90055-H (``allsitescomposite1990`` coefficients), with isotropic
  ground reflection, :func:`pvlib.irradiance.get_total_irradiance`;
* clear sky (for coverage weights and clear-sky cross-checks only): Ineichen & Perez (2002)
  with the Linke turbidity climatology, :meth:`pvlib.location.Location.get_clearsky`.

The functions take arrays aligned with one timestamp grid and return numpy arrays; NaN in
gives NaN out (or 0 W/m² where the sun is below the horizon). A plane is any object with
the attributes of :class:`ingest.site_model.Plane` (``kind``, ``tilt_deg``, ``azimuth_deg``
and, for ``kind == 'single_axis'``, ``axis_tilt_deg``, ``axis_azimuth_deg``,
``max_angle_deg``, ``backtrack``, ``gcr``).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pvlib

#: pvlib's Perez coefficient set used for every transposition here (Perez et al. 1990).
PEREZ_MODEL = "allsitescomposite1990"


def sun_geometry(ts_utc, latitude_deg: float, longitude_deg: float, altitude_m: float = 0.0,
                 interval_h=None, solar_position_method: str = "ephemeris") -> pd.DataFrame:
    """Sun position, extraterrestrial DNI and clear-sky irradiance at interval midpoints.

    Parameters
    ----------
    ts_utc : DatetimeIndex
        Interval starts, tz-aware.
    interval_h : array or float, optional
        Interval lengths [h]; the geometry is taken at ``ts + interval_h/2``.
    solar_position_method : str, default 'ephemeris'
        :func:`pvlib.solarposition.get_solarposition` method: ``ephemeris`` (fast; the daily
        job) or ``nrel_numpy`` (NREL SPA, Reda & Andreas 2004; the clear-sky cross-checks).

    Returns
    -------
    DataFrame indexed like ``ts_utc`` with ``zenith_deg`` (true), ``apparent_zenith_deg``,
    ``sun_azimuth_deg``, ``elevation_deg`` (apparent) [°], ``dni_extra_wm2``, and the
    Ineichen clear-sky ``ghi_cs_wm2``, ``dni_cs_wm2``, ``dhi_cs_wm2`` [W/m²].
    """
    idx = pd.DatetimeIndex(ts_utc)
    if idx.tz is None:
        raise ValueError("ts_utc must be tz-aware (UTC)")
    mid = idx if interval_h is None else idx + pd.to_timedelta(
        np.broadcast_to(np.asarray(interval_h, dtype=float), (len(idx),)) * 1800.0, unit="s")
    cols = ("zenith_deg", "apparent_zenith_deg", "sun_azimuth_deg", "elevation_deg",
            "dni_extra_wm2", "ghi_cs_wm2", "dni_cs_wm2", "dhi_cs_wm2")
    if len(idx) == 0:
        return pd.DataFrame({c: np.zeros(0) for c in cols}, index=idx)
    sp = pvlib.solarposition.get_solarposition(mid, latitude_deg, longitude_deg,
                                               altitude=altitude_m, method=solar_position_method)
    loc = pvlib.location.Location(latitude_deg, longitude_deg, "UTC", altitude_m)
    cs = loc.get_clearsky(mid, model="ineichen", solar_position=sp)
    return pd.DataFrame({
        "zenith_deg": sp["zenith"].to_numpy(float),
        "apparent_zenith_deg": sp["apparent_zenith"].to_numpy(float),
        "sun_azimuth_deg": sp["azimuth"].to_numpy(float),
        "elevation_deg": sp["apparent_elevation"].to_numpy(float),
        "dni_extra_wm2": np.asarray(pvlib.irradiance.get_extra_radiation(mid), dtype=float),
        "ghi_cs_wm2": cs["ghi"].to_numpy(float), "dni_cs_wm2": cs["dni"].to_numpy(float),
        "dhi_cs_wm2": cs["dhi"].to_numpy(float)}, index=idx)


def tracker_orientation(apparent_zenith_deg, sun_azimuth_deg, *, axis_tilt_deg: float = 0.0,
                        axis_azimuth_deg: float = 180.0, max_angle_deg: float = 60.0,
                        backtrack: bool = True, gcr: float = 0.35):
    """Surface tilt and azimuth [°] of a single-axis tracker (Marion & Dobos 2013).

    :func:`pvlib.tracking.singleaxis` with the given axis, rotation limit, backtracking and
    ground coverage ratio. With the sun below the horizon pvlib returns NaN; the tracker is
    then taken as stowed flat (tilt 0°), which receives no beam at night anyway.

    Returns
    -------
    (surface_tilt_deg, surface_azimuth_deg, rotation_deg) : ndarrays [°]

    Examples
    --------
    Sun at the zenith: the tracker lies flat.

    >>> t, a, r = tracker_orientation([0.0], [180.0])
    >>> float(t[0]), float(r[0])
    (0.0, 0.0)
    """
    z = np.asarray(apparent_zenith_deg, dtype=float)
    az = np.asarray(sun_azimuth_deg, dtype=float)
    tr = pvlib.tracking.singleaxis(z, az, axis_tilt=axis_tilt_deg, axis_azimuth=axis_azimuth_deg,
                                   max_angle=max_angle_deg, backtrack=backtrack, gcr=gcr)
    tilt = np.asarray(tr["surface_tilt"], dtype=float)
    azim = np.asarray(tr["surface_azimuth"], dtype=float)
    rot = np.asarray(tr["tracker_theta"], dtype=float)
    night = ~np.isfinite(tilt)
    return (np.where(night, 0.0, tilt), np.where(night, axis_azimuth_deg, azim),
            np.where(night, 0.0, rot))


def plane_orientation(plane, geometry: pd.DataFrame):
    """Surface tilt and azimuth [°] of ``plane`` for each row of :func:`sun_geometry`."""
    n = len(geometry)
    if getattr(plane, "kind", "fixed") == "single_axis":
        t, a, _r = tracker_orientation(
            geometry["apparent_zenith_deg"].to_numpy(), geometry["sun_azimuth_deg"].to_numpy(),
            axis_tilt_deg=plane.axis_tilt_deg, axis_azimuth_deg=plane.axis_azimuth_deg,
            max_angle_deg=plane.max_angle_deg, backtrack=plane.backtrack, gcr=plane.gcr)
        return t, a
    return np.full(n, float(plane.tilt_deg)), np.full(n, float(plane.azimuth_deg))


def decompose_erbs(ghi_wm2, geometry: pd.DataFrame):
    """DNI and DHI [W/m²] from GHI by the Erbs et al. (1982) diffuse-fraction correlation.

    :func:`pvlib.irradiance.erbs` on the true zenith; negative GHI is taken as 0.

    Returns
    -------
    (dni_wm2, dhi_wm2) : ndarrays
    """
    ghi = np.clip(np.asarray(ghi_wm2, dtype=float), 0.0, None)
    out = pvlib.irradiance.erbs(ghi, geometry["zenith_deg"].to_numpy(),
                                geometry.index.dayofyear.to_numpy())
    return np.asarray(out["dni"], dtype=float), np.asarray(out["dhi"], dtype=float)


def decompose_dirint(ghi_wm2, geometry: pd.DataFrame):
    """DNI and DHI [W/m²] from GHI by DIRINT (Perez et al. 1992), DHI by closure.

    :func:`pvlib.irradiance.dirint` on the true zenith at standard pressure, with the
    clearness-index variability term (``use_delta_kt_prime``; neighbouring rows of the
    grid); ``DHI = GHI - DNI cos z``. Negative GHI is taken as 0; NaN GHI gives NaN.

    Returns
    -------
    (dni_wm2, dhi_wm2) : ndarrays
    """
    ghi = np.clip(np.asarray(ghi_wm2, dtype=float), 0.0, None)
    z = geometry["zenith_deg"].to_numpy()
    s = pd.Series(ghi, index=geometry.index)
    dni = np.array(pvlib.irradiance.dirint(s, z, geometry.index), dtype=float)
    # a reading without both neighbours (gaps, grid edges) has no variability term: DIRINT
    # without it (Perez et al. 1992 define that case) rather than no beam at all
    lone = ~np.isfinite(dni) & np.isfinite(ghi) & (z < 90)
    if lone.any():
        alone = pvlib.irradiance.dirint(s[lone], z[lone], geometry.index[lone],
                                        use_delta_kt_prime=False)
        dni[lone] = np.asarray(alone, dtype=float)
    dni = np.where(np.isfinite(ghi), np.nan_to_num(dni), np.nan)
    cosz = np.clip(np.cos(np.radians(z)), 0.0, None)
    return dni, np.clip(ghi - dni * cosz, 0.0, None)


def transpose_perez(surface_tilt_deg, surface_azimuth_deg, ghi_wm2, dni_wm2, dhi_wm2,
                    geometry: pd.DataFrame, albedo: float = 0.2):
    """POA global irradiance [W/m²]: Perez et al. (1990) sky diffuse + beam + isotropic ground.

    :func:`pvlib.irradiance.get_total_irradiance` with ``model='perez'`` and the
    ``allsitescomposite1990`` coefficients, on the apparent zenith (as pvlib's ModelChain
    does). Below the horizon the result is 0.
    """
    am = pvlib.atmosphere.get_relative_airmass(geometry["apparent_zenith_deg"].to_numpy())
    poa = pvlib.irradiance.get_total_irradiance(
        surface_tilt_deg, surface_azimuth_deg, geometry["apparent_zenith_deg"].to_numpy(),
        geometry["sun_azimuth_deg"].to_numpy(), np.asarray(dni_wm2, dtype=float),
        np.asarray(ghi_wm2, dtype=float), np.asarray(dhi_wm2, dtype=float),
        dni_extra=geometry["dni_extra_wm2"].to_numpy(), airmass=am, albedo=albedo,
        model="perez", model_perez=PEREZ_MODEL)["poa_global"]
    g = np.asarray(poa, dtype=float)
    up = geometry["apparent_zenith_deg"].to_numpy() < 90.0
    nan_in = ~np.isfinite(np.asarray(ghi_wm2, dtype=float))
    return np.where(~up, 0.0, np.where(nan_in, np.nan, np.nan_to_num(g)))


def poa_from_ghi(ghi_wm2, plane, geometry: pd.DataFrame, albedo: float = 0.2,
                 decomposition: str = "dirint"):
    """Array-plane irradiance [W/m²] from a horizontal sensor: DIRINT (Perez et al. 1992, the
    default) or Erbs (1982) decomposition, then Perez (1990) transposition.

    Examples
    --------
    A horizontal "plane" gives back the GHI itself (beam and sky diffuse recombine):

    >>> import pandas as pd
    >>> from types import SimpleNamespace
    >>> geo = sun_geometry(pd.DatetimeIndex(["2024-06-21 11:00"], tz="UTC"), 40.0, 0.0)
    >>> flat = SimpleNamespace(kind="fixed", tilt_deg=0.0, azimuth_deg=180.0)
    >>> round(float(poa_from_ghi([800.0], flat, geo)[0]))  # 800.0x: true vs apparent zenith
    800
    """
    ghi = np.asarray(ghi_wm2, dtype=float)
    if decomposition not in ("dirint", "erbs"):
        raise ValueError(f"decomposition must be 'dirint' or 'erbs', got {decomposition!r}")
    dni, dhi = (decompose_dirint if decomposition == "dirint" else decompose_erbs)(ghi, geometry)
    tilt, azim = plane_orientation(plane, geometry)
    return transpose_perez(tilt, azim, np.clip(ghi, 0.0, None), dni, dhi, geometry, albedo)


def components_from_poa(poa_wm2, sensor_plane, geometry: pd.DataFrame, albedo: float = 0.2):
    """GHI, DNI, DHI [W/m²] from a POA reading of ``sensor_plane``: GTI-DIRINT (Marion 2015).

    :func:`pvlib.irradiance.gti_dirint` (Perez transposition inside, ``allsitescomposite1990``,
    standard pressure, at most 30 iterations). Rows where it does not converge keep pvlib's
    best iterate (pvlib's warning is silenced here); rows pvlib returns as NaN stay NaN.
    """
    g = np.clip(np.asarray(poa_wm2, dtype=float), 0.0, None)
    tilt, azim = plane_orientation(sensor_plane, geometry)
    aoi = pvlib.irradiance.aoi(tilt, azim, geometry["zenith_deg"].to_numpy(),
                               geometry["sun_azimuth_deg"].to_numpy())
    with warnings.catch_warnings():  # pvlib warns of rows not converged; it returns its best
        warnings.filterwarnings("ignore", message=".*failed to converge.*")
        out = pvlib.irradiance.gti_dirint(
            pd.Series(g, index=geometry.index),
            pd.Series(np.asarray(aoi, float), index=geometry.index),
            geometry["zenith_deg"], geometry["sun_azimuth_deg"], geometry.index,
            pd.Series(tilt, index=geometry.index), pd.Series(azim, index=geometry.index),
            albedo=albedo, model="perez", model_perez=PEREZ_MODEL)
    return (out["ghi"].to_numpy(float), out["dni"].to_numpy(float), out["dhi"].to_numpy(float))


def poa_from_other_plane(poa_wm2, sensor_plane, plane, geometry: pd.DataFrame,
                         albedo: float = 0.2):
    """Array-plane irradiance [W/m²] from a POA sensor in another plane.

    The reading is inverted to GHI/DNI/DHI with GTI-DIRINT (Marion 2015) and transposed to
    ``plane`` with Perez (1990): the same sky model both ways, so a sensor in the array's
    own plane would come back unchanged up to GTI-DIRINT's convergence tolerance.
    """
    ghi, dni, dhi = components_from_poa(poa_wm2, sensor_plane, geometry, albedo)
    tilt, azim = plane_orientation(plane, geometry)
    out = transpose_perez(tilt, azim, ghi, dni, dhi, geometry, albedo)
    return np.where(np.isfinite(np.asarray(poa_wm2, dtype=float)), out, np.nan)


def poa_clearsky(plane, geometry: pd.DataFrame, albedo: float = 0.2,
                 model: str = "isotropic"):
    """Clear-sky POA [W/m²] of ``plane`` (Ineichen clear sky; fixed plane or single-axis tracker).

    ``model`` is the sky-diffuse transposition of
    :func:`pvlib.irradiance.get_total_irradiance`: ``isotropic`` (the default, as
    :func:`analytics.filters.sun_and_clearsky`; coverage weights), ``haydavies`` (Hay & Davies
    1980) or ``perez`` (Perez et al. 1990, ``allsitescomposite1990``), both on the
    extraterrestrial DNI of ``geometry`` (the clear-sky cross-checks). A tracker's surface
    follows :func:`tracker_orientation` (Marion & Dobos 2013). Used only for coverage
    weights and clear-sky cross-checks, never as a PR source.

    Examples
    --------
    A horizontal plane receives the clear-sky GHI (any model):

    >>> import pandas as pd
    >>> from types import SimpleNamespace
    >>> geo = sun_geometry(pd.DatetimeIndex(["2024-06-21 11:00"], tz="UTC"), 40.0, 0.0)
    >>> flat = SimpleNamespace(kind="fixed", tilt_deg=0.0, azimuth_deg=180.0)
    >>> bool(abs(poa_clearsky(flat, geo, model="haydavies")[0] - geo["ghi_cs_wm2"].iloc[0]) < 1e-6)
    True
    """
    if model not in ("isotropic", "haydavies", "perez"):
        raise ValueError(f"model must be 'isotropic', 'haydavies' or 'perez', got {model!r}")
    tilt, azim = plane_orientation(plane, geometry)
    zen = geometry["apparent_zenith_deg"].to_numpy()
    kw: dict = {}
    if model != "isotropic":
        kw["dni_extra"] = geometry["dni_extra_wm2"].to_numpy()
    if model == "perez":
        kw.update(airmass=pvlib.atmosphere.get_relative_airmass(zen), model_perez=PEREZ_MODEL)
    poa = pvlib.irradiance.get_total_irradiance(
        tilt, azim, zen, geometry["sun_azimuth_deg"].to_numpy(),
        geometry["dni_cs_wm2"].to_numpy(), geometry["ghi_cs_wm2"].to_numpy(),
        geometry["dhi_cs_wm2"].to_numpy(), albedo=albedo, model=model, **kw)["poa_global"]
    return np.nan_to_num(np.asarray(poa, dtype=float))


def capacity_weighted_poa(poa_by_array: list, p_dc_kwp: list[float]):
    """Irradiance [W/m²] of an inverter whose arrays lie in different planes.

    ``Σ_j P0_j G_j / Σ_j P0_j``, so that ``P0 · G`` (P0 = Σ P0_j) is the reference power
    ``Σ_j P0_j G_j`` of IEC 61724-1 summed over the arrays; NaN where any array's G is NaN.

    Examples
    --------
    >>> capacity_weighted_poa([[1000.0], [500.0]], [30.0, 10.0]).tolist()
    [875.0]
    """
    w = np.asarray(p_dc_kwp, dtype=float)
    g = np.vstack([np.asarray(x, dtype=float) for x in poa_by_array])
    return (w[:, None] * g).sum(axis=0) / w.sum()
