"""Degradation & warranty: the recommended rate with its reasons and caveats first, then
how stable it is over years and seasons, how it compares with the warranty, every method,
and the soiling result in its own form."""

import streamlit as st

from analytics.labels import (
    CAVEAT_LABELS,
    RELATIVE_METHODS,
    codes_in_words,
    method_code,
    method_label,
)
from dashboard import charts, data, ui

sel = ui.selection()
url, site_id = sel["url"], sel["site_id"]
st.title("Degradation & warranty")
ui.warranty_caution()

res_all = data.degradation_table(url, site_id)
res = data.rates_only(res_all)
if res.empty:
    st.info("No degradation results for this site yet: run `heliaudit compute` once at "
            "least two years of data are loaded (year-on-year needs pairs one year apart).")
    st.stop()

devices = list(dict.fromkeys(sorted(res["device_id"], key=lambda d: (d != "(site)", d))))
device = st.selectbox("Device", devices, key="deg_device",
                      format_func=lambda d: "Whole site" if d == "(site)" else d)
name = "the whole site" if device == "(site)" else device
title_name = "Whole site" if device == "(site)" else device
rec = data.recommended(res_all, device)
terms = data.warranty_terms(url, site_id)
warranted = -terms["annual_loss_pct"] if terms else None


def _ci(lo, hi) -> str:
    return f"{lo:+.2f} to {hi:+.2f}" if lo is not None and hi is not None else "–"


# ---- 1. the recommended rate, its reasons and every caveat beside it
st.subheader(f"Recommended degradation rate of {name}")
chosen = rec["method"] if rec else None
with st.container(border=True):
    if rec is None or rec["rate_pct_per_yr"] is None:
        st.info("No rate for this device" + (f": {codes_in_words(rec['reason'])}."
                                             if rec and rec.get("reason") else "."))
    else:
        c = st.columns([2, 3, 3])
        conf = rec["confidence"] or 0.95
        c[0].metric("Recommended rate", f"{rec['rate_pct_per_yr']:+.2f} %/yr",
                    help="Negative = loss of power per year, relative to the first year.")
        c[1].metric(f"{100 * conf:.0f} % interval", f"{_ci(rec['ci_low'], rec['ci_high'])} %/yr",
                    help=(f"68 % interval {_ci(rec['ci68_low'], rec['ci68_high'])} %/yr"
                          if rec.get("ci68_low") is not None else None))
        c[2].markdown(f"**Method**  \n{method_label(chosen)}")
        for reason in rec["reasons"]:
            st.markdown(f"- {reason}")
        src = data.sources(url, site_id, None, None)
        if device != "(site)":
            src = src[src["device_id"] == device]
        if (note := data.sources_caption(src)):
            st.caption(note + " Sensor-based rates of these inverters rest on that "
                              "irradiance; a rate on modelled clear sky does not.")
        if rec["caveats"]:
            for cav in rec["caveats"]:
                st.warning(f"**{CAVEAT_LABELS.get(cav.get('kind'), 'Caveat')}.** "
                           f"{cav.get('text', '')}", icon=":material/warning:")
        else:
            st.caption("No caveat applies to this rate (no sensor drift, level shift, soiling, "
                       "out-of-range rate or short record was found).")

# ---- 2. is the rate stable over the years and seasons? which periods drive it?
# (not drawn without a rate: pairs that exist but are too few for a rate would read
# as one)
if rec is None or rec["rate_pct_per_yr"] is None:
    st.caption("No chart of year-on-year pairs: without a rate for this device its "
               "pairs are too few or too short a record to read a trend from.")
else:
    grid = data.pair_grid(url, site_id, device)
    if chosen and not str(method_code(chosen)).startswith("sensor_"):
        # the charts show the POA sensor's pairs; the recommended rate does not use them
        st.info(f"The charts below show the year-on-year pairs on the POA sensor. The "
                f"recommended rate above is '{method_label(chosen)}' and does not use them "
                "(see its reasons): read the charts for where the sensor-based pairs depart, "
                "not as the rate.", icon=":material/info:")
    left, right = st.columns(2)
    left.plotly_chart(charts.pair_grid_chart(grid, warranted,
                                             title=f"{title_name}: median pair rate (number of pairs)"),
                      theme=None, key="pair_grid")
    fallback_rate = res[(res["device_id"] == device) & (res["method"] == "sensor_year_pairs")]
    yoy_rate = (float(fallback_rate["rate_pct_per_yr"].iloc[0])
                if len(fallback_rate) and fallback_rate["rate_pct_per_yr"].notna().iloc[0]
                else None)
    yoy_ci = ((float(fallback_rate["ci_low"].iloc[0]), float(fallback_rate["ci_high"].iloc[0]))
              if yoy_rate is not None and fallback_rate["ci_low"].notna().iloc[0] else None)
    right.plotly_chart(charts.year_rates_chart(grid, yoy_rate, yoy_ci, warranted,
                                               title=f"{title_name}: pair rates by year and season"),
                       theme=None, key="year_rates")
    st.caption("Both charts use the pairs of days one year apart of the year-on-year method on "
               "the POA sensor (Jordan et al. 2018), grouped by the year and meteorological season "
               "of the later day (Dec–Feb counts to the year of its January). Grid colour: red where "
               "a season's pairs lost more than the warranted rate"
               + (f" ({warranted:+.2f} %/yr)" if warranted is not None else " (0 without warranty "
                  "terms)") + ", blue where less; cells with fewer than 10 pairs stay empty. "
               "Right: each dot is a season's median pair rate with the middle half of its pairs "
               "(a spread, not a confidence interval); the line and band are the whole-period "
               "year-on-year rate and its interval. A row or a season far from the rest points to "
               "a step, a drifting sensor or soiling rather than steady degradation.")

# ---- 3. the warranty check, from the recommended rate
st.subheader("Against the warranty")
w = data.warranty_view(url, site_id, device, chosen) if chosen else None
why = (data.summary_details(res_all, device).get("warranty") or {}).get("reason")
if w is None:
    st.info("No warranty check" + (f": {codes_in_words(why)}." if why else ": the site configuration has no "
            "[warranty] table, or the recommended rate is missing for this device."))
else:
    wl, wr = st.columns([3, 2])
    wl.plotly_chart(charts.warranty_chart(w["envelope"], w["measured"], w["monthly"]),
                    theme=None, key="warranty")
    t = w["terms"]
    with wr:
        k = st.columns(2)
        k[0].metric("Measured (recommended)", f"{w['rate']:+.2f} %/yr",
                    help=f"{method_label(chosen)}, interval {_ci(*w['ci'])} %/yr")
        k[1].metric("Warranted rate", f"{-t['annual_loss_pct']:+.2f} %/yr",
                    help=f"A loss of at most {t['annual_loss_pct']:.2f} % of nameplate per year "
                         f"after {t['first_year_loss_pct']:.1f} % in the first year, for "
                         f"{t['years']} years from {t['start_date']}.")
        k = st.columns(2)
        k[0].metric("Shortfall from the rate", f"{w['shortfall_kwh']:,.0f} kWh"
                    if w["shortfall_kwh"] is not None else "–",
                    help="Σ over months of E_m · max(0, W_m / (1 + R t_m / 100) − 1): the "
                         "energy the array would have added at the warranted level if it had "
                         "lost only what the recommended rate R attributes to degradation.")
        k[1].metric("Months below", f"{w['months_below']}",
                    help="Months whose measured (de-seasonalised) index lies under the "
                         "warranted envelope, for any reason.")
        caveats = rec["caveats"] if rec else []
        step_inside = (any(c.get("kind") == "level_shift" for c in caveats)
                       and chosen not in ("sensor_year_pairs_between_shifts",
                                          "modelled_sky_between_shifts"))
        if w["test"] is not None:
            verdict = (w["test"]["verdict"][:1].upper() + w["test"]["verdict"][1:]
                       + f" (one-sided upper bound {w['test']['one_sided_upper_pct_per_yr']:+.2f}"
                         f" %/yr against the warranted {w['test']['warranted_rate_pct_per_yr']:+.2f}"
                         " %/yr).")
            if caveats:  # a verdict never stands unqualified beside a caveat
                st.warning(verdict + " It holds only as far as the caveats above allow: "
                           + "; ".join(CAVEAT_LABELS.get(c.get("kind"), "caveat").lower()
                                       for c in caveats) + ".")
            elif w["test"]["exceeds"]:
                st.error(verdict)
            else:
                st.success(verdict)
        if step_inside:
            between = res[(res["device_id"] == device)
                          & (res["method"] == "sensor_year_pairs_between_shifts")]
            alt = (f" The rate between level shifts is "
                   f"{float(between['rate_pct_per_yr'].iloc[0]):+.2f} %/yr."
                   if len(between) and between["rate_pct_per_yr"].notna().iloc[0] else "")
            st.warning("This rate includes a level shift, a failure to repair rather than "
                       "degradation, and so does the shortfall computed from it." + alt)
        st.caption("The shortfall counts only what the recommended rate attributes to "
                   "degradation. It excludes month-to-month dips (soiling, outages, weather), "
                   + ("" if step_inside else "level steps from failures (a string or module "
                      "fault is a repair, not degradation), ")
                   + "and initial light-induced loss (the index has no absolute "
                   "baseline: 100 % is set at the warranty start). "
                   + (f"Every month of the index under the envelope, for any reason, adds up "
                      f"to {w['shortfall_monthly_kwh']:,.0f} kWh"
                      + (" (`shortfall_kwh` of `heliaudit results`)" if w.get("stored") else "")
                      + ": that is not evidence of degradation."
                      if w.get("shortfall_monthly_kwh") is not None else ""))

# ---- 4. every method, rates and relative figures on their own axes
st.subheader("Every method")
recs = {}
for d in devices:
    r_ = data.recommended(res_all, d)
    if r_ and r_["method"]:
        recs[d] = r_["method"]
st.plotly_chart(charts.degradation_forest(res, recs), theme=None, key="forest")
st.caption("Left: degradation rates of the plant from each method; the ring marks the "
           "recommended one. Right, on its own axis: figures that are not the plant's "
           "degradation rate — the rate relative to the peers (a weak inverter against the "
           "others) and the POA sensor's drift against clear sky.")
agree = data.method_agreement(res_all)
table = res[["device_id", "method", "rate_pct_per_yr", "ci_low", "ci_high", "confidence",
             "n_points", "reason"]].copy()
table["device_id"] = table["device_id"].replace({"(site)": "whole site"})
table["kind"] = ["relative / drift" if m in RELATIVE_METHODS else "rate of the plant"
                 for m in table["method"]]
table["method"] = [method_label(m) for m in table["method"]]
table["recommended"] = [recs.get(d if d != "whole site" else "(site)") == m
                        for d, m in zip(table["device_id"], res["method"], strict=True)]
table["reason"] = [codes_in_words(x) or "" for x in table["reason"].fillna("")]
table = table[["device_id", "method", "recommended", "kind", "rate_pct_per_yr", "ci_low",
               "ci_high", "n_points", "reason"]]
st.dataframe(ui.clean_frame(table, {"rate_pct_per_yr": "+.2f", "ci_low": "+.2f",
                                     "ci_high": "+.2f", "n_points": ",.0f"}),
             hide_index=True, key="rates_table", column_config={
    "device_id": st.column_config.TextColumn("Device", width="small"),
    "method": st.column_config.TextColumn("Method", width="medium"),
    "recommended": st.column_config.CheckboxColumn("Chosen", width="small",
                                                   help="The recommended rate of the device."),
    "kind": st.column_config.TextColumn("Figure", width="small"),
    "rate_pct_per_yr": st.column_config.NumberColumn("Rate [%/yr]", format="%+.2f"),
    "ci_low": st.column_config.NumberColumn("Low [%/yr]", format="%+.2f"),
    "ci_high": st.column_config.NumberColumn("High [%/yr]", format="%+.2f"),
    "n_points": st.column_config.NumberColumn("Points", format="localized"),
    "reason": st.column_config.TextColumn("Not computed because", width="large")})
v = agree[agree["device_id"] == device]
if not v.empty and v.iloc[0]["agree"] is False:
    st.caption(f"For {name} the intervals of some methods do not overlap; see the caveats "
               "beside the recommended rate.")

# ---- 5. soiling, in its own form
st.subheader("Soiling")
soil = data.soiling_summary(url, site_id)
if soil is None:
    st.info("No soiling found for this site (no dry period with at least 1 % loss).")
else:
    sl, sr = st.columns([2, 3])
    sl.plotly_chart(charts.soiling_loss_bar(soil), theme=None, key="soiling_bar")
    sr.plotly_chart(charts.soiling_loss_chart(soil), theme=None, key="soiling_periods")
    k = st.columns(4)
    cur = soil.get("current_loss_pct")
    k[0].metric("Loss now", f"{cur:.1f} %" if cur is not None else "–",
                help="Soiling loss at the end of the data, relative to the clean level.")
    rate_d = soil.get("rate_pct_per_day")
    k[1].metric("Soiling rate now", f"{rate_d:+.3f} %/day" if rate_d is not None else "–",
                help="Theil–Sen slope of the site's daily index in the present dry period "
                     "(Deceglie et al. 2018).")
    cost, cur_ = soil.get("cleaning_cost"), soil.get("currency") or ""
    k[2].metric("A cleaning costs", f"{cost:,.0f} {cur_}" if cost else "not configured")
    sav = soil.get("saving")
    k[3].metric(f"Loss over the next {soil.get('horizon_days') or 30} days",
                f"{sav:,.0f} {cur_}" if sav is not None else "–",
                help="What the present loss costs if nothing is cleaned (tariff × expected "
                     "energy × loss × days).")
    if soil.get("recommendation"):
        (st.warning if soil.get("recommend_cleaning") else st.info)(
            soil["recommendation"][:1].upper() + soil["recommendation"][1:] + ".")
    lo, hi = soil.get("loss_low_pct"), soil.get("loss_high_pct")
    period = soil.get("period") or ["", ""]
    if soil.get("loss_pct") is not None:
        fleet_src = soil.get("loss_source") == "fleet"
        med, mlo, mhi = (soil.get("site_median_loss_pct"), soil.get("site_median_loss_low_pct"),
                         soil.get("site_median_loss_high_pct"))
        st.caption(f"Bar: energy lost to soiling over {period[0]} … {period[1]}, "
                   + ("each inverter's own loss weighted by daily insolation (Deceglie et al. "
                      "2018), then by its expected energy"
                      if fleet_src else "the site's daily index weighted by insolation "
                      "(Deceglie et al. 2018)")
                   + f": {soil['loss_pct']:.2f} % if every cleaning and washing rain restored "
                   "the clean level"
                   + (f" (95 % interval {lo:.2f} … {hi:.2f} %, Monte-Carlo over the soiling "
                      "rates' standard errors, same assumption)"
                      if lo is not None and hi is not None else "")
                   + (f". The site-median daily index of the soiling flags gives {med:.2f} %"
                      + (f" ({mlo:.2f} … {mhi:.2f} %)" if mlo is not None and mhi is not None
                         else "")
                      + "; the intervals carry only the soiling rates' statistical error, "
                      "not the difference between the two estimates"
                      if fleet_src and med is not None else "")
                   + (f"; {soil['loss_partial_recovery_pct']:.2f} % (site-median index) if "
                      "cleanings restored only half to all of the lost output"
                      if soil.get("loss_partial_recovery_pct") is not None else "") + ". "
                   + (soil.get("caution") or ""))
    elif soil.get("caution"):
        st.caption(soil["caution"])

# ---- evidence pack (issue #17): the same pack as `heliaudit evidence`, as a zip ----
st.subheader("Evidence pack")
st.caption("A report (PDF) with the system, the data and exclusions, the methods and their "
           "sources, every rate, level shifts and soiling, and the warranty comparison; the "
           "daily series and results behind it; and a manifest with the SHA-256 of every "
           "source export and pack file. Screening evidence: the contract governs any claim.")
if st.button("Build evidence pack", key="evidence_build"):
    with st.spinner("Building the evidence pack (report, data, manifest)…"):
        try:
            st.session_state["evidence_zip"] = (site_id, *data.evidence_pack_zip(url, site_id))
        except (ValueError, LookupError) as exc:  # EvidenceError, NothingComputedError
            st.session_state.pop("evidence_zip", None)
            st.error(f"No evidence pack: {exc}")
pack = st.session_state.get("evidence_zip")
if pack and pack[0] == site_id:
    st.download_button("Download evidence pack (.zip)", data=pack[2], file_name=pack[1],
                       mime="application/zip", key="evidence_download")
