"""Outages (no power while the sun shines) and clipping (power held at the AC limit).

An interval is an *outage* when the inverter delivers at most 1 % of its AC rating while
the plane-of-array irradiance is at least 50 W/m² (METHODS §5, the availability base of
IEC 61724-1 / IEC TS 63019 practice). Consecutive outage intervals form one event; night
and low-light intervals in between do not end it, so an inverter that stays off for three
days is one event, not three. The energy lost is the expected AC energy of the outage
intervals (expected-power model, METHODS §4).

An interval is *clipped* when P_ac ≥ 0.98 · P_ac,max (METHODS §5): the inverter is at its
limit, which is normal design behaviour, not a fault. Clipping is reported (kind
'clipping', severity 'info') so that the flat top of a sunny day is not mistaken for a
fault and so that those intervals are known to be excluded from degradation.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from analytics.outliers import FIELD_CAUTION, epoch_s, flag_frame


def outage_mask(p_ac_kw, poa_wm2, p_ac_max_kw: float, *, min_poa_wm2: float = 50.0,
                max_frac: float = 0.01):
    """True where the inverter is out while the sun shines.

    Parameters
    ----------
    p_ac_kw : array-like or Series
        Mean AC power of the interval. [kW]
    poa_wm2 : array-like or Series
        Plane-of-array irradiance. [W/m²]
    p_ac_max_kw : float
        AC rating. [kW]
    min_poa_wm2 : float
        Irradiance above which the inverter should run (METHODS §5: 50 W/m²).
    max_frac : float
        Power at or below this share of the rating counts as "out" (METHODS §5: 1 %).

    Returns
    -------
    Same type as ``p_ac_kw``, bool; False where either input is NaN (missing power is
    "information unavailable", a dropout, not an outage).

    Examples
    --------
    >>> outage_mask(np.array([0.0, 0.5, 50.0, np.nan]), np.array([600, 600, 600, 600]), 100.0)
    array([ True,  True, False, False])
    """
    p = np.asarray(p_ac_kw, dtype=float)
    g = np.asarray(poa_wm2, dtype=float)
    with np.errstate(invalid="ignore"):
        m = (g >= min_poa_wm2) & (p <= max_frac * p_ac_max_kw)
    if isinstance(p_ac_kw, pd.Series):
        return pd.Series(m, index=p_ac_kw.index, name="outage")
    return m


def clipping_mask(p_ac_kw, p_ac_max_kw: float, *, frac: float = 0.98):
    """True where the interval's power is at the AC limit (P ≥ 0.98 P_ac,max, METHODS §5).

    Examples
    --------
    >>> clipping_mask(np.array([97.0, 98.0, 100.0, np.nan]), 100.0)
    array([False,  True,  True, False])
    """
    p = np.asarray(p_ac_kw, dtype=float)
    with np.errstate(invalid="ignore"):
        m = p >= frac * p_ac_max_kw
    if isinstance(p_ac_kw, pd.Series):
        return pd.Series(m, index=p_ac_kw.index, name="clipped")
    return m


def _runs(state: np.ndarray) -> list[tuple[int, int]]:
    """(first, last) positions of runs of ``state == 1``, where ``state`` is 1 (in event),
    0 (evidence of normal operation) or NaN (no evidence: night, low light, missing); NaN
    stretches between two event intervals are bridged."""
    s = pd.Series(state).ffill().to_numpy()
    on = np.nan_to_num(s, nan=0.0) == 1
    if not on.any():
        return []
    d = np.diff(np.concatenate(([0], on.astype(np.int8), [0])))
    starts, ends = np.flatnonzero(d == 1), np.flatnonzero(d == -1) - 1
    out = []
    real = np.flatnonzero(state == 1)
    for a, b in zip(starts, ends, strict=True):
        # trim the bridged tail (forward-fill runs past the last real outage interval)
        lo = real[np.searchsorted(real, a)]
        hi = real[np.searchsorted(real, b, side="right") - 1]
        out.append((int(lo), int(hi)))
    return out


def outage_flags(frame: pd.DataFrame, p_ac_max_kw: float, *, device_id: str,
                 p_ac_exp_kw: pd.Series | None = None, min_poa_wm2: float = 50.0,
                 max_frac: float = 0.01, min_duration_h: float = 0.5,
                 warning_h: float = 1.0, alarm_h: float = 4.0,
                 std_offset_s: int = 0, sun_up=None) -> pd.DataFrame:
    """Outage events of one inverter from its interval frame.

    Parameters
    ----------
    frame : DataFrame
        Index ``ts_utc`` (interval start), columns ``p_ac_kw``, ``poa_wm2``, ``interval_h``.
    p_ac_max_kw : float
        AC rating. [kW]
    device_id : str
        The inverter.
    p_ac_exp_kw : Series, optional
        Expected AC power (METHODS §4) on the same index; gives ``lost_kwh``.
    min_duration_h : float
        Events with less daylight outage time are ignored (a slow wake-up at dawn is not an
        outage; common practice). [h]
    warning_h, alarm_h : float
        Daylight outage hours from which severity is 'warning' / 'alarm'; an event that
        covers every daylight interval of a day is an 'alarm' too. [h]
    std_offset_s : int
        Site standard UTC offset, to count whole local days. [s]
    sun_up : array-like of bool, optional
        Solar elevation > 0 on the same rows: irradiance readings while the sun is down
        are a sensor fault (see ``sensor_night``/``sensor_flatline``), not outage evidence.

    Returns
    -------
    DataFrame with :data:`~analytics.outliers.FLAG_COLUMNS`; details give the daylight
    hours out, whether whole days are lost, and the number of intervals.
    """
    if frame.empty:
        return flag_frame([])
    p = frame["p_ac_kw"].to_numpy(float)
    g = frame["poa_wm2"].to_numpy(float)
    tau = frame["interval_h"].to_numpy(float)
    if sun_up is not None:
        g = np.where(np.asarray(sun_up, dtype=bool), g, np.nan)
    out = outage_mask(p, g, p_ac_max_kw, min_poa_wm2=min_poa_wm2, max_frac=max_frac)
    with np.errstate(invalid="ignore"):
        running = (g >= min_poa_wm2) & (p > max_frac * p_ac_max_kw)
    state = np.where(out, 1.0, np.where(running, 0.0, np.nan))
    ts = epoch_s(frame.index)
    exp = None if p_ac_exp_kw is None else p_ac_exp_kw.reindex(frame.index).to_numpy(float)
    sunny = g >= min_poa_wm2
    days = (ts + int(std_offset_s)) // 86400  # local standard days, for "whole day"
    d0 = days.min()
    n_sunny = np.bincount(days - d0, weights=sunny.astype(float))
    records = []
    for a, b in _runs(state):
        sl = slice(a, b + 1)
        hours = float(np.sum(tau[sl][out[sl]]))
        if hours < min_duration_h:
            continue
        # whole days: every sunny interval of a local day is inside the event and out
        n_out = np.bincount(days[sl][out[sl]] - d0, minlength=len(n_sunny))
        whole = int(np.sum((n_out > 0) & (n_out == n_sunny)))
        lost = float(np.nansum(exp[sl][out[sl]] * tau[sl][out[sl]])) if exp is not None else np.nan
        sev = ("alarm" if hours >= alarm_h or whole else
               "warning" if hours >= warning_h else "info")
        records.append(dict(
            device_id=device_id, kind="outage", start_s=int(ts[a]),
            end_s=int(ts[b] + round(tau[b] * 3600)), severity=sev, lost_kwh=lost,
            details=dict(
                hours_out=hours, n_intervals=int(out[sl].sum()),
                whole_days=whole, partial=whole == 0,
                rule=f"P_ac <= {max_frac:.0%} of {p_ac_max_kw:g} kW while POA >= "
                     f"{min_poa_wm2:g} W/m2 (METHODS §5)",
                lost_energy_method="expected AC power of the outage intervals" if exp is not None
                else "no expected power available",
                caution=FIELD_CAUTION)))
    return flag_frame(records)


def clipping_flags(frame: pd.DataFrame, p_ac_max_kw: float, *, device_id: str,
                   frac: float = 0.98, std_offset_s: int = 0,
                   min_hours: float = 0.25) -> pd.DataFrame:
    """Clipping summarised per calendar month (local standard time), severity 'info'.

    One flag per inverter and month with clipped intervals (a daily flag would bury the
    weekly check under sunny days); details give the clipped hours and days.

    Parameters
    ----------
    frame : DataFrame
        Index ``ts_utc``, columns ``p_ac_kw``, ``interval_h``.
    std_offset_s : int
        Site standard UTC offset, to assign intervals to local months. [s]
    min_hours : float
        Months with fewer clipped hours are not reported. [h]
    """
    if frame.empty:
        return flag_frame([])
    clip = clipping_mask(frame["p_ac_kw"].to_numpy(float), p_ac_max_kw, frac=frac)
    if not clip.any():
        return flag_frame([])
    ts = epoch_s(frame.index)[clip]
    tau = frame["interval_h"].to_numpy(float)[clip]
    local = (ts + int(std_offset_s)).astype("datetime64[s]")
    month = local.astype("datetime64[M]")
    day = local.astype("datetime64[D]")
    records = []
    bounds = np.flatnonzero(np.diff(month.astype("int64"))) + 1  # ts sorted: months contiguous
    for sl in np.split(np.arange(ts.size), bounds):
        hours = float(np.nansum(tau[sl]))
        if hours < min_hours:
            continue
        records.append(dict(
            device_id=device_id, kind="clipping", start_s=int(ts[sl[0]]),
            end_s=int(ts[sl[-1]] + round(tau[sl[-1]] * 3600)), severity="info",
            lost_kwh=np.nan,
            details=dict(month=str(month[sl[0]]), clipped_hours=hours,
                         n_days=int(np.unique(day[sl]).size),
                         rule=f"P_ac >= {frac:g} x {p_ac_max_kw:g} kW (METHODS §5)",
                         note="power held at the inverter's AC limit: normal design "
                              "behaviour, not a fault; these intervals are excluded from "
                              "the performance index and degradation")))
    return flag_frame(records)
