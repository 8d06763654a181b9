"""Data for the dashboard's pages: ``db`` queries and ``analytics`` calls, cached.

Pages call these functions and hand the result to :mod:`dashboard.charts`; nothing here
draws. Every function takes the database URL first so the cache is per database; the engine
is a ``st.cache_resource`` (one pool per server process), query results are
``st.cache_data`` with a short time-to-live so a fresh ingest shows within minutes.

The URL comes from ``$HELIAUDIT_DB`` (set by ``heliaudit dashboard --db``), else
``st.secrets['heliaudit_db']``, else the default store of :mod:`db.engine`.

Period KPIs are ratios of sums over the days of the period (IEC 61724-1: a period PR is
Σ E_out / Σ E_ref, not a mean of daily PRs); the temperature-corrected PR uses only valid
days (``day_valid``), with numerator and denominator taken over the same days
(METHODS §2 "Which intervals enter").
"""

from __future__ import annotations

import datetime as dt
import os
import zoneinfo

import numpy as np
import pandas as pd
import sqlalchemy as sa
import streamlit as st

from analytics.degradation import RateResult, compare_methods
from analytics.performance_ratio import period_sums as monthly_sums
from analytics.power import expected_ac_power
from analytics.temperature import cell_temperature_from_module, sapm_parameters
from analytics.warranty import warranted_fraction, warranty_envelope, warranty_rate_test
from analytics.weekly import period_kpis, weekly_comparison
from db import degradation as db_degradation
from db import ingest_log as db_ingest_log
from db import queries
from db import timeseries as db_timeseries
from db.engine import ENV_VAR, make_engine, resolve_url

TTL_S = 300
#: The weekly check compares last week with the mean of this many weeks before it.
TRAILING_WEEKS = 8
#: Default window of the date selector: the last 12 weeks of data.
DEFAULT_WINDOW_DAYS = 84
#: The drill-down shows at most this many peers' normalised power (speed; issue #6 target).
MAX_PEERS = 12
#: Rolling-median window of the daily PR trend (days; common practice for noisy daily PR).
ROLLING_DAYS = 30
#: Flags whose kind contains this text are shaded as soiling intervals.
SOILING_KIND = "soiling"

FIELD_CAUTION = (
    "PV arrays are energised whenever they are lit; disconnecting an inverter does not "
    "de-energise its DC side. Inspection and repair are for qualified people working under "
    "local electrical codes and lockout/tagout procedures.")
WARRANTY_CAUTION = (
    "System-level field data are screening evidence: they include inverter, wiring, soiling "
    "and sensor drift, not only module degradation. A warranty claim follows the procedure "
    "of its contract (usually STC flash tests of sampled modules under IEC 60891 with the "
    "stated measurement tolerance) — take legal and technical advice before filing one.")


# ---------------------------------------------------------------- connection


def db_url() -> str:
    """The database URL for this server: ``$HELIAUDIT_DB``, ``st.secrets``, or the default."""
    raw = os.environ.get(ENV_VAR)
    if not raw:
        try:
            raw = st.secrets.get("heliaudit_db")
        except Exception:  # noqa: BLE001 - no secrets file is normal
            raw = None
    return resolve_url(raw)


@st.cache_resource(show_spinner=False)
def engine(url: str) -> sa.Engine:
    # create=False: the dashboard only reads; it never migrates a store behind a writer's back.
    return make_engine(url, create=False)


def _cache(fn):
    return st.cache_data(ttl=TTL_S, show_spinner=False)(fn)


# ---------------------------------------------------------------- plant and time


@_cache
def site_list(url: str) -> pd.DataFrame:
    try:
        return queries.sites(engine(url))
    except sa.exc.OperationalError:  # an empty or foreign database: no site table
        return pd.DataFrame(columns=["site_id", "name", "timezone", "n_inverters"])


@_cache
def site_info(url: str, site_id: str) -> dict:
    row = site_list(url).set_index("site_id").loc[site_id]
    tz = zoneinfo.ZoneInfo(row["timezone"])
    probe = dt.datetime(2001, 1, 15, 12)
    offset = tz.utcoffset(probe) - (tz.dst(probe) or dt.timedelta(0))
    return {"site_id": site_id, "name": row["name"], "timezone": row["timezone"],
            "std_offset_s": int(offset.total_seconds())}


@_cache
def inverter_list(url: str, site_id: str) -> pd.DataFrame:
    return queries.inverters(engine(url), site_id)


@_cache
def device_list(url: str, site_id: str) -> pd.DataFrame:
    return queries.devices(engine(url), site_id)


@_cache
def data_span(url: str, site_id: str) -> tuple[dt.date | None, dt.date | None]:
    return queries.daily_span(engine(url), site_id)


def default_window(url: str, site_id: str) -> tuple[dt.date, dt.date]:
    """The last :data:`DEFAULT_WINDOW_DAYS` days with daily results (or the last 12 weeks)."""
    first, last = data_span(url, site_id)
    if last is None:
        last = dt.date.today()
        first = last - dt.timedelta(days=DEFAULT_WINDOW_DAYS - 1)
    return max(first, last - dt.timedelta(days=DEFAULT_WINDOW_DAYS - 1)), last


def day_to_s(day: dt.date, std_offset_s: int) -> int:
    """UTC epoch seconds of the start of a local-standard-time day."""
    return (day - dt.date(1970, 1, 1)).days * 86400 - int(std_offset_s)


def s_to_local(ts_s, std_offset_s: int) -> pd.Series:
    """Epoch seconds -> naive local standard time (for tables and axis labels)."""
    return pd.to_datetime(pd.Series(ts_s, dtype="float64") + std_offset_s, unit="s")


def week_of(end: dt.date) -> tuple[dt.date, dt.date]:
    """The 7 days ending on ``end`` (inclusive)."""
    return end - dt.timedelta(days=6), end


# ---------------------------------------------------------------- weekly check


@_cache
def fleet_week(url: str, site_id: str, end: dt.date) -> pd.DataFrame:
    """One row per inverter for the week ending ``end``.

    Columns: ``device_id, peer_group, p_dc_kwp, e_ac_kwh, yf_h, pr_stc, pr_stc_trailing,
    d_trailing_pct, pr_stc_peers, d_peers_pct, avail_energy, avail_time, n_flags,
    flags_lost_kwh, n_days_valid``. ``d_*_pct`` = 100 (PR_STC / reference − 1).
    """
    eng = engine(url)
    w0, w1 = week_of(end)
    t1 = w0 - dt.timedelta(days=1)
    t0 = w0 - dt.timedelta(days=7 * TRAILING_WEEKS)
    out = weekly_comparison(queries.period_sums(eng, site_id, w0, w1),
                            queries.period_sums(eng, site_id, t0, t1),
                            inverter_list(url, site_id))
    info = site_info(url, site_id)
    fl = queries.flags_overlapping(eng, site_id, day_to_s(w0, info["std_offset_s"]),
                                   day_to_s(w1 + dt.timedelta(days=1), info["std_offset_s"]))
    agg = (fl.dropna(subset=["device_id"]).groupby("device_id")
           .agg(n_flags=("flag_id", "size"), flags_lost_kwh=("lost_kwh", "sum")))
    out = out.merge(agg, left_on="device_id", right_index=True, how="left")
    out["n_flags"] = out["n_flags"].fillna(0).astype(int)
    out["flags_lost_kwh"] = out["flags_lost_kwh"].fillna(0.0)
    return out


@_cache
def fleet_sites(url: str, end: dt.date) -> pd.DataFrame:
    """One row per site for the week ending ``end`` (sums over its inverters)."""
    rows = []
    for site_id in site_list(url)["site_id"]:
        eng = engine(url)
        w0, w1 = week_of(end)
        t0 = w0 - dt.timedelta(days=7 * TRAILING_WEEKS)
        cols = ["e_ac_kwh", "e_ac_pr_kwh", "e_ref_kwh", "e_ref_stc_kwh", "e_lost_kwh",
                "t_daylight_h", "t_unavailable_h", "n_days_valid"]
        wk = queries.period_sums(eng, site_id, w0, w1)[cols].sum().to_frame().T
        tr = queries.period_sums(eng, site_id, t0, w0 - dt.timedelta(days=1))[cols].sum()
        k = period_kpis(wk).iloc[0]
        tk = period_kpis(tr.to_frame().T).iloc[0]
        info = site_info(url, site_id)
        fl = queries.flags_overlapping(eng, site_id, day_to_s(w0, info["std_offset_s"]),
                                       day_to_s(w1 + dt.timedelta(days=1),
                                                info["std_offset_s"]))
        rows.append({"site_id": site_id, "name": info["name"],
                     "n_inverters": len(inverter_list(url, site_id)),
                     "e_ac_kwh": k["e_ac_kwh"], "pr_stc": k["pr_stc"],
                     "d_trailing_pct": 100 * (k["pr_stc"] / tk["pr_stc"] - 1)
                     if tk["pr_stc"] and not pd.isna(tk["pr_stc"]) else np.nan,
                     "avail_energy": k["avail_energy"], "n_flags": len(fl),
                     "flags_lost_kwh": float(fl["lost_kwh"].fillna(0).sum())})
    return pd.DataFrame(rows)


@_cache
def pr_relative_heatmap(url: str, site_id: str, start: dt.date, end: dt.date) -> pd.DataFrame:
    """Inverter x day matrix of 100 (PR_STC / site median that day − 1) [%], valid days only.

    Index: device_id; columns: every day in ``[start, end]`` (NaN where a day is not valid).
    """
    d = queries.daily_rows(engine(url), site_id, start, end, columns=("pr_stc", "day_valid"))
    d["pr_v"] = d["pr_stc"].where(d["day_valid"])
    wide = d.pivot_table(index="device_id", columns="day", values="pr_v", aggfunc="first",
                         dropna=False)
    days = pd.date_range(start, end, freq="D").date
    wide = wide.reindex(columns=days)
    med = wide.median(axis=0, skipna=True)
    return 100 * (wide / med - 1)


def _flag_table(fl: pd.DataFrame, std_offset_s: int) -> pd.DataFrame:
    out = fl.copy()
    out["start_local"] = s_to_local(out["start_s"], std_offset_s).values
    out["end_local"] = s_to_local(out["end_s"], std_offset_s).values
    out["duration_h"] = (out["end_s"] - out["start_s"]) / 3600.0
    return out


@_cache
def week_flags(url: str, site_id: str, end: dt.date) -> pd.DataFrame:
    """Flags overlapping the week ending ``end``: new ones (starting in the week) first,
    then by lost energy. Adds ``is_new``, ``start_local``, ``end_local``, ``duration_h``."""
    info = site_info(url, site_id)
    w0, w1 = week_of(end)
    a = day_to_s(w0, info["std_offset_s"])
    b = day_to_s(w1 + dt.timedelta(days=1), info["std_offset_s"])
    fl = queries.flags_overlapping(engine(url), site_id, a, b)
    fl["is_new"] = (fl["start_s"] >= a).astype(bool)
    fl = fl.sort_values(["is_new", "lost_kwh", "start_s"], ascending=[False, False, False],
                        na_position="last")
    return _flag_table(fl, info["std_offset_s"]).reset_index(drop=True)


# ---------------------------------------------------------------- flags


@_cache
def flag(url: str, flag_id: int) -> dict | None:
    return queries.flag_by_id(engine(url), int(flag_id))


@_cache
def flags_for(url: str, site_id: str, device_ids: list[str] | None, start_s: int,
              end_s: int, include_site_wide: bool = True) -> pd.DataFrame:
    """Flags of the devices (and site-wide ones) overlapping ``[start_s, end_s)``."""
    fl = queries.flags_overlapping(engine(url), site_id, start_s, end_s,
                                   device_ids=list(device_ids) if device_ids else None,
                                   include_site_wide=include_site_wide)
    return _flag_table(fl, site_info(url, site_id)["std_offset_s"])


@_cache
def flags_in_window(url: str, site_id: str, start: dt.date, end: dt.date) -> pd.DataFrame:
    info = site_info(url, site_id)
    fl = queries.flags_overlapping(engine(url), site_id, day_to_s(start, info["std_offset_s"]),
                                   day_to_s(end + dt.timedelta(days=1), info["std_offset_s"]))
    return _flag_table(fl, info["std_offset_s"])


def flag_window(fl: dict, pad_h: float = 24.0, max_days: float = 14.0) -> tuple[int, int]:
    """A drill-down window around a flag: the flag ± ``pad_h`` hours, at most ``max_days``
    long (a long flag shows its first days)."""
    a = int(fl["start_s"] - pad_h * 3600)
    b = int(min(fl["end_s"] + pad_h * 3600, a + max_days * 86400))
    return a, b


# ---------------------------------------------------------------- trends


@_cache
def pr_trend(url: str, site_id: str, device_ids: tuple[str, ...], start: dt.date | None,
             end: dt.date | None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Daily PR_STC of chosen inverters with a centred rolling median, and the peers' band.

    Returns ``(chosen, peers)``: ``chosen`` long with ``device_id, day, pr_stc`` (valid days,
    NaN otherwise) and ``pr_stc_roll``; ``peers`` per day with ``p10, p50, p90`` of every
    site inverter's rolling median (the background band).
    """
    d = queries.daily_rows(engine(url), site_id, start, end, columns=("pr_stc", "day_valid"))
    d["pr_v"] = d["pr_stc"].where(d["day_valid"])
    wide = d.pivot_table(index="day", columns="device_id", values="pr_v", aggfunc="first",
                         dropna=False)
    if wide.empty:
        return (pd.DataFrame(columns=["device_id", "day", "pr_stc", "pr_stc_roll"]),
                pd.DataFrame(columns=["day", "p10", "p50", "p90"]))
    wide.index = pd.to_datetime(wide.index)
    wide = wide.reindex(pd.date_range(wide.index.min(), wide.index.max(), freq="D"))
    roll = wide.rolling(ROLLING_DAYS, center=True, min_periods=max(3, ROLLING_DAYS // 4)).median()
    peers = pd.DataFrame({"p10": roll.quantile(0.10, axis=1), "p50": roll.median(axis=1),
                          "p90": roll.quantile(0.90, axis=1)})
    peers.index.name = "day"
    chosen = []
    for dev in device_ids:
        if dev in wide:
            chosen.append(pd.DataFrame({"device_id": dev, "day": wide.index,
                                        "pr_stc": wide[dev].values,
                                        "pr_stc_roll": roll[dev].values}))
    chosen = (pd.concat(chosen, ignore_index=True) if chosen
              else pd.DataFrame(columns=["device_id", "day", "pr_stc", "pr_stc_roll"]))
    return chosen, peers.reset_index()


def degradation_fit_line(chosen: pd.DataFrame, results: pd.DataFrame, device_id: str,
                         method: str) -> pd.DataFrame | None:
    """The fitted trend of one inverter on the PR_STC axis, with its confidence band.

    The fit is a relative rate (``rate_pct_per_yr``, interval ``ci_low..ci_high``), drawn
    through the median PR_STC of the inverter's first 365 days shown:
    PR(t) = PR_0 (1 + Rd t / 100), t in years from the first day. Returns ``day, fit, lo, hi``.
    """
    r = results[(results["device_id"] == device_id) & (results["method"] == method)]
    c = chosen[chosen["device_id"] == device_id].dropna(subset=["pr_stc"])
    if r.empty or c.empty or pd.isna(r["rate_pct_per_yr"].iloc[0]):
        return None
    r = r.iloc[0]
    day0 = pd.Timestamp(c["day"].min())
    first = c[pd.to_datetime(c["day"]) < day0 + pd.Timedelta(days=365)]
    level = float(first["pr_stc"].median())
    days = pd.date_range(day0, pd.Timestamp(c["day"].max()), freq="7D")
    t = (days - day0).days / 365.25
    lo = r["ci_low"] if not pd.isna(r["ci_low"]) else r["rate_pct_per_yr"]
    hi = r["ci_high"] if not pd.isna(r["ci_high"]) else r["rate_pct_per_yr"]
    return pd.DataFrame({"day": days, "fit": level * (1 + r["rate_pct_per_yr"] * t / 100),
                         "lo": level * (1 + lo * t / 100), "hi": level * (1 + hi * t / 100)})


def flagged_days(chosen: pd.DataFrame, flags: pd.DataFrame, std_offset_s: int) -> pd.DataFrame:
    """Rows of ``chosen`` whose day overlaps a flag of the same inverter (with the flag kind)."""
    if chosen.empty or flags.empty:
        return chosen.iloc[0:0].assign(kind=pd.Series(dtype=object))
    c = chosen.copy()
    c["day_s"] = [day_to_s(pd.Timestamp(x).date(), std_offset_s) for x in c["day"]]
    out = []
    for f in flags.dropna(subset=["device_id"]).itertuples():
        m = ((c["device_id"] == f.device_id) & (c["day_s"] + 86400 > f.start_s)
             & (c["day_s"] < f.end_s))
        if m.any():
            out.append(c[m].assign(kind=f.kind, flag_id=f.flag_id))
    return (pd.concat(out, ignore_index=True).drop_duplicates(["device_id", "day"]) if out
            else c.iloc[0:0].assign(kind=pd.Series(dtype=object)))


# ---------------------------------------------------------------- degradation


#: The degradation job stores one extra row per device, method "overview": the headline
#: rate plus, in ``details``, the method comparison and the warranty screening.
SUMMARY_METHOD = "overview"


@_cache
def degradation_table(url: str, site_id: str) -> pd.DataFrame:
    """Every degradation result of the site (one row per device and method), details parsed."""
    return db_degradation.degradation_results(engine(url), site_id)


def rates_only(results: pd.DataFrame) -> pd.DataFrame:
    """The per-method rows (without the job's "overview" rows)."""
    return results[results["method"] != SUMMARY_METHOD].reset_index(drop=True)


def summary_details(results: pd.DataFrame, device_id: str) -> dict:
    r = results[(results["device_id"] == device_id) & (results["method"] == SUMMARY_METHOD)]
    return (r["details"].iloc[0] or {}) if not r.empty else {}


def method_agreement(results: pd.DataFrame) -> pd.DataFrame:
    """Per device, the verdict of :func:`analytics.degradation.compare_methods` on the stored
    rates (methods agree when their intervals overlap). Columns ``device_id, agree,
    compared, disagreements, warnings``; ``agree`` is None with fewer than two intervals."""
    rows = []
    for dev, g in rates_only(results).groupby("device_id", sort=True):
        stored = summary_details(results, dev).get("comparison")
        if stored is not None:  # the verdict the degradation job stored
            rows.append({"device_id": dev, "agree": stored.get("agree"),
                         "compared": ", ".join(stored.get("compared", [])),
                         "disagreements": "; ".join(" vs ".join(p) for p in
                                                    stored.get("disagreements", [])),
                         "warnings": " ".join(stored.get("warnings", []))})
            continue
        rr = {r.method: RateResult(method=r.method, rate_pct_per_yr=_num(r.rate_pct_per_yr),
                                   ci_low=_num(r.ci_low), ci_high=_num(r.ci_high),
                                   confidence=_num(r.confidence))
              for r in g.itertuples()}
        v = compare_methods(rr)
        rows.append({"device_id": dev, "agree": v["agree"], "compared": ", ".join(v["compared"]),
                     "disagreements": "; ".join(" vs ".join(p) for p in v["disagreements"]),
                     "warnings": " ".join(v["warnings"])})
    return pd.DataFrame(rows, columns=["device_id", "agree", "compared", "disagreements",
                                       "warnings"])


def _num(x):
    return None if x is None or pd.isna(x) else float(x)


def yoy_histogram_data(results: pd.DataFrame, device_id: str, method: str = "sensor_year_pairs") -> dict | None:
    """The stored year-on-year pair-rate histogram (``edges_pct_per_yr``, ``counts``) of one
    device, with its rate and interval; None when not stored."""
    r = results[(results["device_id"] == device_id) & (results["method"] == method)]
    if r.empty:
        return None
    r = r.iloc[0]
    h = (r["details"] or {}).get("pair_rate_distribution")
    if not h or not h.get("counts"):
        return None
    return {"edges": h["edges_pct_per_yr"], "counts": h["counts"],
            "rate": _num(r["rate_pct_per_yr"]), "ci": (_num(r["ci_low"]), _num(r["ci_high"])),
            "ci_68": (r["details"] or {}).get("ci_68"), "confidence": _num(r["confidence"]),
            "n_points": r["n_points"]}


@_cache
def warranty_terms(url: str, site_id: str) -> dict | None:
    """The ``[warranty]`` table of the site's configuration as loaded (None when absent)."""
    import tomllib

    text = queries.site_config_toml(engine(url), site_id)
    try:
        w = tomllib.loads(text or "").get("warranty")
    except tomllib.TOMLDecodeError:
        return None
    if not w or "start_date" not in w:
        return None
    start = w["start_date"]
    return {"start_date": start if isinstance(start, dt.date) else dt.date.fromisoformat(str(start)),
            "first_year_loss_pct": float(w.get("first_year_loss_pct", 0.0)),
            "annual_loss_pct": float(w.get("annual_loss_pct", 0.0)),
            "years": int(w.get("years", 25)), "confidence": float(w.get("confidence", 0.95))}


@_cache
def warranty_view(url: str, site_id: str, device_id: str, method: str) -> dict | None:
    """Warranted envelope against the measured index for one inverter (or ``"(site)"``).

    Monthly insolation-weighted PI (ratio of sums of valid days,
    :func:`analytics.performance_ratio.period_sums`) goes to
    :func:`analytics.warranty.warranty_envelope` with the stored rate of ``method``;
    :func:`analytics.warranty.warranty_rate_test` gives the one-sided verdict. Returns
    ``envelope`` (years, warranted_pct), ``measured`` (years, index_pct, lo_pct, hi_pct from the
    rate interval), ``monthly`` (years, relative_pct), ``shortfall_kwh``, ``months_below``,
    ``test`` and ``terms``; None without warranty terms or a rate.
    """
    res = degradation_table(url, site_id)
    stored = summary_details(res, device_id).get("warranty") or {}
    if stored.get("envelope") and stored.get("method") == method:
        return _stored_warranty(stored, res, device_id)
    terms = warranty_terms(url, site_id)
    r = res[(res["device_id"] == device_id) & (res["method"] == method)]
    if terms is None or r.empty or pd.isna(r["rate_pct_per_yr"].iloc[0]):
        return None
    r = r.iloc[0]
    ids = None if device_id == "(site)" else [device_id]
    d = queries.daily_rows(engine(url), site_id, device_ids=ids,
                           columns=("e_ac_kwh", "e_ac_valid_kwh", "e_exp_valid_kwh", "day_valid"))
    if d.empty:
        return None
    d = d.groupby("day", as_index=False)[["e_ac_kwh", "e_ac_valid_kwh", "e_exp_valid_kwh",
                                           "day_valid"]].agg(
        {"e_ac_kwh": "sum", "e_ac_valid_kwh": "sum", "e_exp_valid_kwh": "sum", "day_valid": "all"})
    valid = d[d["day_valid"]]
    pi_m = monthly_sums(valid[["day", "e_ac_valid_kwh", "e_exp_valid_kwh"]], freq="MS")["pi"]
    e_m = monthly_sums(d[["day", "e_ac_kwh"]], freq="MS")["e_ac_kwh"]
    rate = float(r["rate_pct_per_yr"])
    env = warranty_envelope(pi_m, e_m, start_date=terms["start_date"],
                            first_year_loss_pct=terms["first_year_loss_pct"],
                            annual_loss_pct=terms["annual_loss_pct"],
                            term_years=terms["years"], rate_pct_per_yr=rate)
    test = None
    if _num(r["ci_high"]) is not None and _num(r["confidence"]) is not None:
        test = warranty_rate_test(rate, float(r["ci_high"]), float(r["confidence"]),
                                  annual_loss_pct=terms["annual_loss_pct"],
                                  confidence=terms["confidence"])
    return _warranty_frames(terms, r, method, pd.DataFrame(env["months"]),
                            env["shortfall_kwh"], env["months_below"], test)


def _warranty_frames(terms: dict, r, method: str, months: pd.DataFrame, shortfall_kwh,
                     months_below, test) -> dict:
    """Chart frames of a warranty view: the warranted envelope over the term, the measured
    index from the stored rate and its interval, and the monthly index."""
    rate = float(r["rate_pct_per_yr"])
    lo = _num(r["ci_low"]) if _num(r["ci_low"]) is not None else rate
    hi = _num(r["ci_high"]) if _num(r["ci_high"]) is not None else rate
    years = np.linspace(0, terms["years"], 4 * int(terms["years"]) + 1)
    w = warranted_fraction(years, first_year_loss_pct=terms["first_year_loss_pct"],
                           annual_loss_pct=terms["annual_loss_pct"], term_years=terms["years"])
    y_last = float(months["years"].max()) if not months.empty else 1.0
    ym = np.linspace(0, max(y_last, 0.1), 60)
    return {"terms": terms, "rate": rate, "ci": (lo, hi), "method": method,
            "envelope": pd.DataFrame({"years": years, "warranted_pct": 100 * np.asarray(w)}),
            "measured": pd.DataFrame({"years": ym, "index_pct": 100 * (1 + rate * ym / 100),
                                      "lo_pct": 100 * (1 + lo * ym / 100),
                                      "hi_pct": 100 * (1 + hi * ym / 100)}),
            "monthly": (months.assign(relative_pct=100 * months["relative"])
                        if not months.empty else months),
            "shortfall_kwh": shortfall_kwh, "months_below": months_below, "test": test}


def _stored_warranty(w: dict, res: pd.DataFrame, device_id: str) -> dict:
    """The warranty block the degradation job stored, as frames for the chart."""
    r = res[(res["device_id"] == device_id) & (res["method"] == w["method"])].iloc[0]
    test = ({k: w[k] for k in ("exceeds", "verdict", "one_sided_upper_pct_per_yr",
                               "warranted_rate_pct_per_yr") if k in w}
            if "exceeds" in w else None)
    return _warranty_frames(dict(w["terms"]), r, w["method"], pd.DataFrame(w["envelope"]),
                            w.get("shortfall_kwh"), w.get("months_below"), test)


# ---------------------------------------------------------------- drill-down


@_cache
def readings_end(url: str, site_id: str) -> int | None:
    """Last interval start with readings (from the ingest log; epoch s), or None."""
    b = db_ingest_log.ingest_log(engine(url), site_id)
    if b.empty or b["ts_last_s"].isna().all():
        return None
    return int(b["ts_last_s"].max())


@_cache
def drilldown_frame(url: str, site_id: str, inverter_id: str, start_s: int,
                    end_s: int) -> pd.DataFrame:
    """Interval data of one inverter and its sensors in ``[start_s, end_s)``.

    :func:`db.timeseries.inverter_frame` (index ``ts_utc``; ``p_ac_kw, e_ac_kwh, poa_wm2,
    t_module_c, t_amb_c, wind_ms, interval_h``) plus ``t_cell_c`` (King et al. 2004 Eq. 12
    from back-of-module temperature with the ΔT of the inverter's mounting),
    ``p_ac_exp_kw`` (expected AC power, PVWatts, Dobos 2014) and ``p_ac_kw_per_kwp``
    (normalised power). Where a logger gives only energy, ``p_ac_kw`` = e_ac_kwh / interval_h.
    """
    inv = inverter_list(url, site_id).set_index("device_id").loc[inverter_id]
    frame = db_timeseries.inverter_frame(engine(url), site_id, inverter_id, int(start_s),
                                         int(end_s))
    return _with_model(frame, inv)


def _with_model(frame: pd.DataFrame, inv: pd.Series) -> pd.DataFrame:
    frame = frame.copy()
    frame["p_ac_kw"] = frame["p_ac_kw"].fillna(frame["e_ac_kwh"] / frame["interval_h"])
    dt_c = sapm_parameters(inv["mounting"])["delta_t_c"]
    frame["t_cell_c"] = cell_temperature_from_module(frame["t_module_c"], frame["poa_wm2"],
                                                     delta_t_c=dt_c)
    frame["p_ac_exp_kw"] = expected_ac_power(frame["poa_wm2"], frame["t_cell_c"],
                                             float(inv["p_dc_kwp"]),
                                             float(inv["gamma_pmp_per_c"]),
                                             float(inv["p_ac_max_kw"]),
                                             float(inv["eta_inv_nom"]))
    frame["p_ac_kw_per_kwp"] = frame["p_ac_kw"] / float(inv["p_dc_kwp"])
    return frame


@_cache
def peer_normalised_power(url: str, site_id: str, inverter_id: str, start_s: int,
                          end_s: int) -> pd.DataFrame:
    """AC power per kWp of the inverter's peers (same peer group, at most :data:`MAX_PEERS`,
    nearest in id order): long frame ``ts_utc, device_id, p_ac_kw_per_kwp``."""
    inv = inverter_list(url, site_id)
    group = inv.loc[inv["device_id"] == inverter_id, "peer_group"].iloc[0]
    peers = inv[(inv["peer_group"] == group) & (inv["device_id"] != inverter_id)]
    pos = int(np.flatnonzero(inv["device_id"].to_numpy() == inverter_id)[0])
    peers = peers.assign(dist=np.abs(peers.index.to_numpy() - inv.index[pos]))
    peers = peers.nsmallest(MAX_PEERS, "dist")
    kwp = peers.set_index("device_id")["p_dc_kwp"]
    parts = []
    if not peers.empty:
        long = queries.channel_readings(engine(url), site_id, list(peers["device_id"]),
                                        ["p_ac_kw"], start_s, end_s)
        parts.append(pd.DataFrame({
            "ts_utc": pd.to_datetime(long["ts_s"].to_numpy(), unit="s", utc=True),
            "device_id": long["device_id"].to_numpy(),
            "p_ac_kw_per_kwp": long["value"].to_numpy()
            / long["device_id"].map(kwp).to_numpy()}))
        # peers that log energy only (no power channel): read their full frames
        energy_only = sorted(set(peers["device_id"]) - set(long["device_id"]))
        if energy_only:
            for row, f in db_timeseries.inverter_frames(engine(url), site_id, int(start_s),
                                                        int(end_s), energy_only):
                p = f["p_ac_kw"].fillna(f["e_ac_kwh"] / f["interval_h"])
                parts.append(pd.DataFrame({"ts_utc": f.index, "device_id": row["device_id"],
                                           "p_ac_kw_per_kwp": (p / row["p_dc_kwp"]).to_numpy()}))
    if not parts:
        return pd.DataFrame(columns=["ts_utc", "device_id", "p_ac_kw_per_kwp"])
    return pd.concat(parts, ignore_index=True)


# ---------------------------------------------------------------- data quality


@_cache
def interval_s(url: str, site_id: str) -> int:
    """The nominal logging interval: the most common final interval of the loaded batches
    (``interval_s`` is e.g. "900" or "900->300"); 300 s when the log has none."""
    b = db_ingest_log.ingest_log(engine(url), site_id)
    nominal = db_ingest_log.nominal_interval(b.loc[b["status"] == "loaded", "interval_s"].dropna())
    return nominal or 300


@_cache
def completeness(url: str, site_id: str, start: dt.date, end: dt.date) -> pd.DataFrame:
    """Device x day share of expected readings present (``completeness``, 0..1).

    Inverters: intervals with any reading (``daily_inverter.n_intervals``) over the day's
    intervals; sensors: readings per quantity and day over the day's intervals. Rows are
    labelled ``device_id`` (inverters) or ``device_id · quantity`` (sensors).
    """
    info = site_info(url, site_id)
    n_day = 86400 / interval_s(url, site_id)
    days = pd.date_range(start, end, freq="D").date
    inv = queries.daily_rows(engine(url), site_id, start, end, columns=("n_intervals",))
    wi = inv.pivot_table(index="device_id", columns="day", values="n_intervals", aggfunc="first")
    cnt = queries.daily_reading_counts(engine(url), site_id, day_to_s(start, info["std_offset_s"]),
                                       day_to_s(end + dt.timedelta(days=1), info["std_offset_s"]),
                                       info["std_offset_s"])
    cnt["row"] = cnt["device_id"] + " · " + cnt["quantity"]
    ws = cnt.pivot_table(index="row", columns="day", values="n", aggfunc="sum")
    sensors = sorted(device_list(url, site_id).query("kind == 'sensor'")
                     .apply(lambda r: f"{r.device_id} · {r.quantity}", axis=1)) \
        if (device_list(url, site_id)["kind"] == "sensor").any() else []
    ws = ws.reindex(index=sensors)
    wi = wi.reindex(index=list(inverter_list(url, site_id)["device_id"]))
    out = pd.concat([ws, wi]).reindex(columns=days).fillna(0.0) / n_day
    return out.clip(upper=1.0)


@_cache
def ingest_log(url: str, site_id: str) -> pd.DataFrame:
    """The ingest log (:func:`db.ingest_log.ingest_log`): one row per file attempt."""
    return db_ingest_log.ingest_log(engine(url), site_id)


@_cache
def rejected_rows(url: str, site_id: str, batch_id: int | None = None,
                  limit: int = 500) -> pd.DataFrame:
    """Rejected rows with file, line, column and reason (:func:`db.ingest_log.rejected_rows`)."""
    return db_ingest_log.rejected_rows(engine(url), site_id, batch_id=batch_id, limit=limit)


#: Flag kinds about the data rather than the plant (shown on the data-quality page).
DATA_KIND_WORDS = ("sensor", "clock", "drift", "flatline", "dropout", "stuck", "spike")


def is_data_kind(kind: str) -> bool:
    return any(w in str(kind) for w in DATA_KIND_WORDS)


@_cache
def sensor_flags(url: str, site_id: str, start: dt.date, end: dt.date) -> pd.DataFrame:
    """Flags on sensors, and data flags (clock shift, drift, dropouts) of any device, in
    the window; plant events (soiling, cleaning, underperformance) are left out."""
    fl = flags_in_window(url, site_id, start, end)
    sens = set(device_list(url, site_id).query("kind == 'sensor'")["device_id"])
    keep = fl["device_id"].isin(sens) | fl["kind"].map(is_data_kind)
    return fl[keep].reset_index(drop=True)


def flag_label(f) -> str:
    """One-line label of a flag row: ``#id device — kind (severity), start → end``."""
    dev = f.device_id if isinstance(f.device_id, str) and f.device_id else "site"
    lost = (f" · {f.lost_kwh:,.0f} kWh lost" if f.lost_kwh is not None and f.lost_kwh == f.lost_kwh
            and f.lost_kwh > 0 else "")
    a, b = pd.Timestamp(f.start_local), pd.Timestamp(f.end_local)
    span = (f"{a:%Y-%m-%d %H:%M}–{b:%H:%M}" if a.date() == b.date()
            else f"{a:%Y-%m-%d} → {b:%Y-%m-%d}")
    return f"#{f.flag_id} {dev} · {f.kind} ({f.severity}) · {span}{lost}"


# ---------------------------------------------------------------- evidence pack (issue #17)


def evidence_pack_zip(url: str, site_id: str, inverters: tuple[str, ...] | None = None
                      ) -> tuple[str, bytes]:
    """Build the warranty evidence pack (:func:`heliaudit.evidence.build_pack`, the same
    pack as ``heliaudit evidence``) in a temporary folder; return ``(file name, zip bytes)``.

    Not cached: every click builds a fresh pack from the store as it is now. Raises the
    builder's errors (``EvidenceError``, ``NothingComputedError``) for the page to show.
    """
    import tempfile
    from pathlib import Path

    from heliaudit.evidence import build_pack, pack_zip, reproduce_command

    name = f"evidence-{site_id}"
    with tempfile.TemporaryDirectory(prefix="heliaudit-evidence-") as tmp:
        out = Path(tmp) / name
        build_pack(engine(url), site_id, out, inverters=inverters or None, db_url=url,
                   command=reproduce_command(url, site_id, inverters, None, None, name))
        return f"{name}.zip", pack_zip(out)
