"""Page helpers shared by every page: the global site and date-range selection, cautions.

The selection lives in ``st.session_state`` (keys ``site`` and ``window``) set by the
widgets of :mod:`dashboard.app`, and is mirrored in the URL's query parameters (``site``,
``start``, ``end``) so a link or a reload keeps it.
"""

from __future__ import annotations

import datetime as dt
import zoneinfo

import numpy as np
import pandas as pd
import streamlit as st

from dashboard import data

#: Page scripts, relative to app.py. They live in ``views/``, not ``pages/``: a ``pages/``
#: folder beside the entry script switches Streamlit (and AppTest's switch_page) to the old
#: automatic multipage mode, which drops the entry script's sidebar widgets on page change.
PAGES = {
    "portfolio": "views/portfolio.py",
    "weekly": "views/weekly.py",
    "trends": "views/trends.py",
    "degradation": "views/degradation.py",
    "drilldown": "views/drilldown.py",
    "quality": "views/quality.py",
}


def selection() -> dict:
    """The current site and window; stops the page with a hint when there is no data."""
    url = data.db_url()
    site_id = st.session_state.get("site")
    if not site_id:
        st.info("No site in the database yet. Load one with `heliaudit ingest CONFIG` "
                "(or `heliaudit demo-data` for the invented demo site) and "
                "`heliaudit compute`, then reload this page.")
        st.stop()
    window = st.session_state.get("window") or data.default_window(url, site_id)
    if len(window) == 1:  # the user has picked only the first day so far
        window = (window[0], window[0])
    start, end = window
    info = data.site_info(url, site_id)
    return {"url": url, "site_id": site_id, "start": start, "end": end, "info": info,
            "offset_s": info["std_offset_s"]}


def wall_clock() -> bool:
    """True when the user asked for wall-clock times (with daylight saving) in the sidebar."""
    return bool(st.session_state.get("wall_clock", False))


def time_basis(short: bool = False) -> str:
    """The words for the times shown: local standard time, or the site's wall clock."""
    if wall_clock():
        return "wall clock" if short else "site wall-clock time, with daylight saving"
    return "standard time" if short else "local standard time, no daylight saving"


def display_time(ts_s, sel: dict) -> pd.Series:
    """UTC epoch seconds -> naive local times as chosen in the sidebar: local standard time
    (the site's UTC offset without daylight saving, as the daily table uses) or the site's
    wall clock (its time zone with daylight saving, as loggers and operators usually read)."""
    ts = pd.Series(ts_s, dtype="float64")
    if wall_clock():
        tz = zoneinfo.ZoneInfo(sel["info"]["timezone"])
        utc = pd.to_datetime(ts, unit="s", utc=True)
        return utc.dt.tz_convert(tz).dt.tz_localize(None)
    return pd.to_datetime(ts + sel["offset_s"], unit="s")


def with_display_times(t: pd.DataFrame, sel: dict) -> pd.DataFrame:
    """Adds ``start_text`` and ``end_text`` ("ongoing" for an open flag) in the chosen time
    basis, as text (a table cell never shows an invented end)."""
    t = t.copy()
    start = display_time(t["start_s"].to_numpy(), sel)
    end = display_time(t["end_s"].to_numpy(), sel)
    ongoing = t["ongoing"].to_numpy() if "ongoing" in t else np.zeros(len(t), bool)
    t["start_text"] = [x.strftime("%Y-%m-%d %H:%M") for x in start]
    t["end_text"] = ["ongoing" if o else x.strftime("%Y-%m-%d %H:%M")
                     for o, x in zip(ongoing, end, strict=True)]
    return t


def flag_columns(duration_width: str = "medium") -> dict:
    """Column settings shared by every page's flag table (flag id, device, what, severity,
    start in the chosen time basis, end, duration); a page adds its own columns."""
    col = st.column_config
    return {
        "flag_id": col.NumberColumn("Flag", format="%d", width="small"),
        "device_label": col.TextColumn("Device", width="small"),
        "kind_label": col.TextColumn("What", width="medium"),
        "severity_label": col.TextColumn("Severity", width="small"),
        "start_text": col.TextColumn(f"Start ({time_basis(short=True)})", width="medium"),
        "end_text": col.TextColumn("End", width="medium"),
        "duration_text": col.TextColumn("Duration", width=duration_width),
    }


def clean_frame(df: pd.DataFrame, formats: dict | None = None) -> pd.DataFrame:
    """A frame ready for ``st.dataframe``: no "None" cells (missing text becomes "–",
    missing numbers in a column become text "–" with the others formatted by ``formats``
    [column -> Python format] or with thousands separators), large numbers rounded so the
    grid's localized format shows separators."""
    out = df.copy()
    for c in out.columns:
        col = out[c]
        if pd.api.types.is_bool_dtype(col):
            continue
        if pd.api.types.is_numeric_dtype(col):
            if col.isna().any():
                top = col.abs().max(skipna=True)  # NA when the whole column is missing
                digits = 0 if pd.notna(top) and top >= 100 else 3
                fmt = (formats or {}).get(c, f",.{digits}f")
                out[c] = [("–" if pd.isna(x) else format(x, fmt)) for x in col]
            elif pd.api.types.is_float_dtype(col) and col.abs().max() >= 100:
                out[c] = col.round(0)
            continue
        out[c] = [("–" if x is None or (isinstance(x, float) and np.isnan(x))
                   or x is pd.NaT else x) for x in col]
    return out


def field_caution() -> None:
    st.caption(":warning: " + data.FIELD_CAUTION)


def warranty_caution() -> None:
    st.caption("⚖️ " + data.WARRANTY_CAUTION)


def fmt_day(day: dt.date) -> str:
    return day.strftime("%a %d %b %Y")
