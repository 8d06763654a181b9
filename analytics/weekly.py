"""The weekly check: per-inverter KPIs of a period, against the inverter's own trailing
weeks and against its peers.

Period KPIs are ratios of sums over the days of the period, never means of daily ratios
(IEC 61724-1 defines PR over a reporting period as Σ E_out / Σ E_ref). The
temperature-corrected PR uses only valid days, numerator and denominator over the same
days (METHODS §2, "Which intervals enter"). Availability follows METHODS §5:
energy-based A_E = E / (E + E_lost), time-based A_t = 1 − t_unavailable / t_daylight.

An inverter is "below peers" when its PR_STC is lower than the median of its peer group
by more than ``below_peers_pct`` (3 % by default, common practice for a weekly screen:
larger than the week-to-week scatter of healthy inverters on one POA sensor, smaller than
one failed string in ~20).
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
    >>> round(float(period_kpis(s)["pr"].iloc[0]), 4)  # METHODS §2: 5.0 h / 6.0 h
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
        ``device_id, peer_group, p_dc_kwp`` [kWp] of every inverter of the site.
    below_peers_pct : float, default 3.0
        Margin below the peer median that sets ``below_peers``. [%]

    Returns
    -------
    DataFrame
        ``device_id, peer_group, p_dc_kwp, e_ac_kwh, yf_h`` (final yield, kWh/kWp),
        ``pr, pr_stc, pr_stc_trailing, d_trailing_pct, pr_stc_peers, d_peers_pct,
        avail_energy, avail_time, n_days_valid, below_peers``; ``d_*_pct`` =
        100 (PR_STC / reference − 1). Inverters with no data keep NaN KPIs.
    """
    week = period_kpis(week_sums)
    trail = period_kpis(trailing_sums)[["device_id", "pr_stc"]].rename(
        columns={"pr_stc": "pr_stc_trailing"})
    out = inverters[["device_id", "peer_group", "p_dc_kwp"]].merge(
        week, on="device_id", how="left").merge(trail, on="device_id", how="left")
    out["yf_h"] = out["e_ac_kwh"] / out["p_dc_kwp"]
    out["d_trailing_pct"] = 100 * (out["pr_stc"] / out["pr_stc_trailing"] - 1)
    out["pr_stc_peers"] = out.groupby("peer_group")["pr_stc"].transform("median")
    out["d_peers_pct"] = 100 * (out["pr_stc"] / out["pr_stc_peers"] - 1)
    out["below_peers"] = out["d_peers_pct"] < -abs(below_peers_pct)
    return out
