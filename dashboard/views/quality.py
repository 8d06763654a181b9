"""Data quality: completeness, sensor flags, the ingest log and the rejected rows."""

import streamlit as st

from dashboard import charts, data, ui

sel = ui.selection()
url, site_id = sel["url"], sel["site_id"]
st.title("Data quality")

comp = data.completeness(url, site_id, sel["start"], sel["end"])
period = data.heat_period(sel["start"], sel["end"])
if period != "day":  # one column per week or month over long ranges (mean of the days)
    comp = data.aggregate_columns(comp, period)
st.plotly_chart(charts.completeness_heatmap(comp, period=period), theme=None,
                key="completeness")
st.caption(f"Share of the day's {data.interval_s(url, site_id) // 60}-minute intervals with a "
           "reading, per device (inverters: intervals with a power or energy reading; sensors: "
           "per quantity). Loggers that stop at night show about half; a dark cell in an "
           "otherwise light row is a gap worth a look.")

st.subheader("Sensor and site-wide flags")
sf = data.sensor_flags(url, site_id, sel["start"], sel["end"])
if sf.empty:
    st.success("No sensor or site-wide flags in the selected range.")
else:
    for f in sf.head(8).itertuples():
        st.page_link(ui.PAGES["drilldown"], icon=":material/zoom_in:",
                     label=data.flag_label(f),
                     query_params={"flag": str(f.flag_id)})
    t = ui.with_display_times(sf, sel)
    st.dataframe(ui.clean_frame(t[["flag_id", "device_label", "kind_label", "severity_label",
                                   "start_text", "end_text", "duration_text"]]),
                 hide_index=True, key="sensor_flags",
                 column_config=ui.flag_columns(duration_width="small"))
    st.caption("Open a flag for its evidence (and, for a shifted logger clock, the correction "
               "to paste into the site configuration).")
    ui.field_caution()

st.subheader("Ingest log")
log = data.ingest_log(url, site_id)
if log.empty:
    st.info("Nothing ingested for this site yet.")
else:
    m = st.columns(5)
    m[0].metric("Files", f"{len(log)}")
    m[1].metric("Rows loaded", f"{int(log['rows_loaded'].sum()):,}")
    m[2].metric("Rows rejected", f"{int(log['rows_rejected'].sum()):,}",
                help="Whole lines that could not be used (e.g. an unreadable timestamp).")
    m[3].metric("Values rejected", f"{int(log['values_rejected'].sum()):,}",
                help="Single cells rejected (e.g. 'ERR' in a power column); the rest of the "
                     "line was loaded.")
    m[4].metric("Failed files", f"{int((log['status'] == 'failed').sum())}")
    st.plotly_chart(charts.ingest_bars(log), theme=None, key="ingest_bars")
    st.dataframe(ui.clean_frame(log[["batch_id", "status", "source_name", "file_name", "sha256", "size_bytes",
                      "rows_read", "rows_loaded", "rows_duplicate", "rows_rejected",
                      "values_rejected", "values_conflict", "interval_s", "started_utc",
                      "message"]]),
                 hide_index=True, key="ingest_table", column_config={
        "batch_id": st.column_config.NumberColumn("Batch", format="%d"), "status": "Status",
        "source_name": "Source", "file_name": "File", "sha256": "SHA-256",
        "size_bytes": st.column_config.NumberColumn("Size [bytes]", format="localized"),
        "rows_read": "Rows read", "rows_loaded": "Loaded", "rows_duplicate": "Duplicate",
        "rows_rejected": "Rows rejected", "values_rejected": "Values rejected",
        "values_conflict": "Conflicting values",
        "interval_s": "Interval [s]", "started_utc": "Started (UTC)", "message": "Message"})

st.subheader("Rejected rows")
with_rejects = (log["rows_rejected"] + log["values_rejected"]) > 0 if not log.empty else []
batches = [None, *log.loc[with_rejects, "batch_id"].astype(int).tolist()] \
    if not log.empty else [None]
names = dict(zip(log["batch_id"], log["file_name"], strict=True)) if not log.empty else {}
batch = st.selectbox("File", batches, key="rej_batch",
                     format_func=lambda b: "all files" if b is None else f"{names[b]} (#{b})")
rej = data.rejected_rows(url, site_id, batch_id=batch)
if rej.empty:
    st.success("No rejected rows.")
else:
    st.dataframe(rej, hide_index=True, key="rejected_table", column_config={
        "batch_id": st.column_config.NumberColumn("Batch", format="%d"), "file_name": "File",
        "line_no": st.column_config.NumberColumn("Line", format="%d"),
        "column_name": "Column", "reason": "Reason", "raw_text": "Raw text"})
    st.caption("Showing up to 500 rows. Every rejected row is kept with its file, line and "
               "reason; nothing is dropped silently.")
