"""Degradation and warranty: rates per inverter and method, YoY distribution, warranty."""

import streamlit as st

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

agree = data.method_agreement(res_all)
n_dev = res.dropna(subset=["rate_pct_per_yr"])["device_id"].nunique()
n_agree = int(sum(a is not None and a == a and bool(a) for a in agree["agree"]))
n_dis = int(sum(a is not None and a == a and not bool(a) for a in agree["agree"]))
m = st.columns(3)
m[0].metric("Devices with rates", f"{n_dev}")
m[1].metric("Methods agree", f"{n_agree}", help="Intervals of every pair of absolute-rate "
            "methods overlap (analytics.degradation.compare_methods).")
m[2].metric("Methods disagree", f"{n_dis}")

st.plotly_chart(charts.degradation_forest(res), theme=None, key="forest")

st.subheader("Rates and agreement")
verdicts = agree.assign(agree=[("–" if a is None or a != a else "yes" if bool(a) else "no")
                               for a in agree["agree"]])
table = res[["device_id", "method", "rate_pct_per_yr", "ci_low", "ci_high", "confidence",
             "n_points", "reason"]].merge(verdicts[["device_id", "agree", "disagreements",
                                                    "warnings"]], on="device_id", how="left")
st.dataframe(table, hide_index=True, key="rates_table", column_config={
    "device_id": "Device", "method": "Method",
    "rate_pct_per_yr": st.column_config.NumberColumn("Rd [%/yr]", format="%+.2f"),
    "ci_low": st.column_config.NumberColumn("CI low [%/yr]", format="%+.2f"),
    "ci_high": st.column_config.NumberColumn("CI high [%/yr]", format="%+.2f"),
    "confidence": st.column_config.NumberColumn("Confidence", format="%.2f"),
    "n_points": st.column_config.NumberColumn("Points", format="%d"),
    "reason": "Not computed because", "agree": "Methods agree (device)",
    "disagreements": "Disagreeing methods", "warnings": "Verdict notes"})

st.subheader("One device")
devices = list(dict.fromkeys(res["device_id"]))
c1, c2 = st.columns(2)
device = c1.selectbox("Device", devices, key="deg_device")
methods = sorted(res.loc[(res["device_id"] == device) & res["rate_pct_per_yr"].notna(),
                         "method"].unique()) or ["sensor_year_pairs"]
method = c2.selectbox("Method for the warranty check", methods, key="deg_method",
                      index=methods.index("sensor_year_pairs") if "sensor_year_pairs" in methods else 0)
v = agree[agree["device_id"] == device]
if not v.empty:
    verdict = v.iloc[0]
    ok = verdict["agree"]
    if ok is None or ok != ok:  # None / NaN: fewer than two intervals
        st.info("Fewer than two methods with an interval: no agreement verdict.")
    elif bool(ok):
        st.success(f"Methods agree ({verdict['compared']}): their intervals overlap.")
    else:
        st.warning(f"Methods disagree: {verdict['disagreements']}. {verdict['warnings']}")

left, right = st.columns(2)
h = data.yoy_histogram_data(res, device)
if h is not None:
    left.plotly_chart(charts.yoy_histogram(h["edges"], h["counts"], h["rate"], h["ci"],
                                           title=f"{device}: year-on-year pair rates "
                                                 f"({h['n_points']:.0f} pairs)"),
                      theme=None, key="pair_rates_chart")
    left.caption(f"Bars: rate of every pair of days one year apart (r_d); line: their median "
                 f"{h['rate']:+.2f} %/yr; shaded: its interval {h['ci'][0]:+.2f} … "
                 f"{h['ci'][1]:+.2f} %/yr (moving-block bootstrap). The outermost bins also hold "
                 "the rates beyond the range." if h["rate"] is not None and None not in h["ci"] else
                 "Bars: rate of every pair of days one year apart (r_d).")
else:
    left.info("No year-on-year distribution stored for this device.")

w = data.warranty_view(url, site_id, device, method)
why = (data.summary_details(res_all, device).get("warranty") or {}).get("reason")
if w is None:
    right.info("No warranty check" + (f": {why}." if why else ": the site configuration has "
               f"no [warranty] table, or the {method} rate is missing for this device."))
else:
    right.plotly_chart(charts.warranty_chart(w["envelope"], w["measured"], w["monthly"]),
                       theme=None, key="warranty")
    t = w["terms"]
    k = st.columns(4)
    k[0].metric("Measured rate", f"{w['rate']:+.2f} %/yr",
                help=f"{method}, interval {w['ci'][0]:+.2f} … {w['ci'][1]:+.2f} %/yr")
    k[1].metric("Warranted loss", f"{-t['annual_loss_pct']:+.2f} %/yr",
                help=f"First year {t['first_year_loss_pct']} %, then {t['annual_loss_pct']} %/yr "
                     f"for {t['years']} years from {t['start_date']}")
    k[2].metric("Energy shortfall", f"{w['shortfall_kwh']:,.0f} kWh",
                help="Σ over months below the envelope of E_m (W_m / measured_m − 1).")
    k[3].metric("Months below envelope", f"{w['months_below']}")
    if w["test"] is not None:
        (st.error if w["test"]["exceeds"] else st.success)(
            w["test"]["verdict"].capitalize() + f" (one-sided upper bound "
            f"{w['test']['one_sided_upper_pct_per_yr']:+.2f} %/yr vs warranted "
            f"{w['test']['warranted_rate_pct_per_yr']:+.2f} %/yr).")
    st.caption("The measured index has no absolute baseline: it is taken as 100 % at the "
               "warranty start (the first year's median extrapolated back with the fitted "
               "rate), which leaves out initial light-induced loss and so understates a "
               "shortfall.")

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
