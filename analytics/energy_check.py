"""Energy counter against integrated AC power: a data-quality cross-check over days and months.

An inverter that logs both a cumulative energy counter (``e_ac_total_kwh``) and AC power
(``p_ac_kw``) measures its energy twice. Over a long enough period the two agree within the
counter's resolution and the meters' accuracy; a larger difference is a data-quality finding
(a power reading scaled wrongly, a counter that belongs to another device, missing power
data), not an equipment fault. The check matters most for a **coarse** counter (whole-kWh
steps on a small system), whose interval energy ingest takes from AC power
(:mod:`ingest.counters`): the counter then only serves daily and monthly totals.

* Counter energy of a day: the last counter reading whose interval ends in that day minus
  the same of the day before (local standard time), when both days have readings and the
  counter did not decrease (reset or rollover: that day is left out).
* Integrated power of a day: Σ P_k τ_k over the intervals with a power reading, each with
  its own interval τ_k (IEC 61724-1 energy from power).
* Per local month, over the days that have both: the difference is flagged when
  |E_counter − E_power| > 2 × resolution + ``rel_tol`` × E_counter. Two resolution units cover
  the quantisation of the two readings that bound the period; ``rel_tol`` = 3 % covers a
  class-1 energy meter (IEC 62053-21: ±1 %) and the power transducer (±1-2 %; common
  practice). Months with less than ``min_kwh`` of counter energy are not judged.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from analytics.outliers import flag_frame

#: Relative tolerance of the monthly cross-check (meter class 1 + power transducer; see above).
REL_TOL = 0.03
#: Resolution units allowed on top (quantisation of the two bounding readings).
RESOLUTION_UNITS = 2.0


def counter_daily_energy(end_s: np.ndarray, counter_kwh: np.ndarray, *, std_offset_s: int
                         ) -> pd.Series:
    """Energy [kWh] per local-standard day from counter readings at interval ends ``end_s``.

    Index: day as integer days since the epoch (local standard time). NaN where the day
    before has no reading or the counter decreased.

    >>> e = counter_daily_energy(np.array([86400, 2 * 86400, 3 * 86400]),
    ...                          np.array([10.0, 25.0, 31.0]), std_offset_s=0)
    >>> e.tolist()
    [15.0, 6.0]
    """
    end_s = np.asarray(end_s, dtype=np.int64)
    v = np.asarray(counter_kwh, dtype=float)
    ok = np.isfinite(v)
    if not ok.any():
        return pd.Series(dtype=float)
    end_s, v = end_s[ok], v[ok]
    order = np.argsort(end_s, kind="stable")
    end_s, v = end_s[order], v[order]
    day = (end_s - 1 + std_offset_s) // 86400  # a reading at midnight closes the day before
    last = pd.Series(v).groupby(day).last()
    prev_day = last.index.to_numpy()[:-1]
    cur_day = last.index.to_numpy()[1:]
    diff = np.diff(last.to_numpy())
    good = (cur_day - prev_day == 1) & (diff >= 0)
    return pd.Series(np.where(good, diff, np.nan), index=cur_day, dtype=float).dropna()


def power_daily_energy(ts_s: np.ndarray, p_ac_kw: np.ndarray, interval_h: np.ndarray, *,
                       std_offset_s: int) -> pd.Series:
    """Σ P τ [kWh] per local-standard day over the intervals with a power reading."""
    p = np.asarray(p_ac_kw, dtype=float)
    ok = np.isfinite(p)
    if not ok.any():
        return pd.Series(dtype=float)
    day = (np.asarray(ts_s, dtype=np.int64)[ok] + std_offset_s) // 86400
    return pd.Series(p[ok] * np.asarray(interval_h, dtype=float)[ok]).groupby(day).sum()


def monthly_crosscheck(counter_daily: pd.Series, power_daily: pd.Series, *,
                       resolution_kwh: float = 0.0, rel_tol: float = REL_TOL,
                       min_kwh: float = 1.0) -> pd.DataFrame:
    """Per local month: counter and integrated-power energy over the days having both.

    Returns columns ``month`` (first day, Timestamp), ``days``, ``counter_kwh``, ``power_kwh``,
    ``diff_kwh`` (power − counter), ``tolerance_kwh``, ``mismatch`` (bool).
    """
    both = pd.concat({"c": counter_daily, "p": power_daily}, axis=1).dropna()
    cols = ["month", "days", "counter_kwh", "power_kwh", "diff_kwh", "tolerance_kwh", "mismatch"]
    if both.empty:
        return pd.DataFrame(columns=cols)
    days = pd.to_datetime(both.index.to_numpy() * 86400, unit="s")
    month = days.to_period("M").to_timestamp()
    g = both.groupby(month)
    out = pd.DataFrame({"days": g.size(), "counter_kwh": g["c"].sum(), "power_kwh": g["p"].sum()})
    out = out[out["counter_kwh"] >= min_kwh]
    out["diff_kwh"] = out["power_kwh"] - out["counter_kwh"]
    out["tolerance_kwh"] = RESOLUTION_UNITS * resolution_kwh + rel_tol * out["counter_kwh"]
    out["mismatch"] = out["diff_kwh"].abs() > out["tolerance_kwh"]
    return out.rename_axis("month").reset_index()[cols]


def counter_mismatch_flags(check: pd.DataFrame, *, device_id: str, std_offset_s: int,
                           resolution_kwh: float | None = None) -> pd.DataFrame:
    """One ``counter_mismatch`` flag (warning) per month that fails :func:`monthly_crosscheck`."""
    rows = []
    for r in check[check["mismatch"]].itertuples():
        start = int(pd.Timestamp(r.month).value // 10**9) - std_offset_s
        end = int((pd.Timestamp(r.month) + pd.offsets.MonthBegin(1)).value // 10**9) - std_offset_s
        rows.append({
            "device_id": device_id, "kind": "counter_mismatch", "start_s": start, "end_s": end,
            "severity": "warning", "lost_kwh": None,
            "details": {
                "counter_kwh": round(float(r.counter_kwh), 3),
                "power_kwh": round(float(r.power_kwh), 3),
                "diff_kwh": round(float(r.diff_kwh), 3),
                "diff_pct": round(100.0 * float(r.diff_kwh) / float(r.counter_kwh), 2),
                "tolerance_kwh": round(float(r.tolerance_kwh), 3),
                "days_compared": int(r.days),
                "counter_resolution_kwh": resolution_kwh,
                "rule": (f"|integrated AC power - counter| > {RESOLUTION_UNITS:g} x resolution "
                         f"+ {100 * REL_TOL:g} % of counter energy over the month"),
                "reading": ("the energy counter and the integrated AC power disagree: check the "
                            "power scaling, the counter's device mapping and missing power data "
                            "before trusting this inverter's energy"),
            }})
    return flag_frame(rows)
