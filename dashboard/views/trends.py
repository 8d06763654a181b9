"""Inverter trends: daily temperature-corrected PR of chosen inverters over their peers."""

import pandas as pd
import streamlit as st

from analytics.labels import CAVEAT_LABELS, RELATIVE_METHODS, kind_label, method_label
from dashboard import charts, data, ui

sel = ui.selection()
url, site_id = sel["url"], sel["site_id"]
st.title("Inverter trends")

inv = data.inverter_list(url, site_id)
ids = list(inv["device_id"])
if not ids:
    st.info("This site has no inverters.")
    st.stop()
if "trend_inverters" not in st.session_state:
    # start with the weakest inverter against its peers last week, and one more
    fleet = data.fleet_week(url, site_id, sel["end"]).sort_values("d_peers_pct")
    st.session_state["trend_inverters"] = list(fleet["device_id"].head(2)) or ids[:2]
c1, c2, c3 = st.columns([3, 2, 2])
chosen_ids = c1.multiselect("Inverters", ids, key="trend_inverters", max_selections=6)
period = c2.radio("Period", ["Full history", "Selected date range"], horizontal=True,
                  key="trend_period")
results = data.degradation_table(url, site_id)
rates = data.rates_only(results).dropna(subset=["rate_pct_per_yr"])
methods = sorted(rates["method"].unique(), key=lambda m: (m != "sensor_year_pairs", m))
methods = [m for m in methods if m not in RELATIVE_METHODS]  # not rates of the plant
REC = "recommended"
method = c3.selectbox("Degradation fit", [REC, "(none)", *methods], key="trend_method",
                      index=0,
                      format_func=lambda m: "none" if m == "(none)" else
                      "recommended rate of each inverter" if m == REC else method_label(m))

start, end = ((None, None) if period == "Full history" else (sel["start"], sel["end"]))
chosen, peers = data.pr_trend(url, site_id, tuple(chosen_ids), start, end)
first, last = data.data_span(url, site_id)
lo, hi = start or first, end or last
flags = data.flags_in_window(url, site_id, lo, hi) if lo else None
mine = flags[flags["device_id"].isin(chosen_ids)] if flags is not None else None
# mark days of warnings and alarms (info flags such as clipping would cover everything)
serious = mine[mine["severity"] != "info"] if mine is not None else None
flagged = data.flagged_days(chosen, serious, sel["offset_s"]) if serious is not None else None
if flagged is not None and not flagged.empty:
    flagged = flagged.assign(kind=[kind_label(k) for k in flagged["kind"]])
soiling = (flags[flags["kind"].str.contains(data.SOILING_KIND, case=False, na=False)
                 & (flags["device_id"].isin(chosen_ids) | flags["device_id"].isna())]
           if flags is not None else None)
fits, used, caveats = {}, {}, {}
if method != "(none)":
    for dev in chosen_ids:
        m = method
        if method == REC:
            rec = data.recommended(results, dev)
            m = rec["method"] if rec else None
            caveats[dev] = rec["caveats"] if rec else []
        f = data.degradation_fit_line(chosen, results, dev, m) if m else None
        if f is not None:
            used[dev] = m
            fits[f"{dev} fit: {method_label(m)}"] = f
st.plotly_chart(charts.pr_trend(chosen, peers, flagged, soiling, fits), theme=None,
                key="trend_chart")
st.caption(f"Dots: daily PR_STC on valid days; lines: centred {data.ROLLING_DAYS}-day rolling "
           "median; grey band: 10–90 % range of all site inverters' rolling medians; ticks under the "
           "data: days inside a warning or alarm flag of the inverter; shaded: soiling intervals. The dashed fit is "
           "the stored degradation rate drawn through the inverter's first-year median PR_STC, "
           "with the rate's confidence interval as the band.")

if (note := data.sources_caption(data.sources(url, site_id, lo, hi).loc[
        lambda f: f["device_id"].isin(chosen_ids)])):
    st.caption(note)

if fits:
    r = pd.concat([results[(results["device_id"] == d) & (results["method"] == m)]
                   for d, m in used.items()]).copy()
    r["method"] = r["method"].map(method_label)
    st.dataframe(ui.clean_frame(r[["device_id", "method", "rate_pct_per_yr", "ci_low", "ci_high",
                                   "confidence", "n_points"]],
                                {"rate_pct_per_yr": "+.2f", "ci_low": "+.2f", "ci_high": "+.2f"}),
                 hide_index=True, column_config={
        "device_id": "Inverter", "method": "Method",
        "rate_pct_per_yr": st.column_config.NumberColumn("Rd [%/yr]", format="%+.2f"),
        "ci_low": st.column_config.NumberColumn("CI low [%/yr]", format="%+.2f"),
        "ci_high": st.column_config.NumberColumn("CI high [%/yr]", format="%+.2f"),
        "confidence": st.column_config.NumberColumn("Confidence", format="%.2f"),
        "n_points": st.column_config.NumberColumn("Points", format="%d")})
for dev, cavs in caveats.items():
    for c in cavs:
        st.warning(f"**{dev} — {CAVEAT_LABELS.get(c.get('kind'), 'Caveat')}.** "
                   f"{c.get('text', '')}", icon=":material/warning:")
if mine is not None and not mine.empty:
    st.subheader("Flags of these inverters")
    for f in mine.head(12).itertuples():
        st.page_link(ui.PAGES["drilldown"], icon=":material/zoom_in:",
                     label=data.flag_label(f),
                     query_params={"flag": str(f.flag_id)})
