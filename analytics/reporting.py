"""What a screen or a report shows for a degradation result: the recommended rate, its
reasons and caveats, the warranty shortfall attributable to that rate, and the seasonal
pattern of the year-on-year pairs (issue #15, issue #10).

Pure functions over the stored result rows (``db.degradation.degradation_results``: one
row per device and method, ``details`` a dict) and over daily series; no I/O.

The recommended rate is the row ``method = "recommended"`` written by the degradation job
(``details``: ``chosen_method``, ``reasons``, ``caveats`` [{kind, method, text}],
``ci68_low``, ``ci68_high``). Stores computed before it existed have no such row; then the
year-on-year rate on the POA sensor (Jordan et al. 2018) is shown, with caveats read from
the overview row's change points and warnings, and a reason saying so.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from analytics.labels import OLD_METHOD_CODES, method_code, method_label

FALLBACK_METHOD = "sensor_year_pairs"
CAVEAT_KINDS = ("sensor_drift", "level_shift", "soiling", "out_of_range", "little_data",
                "methods_disagree")


def _num(x):
    return None if x is None or (isinstance(x, float) and np.isnan(x)) or pd.isna(x) \
        else float(x)


def normalise_methods(results: pd.DataFrame) -> pd.DataFrame:
    """The result rows with current method codes (old codes such as ``yoy`` mapped)."""
    if results.empty or "method" not in results:
        return results
    out = results.copy()
    out["method"] = [OLD_METHOD_CODES.get(m, m) for m in out["method"]]
    return out


def _row(results: pd.DataFrame, device_id: str, method: str):
    r = results[(results["device_id"] == device_id) & (results["method"] == method)]
    return None if r.empty else r.iloc[0]


def _lower_first(text: str) -> str:
    return text[:1].lower() + text[1:] if text[1:2].islower() else text


def _fallback_caveats(overview: dict, rate_row) -> list[dict]:
    caveats = []
    for cp in overview.get("change_points", []) or []:
        if cp.get("kind") == "drop":
            caveats.append({"kind": "level_shift", "method": FALLBACK_METHOD, "text": (
                f"Level drop of {cp.get('size_pct', float('nan')):+.1f} % on {cp.get('day')}: a "
                "failure (string, module, inverter), not degradation. The whole-period rate "
                "includes it; the rate between level shifts leaves it out.")})
    comp = overview.get("comparison") or {}
    for w in [*comp.get("warnings", []), *overview.get("warnings", [])]:
        low = str(w).lower()
        if "clear-sky" in low and ("drift" in low or "disagree" in low):
            caveats.append({"kind": "sensor_drift", "method": FALLBACK_METHOD, "text": (
                "The POA sensor-based and the modelled clear-sky rates disagree: the POA "
                "sensor may be drifting, and the sensor-based rate would then be wrong by the "
                "drift. Check the sensor's calibration before using it.")})
            break
    if rate_row is not None:
        for w in (rate_row["details"] or {}).get("warnings", []) or []:
            if "outside" in str(w):
                caveats.append({"kind": "out_of_range", "method": FALLBACK_METHOD, "text": (
                    "The rate is outside the range of published field rates (−2.0 … +0.5 "
                    "%/yr, Jordan & Kurtz 2013): review steps, sensor drift, soiling and "
                    "outages before using it.")})
                break
    if comp.get("agree") is False and comp.get("disagreements"):
        caveats.append({"kind": "methods_disagree", "method": None, "text": (
            "The intervals of some methods do not overlap: "
            + "; ".join(" against ".join(_lower_first(method_label(m)) for m in p)
                        for p in comp["disagreements"]) + ".")})
    seen, out = set(), []
    for c in caveats:  # one caveat per kind
        if c["kind"] not in seen:
            seen.add(c["kind"])
            out.append(c)
    return out


def recommended_rate(results: pd.DataFrame, device_id: str) -> dict | None:
    """The rate to show first for one device (an inverter or ``"(site)"``).

    Returns ``{method, rate_pct_per_yr, ci_low, ci_high, confidence, n_points, ci68_low,
    ci68_high, reasons, caveats, stored}`` (``stored`` False when the fallback was used), or
    None when the device has neither a recommended nor a year-on-year rate row.
    """
    res = normalise_methods(results)
    rec = _row(res, device_id, "recommended")
    if rec is not None:
        det = rec["details"] or {}
        return {"method": method_code(det.get("chosen_method")),
                "rate_pct_per_yr": _num(rec["rate_pct_per_yr"]),
                "ci_low": _num(rec["ci_low"]), "ci_high": _num(rec["ci_high"]),
                "confidence": _num(rec["confidence"]),
                "n_points": _num(rec["n_points"]),
                "ci68_low": _num(det.get("ci68_low")), "ci68_high": _num(det.get("ci68_high")),
                "reasons": list(det.get("reasons") or []),
                "caveats": [dict(c) for c in det.get("caveats") or []],
                "reason": rec.get("reason") if hasattr(rec, "get") else None,
                "stored": True}
    r = _row(res, device_id, FALLBACK_METHOD)
    if r is None:
        return None
    ov = _row(res, device_id, "overview")
    overview = (ov["details"] or {}) if ov is not None else {}
    ci68 = (r["details"] or {}).get("ci_68") or [None, None]
    return {"method": FALLBACK_METHOD, "rate_pct_per_yr": _num(r["rate_pct_per_yr"]),
            "ci_low": _num(r["ci_low"]), "ci_high": _num(r["ci_high"]),
            "confidence": _num(r["confidence"]), "n_points": _num(r["n_points"]),
            "ci68_low": _num(ci68[0]), "ci68_high": _num(ci68[1]),
            "reasons": ["No recommended rate is stored for this computation: the year-on-year "
                        "rate on the POA sensor (Jordan et al. 2018) is shown."],
            "caveats": _fallback_caveats(overview, r),
            "reason": r["reason"] if isinstance(r["reason"], str) else None,
            "stored": False}


def shortfall_from_rate(years, e_ac_kwh, warranted, rate_pct_per_yr: float) -> float:
    """Energy shortfall against the warranted envelope attributable to a degradation rate.

    The measured level is the straight line of the chosen rate from relative performance 1
    at the warranty start, F(t) = 1 + R t / 100 (t in years), not the monthly index, so
    month-to-month dips (soiling, outages, weather) and level steps (failures) that the
    rate does not attribute to degradation are not counted:

        S = Σ_m E_m · max(0, W_m / F(t_m) − 1)

    with W_m the warranted fraction and E_m the energy measured in month m (the same energy
    scaling as the monthly shortfall of ``analytics.warranty.warranty_envelope``).

    Examples
    --------
    Warranted 0.98 in a month of 1000 kWh, rate −3 %/yr at t = 1 yr: F = 0.97,
    S = 1000 (0.98 / 0.97 − 1) = 10.31 kWh (hand calculation).

    >>> round(shortfall_from_rate([1.0], [1000.0], [0.98], -3.0), 2)
    10.31
    """
    y = np.asarray(years, dtype=float)
    e = np.asarray(e_ac_kwh, dtype=float)
    w = np.asarray(warranted, dtype=float)
    f = 1 + float(rate_pct_per_yr) * y / 100
    ok = np.isfinite(y) & np.isfinite(e) & np.isfinite(w) & (f > 0)
    gap = np.where(ok, e * np.maximum(0.0, w / np.where(f > 0, f, 1.0) - 1), 0.0)
    return float(np.sum(gap))


SEASONS = {12: "Dec–Feb", 1: "Dec–Feb", 2: "Dec–Feb", 3: "Mar–May", 4: "Mar–May",
           5: "Mar–May", 6: "Jun–Aug", 7: "Jun–Aug", 8: "Jun–Aug", 9: "Sep–Nov",
           10: "Sep–Nov", 11: "Sep–Nov"}
SEASON_ORDER = ("Dec–Feb", "Mar–May", "Jun–Aug", "Sep–Nov")


def pair_rate_grid(pair_rates: pd.Series, *, min_pairs: int = 10) -> pd.DataFrame:
    """Median year-on-year pair rate per pair year and meteorological season.

    Each pair (Jordan et al. 2018) is labelled by the year and season of its *later* day,
    so the row "2024" holds the pairs that compare 2024 with 2023. A cell with fewer than
    ``min_pairs`` pairs is left empty (NaN) rather than shown as a rate.

    Parameters
    ----------
    pair_rates : Series
        Pair rates [%/yr] indexed by the earlier day of each pair
        (``analytics.degradation.yoy_rates``).

    Returns
    -------
    DataFrame
        Long: ``year, season, median_pct_per_yr, n_pairs, q25_pct_per_yr, q75_pct_per_yr``.

    Examples
    --------
    >>> idx = pd.date_range("2022-01-01", periods=334, freq="D")  # pairs ending Jan..Nov 2023
    >>> g = pair_rate_grid(pd.Series(-0.5, idx))
    >>> sorted(int(y) for y in g["year"].unique()), float(g["median_pct_per_yr"].iloc[0])
    ([2023], -0.5)
    """
    cols = ["year", "season", "median_pct_per_yr", "n_pairs", "q25_pct_per_yr",
            "q75_pct_per_yr"]
    s = pair_rates.dropna()
    if s.empty:
        return pd.DataFrame(columns=cols)
    later = pd.DatetimeIndex(s.index) + pd.Timedelta(days=365)
    # December belongs to the winter of the following January-February
    season_year = later.year + (later.month == 12)
    frame = pd.DataFrame({"year": season_year, "season": [SEASONS[m] for m in later.month],
                          "r": s.to_numpy(dtype=float)})
    g = frame.groupby(["year", "season"])["r"]
    out = pd.DataFrame({"median_pct_per_yr": g.median(), "n_pairs": g.size(),
                        "q25_pct_per_yr": g.quantile(0.25),
                        "q75_pct_per_yr": g.quantile(0.75)}).reset_index()
    thin = out["n_pairs"] < min_pairs
    out.loc[thin, ["median_pct_per_yr", "q25_pct_per_yr", "q75_pct_per_yr"]] = np.nan
    out["season"] = pd.Categorical(out["season"], SEASON_ORDER, ordered=True)
    return out.sort_values(["year", "season"]).reset_index(drop=True)[cols]
