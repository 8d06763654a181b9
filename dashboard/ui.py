"""Page helpers shared by every page: the global site and date-range selection, cautions.

The selection lives in ``st.session_state`` (keys ``site`` and ``window``) set by the
widgets of :mod:`dashboard.app`, and is mirrored in the URL's query parameters (``site``,
``start``, ``end``) so a link or a reload keeps it.
"""

from __future__ import annotations

import datetime as dt

import streamlit as st

from dashboard import data

#: Page scripts, relative to app.py. They live in ``views/``, not ``pages/``: a ``pages/``
#: folder beside the entry script switches Streamlit (and AppTest's switch_page) to the old
#: automatic multipage mode, which drops the entry script's sidebar widgets on page change.
PAGES = {
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


def field_caution() -> None:
    st.caption(":warning: " + data.FIELD_CAUTION)


def warranty_caution() -> None:
    st.caption("⚖️ " + data.WARRANTY_CAUTION)


def fmt_day(day: dt.date) -> str:
    return day.strftime("%a %d %b %Y")
