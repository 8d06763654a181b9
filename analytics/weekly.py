"""The weekly check: per-inverter KPIs of a period, against the inverter's own trailing
weeks and against its peers.

Period KPIs are ratios of sums over the days of the period, never means of daily ratios
(IEC 61724-1 defines PR over a reporting period as Σ E_out / Σ E_ref). The
temperature-corrected PR uses only valid days, numerator and denominator over the same
days (IEC 61724-1:2021; common practice). Availability follows IEC TS 63019:2019:
energy-based A_E = E / (E + E_lost), time-based A_t = 1 − t_unavailable / t_daylight.

An inverter is "below peers" when its PR_STC is lower than the median of its peer group
by more than ``below_peers_pct`` (3 % by default, common practice for a weekly screen:
larger than the week-to-week scatter of healthy inverters on one POA sensor, smaller than
one failed string in ~20).

Peers are compared only within one POA instrument type (a c-Si reference cell and a
thermopile pyranometer differ by a few per cent in what they report as irradiance: Dunn,
Gostein & Emery 2012, NREL/CP-5200-55487), so a pyranometer inverter is never called "below
peers" because its peers are measured against a reference cell.

A flag spans its own period, often much longer than a week (an alarm that has lasted 22
months carries 22 months of lost energy); :func:`week_share_of_lost_energy` gives the part of
each flag's lost energy that falls in the week, in proportion to the expected energy of the
flagged device (the clean model's energy: the energy that could have been lost).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from analytics.availability import availability_energy
from analytics.performance_ratio import pr_from_sums, pr_stc_from_sums

SUM_COLUMNS = ("e_ac_kwh", "e_ac_pr_kwh", "e_ref_kwh", "e_ref_stc_kwh", "e_lost_kwh",
               "t_daylight_h", "t_unavailable_h", "n_days_valid")


def period_kpis(sums: pd.DataFrame) -> pd.DataFrame:
    """KPIs of a period from per-inverter sums (see ``db.queries.period_sums``).

    Parameters
    ----------
    sums : DataFrame
        Columns ``e_ac_kwh`` (all days), ``e_ac_pr_kwh, e_ref_kwh, e_ref_stc_kwh`` (valid
        days), ``e_lost_kwh, t_daylight_h, t_unavailable_h, n_days_valid``; optional
        ``device_id`` is carried through.

    Returns
    -------
    DataFrame
        ``pr`` and ``pr_stc`` [fraction], ``avail_energy`` and ``avail_time``
        [fraction], ``e_ac_kwh`` [kWh], ``n_days_valid``; same index as ``sums``.

    Examples
    --------
    >>> s = pd.DataFrame({"e_ac_kwh": [500.0], "e_ac_pr_kwh": [500.0], "e_ref_kwh": [600.0],
    ...                   "e_ref_stc_kwh": [550.0], "e_lost_kwh": [0.0], "t_daylight_h": [10.0],
    ...                   "t_unavailable_h": [0.0], "n_days_valid": [1]})
    >>> round(float(period_kpis(s)["pr"].iloc[0]), 4)  # IEC 61724-1 PR = Y_f / Y_r: 5.0 h / 6.0 h
    0.8333
    """
    out = sums[["device_id"]].copy() if "device_id" in sums else pd.DataFrame(index=sums.index)
    num = sums["e_ac_pr_kwh"].astype(float)
    out["pr_stc"] = pr_stc_from_sums(num, sums["e_ref_stc_kwh"].astype(float))
    out["pr"] = pr_from_sums(num, sums["e_ref_kwh"].astype(float))
    e = sums["e_ac_kwh"].astype(float)
    out["avail_energy"] = availability_energy(e, sums["e_lost_kwh"].astype(float).fillna(0.0))
    td = sums["t_daylight_h"].astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        out["avail_time"] = (1 - sums["t_unavailable_h"].astype(float).fillna(0.0) / td).where(
            td > 0)
    out["e_ac_kwh"] = e
    out["n_days_valid"] = sums["n_days_valid"].astype("Int64")
    return out


def weekly_comparison(week_sums: pd.DataFrame, trailing_sums: pd.DataFrame,
                      inverters: pd.DataFrame, *, below_peers_pct: float = 3.0) -> pd.DataFrame:
    """One row per inverter: the week's KPIs against its trailing weeks and its peers.

    Parameters
    ----------
    week_sums, trailing_sums : DataFrame
        Per-inverter sums (``device_id`` plus :data:`SUM_COLUMNS`) of the week and of the
        weeks before it.
    inverters : DataFrame
        ``device_id, peer_group, p_dc_kwp`` [kWp] of every inverter of the site; optional
        ``instrument`` (the POA sensor's instrument type): peers are then the inverters of
        the same peer group on the same instrument type.
    below_peers_pct : float, default 3.0
        Margin below the peer median that sets ``below_peers``. [%]

    Returns
    -------
    DataFrame
        ``device_id, peer_group, p_dc_kwp, e_ac_kwh, yf_h`` (final yield, kWh/kWp),
        ``pr, pr_stc, pr_stc_trailing, d_trailing_pct, pr_stc_peers, d_peers_pct,
        avail_energy, avail_time, n_days_valid, below_peers, instrument, n_peers``;
        ``d_*_pct`` = 100 (PR_STC / reference − 1); ``n_peers`` counts the inverters of
        the comparison group with a PR_STC (the inverter itself included). Inverters with
        no data keep NaN KPIs.
    """
    week = period_kpis(week_sums)
    trail = period_kpis(trailing_sums)[["device_id", "pr_stc"]].rename(
        columns={"pr_stc": "pr_stc_trailing"})
    cols = ["device_id", "peer_group", "p_dc_kwp"]
    inv = inverters.copy()
    if "instrument" not in inv:
        inv["instrument"] = None
    inv["instrument"] = inv["instrument"].fillna("unknown").astype(str)
    out = inv[[*cols, "instrument"]].merge(
        week, on="device_id", how="left").merge(trail, on="device_id", how="left")
    out["yf_h"] = out["e_ac_kwh"] / out["p_dc_kwp"]
    out["d_trailing_pct"] = 100 * (out["pr_stc"] / out["pr_stc_trailing"] - 1)
    group = out.groupby(["peer_group", "instrument"])["pr_stc"]
    out["pr_stc_peers"] = group.transform("median")
    out["n_peers"] = group.transform("count").astype(int)
    out["d_peers_pct"] = 100 * (out["pr_stc"] / out["pr_stc_peers"] - 1)
    out["below_peers"] = out["d_peers_pct"] < -abs(below_peers_pct)
    return out


def _day_start_s(days, std_offset_s: int) -> np.ndarray:
    """UTC epoch seconds of the start of local-standard-time days."""
    d = pd.to_datetime(pd.Series(list(days))).to_numpy(dtype="datetime64[D]").astype("int64")
    return d * 86400 - int(std_offset_s)


def week_share_of_lost_energy(flags: pd.DataFrame, daily_expected: pd.DataFrame,
                              week_start_s: int, week_end_s: int, *,
                              std_offset_s: int) -> pd.Series:
    """The part of each flag's lost energy that falls inside one week. [kWh]

    A flag's ``lost_kwh`` covers its whole span ``[start_s, end_s)``. It is shared out over
    the days of the span in proportion to the expected energy of the flagged device on each
    day (``e_exp_kwh``, the clean model's energy), each day weighted by the part of it the
    flag covers (uniform in time within a day: only the flag's first and last day are
    partial); the week's share is the sum over the days inside ``[week_start_s, week_end_s)``:

        L_week = L · Σ_{d ∈ week} w_d E_exp,d / Σ_{d ∈ flag} w_d E_exp,d,
        w_d = overlap of the flag with day d / 24 h

    A site-wide or sensor flag (``device_id`` not an inverter of ``daily_expected``) uses
    the site's total expected energy. When the expected energy over the span is zero or
    unknown the share falls back to time: L · overlap / span.

    Parameters
    ----------
    flags : DataFrame
        ``start_s, end_s, lost_kwh`` and ``device_id``.
    daily_expected : DataFrame
        ``device_id, day`` (local standard day) and ``e_exp_kwh`` [kWh], covering the flags'
        spans.
    week_start_s, week_end_s : int
        The week, UTC epoch seconds (start inclusive, end exclusive).
    std_offset_s : int
        Site standard UTC offset (days are local standard time). [s]

    Returns
    -------
    Series
        ``lost_week_kwh`` aligned with ``flags``; NaN where ``lost_kwh`` is NaN.

    Examples
    --------
    A 10-day flag that lost 100 kWh on a device with the same expected energy every day:
    a week holding 3 of its days carries 30 kWh (hand calculation).

    >>> days = pd.date_range("2024-06-01", periods=20, freq="D").date
    >>> exp = pd.DataFrame({"device_id": "A", "day": days, "e_exp_kwh": 50.0})
    >>> fl = pd.DataFrame({"device_id": ["A"], "start_s": [_day_start_s([days[0]], 0)[0]],
    ...                    "end_s": [_day_start_s([days[10]], 0)[0]], "lost_kwh": [100.0]})
    >>> w0 = int(_day_start_s([days[7]], 0)[0])
    >>> float(week_share_of_lost_energy(fl, exp, w0, w0 + 7 * 86400, std_offset_s=0).iloc[0])
    30.0
    """
    out = pd.Series(np.nan, index=flags.index, name="lost_week_kwh", dtype=float)
    if flags.empty:
        return out
    de = daily_expected[["device_id", "day", "e_exp_kwh"]].copy()
    de["e_exp_kwh"] = de["e_exp_kwh"].astype(float)
    per_dev = {d: g.set_index("day")["e_exp_kwh"] for d, g in de.groupby("device_id")}
    site = de.groupby("day")["e_exp_kwh"].sum(min_count=1)
    for i, f in flags.iterrows():
        lost = f["lost_kwh"]
        if lost is None or pd.isna(lost):
            continue
        a, b = int(f["start_s"]), int(f["end_s"])
        if b <= a:
            out[i] = float(lost) if week_start_s <= a < week_end_s else 0.0
            continue
        series = per_dev.get(f["device_id"], site)
        d0 = (a + std_offset_s) // 86400
        d1 = (b - 1 + std_offset_s) // 86400
        day_num = np.arange(d0, d1 + 1)
        starts = day_num * 86400 - std_offset_s
        cover = (np.minimum(starts + 86400, b) - np.maximum(starts, a)) / 86400.0
        in_week = (np.minimum(starts + 86400, min(b, week_end_s))
                   - np.maximum(starts, max(a, week_start_s))).clip(min=0) / 86400.0
        days = (np.datetime64("1970-01-01") + day_num.astype("timedelta64[D]")).astype(object)
        e = series.reindex(days).to_numpy(dtype=float)
        e = np.where(np.isfinite(e), e, 0.0)
        den = float(np.sum(cover * e))
        if den > 0:
            out[i] = float(lost) * float(np.sum(in_week * e)) / den
        else:
            overlap = max(0, min(b, week_end_s) - max(a, week_start_s))
            out[i] = float(lost) * overlap / (b - a)
    return out


#: A site whose daily results end more than this many days before the portfolio's week end
#: is "not reporting" (the same 3 days after which a device gets ``stopped_reporting``).
STALE_AFTER_DAYS = 3


def portfolio_order(sites: pd.DataFrame, week_end) -> pd.DataFrame:
    """Sites ordered by what needs attention first, with a one-line ``status``.

    Order (common practice for a portfolio's weekly screen: a plant that sends nothing is
    the least known, then open alarms, then warnings): ``not reporting`` (its daily results
    end more than :data:`STALE_AFTER_DAYS` days before ``week_end``, or it has none), then by
    number of alarms, then of warnings, each group by the week's lost energy, largest first.

    Parameters
    ----------
    sites : DataFrame
        ``site_id, last_day`` (date or None), ``n_alarms, n_warnings, lost_week_kwh``.
    week_end : date
        The last day of the week shown.

    Returns
    -------
    DataFrame
        ``sites`` in that order with ``rank`` (0 not reporting, 1 alarm, 2 warning, 3 none),
        ``days_behind`` (days from its last daily result to ``week_end``; NaN without any)
        and ``status`` (text).

    Examples
    --------
    >>> import datetime as dt
    >>> s = pd.DataFrame({"site_id": ["a", "b", "c"],
    ...                   "last_day": [dt.date(2024, 6, 30), dt.date(2024, 6, 20), dt.date(2024, 6, 30)],
    ...                   "n_alarms": [0, 0, 2], "n_warnings": [1, 0, 0],
    ...                   "lost_week_kwh": [5.0, 0.0, 80.0]})
    >>> portfolio_order(s, dt.date(2024, 6, 30))[["site_id", "status"]].values.tolist()
    [['b', 'no daily results since 2024-06-20 (10 days)'], ['c', '2 alarms'], ['a', '1 warning']]
    """
    out = sites.copy()
    end = pd.Timestamp(week_end)
    last = pd.to_datetime(pd.Series(list(out["last_day"]), index=out.index, dtype=object))
    out["days_behind"] = (end - last).dt.days.astype("float64")
    stale = out["days_behind"].isna() | (out["days_behind"] > STALE_AFTER_DAYS)
    n_al = out["n_alarms"].fillna(0).astype(int)
    n_wa = out["n_warnings"].fillna(0).astype(int)
    out["rank"] = np.select([stale, n_al > 0, n_wa > 0], [0, 1, 2], 3)

    def _plural(n: int, word: str) -> str:
        return f"{n} {word}{'' if n == 1 else 's'}"

    status = []
    for st, lastd, behind, a, w in zip(stale, out["last_day"], out["days_behind"], n_al, n_wa,
                                       strict=True):
        if st:
            status.append("no daily results yet" if pd.isna(behind) else
                          f"no daily results since {lastd} ({int(behind)} days)")
        elif a or w:
            status.append(", ".join(x for x in (_plural(a, "alarm") if a else "",
                                                _plural(w, "warning") if w else "") if x))
        else:
            status.append("no alarm or warning")
    out["status"] = status
    out["_lost"] = out["lost_week_kwh"].fillna(0.0)
    out = out.sort_values(["rank", "n_alarms", "n_warnings", "_lost", "site_id"],
                          ascending=[True, False, False, False, True], kind="stable")
    return out.drop(columns="_lost").reset_index(drop=True)
