"""Alarm drill-down: one inverter and a time window, from a flag (?flag=ID) or chosen."""

import datetime as dt
import math

import streamlit as st

from analytics.labels import SEVERITY_LABELS, kind_label
from dashboard import charts, data, ui

sel = ui.selection()
url, site_id, off = sel["url"], sel["site_id"], sel["offset_s"]
st.title("Alarm drill-down")
qp = st.query_params
inv = data.inverter_list(url, site_id)
ids = list(inv["device_id"])
if not ids:
    st.info("This site has no inverters.")
    st.stop()


def _local_day(ts_s: int) -> dt.date:
    return dt.datetime.fromtimestamp(ts_s + off, dt.UTC).date()


def _apply_flag(fl: dict) -> None:
    dev = fl["device_id"]
    if dev not in ids:  # a sensor or site-wide flag: show the first inverter using it
        uses = inv[(inv["poa_sensor_id"] == dev) | (inv["t_module_sensor_id"] == dev)
                   | (inv["t_amb_sensor_id"] == dev)]
        dev = uses["device_id"].iloc[0] if not uses.empty else ids[0]
    a, b = data.flag_window(fl)
    st.session_state["dd_inverter"] = dev
    st.session_state["dd_start"] = _local_day(a)
    st.session_state["dd_days"] = int(min(14, max(1, math.ceil((b - a) / 86400))))
    st.session_state["dd_flag"] = int(fl["flag_id"])


def _forget_flag() -> None:
    st.session_state["dd_flag"] = None
    qp.pop("flag", None)


def _pick_flag() -> None:
    fid = st.session_state.get("dd_pick")
    if fid:
        fl = data.flag(url, int(fid))
        if fl:
            _apply_flag(fl)
            qp["flag"] = str(fid)


# ---- a flag in the URL (from the weekly check or the trends page) sets the window
fid = qp.get("flag")
if fid and st.session_state.get("dd_applied") != fid:
    fl = data.flag(url, int(fid)) if str(fid).isdigit() else None
    if fl is None:
        st.warning(f"There is no flag #{fid} in this database.")
    elif fl["site_id"] != site_id:
        st.warning(f"Flag #{fid} belongs to site {fl['site_id']}; choose that site in the "
                   "sidebar.")
    else:
        _apply_flag(fl)
    st.session_state["dd_applied"] = fid
if "dd_inverter" not in st.session_state:
    if qp.get("inverter") in ids:
        st.session_state["dd_inverter"] = qp["inverter"]
    else:
        worst = data.fleet_week(url, site_id, sel["end"]).sort_values("d_peers_pct")
        st.session_state["dd_inverter"] = worst["device_id"].iloc[0] if len(worst) else ids[0]
    # the last week of the sidebar's range that has interval data
    last_s = data.readings_end(url, site_id)
    end_day = min(sel["end"], _local_day(last_s)) if last_s else sel["end"]
    start = end_day - dt.timedelta(days=6)
    try:
        start = dt.date.fromisoformat(qp["from"]) if qp.get("from") else start
    except ValueError:
        pass
    st.session_state["dd_start"] = start
    st.session_state["dd_days"] = int(qp.get("days", 7)) if str(qp.get("days", 7)).isdigit() else 7

c1, c2, c3, c4 = st.columns([2, 2, 2, 3])
inverter = c1.selectbox("Inverter", ids, key="dd_inverter", on_change=_forget_flag)
start = c2.date_input("From (local standard time)", key="dd_start", on_change=_forget_flag,
                      format="YYYY-MM-DD")
days = c3.slider("Days", 1, 14, key="dd_days", on_change=_forget_flag)
a = data.day_to_s(start, off)
b = data.day_to_s(start + dt.timedelta(days=days), off)
nearby = data.flags_for(url, site_id, [inverter], a - 30 * 86400, b + 30 * 86400)
options = [None, *nearby["flag_id"].astype(int).tolist()]
labels = {int(r.flag_id): f"#{r.flag_id} {kind_label(r.kind)} · {r.start_local:%Y-%m-%d %H:%M}"
          for r in nearby.itertuples()}
if st.session_state.get("dd_pick") not in options:
    st.session_state["dd_pick"] = None
c4.selectbox("Jump to a flag of this inverter (± 30 days)", options, key="dd_pick",
             format_func=lambda x: "—" if x is None else labels.get(x, f"#{x}"),
             on_change=_pick_flag)
qp["inverter"], qp["from"], qp["days"] = inverter, start.isoformat(), str(days)

frame = data.drilldown_frame(url, site_id, inverter, a, b)
peers = data.peer_normalised_power(url, site_id, inverter, a, b)
flags = data.flags_for(url, site_id, [inverter], a, b)
highlight = st.session_state.get("dd_flag")

if highlight:
    fl = data.flag(url, int(highlight))
    if fl:
        who = fl["device_id"] or "the whole site"
        st.subheader(f"Flag #{fl['flag_id']}: {kind_label(fl['kind'])} on {who}")
        ongoing = data.is_ongoing(fl, data.readings_end(url, site_id))
        t0, t1 = ui.display_time([fl["start_s"], fl["end_s"]], sel)
        if ongoing:
            st.caption(f"Since {t0:%Y-%m-%d %H:%M} ({ui.time_basis()}); still open at the end "
                       "of the data, so it has no end yet.")
        else:
            st.caption(f"From {t0:%Y-%m-%d %H:%M} to {t1:%Y-%m-%d %H:%M} ({ui.time_basis()}).")
        end_s = data.readings_end(url, site_id) if ongoing else fl["end_s"]
        k = st.columns(3)
        k[0].metric("Severity", SEVERITY_LABELS.get(fl["severity"], fl["severity"]))
        k[1].metric("Duration", data.duration_text((end_s - fl["start_s"]) / 3600, ongoing))
        k[2].metric("Lost energy", f"{fl['lost_kwh']:,.1f} kWh"
                    if fl["lost_kwh"] is not None else "–")
        det = fl["details"] or {}
        fix = det.get("correction_toml") if isinstance(det, dict) else None
        if fix:
            st.markdown("**Correction for the site configuration** — paste under the "
                        "`[[sources]]` entry it names, then re-load the affected files:")
            st.code(fix, language="toml")
        for key in ("recommendation", "probable_cause", "note"):
            if isinstance(det, dict) and isinstance(det.get(key), str):
                st.caption(f"{key.replace('_', ' ').capitalize()}: {det[key]}")
        with st.expander("All evidence of this flag", expanded=False):
            st.json(det)
        ui.field_caution()

if frame.empty:
    st.info(f"No interval readings for {inverter} from {start} for {days} days. Interval data "
            "cover the period that was ingested; pick another window.")
    st.stop()
st.plotly_chart(charts.drilldown(frame, peers, flags, inverter, off, highlight,
                                 tz=sel["info"]["timezone"] if ui.wall_clock() else None),
                theme=None,
                key="drill_chart", config={"scrollZoom": True, "displaylogo": False})
n_peers = peers["device_id"].nunique() if not peers.empty else 0
src = data.sources(url, site_id, start, start + dt.timedelta(days=days))
mine = src[src["device_id"] == inverter]
g_words, t_words = ((mine["irradiance_long"].iloc[0], mine["t_cell_long"].iloc[0])
                    if len(mine) else ("measured POA in the array plane",
                                       "from a back-of-module sensor"))
st.caption(f"Expected power: PVWatts DC model (Dobos 2014) from the array's irradiance "
           f"({g_words}) and the cell temperature ({t_words}; King et al. 2004 Eq. 12 from a "
           f"module temperature), inverter efficiency and AC limit: the model the inverter's "
           f"PR uses. Grey: {n_peers} peers of the same peer group, AC power per kWp. "
           "Shaded: this inverter's warnings and alarms (the chosen flag darker); info and site-wide "
           "events are listed below. Drag to zoom, double-click to reset.")
if not flags.empty:
    t = ui.with_display_times(flags, sel)
    t = t[["flag_id", "device_label", "kind_label", "severity_label", "start_text", "end_text",
           "duration_text", "lost_kwh"]]
    st.dataframe(ui.clean_frame(t), hide_index=True, key="dd_flags", column_config={
        **ui.flag_columns(),
        "lost_kwh": st.column_config.NumberColumn("Lost energy [kWh]", format="localized",
                                                  width="small")})
    if not highlight and (flags["severity"] != "info").any():
        ui.field_caution()
