"""Sensor faults: out of range, flatline, dropouts, night-time irradiance and slow drift.

Every performance number divides by an irradiance reading, so a sensor fault looks like a
plant fault: a soiled or drifting POA sensor makes every inverter's PI rise or fall
together. The checks here run on interval data (index ``ts_utc``, interval start):

* **range** — values outside physical limits (common practice: G −10…1500 W/m², T_mod −40…90 °C,
  T_amb −40…55 °C, wind 0…50 m/s; P_ac −0.02…1.05 P_ac,max);
* **flatline** — a value stuck while the sun moves: a daytime run of ≥4 samples (15-min
  data) with |Δx| < 0.1 % of the span for irradiance and power, ≥8 samples with
  |ΔT| < 0.05 °C for temperatures (common practice); power held at the AC limit or at zero is
  clipping or an outage, not a stuck sensor;
* **dropout** — runs of missing intervals that contain daylight;
* **night** — irradiance ≥ 5 W/m² while the sun is well below the horizon (a shifted
  clock, a stray light, an offset fault); small negative thermopile offsets at night are
  normal (from memory);
* **drift** — a Theil–Sen trend of the daily clear-period ratio of measured to modelled
  clear-sky POA (flag |drift| > 1 %/yr, common practice; ISO 9060:2018 class A allows ≤ 0.8 %/yr
  non-stability, from memory), of the ratio of two sibling POA
  sensors, and of the fleet's final yield per unit of measured insolation (modules do not
  get better: a rising ratio points to the sensor).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from analytics.outliers import epoch_s, flag_frame

#: Physical limits per quantity (common practice).
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


def _per_row(tau_s, n: int) -> np.ndarray:
    """Interval [s] of each row: ``tau_s`` is one length for all rows or an array of each
    row's own (issue #11: a channel that changes from 15 to 5 minutes)."""
    return np.broadcast_to(np.round(np.asarray(tau_s, dtype=float)).astype(np.int64), (n,))


def _events(mask, index, tau_s, *, device_id, kind, severity_fn, details_fn,
            merge_gap_s=0, min_count=1):
    ts = _ts_s(index)
    tau = _per_row(tau_s, ts.size)
    runs = _merge_runs(_true_runs(mask), ts, merge_gap_s)
    recs = []
    for a, b in runs:
        n = int(np.sum(mask[a:b + 1]))
        if n < min_count:
            continue
        start, end = int(ts[a]), int(ts[b] + tau[b])
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
        # one to three isolated values are a data glitch (a corrupted line, a transmission
        # error), information rather than a sensor to fix (issue #14; common practice)
        severity_fn=lambda n, dur: ("alarm" if dur >= 86400 else "warning" if n >= 4
                                    else "info"),
        details_fn=lambda a, b, n: dict(
            quantity=quantity, n_samples=n, range=[lo, hi],
            min_value=float(np.nanmin(v[a:b + 1])), max_value=float(np.nanmax(v[a:b + 1])),
            rule="outside physical limits (common practice)"))
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
        ``rel_tol`` × min(span, |x|), span = 99th − 1st percentile of x (common practice:
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


#: A flat line is a warning from this long (1 h), information below (heliaudit's documented
#: choice: a few repeated samples are a logger holding its last value, already masked).
FLATLINE_WARNING_S = 3600


def flatline_flags(x: pd.Series, daytime, *, device_id: str, quantity: str,
                   tau_s: int = 900, exclude=None, min_run: int | None = None,
                   abs_tol: float | None = None, sun_ref=None) -> pd.DataFrame:
    """Flatline events; 'alarm' when the stuck run lasts more than a day (common practice),
    'warning' from an hour, 'info' below (a logger repeating its last value for a few
    samples: the samples are masked either way, nobody needs to act on it).

    Examples
    --------
    >>> import pandas as pd
    >>> idx = pd.date_range("2024-06-01 08:00", periods=10, freq="5min", tz="UTC")
    >>> x = pd.Series([100, 110, 300, 300, 300, 300, 300, 320, 330, 340.0], index=idx)
    >>> fl = flatline_flags(x, np.ones(10, bool), device_id="GHI-1", quantity="ghi_wm2",
    ...                     tau_s=300)
    >>> len(fl), fl.iloc[0]["severity"]
    (1, 'info')
    """
    temp = quantity in ("t_module_c", "t_amb_c")
    if min_run is None:
        # common practice: 4 samples for G and P, 8 for temperatures; wind is logged to 0.1 m/s
        # and repeats in calm spells, so 12 exact repeats (3 h of 15-min data; common practice)
        min_run = 8 if temp else 12 if quantity == "wind_ms" else 4
    if abs_tol is None and temp:
        abs_tol = 0.05
    if abs_tol is None and quantity == "wind_ms":
        abs_tol = 0.0
    m = flatline_mask(x.to_numpy(float), daytime, min_run=min_run, abs_tol=abs_tol,
                      exclude=exclude, sun_ref=sun_ref)
    v = x.to_numpy(float)
    tau = np.broadcast_to(np.asarray(tau_s, dtype=float), (len(v),))  # each sample's interval
    # a calm overcast spell can hold the air within 0.05 °C for a few hours: a temperature
    # flat line shorter than 6 h is weather, not a sensor to fix
    # (issue #14: two 2-h "flatlines" of a healthy ambient sensor on a generated fleet; common
    # practice) and is not flagged at all: the samples stay marked by flatline_mask
    short = 6 * 3600 if temp else 0
    recs = _events(
        m, x.index, tau_s, device_id=device_id, kind="sensor_flatline", merge_gap_s=18 * 3600,
        severity_fn=lambda n, dur: ("alarm" if dur > 86400 else "warning"
                                    if dur >= FLATLINE_WARNING_S else "info"),
        details_fn=lambda a, b, n: dict(
            quantity=quantity, n_samples=n, stuck_value=float(np.nanmedian(v[a:b + 1][m[a:b + 1]])),
            stuck_hours=float(tau[a:b + 1][m[a:b + 1]].sum() / 3600.0),
            rule=f"daytime run of >= {min_run} samples without change (common practice)"
                 + (f"; temperatures flagged from {short / 3600:g} h of stuck samples"
                    if short else "")))
    recs = [r for r in recs if r["details"]["stuck_hours"] * 3600.0 >= short]
    return flag_frame(recs)


def dropout_flags(x: pd.Series, daytime: pd.Series, *, device_id: str, quantity: str,
                  tau_s: int = 900, min_missing_h: float = 1.0, min_silence_h: float = 0.0,
                  night_share: float = 0.9) -> pd.DataFrame:
    """Gaps in a device's data: at least ``min_missing_h`` hours missing in a silence of at
    least ``min_silence_h`` hours (wall clock, first missing interval to the end of the last).

    ``daytime`` is a bool Series on the full expected interval grid (all intervals of the
    period, sun up); ``x`` may lack rows or hold NaN. ``tau_s``: one interval [s] or each grid
    row's own; missing hours are sums of the missing intervals' own lengths.

    What counts as missing depends on the device's own habit (issue #14: real inverters
    sleep at night and send nothing, about 1,000 false night "dropouts" on a real plant):

    * a device that reports at night (``night_share`` or more of its night rows present)
      is missing wherever a row is absent or NaN, night included: a logger silent from
      21:30 to 04:45 is a gap, and a device that reported through the night between two
      daytime gaps gives two gaps;
    * a device that does not (a sleeping inverter) is missing only in daytime, and its
      missing runs merge across nights, so that a sensor dead for a week is one event.

    ``missing_daytime_hours`` in the details counts the daytime part only (the sensor-fault
    rule of the flags job reads it), ``missing_hours`` all of it and ``silence_hours`` the
    span; ``night_only`` marks a gap with no daytime missing (no production data lost).
    """
    grid = daytime.index
    present = x.reindex(grid).notna().to_numpy()
    day = daytime.to_numpy(bool)
    ts = _ts_s(grid)
    tau = _per_row(tau_s, ts.size)
    night = ~day
    at_night = bool(night.any()) and float(present[night].mean()) >= night_share
    if at_night:
        miss = ~present
        s = miss
    else:
        miss = day & ~present
        # bridge nights: merge missing-daytime runs separated only by night or missing samples
        state = np.where(miss, 1.0, np.where(day & present, 0.0, np.nan))
        s = pd.Series(state).ffill().fillna(0).to_numpy() == 1
    recs = []
    for a, b in _true_runs(s):
        idx = np.flatnonzero(miss[a:b + 1]) + a
        if idx.size == 0:
            continue
        day_idx = idx[day[idx]]
        day_hours = float(tau[day_idx].sum()) / 3600  # each missing interval's own length
        hours = float(tau[idx].sum()) / 3600 if at_night else day_hours
        a, b = int(idx[0]), int(idx[-1])
        silence_h = float(ts[b] + tau[b] - ts[a]) / 3600
        if hours < min_missing_h - 1e-9 or silence_h < min_silence_h - 1e-9:
            continue
        recs.append(dict(device_id=device_id, kind="sensor_dropout", start_s=int(ts[a]),
                         end_s=int(ts[b] + tau[b]),
                         # a warning when the daylight lost spans a day (first to last
                         # missing daytime interval) or sums to 24 h; otherwise information
                         severity="warning" if day_hours >= 24 or (
                             day_idx.size and ts[day_idx[-1]] - ts[day_idx[0]] >= 86400)
                         else "info",
                         lost_kwh=np.nan,
                         details=dict(quantity=quantity, missing_daytime_hours=day_hours,
                                      missing_hours=hours, silence_hours=silence_h,
                                      night_only=bool(day_hours == 0),
                                      reports_at_night=at_night, n_samples=int(idx.size),
                                      rule=(f"missing samples for >= {min_missing_h:g} h"
                                            + (" (night included: the device reports at "
                                               "night)" if at_night else " in daytime")
                                            + (f" in a silence of >= {min_silence_h:g} h"
                                               if min_silence_h > 0 else "")))))
    return flag_frame(recs)


def night_irradiance_flags(g: pd.Series, solar_elevation_deg, *, device_id: str,
                           quantity: str = "poa_wm2", tau_s: int = 900,
                           max_night_wm2: float = 5.0, night_elev_deg: float = -3.0,
                           min_samples: int = 2) -> pd.DataFrame:
    """Irradiance above ``max_night_wm2`` while the sun is below ``night_elev_deg``.

    Common practice takes G < 5 W/m² as night; −3° keeps twilight out. Events within a night
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
    (common practice; clear sky: Ineichen & Perez 2002 via pvlib).

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
        At least a year of data (common practice), so a season is not read as drift.
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
                        f"{min_span_days} days (common practice)",
                   note="irradiance drift maps one-to-one into performance and degradation "
                        "rates (Jordan et al. 2018): recalibrate or replace the sensor and split the "
                        "series at the swap")
    if extra:
        details.update(extra)
    return flag_frame([dict(device_id=device_id, kind="sensor_drift", start_s=start, end_s=end,
                            severity="alarm" if abs(rate) > 2 * threshold_pct_per_yr
                            else "warning", lost_kwh=np.nan, details=details)])


# ---------------------------------------------------------------- plausibility before diagnosis
#
# Every sensor is judged first, day by day (local standard days), before any diagnosis that
# divides by it or times it (issue #14: a reference cell stuck at 3.0 W/m² for months became
# seven "clock shift" alarms and a drift alarm; a module sensor reading −19 °C in July was
# used in every calculation). A day on which a sensor is judged faulty is excluded from PR,
# filters, clock, drift, soiling and outage evidence, and the exclusion is reported with its
# reason. The rules look at one day at a time, so the daily job can apply them to any range.

#: Reason codes of :func:`irradiance_validity` / :func:`module_temperature_validity`.
VALIDITY_REASONS = {
    "stuck": "constant while the sun moved (dead or stuck sensor)",
    "night_reading": "reads light at night, beyond a thermopile's offset",
    "low_vs_power": "reads far less than the array's own power implies",
    "high_vs_power": "reads far more than the power of the arrays under it implies",
    "jump_vs_sibling": "stepped against its sibling sensors and stayed there",
    "out_of_range": "outside physical limits",
    "colder_than_ambient": "module colder than ambient air in full sun",
    "implausible_vs_model": "module temperature far from the value expected from ambient and "
                            "irradiance (Sandia module model)",
}


def _day_index(index: pd.DatetimeIndex, std_offset_s: int) -> tuple[np.ndarray, np.ndarray]:
    day = (_ts_s(index) + int(std_offset_s)) // 86400
    if day.size == 0:
        return day, day
    d0 = int(day.min())
    return day - d0, np.arange(int(day.max()) - d0 + 1) + d0


def _days_frame(uday: np.ndarray, invalid: dict[str, np.ndarray]) -> pd.DataFrame:
    """Day table (index: local standard day Timestamps) with 'valid' and the first reason."""
    reason = np.full(uday.size, "", dtype=object)
    for name, m in invalid.items():  # dict order = priority: the first reason found wins
        reason[(reason == "") & m] = name
    return pd.DataFrame({"valid": reason == "", "reason": reason},
                        index=pd.to_datetime(uday * 86400, unit="s"))


def irradiance_validity(g: pd.Series, solar_elevation_deg, poa_clearsky_wm2, *,
                        std_offset_s: int = 0, p_norm=None, day_elev_deg: float = 15.0,
                        night_elev_deg: float = -12.0, night_max_wm2: float = 5.0,
                        min_night_samples: int = 2, stuck_tol_wm2: float = 0.5,
                        min_day_samples: int = 4, low_share: float = 0.5,
                        min_p_norm: float = 0.2, low_factor: float = 0.25,
                        range_wm2=(-10.0, 1500.0), memo: dict | None = None) -> pd.DataFrame:
    """Judge an irradiance sensor day by day.

    A local standard day is **invalid** for the sensor when

    * ``stuck``: its daytime readings (sun ≥ ``day_elev_deg``, at least
      ``min_day_samples`` of them) span at most ``stuck_tol_wm2`` while the modelled
      clear-sky POA changed by more than half its peak (a dead cell at 3.0 W/m², a frozen
      logger value; the common-practice flatline idea applied to a whole day);
    * ``night_reading``: at least ``min_night_samples`` readings ≥ ``night_max_wm2`` with
      the sun below ``night_elev_deg`` (−12°, nautical dusk: a thermopile's night offset is
      a few W/m² *negative*, from memory; the deep-night gate keeps a clock error of an hour
      out of this rule, so the clock check still sees it);
    * ``low_vs_power``: on at least ``low_share`` of the daytime intervals where the array
      produces at least ``min_p_norm`` of its DC rating, the sensor reads less than
      ``low_factor`` × the irradiance that power implies (1000 W/m² · P_ac / P_dc,STC): the
      sensor is covered, dead or unplugged while the array works (common practice);
    * ``out_of_range``: more than half of its daytime readings are outside ``range_wm2``.

    Parameters
    ----------
    g : Series
        Irradiance readings, index ``ts_utc``. [W/m²]
    solar_elevation_deg, poa_clearsky_wm2 : array-like
        On the same rows. [°], [W/m²]
    p_norm : array-like, optional
        Measured AC power / DC rating of the array(s) on this sensor (median across
        inverters) on the same rows. [kW/kWp]
    memo : dict, optional
        Kept across calls: the rules that do not need ``p_norm`` are reused when the
        readings, sun and settings are the same as in the last call (inverters on one
        sensor share them).

    Returns
    -------
    DataFrame indexed by local standard day: ``valid`` (bool) and ``reason`` (a key of
    :data:`VALIDITY_REASONS`, '' when valid).

    Examples
    --------
    A cell reading exactly 3.0 W/m² all day is ``stuck``; the same day with a normal
    profile is valid (see tests/test_analytics_sensor_qa.py).
    """
    x = g.to_numpy(float)
    el = np.asarray(solar_elevation_deg, dtype=float)
    cs_in = np.asarray(poa_clearsky_wm2, dtype=float)
    inputs = (g.index.asi8, x, el, cs_in, int(std_offset_s), float(day_elev_deg),
              float(night_elev_deg), float(night_max_wm2), int(min_night_samples),
              float(stuck_tol_wm2), int(min_day_samples), tuple(range_wm2))
    hit = None if memo is None else memo.get("irradiance")
    if hit is not None and _same_inputs(hit[0], inputs):
        code, uday, day, nd, base = hit[1]
    else:
        code, uday, day, nd, base = _irradiance_base(
            g, x, el, cs_in, std_offset_s=std_offset_s, day_elev_deg=day_elev_deg,
            night_elev_deg=night_elev_deg, night_max_wm2=night_max_wm2,
            min_night_samples=min_night_samples, stuck_tol_wm2=stuck_tol_wm2,
            min_day_samples=min_day_samples, range_wm2=range_wm2)
        if memo is not None:
            memo["irradiance"] = (inputs, (code, uday, day, nd, base))
    n = uday.size
    if n == 0:
        return _days_frame(uday, {})
    low_d = np.zeros(n, dtype=bool)
    if p_norm is not None:
        pn = np.asarray(p_norm, dtype=float)
        with np.errstate(invalid="ignore"):
            prod = day & (pn >= min_p_norm)
            low = prod & (x < low_factor * 1000.0 * pn)
        n_prod = np.bincount(code, weights=prod, minlength=n)
        low_d = (n_prod >= min_day_samples) & (
            np.bincount(code, weights=low, minlength=n) >= low_share * n_prod)
    return _days_frame(uday, {**base, "low_vs_power": low_d})


def _irradiance_base(g: pd.Series, x: np.ndarray, el: np.ndarray, cs_in: np.ndarray, *,
                     std_offset_s: int, day_elev_deg: float, night_elev_deg: float,
                     night_max_wm2: float, min_night_samples: int, stuck_tol_wm2: float,
                     min_day_samples: int, range_wm2) -> tuple:
    """The rules of :func:`irradiance_validity` that need no power: (day codes, days,
    daytime mask, daytime samples per day, {reason: day mask} in priority order)."""
    code, uday = _day_index(g.index, std_offset_s)
    n = uday.size
    if n == 0:
        return code, uday, np.zeros(0, bool), np.zeros(0), {}
    cs = np.nan_to_num(cs_in)
    fin = np.isfinite(x)
    day = (el >= day_elev_deg) & fin
    nd = np.bincount(code, weights=day, minlength=n)
    xd = np.where(day, x, np.nan)
    s = pd.Series(xd)
    mx = s.groupby(code).max().reindex(range(n)).to_numpy(float)
    mn = s.groupby(code).min().reindex(range(n)).to_numpy(float)
    c = pd.Series(np.where(day, cs, np.nan)).groupby(code)
    cmx = c.max().reindex(range(n)).to_numpy(float)
    cmn = c.min().reindex(range(n)).to_numpy(float)
    with np.errstate(invalid="ignore"):
        stuck = (nd >= min_day_samples) & (mx - mn <= stuck_tol_wm2) & (cmx - cmn > 0.5 * cmx)
        night = (el < night_elev_deg) & fin & (x >= night_max_wm2)
    night_n = np.bincount(code, weights=night, minlength=n) >= min_night_samples
    with np.errstate(invalid="ignore"):
        oor = day & ((x < range_wm2[0]) | (x > range_wm2[1]))
    oor_d = np.bincount(code, weights=oor, minlength=n) > 0.5 * np.maximum(nd, 1)
    return code, uday, day, nd, {"out_of_range": oor_d, "stuck": stuck,
                                 "night_reading": night_n}


def module_temperature_validity(t_mod: pd.Series, *, poa_wm2=None, t_amb_c=None,
                                t_mod_model_c=None, std_offset_s: int = 0,
                                full_sun_wm2: float = 600.0, colder_margin_c: float = 2.0,
                                model_margin_c: float = 20.0, share: float = 0.5,
                                min_samples: int = 4, stuck_tol_c: float = 0.05,
                                day_mask=None, range_c=(-40.0, 90.0)) -> pd.DataFrame:
    """Judge a back-of-module temperature sensor day by day.

    A local standard day is invalid when, among its full-sun intervals (POA ≥
    ``full_sun_wm2``, at least ``min_samples``), at least ``share`` have the module

    * ``colder_than_ambient``: more than ``colder_margin_c`` below the ambient air (a lit
      module runs 15–30 °C above ambient; King et al. 2004, Eq. 11 with the open-rack
      parameters gives ≈ +25 °C at 1000 W/m² and 1 m/s), or
    * ``implausible_vs_model``: more than ``model_margin_c`` from the Sandia module
      temperature expected from ambient, irradiance and wind (``t_mod_model_c``);

    or when all its daytime readings (``day_mask``) vary by at most ``stuck_tol_c``
    (``stuck``, common practice: |ΔT| < 0.05 °C), or more than half are outside ``range_c``.

    Returns
    -------
    DataFrame indexed by local standard day: ``valid``, ``reason``.
    """
    code, uday = _day_index(t_mod.index, std_offset_s)
    n = uday.size
    if n == 0:
        return _days_frame(uday, {})
    t = t_mod.to_numpy(float)
    fin = np.isfinite(t)
    inv: dict[str, np.ndarray] = {}
    dm = fin if day_mask is None else (np.asarray(day_mask, dtype=bool) & fin)
    nd = np.bincount(code, weights=dm, minlength=n)
    with np.errstate(invalid="ignore"):
        oor = dm & ((t < range_c[0]) | (t > range_c[1]))
    inv["out_of_range"] = np.bincount(code, weights=oor, minlength=n) > 0.5 * np.maximum(nd, 1)
    s = pd.Series(np.where(dm, t, np.nan)).groupby(code)
    rng = (s.max() - s.min()).reindex(range(n)).to_numpy(float)
    with np.errstate(invalid="ignore"):
        inv["stuck"] = (nd >= 2 * min_samples) & (rng <= stuck_tol_c)
    if poa_wm2 is not None:
        g = np.asarray(poa_wm2, dtype=float)
        with np.errstate(invalid="ignore"):
            sun = fin & (g >= full_sun_wm2)
        n_sun = np.bincount(code, weights=sun, minlength=n)
        enough = n_sun >= min_samples
        if t_amb_c is not None:
            ta = np.asarray(t_amb_c, dtype=float)
            with np.errstate(invalid="ignore"):
                cold = sun & (t < ta - colder_margin_c)
            inv["colder_than_ambient"] = enough & (
                np.bincount(code, weights=cold, minlength=n) >= share * n_sun)
        if t_mod_model_c is not None:
            tm = np.asarray(t_mod_model_c, dtype=float)
            with np.errstate(invalid="ignore"):
                far = sun & (np.abs(t - tm) > model_margin_c)
            inv["implausible_vs_model"] = enough & (
                np.bincount(code, weights=far, minlength=n) >= share * n_sun)
    return _days_frame(uday, inv)


def invalid_interval_mask(index: pd.DatetimeIndex, days: pd.DataFrame, *,
                          std_offset_s: int = 0) -> np.ndarray:
    """True on the intervals of ``index`` whose local standard day is invalid in ``days``
    (the table of :func:`irradiance_validity` / :func:`module_temperature_validity`)."""
    if len(index) == 0 or days.empty or days["valid"].all():
        return np.zeros(len(index), dtype=bool)
    day = (_ts_s(index) + int(std_offset_s)) // 86400
    bad = _ts_s(pd.DatetimeIndex(days.index[~days["valid"].to_numpy(bool)])) // 86400
    return np.isin(day, bad)


def validity_flags(days: pd.DataFrame, *, device_id: str, quantity: str,
                   std_offset_s: int = 0, max_gap_days: int = 3,
                   excluded_from: tuple[str, ...] = ("pr", "filters", "degradation", "clock",
                                                     "drift", "soiling", "outage"),
                   ) -> pd.DataFrame:
    """One 'sensor_implausible' flag per run of invalid days with the same reason.

    Runs with the same reason separated by at most ``max_gap_days`` valid or missing days
    are one event (a dead cell that reads normal on one overcast day is still dead).
    Severity 'alarm' from 7 days, else 'warning'. The details say what the reason means,
    the days excluded and from which calculations.
    """
    bad = days[~days["valid"].to_numpy(bool)]
    if bad.empty:
        return flag_frame([])
    recs = []
    d = pd.DatetimeIndex(bad.index)
    reasons = bad["reason"].to_numpy(object)
    start = 0
    for i in range(1, len(d) + 1):
        if i < len(d) and reasons[i] == reasons[start] and (
                (d[i] - d[i - 1]).days <= max_gap_days + 1):
            continue
        first, last, why = d[start], d[i - 1], reasons[start]
        n_days = int(i - start)
        s0 = int(_ts_s(pd.DatetimeIndex([first]))[0]) - int(std_offset_s)
        e0 = int(_ts_s(pd.DatetimeIndex([last]))[0]) - int(std_offset_s) + 86400
        recs.append(dict(
            device_id=device_id, kind="sensor_implausible", start_s=s0, end_s=e0,
            severity="alarm" if (last - first).days + 1 >= 7 else "warning", lost_kwh=np.nan,
            details=dict(quantity=quantity, reason=why, meaning=VALIDITY_REASONS.get(why, why),
                         first_day=str(first.date()), last_day=str(last.date()),
                         n_days_excluded=n_days, excluded_from=list(excluded_from),
                         note="readings of these days are left out of every calculation "
                              "named in excluded_from; check, clean, re-seat or replace the "
                              "sensor")))
        start = i
    return flag_frame(recs)


def ambient_offset_samples(t_amb_c: pd.Series, t_mod_c: pd.Series, t_mod_model_c,
                           solar_elevation_deg, poa_wm2, *, night_elev_deg: float = -12.0,
                           full_sun_wm2: float = 600.0) -> tuple[np.ndarray, np.ndarray,
                                                                  np.ndarray, np.ndarray]:
    """The samples :func:`ambient_offset` takes its medians of: (night mask, T_amb − T_mod
    at night, full-sun mask, T_mod − T_model in full sun), the masks on the rows of
    ``t_amb_c``. An incremental run keeps them day by day (their medians do not add up)."""
    ta = t_amb_c.to_numpy(float)
    tm = t_mod_c.reindex(t_amb_c.index).to_numpy(float)
    el = np.asarray(solar_elevation_deg, dtype=float)
    g = np.asarray(poa_wm2, dtype=float)
    model = np.asarray(t_mod_model_c, dtype=float)
    with np.errstate(invalid="ignore"):
        night = (el < night_elev_deg) & np.isfinite(ta) & np.isfinite(tm)
        day = (g >= full_sun_wm2) & np.isfinite(tm) & np.isfinite(model)
    return night, (ta - tm)[night], day, (tm - model)[day]


def ambient_offset(t_amb_c: pd.Series, t_mod_c: pd.Series, t_mod_model_c, solar_elevation_deg,
                   poa_wm2, *, night_elev_deg: float = -12.0, full_sun_wm2: float = 600.0,
                   min_samples: int = 200, samples: tuple | None = None) -> dict:
    """How far the ambient sensor disagrees with the module sensor(s), night and day.

    At night (sun below ``night_elev_deg``) an unlit module sits at or a few degrees below
    the air (radiative sky cooling); in full sun the measured module temperature should
    match the Sandia module model driven by the ambient reading (King et al. 2004, Eq. 11).
    An ambient sensor reading Δ too high shows as T_amb − T_mod ≈ Δ + (0…3) °C at night
    *and* as T_mod − T_model ≈ −Δ in full sun; both are medians over the period.
    ``samples``: the (night differences, full-sun residuals) already taken
    (:func:`ambient_offset_samples`), instead of the series.

    Returns
    -------
    dict with ``night_diff_c`` (median T_amb − T_mod at night), ``day_residual_c`` (median
    T_mod − T_model in full sun), ``n_night``, ``n_day`` (NaN medians with fewer than
    ``min_samples`` samples).
    """
    if samples is None:
        _n, nd, _d, dr = ambient_offset_samples(t_amb_c, t_mod_c, t_mod_model_c,
                                                solar_elevation_deg, poa_wm2,
                                                night_elev_deg=night_elev_deg,
                                                full_sun_wm2=full_sun_wm2)
    else:
        nd, dr = (np.asarray(a, dtype=float) for a in samples)
    return dict(night_diff_c=float(np.median(nd)) if nd.size >= min_samples else np.nan,
                day_residual_c=float(np.median(dr)) if dr.size >= min_samples else np.nan,
                n_night=int(nd.size), n_day=int(dr.size))


def ambient_offset_flags(t_amb_c: pd.Series, t_mod_c: pd.Series, t_mod_model_c,
                         solar_elevation_deg, poa_wm2, *, device_id: str,
                         module_sensor: str, night_max_c: float = 4.0,
                         day_max_c: float = 3.0, min_days: int = 30,
                         samples: tuple | None = None, span_s: tuple[int, int] | None = None,
                         **kw) -> pd.DataFrame:
    """A 'sensor_implausible' flag (reason ``ambient_offset``) on an ambient sensor that
    reads high (or low) against a module sensor both at night and in full sun.

    Flagged when the night median T_amb − T_mod exceeds ``night_max_c`` and the full-sun
    median T_mod − T_model is below −``day_max_c`` (ambient too high), or the night median
    is below −``night_max_c`` and the day residual above ``day_max_c`` (too low); both
    over at least ``min_days`` days of data (common practice; sky cooling keeps the normal
    night difference within about 0…3 °C). The estimated offset is minus the day residual.
    ``samples`` and ``span_s`` (first and last row [UTC s]) may give the samples of
    :func:`ambient_offset_samples` and the period instead of the series (an incremental
    run joins stored days with new ones).
    """
    if samples is None:
        if t_amb_c.notna().sum() == 0 or t_mod_c.notna().sum() == 0:
            return flag_frame([])
        ts = _ts_s(t_amb_c.index)
        if ts.size == 0:
            return flag_frame([])
        span_s = (int(ts[0]), int(ts[-1]))
    if span_s is None or span_s[1] - span_s[0] < min_days * 86400:
        return flag_frame([])
    r = ambient_offset(t_amb_c, t_mod_c, t_mod_model_c, solar_elevation_deg, poa_wm2,
                       samples=samples, **kw)
    nd, dr = r["night_diff_c"], r["day_residual_c"]
    if not (np.isfinite(nd) and np.isfinite(dr)):
        return flag_frame([])
    high = nd > night_max_c and dr < -day_max_c
    low = nd < -night_max_c and dr > day_max_c
    if not (high or low):
        return flag_frame([])
    return flag_frame([dict(
        device_id=device_id, kind="sensor_implausible", start_s=int(span_s[0]),
        end_s=int(span_s[1]) + 900, severity="warning", lost_kwh=np.nan,
        details=dict(quantity="t_amb_c", reason="ambient_offset",
                     meaning=f"ambient reads about {-dr:+.1f} °C against module sensor "
                             f"{module_sensor} (night and full-sun evidence agree)",
                     offset_c=-dr, night_diff_c=nd, day_residual_c=dr,
                     n_night=r["n_night"], n_day=r["n_day"], module_sensor=module_sensor,
                     rule=f"night median T_amb - T_mod > {night_max_c:g} C and full-sun "
                          f"median T_mod - T_model < -{day_max_c:g} C (or the reverse); "
                          "T_model: Sandia module model (King et al. 2004, Eq. 11)",
                     note="modelled cell temperatures from this ambient sensor are biased; "
                          "check the radiation shield and the sensor's calibration"))])


def frame_sensor_validity(frame: pd.DataFrame, solar_elevation_deg, poa_clearsky_wm2, *,
                          p_dc_kwp: float, std_offset_s: int = 0, a: float = -3.56,
                          b: float = -0.0750, memo: dict | None = None
                          ) -> tuple[np.ndarray, np.ndarray]:
    """Invalid-interval masks of one inverter frame's POA and module-temperature readings.

    The per-day rules of :func:`irradiance_validity` (with the inverter's own AC power per
    kWp as the power evidence) and :func:`module_temperature_validity` (ambient and the
    Sandia module model, King et al. 2004 Eq. 11, with coefficients ``a``, ``b``), turned
    into interval masks. Used by the daily job to leave a faulty sensor's days out of PR
    and filters, and by the flags job before any diagnosis.

    ``memo`` (a dict kept across the inverters of one run): the module-temperature judgement
    of the last frame with the same inputs (timestamps, module and ambient temperature, wind,
    masked POA, sun) is reused, not recomputed: inverters on one set of sensors share it.

    Returns
    -------
    (poa_invalid, t_module_invalid): bool arrays on the frame's rows.
    """
    from analytics.temperature import module_temperature_sandia

    n = len(frame)
    if n == 0:
        return np.zeros(0, bool), np.zeros(0, bool)
    el = np.asarray(solar_elevation_deg, dtype=float)
    p_norm = None
    if "p_ac_kw" in frame and p_dc_kwp > 0:
        p_norm = frame["p_ac_kw"].to_numpy(float) / float(p_dc_kwp)
    g_bad = np.zeros(n, bool)
    if "poa_wm2" in frame and frame["poa_wm2"].notna().any():
        days = irradiance_validity(frame["poa_wm2"], el, poa_clearsky_wm2, p_norm=p_norm,
                                   std_offset_s=std_offset_s, memo=memo)
        g_bad = invalid_interval_mask(frame.index, days, std_offset_s=std_offset_s)
    t_bad = np.zeros(n, bool)
    if "t_module_c" in frame and frame["t_module_c"].notna().any():
        g = np.where(g_bad, np.nan, frame["poa_wm2"].to_numpy(float)) if "poa_wm2" in frame \
            else None
        ta = frame["t_amb_c"].to_numpy(float) if "t_amb_c" in frame else None
        wind_col = frame["wind_ms"].to_numpy(float) if "wind_ms" in frame else None
        inputs = (frame.index.asi8, frame["t_module_c"].to_numpy(float), g, ta, wind_col, el,
                  float(a), float(b), int(std_offset_s))
        hit = None if memo is None else memo.get("t_module")
        if hit is not None and _same_inputs(hit[0], inputs):
            return g_bad, hit[1].copy()
        model = None
        if g is not None and ta is not None and np.isfinite(ta).any():
            wind = (frame["wind_ms"].fillna(1.0).to_numpy(float) if "wind_ms" in frame
                    else 1.0)
            model = np.asarray(module_temperature_sandia(np.nan_to_num(g), ta, wind, a=a, b=b),
                               dtype=float)
        days = module_temperature_validity(frame["t_module_c"], poa_wm2=g, t_amb_c=ta,
                                           t_mod_model_c=model, std_offset_s=std_offset_s,
                                           day_mask=el >= 15.0)
        t_bad = invalid_interval_mask(frame.index, days, std_offset_s=std_offset_s)
        if memo is not None:
            memo["t_module"] = (inputs, t_bad.copy())
    return g_bad, t_bad


def _same_inputs(a: tuple, b: tuple) -> bool:
    """Whether two tuples of arrays / scalars / None hold the same values (NaN equal)."""
    for x, y in zip(a, b, strict=True):
        if x is None or y is None:
            if x is not y:
                return False
        elif isinstance(x, np.ndarray):
            if not (isinstance(y, np.ndarray) and x.shape == y.shape and (
                    np.array_equal(x, y) if x.dtype.kind in "iub"
                    else np.array_equal(x, y, equal_nan=True))):
                return False
        elif x != y:
            return False
    return True


def level_step(daily_ratio: pd.Series, *, min_side: int = 20, min_step: float = 0.03
               ) -> dict | None:
    """The largest persistent level step of a daily ratio (two sibling sensors, or a sensor
    and clear sky): the day that best splits the series into two medians, kept when the
    relative step |m_after / m_before − 1| reaches ``min_step`` with at least ``min_side``
    days on each side (a sensor swapped, re-levelled or knocked; common practice).

    Returns
    -------
    dict with ``day`` (first day after the step), ``step`` (relative, signed),
    ``before``, ``after`` (medians), or None.

    Examples
    --------
    A ratio of 1.00 for 40 days and 0.95 for 40 days gives step −0.05 on day 40.

    Notes
    -----
    The split minimises the summed absolute deviations from the two sides' medians (a
    single change in level under an L1 cost, robust to outlying days; the cost family of
    Killick et al. 2012, :mod:`analytics.changepoint`). Series longer than 440 points are
    first searched on about 200 evenly spaced splits, then on every split within one stride
    of the best of them, so a step is dated to its day, not to the coarse grid (before:
    up to ⌊(n − 40)/200⌋ − 1 points late). For a clear step the cost rises by about
    |step| per point of distance from the change, so the coarse best lies within one
    stride of it.
    """
    s = daily_ratio.dropna()
    n = len(s)
    if n < 2 * min_side:
        return None
    v = s.to_numpy(float)

    def cost(k: int) -> float:
        a, b = v[:k], v[k:]
        return float(np.abs(a - np.median(a)).sum() + np.abs(b - np.median(b)).sum())

    # a coarse search (about 200 candidate splits on a long series), then every split
    # within one stride of the coarse best, so the step is dated to its own day
    stride = max(1, (n - 2 * min_side) // 200)
    best = min(range(min_side, n - min_side + 1, stride), key=cost)
    if stride > 1:
        best = min(range(max(min_side, best - stride + 1),
                         min(n - min_side, best + stride - 1) + 1), key=cost)
    m0, m1 = float(np.median(v[:best])), float(np.median(v[best:]))
    step = m1 / m0 - 1.0 if m0 else np.nan
    # abrupt, not a drift: the medians of the min_side days either side step as well
    l0, l1 = float(np.median(v[best - min_side:best])), float(np.median(v[best:best + min_side]))
    local = l1 / l0 - 1.0 if l0 else np.nan
    if not (np.isfinite(step) and np.isfinite(local)) or min(abs(step), abs(local)) < min_step:
        return None
    return dict(day=pd.Timestamp(s.index[best]), step=step, before=m0, after=m1)


def sibling_jump_flags(ratios: dict[str, pd.Series], *, std_offset_s: int = 0,
                       min_step: float = 0.03) -> pd.DataFrame:
    """A 'sensor_implausible' flag (reason ``jump_vs_sibling``) where the ratio of two
    irradiance sensors' clear-day readings steps by ``min_step`` or more and stays there.

    The suspect is the sensor whose own clear-sky ratio shows the larger step at that day
    (the sky does not jump). Its readings from the step on are excluded from every
    calculation named in ``excluded_from`` (:func:`jump_validity` turns the flag into
    invalid days; a sensor re-levelled by mistake is wrong afterwards, and one put right
    after a fault would show as a step at its previous fault instead).
    """
    recs = []
    ids = sorted(ratios)
    for i, a in enumerate(ids):
        for b in ids[i + 1:]:
            q = (ratios[a] / ratios[b].reindex(ratios[a].index)).dropna()
            st = level_step(q, min_step=min_step)
            if st is None:
                continue
            own = {}
            for sid in (a, b):
                r = ratios[sid].dropna()
                before = r[r.index < st["day"]].tail(60)
                after = r[r.index >= st["day"]].head(60)
                own[sid] = (abs(np.median(after) / np.median(before) - 1)
                            if len(before) >= 5 and len(after) >= 5 else 0.0)
            suspect = max(own, key=own.get)
            s0 = int(_ts_s(pd.DatetimeIndex([st["day"]]))[0]) - int(std_offset_s)
            e0 = int(_ts_s(pd.DatetimeIndex([q.index[-1]]))[0]) - int(std_offset_s) + 86400
            recs.append(dict(
                device_id=suspect, kind="sensor_implausible", start_s=s0, end_s=e0,
                severity="warning", lost_kwh=np.nan,
                details=dict(quantity="poa_wm2", reason="jump_vs_sibling",
                             meaning=f"clear-day ratio {a}/{b} steps by {100 * st['step']:+.1f} % "
                                     f"on {st['day'].date()} and stays",
                             pair=[a, b], step_pct=100 * st["step"],
                             own_clear_sky_step_pct={k: 100 * v for k, v in own.items()},
                             rule=f"median split of the daily clear-day ratio of two sensors, "
                                  f"|step| >= {100 * min_step:g} % with >= 20 days each side",
                             first_day=str(st["day"].date()),
                             last_day=str(q.index[-1].date()),
                             excluded_from=["pr", "filters", "degradation", "clock", "drift",
                                            "soiling", "outage"],
                             note="check the sensors' mounting, levelling and calibration; "
                                  "split degradation series at this day")))
    return flag_frame(recs)


def clear_day_ratio(g: pd.Series, g_cs: pd.Series, aoi_deg, *, std_offset_s: int = 0
                    ) -> pd.Series:
    """Daily median G_meas / G_clearsky,POA on the sensor's own clear days
    (:func:`analytics.clock.clear_day_mask` with the measured / clear-sky insolation within
    0.7–1.3, then :func:`clear_period_ratio`)."""
    from analytics.clock import clear_day_mask

    if g.notna().sum() == 0:
        return pd.Series(dtype=float)
    clear = clear_day_mask(g, g_cs, std_offset_s=std_offset_s, ratio_range=(0.7, 1.3))
    return clear_period_ratio(g, g_cs, aoi_deg, clear, std_offset_s=std_offset_s)


def jump_validity(flags: pd.DataFrame, days_by_sensor: dict[str, pd.DatetimeIndex], *,
                  std_offset_s: int = 0) -> dict[str, pd.DataFrame]:
    """Day tables (as :func:`irradiance_validity`) marking each sensor's days inside its
    ``jump_vs_sibling`` flags (:func:`sibling_jump_flags`) invalid with that reason, on the
    local standard days ``days_by_sensor[sensor]`` (those the sensor has readings on).

    A sensor that stepped against its siblings reads wrong from the step on: its readings
    give no evidence for PR, filters, degradation, clock, soiling or outages (issue #14)."""
    out: dict[str, pd.DataFrame] = {}
    if flags.empty:
        return out
    for f in flags.itertuples():
        days = days_by_sensor.get(f.device_id)
        if days is None or len(days) == 0:
            continue
        d_s = _ts_s(pd.DatetimeIndex(days))
        lo, hi = f.start_s + int(std_offset_s), f.end_s + int(std_offset_s)
        bad = (d_s >= lo) & (d_s < hi)
        tab = out.get(f.device_id)
        if tab is None:
            tab = pd.DataFrame({"valid": np.ones(len(days), bool),
                                "reason": np.full(len(days), "", dtype=object)},
                               index=pd.DatetimeIndex(days))
        tab.loc[bad & tab["valid"].to_numpy(bool), "reason"] = "jump_vs_sibling"
        tab["valid"] = tab["reason"] == ""
        out[f.device_id] = tab
    return out


def high_vs_power_days(h_kwhm2: pd.Series, yf_h: pd.DataFrame, *, min_pr: float = 0.4,
                       min_yf_h: float = 0.5, min_inverters: int = 2,
                       share: float = 2.0 / 3.0) -> pd.Series:
    """Days on which an irradiance sensor reads far more than the arrays under it deliver.

    ``h_kwhm2``: the sensor's daily insolation H (numerically the reference yield Y_r in h);
    ``yf_h``: the daily final yield Y_f = E_ac / P_dc,STC of each inverter on the sensor
    (columns), NaN where the inverter was not fully available (an outage or missing data is
    not evidence). A day is ``high_vs_power`` when at least ``min_inverters`` available
    inverters produced (Y_f ≥ ``min_yf_h``) and at least ``share`` of them have
    PR = Y_f / Y_r below ``min_pr`` (IEC 61724-1 PR; a working fixed array stays well above
    0.6 on any day, clipping included, common practice). One inverter on its own cannot
    tell a sensor reading high from its own loss, so a sensor with fewer inverters is left
    to the clear-sky check (:func:`clear_sky_level_flags`).

    Returns
    -------
    Series of bool by day (the index of ``h_kwhm2``).
    """
    if h_kwhm2.empty or yf_h.empty:
        return pd.Series(False, index=h_kwhm2.index, dtype=bool)
    y = yf_h.reindex(h_kwhm2.index)
    h = h_kwhm2.to_numpy(float)[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        prod = y.to_numpy(float) >= min_yf_h
        low = prod & (y.to_numpy(float) < min_pr * h)
    n = prod.sum(axis=1)
    k = low.sum(axis=1)
    return pd.Series((n >= min_inverters) & (k >= share * np.maximum(n, 1)),
                     index=h_kwhm2.index)


def clear_sky_level_flags(daily_ratio: pd.Series, *, device_id: str, lo: float = 0.8,
                          hi: float = 1.2, window: int = 15, min_days: int = 10,
                          std_offset_s: int = 0) -> pd.DataFrame:
    """A 'sensor_implausible' flag (reason ``off_clear_sky``) where a POA sensor's clear-day
    readings sit outside [``lo``, ``hi``] × the modelled clear-sky POA.

    Clear-sky models carry 5–10 % bias (from memory), so only a gross disagreement counts:
    the rolling median of ``window`` clear days outside ±20 % for at least ``min_days``
    clear days (a wrong scale factor, a sensor on the wrong plane, a covered or dead cell
    that still reads something; common practice). Report only: the level of a sensor is
    for a calibration to settle, the clock and drift checks use its shape and trend.
    """
    r = daily_ratio.dropna()
    if len(r) < min_days:
        return flag_frame([])
    med = r.rolling(window, center=True, min_periods=min(min_days, window)).median()
    out_m = ((med < lo) | (med > hi)).to_numpy()
    recs = []
    for a, b in _true_runs(out_m):
        if b - a + 1 < min_days:
            continue
        seg = med.iloc[a:b + 1]
        s0 = int(_ts_s(pd.DatetimeIndex([r.index[a]]))[0]) - int(std_offset_s)
        e0 = int(_ts_s(pd.DatetimeIndex([r.index[b]]))[0]) - int(std_offset_s) + 86400
        level = float(np.median(seg))
        recs.append(dict(
            device_id=device_id, kind="sensor_implausible", start_s=s0, end_s=e0,
            severity="warning", lost_kwh=np.nan,
            details=dict(quantity="poa_wm2", reason="off_clear_sky",
                         meaning=f"reads {100 * (level - 1):+.0f} % against modelled clear-sky "
                                 "POA on clear days",
                         median_clear_day_ratio=level, n_clear_days=int(b - a + 1),
                         rule=f"{window}-clear-day median of measured / clear-sky POA outside "
                              f"[{lo:g}, {hi:g}] for >= {min_days} clear days",
                         note="check the sensor's plane (tilt, azimuth), its calibration "
                              "factor and its unit")))
    return flag_frame(recs)
