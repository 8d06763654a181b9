"""Clear-sky performance index: a degradation cross-check that does not use the POA sensor.

A drifting irradiance sensor maps one to one into a sensor-based degradation rate (Jordan
et al. 2018 list sensor drift among the pitfalls). Here the expected power comes from modelled clear-sky irradiance instead, on
periods identified as clear without the sensor under test:

1. Clear-sky irradiance: Ineichen–Perez model with monthly Linke turbidity
   (``pvlib.location.Location.get_clearsky(model='ineichen')``), transposed to the plane of
   array with ``pvlib.irradiance.get_total_irradiance`` (Hay–Davies sky diffuse by default),
   evaluated at interval mid-points (pvlib documentation).
2. Clear periods: the Reno & Hansen (2016) test (``pvlib.clearsky.detect_clearsky``, with the
   thresholds of Jordan & Hansen 2023 for 1–30-minute data, ``infer_limits=True``) applied to
   every irradiance sensor (GHI against clear-sky GHI, POA against clear-sky POA;
   :func:`clear_periods_from_sensors`): an interval is clear when every sensor that reads
   there and is not judged faulty that day calls it clear, so the result does not depend on
   the order of the sensors. Without any irradiance reading, the *shape* of the fleet's AC
   power scaled to W/m² (1000·ΣP_ac/ΣP0) is used. The test fits a scale factor between the measured and the
   clear-sky curve in every window set, then compares means, maxima, line length and
   variability, so it judges shape, not level: the fleet's PR and slow degradation do not
   decide clarity. It runs month by month so that the scale factor follows seasonal
   clear-sky-model bias and long-term change.
3. Clear-sky index per day: PI_cs,d = Σ P_ac τ / Σ P0 (G_cs/1000)(1 + γ (T_cell − 25)) η τ
   over clear intervals with G_cs ≥ 200 W/m² (IEC 61724-1 practice for PI windows) outside
   the clipping zone, for days where such intervals carry at least half of the day's
   clear-sky insolation outside that zone. The clipping zone is judged from the expected
   power (≥ 0.90 of the AC rating), not only from the measured power: a measured-power filter
   admits more intervals as the array degrades and biases the rate (issue #13).

Its year-on-year rate (:func:`analytics.degradation.degradation_yoy`) has the clear-sky
model's absolute bias (5–10 %, from memory) cancelled because each pair compares the same
season; aerosol trends, soiling and the temperature sensor still enter.

References
----------
.. [1] P. Ineichen, R. Perez, "A new airmass independent formulation for the Linke turbidity
   coefficient," Solar Energy 73(3):151-157, 2002, doi:10.1016/S0038-092X(02)00045-2.
.. [2] M. J. Reno, C. W. Hansen, "Identification of periods of clear sky irradiance in time
   series of GHI measurements," Renewable Energy 90:520-531, 2016,
   doi:10.1016/j.renene.2015.12.031.
.. [3] D. C. Jordan, C. Hansen, "Clear-sky detection for PV degradation analysis using
   multiple regression," Renewable Energy 209:393-400, 2023, doi:10.1016/j.renene.2023.04.035.
.. [4] J. E. Hay, J. A. Davies, "Calculations of the solar radiation incident on an inclined
   surface," Proc. First Canadian Solar Radiation Data Workshop, 1980 (via pvlib docs).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pvlib


def _step(idx: pd.DatetimeIndex) -> pd.Timedelta:
    """Median spacing of a time index (unit-safe across pandas datetime resolutions)."""
    return pd.Series(idx).diff().median()


def clearsky_poa(times: pd.DatetimeIndex, *, latitude_deg: float, longitude_deg: float,
                 altitude_m: float, tilt_deg: float, azimuth_deg: float, albedo: float = 0.2,
                 interval_h: float | None = None, transposition: str = "haydavies") -> pd.DataFrame:
    """Modelled clear-sky irradiance on the plane of array.

    Parameters
    ----------
    times : DatetimeIndex
        Interval starts, tz-aware (UTC).
    interval_h : float, optional
        Interval length; the model is evaluated at ``times + interval_h/2`` (the centre of
        each averaging interval). Default: inferred from the median spacing.
    transposition : str, default 'haydavies'
        ``pvlib.irradiance.get_total_irradiance`` sky-diffuse model ('isotropic', 'haydavies',
        'perez').

    Returns
    -------
    DataFrame
        Indexed like ``times``: ``ghi_clearsky_wm2``, ``dni_clearsky_wm2``, ``dhi_clearsky_wm2``,
        ``poa_clearsky_wm2`` [W/m²], ``solar_zenith_deg``.
    """
    if times.tz is None:
        raise ValueError("times must be tz-aware (UTC interval starts)")
    if interval_h is None:
        interval_h = _step(times) / pd.Timedelta(hours=1) if len(times) > 1 else 0.0
    mid = times + pd.Timedelta(hours=interval_h / 2)
    loc = pvlib.location.Location(latitude_deg, longitude_deg, tz="UTC", altitude=altitude_m)
    sp = loc.get_solarposition(mid)
    cs = loc.get_clearsky(mid, model="ineichen", solar_position=sp)
    extra = pvlib.irradiance.get_extra_radiation(mid)
    poa = pvlib.irradiance.get_total_irradiance(
        tilt_deg, azimuth_deg, sp["apparent_zenith"], sp["azimuth"], cs["dni"], cs["ghi"],
        cs["dhi"], dni_extra=extra, airmass=loc.get_airmass(mid, solar_position=sp)["airmass_relative"],
        albedo=albedo, model=transposition)
    out = pd.DataFrame({
        "ghi_clearsky_wm2": cs["ghi"].to_numpy(), "dni_clearsky_wm2": cs["dni"].to_numpy(),
        "dhi_clearsky_wm2": cs["dhi"].to_numpy(),
        "poa_clearsky_wm2": np.nan_to_num(poa["poa_global"].to_numpy(), nan=0.0),
        "solar_zenith_deg": sp["apparent_zenith"].to_numpy()}, index=times)
    return out


#: Interval lengths the Reno & Hansen test is applied to, with the thresholds of Jordan &
#: Hansen (2023) for 1-30-minute data. [s]
DETECT_INTERVAL_S = (60.0, 1800.0)


def detect_clear_periods(measured: pd.Series, clearsky: pd.Series, *,
                         min_clearsky_wm2: float = 50.0, interval_s=None) -> pd.Series:
    """Clear intervals by the Reno & Hansen (2016) test, month by month.

    Parameters
    ----------
    measured : Series
        GHI [W/m²] (then ``clearsky`` is clear-sky GHI), or a power-shape signal in W/m²
        equivalents, e.g. 1000·ΣP_ac/ΣP0, with ``clearsky`` = clear-sky POA. Regular
        1–30-minute intervals (thresholds of Jordan & Hansen 2023, ``infer_limits=True``).
    clearsky : Series
        Clear-sky reference on the same plane and index. [W/m²]
    interval_s : array, optional
        Each row's own interval [s] as recorded at ingest (issue #11). The test runs on each
        calendar month's rows of one interval length, on that length's regular grid, so a
        channel that changes from 15 to 5 minutes is tested at 15 minutes before and 5 after;
        rows whose interval lies outside :data:`DETECT_INTERVAL_S` are never clear. Without
        it, the spacing of each month's rows is taken (median), as for regular data.
    The test and its scale factor run per calendar month (UTC).

    Returns
    -------
    Series of bool
        True where the interval lies in a clear window and the clear-sky reference is at least
        ``min_clearsky_wm2``; False elsewhere (including missing data).
    """
    m = measured.astype(float)
    c = clearsky.reindex(m.index).astype(float)
    out = pd.Series(False, index=m.index)
    if interval_s is None:
        iv = np.zeros(len(m))  # one group per month, its spacing from the rows
    else:
        iv = np.round(np.asarray(interval_s, dtype=float))
        if iv.shape != (len(m),):
            raise ValueError(f"interval_s has {iv.size} values for {len(m)} rows")
    keys = [m.index.year, m.index.month, iv]
    for (_y, _mo, step_s), mm in m.groupby(keys):
        if mm.notna().sum() < 10:
            continue
        if interval_s is None:
            step = _step(mm.index)
        elif not DETECT_INTERVAL_S[0] <= step_s <= DETECT_INTERVAL_S[1]:
            continue
        else:
            step = pd.Timedelta(seconds=float(step_s))
        grid = pd.date_range(mm.index[0], mm.index[-1], freq=step)
        mg = mm.reindex(grid)
        cg = c.reindex(grid).fillna(0.0)
        naive = grid.tz_convert(None) if grid.tz is not None else grid  # pvlib reads .values
        try:
            with warnings.catch_warnings():
                # pvlib warns when the clear-sky scale factor does not settle in 20 iterations
                # (a cloudy month); the clear flags of that iteration are still usable, and
                # the per-day clear fraction downstream rejects days that are not clear
                warnings.filterwarnings("ignore", message="rescaling failed to converge")
                warnings.filterwarnings("ignore", message=".*inferred_freq")
                flag = pvlib.clearsky.detect_clearsky(
                    pd.Series(mg.fillna(0.0).to_numpy(), naive),
                    pd.Series(cg.to_numpy(), naive), infer_limits=True)
        except (ValueError, NotImplementedError):  # too short, or irregular after gaps
            continue
        flag = pd.Series(flag.to_numpy(dtype=bool), grid) & mg.notna() & (cg >= min_clearsky_wm2)
        out.loc[mm.index] = flag.reindex(mm.index).fillna(False).to_numpy(dtype=bool)
    return out


def clear_periods_from_sensors(readings: dict[str, pd.Series], clearsky: dict[str, pd.Series], *,
                               max_disagreement: float = 0.05, window_days: int = 31,
                               min_day_clearness: float = 0.8, interval_s=None) -> tuple[pd.Series, dict]:
    """Clear intervals from every irradiance sensor, each checked against the others.

    Parameters
    ----------
    readings : dict of Series
        Sensor id -> measured irradiance on the common interval index (GHI or POA). [W/m²]
    clearsky : dict of Series
        Sensor id -> the matching clear-sky irradiance (GHI or POA) on that index. [W/m²]
    max_disagreement : float, default 0.05
        With two or more sensors, a sensor's daily clear-sky index (median of measured /
        clear-sky over intervals with clear-sky ≥ 200 W/m²) divided by the median of all
        sensors' that day is compared with its own centred ``window_days`` rolling median of
        that ratio; a departure above this fraction marks the sensor faulty that day (stuck,
        offset, shaded, dropped out). A slow drift moves the rolling median with it and is
        not excluded here (it does not change which periods are clear). [fraction]
    min_day_clearness : float, default 0.8
        Sensors are judged only on days whose median (over the sensors) daily clear-sky index
        reaches this: mostly clear days, where sensors in different planes agree with their
        own planes' clear sky (our choice; on cloudier days no sensor is judged faulty, and
        such days are not clear anyway). [fraction]
    interval_s : array, optional
        Each row's interval [s] on the common index (all readings share one index then):
        passed to :func:`detect_clear_periods`.

    Returns
    -------
    (Series of bool, dict)
        Clear intervals: every sensor with a reading there that is not faulty that day calls
        the interval clear (Reno & Hansen 2016 per sensor, :func:`detect_clear_periods`), and
        at least one does; the result is the same for any order of the sensors. The dict
        gives per sensor the number of clear intervals and of days judged faulty.

    Examples
    --------
    The result is symmetric in the sensors (hand-checkable: the same dict in either order):

    >>> t = pd.date_range("2021-06-01 10:00", periods=4, freq="15min", tz="UTC")
    >>> cs = pd.Series(800.0, t)
    >>> a, _ = clear_periods_from_sensors({"A": cs, "B": cs * 0.9}, {"A": cs, "B": cs})
    >>> b, _ = clear_periods_from_sensors({"B": cs * 0.9, "A": cs}, {"B": cs, "A": cs})
    >>> bool(a.equals(b))
    True
    """
    ids = sorted(readings)
    if not ids:
        raise ValueError("no irradiance sensor given")
    idx = readings[ids[0]].index
    for sid in ids[1:]:
        idx = idx.union(readings[sid].index)
    if interval_s is not None and not all(readings[sid].index.equals(idx) for sid in ids):
        raise ValueError("interval_s needs every reading on one common index")
    day = idx.floor("D")
    kc, flags = {}, {}
    for sid in ids:
        m = readings[sid].reindex(idx).astype(float)
        c = clearsky[sid].reindex(idx).astype(float)
        kc[sid] = (m / c).where(c >= 200.0)
        try:
            flags[sid] = (detect_clear_periods(m, c, interval_s=interval_s) if len(idx) >= 10
                          else pd.Series(False, idx))
        except ValueError:
            flags[sid] = pd.Series(False, idx)
    k = pd.DataFrame(kc)
    have = pd.DataFrame({sid: readings[sid].reindex(idx).notna() for sid in ids})
    faulty = pd.DataFrame(False, index=idx, columns=ids)
    info = {}
    if len(ids) >= 2:
        daily = k.groupby(day).median()
        # judged on mostly clear days only: under cloud, sensors in different planes see
        # different shares of diffuse light and their clear-sky indices part by more than
        # max_disagreement without any fault (issue #11: a tracker's reference cell and a
        # horizontal pyranometer were "faulty" on ~40 % of days)
        daily = daily[daily.median(axis=1) >= min_day_clearness]
        rel = daily.div(daily.median(axis=1), axis=0)
        typ = rel.rolling(window_days, center=True, min_periods=5).median()
        bad_day = ((rel / typ - 1).abs() > max_disagreement).fillna(False)
        faulty = bad_day.reindex(day).fillna(False).set_axis(idx).astype(bool)
        info = {sid: {"days_faulty": int(bad_day[sid].sum())} for sid in ids}
    ok = have & ~faulty
    f = pd.DataFrame({sid: flags[sid].reindex(idx).fillna(False).astype(bool) for sid in ids})
    n_ok = ok.sum(axis=1)
    all_clear = (f | ~ok).all(axis=1) & (n_ok > 0)
    for sid in ids:
        info.setdefault(sid, {"days_faulty": 0})["n_clear"] = int(f[sid].sum())
    return all_clear.rename("clear"), info


def clearsky_daily_pi(p_ac_kw: pd.Series, poa_clearsky_wm2: pd.Series, clear: pd.Series, *,
                      p_dc_kwp: float, gamma_pmp_per_c: float, eta_inv_nom: float = 0.96,
                      p_ac_max_kw: float | None = None, t_cell_c: pd.Series | None = None,
                      interval_h=None, utc_offset_h: float = 0.0,
                      min_poa_wm2: float = 200.0, min_clear_fraction: float = 0.5,
                      clip_expected_fraction: float = 0.90) -> pd.DataFrame:
    """Daily clear-sky performance index of one inverter (Notes step 3 of this module).

    Parameters
    ----------
    p_ac_kw : Series
        Mean AC power per interval, index ``ts_utc`` (interval start). [kW]
    poa_clearsky_wm2 : Series
        Clear-sky POA at the same intervals (:func:`clearsky_poa`). [W/m²]
    clear : Series of bool
        Clear intervals (:func:`detect_clear_periods`).
    t_cell_c : Series, optional
        Cell temperature [°C]; without it no temperature correction is made (the seasonal
        temperature effect then cancels in year-on-year pairs, but year-to-year weather does
        not).
    p_ac_max_kw : float, optional
        Intervals whose measured power is at or above 0.98 of it, or whose expected power
        reaches ``clip_expected_fraction`` of it, are left out (clipping zone).
    clip_expected_fraction : float, default 0.90
        Expected-power share of the AC rating where the clipping zone starts
        (:data:`analytics.filters.DEFAULT_FILTERS`).
    utc_offset_h : float
        Site standard-time offset: days are local standard time (pvlib documentation).
    interval_h : float, array or Series, optional
        Each interval's length [h], as recorded at ingest (issue #11: a channel that changes
        from 15 to 5 minutes weighs each reading by its own τ). Default: the median spacing
        of the index (regular data only).

    Returns
    -------
    DataFrame indexed by day
        ``pi_clearsky`` [fraction] (NaN on days that are not clear enough), ``clear_fraction``
        (share of the day's clear-sky insolation above ``min_poa_wm2`` in clear intervals),
        ``n_clear``.

    Examples
    --------
    >>> t = pd.date_range("2021-06-01 10:00", periods=4, freq="1h", tz="UTC")
    >>> g = pd.Series(800.0, t)
    >>> out = clearsky_daily_pi(pd.Series(76.8, t), g, pd.Series(True, t), p_dc_kwp=100,
    ...                         gamma_pmp_per_c=-0.004, eta_inv_nom=0.96)
    >>> round(float(out["pi_clearsky"].iloc[0]), 4)   # 76.8 / (100 * 0.8 * 0.96)
    1.0
    """
    idx = p_ac_kw.index
    if interval_h is None:
        interval_h = _step(idx) / pd.Timedelta(hours=1) if len(idx) > 1 else 1.0
    elif isinstance(interval_h, pd.Series):
        interval_h = interval_h.reindex(idx).astype(float)
    elif np.ndim(interval_h):
        interval_h = pd.Series(np.asarray(interval_h, dtype=float), index=idx)
    g = poa_clearsky_wm2.reindex(idx).astype(float)
    temp = 1.0 if t_cell_c is None else 1 + gamma_pmp_per_c * (t_cell_c.reindex(idx) - 25.0)
    p_exp = p_dc_kwp * g / 1000.0 * temp * eta_inv_nom
    day = (idx + pd.Timedelta(hours=utc_offset_h)).tz_localize(None).normalize()
    window = g >= min_poa_wm2
    if p_ac_max_kw is not None:
        window &= ~(p_exp >= clip_expected_fraction * p_ac_max_kw)
    use = window & clear.reindex(idx).fillna(False).astype(bool) & p_ac_kw.notna() & p_exp.notna()
    if p_ac_max_kw is not None:
        use &= p_ac_kw < 0.98 * p_ac_max_kw
    df = pd.DataFrame({"num": (p_ac_kw * interval_h).where(use, 0.0),
                       "den": (p_exp * interval_h).where(use, 0.0),
                       "h_all": g.where(window, 0.0), "h_clear": g.where(use, 0.0),
                       "n": use.astype(int)}, index=idx)
    d = df.groupby(day).sum()
    frac = d["h_clear"] / d["h_all"].where(d["h_all"] > 0)
    pi = (d["num"] / d["den"].where(d["den"] > 0)).where(frac >= min_clear_fraction)
    out = pd.DataFrame({"pi_clearsky": pi, "clear_fraction": frac, "n_clear": d["n"]})
    out.index.name = "day"
    return out


def densify_clear_days(pi_clearsky: pd.Series, *, window_days: int = 15,
                       min_days: int = 2) -> pd.Series:
    """Centred rolling median of the clear-day index over ``window_days`` calendar days.

    Clear days one year apart rarely coincide, so pairing raw clear days leaves few pairs;
    Jordan et al. 2018 allows weekly or monthly medians of a noisy index. Windows with fewer
    than ``min_days`` clear days are NaN.
    """
    s = pi_clearsky.dropna()
    if s.empty:
        return s
    s.index = pd.DatetimeIndex(s.index)
    full = s.reindex(pd.date_range(s.index[0], s.index[-1], freq="D"))
    return full.rolling(window_days, center=True, min_periods=min_days).median().dropna()
