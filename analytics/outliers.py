"""Fleet outliers: inverters that produce less than their peers under the same sky.

Each inverter's daily performance index ``pi`` (measured / expected energy, already
temperature-corrected by the expected-power model) is divided by the median ``pi`` of its
peer group on that day (the *peer ratio*). Weather, soiling and sensor errors shared by
the group cancel in the ratio; what is left is the inverter's own deficit. Each day the
peer ratios are turned into robust z-scores (median and scaled median absolute deviation),
and a persistence rule turns low days into dated events, so that one cloudy-edge day is
not an alarm while a failed string is.

Flag frames returned here (and by the other detectors of :mod:`analytics`) have the columns
:data:`FLAG_COLUMNS`; ``details`` holds a dict of the evidence.

References
----------
.. [1] B. Iglewicz and D. Hoaglin, *How to Detect and Handle Outliers*, ASQC, 1993
   (modified z-score; via the NIST/SEMATECH e-Handbook of Statistical Methods).
.. [2] SciPy documentation, ``scipy.stats.median_abs_deviation(scale='normal')``.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

#: Columns of every flag frame the detectors return (``details`` is a dict).
FLAG_COLUMNS = ("device_id", "kind", "start_s", "end_s", "severity", "lost_kwh", "details")

#: Shown in the details of flags that send someone to the field.
FIELD_CAUTION = (
    "PV arrays are energised whenever they are lit, and disconnecting an inverter does not "
    "de-energise its DC side. Inspection and repair are for qualified people working under "
    "local electrical codes and lockout/tagout procedures.")

#: sqrt(pi/2): mean absolute deviation -> standard deviation for normal data (E|X − μ| = σ·√(2/π) for a normal distribution).
MEAN_AD_TO_SIGMA = 1.253314
#: Φ⁻¹(0.75): MAD / this estimates σ for normal data (scipy's ``scale="normal"`` [2]).
NORMAL_MAD_SCALE = 0.6744897501960817


def flag_frame(records: list[dict]) -> pd.DataFrame:
    """Build a flag frame (columns :data:`FLAG_COLUMNS`) from a list of dicts."""
    if not records:
        return _EMPTY_FLAGS.copy()
    cols = {c: [r.get(c) for r in records] for c in FLAG_COLUMNS}
    return pd.DataFrame({
        "device_id": pd.Series(cols["device_id"], dtype=object),
        "kind": pd.Series(cols["kind"], dtype=object),
        "start_s": np.asarray(cols["start_s"], dtype="int64"),
        "end_s": np.asarray(cols["end_s"], dtype="int64"),
        "severity": pd.Series(cols["severity"], dtype=object),
        "lost_kwh": np.asarray([np.nan if v is None else v for v in cols["lost_kwh"]],
                               dtype="float64"),
        "details": pd.Series(cols["details"], dtype=object)})


_EMPTY_FLAGS = pd.DataFrame({
    "device_id": pd.Series([], dtype=object), "kind": pd.Series([], dtype=object),
    "start_s": np.zeros(0, dtype="int64"), "end_s": np.zeros(0, dtype="int64"),
    "severity": pd.Series([], dtype=object), "lost_kwh": np.zeros(0),
    "details": pd.Series([], dtype=object)})


def epoch_s(index) -> np.ndarray:
    """Integer UTC epoch seconds of a DatetimeIndex, whatever its resolution (s, ms, us, ns)."""
    idx = index if isinstance(index, pd.DatetimeIndex) else pd.DatetimeIndex(index)
    per_s = {"s": 1, "ms": 10**3, "us": 10**6, "ns": 10**9}[idx.unit]
    return idx.asi8 // per_s  # asi8 counts from the UTC epoch, also for tz-aware


def day_start_s(days, std_offset_s: int = 0) -> np.ndarray:
    """UTC epoch seconds of the start of each local-standard-time ``day``.

    ``std_offset_s`` is the site's standard UTC offset (east positive), e.g. +3600 for
    Central Europe: local midnight is 23:00 UTC the day before.
    """
    d = pd.to_datetime(pd.Index(days)).values.astype("datetime64[s]").astype("int64")
    return d - int(std_offset_s)


def robust_z(x, axis=None, *, mad_zero_fallback: bool = True):
    """Robust z-score: distance from the median in units of the scaled MAD.

    Parameters
    ----------
    x : array-like or Series or DataFrame
        Values. NaN are ignored in the median and MAD and stay NaN.
    axis : int, optional
        Axis along which median and MAD are taken (``None``: all values; a DataFrame
        with ``axis=1`` gives one z per cell relative to its row).
    mad_zero_fallback : bool
        When the MAD is 0 (more than half the values identical, e.g. clipping or zeros)
        use 1.253314 * mean absolute deviation instead (E|X − μ| = σ·√(2/π) for normal data); if that is 0 too the
        z-score is 0 where x equals the median and ±inf elsewhere.

    Returns
    -------
    Same type as ``x``. [-]

    Notes
    -----
    z = (x - median) / (1.4826 MAD), 1.4826 = 1/Φ⁻¹(0.75) makes the MAD a consistent
    estimate of σ for normal data ([1], [2]).

    Examples
    --------
    >>> robust_z([1, 2, 3, 4, 100]).round(3)
    array([-1.349, -0.674,  0.   ,  0.674, 65.426])
    """
    is_pd = isinstance(x, pd.Series | pd.DataFrame)
    a = np.asarray(x, dtype=float)
    if a.size == 0:
        return x.astype(float) if is_pd else a
    with np.errstate(all="ignore"), warnings.catch_warnings():
        # a day on which no peer has a reading is an all-NaN slice: NaN out is the intended
        # result, not something for the user (numpy RuntimeWarning, scipy SmallSampleWarning)
        warnings.simplefilter("ignore", RuntimeWarning)
        med = np.nanmedian(a, axis=axis, keepdims=True)
        # scipy.stats.median_abs_deviation(scale="normal", nan_policy="omit") [2], whole
        # rows at once: scipy takes NaN-holding rows one by one (a fleet's 1 800 days, #16)
        mad = np.asarray(np.nanmedian(np.abs(a - med), axis=axis) / NORMAL_MAD_SCALE,
                         dtype=float)
        mad = mad.reshape(med.shape) if mad.ndim else np.full(med.shape, float(mad))
        if mad_zero_fallback:
            mean_ad = MEAN_AD_TO_SIGMA * np.nanmean(np.abs(a - med), axis=axis, keepdims=True)
            mad = np.where(mad > 0, mad, mean_ad)
        dev = a - med
        z = np.where(dev == 0, 0.0, dev / mad)
        z = np.where(np.isnan(a), np.nan, z)
    if isinstance(x, pd.DataFrame):
        return pd.DataFrame(z, index=x.index, columns=x.columns)
    if isinstance(x, pd.Series):
        return pd.Series(z, index=x.index, name=x.name)
    return z


def peer_ratio(pi_wide: pd.DataFrame, *, min_peers: int = 5) -> pd.DataFrame:
    """Each inverter's daily ``pi`` divided by the median of its peer group that day.

    Parameters
    ----------
    pi_wide : DataFrame
        Index ``day``, one column per inverter of one peer group; NaN where the day is not
        valid for that inverter. [-]
    min_peers : int
        Days with fewer valid inverters give NaN (at least 5 valid peers,
        common practice).

    Returns
    -------
    DataFrame like ``pi_wide``. [-]

    Notes
    -----
    R_i,d = PI_i,d / median_j PI_j,d (peer ratio, common practice). The median includes the inverter itself
    (a robust group level: one low inverter among five moves it little).
    """
    med = pi_wide.median(axis=1, skipna=True)
    n = pi_wide.notna().sum(axis=1)
    out = pi_wide.div(med.where(n >= min_peers), axis=0)
    return out


def own_history_ratio(pi_wide: pd.DataFrame, *, history_days: int = 90, lag_days: int = 30,
                      min_days: int = 20) -> pd.DataFrame:
    """Each inverter's daily ``pi`` over the median of its own valid ``pi`` in the
    ``history_days`` calendar days that end ``lag_days`` before the day (NaN with fewer
    than ``min_days`` valid days there). The lag keeps a fresh fault out of its own
    reference for at least ``lag_days``.

    Examples
    --------
    A step from 1.0 to 0.5 on day 100 gives a ratio 0.5 from day 100 to day 129 at least.
    """
    pw = pi_wide.sort_index()
    idx = pd.DatetimeIndex(pw.index)
    full = pw.reindex(pd.date_range(idx.min(), idx.max(), freq="D")) if len(idx) else pw
    med = full.rolling(history_days, min_periods=min_days).median().shift(lag_days + 1)
    return (full / med).reindex(pw.index)


def persistent_low_events(low: pd.Series, valid: pd.Series, *, window: int = 5,
                          k_required: int = 3, clear_days: int = 3) -> list[tuple]:
    """Dated events from a daily "low" indicator with a persistence rule.

    An event opens when at least ``k_required`` of the last ``window`` valid days are low;
    it starts on the first low day of that window. It closes after ``clear_days``
    consecutive normal valid days and ends on its last low day (common practice:
    z < −3 on ≥3 of the last 5 valid days; clear after 3 normal days).

    Parameters
    ----------
    low, valid : Series of bool
        Same index (days, ascending). Invalid days are skipped, neither low nor normal.

    Returns
    -------
    list of (first_day, last_day, n_low_days) for each event, in order.
    """
    idx = low.index[valid.to_numpy(bool)]
    lo = low.to_numpy(bool)[valid.to_numpy(bool)]
    # The rule walked day by day, but jumping between the days where the state can change
    # (issue #16: a fleet's whole history is 100 x 1 800 days; most days are normal).
    n = len(lo)
    n_lows = np.concatenate([[0], np.cumsum(lo)])  # lows before each position
    lows = np.flatnonzero(lo)
    # consecutive normal days ending at each position
    pos = np.arange(n)
    last_low_at = np.maximum.accumulate(np.where(lo, pos, -1)) if n else pos
    closes = np.flatnonzero(pos - last_low_at >= clear_days)  # >= clear_days normal days
    events = []
    start = 0  # days before it do not count towards opening (after a closed event)
    while True:
        # closed: the first low day i whose recent days (at most `window`, none before
        # `start`) hold >= k_required lows
        i = None
        for c in lows[np.searchsorted(lows, start):]:
            first = max(start, c - window + 1)
            if n_lows[c + 1] - n_lows[first] >= k_required:
                i = int(c)
                break
        if i is None:
            return events
        first = max(start, i - window + 1)
        f = int(lows[np.searchsorted(lows, first)])
        n_recent = int(n_lows[i + 1] - n_lows[first])
        # open: closes on the first day with clear_days normal days all after day i
        k = np.searchsorted(closes, i + clear_days)
        end = int(closes[k]) if k < len(closes) else n - 1
        last = int(lows[np.searchsorted(lows, end, side="right") - 1])
        events.append((idx[f], idx[last], n_recent + int(n_lows[end + 1] - n_lows[i + 1])))
        if k >= len(closes):
            return events
        start = end + 1


def _merge_close_events(events: list[tuple], gap_days: int) -> list[tuple]:
    """Join ``(first, last, n_low)`` events whose gap is at most ``gap_days`` days."""
    out: list[tuple] = []
    for first, last, n_low in events:
        if out and (pd.Timestamp(first) - pd.Timestamp(out[-1][1])).days <= gap_days:
            out[-1] = (out[-1][0], last, out[-1][2] + n_low)
        else:
            out.append((first, last, n_low))
    return out


def _wide_by_day(d: pd.DataFrame, values: list[str]) -> list[pd.DataFrame]:
    """Each of ``values`` as a day x device table (rows sorted by day, columns by device):
    ``pivot_table(index="day", columns="device_id", aggfunc="first", dropna=False)``. One
    row per device and day is placed directly (a fleet's whole history, issue #16); other
    tables go through ``pivot_table``."""
    day, dev = d["day"], d["device_id"]
    if len(d) and not (day.isna().any() or dev.isna().any()):
        dc, days = pd.factorize(day, sort=True)
        vc, devs = pd.factorize(dev, sort=True)
        cell = dc.astype(np.int64) * len(devs) + vc
        if np.bincount(cell, minlength=1).max() <= 1:  # one row per device and day
            out = []
            for v in values:
                a = np.full(len(days) * len(devs), np.nan)
                a[cell] = d[v].to_numpy(float)
                out.append(pd.DataFrame(a.reshape(len(days), len(devs)),
                                        index=pd.Index(days, name="day"),
                                        columns=pd.Index(list(devs), name="device_id")))
            return out
    wide = [d.pivot_table(index="day", columns="device_id", values=v, aggfunc="first",
                          dropna=False).sort_index() for v in values]
    return [wide[0], *(w.reindex_like(wide[0]) for w in wide[1:])]


def underperformance_flags(daily: pd.DataFrame, *, peer_group: dict | None = None,
                           z_threshold: float = -3.0, min_deficit: float = 0.04,
                           min_peers: int = 5, window: int = 5, k_required: int = 3,
                           escalate_days: int = 14, clear_days: int = 3,
                           merge_gap_days: int = 14, std_offset_s: int = 0,
                           own_min_pi: float = 0.80, own_history_deficit: float = 0.10,
                           history_days: int = 90, history_lag_days: int = 30,
                           min_history_days: int = 20) -> pd.DataFrame:
    """Underperformance flags from the daily inverter table.

    Groups of at least ``min_peers`` inverters use the **peer** basis (peer ratio and
    robust z, below). Smaller groups cannot form a robust peer median (common practice:
    ≥ 5 peers), so each inverter is compared with **its own expected power and its own
    history** instead, and the flag says so (``details['basis']``): a day is low when its
    ``pi`` is below ``own_min_pi`` (a 20 % shortfall against the expected-power model,
    larger than the model's usual bias; common practice) or below (1 −
    ``own_history_deficit``) × the median of its own valid ``pi`` over the
    ``history_days`` days ending ``history_lag_days`` before (at least
    ``min_history_days`` of them). The same persistence rule applies.

    Parameters
    ----------
    daily : DataFrame
        Long daily table with columns ``device_id``, ``day``, ``pi``, ``day_valid``,
        ``e_exp_kwh`` (the ``daily_inverter`` columns).
    peer_group : dict, optional
        device_id -> peer group name; default: all inverters in one group.
    z_threshold : float
        A day is low when its robust z across peers is below this (common practice: −3) ...
    min_deficit : float
        ... and its peer ratio is at least this far below 1 (a statistically clear but
        tiny deficit, e.g. a 1 % nameplate mismatch, the 2.2 % winter deficit of a healthy
        inverter or the 3.3 % that a faster-degrading inverter (−1.2 against −0.7 %/yr)
        reaches after four years, measured on generated fleets in issue #14, is not a field
        event; one lost string of 12 is 8.3 %, of 24 4.2 %; common practice). [-]
    escalate_days : int
        Severity 'warning' becomes 'alarm' once an event spans this many days (common practice: 14).
    merge_gap_days : int
        An event that re-opens within this many days of the previous one's last low day is
        the same fault (a failed string does not heal for a few soiled or cloudy days), so
        the two are one flag; alarm hysteresis, common practice. [days]
    std_offset_s : int
        Site standard UTC offset for converting days to ``start_s``/``end_s``. [s]

    Returns
    -------
    DataFrame with :data:`FLAG_COLUMNS`; ``lost_kwh`` = Σ e_exp_kwh · (1 − R) over the
    event's valid days with R < 1.
    """
    need = {"device_id", "day", "pi", "day_valid", "e_exp_kwh"}
    if missing := need - set(daily.columns):
        raise ValueError(f"daily table lacks columns {sorted(missing)}")
    d = daily.copy()
    d["pi_v"] = d["pi"].where(d["day_valid"].astype(bool))
    pi_wide, e_exp = _wide_by_day(d, ["pi_v", "e_exp_kwh"])
    groups = peer_group or {c: "site" for c in pi_wide.columns}
    records = []
    for _g, cols in pd.Series(groups).groupby(pd.Series(groups)):
        cols = [c for c in cols.index if c in pi_wide.columns]
        own = len(cols) < min_peers
        if own:
            ratio = own_history_ratio(pi_wide[cols], history_days=history_days,
                                      lag_days=history_lag_days, min_days=min_history_days)
            z = pd.DataFrame(np.nan, index=ratio.index, columns=cols)
        else:
            ratio = peer_ratio(pi_wide[cols], min_peers=min_peers)
            z = robust_z(ratio, axis=1)
        for dev in cols:
            r, zd = ratio[dev], z[dev]
            if own:
                pi_d = pi_wide[dev]
                valid = pi_d.notna()
                low = (pi_d < own_min_pi) | (r < 1.0 - own_history_deficit)
                r = r.where(r.notna(), pi_d)  # the ratio reported: to history, else to model
                zd = pd.Series(np.nan, index=r.index)
            else:
                valid = r.notna() & zd.notna()
                low = (zd < z_threshold) & (r < 1.0 - min_deficit)
            events = _merge_close_events(persistent_low_events(
                low, valid, window=window, k_required=k_required, clear_days=clear_days),
                merge_gap_days)
            for first, last, n_low in events:
                span = (r.index >= first) & (r.index <= last)
                rs, zs = r[span], zd[span]
                lost = float((e_exp.loc[span, dev] * (1.0 - rs).clip(lower=0)).sum())
                n_days = (pd.Timestamp(last) - pd.Timestamp(first)).days + 1
                start_s = int(day_start_s([first], std_offset_s)[0])
                end_s = int(day_start_s([last], std_offset_s)[0]) + 86400
                records.append(dict(
                    device_id=dev, kind="underperformance", start_s=start_s, end_s=end_s,
                    severity="alarm" if n_days >= escalate_days else "warning",
                    lost_kwh=lost,
                    details=dict(
                        first_day=str(pd.Timestamp(first).date()),
                        last_day=str(pd.Timestamp(last).date()), n_days=n_days,
                        n_low_days=int(n_low), n_valid_days=int(rs.notna().sum()),
                        basis="own_expected_and_history" if own else "peers",
                        n_peers=len(cols),
                        median_peer_ratio=None if own else float(np.nanmedian(rs)),
                        median_ratio_to_own=float(np.nanmedian(rs)) if own else None,
                        min_robust_z=None if own else float(np.nanmin(zs)),
                        rule=(f"group of {len(cols)} < {min_peers} peers: pi < {own_min_pi:g} "
                              f"or pi < {1 - own_history_deficit:g} x own median pi of the "
                              f"{history_days} days ending {history_lag_days} days before"
                              if own else
                              f"robust z < {z_threshold} and peer ratio < {1 - min_deficit:g}")
                             + (f" on >= {k_required} of the last {window} valid days; cleared "
                                f"after {clear_days} normal days; alarm from {escalate_days} "
                                f"days; re-opened within {merge_gap_days} days = same event"),
                        method=("own expected power (pi) and own history, too few peers for "
                                "a peer median (common practice asks for >= 5)" if own else
                                "peer ratio to the peer-group median of daily pi; robust z "
                                "with 1.4826 MAD (Iglewicz & Hoaglin 1993)"),
                        caution=FIELD_CAUTION)))
    return flag_frame(records)


def input_mismatch_flags(p_dc_inputs: pd.DataFrame, input_kwp: dict, *, device_id: str,
                         input_plane: dict | None = None, interval_h=None,
                         min_deficit: float = 0.05, min_yield_kw_per_kwp: float = 0.1,
                         window: int = 5, k_required: int = 3, clear_days: int = 3,
                         min_day_kwh_per_kwp: float = 0.5, std_offset_s: int = 0
                         ) -> pd.DataFrame:
    """Inputs (MPPT trackers or string groups) of one inverter that yield persistently less
    per kWp than their siblings on the same plane.

    For input k on day d the specific yield is Y_k,d = Σ P_k τ / kWp_k over the intervals
    where every input on its plane delivers at least ``min_yield_kw_per_kwp`` (10 % of
    STC, so dawn, dusk and inverter stand-still do not count); its ratio is
    R_k,d = Y_k,d / median_{j≠k} Y_j,d over its siblings on the same plane. A day is low
    when R < 1 − ``min_deficit``; the persistence rule of :func:`persistent_low_events`
    (≥ ``k_required`` of ``window`` days, cleared after ``clear_days`` normal days) makes
    events (common practice: the peer-ratio idea applied inside one inverter,
    where sky and sensor errors cancel exactly). Days with less than
    ``min_day_kwh_per_kwp`` of sibling yield are skipped.

    Parameters
    ----------
    p_dc_inputs : DataFrame
        Index ``ts_utc``; one column per input id, DC power. [kW]
    input_kwp : dict
        input id -> DC nameplate of that input. [kWp]
    input_plane : dict, optional
        input id -> plane key (any hashable, e.g. (tilt, azimuth)); default: one plane.
    interval_h : float or array, optional
        Interval length; default from the index spacing. [h]

    Returns
    -------
    Flag frame, kind 'input_mismatch', ``device_id`` the inverter; ``lost_kwh`` =
    Σ_d (median sibling yield − Y_k,d) · kWp_k over the event's low days; details: input,
    siblings, deficit (median 1 − R) and the plane.

    Examples
    --------
    Three inputs of 10 kWp on one plane, input B at 91 % of A and C every day: one flag on
    B with a 9 % deficit (tests/test_analytics_flag_rules.py).
    """
    if p_dc_inputs.empty or p_dc_inputs.shape[1] < 2:
        return flag_frame([])
    cols = [c for c in p_dc_inputs.columns if input_kwp.get(c, 0) > 0]
    plane = input_plane or {c: "plane" for c in cols}
    ts = epoch_s(p_dc_inputs.index)
    if interval_h is None:
        step = np.median(np.diff(ts)) if ts.size > 1 else 900
        interval_h = step / 3600.0
    tau = np.broadcast_to(np.asarray(interval_h, dtype=float), ts.shape)
    day = (ts + int(std_offset_s)) // 86400
    days = pd.to_datetime(np.unique(day) * 86400, unit="s")
    records = []
    for _pl, grp in pd.Series(plane).groupby(pd.Series(plane)):
        ids = [c for c in grp.index if c in cols]
        if len(ids) < 2:
            continue
        y = p_dc_inputs[ids].to_numpy(float) / np.array([input_kwp[c] for c in ids])
        ok = np.all(y >= min_yield_kw_per_kwp, axis=1)
        e = pd.DataFrame(np.where(ok[:, None], y * tau[:, None], 0.0), columns=ids)
        yd = e.groupby(day).sum()
        yd.index = days
        for k in ids:
            sib = yd[[c for c in ids if c != k]].median(axis=1)
            r = yd[k] / sib.where(sib >= min_day_kwh_per_kwp)
            valid = r.notna()
            low = r < 1.0 - min_deficit
            for first, last, n_low in persistent_low_events(
                    low, valid, window=window, k_required=k_required, clear_days=clear_days):
                span = (r.index >= first) & (r.index <= last) & low.to_numpy()
                lost = float(((sib - yd[k])[span]).sum() * input_kwp[k])
                records.append(dict(
                    device_id=device_id, kind="input_mismatch",
                    start_s=int(day_start_s([first], std_offset_s)[0]),
                    end_s=int(day_start_s([last], std_offset_s)[0]) + 86400,
                    severity="warning", lost_kwh=lost,
                    details=dict(input=str(k), siblings=[str(c) for c in ids if c != k],
                                 plane=str(_pl), deficit_pct=float(
                                     100 * (1 - np.nanmedian(r[span]))),
                                 n_low_days=int(n_low),
                                 rule=f"specific yield < {1 - min_deficit:g} x median of the "
                                      f"sibling inputs on the same plane on >= {k_required} "
                                      f"of {window} days",
                                 caution=FIELD_CAUTION)))
    return flag_frame(records)
