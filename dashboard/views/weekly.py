"""Weekly check: every site and inverter over the last 7 days of the selected range."""

import streamlit as st

from dashboard import charts, data, ui

sel = ui.selection()
url, site_id, end = sel["url"], sel["site_id"], sel["end"]
w0, w1 = data.week_of(end)
st.title("Weekly check")
st.caption(f"Week {ui.fmt_day(w0)} – {ui.fmt_day(w1)} (local standard time), compared with the "
           f"{data.TRAILING_WEEKS} weeks before it and with each inverter's peer group. "
           "PR_STC = Σ E_AC / Σ E_ref,STC over valid days (IEC 61724-1 temperature-corrected "
           "performance ratio, a ratio of sums).")

fleet = data.fleet_week(url, site_id, end)
flags = data.week_flags(url, site_id, end)

# ---- the week's new flags first
new = flags[flags["is_new"]]
st.subheader(f"New flags this week ({len(new)})")
if new.empty:
    st.success("No new flags started in this week.")
else:
    for f in new.head(10).itertuples():
        st.page_link(ui.PAGES["drilldown"], label=data.flag_label(f), icon=":material/zoom_in:",
                              query_params={"flag": str(f.flag_id)})
    if len(new) > 10:
        st.caption(f"… and {len(new) - 10} more in the table below.")
    ui.field_caution()

# ---- site summary
k = data.fleet_sites(url, end)
me = k[k["site_id"] == site_id].iloc[0]
m = st.columns(5)
m[0].metric("Energy last week", f"{me['e_ac_kwh'] / 1000:,.1f} MWh")
m[1].metric("PR_STC last week", f"{me['pr_stc']:.3f}" if me["pr_stc"] == me["pr_stc"] else "–",
            delta=(f"{me['d_trailing_pct']:+.1f} % vs trailing weeks"
                   if me["d_trailing_pct"] == me["d_trailing_pct"] else None))
m[2].metric("Energy availability", f"{100 * me['avail_energy']:.1f} %"
            if me["avail_energy"] == me["avail_energy"] else "–")
m[3].metric("Flags in the week", f"{me['n_flags']}")
m[4].metric("Flagged lost energy", f"{me['flags_lost_kwh']:,.0f} kWh")
if len(k) > 1:
    with st.expander(f"All {len(k)} sites", expanded=False):
        st.dataframe(k, hide_index=True, column_config={
            "site_id": "Site", "name": "Name", "n_inverters": "Inverters",
            "e_ac_kwh": st.column_config.NumberColumn("Energy [kWh]", format="%.0f"),
            "pr_stc": st.column_config.NumberColumn("PR_STC", format="%.3f"),
            "d_trailing_pct": st.column_config.NumberColumn("vs trailing [%]", format="%+.1f"),
            "avail_energy": st.column_config.NumberColumn("Availability (energy)", format="%.3f"),
            "n_flags": "Flags", "flags_lost_kwh": st.column_config.NumberColumn(
                "Flagged loss [kWh]", format="%.0f")})

# ---- inverters
st.subheader("Inverters")
st.caption("Sorted by PR_STC against the peer median, lowest first; click a column header "
           "to sort by another.")
table = fleet.sort_values("d_peers_pct", na_position="last")[
    ["device_id", "peer_group", "e_ac_kwh", "yf_h", "pr_stc", "pr_stc_trailing",
     "d_trailing_pct", "pr_stc_peers", "d_peers_pct", "avail_energy", "avail_time",
     "n_flags", "flags_lost_kwh", "n_days_valid"]]
st.dataframe(table, hide_index=True, key="fleet_table", column_config={
    "device_id": "Inverter", "peer_group": "Peer group",
    "e_ac_kwh": st.column_config.NumberColumn("Energy [kWh]", format="%.0f"),
    "yf_h": st.column_config.NumberColumn("Final yield [kWh/kWp]", format="%.2f"),
    "pr_stc": st.column_config.NumberColumn("PR_STC", format="%.3f"),
    "pr_stc_trailing": st.column_config.NumberColumn(
        f"PR_STC, {data.TRAILING_WEEKS} weeks before", format="%.3f"),
    "d_trailing_pct": st.column_config.NumberColumn("vs own trailing [%]", format="%+.1f"),
    "pr_stc_peers": st.column_config.NumberColumn("Peer median PR_STC", format="%.3f"),
    "d_peers_pct": st.column_config.NumberColumn("vs peers [%]", format="%+.1f"),
    "avail_energy": st.column_config.NumberColumn("Availability, energy", format="%.3f"),
    "avail_time": st.column_config.NumberColumn("Availability, time", format="%.3f"),
    "n_flags": st.column_config.NumberColumn("Flags", format="%d"),
    "flags_lost_kwh": st.column_config.NumberColumn("Flagged loss [kWh]", format="%.0f"),
    "n_days_valid": st.column_config.NumberColumn("Valid days", format="%d")})

left, right = st.columns([2, 3])
left.plotly_chart(charts.fleet_quadrant(fleet), theme=None, key="quadrant")
heat = data.pr_relative_heatmap(url, site_id, sel["start"], sel["end"])
right.plotly_chart(charts.pr_heatmap(heat), theme=None, key="heatmap")
st.caption("Scatter: one dot per inverter, sized by last week's energy, red when it has "
           "flags in the week; trouble sits bottom-left. Heatmap: each cell is one inverter-day, PR_STC divided by the median of all the "
           "site's inverters that day. A single red cell is a bad day; a red row is a weak "
           "inverter; a red band over many rows that ends at once is typically soiling "
           "washed off by rain or a cleaning. Grey = not a valid day (too little valid data).")

# ---- all flags of the week
st.subheader(f"All flags overlapping the week ({len(flags)})")
if not flags.empty:
    t = flags.assign(open=[f"./drilldown?flag={i}" for i in flags["flag_id"]])[
        ["open", "flag_id", "is_new", "device_id", "kind", "severity", "start_local",
         "end_local", "duration_h", "lost_kwh"]]
    st.dataframe(t, hide_index=True, key="flag_table", column_config={
        "open": st.column_config.LinkColumn("Drill-down", display_text="open ↗"),
        "flag_id": st.column_config.NumberColumn("Flag", format="%d"),
        "is_new": st.column_config.CheckboxColumn("New"),
        "device_id": "Device", "kind": "Kind", "severity": "Severity",
        "start_local": st.column_config.DatetimeColumn("Start", format="YYYY-MM-DD HH:mm"),
        "end_local": st.column_config.DatetimeColumn("End", format="YYYY-MM-DD HH:mm"),
        "duration_h": st.column_config.NumberColumn("Duration [h]", format="%.1f"),
        "lost_kwh": st.column_config.NumberColumn("Lost energy [kWh]", format="%.0f")})
else:
    st.caption("No flags in this week.")
