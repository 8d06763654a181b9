"""Weekly check: the last 7 days of the selected range, readable in one minute.

Alarms first (new and ongoing alike), then warnings; info flags (clipping, cleanings) folded
away. Lost energy is the week's share of each flag's lost energy, not the flag's whole.
"""

import pandas as pd
import streamlit as st

from analytics.labels import FIELD_KINDS, instrument_label
from dashboard import charts, data, ui

sel = ui.selection()
url, site_id, end = sel["url"], sel["site_id"], sel["end"]
w0, w1 = data.week_of(end)
st.title("Weekly check")
st.caption(f"Week {ui.fmt_day(w0)} – {ui.fmt_day(w1)} ({ui.time_basis()}), compared with the "
           f"{data.TRAILING_WEEKS} weeks before it and with each inverter's peers on the same "
           "type of irradiance sensor.")

econ = data.economics(url, site_id)
flags = data.week_flags(url, site_id, end)
fleet = data.fleet_week(url, site_id, end)
energy = data.week_energy(url, site_id, end)
if energy["n_days"] == 0:
    st.warning(f"No daily results in the week {w0} – {w1}: choose a range that ends inside "
               "the data.")
    st.stop()


def _flag_line(f) -> None:
    when = "NEW" if f.is_new else "STILL OPEN" if f.ongoing else "FROM BEFORE THE WEEK"
    st.page_link(ui.PAGES["drilldown"], icon=":material/zoom_in:",
                 label=f"{when} · {data.flag_label(f, econ)}",
                 query_params={"flag": str(f.flag_id)})


# ---- 1. what needs attention: alarms, then warnings
alarms = flags[flags["severity"] == "alarm"]
warns = flags[flags["severity"] == "warning"]
infos = flags[flags["severity"] == "info"]
st.subheader(f"Alarms ({len(alarms)}) and warnings ({len(warns)})")
if alarms.empty and warns.empty:
    st.success("No alarm and no warning in this week, new or ongoing.")
if not alarms.empty:
    n_new, n_old = int(alarms["is_new"].sum()), int((~alarms["is_new"]).sum())
    with st.container(border=True):
        st.error(f"{len(alarms)} alarm(s) in this week: {n_new} new, {n_old} started before "
                 "the week and still open in it.", icon=":material/error:")
        for f in alarms.itertuples():
            _flag_line(f)
if not warns.empty:
    with st.container(border=True):
        st.warning(f"{len(warns)} warning(s) in this week.", icon=":material/warning:")
        for f in warns.head(15).itertuples():
            _flag_line(f)
        if len(warns) > 15:
            st.caption(f"… and {len(warns) - 15} more in the table at the bottom.")
if flags["kind"].isin(FIELD_KINDS).any() and not (alarms.empty and warns.empty):
    ui.field_caution()
if not infos.empty:
    with st.expander(f"Information only ({len(infos)}: clipping, cleanings, mild soiling)",
                     expanded=False):
        for f in infos.head(40).itertuples():
            _flag_line(f)

# ---- 2. the site's week in numbers
st.subheader("The week in numbers")
lost_week = float(flags["lost_week_kwh"].fillna(0).sum())
m = st.columns(4)
m[0].metric("Energy this week", f"{energy['e_ac_kwh'] / 1000:,.1f} MWh",
            help="Measured AC energy of every inverter over all days of the week.")
m[1].metric("Expected energy", f"{energy['e_exp_kwh'] / 1000:,.1f} MWh",
            delta=(f"{100 * (energy['ratio'] - 1):+.1f} % measured against expected"
                   if energy["ratio"] == energy["ratio"] else None), delta_color="off",
            help="The clean-plant model (PVWatts, Dobos 2014) from the measured irradiance and "
                 "cell temperature; it has no soiling, wiring or degradation losses, so a "
                 "healthy plant reads a few per cent below it.")
m[2].metric("Lost energy (flags, this week)", f"{lost_week:,.0f} kWh",
            help="The week's share of each flag's lost energy, in proportion to the flagged "
                 "device's expected energy on each day (analytics.weekly)."
                 " Flags can overlap (e.g. soiling and an outage), so this is an upper bound.")
money = data.money(lost_week, econ)
m[3].metric("Lost revenue this week", money or "no tariff set",
            help="Lost energy × the tariff of the site configuration's [economics] table."
            if money else "Set [economics] tariff_per_kwh and currency in the site "
                          "configuration to see lost revenue.")

bi = energy["by_instrument"]
cols = st.columns(max(1, len(bi)))
for c, r in zip(cols, bi.itertuples(), strict=False):
    tr = fleet.loc[fleet["instrument"] == r.instrument]
    c.metric(f"PR_STC · {instrument_label(r.instrument)} ({r.sensors})",
             f"{r.pr_stc:.3f}" if r.pr_stc == r.pr_stc else "–",
             help=f"{r.n_inverters} inverters measured by a {instrument_label(r.instrument)}: "
                  "Σ E_AC / Σ E_ref,STC over their valid days (IEC 61724-1 temperature-corrected "
                  "performance ratio).")
    c.caption(f"Insolation {r.h_poa_kwhm2:,.1f} kWh/m² · {r.n_inverters} inverters"
              if r.h_poa_kwhm2 == r.h_poa_kwhm2 else f"{r.n_inverters} inverters")
if len(bi) > 1:
    st.caption("A reference cell and a pyranometer report different irradiance (by a few per "
               "cent; Dunn, Gostein & Emery 2012), so PRs are shown and compared per sensor "
               "type, never across them.")

if len(data.site_list(url)) > 1:
    st.page_link(ui.PAGES["portfolio"], icon=":material/apps:",
                 label="All sites of this database for the same week: Portfolio",
                 query_params={"week_end": end.isoformat()})

# ---- 3. inverters
st.subheader("Inverters")
st.caption("Lowest against its peers first. Peers: the inverters of the same peer group on "
           "the same type of POA sensor.")
table = fleet.sort_values("d_peers_pct", na_position="last").assign(
    instrument=lambda f: [instrument_label(x) for x in f["instrument"]],
    status=lambda f: f["worst_severity"].map({"alarm": "alarm", "warning": "warning",
                                              "none": ""}))
src = data.sources(url, site_id, w0, w1)
table = table.merge(src[["device_id", "irradiance", "t_cell"]], on="device_id", how="left")
# the sensor type, and where the irradiance is not measured in the array's plane, how it
# was obtained (issue #11)
table["instrument"] = [i if g in (None, "–", "in plane") or g != g else f"{i}, {g}"
                       for i, g in zip(table["instrument"], table["irradiance"], strict=True)]
table = table[["device_id", "status", "instrument", "t_cell", "e_ac_kwh", "yf_h", "pr_stc",
               "d_trailing_pct", "d_peers_pct", "avail_energy", "lost_week_kwh"]]
st.dataframe(ui.clean_frame(table, {"d_trailing_pct": "+.1f", "d_peers_pct": "+.1f",
                                    "pr_stc": ".3f", "yf_h": ".2f", "avail_energy": ".1%"}),
             hide_index=True, key="fleet_table", column_config={
    "device_id": st.column_config.TextColumn("Inverter", width="small"),
    "status": st.column_config.TextColumn("Flag", width="small",
                                          help="Most severe warning or alarm of the week."),
    "instrument": st.column_config.TextColumn(
        "Irradiance", width="medium",
        help="The POA sensor type, and where the PR's irradiance is not a POA sensor in the "
             "array's own plane, how it was obtained (models named below the table)."),
    "t_cell": st.column_config.TextColumn(
        "T_cell", width="small",
        help="Cell temperature from a back-of-module sensor, or modelled from ambient "
             "temperature, irradiance and wind where the inverter has none."),
    "e_ac_kwh": st.column_config.NumberColumn("Energy [kWh]", format="localized",
                                              width="small"),
    "yf_h": st.column_config.NumberColumn("Yield [h]", format="%.2f", width="small",
                                          help="Final yield, kWh per kWp of the week."),
    "pr_stc": st.column_config.NumberColumn("PR_STC", format="%.3f", width="small"),
    "d_trailing_pct": st.column_config.NumberColumn(
        "vs own [%]", format="%+.1f", width="small",
        help=f"PR_STC against the inverter's own {data.TRAILING_WEEKS} weeks before."),
    "d_peers_pct": st.column_config.NumberColumn(
        "vs peers [%]", format="%+.1f", width="small",
        help="PR_STC against the median of its peers (same group, same POA sensor type)."),
    "avail_energy": st.column_config.NumberColumn("Availability", format="percent",
                                                  width="small"),
    "lost_week_kwh": st.column_config.NumberColumn("Lost [kWh]", format="localized",
                                                   width="small",
                                                   help="The week's share of the lost energy "
                                                        "of the inverter's flags.")})

if (note := data.sources_caption(src)):
    st.caption(note)

left, right = st.columns([2, 3])
left.plotly_chart(charts.fleet_quadrant(fleet), theme=None, key="quadrant")
heat = data.pr_relative_heatmap(url, site_id, sel["start"], sel["end"])
period = data.heat_period(sel["start"], sel["end"])
right.plotly_chart(charts.pr_heatmap(heat, period=period), theme=None, key="heatmap")
st.caption("Scatter: one dot per inverter, sized by the week's energy, coloured by its most "
           "severe warning or alarm of the week (info flags such as clipping do not colour it); "
           "trouble sits bottom-left. Heatmap: PR_STC of each inverter divided by the median of "
           "the site's inverters on the same type of POA sensor" + {"day": " that day", "week": ", one column per week "
                                     f"(ranges over {data.HEAT_DAILY_MAX_DAYS} days)",
                                     "month": ", one column per month (ranges over "
                                     f"{data.HEAT_WEEKLY_MAX_DAYS} days)"}[period]
           + ". A red row is a weak inverter; a red band over many rows that ends at once is "
             "typically soiling washed off by rain or a cleaning. Grey: no valid day.")

# ---- 4. every flag of the week
st.subheader(f"All flags overlapping the week ({len(flags)})")
if not flags.empty:
    t = flags.assign(open=[f"./drilldown?flag={i}" for i in flags["flag_id"]],
                     status=["this week" if n else "earlier" for n in flags["is_new"]],
                     end_text=[("ongoing" if o else pd.Timestamp(e).strftime("%Y-%m-%d %H:%M"))
                               for o, e in zip(flags["ongoing"], flags["end_local"],
                                               strict=True)])
    t = ui.with_display_times(t, sel)
    t = t[["open", "severity_label", "status", "device_label", "kind_label",
           "start_text", "end_text", "duration_text", "lost_week_kwh", "lost_kwh"]]
    st.dataframe(ui.clean_frame(t), hide_index=True, key="flag_table", column_config={
        "open": st.column_config.LinkColumn("Flag", display_text=r"flag=(\d+)",
                                            width="small"),
        **ui.flag_columns(),
        "status": st.column_config.TextColumn("Started", width="small"),
        "lost_week_kwh": st.column_config.NumberColumn("Lost, week [kWh]", format="localized",
                                                       width="small"),
        "lost_kwh": st.column_config.NumberColumn("Lost, all [kWh]", format="localized",
                                                  width="small",
                                                  help="The whole flag's lost energy.")})
else:
    st.caption("No flags in this week.")
