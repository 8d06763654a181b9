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
(IEC 61724-1:2021; common practice).
"""

from __future__ import annotations

import datetime as dt
import os
import zoneinfo

import numpy as np
import pandas as pd
import sqlalchemy as sa
import streamlit as st

from analytics.degradation import (
    RateResult,
    compare_methods,
    trend_index,
    usable_daily_pi,
    yoy_rates,
)
from analytics.labels import (
    MEASURED_SOURCES,
    SEVERITY_LABELS,
    SEVERITY_ORDER,
    kind_label,
    method_code,
    source_label,
)
from analytics.performance_ratio import period_sums as monthly_sums
from analytics.power import expected_ac_power
from analytics.reporting import (
    normalise_methods,
    pair_rate_grid,
    recommended_rate,
    shortfall_from_rate,
)
from analytics.temperature import cell_temperature_best_available, sapm_parameters
from analytics.warranty import warranted_fraction, warranty_envelope, warranty_rate_test
from analytics.weekly import (
    period_kpis,
    portfolio_order,
    week_share_of_lost_energy,
    weekly_comparison,
)
from db import degradation as db_degradation
from db import ingest_log as db_ingest_log
from db import queries, registry
from db import timeseries as db_timeseries
from db.engine import ENV_VAR, display_url, make_engine, resolve_url

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


class DatabaseUnreadable(RuntimeError):
    """The configured database cannot be opened or is not a heliaudit store."""


def safe_url(url: str) -> str:
    """The URL with any password masked, for messages (:func:`db.engine.display_url`)."""
    return display_url(url)


@_cache
def site_list(url: str) -> pd.DataFrame:
    """Every site of the store; raises :class:`DatabaseUnreadable` with one plain sentence
    when the database cannot be opened or read (a file that is not a database, a server
    that does not answer)."""
    try:
        return queries.sites(engine(url))
    except sa.exc.OperationalError as exc:
        text = str(getattr(exc, "orig", exc)).strip().splitlines()
        first = text[0] if text else type(exc).__name__
        if "no such table" in first:  # an empty SQLite file: no site yet
            return pd.DataFrame(columns=["site_id", "name", "timezone", "n_inverters"])
        raise DatabaseUnreadable(f"Cannot open the database {safe_url(url)}: {first}.") \
            from None
    except (sa.exc.SQLAlchemyError, OSError, ValueError) as exc:
        text = str(getattr(exc, "orig", None) or exc).strip().splitlines()
        first = text[0] if text else type(exc).__name__
        raise DatabaseUnreadable(f"Cannot read the database {safe_url(url)}: {first}.") \
            from None


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
def economics(url: str, site_id: str) -> dict:
    """The ``[economics]`` table of the site configuration (``currency``,
    ``tariff_per_kwh``, ``cleaning_cost``); empty when absent or without a tariff."""
    import tomllib

    try:
        e = tomllib.loads(queries.site_config_toml(engine(url), site_id) or "").get("economics")
    except tomllib.TOMLDecodeError:
        return {}
    if not e or not e.get("tariff_per_kwh"):
        return {}
    return {"currency": str(e.get("currency", "")), "tariff_per_kwh": float(e["tariff_per_kwh"]),
            "cleaning_cost": float(e.get("cleaning_cost", 0.0) or 0.0)}


def money(value_kwh: float, econ: dict) -> str | None:
    """Lost energy as revenue in the site currency (``None`` without a tariff)."""
    if not econ or value_kwh is None or value_kwh != value_kwh:
        return None
    return f"{value_kwh * econ['tariff_per_kwh']:,.0f} {econ['currency']}".strip()


@_cache
def inverter_instruments(url: str, site_id: str) -> pd.DataFrame:
    """Per inverter: ``device_id, poa_sensor_id, instrument`` (the POA sensor's instrument
    type: ``reference_cell``, ``thermopile_pyranometer`` or ``unknown``)."""
    inv = inverter_list(url, site_id)
    dev = device_list(url, site_id)
    kind = dict(zip(dev["device_id"], dev["instrument"], strict=True))
    out = inv[["device_id", "poa_sensor_id"]].copy()
    out["instrument"] = [kind.get(s) or "unknown" for s in out["poa_sensor_id"]]
    return out


def _week_bounds_s(url: str, site_id: str, end: dt.date) -> tuple[int, int]:
    info = site_info(url, site_id)
    w0, w1 = week_of(end)
    return (day_to_s(w0, info["std_offset_s"]),
            day_to_s(w1 + dt.timedelta(days=1), info["std_offset_s"]))


def _with_week_share(url: str, site_id: str, fl: pd.DataFrame, end: dt.date) -> pd.DataFrame:
    """Adds ``lost_week_kwh``: the week's share of each flag's lost energy
    (:func:`analytics.weekly.week_share_of_lost_energy`)."""
    fl = fl.copy()
    if fl.empty:
        fl["lost_week_kwh"] = pd.Series(dtype=float)
        return fl
    info = site_info(url, site_id)
    a, b = _week_bounds_s(url, site_id, end)
    lo = min(int(fl["start_s"].min()), a) + info["std_offset_s"]
    hi = max(int(fl["end_s"].max()), b) + info["std_offset_s"]
    d0 = dt.date(1970, 1, 1) + dt.timedelta(days=lo // 86400)
    d1 = dt.date(1970, 1, 1) + dt.timedelta(days=hi // 86400)
    exp = queries.daily_rows(engine(url), site_id, d0, d1, columns=("e_exp_kwh",))
    fl["lost_week_kwh"] = week_share_of_lost_energy(fl, exp, a, b,
                                                    std_offset_s=info["std_offset_s"]).to_numpy()
    return fl


@_cache
def fleet_week(url: str, site_id: str, end: dt.date) -> pd.DataFrame:
    """One row per inverter for the week ending ``end``.

    Columns: ``device_id, peer_group, instrument, n_peers, p_dc_kwp, e_ac_kwh, yf_h, pr_stc,
    pr_stc_trailing, d_trailing_pct, pr_stc_peers, d_peers_pct, avail_energy, avail_time,
    n_flags, n_alarms, n_warnings, worst_severity, lost_week_kwh, n_days_valid``.
    ``d_*_pct`` = 100 (PR_STC / reference − 1); peers share the peer group and the POA
    instrument type; ``lost_week_kwh`` is the week's share of the lost energy of the
    inverter's flags.
    """
    eng = engine(url)
    w0, w1 = week_of(end)
    t1 = w0 - dt.timedelta(days=1)
    t0 = w0 - dt.timedelta(days=7 * TRAILING_WEEKS)
    inv = inverter_list(url, site_id).merge(
        inverter_instruments(url, site_id)[["device_id", "instrument"]], on="device_id")
    out = weekly_comparison(queries.period_sums(eng, site_id, w0, w1),
                            queries.period_sums(eng, site_id, t0, t1), inv)
    fl = week_flags(url, site_id, end)
    fl = fl.dropna(subset=["device_id"])
    agg = (fl.groupby("device_id")
           .agg(n_flags=("flag_id", "size"),
                n_alarms=("severity", lambda s: int((s == "alarm").sum())),
                n_warnings=("severity", lambda s: int((s == "warning").sum())),
                lost_week_kwh=("lost_week_kwh", "sum")))
    out = out.merge(agg, left_on="device_id", right_index=True, how="left")
    for c in ("n_flags", "n_alarms", "n_warnings"):
        out[c] = out[c].fillna(0).astype(int)
    out["lost_week_kwh"] = out["lost_week_kwh"].fillna(0.0)
    out["worst_severity"] = np.where(out["n_alarms"] > 0, "alarm",
                                     np.where(out["n_warnings"] > 0, "warning", "none"))
    return out


@_cache
def sources(url: str, site_id: str, start: dt.date | None, end: dt.date | None) -> pd.DataFrame:
    """Per inverter, where its PR's irradiance and cell temperature came from over
    ``[start, end]`` (issue #11): the most frequent code of the daily table's
    ``irradiance_basis`` and ``t_cell_basis``, with its words and a flag for a modelled
    source. Columns ``device_id, irradiance_basis, t_cell_basis, irradiance, t_cell,
    irradiance_long, t_cell_long, modelled``; an inverter with no row is absent."""
    d = queries.daily_rows(engine(url), site_id, start, end,
                           columns=("irradiance_basis", "t_cell_basis"))
    rows = []
    for dev, g in d.groupby("device_id", sort=True):
        mode = {c: (g[c].dropna().mode().iloc[0] if g[c].notna().any() else None)
                for c in ("irradiance_basis", "t_cell_basis")}
        rows.append({"device_id": dev, **mode})
    out = pd.DataFrame(rows, columns=["device_id", "irradiance_basis", "t_cell_basis"])
    for col, short in (("irradiance_basis", "irradiance"), ("t_cell_basis", "t_cell")):
        out[short] = [source_label(c, short=True) for c in out[col]]
        out[f"{short}_long"] = [source_label(c) for c in out[col]]
    out["modelled"] = [not (_measured(a) and _measured(b))
                       for a, b in zip(out["irradiance_basis"], out["t_cell_basis"],
                                       strict=True)]
    return out


def _measured(code) -> bool:
    """True for a measured source (or an unknown one: no claim is made about it)."""
    return code is None or all(c in MEASURED_SOURCES for c in str(code).split("+"))


def sources_caption(src: pd.DataFrame) -> str | None:
    """One sentence per source that is not measured in the array's plane, naming the
    inverters it feeds; None when every source is measured."""
    parts = []
    for col, what in (("irradiance_basis", "irradiance"), ("t_cell_basis", "cell temperature")):
        for code, g in src.dropna(subset=[col]).groupby(col, sort=True):
            if _measured(code):
                continue
            parts.append(f"{', '.join(g['device_id'])}: {what} {source_label(code)}.")
    if not parts:
        return None
    return ("Not measured in the array's plane (a transposed PR carries a seasonal error of "
            "a few per cent; compare like with like): " + " ".join(parts))


@_cache
def week_energy(url: str, site_id: str, end: dt.date) -> dict:
    """The site's week: measured and expected AC energy [kWh] (all days), their ratio, and
    per POA instrument type the insolation [kWh/m²] (median over the inverters measured by
    that type) and PR_STC (ratio of sums over valid days, IEC 61724-1)."""
    w0, w1 = week_of(end)
    d = queries.daily_rows(engine(url), site_id, w0, w1,
                           columns=("e_ac_kwh", "e_exp_kwh", "h_poa_kwhm2", "e_ac_pr_kwh",
                                    "e_ref_stc_kwh", "day_valid"))
    ins = inverter_instruments(url, site_id)
    d = d.merge(ins, on="device_id", how="left")
    by = []
    for inst, g in d.groupby("instrument", sort=True):
        v = g[g["day_valid"]]
        h = g.groupby("device_id")["h_poa_kwhm2"].sum(min_count=1)
        by.append({"instrument": inst,
                   "sensors": ", ".join(sorted(ins.loc[ins["instrument"] == inst,
                                                       "poa_sensor_id"].dropna().unique())),
                   "n_inverters": int(g["device_id"].nunique()),
                   "h_poa_kwhm2": float(h.median()) if h.notna().any() else np.nan,
                   "pr_stc": (float(v["e_ac_pr_kwh"].sum() / v["e_ref_stc_kwh"].sum())
                              if not v.empty and v["e_ref_stc_kwh"].sum() > 0 else np.nan)})
    e_ac = float(d["e_ac_kwh"].sum()) if not d.empty else np.nan
    e_exp = float(d["e_exp_kwh"].sum()) if not d.empty else np.nan
    return {"e_ac_kwh": e_ac, "e_exp_kwh": e_exp,
            "ratio": e_ac / e_exp if e_exp and e_exp == e_exp and e_exp > 0 else np.nan,
            "n_days": int(d["day"].nunique()) if not d.empty else 0,
            "by_instrument": pd.DataFrame(by, columns=["instrument", "sensors", "n_inverters",
                                                       "h_poa_kwhm2", "pr_stc"])}


@_cache
def portfolio_end(url: str) -> dt.date | None:
    """The last day with daily results in any site of the store (the portfolio's default
    week end), or None."""
    spans = queries.portfolio_spans(engine(url))
    days = [d for d in spans["last_day"] if d is not None]
    return max(days) if days else None


@_cache
def portfolio_week(url: str, end: dt.date) -> pd.DataFrame:
    """One row per site of the store for the week ending ``end``, the sites that need
    attention first (:func:`analytics.weekly.portfolio_order`).

    Columns: ``site_id, name, status, rank, last_day, days_behind, p_dc_kwp, n_inverters,
    n_inverters_reporting, e_ac_kwh, yf_h, pr_stc, d_trailing_pct, avail_energy, n_alarms,
    n_warnings, n_flags, lost_week_kwh, rate_pct_per_yr, ci_low, ci_high, rate_method,
    n_caveats, warranted_pct_per_yr, warranty_test``. Energy and PR are ratios of sums over all the site's
    inverters and sensor types (IEC 61724-1); ``d_trailing_pct`` compares with the site's
    :data:`TRAILING_WEEKS` weeks before; the rate is the site's recommended degradation rate.
    The sums come from one statement per period for the whole store; flags per site.
    """
    eng = engine(url)
    w0, w1 = week_of(end)
    t0, t1 = w0 - dt.timedelta(days=7 * TRAILING_WEEKS), w0 - dt.timedelta(days=1)
    sites = site_list(url)[["site_id", "name", "n_inverters"]]
    spans = queries.portfolio_spans(eng)[["site_id", "last_day", "p_dc_kwp"]]
    wk = queries.portfolio_sums(eng, w0, w1).set_index("site_id")
    tr = queries.portfolio_sums(eng, t0, t1).set_index("site_id")
    out = sites.merge(spans, on="site_id", how="left")
    k = period_kpis(wk.astype(float)) if not wk.empty else pd.DataFrame(
        columns=["pr_stc", "avail_energy", "e_ac_kwh"])
    tk = period_kpis(tr.astype(float)) if not tr.empty else pd.DataFrame(columns=["pr_stc"])
    out["n_inverters_reporting"] = out["site_id"].map(wk.get("n_inverters_reporting")
                                                      ).fillna(0).astype(int)
    out["e_ac_kwh"] = out["site_id"].map(k.get("e_ac_kwh")).astype(float)
    out["yf_h"] = out["e_ac_kwh"] / out["p_dc_kwp"]
    out["pr_stc"] = out["site_id"].map(k.get("pr_stc")).astype(float)
    trailing = out["site_id"].map(tk.get("pr_stc")).astype(float)
    out["d_trailing_pct"] = 100.0 * (out["pr_stc"] / trailing - 1.0)
    out["avail_energy"] = out["site_id"].map(k.get("avail_energy")).astype(float)
    counts = []
    for site_id in out["site_id"]:
        fl = week_flags(url, site_id, end)
        counts.append({"n_alarms": int((fl["severity"] == "alarm").sum()),
                       "n_warnings": int((fl["severity"] == "warning").sum()),
                       "n_flags": len(fl),
                       "lost_week_kwh": float(fl["lost_week_kwh"].fillna(0).sum())})
    out = pd.concat([out, pd.DataFrame(counts, index=out.index,
                                       columns=["n_alarms", "n_warnings", "n_flags",
                                                "lost_week_kwh"])], axis=1)
    rates = queries.portfolio_site_rates(eng, db_degradation.SITE_DEVICE, RECOMMENDED)
    rates["rate_method"] = [method_code((d or {}).get("chosen_method")) for d in rates["details"]]
    rates["n_caveats"] = [len((d or {}).get("caveats") or []) for d in rates["details"]]
    out = out.merge(rates.drop(columns="details"), on="site_id", how="left")
    out.loc[out["rate_pct_per_yr"].isna(), "n_caveats"] = np.nan
    out["warranted_pct_per_yr"] = [
        -w["annual_loss_pct"] if (w := warranty_terms(url, sid)) else np.nan
        for sid in out["site_id"]]
    # the one-sided screening test the degradation job stored with the site's rate (the
    # verdict the Degradation & warranty page shows), so a rate beyond the warranted one is
    # not read as a breach the test does not support
    over = queries.portfolio_site_rates(eng, db_degradation.SITE_DEVICE, SUMMARY_METHOD)
    tests = {r.site_id: (r.details or {}).get("warranty") or {} for r in over.itertuples()}
    out["warranty_test"] = [portfolio_warranty_words(tests.get(sid, {})) for sid in out["site_id"]]
    return portfolio_order(out, end)


def portfolio_warranty_words(test: dict) -> str:
    """Short words for the stored warranty screening of a site's recommended rate
    (:func:`analytics.warranty.warranty_rate_test`, one-sided), or why there is none; short
    enough for a table cell (the page names the test and its bound)."""
    if "exceeds" in test:
        conf = test.get("confidence")
        level = f" ({conf:.0%} one-sided)" if isinstance(conf, (int, float)) else ""
        return (f"exceeds{level}" if test["exceeds"] else f"no evidence it exceeds{level}")
    reason = str(test.get("reason") or "")
    if reason.startswith("no [warranty]"):
        return "not tested: no warranty terms"
    if reason.startswith("no measured rate"):
        return "not tested: no rate"
    return "not tested" + (f": {reason}" if reason else "")


#: Heatmaps show one column per day up to this many days, then one per week up to
#: :data:`HEAT_WEEKLY_MAX_DAYS`, then one per month (a column stays wider than a few pixels
#: on a 1440-pixel screen).
HEAT_DAILY_MAX_DAYS = 120
HEAT_WEEKLY_MAX_DAYS = 730


def heat_period(start: dt.date, end: dt.date) -> str:
    """``"day"``, ``"week"`` or ``"month"``: the column of a heatmap over ``[start, end]``."""
    n = (end - start).days + 1
    return "day" if n <= HEAT_DAILY_MAX_DAYS else "week" if n <= HEAT_WEEKLY_MAX_DAYS \
        else "month"


def aggregate_columns(wide: pd.DataFrame, period: str) -> pd.DataFrame:
    """Mean over the days of each week or month of a device x day matrix (columns = days);
    the new columns are the first day of each period."""
    if wide.empty or period == "day":
        return wide
    starts = _period_start(wide.columns, period).date
    out = wide.T.groupby(starts).mean().T
    return out


def _period_start(days, period: str) -> pd.DatetimeIndex:
    idx = pd.DatetimeIndex(pd.to_datetime(pd.Series(list(days))))
    if period == "week":  # weeks start on Monday (ISO 8601)
        return idx - pd.to_timedelta(idx.dayofweek, unit="D")
    if period == "month":
        return idx.to_period("M").to_timestamp()
    return idx


@_cache
def pr_relative_heatmap(url: str, site_id: str, start: dt.date, end: dt.date) -> pd.DataFrame:
    """Inverter x period matrix of 100 (PR_STC / median of the period − 1) [%], the median
    taken over the site's inverters on the same POA instrument type.

    Periods are days up to :data:`HEAT_DAILY_MAX_DAYS` days, then ISO weeks, then months
    (:func:`heat_period`); a week's or month's PR_STC is the ratio of sums over its valid
    days (IEC 61724-1). Index: device_id; columns: the first day of every period in
    ``[start, end]`` (NaN where an inverter has no valid day in it).
    """
    d = queries.daily_rows(engine(url), site_id, start, end,
                           columns=("pr_stc", "day_valid", "e_ac_pr_kwh", "e_ref_stc_kwh"))
    period = heat_period(start, end)
    if period == "day":
        d["pr_v"] = d["pr_stc"].where(d["day_valid"])
        wide = d.pivot_table(index="device_id", columns="day", values="pr_v", aggfunc="first",
                             dropna=False)
        cols = pd.date_range(start, end, freq="D").date
    else:
        v = d[d["day_valid"]].copy()
        v["period"] = _period_start(v["day"], period).date
        g = v.groupby(["device_id", "period"])[["e_ac_pr_kwh", "e_ref_stc_kwh"]].sum()
        g["pr_v"] = g["e_ac_pr_kwh"] / g["e_ref_stc_kwh"].where(g["e_ref_stc_kwh"] > 0)
        wide = g["pr_v"].unstack("period")
        cols = sorted(set(_period_start(pd.date_range(start, end, freq="D").date, period).date))
    wide = wide.reindex(columns=cols)
    # relative to the median of the inverters on the same POA instrument type: a reference
    # cell and a pyranometer are never compared (Dunn, Gostein & Emery 2012)
    inst = inverter_instruments(url, site_id).set_index("device_id")["instrument"]
    groups = inst.reindex(wide.index).fillna("unknown")
    med = wide.groupby(groups).transform(lambda g: g.median(axis=0, skipna=True))
    return 100 * (wide / med - 1)


def is_ongoing(flag, data_end_s: int | None) -> bool:
    """A flag still open at the end of the data: its details say so, or its span reaches the
    last reading (within two hours)."""
    det = flag.get("details")
    if det is None:
        det = _json_text(flag.get("details_json"))
    if isinstance(det, dict) and det.get("ongoing") is True:
        return True
    return data_end_s is not None and int(flag["end_s"]) >= int(data_end_s) - 7200


def _json_text(text):
    import json

    if not isinstance(text, str):
        return None
    try:
        return json.loads(text)
    except ValueError:
        return None


def duration_text(hours: float, ongoing: bool = False) -> str:
    """A duration in words a reader takes in at once: minutes, hours or days; "so far" when
    the event is still open."""
    if hours is None or hours != hours:
        return "–"
    txt = (f"{hours * 60:.0f} min" if hours < 1 else f"{hours:.1f} h" if hours < 48
           else f"{hours / 24:,.0f} days")
    return txt + (" so far" if ongoing else "")


def _flag_table(fl: pd.DataFrame, std_offset_s: int, data_end_s: int | None = None
                ) -> pd.DataFrame:
    out = fl.copy()
    out["start_local"] = s_to_local(out["start_s"], std_offset_s).values
    out["ongoing"] = [is_ongoing(r, data_end_s) for r in out.to_dict("records")]
    last = data_end_s if data_end_s is not None else out["end_s"]
    span_end = np.where(out["ongoing"], last, out["end_s"]) if len(out) else []
    # charts shade up to the end of the data for an open flag; tables say "ongoing"
    out["end_local"] = s_to_local(pd.Series(span_end, dtype="float64"), std_offset_s).values
    out["duration_h"] = (pd.Series(span_end, index=out.index, dtype=float)
                         - out["start_s"]) / 3600.0
    out["duration_text"] = [duration_text(h, o) for h, o in zip(out["duration_h"],
                                                                 out["ongoing"], strict=True)]
    out["kind_label"] = [kind_label(k) for k in out["kind"]]
    out["severity_label"] = [SEVERITY_LABELS.get(s, str(s)) for s in out["severity"]]
    out["device_label"] = [d if isinstance(d, str) and d else "whole site"
                           for d in out["device_id"]]
    return out


@_cache
def week_flags(url: str, site_id: str, end: dt.date) -> pd.DataFrame:
    """Flags overlapping the week ending ``end``: alarms, then warnings, then info; within a
    severity new ones (starting in the week) and then the week's share of lost energy.
    Adds ``is_new``, ``ongoing`` (still open at the end of the data), ``lost_week_kwh``
    (the week's share of the flag's lost energy), ``start_local``, ``end_local`` (the end
    of the data when ongoing), ``duration_h`` (so far, when ongoing) and human labels."""
    info = site_info(url, site_id)
    a, b = _week_bounds_s(url, site_id, end)
    fl = queries.flags_overlapping(engine(url), site_id, a, b)
    fl["is_new"] = (fl["start_s"] >= a).astype(bool)
    fl = _with_week_share(url, site_id, fl, end)
    fl["severity_rank"] = [SEVERITY_ORDER.get(s, 3) for s in fl["severity"]]
    fl = fl.sort_values(["severity_rank", "is_new", "lost_week_kwh", "start_s"],
                        ascending=[True, False, False, False], na_position="last")
    return _flag_table(fl, info["std_offset_s"], readings_end(url, site_id)
                       ).reset_index(drop=True)


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
    return _flag_table(fl, site_info(url, site_id)["std_offset_s"], readings_end(url, site_id))


@_cache
def flags_in_window(url: str, site_id: str, start: dt.date, end: dt.date) -> pd.DataFrame:
    info = site_info(url, site_id)
    fl = queries.flags_overlapping(engine(url), site_id, day_to_s(start, info["std_offset_s"]),
                                   day_to_s(end + dt.timedelta(days=1), info["std_offset_s"]))
    return _flag_table(fl, info["std_offset_s"], readings_end(url, site_id))


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


#: The degradation job stores one extra row per device, method "overview": in ``details``
#: the method comparison, change points and the warranty screening; and one row
#: "recommended" (issue #13): the rate to show first, its reasons and caveats.
SUMMARY_METHOD = "overview"
RECOMMENDED = "recommended"


@_cache
def degradation_table(url: str, site_id: str) -> pd.DataFrame:
    """Every degradation result of the site (one row per device and method), details parsed,
    method codes as of results schema heliaudit-results/2 (older stores are mapped)."""
    return normalise_methods(db_degradation.degradation_results(engine(url), site_id))


def rates_only(results: pd.DataFrame) -> pd.DataFrame:
    """The per-method rows (without the "overview" and "recommended" rows)."""
    return results[~results["method"].isin([SUMMARY_METHOD, RECOMMENDED])].reset_index(
        drop=True)


def recommended(results: pd.DataFrame, device_id: str) -> dict | None:
    """The recommended rate of a device with its reasons and caveats
    (:func:`analytics.reporting.recommended_rate`)."""
    return recommended_rate(results, device_id)


@_cache
def pair_rates(url: str, site_id: str, device_id: str) -> pd.Series:
    """The year-on-year pair rates (Jordan et al. 2018) of one inverter or the site, from
    the daily performance index as the degradation job selects it
    (:func:`analytics.degradation.usable_daily_pi` with the stored stabilisation period;
    for the site Σ e_ac_valid / Σ e_exp_valid over inverters with a usable day, on days
    where at least half of them have one), with the computation's pair reference. Indexed
    by the earlier day of each pair. [%/yr]"""
    comp = db_degradation.last_computation(engine(url), site_id) or {}
    params = comp.get("params") or {}
    stab = int(params.get("stabilisation_days", 180))
    frac = float(params.get("site_min_inverter_fraction", 0.5))
    inv = inverter_list(url, site_id).set_index("device_id")
    ids = list(inv.index) if device_id == "(site)" else [device_id]
    d = queries.daily_rows(engine(url), site_id, device_ids=ids,
                           columns=("pi", "day_valid", "e_ac_valid_kwh", "e_exp_valid_kwh",
                                    "details_json"))
    usable = {}
    for dev, g in d.groupby("device_id"):
        g = g.set_index(pd.DatetimeIndex(pd.to_datetime(g["day"])))
        g = trend_index(g)  # the daily index for trends, as the degradation job uses it
        s_, _ = usable_daily_pi(g["pi"], g["day_valid"], commissioned=inv.loc[dev, "commissioned"],
                                stabilisation_days=stab)
        usable[dev] = (s_, g)
    if device_id != "(site)":
        series = usable[device_id][0] if device_id in usable else pd.Series(dtype=float)
    else:
        num = pd.concat([g["e_ac_valid_kwh"].reindex(s_.index) for s_, g in usable.values()],
                        axis=1, sort=True).sum(axis=1, min_count=1)
        den = pd.concat([g["e_exp_valid_kwh"].reindex(s_.index) for s_, g in usable.values()],
                        axis=1, sort=True).sum(axis=1, min_count=1)
        n = pd.concat([pd.Series(1, s_.index) for s_, _ in usable.values()], axis=1,
                      sort=True).sum(axis=1)
        ok = (n >= frac * len(usable)) & (den > 0)
        series = (num / den)[ok]
    if series.empty:
        return pd.Series(dtype=float, name="rd_pct_per_yr")
    # the reference the job used (issue #13: "start", % of the initial level; older stores
    # computed plain pairwise rates)
    return yoy_rates(series, reference=str(params.get("reference", "pairwise")))


@_cache
def pair_grid(url: str, site_id: str, device_id: str) -> pd.DataFrame:
    """Year x season medians of the pair rates (:func:`analytics.reporting.pair_rate_grid`)."""
    return pair_rate_grid(pair_rates(url, site_id, device_id))


@_cache
def soiling_summary(url: str, site_id: str) -> dict | None:
    """The site's soiling result for its own panel: the insolation-weighted loss over the
    whole period (1 − SR, Deceglie et al. 2018) with its Monte-Carlo range, the present loss
    and soiling rate, the cleaning economics, and the lost energy of every dry period.
    None when the site has no soiling flag."""
    fl = queries.flags_overlapping(engine(url), site_id, kinds=["soiling"])
    if fl.empty:
        return None
    fl = fl.sort_values("start_s").reset_index(drop=True)
    dets = [(_json_text(t) or {}) for t in fl["details_json"]]
    last = next((d for d in reversed(dets) if _soiling_site_ratio(d) is not None), dets[-1])
    sr = _soiling_site_ratio(last)
    # the Monte-Carlo range: top-level `soiling_ratio_weighted_low/_high`, or (older
    # stores) a nested dict of percentiles
    mc = {k: v for k, v in last.items() if k in ("soiling_ratio_weighted_low",
                                                 "soiling_ratio_weighted_high")}
    if not mc:
        mc = next((v for v in last.values() if isinstance(v, dict)
                   and any(str(k).endswith("_low") for k in v)
                   and any(str(k).endswith("_high") for k in v)), {})
    lo = next((v for k, v in mc.items() if str(k).endswith("_low")), None)
    hi = next((v for k, v in mc.items() if str(k).endswith("_high")), None)
    period = next((v for k, v in last.items() if str(k).endswith("_period")
                   and isinstance(v, list)), None)
    econ = economics(url, site_id)
    periods = pd.DataFrame({
        "first_day": [d.get("first_day") for d in dets],
        "last_day": [d.get("last_day") for d in dets],
        "lost_kwh": fl["lost_kwh"].astype(float),
        "loss_at_end_pct": [d.get("loss_at_end_pct") for d in dets],
        "rate_pct_per_day": [d.get("soiling_rate_pct_per_day") for d in dets],
        "severity": fl["severity"]})
    periods["lost_revenue"] = (periods["lost_kwh"] * econ["tariff_per_kwh"]
                               if econ else np.nan)
    flags_loss = {"loss_pct": None if sr is None else 100 * (1 - sr),
                  "loss_low_pct": None if hi is None else 100 * (1 - hi),
                  "loss_high_pct": None if lo is None else 100 * (1 - lo)}
    # the headline loss: the degradation job's fleet figure (each inverter's own
    # insolation-weighted loss, weighted by its expected energy; issue #13's validated
    # soiling loss) when it exists, the flags' site-median figure beside it
    fleet = (summary_details(degradation_table(url, site_id), "(site)").get("soiling")
             or {})
    fl_iv = fleet.get("fleet_loss_interval_pct") or [None, None]
    head = ({"loss_pct": fleet["fleet_loss_pct"], "loss_low_pct": fl_iv[0],
             "loss_high_pct": fl_iv[1]}
            if isinstance(fleet.get("fleet_loss_pct"), (int, float)) else flags_loss)
    return {**head, "loss_source": "fleet" if head is not flags_loss else "flags",
            "site_median_loss_pct": flags_loss["loss_pct"],
            "site_median_loss_low_pct": flags_loss["loss_low_pct"],
            "site_median_loss_high_pct": flags_loss["loss_high_pct"],
            "loss_partial_recovery_pct": (
                None if not isinstance(last.get("soiling_ratio_weighted_partial_recovery"),
                                       (int, float))
                else 100 * (1 - last["soiling_ratio_weighted_partial_recovery"])),
            "mc_assumption": next((v for k, v in last.items() if str(k).endswith("assumption")),
                                  None),
            "period": period, "current_loss_pct": last.get("current_loss_pct"),
            "rate_pct_per_day": last.get("soiling_rate_pct_per_day"),
            "rate_ci_pct_per_day": last.get("soiling_rate_ci_pct_per_day"),
            "recommendation": last.get("recommendation"),
            "recommend_cleaning": last.get("recommend_cleaning"),
            "cleaning_cost": last.get("cleaning_cost"),
            "saving": last.get("expected_saving_next_days"),
            "horizon_days": last.get("horizon_days"),
            "t_star_days": last.get("cleaning_interval_days_opt"),
            "currency": last.get("currency") or econ.get("currency", ""),
            "caution": last.get("caution"), "ongoing": bool(last.get("ongoing")),
            "periods": periods}


def _soiling_site_ratio(d: dict):
    for k in ("soiling_ratio_weighted", "soiling_ratio_weighted_site", "sr_iw_site"):
        if isinstance(d.get(k), (int, float)):
            return float(d[k])
    return None


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
    """Warranted envelope against the measured index for one inverter (or ``"(site)"``),
    for the rate of ``method`` (the recommended method by default on the page).

    Monthly insolation-weighted PI (ratio of sums of valid days,
    :func:`analytics.performance_ratio.period_sums`) goes to
    :func:`analytics.warranty.warranty_envelope` with the stored rate of ``method``. The
    one-sided verdict is the stored one when the degradation job screened the same method
    (so the page says what ``heliaudit results`` says), else
    :func:`analytics.warranty.warranty_rate_test` with the run's extra uncertainty. The
    shortfall is the part the rate attributes to degradation
    (:func:`analytics.reporting.shortfall_from_rate`), not the monthly dips. Returns
    ``envelope`` (years, warranted_pct), ``measured`` (years, index_pct, lo_pct, hi_pct),
    ``monthly`` (years, relative_pct), ``shortfall_kwh``, ``months_below`` (monthly index
    under the envelope), ``test`` and ``terms``; None without warranty terms or a rate.
    """
    res = degradation_table(url, site_id)
    stored = summary_details(res, device_id).get("warranty") or {}
    stored_method = method_code(stored.get("measured_method") or stored.get("method"))
    terms = warranty_terms(url, site_id)
    if terms is None and stored.get("terms"):
        terms = dict(stored["terms"])
        terms["start_date"] = dt.date.fromisoformat(str(terms["start_date"])[:10])
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
    months = pd.DataFrame(env["months"])
    months_below, monthly_kwh = env["months_below"], env["shortfall_kwh"]
    if stored_method == method and stored.get("envelope"):
        # the job's envelope (de-seasonalised index) and figures: what `heliaudit results`
        # exports, so the page never shows another number for the same thing
        months = pd.DataFrame(stored["envelope"])
        months_below = stored.get("months_below")
        monthly_kwh = stored.get("shortfall_kwh")
    if stored_method == method and "exceeds" in stored:
        test = {k: stored[k] for k in ("exceeds", "verdict", "one_sided_upper_pct_per_yr",
                                       "warranted_rate_pct_per_yr") if k in stored}
    elif _num(r["ci_high"]) is not None and _num(r["confidence"]) is not None:
        comp = db_degradation.last_computation(engine(url), site_id) or {}
        extra = float((comp.get("params") or {}).get("sigma_extra_pct_per_yr", 0.0) or 0.0)
        try:
            test = warranty_rate_test(rate, float(r["ci_high"]), float(r["confidence"]),
                                      annual_loss_pct=terms["annual_loss_pct"],
                                      confidence=terms["confidence"],
                                      sigma_extra_pct_per_yr=extra)
        except TypeError:  # an analytics version without the extra-uncertainty term
            test = warranty_rate_test(rate, float(r["ci_high"]), float(r["confidence"]),
                                      annual_loss_pct=terms["annual_loss_pct"],
                                      confidence=terms["confidence"])
    else:
        test = None
    shortfall = None
    if not months.empty:
        e = e_m.reindex(pd.DatetimeIndex(pd.to_datetime(months["month"] + "-01"))).to_numpy()
        shortfall = shortfall_from_rate(months["years"].to_numpy(dtype=float), e,
                                        months["warranted"].to_numpy(dtype=float), rate)
    out = _warranty_frames(terms, r, method, months, shortfall, months_below, test)
    out["shortfall_monthly_kwh"] = monthly_kwh
    out["stored"] = stored_method == method and bool(stored.get("envelope"))
    return out


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
    t_module_c, t_amb_c, wind_ms, interval_h``) with ``poa_wm2`` the inverter's own array
    irradiance (:func:`_array_irradiance`), plus ``t_cell_c`` (King et al. 2004 Eq. 12 from
    back-of-module temperature with the ΔT of the inverter's mounting; without a module sensor
    from ambient temperature and wind, :func:`analytics.temperature.cell_temperature_best_available`),
    ``p_ac_exp_kw`` (expected AC power, PVWatts, Dobos 2014) and ``p_ac_kw_per_kwp``
    (normalised power). Where a logger gives only energy, ``p_ac_kw`` = e_ac_kwh / interval_h.
    """
    inv = inverter_list(url, site_id).set_index("device_id").loc[inverter_id]
    eng = engine(url)
    frame = db_timeseries.inverter_frame(eng, site_id, inverter_id, int(start_s), int(end_s))
    return _with_model(_array_irradiance(eng, site_id, inverter_id, frame, start_s, end_s), inv)


def _array_irradiance(eng, site_id: str, inverter_id: str, frame: pd.DataFrame, start_s: int,
                      end_s: int) -> pd.DataFrame:
    """The frame with ``poa_wm2`` = the inverter's own array irradiance, as the daily job
    computes it (transposed from another plane or from GHI, capacity-weighted over several
    arrays, trackers turned; :class:`heliaudit.site_irradiance.SiteIrradiance`), so the
    drill-down's expected power is the one its PR uses. Unchanged for an inverter with a POA
    sensor in its own plane."""
    from heliaudit.site_irradiance import SiteIrradiance  # the daily job's own model

    site = registry.site_row(eng, site_id)
    irr = SiteIrradiance(eng, site, int(start_s), int(end_s))
    if frame.empty or not irr.needs_model(inverter_id):
        return frame
    return irr.apply(inverter_id, frame)[0]


def _with_model(frame: pd.DataFrame, inv: pd.Series) -> pd.DataFrame:
    frame = frame.copy()
    frame["p_ac_kw"] = frame["p_ac_kw"].fillna(frame["e_ac_kwh"] / frame["interval_h"])
    sap = sapm_parameters(inv["mounting"])
    frame["t_cell_c"] = cell_temperature_best_available(
        frame["poa_wm2"], frame["t_module_c"], frame["t_amb_c"], frame["wind_ms"],
        a=sap["a"], b=sap["b"], delta_t_c=sap["delta_t_c"])
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


def flag_label(f, econ: dict | None = None) -> str:
    """One-line label of a flag row in words: ``#id device — kind (severity), span``; an
    ongoing flag says "since" its start instead of inventing an end."""
    dev = f.device_id if isinstance(f.device_id, str) and f.device_id else "whole site"
    lost = getattr(f, "lost_week_kwh", None)
    if lost is not None and lost == lost and lost > 0:
        lost_txt = f" · {lost:,.0f} kWh lost this week"
        if money(lost, econ or {}):
            lost_txt += f" ({money(lost, econ)})"
    else:
        lost = f.lost_kwh
        lost_txt = (f" · {lost:,.0f} kWh lost" if lost is not None and lost == lost
                    and lost > 0 else "")
    a = pd.Timestamp(f.start_local)
    if getattr(f, "ongoing", False):
        span = f"since {a:%Y-%m-%d %H:%M}, ongoing"
    else:
        b = pd.Timestamp(f.end_local)
        span = (f"{a:%Y-%m-%d %H:%M}–{b:%H:%M}" if a.date() == b.date()
                else f"{a:%Y-%m-%d} → {b:%Y-%m-%d}")
    sev = SEVERITY_LABELS.get(f.severity, str(f.severity)).lower()
    return f"#{f.flag_id} {dev} · {kind_label(f.kind)} ({sev}) · {span}{lost_txt}"


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
