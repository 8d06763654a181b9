"""Sensor faults: out of range, flatline, dropouts, night-time irradiance and slow drift.

Every performance number divides by an irradiance reading, so a sensor fault looks like a
plant fault: a soiled or drifting POA sensor makes every inverter's PI rise or fall
together. The checks here run on interval data (index ``ts_utc``, interval start):

* **range** — values outside physical limits (METHODS §5: G −10…1500 W/m², T_mod −40…90 °C,
  T_amb −40…55 °C, wind 0…50 m/s; P_ac −0.02…1.05 P_ac,max);
* **flatline** — a value stuck while the sun moves: a daytime run of ≥4 samples (15-min
  data) with |Δx| < 0.1 % of the span for irradiance and power, ≥8 samples with
  |ΔT| < 0.05 °C for temperatures (METHODS §5); power held at the AC limit or at zero is
  clipping or an outage, not a stuck sensor;
* **dropout** — runs of missing intervals that contain daylight;
* **night** — irradiance ≥ 5 W/m² while the sun is well below the horizon (a shifted
  clock, a stray light, an offset fault); small negative thermopile offsets at night are
  normal (METHODS §10);
* **drift** — a Theil–Sen trend of the daily clear-period ratio of measured to modelled
  clear-sky POA (flag |drift| > 1 %/yr, METHODS §10), of the ratio of two sibling POA
  sensors, and of the fleet's final yield per unit of measured insolation (modules do not
  get better: a rising ratio points to the sensor).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from analytics.outliers import epoch_s, flag_frame

#: Physical limits per quantity (METHODS §5, common practice).
RANGES = {
    "poa_wm2": (-10.0, 1500.0),
    "ghi_wm2": (-10.0, 1500.0),
    "t_module_c": (-40.0, 90.0),
    "t_amb_c": (-40.0, 55.0),
    "wind_ms": (0.0, 50.0),
    "rain_mm": (0.0, 200.0),
}


def _ts_s(index: pd.DatetimeIndex) -> np.ndarray:
    return epoch_s(index)


def _true_runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """(first, last) positions of runs of True."""
    m = np.asarray(mask, dtype=np.int8)
    if m.size == 0 or not m.any():
        return []
    d = np.diff(np.concatenate(([0], m, [0])))
    return list(zip(np.flatnonzero(d == 1).tolist(), (np.flatnonzero(d == -1) - 1).tolist(),
                    strict=True))


def _merge_runs(runs, ts, max_gap_s):
    out = []
    for a, b in runs:
        if out and ts[a] - ts[out[-1][1]] <= max_gap_s:
            out[-1] = (out[-1][0], b)
        else:
            out.append((a, b))
    return out


def _events(mask, index, tau_s, *, device_id, kind, severity_fn, details_fn,
            merge_gap_s=0, min_count=1):
    ts = _ts_s(index)
    runs = _merge_runs(_true_runs(mask), ts, merge_gap_s)
    recs = []
    for a, b in runs:
        n = int(np.sum(mask[a:b + 1]))
        if n < min_count:
            continue
        start, end = int(ts[a]), int(ts[b] + tau_s)
        recs.append(dict(device_id=device_id, kind=kind, start_s=start, end_s=end,
                         severity=severity_fn(n, end - start), lost_kwh=np.nan,
                         details=details_fn(a, b, n)))
    return recs


def range_mask(x, lo: float, hi: float):
    """True where a value is outside [lo, hi] (NaN is not out of range).

    Examples
    --------
    >>> range_mask(np.array([-20.0, 0.0, 1600.0, np.nan]), -10, 1500)
    array([ True, False,  True, False])
    """
    a = np.asarray(x, dtype=float)
    with np.errstate(invalid="ignore"):
        m = (a < lo) | (a > hi)
    return pd.Series(m, index=x.index) if isinstance(x, pd.Series) else m


def range_flags(x: pd.Series, *, device_id: str, quantity: str, lo: float | None = None,
                hi: float | None = None, tau_s: int = 900) -> pd.DataFrame:
    """Out-of-range events (consecutive out-of-range samples within an hour merge)."""
    if lo is None or hi is None:
        lo, hi = RANGES[quantity]
    m = range_mask(x.to_numpy(float), lo, hi)
    v = x.to_numpy(float)
    recs = _events(
        m, x.index, tau_s, device_id=device_id, kind="sensor_range", merge_gap_s=3600,
        severity_fn=lambda n, dur: "alarm" if dur >= 86400 else "warning",
        details_fn=lambda a, b, n: dict(
            quantity=quantity, n_samples=n, range=[lo, hi],
            min_value=float(np.nanmin(v[a:b + 1])), max_value=float(np.nanmax(v[a:b + 1])),
            rule="outside physical limits (METHODS §5)"))
    return flag_frame(recs)


def flatline_mask(x, daytime, *, min_run: int = 4, abs_tol: float | None = None,
                  rel_tol: float = 0.001, exclude=None, sun_ref=None,
                  min_ref_change: float = 0.05):
    """True on samples inside a daytime run of ``min_run`` or more nearly equal values.

    Parameters
    ----------
    x : array-like
        Samples at a fixed interval.
    daytime : array-like of bool
        The sun is up and moving (e.g. elevation > 10°).
    abs_tol : float, optional
        |Δx| at or below this counts as "no change" (temperature: 0.05 °C). Default:
        ``rel_tol`` × min(span, |x|), span = 99th − 1st percentile of x (METHODS §5:
        0.1 % of span); the |x| cap keeps a dim overcast sky, which drifts by a fraction
        of a W/m² per interval, from looking stuck.
    exclude : array-like of bool, optional
        Samples that may legitimately be flat (clipping, outage) and break runs.
    sun_ref : array-like, optional
        Clear-sky POA [W/m²] on the same samples: a run counts only if the sun moved
        during it, i.e. the reference changed by at least ``min_ref_change`` of its largest
        value in the run (a clear noon is naturally flat for an hour).

    Examples
    --------
    >>> flatline_mask(np.array([1., 2, 5, 5, 5, 5, 7]), np.ones(7, bool), abs_tol=0.01)
    array([False, False,  True,  True,  True,  True, False])
    """
    a = np.asarray(x, dtype=float)
    day = np.asarray(daytime, dtype=bool)
    if abs_tol is None:
        fin = a[np.isfinite(a)]
        span = np.subtract(*np.percentile(fin, [99, 1])) if fin.size else 0.0
        level = np.fmin(np.abs(a[1:]), np.abs(a[:-1]))
        tol = rel_tol * np.fmin(span, level)
    else:
        tol = abs_tol
    with np.errstate(invalid="ignore"):
        same = np.abs(np.diff(a)) <= tol  # same[k]: a[k+1] equals a[k]
    ok = day & np.isfinite(a)
    if exclude is not None:
        ok &= ~np.asarray(exclude, dtype=bool)
    pair = same & ok[1:] & ok[:-1]
    out = np.zeros(a.size, dtype=bool)
    ref = None if sun_ref is None else np.asarray(sun_ref, dtype=float)
    for s, e in _true_runs(pair):  # pairs s..e join samples s..e+1
        if e - s + 2 < min_run:
            continue
        if ref is not None:
            r = ref[s:e + 2]
            if not np.nanmax(r) > 0 or np.nanmax(r) - np.nanmin(r) < min_ref_change * np.nanmax(r):
                continue
        out[s:e + 2] = True
    return out


def flatline_flags(x: pd.Series, daytime, *, device_id: str, quantity: str,
                   tau_s: int = 900, exclude=None, min_run: int | None = None,
                   abs_tol: float | None = None, sun_ref=None) -> pd.DataFrame:
    """Flatline events; 'alarm' when the stuck run lasts more than a day (METHODS §5)."""
    temp = quantity in ("t_module_c", "t_amb_c")
    if min_run is None:
        # METHODS §5: 4 samples for G and P, 8 for temperatures; wind is logged to 0.1 m/s
        # and repeats in calm spells, so 12 exact repeats (3 h of 15-min data; common practice)
        min_run = 8 if temp else 12 if quantity == "wind_ms" else 4
    if abs_tol is None and temp:
        abs_tol = 0.05
    if abs_tol is None and quantity == "wind_ms":
        abs_tol = 0.0
    m = flatline_mask(x.to_numpy(float), daytime, min_run=min_run, abs_tol=abs_tol,
                      exclude=exclude, sun_ref=sun_ref)
    v = x.to_numpy(float)
    recs = _events(
        m, x.index, tau_s, device_id=device_id, kind="sensor_flatline", merge_gap_s=18 * 3600,
        severity_fn=lambda n, dur: "alarm" if dur > 86400 else "warning",
        details_fn=lambda a, b, n: dict(
            quantity=quantity, n_samples=n, stuck_value=float(np.nanmedian(v[a:b + 1][m[a:b + 1]])),
            rule=f"daytime run of >= {min_run} samples without change (METHODS §5)"))
    return flag_frame(recs)


def dropout_flags(x: pd.Series, daytime: pd.Series, *, device_id: str, quantity: str,
                  tau_s: int = 900, min_missing_h: float = 1.0) -> pd.DataFrame:
    """Runs of missing daytime samples of at least ``min_missing_h`` hours in total.

    ``daytime`` is a bool Series on the full expected interval grid (all intervals of the
    period, sun up); ``x`` may lack rows or hold NaN. Missing runs are merged across nights
    so that a sensor that is dead for a week is one event.
    """
    grid = daytime.index
    present = x.reindex(grid).notna().to_numpy()
    day = daytime.to_numpy(bool)
    miss = day & ~present
    min_n = max(1, int(round(min_missing_h * 3600 / tau_s)))
    ts = _ts_s(grid)
    # bridge nights: merge missing-daytime runs separated only by night or missing samples
    state = np.where(miss, 1.0, np.where(day & present, 0.0, np.nan))
    s = pd.Series(state).ffill().fillna(0).to_numpy() == 1
    recs = []
    for a, b in _true_runs(s):
        idx = np.flatnonzero(miss[a:b + 1]) + a
        if idx.size < min_n:
            continue
        a, b = int(idx[0]), int(idx[-1])
        n = idx.size
        hours = n * tau_s / 3600
        recs.append(dict(device_id=device_id, kind="sensor_dropout", start_s=int(ts[a]),
                         end_s=int(ts[b] + tau_s),
                         severity="warning" if hours >= 24 or ts[b] - ts[a] >= 86400 else "info",
                         lost_kwh=np.nan,
                         details=dict(quantity=quantity, missing_daytime_hours=hours,
                                      n_samples=int(n),
                                      rule=f"missing daytime samples for >= {min_missing_h:g} h")))
    return flag_frame(recs)


def night_irradiance_flags(g: pd.Series, solar_elevation_deg, *, device_id: str,
                           quantity: str = "poa_wm2", tau_s: int = 900,
                           max_night_wm2: float = 5.0, night_elev_deg: float = -3.0,
                           min_samples: int = 2) -> pd.DataFrame:
    """Irradiance above ``max_night_wm2`` while the sun is below ``night_elev_deg``.

    METHODS §5 takes G < 5 W/m² as night; −3° keeps twilight out. Events within a night
    merge, consecutive nights merge too (36 h gap); nights with fewer than ``min_samples``
    such samples are ignored (a passing headlight).
    """
    a = g.to_numpy(float)
    el = np.asarray(solar_elevation_deg, dtype=float)
    with np.errstate(invalid="ignore"):
        m = (el < night_elev_deg) & (a >= max_night_wm2)
    recs = _events(
        m, g.index, tau_s, device_id=device_id, kind="sensor_night", merge_gap_s=36 * 3600,
        min_count=min_samples,
        severity_fn=lambda n, dur: "warning",
        details_fn=lambda i, j, n: dict(
            quantity=quantity, n_samples=n, max_value=float(np.nanmax(a[i:j + 1][m[i:j + 1]])),
            rule=f"G >= {max_night_wm2:g} W/m2 with the sun below {night_elev_deg:g} deg; "
                 "a clock shift shows the same way (see clock_shift)"))
    return flag_frame(recs)


def drift_rate_pct_per_yr(daily_ratio: pd.Series, *, alpha: float = 0.95) -> dict:
    """Theil–Sen trend of a daily ratio in %/yr of its median level.

    Returns
    -------
    dict with ``drift_pct_per_yr``, ``ci_pct_per_yr`` [low, high], ``n_days`` and
    ``span_days``; NaN rate with fewer than 10 days.

    Examples
    --------
    A ratio falling from 1.00 by 0.01 per 365.25 days → −1.0 %/yr (at level ≈1).
    """
    s = daily_ratio.dropna()
    if len(s) < 10:
        return dict(drift_pct_per_yr=np.nan, ci_pct_per_yr=[np.nan, np.nan], n_days=len(s),
                    span_days=0)
    x = (pd.DatetimeIndex(s.index) - pd.Timestamp(s.index[0])).days.to_numpy(float)
    res = stats.theilslopes(s.to_numpy(float), x, alpha=alpha, method="separate")
    level = float(np.median(s))
    k = 36525.0 / level
    return dict(drift_pct_per_yr=res.slope * k, ci_pct_per_yr=[res.low_slope * k,
                                                               res.high_slope * k],
                n_days=int(len(s)), span_days=int(x[-1]))


def clear_period_ratio(g: pd.Series, g_cs: pd.Series, aoi_deg, clear_days: pd.Series, *,
                       std_offset_s: int = 0, max_aoi_deg: float = 50.0,
                       min_cs_wm2: float = 300.0) -> pd.Series:
    """Daily median of G_meas / G_clearsky,POA over clear-day intervals with AOI < 50°
    (METHODS §10).

    ``clear_days`` is a bool Series by local standard day (e.g.
    :func:`analytics.clock.clear_day_mask`).
    """
    cs = g_cs.reindex(g.index).to_numpy(float)
    aoi = np.asarray(aoi_deg, dtype=float)
    day = (_ts_s(g.index) + int(std_offset_s)) // 86400
    with np.errstate(invalid="ignore", divide="ignore"):
        q = g.to_numpy(float) / cs
        ok = (aoi < max_aoi_deg) & (cs >= min_cs_wm2) & np.isfinite(q)
    df = pd.DataFrame({"day": day[ok], "q": q[ok]})
    med = df.groupby("day")["q"].median()
    med.index = pd.to_datetime(med.index.to_numpy() * 86400, unit="s")
    cd = clear_days.reindex(med.index).fillna(False).astype(bool)
    return med[cd.to_numpy()]


def drift_flags(daily_ratio: pd.Series, *, device_id: str, method: str,
                threshold_pct_per_yr: float = 1.0, min_span_days: int = 365,
                std_offset_s: int = 0, extra: dict | None = None,
                sign_rule: str = "both") -> pd.DataFrame:
    """A 'sensor_drift' flag when the Theil–Sen drift of ``daily_ratio`` exceeds 1 %/yr.

    Parameters
    ----------
    daily_ratio : Series
        Daily ratio whose trend measures the drift (clear-sky ratio, sibling ratio, or
        fleet yield per insolation).
    method : str
        'clearsky', 'sibling' or 'fleet_power', stored in the details.
    min_span_days : int
        At least a year of data (METHODS §10), so a season is not read as drift.
    sign_rule : str
        'both' flags either sign; 'rising' only a rising ratio (fleet yield per measured
        insolation cannot rise through the modules).
    """
    r = drift_rate_pct_per_yr(daily_ratio)
    rate = r["drift_pct_per_yr"]
    if not np.isfinite(rate) or r["span_days"] < min_span_days:
        return flag_frame([])
    hit = abs(rate) > threshold_pct_per_yr if sign_rule == "both" else rate > threshold_pct_per_yr
    ci = r["ci_pct_per_yr"]
    if not hit or (ci[0] <= 0 <= ci[1]):
        return flag_frame([])
    s = daily_ratio.dropna()
    start = int(pd.Timestamp(s.index[0]).value // 10**9) - int(std_offset_s)
    end = int(pd.Timestamp(s.index[-1]).value // 10**9) - int(std_offset_s) + 86400
    implied = (-rate if method == "fleet_power" else rate)
    details = dict(method=method, drift_pct_per_yr=rate, ci95_pct_per_yr=ci,
                   sensor_drift_pct_per_yr=implied,
                   n_days=r["n_days"], span_days=r["span_days"],
                   rule=f"|Theil-Sen drift| > {threshold_pct_per_yr:g} %/yr over >= "
                        f"{min_span_days} days (METHODS §10)",
                   note="irradiance drift maps one-to-one into performance and degradation "
                        "rates (METHODS §6): recalibrate or replace the sensor and split the "
                        "series at the swap")
    if extra:
        details.update(extra)
    return flag_frame([dict(device_id=device_id, kind="sensor_drift", start_s=start, end_s=end,
                            severity="alarm" if abs(rate) > 2 * threshold_pct_per_yr
                            else "warning", lost_kwh=np.nan, details=details)])
