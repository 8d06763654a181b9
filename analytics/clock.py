"""Clock errors: timestamps shifted against the sun.

On a clear day the irradiance (and the power) profile is centred on solar noon. The
irradiance-weighted centroid time of the measured profile is compared with the centroid of
the modelled clear-sky POA irradiance sampled at the same intervals (pvlib Ineichen
clear sky transposed to the array plane; for a south-facing fixed array that centroid is
the solar transit (pvlib ``sun_rise_set_transit_spa``, Reda & Andreas 2004 SPA, pvlib docs), and the comparison works for any azimuth). The difference
Δ = t_measured − t_model is about

* constant n·60 min: wrong time zone or a logger an hour off;
* ±60 min between DST dates: the logger applies (or omits) daylight saving time;
* one interval length: interval-start versus interval-end labels confused;
* a slow ramp: a drifting logger clock.

A flag is raised where the median Δ of 7 clear days exceeds 10 min (common
practice). Its details carry a correction the user can paste into the site configuration:
``[[sources.clock_corrections]]`` with ``shift_minutes = −Δ``, in the export's own local
dates (ingest applies it before converting to UTC).

References
----------
.. [1] pvlib python documentation: ``solarposition.sun_rise_set_transit_spa``,
   ``location.Location.get_clearsky`` (Ineichen & Perez 2002),
   ``irradiance.get_total_irradiance``.
.. [2] J. S. Stein, C. W. Hansen, M. J. Reno, "The variability index: a new and novel
   metric for quantifying irradiance and PV output variability," World Renewable Energy
   Forum, 2012 (from memory): clear days have a variability index near 1.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from analytics.outliers import day_start_s, epoch_s, flag_frame


def _local_day_and_minute(index: pd.DatetimeIndex, tau_h, std_offset_s: int):
    ts = epoch_s(index) + int(std_offset_s)
    mid = ts + np.asarray(tau_h, dtype=float) * 1800.0  # interval midpoint
    day = ts // 86400
    minute = (mid - day * 86400) / 60.0
    return day, minute


def _day_codes(index: pd.DatetimeIndex, std_offset_s: int):
    """Local standard day number of each sample, as codes 0..n-1, and the day Timestamps."""
    day = (epoch_s(index) + int(std_offset_s)) // 86400
    if day.size == 0:
        return day, pd.DatetimeIndex([])
    d0 = int(day.min())
    code = day - d0
    days = pd.to_datetime((np.arange(int(code.max()) + 1) + d0) * 86400, unit="s")
    return code, days


def daily_centroid_min(x: pd.Series, tau_h, *, std_offset_s: int = 0) -> pd.Series:
    """Irradiance-weighted centroid time of each day's profile, in minutes after local
    standard midnight: Σ x_k t_k / Σ x_k, t_k = interval midpoint, x < 0 taken as 0.

    Parameters
    ----------
    x : Series
        Irradiance [W/m²] or power [kW], index ``ts_utc`` (interval start).
    tau_h : float or array
        Interval length. [h]
    std_offset_s : int
        Site standard UTC offset (east positive). [s]

    Returns
    -------
    Series indexed by local standard day (Timestamp), minutes; NaN for days without signal.

    Examples
    --------
    A symmetric profile of hourly intervals 11:00-13:00 UTC at UTC+1 has its centroid at the
    middle interval's midpoint, 12:30 UTC = 13:30 local standard time = 810 min:

    >>> t = pd.date_range("2023-06-01 11:00", periods=3, freq="1h", tz="UTC")
    >>> daily_centroid_min(pd.Series([100.0, 200.0, 100.0], t), 1.0, std_offset_s=3600).tolist()
    [810.0]
    """
    code, days = _day_codes(x.index, std_offset_s)
    if code.size == 0:
        return pd.Series([], index=days, dtype=float)
    _day, minute = _local_day_and_minute(x.index, tau_h, std_offset_s)
    w = np.clip(np.nan_to_num(x.to_numpy(float), nan=0.0), 0.0, None)
    sw = np.bincount(code, weights=w, minlength=len(days))
    swm = np.bincount(code, weights=w * minute, minlength=len(days))
    with np.errstate(invalid="ignore", divide="ignore"):
        c = np.where(sw > 0, swm / sw, np.nan)
    return pd.Series(c, index=days)


def clear_day_mask(x: pd.Series, x_cs: pd.Series, *, std_offset_s: int = 0,
                   max_vi: float = 1.3, ratio_range: tuple[float, float] | None = None,
                   min_coverage: float = 0.9) -> pd.Series:
    """Clear days: the measured profile is as smooth as the clear-sky one.

    The variability index VI = Σ|Δx| / Σ|Δx_cs| after scaling each day's series to unit
    sum is close to 1 on a clear day whatever the scale and the clock shift; cloudy days
    give VI ≫ 1. It is a scale-free form of the variability index of Stein et al. 2012
    (from memory: their ratio of curve lengths also counts the time step between readings). For irradiance, ``ratio_range`` also
    bounds Σx / Σx_cs (e.g. (0.7, 1.3): clear-sky models carry 5–10 % bias). A day also
    needs readings in ``min_coverage`` of its daylight intervals.

    Returns
    -------
    Series of bool indexed by local standard day.
    """
    code, days = _day_codes(x.index, std_offset_s)
    n = len(days)
    if n == 0:
        return pd.Series([], index=days, dtype=bool)
    xm = np.clip(x.to_numpy(float), 0.0, None)
    cs = np.clip(np.nan_to_num(x_cs.reindex(x.index).to_numpy(float), nan=0.0), 0.0, None)
    has = np.isfinite(xm)
    xz = np.where(has, xm, 0.0)
    x_tot = np.bincount(code, weights=xz, minlength=n)
    cs_tot = np.bincount(code, weights=cs, minlength=n)
    lit = cs > 0
    cover = (np.bincount(code, weights=(has & lit).astype(float), minlength=n)
             / np.maximum(np.bincount(code, weights=lit.astype(float), minlength=n), 1))
    with np.errstate(invalid="ignore", divide="ignore"):
        xn = xz / x_tot[code]
        csn = cs / cs_tot[code]
        same = np.concatenate(([False], code[1:] == code[:-1]))
        dx = np.where(same, np.abs(np.diff(xn, prepend=np.nan)), 0.0)
        dcs = np.where(same, np.abs(np.diff(csn, prepend=np.nan)), 0.0)
        vi = (np.bincount(code, weights=np.nan_to_num(dx), minlength=n)
              / np.bincount(code, weights=np.nan_to_num(dcs), minlength=n))
        ok = (vi <= max_vi) & (cover >= min_coverage) & (x_tot > 0) & (cs_tot > 0)
        if ratio_range is not None:
            r = x_tot / cs_tot
            ok &= (r >= ratio_range[0]) & (r <= ratio_range[1])
    return pd.Series(np.nan_to_num(ok).astype(bool), index=days)


def clock_offsets(x: pd.Series, x_cs: pd.Series, tau_h, *, std_offset_s: int = 0,
                  clear: pd.Series | None = None, cs_centroid: pd.Series | None = None,
                  **clear_kw) -> pd.DataFrame:
    """Daily Δ = centroid(measured) − centroid(clear-sky model), in minutes.

    ``cs_centroid`` may pass the clear-sky centroids already computed for the same
    timestamps (devices on one grid share them).

    Returns
    -------
    DataFrame indexed by local standard day: ``delta_min`` [min], ``clear`` (bool).
    """
    c_meas = daily_centroid_min(x, tau_h, std_offset_s=std_offset_s)
    c_cs = (cs_centroid.reindex(c_meas.index) if cs_centroid is not None else
            daily_centroid_min(x_cs.reindex(x.index), tau_h, std_offset_s=std_offset_s))
    if clear is None:
        clear = clear_day_mask(x, x_cs, std_offset_s=std_offset_s, **clear_kw)
    out = pd.DataFrame({"delta_min": c_meas - c_cs})
    out["clear"] = clear.reindex(out.index).fillna(False).astype(bool)
    return out


def _snap(minutes: float, step: float = 15.0, tol: float = 5.0) -> int:
    q = step * round(minutes / step)
    return int(q) if abs(minutes - q) <= tol else int(round(minutes))


def _refine_boundary(all_delta: pd.Series, lo, hi, before: float, after: float):
    """Change day c in (lo, hi] minimising Σ|Δ−before| (days < c) + Σ|Δ−after| (≥ c)."""
    seg = all_delta[(all_delta.index > lo) & (all_delta.index <= hi)].dropna()
    cands = pd.date_range(lo + pd.Timedelta(days=1), hi, freq="D")
    if len(cands) <= 1 or seg.empty:
        return hi
    cost = [np.sum(np.abs(seg[seg.index < c] - before)) + np.sum(np.abs(seg[seg.index >= c] - after))
            for c in cands]
    return cands[int(np.argmin(cost))]


def _partly_shifted(delta, level: float, other: float, share: float = 0.08) -> bool:
    """A boundary day whose Δ lies between the shifted ``level`` and the ``other`` side's,
    more than ``share`` of the way from ``other`` (≈ 5 min of a 60-min shift: the morning
    hours before a fix at 10:00 carry about 15 % of a day's light; common practice)."""
    if delta is None or not np.isfinite(delta):
        return False
    span = level - other
    return abs(span) > 0 and share < (delta - other) / span < 1.0 - share / 3


def _dst_dates(zone: str | None, first, last) -> list[pd.Timestamp]:
    """Local dates in [first − 1 d, last + 2 d] on which ``zone`` changes its UTC offset."""
    if not zone or zone == "UTC":
        return []
    hours = pd.date_range(pd.Timestamp(first) - pd.Timedelta(days=1),
                          pd.Timestamp(last) + pd.Timedelta(days=2), freq="h", tz="UTC")
    try:
        local = hours.tz_convert(zone)
    except Exception:  # noqa: BLE001 - an unknown zone means "no DST dates to snap to"
        return []
    off = (local.tz_localize(None) - hours.tz_localize(None)).asi8
    ch = np.flatnonzero(np.diff(off) != 0) + 1
    return [pd.Timestamp(local[i].date()) for i in ch]


def _first_at(days: pd.DatetimeIndex, day) -> int:
    """Position of the first ``day`` in ``days`` (as ``list.index``)."""
    return int(np.flatnonzero(days == day)[0])


def clock_shift_flags(offsets: pd.DataFrame, *, device_id: str, threshold_min: float = 10.0,
                      n_clear: int = 7, min_clear_days: int = 4, std_offset_s: int = 0,
                      site_zone: str | None = None, source_name: str | None = None,
                      export_zone: str = "local") -> pd.DataFrame:
    """Clock-shift flags from :func:`clock_offsets`.

    Parameters
    ----------
    offsets : DataFrame
        ``delta_min`` and ``clear`` per local standard day.
    threshold_min : float
        Flag where the rolling median of ``n_clear`` clear days exceeds this (7 clear
        days, 10 min; common practice). [min]
    min_clear_days : int
        Segments supported by fewer clear days are not flagged.
    site_zone : str, optional
        IANA zone of the site: a ±60-min segment whose boundaries could fall on a DST change
        is snapped to it and labelled as a DST error.
    source_name, export_zone : str, optional
        For the correction snippet (``export_zone`` of the source's timestamps: 'local',
        'UTC' or '+hh:mm'); the dates are the export's own dates.

    Returns
    -------
    DataFrame with :data:`~analytics.outliers.FLAG_COLUMNS`; ``details['correction_toml']``
    is a ready-to-paste ``[[sources.clock_corrections]]`` block.
    """
    clear = offsets[offsets["clear"]]["delta_min"].dropna()
    if len(clear) < min_clear_days:
        return flag_frame([])
    med = clear.rolling(n_clear, center=True, min_periods=min(4, n_clear)).median()
    shifted = med.abs() > threshold_min
    if not shifted.any():  # no segment to flag (most inverters, most of the time)
        return flag_frame([])
    level_jump = med.diff().abs() > threshold_min
    seg_id = ((shifted != shifted.shift()) | level_jump).cumsum()
    all_delta = offsets["delta_min"]
    days = clear.index  # not a list: 1 800 Timestamps per inverter-history (issue #16)
    records = []
    for _sid, grp in clear.groupby(seg_id):
        if not shifted[grp.index[0]] or len(grp) < min_clear_days:
            continue
        level = float(np.median(grp))
        first, last = grp.index[0], grp.index[-1]
        i0, i1 = _first_at(days, first), _first_at(days, last)
        prev_day = days[i0 - 1] if i0 > 0 else None
        next_day = days[i1 + 1] if i1 + 1 < len(days) else None
        before = float(np.median(clear[:prev_day].tail(n_clear))) if prev_day is not None else 0.0
        after = float(np.median(clear[next_day:].head(n_clear))) if next_day is not None else 0.0
        # a shift present from the first (to the last) day of data covers the whole span
        start = offsets.index[0] if prev_day is None else _refine_boundary(
            all_delta, prev_day, first, before, level)
        end = offsets.index[-1]
        partial_end = False
        change = None
        if next_day is not None:
            change = _refine_boundary(all_delta, last, next_day, level, after)
            end = change - pd.Timedelta(days=1)
            # the clock is usually fixed during a day: that day is partly shifted, which
            # moves its centroid part of the way; its readings before the fix need the
            # correction too, so the block ends on it (issue #14: end date one day short)
            if _partly_shifted(all_delta.get(change), level, after):
                end, partial_end = change, True
        if prev_day is not None and _partly_shifted(
                all_delta.get(start - pd.Timedelta(days=1)), level, before):
            start = start - pd.Timedelta(days=1)
        shift = -_snap(level)
        dst = end_dst = False
        if abs(abs(level) - 60) <= threshold_min:
            lo_d = prev_day if prev_day is not None else first
            hi_d = next_day if next_day is not None else last
            for dd in _dst_dates(site_zone, lo_d, hi_d):
                if prev_day is not None and prev_day < dd <= first:
                    start, dst = dd, True
                if next_day is not None and last < dd <= next_day:
                    end, dst, end_dst = dd - pd.Timedelta(days=1), True, True
        cause = ("daylight saving time applied or omitted by the logger" if dst else
                 "wrong time zone or logger an hour off" if abs(abs(level) - 60) <= threshold_min
                 else "interval-start/interval-end label confusion or clock offset")
        src = f'  # under the [[sources]] entry "{source_name}"\n' if source_name else ""
        toml = ("[[sources.clock_corrections]]\n" + src +
                f"start = {start.date().isoformat()}\n"
                f"end = {end.date().isoformat()}\n"
                f"shift_minutes = {shift}\n"
                f'note = "heliaudit clock_shift on {device_id}: profile {level:+.0f} min '
                f'against the sun"\n')
        s0 = int(day_start_s([start], std_offset_s)[0])
        e0 = int(day_start_s([end], std_offset_s)[0]) + 86400
        records.append(dict(
            device_id=device_id, kind="clock_shift", start_s=s0, end_s=e0,
            severity="alarm" if abs(level) >= 30 else "warning", lost_kwh=np.nan,
            details=dict(
                shift_minutes_measured=level, shift_minutes_correction=shift,
                first_day=str(start.date()), last_day=str(end.date()),
                start_between=[str((prev_day + pd.Timedelta(days=1)).date())
                               if prev_day is not None else str(first.date()), str(first.date())],
                end_between=[str(last.date()), str((next_day - pd.Timedelta(days=1)).date())
                             if next_day is not None else str(last.date())],
                n_clear_days=int(len(grp)), probable_cause=cause, dst_change=dst,
                last_day_partly_shifted=bool(partial_end and not end_dst),
                change_day=(str(change.date()) if change is not None and not end_dst
                            else None),
                delta_after_min=after,
                export_zone=export_zone, correction_toml=toml,
                note="start/end are dates in the export's own (shifted) local time; ingest "
                     "adds shift_minutes to each timestamp in that range before converting to "
                     "UTC. Re-load the affected files after adding the block. At the "
                     "boundaries |shift| minutes of night-time readings may overlap or leave a "
                     "gap. When last_day_partly_shifted is true the clock was fixed during that "
                     "day: replace the end date by the date and hour of the fix "
                     "(end = YYYY-MM-DDTHH:MM:SS) so its later readings stay as they are.",
                method="irradiance-weighted centroid of the day's profile minus the centroid "
                       "of modelled clear-sky POA (pvlib Ineichen); 7-clear-day median "
                       "> 10 min (common practice)")))
    return flag_frame(records)


def change_time_s(ts_s, x, x_cs, tau_s, *, day_start_s: int, shifted_min: float,
                  other_min: float, fixed: bool = True, min_gain: float = 0.2) -> dict | None:
    """The moment, within one day, at which a clock was fixed (``fixed``) or went wrong.

    Two kinds of evidence, best first:

    * ``label_gap``: a clock set forward by |Δ| (labels early, then right) leaves a hole of
      about |Δ| in the labels at the fix (a clock set back duplicates |Δ| of labels instead,
      which ingest drops); a hole of |shifted − other| ± one interval in the day's
      timestamps gives the moment exactly;
    * ``profile_fit``: otherwise the split k that best explains the day's readings as the
      clear-sky profile shifted by ``shifted_min`` before k and by ``other_min`` after it
      (least squares with one scale factor per side; the readings of a partly shifted day
      jump at the fix). Kept only when it lowers the squared error of the best unsplit fit
      by at least ``min_gain`` (a share).

    Parameters
    ----------
    ts_s : array of int
        Interval starts of the day's readings, UTC epoch seconds, sorted.
    x, x_cs : array
        Readings and the modelled clear-sky profile (same unit up to a factor) on ``ts_s``.
    tau_s : array or float
        Interval lengths. [s]
    day_start_s : int
        UTC epoch seconds of the local standard midnight that starts the day.
    shifted_min, other_min : float
        Δ of the shifted side and of the other side (minutes; the profile appears that much
        late).
    fixed : bool
        True: the readings before the moment are shifted (a fix); False: those after it.

    Returns
    -------
    dict(``first_after_s``: start of the first interval on the far side of the change,
    ``last_before_s``: start of the last interval before it, ``evidence``), or None.
    """
    ts = np.asarray(ts_s, dtype=np.int64)
    v = np.asarray(x, dtype=float)
    cs = np.clip(np.nan_to_num(np.asarray(x_cs, dtype=float)), 0.0, None)
    tau = np.broadcast_to(np.asarray(tau_s, dtype=float), ts.shape).astype(float)
    m = (ts >= day_start_s) & (ts < day_start_s + 86400)
    ts, v, cs, tau = ts[m], v[m], cs[m], tau[m]
    if ts.size < 8:
        return None
    gap = np.diff(ts) - tau[:-1]
    want = abs(shifted_min - other_min) * 60.0
    hole = np.flatnonzero(np.abs(gap - want) <= np.maximum(tau[:-1], 600.0))
    if hole.size == 1 and want >= 1800.0:
        k = int(hole[0]) + 1
        return dict(first_after_s=int(ts[k]), last_before_s=int(ts[k - 1]),
                    evidence="label_gap")
    ok = np.isfinite(v)
    if ok.sum() < 8 or not (cs > 0).any():
        return None
    mid = ts + tau / 2.0

    def model(shift_min):
        return np.interp(mid - shift_min * 60.0, mid, cs, left=0.0, right=0.0)

    before = model(shifted_min if fixed else other_min)
    after = model(other_min if fixed else shifted_min)

    def sse(y, mdl):
        den = float(np.dot(mdl, mdl))
        if den <= 0:
            return float(np.dot(y, y))
        a = float(np.dot(y, mdl)) / den
        r = y - a * mdl
        return float(np.dot(r, r))

    y = np.where(ok, v, 0.0)
    b_m, a_m = np.where(ok, before, 0.0), np.where(ok, after, 0.0)
    lit = np.flatnonzero((cs > 0) & ok)
    if lit.size < 8:
        return None
    best_k, best = None, np.inf
    for k in lit[2:-2]:
        e = sse(y[:k], b_m[:k]) + sse(y[k:], a_m[k:])
        if e < best:
            best_k, best = int(k), e
    base = min(sse(y, b_m), sse(y, a_m))
    if best_k is None or base <= 0 or (base - best) / base < min_gain:
        return None
    return dict(first_after_s=int(ts[best_k]), last_before_s=int(ts[best_k - 1]),
                evidence="profile_fit")


def local_wall_clock(ts_s: int, zone: str) -> str:
    """``YYYY-MM-DDTHH:MM:SS`` of UTC epoch seconds in ``zone`` (an IANA zone, 'UTC' or a
    fixed '+hh:mm'), as an export in that zone would label it."""
    t = pd.Timestamp(int(ts_s), unit="s", tz="UTC")
    try:
        loc = t.tz_convert(zone)
    except Exception:  # noqa: BLE001 - a fixed '+hh:mm' offset
        sign = -1 if str(zone).startswith("-") else 1
        hh, mm = str(zone).lstrip("+-").split(":")
        loc = t + sign * pd.Timedelta(hours=int(hh), minutes=int(mm))
    return loc.tz_localize(None).strftime("%Y-%m-%dT%H:%M:%S")


def refine_fix_moment(flags: pd.DataFrame, x: pd.Series, x_cs: pd.Series, tau_h, *,
                      std_offset_s: int = 0, zone: str = "UTC") -> pd.DataFrame:
    """Clock flags of one device with the moment of a fix during the day, where the data
    show it (:func:`change_time_s` on the day after the shifted run, ``change_day``).

    The flag then ends at the first reading with the right time (``end_s``), its
    ``last_day`` is that day, and the correction's ``end`` is the local date-time one second
    before it in the export's zone ``zone`` (ingest treats ``end`` as inclusive), so the
    readings after the fix stay as they are (issue #14: a mid-day fix gave a date-only end).
    ``details['fix_moment']`` says which evidence gave it.
    """
    if flags.empty or x.empty:
        return flags
    flags = flags.copy()
    ts = epoch_s(x.index)
    tau_s = np.broadcast_to(np.asarray(tau_h, dtype=float) * 3600.0, ts.shape)
    cs = x_cs.reindex(x.index).to_numpy(float)
    for i in flags.index:
        det = dict(flags.at[i, "details"])
        if flags.at[i, "kind"] != "clock_shift" or not det.get("change_day"):
            continue
        d0 = int(day_start_s([pd.Timestamp(det["change_day"])], std_offset_s)[0])
        r = change_time_s(ts, x.to_numpy(float), cs, tau_s, day_start_s=d0,
                          shifted_min=float(det["shift_minutes_measured"]),
                          other_min=float(det.get("delta_after_min") or 0.0))
        if r is None:
            continue
        end_local = local_wall_clock(r["first_after_s"] - 1, zone)
        det.update(last_day=det["change_day"], last_day_partly_shifted=True,
                   fix_moment=dict(first_right_reading_utc_s=int(r["first_after_s"]),
                                   correction_end_local=end_local, evidence=r["evidence"]))
        det["correction_toml"] = "\n".join(
            f"end = {end_local}" if ln.startswith("end = ") else ln
            for ln in det["correction_toml"].splitlines()) + "\n"
        flags.at[i, "end_s"] = int(r["first_after_s"])
        flags.at[i, "details"] = det
    return flags
