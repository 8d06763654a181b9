"""Portfolio: every site of the store in one table for one week, the ones that need attention
first (a site that sends nothing, then alarms, then warnings), each linked to its weekly check.

Thin over :func:`dashboard.data.portfolio_week` (one statement per period for the whole store,
flags per site) and :func:`analytics.weekly.portfolio_order`.
"""

import datetime as dt

import pandas as pd
import streamlit as st

from analytics.labels import method_label
from dashboard import data, ui

url = data.db_url()
last = data.portfolio_end(url)
st.title("Portfolio")
if last is None:
    st.info("No daily results in this database yet: run `heliaudit compute` after loading "
            "sites with `heliaudit ingest CONFIG`.")
    st.stop()
if "portfolio_end" not in st.session_state:
    try:
        st.session_state["portfolio_end"] = dt.date.fromisoformat(
            st.query_params.get("week_end", "")) if st.query_params.get("week_end") else last
    except ValueError:
        st.session_state["portfolio_end"] = last
end = st.date_input("Week ending", key="portfolio_end", max_value=last, format="YYYY-MM-DD",
                    help="The same 7 calendar days for every site, in each site's local "
                         "standard time. Default: the last day with results in any site.")
st.query_params["week_end"] = end.isoformat()
w0, w1 = data.week_of(end)
table = data.portfolio_week(url, end)
st.caption(f"Week {ui.fmt_day(w0)} – {ui.fmt_day(w1)} · {len(table)} sites · "
           f"{table['p_dc_kwp'].sum():,.0f} kWp DC. Sites that need attention first: no daily "
           "results for more than 3 days, then open alarms, then warnings, each by the week's "
           "lost energy.")

stale = table[table["rank"] == 0]
with_alarms = table[table["rank"] == 1]
c1, c2, c3, c4 = st.columns(4)
c1.metric("Not reporting", f"{len(stale)} of {len(table)}",
          help="Sites whose daily results end more than 3 days before the week's end "
               "(logger, communication or import problem; also a site not yet computed).")
c2.metric("Sites with alarms", f"{len(with_alarms)}")
c3.metric("Energy this week", f"{table['e_ac_kwh'].sum():,.0f} kWh")
c4.metric("Lost this week", f"{table['lost_week_kwh'].sum():,.0f} kWh",
          help="The week's share of the lost energy of every flag, summed over the sites.")
if not stale.empty:
    st.warning("No recent data from: " + "; ".join(
        f"{r.name} ({r.site_id}): {r.status}" for r in stale.itertuples()),
        icon=":material/cloud_off:")


def _rate_text(r) -> str:
    if pd.isna(r.rate_pct_per_yr):
        return "–"
    ci = (f" [{r.ci_low:+.2f}, {r.ci_high:+.2f}]"
          if not (pd.isna(r.ci_low) or pd.isna(r.ci_high)) else "")
    return f"{r.rate_pct_per_yr:+.2f}{ci}"


def _link(r) -> str:
    q = {"site": r.site_id, "end": end.isoformat(),
         "start": (end - dt.timedelta(days=data.DEFAULT_WINDOW_DAYS - 1)).isoformat()}
    return "weekly?" + "&".join(f"{k}={v}" for k, v in q.items())


view = pd.DataFrame({
    "link": [_link(r) for r in table.itertuples()],
    "status": table["status"],
    "p_dc_kwp": table["p_dc_kwp"],
    "reporting": [f"{a} of {b}" for a, b in zip(table["n_inverters_reporting"],
                                                table["n_inverters"], strict=True)],
    "e_ac_kwh": table["e_ac_kwh"], "yf_h": table["yf_h"], "pr_stc": table["pr_stc"],
    "d_trailing_pct": table["d_trailing_pct"], "avail_energy": table["avail_energy"],
    "lost_week_kwh": table["lost_week_kwh"],
})
site_col = st.column_config.LinkColumn("Site", display_text=r"site=([^&]+)", width="small",
                                       help="Opens the site's weekly check for this week.")
st.dataframe(ui.clean_frame(view, {"d_trailing_pct": "+.1f", "pr_stc": ".3f", "yf_h": ".2f",
                                   "avail_energy": ".1%", "e_ac_kwh": ",.0f",
                                   "lost_week_kwh": ",.0f"}),
             hide_index=True, key="portfolio_table", column_config={
    "link": site_col,
    "status": st.column_config.TextColumn("Needs attention", width="medium"),
    "p_dc_kwp": st.column_config.NumberColumn("kWp", format="localized", width="small"),
    "reporting": st.column_config.TextColumn(
        "Inverters", width="small", help="Inverters with daily results this week, of all."),
    "e_ac_kwh": st.column_config.NumberColumn("Energy [kWh]", format="localized",
                                              width="small"),
    "yf_h": st.column_config.NumberColumn("Yield [h]", format="%.2f", width="small",
                                          help="Final yield: kWh per kWp DC of the week."),
    "pr_stc": st.column_config.NumberColumn(
        "PR_STC", format="%.3f", width="small",
        help="Temperature-corrected performance ratio of the whole site, Σ energy / Σ "
             "reference energy over its valid days (IEC 61724-1), over all its sensor types."),
    "d_trailing_pct": st.column_config.NumberColumn(
        "vs own [%]", format="%+.1f", width="small",
        help=f"Site PR_STC against its own {data.TRAILING_WEEKS} weeks before."),
    "avail_energy": st.column_config.NumberColumn("Availability", format="percent",
                                                  width="small"),
    "lost_week_kwh": st.column_config.NumberColumn(
        "Lost [kWh]", format="localized", width="small",
        help="The week's share of the lost energy of the site's flags."),
})
st.caption("Sites on different types of irradiance sensor are not comparable by PR (a "
           "reference cell and a pyranometer differ by a few per cent; Dunn, Gostein & Emery "
           "2012): compare each site with its own weeks before (vs own).")

st.subheader("Degradation by site")
st.caption("Each site's recommended rate over its whole record, in % of the initial level "
           "per year, with its 95 % interval: read its reasons and caveats on the site's "
           "Degradation & warranty page before using it.")
deg = pd.DataFrame({
    "link": [_link(r) for r in table.itertuples()],
    "rate": [_rate_text(r) for r in table.itertuples()],
    "method": [method_label(m) if isinstance(m, str) else "no rate" for m in table["rate_method"]],
    "caveats": table["n_caveats"],
    "warranted": table["warranted_pct_per_yr"],
    "warranty_test": table["warranty_test"],
})
st.dataframe(ui.clean_frame(deg, {"warranted": "+.2f", "caveats": ".0f"}), hide_index=True,
             key="portfolio_degradation", column_config={
    "link": site_col,
    "rate": st.column_config.TextColumn("Rate [%/yr]", width=150),
    "method": st.column_config.TextColumn("Method", width=335),
    "caveats": st.column_config.NumberColumn(
        "Caveats", format="%d", width="small",
        help="Caveats on the rate (sensor drift, level shifts, soiling, short record)."),
    "warranted": st.column_config.NumberColumn(
        "Warranted [%/yr]", format="%+.2f", width="small",
        help="The annual loss the site's [warranty] configuration allows."),
    "warranty_test": st.column_config.TextColumn(
        "Against the warranty", width=325,
        help="The one-sided screening test of the site's recommended rate against the "
             "warranted annual loss, as on the Degradation & warranty page: a rate steeper "
             "than the warranted one is not a breach unless its interval says so."),
})
st.caption("Site names: " + "; ".join(f"{r.site_id} = {r.name}" for r in table.itertuples())
           + ".")
st.caption(data.WARRANTY_CAUTION)
