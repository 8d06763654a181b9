"""Outages (no power while the sun shines) and clipping (power held at the AC limit).

An interval is an *outage* when the inverter delivers at most 1 % of its AC rating while
the plane-of-array irradiance is at least 50 W/m² (common practice; the availability base
used with IEC 61724-1 / IEC TS 63019:2019). Consecutive outage intervals form one event; night
and low-light intervals in between do not end it, so an inverter that stays off for three
days is one event, not three. The energy lost is the expected AC energy of the outage
intervals (expected-power model: PVWatts, Dobos 2014, NREL/TP-6A20-62641).

An interval is *clipped* when P_ac ≥ 0.98 · P_ac,max (common practice): the inverter is at its
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
        Irradiance above which the inverter should run (common practice: 50 W/m²).
    max_frac : float
        Power at or below this share of the rating counts as "out" (common practice: 1 %).

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
    """True where the interval's power is at the AC limit (P ≥ 0.98 P_ac,max, common practice).

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


def _window_edges(gate: np.ndarray, days: np.ndarray, ts: np.ndarray,
                  edge_s: float) -> np.ndarray:
    """True within ``edge_s`` of the first or last gated interval of each local day: the
    first and last minutes of the day's production window (start-up and shut-down).
    ``ts`` ascending (so ``days`` is non-decreasing)."""
    if not gate.any() or edge_s <= 0:
        return np.zeros(gate.size, dtype=bool)
    gd, gt = days[gate], ts[gate]
    ud, i0 = np.unique(gd, return_index=True)
    i1 = np.r_[i0[1:], gd.size] - 1
    k = np.searchsorted(ud, days)
    k = np.clip(k, 0, ud.size - 1)
    has = ud[k] == days
    first = np.where(has, gt[i0][k], np.nan)
    last = np.where(has, gt[i1][k], np.nan)
    with np.errstate(invalid="ignore"):
        return (ts - first < edge_s) | (last - ts < edge_s)


def outage_flags(frame: pd.DataFrame, p_ac_max_kw: float, *, device_id: str,
                 p_ac_exp_kw: pd.Series | None = None, min_poa_wm2: float = 50.0,
                 max_frac: float = 0.01, min_duration_h: float = 0.5,
                 warning_h: float = 1.0, alarm_h: float = 4.0,
                 std_offset_s: int = 0, sun_up=None, solar_elevation_deg=None,
                 min_elevation_deg: float = 10.0, startup_frac: float = 0.01,
                 min_expected_multiple: float = 5.0, edge_minutes: float = 30.0,
                 max_resume_gap_h: float = 18.0, valid_irradiance=None) -> pd.DataFrame:
    """Outage events of one inverter from its interval frame.

    An interval is evidence of an outage only where the array should clearly produce
    (issue #14: 3,087 dawn/dusk "outages" on a real plant were start-up and shut-down):

    * P_ac ≤ ``max_frac`` · P_ac,max (common practice: 1 %) while G ≥ ``min_poa_wm2``;
    * the expected power is at least ``min_expected_multiple`` × the start-up power
      (``startup_frac`` · P_ac,max; inverters start at about 0.5–1 % of rating, common
      practice), i.e. 5 % of rating by default;
    * the sun is at least ``min_elevation_deg`` above the horizon;
    * the interval is not within ``edge_minutes`` of the start or end of the day's window
      where the two gates above hold: a late wake-up or early sleep is not an outage;
    * the irradiance reading is valid (``valid_irradiance``: a sensor judged faulty gives no
      evidence, see :func:`analytics.sensor_qa.irradiance_validity`).

    Any interval with P_ac above ``max_frac`` · P_ac,max is production. Intervals that are
    neither (night, dim light, missing data) neither continue nor end an event, so an
    outage bridges nights; it **ends when production resumes** (the start of the first
    producing interval), unless that is more than ``max_resume_gap_h`` after the last
    outage interval (data missing in daylight: the end is then the last outage interval).

    Parameters
    ----------
    frame : DataFrame
        Index ``ts_utc`` (interval start), columns ``p_ac_kw``, ``poa_wm2``, ``interval_h``.
    p_ac_max_kw : float
        AC rating. [kW]
    device_id : str
        The inverter.
    p_ac_exp_kw : Series, optional
        Expected AC power (PVWatts, Dobos 2014) on the same index; gives ``lost_kwh`` and the
        start-up gate (without it only the irradiance gate applies).
    min_duration_h : float
        Events with less outage time are ignored (common practice). [h]
    warning_h, alarm_h : float
        Outage hours from which severity is 'warning' / 'alarm'; an event that
        covers every gated interval of a day is an 'alarm' too. [h]
    std_offset_s : int
        Site standard UTC offset, to count whole local days. [s]
    sun_up : array-like of bool, optional
        Legacy gate (elevation > 0); ``solar_elevation_deg`` supersedes it.
    solar_elevation_deg : array-like, optional
        Solar elevation on the same rows. [°]

    Returns
    -------
    DataFrame with :data:`~analytics.outliers.FLAG_COLUMNS`; details give the outage
    hours, whole days, the number of intervals, whether production had resumed
    (``ongoing``) and the gates used.
    """
    if frame.empty:
        return flag_frame([])
    p = frame["p_ac_kw"].to_numpy(float)
    g = frame["poa_wm2"].to_numpy(float)
    tau = frame["interval_h"].to_numpy(float)
    ts = epoch_s(frame.index)
    gate = np.ones(p.size, dtype=bool)
    if solar_elevation_deg is not None:
        gate &= np.asarray(solar_elevation_deg, dtype=float) >= min_elevation_deg
    elif sun_up is not None:
        gate &= np.asarray(sun_up, dtype=bool)
    if valid_irradiance is not None:
        gate &= np.asarray(valid_irradiance, dtype=bool)
    exp = None if p_ac_exp_kw is None else p_ac_exp_kw.reindex(frame.index).to_numpy(float)
    p_gate_kw = min_expected_multiple * startup_frac * p_ac_max_kw
    if exp is not None:
        with np.errstate(invalid="ignore"):
            gate &= exp >= p_gate_kw
    days = (ts + int(std_offset_s)) // 86400  # local standard days, for "whole day"
    gate &= ~_window_edges(gate, days, ts, edge_minutes * 60.0)
    g = np.where(gate, g, np.nan)
    out = outage_mask(p, g, p_ac_max_kw, min_poa_wm2=min_poa_wm2, max_frac=max_frac)
    with np.errstate(invalid="ignore"):
        running = p > max_frac * p_ac_max_kw
    state = np.where(out, 1.0, np.where(running, 0.0, np.nan))
    sunny = g >= min_poa_wm2
    d0 = days.min()
    n_sunny = np.bincount(days - d0, weights=sunny.astype(float))
    run_pos = np.flatnonzero(running)
    records = []
    for a, b in _runs(state):
        sl = slice(a, b + 1)
        hours = float(np.sum(tau[sl][out[sl]]))
        if hours < min_duration_h:
            continue
        n_out = np.bincount(days[sl][out[sl]] - d0, minlength=len(n_sunny))
        whole = int(np.sum((n_out > 0) & (n_out == n_sunny)))
        lost = float(np.nansum(exp[sl][out[sl]] * tau[sl][out[sl]])) if exp is not None else np.nan
        sev = ("alarm" if hours >= alarm_h or whole else
               "warning" if hours >= warning_h else "info")
        last_end = int(ts[b] + round(tau[b] * 3600))
        k = np.searchsorted(run_pos, b, side="right")
        resumed = k < run_pos.size
        end = last_end
        if resumed and ts[run_pos[k]] - last_end <= max_resume_gap_h * 3600:
            end = int(ts[run_pos[k]])
        records.append(dict(
            device_id=device_id, kind="outage", start_s=int(ts[a]),
            end_s=end, severity=sev, lost_kwh=lost,
            details=dict(
                hours_out=hours, n_intervals=int(out[sl].sum()),
                whole_days=whole, partial=whole == 0, ongoing=not bool(resumed),
                rule=f"P_ac <= {max_frac:.0%} of {p_ac_max_kw:g} kW while POA >= "
                     f"{min_poa_wm2:g} W/m2, sun >= {min_elevation_deg:g} deg and expected "
                     f"power >= {p_gate_kw:g} kW ({min_expected_multiple:g} x start-up "
                     f"power), not within {edge_minutes:g} min of the ends of that daily "
                     "window; ends when production resumes",
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
                         rule=f"P_ac >= {frac:g} x {p_ac_max_kw:g} kW (common practice)",
                         note="power held at the inverter's AC limit: normal design "
                              "behaviour, not a fault; these intervals are excluded from "
                              "the performance index and degradation")))
    return flag_frame(records)


def site_outage_events(flags: pd.DataFrame, n_inverters: int, *, min_share: float = 0.5,
                       min_inverters: int = 2, max_start_diff_s: int = 7200) -> pd.DataFrame:
    """Join simultaneous outages of all or most inverters into one site-wide event.

    A grid outage, a tripped main breaker or a logger that records zeros stops every
    inverter at once; 14 inverter warnings for one event (issue #14) hide the cause. Outage
    flags (``device_id`` set) whose starts lie within ``max_start_diff_s`` of the first one
    and that overlap it form a group; a group of at least
    max(``min_inverters``, ⌈``min_share`` · ``n_inverters``⌉) distinct inverters becomes one
    flag with ``device_id`` None, the span of the group, the summed ``lost_kwh`` and, in the
    details, the lost energy and span of each inverter (common practice; the thresholds
    are keyword arguments).

    Returns
    -------
    The flags with the grouped outage rows replaced; other rows unchanged.
    """
    if flags.empty:
        return flags
    is_out = (flags["kind"] == "outage") & flags["device_id"].notna()
    out = flags[is_out].sort_values("start_s", kind="stable")
    need = max(int(min_inverters), int(np.ceil(min_share * max(int(n_inverters), 1))))
    if len(out) < need:
        return flags
    used: set[int] = set()
    merged = []
    rows = list(out.itertuples())
    for i, r in enumerate(rows):
        if r.Index in used:
            continue
        grp = [r]
        for q in rows[i + 1:]:
            if q.start_s - r.start_s > max_start_diff_s:
                break
            if q.Index not in used and q.start_s < r.end_s and q.end_s > r.start_s:
                grp.append(q)
        if len({g.device_id for g in grp}) < need:
            continue
        used.update(g.Index for g in grp)
        lost = {str(g.device_id): (None if not np.isfinite(g.lost_kwh) else float(g.lost_kwh))
                for g in grp}
        sev = max((g.severity for g in grp), key=["info", "warning", "alarm"].index)
        merged.append(dict(
            device_id=None, kind="outage", start_s=int(min(g.start_s for g in grp)),
            end_s=int(max(g.end_s for g in grp)), severity=sev,
            lost_kwh=float(np.nansum([g.lost_kwh for g in grp])),
            details=dict(
                scope="site", devices=sorted(lost), n_inverters_out=len(lost),
                n_inverters=int(n_inverters), lost_kwh_by_inverter=lost,
                span_by_inverter={str(g.device_id): [int(g.start_s), int(g.end_s)]
                                  for g in grp},
                probable_cause="grid, logger or plant-wide event: "
                               f"{len(lost)} of {n_inverters} inverters stopped together",
                rule=f">= {need} inverters out, starts within {max_start_diff_s // 60} min",
                caution=FIELD_CAUTION)))
    if not merged:
        return flags
    return pd.concat([flags.drop(index=list(used)), flag_frame(merged)], ignore_index=True)


def power_limit_level(p_ac_kw, p_ac_max_kw: float, poa_wm2, *, min_poa_wm2: float = 600.0,
                      tol_frac: float = 0.003, min_share: float = 0.1,
                      max_level_frac: float = 0.97, min_level_frac: float = 0.3,
                      min_intervals: int = 20) -> float | None:
    """Constant power ceiling below the inverter's rating (export limit, curtailment).

    Under high irradiance (G ≥ ``min_poa_wm2``) an export-limited inverter sits at one power
    level for long stretches. The most frequent power among those intervals (histogram
    bins of ``tol_frac`` of the rating) is the candidate ceiling L; it is a limit when at
    least ``min_share`` of the high-irradiance intervals (and ``min_intervals``) lie within
    ± ``tol_frac`` · P_ac,max of L, and ``min_level_frac`` ≤ L / P_ac,max <
    ``max_level_frac`` (at ≥ 0.98 of the rating it is ordinary clipping, common practice).
    Common practice; thresholds are keyword arguments.

    Returns
    -------
    float, the level L [kW] (median of the intervals at the ceiling), or None.

    Examples
    --------
    >>> p = np.r_[np.full(50, 95.0), np.linspace(40, 90, 50)]
    >>> power_limit_level(p, 100.0, np.full(100, 900.0))
    95.0
    """
    p = np.asarray(p_ac_kw, dtype=float)
    g = np.asarray(poa_wm2, dtype=float)
    with np.errstate(invalid="ignore"):
        hi = (g >= min_poa_wm2) & np.isfinite(p) & (p >= min_level_frac * p_ac_max_kw)
    x = p[hi] / p_ac_max_kw
    if x.size < min_intervals:
        return None
    bins = np.round(x / tol_frac).astype(np.int64)
    vals, counts = np.unique(bins, return_counts=True)
    # a plateau may straddle two bins: count each bin with its neighbours
    c3 = counts + np.r_[counts[1:], 0] * (np.r_[vals[1:], 0] == vals + 1) \
        + np.r_[0, counts[:-1]] * (np.r_[0, vals[:-1]] == vals - 1)
    level = float(np.median(x[np.abs(bins - vals[int(np.argmax(c3))]) <= 1]))
    near = np.abs(x - level) <= tol_frac
    if near.sum() < max(min_intervals, min_share * x.size):
        return None
    level = float(np.median(x[near]))
    if not (min_level_frac <= level < max_level_frac):
        return None
    return level * p_ac_max_kw


def power_limit_mask(p_ac_kw, level_kw: float, p_ac_max_kw: float, *, tol_frac: float = 0.003):
    """True where the power sits at the ceiling ``level_kw`` (± ``tol_frac`` of the rating)."""
    p = np.asarray(p_ac_kw, dtype=float)
    with np.errstate(invalid="ignore"):
        m = np.abs(p - level_kw) <= tol_frac * p_ac_max_kw
    return pd.Series(m, index=p_ac_kw.index) if isinstance(p_ac_kw, pd.Series) else m


def power_limit_flags(frame: pd.DataFrame, p_ac_max_kw: float, *, device_id: str,
                      p_ac_exp_kw: pd.Series | None = None, std_offset_s: int = 0,
                      **level_kw) -> tuple[pd.DataFrame, pd.Series | None]:
    """A 'power_limit' flag (export limit or curtailment) with its level and withheld energy.

    The withheld energy is Σ max(P_exp − L, 0) τ over the intervals at the ceiling: what
    the expected-power model says the array would have delivered above L.

    Returns
    -------
    (flags, withheld_kwh by local standard day or None). The daily withheld energy lets
    the underperformance check see that a deficit is the limit, not the array.
    """
    if frame.empty:
        return flag_frame([]), None
    p = frame["p_ac_kw"].to_numpy(float)
    level = power_limit_level(p, p_ac_max_kw, frame["poa_wm2"].to_numpy(float), **level_kw)
    if level is None:
        return flag_frame([]), None
    tol = level_kw.get("tol_frac", 0.003)
    at = power_limit_mask(p, level, p_ac_max_kw, tol_frac=tol)
    tau = frame["interval_h"].to_numpy(float)
    ts = epoch_s(frame.index)
    withheld = np.zeros(p.size)
    if p_ac_exp_kw is not None:
        exp = p_ac_exp_kw.reindex(frame.index).to_numpy(float)
        withheld = np.where(at, np.clip(np.nan_to_num(exp - level), 0.0, None) * tau, 0.0)
    days = (ts + int(std_offset_s)) // 86400
    per_day = pd.Series(withheld).groupby(days).sum()
    per_day.index = pd.to_datetime(per_day.index.to_numpy() * 86400, unit="s")
    idx = np.flatnonzero(at)
    rec = dict(
        device_id=device_id, kind="power_limit", start_s=int(ts[idx[0]]),
        end_s=int(ts[idx[-1]] + round(tau[idx[-1]] * 3600)), severity="info",
        lost_kwh=float(withheld.sum()) if p_ac_exp_kw is not None else np.nan,
        details=dict(
            level_kw=level, level_pct_of_rating=100 * level / p_ac_max_kw,
            hours_at_limit=float(tau[at].sum()), n_days=int(np.unique(days[at]).size),
            withheld_kwh=float(withheld.sum()) if p_ac_exp_kw is not None else None,
            probable_cause="export limit or curtailment (a constant ceiling below the "
                           "inverter rating under high irradiance), not a stuck sensor",
            rule="most frequent power under POA >= 600 W/m2 holds >= 10 % of those intervals "
                 "and lies below 97 % of the rating",
            withheld_method="sum of max(expected - level, 0) x interval at the ceiling",
            note="the contract or grid-connection agreement says whether this energy is "
                 "compensated; check the inverter's active-power setting"))
    return flag_frame([rec]), per_day


def merge_clipping_by_month(flags: pd.DataFrame, *, min_inverters: int = 2) -> pd.DataFrame:
    """One site-wide 'clipping' flag per local month in which several inverters clipped.

    Clipping is normal design behaviour (information); one flag per inverter and month
    made it most of a healthy plant's flag list (issue #14: a list a person can read in a
    weekly check). The site flag keeps each inverter's clipped hours and days in its details.
    """
    if flags.empty:
        return flags
    m = (flags["kind"] == "clipping") & flags["device_id"].notna()
    clip = flags[m]
    if clip.empty:
        return flags
    month = clip["details"].map(lambda d: d.get("month"))
    out, drop = [], []
    for mo, grp in clip.groupby(month):
        if grp["device_id"].nunique() < min_inverters:
            continue
        drop += list(grp.index)
        out.append(dict(
            device_id=None, kind="clipping", start_s=int(grp["start_s"].min()),
            end_s=int(grp["end_s"].max()), severity="info", lost_kwh=np.nan,
            details=dict(month=str(mo), scope="site", devices=sorted(map(str, grp["device_id"])),
                         clipped_hours_by_inverter={str(r.device_id): r.details["clipped_hours"]
                                                    for r in grp.itertuples()},
                         n_days_by_inverter={str(r.device_id): r.details["n_days"]
                                             for r in grp.itertuples()},
                         rule=grp["details"].iloc[0]["rule"],
                         note=grp["details"].iloc[0]["note"])))
    if not out:
        return flags
    return pd.concat([flags.drop(index=drop), flag_frame(out)], ignore_index=True)
