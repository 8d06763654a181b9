"""heliaudit dashboard: entry point (``streamlit run dashboard/app.py``).

Builds the menu with ``st.navigation`` and the selectors every page shares (site and date
range, in the sidebar), then runs the chosen page. Pages are thin: they read widgets, call
:mod:`dashboard.data` and render :mod:`dashboard.charts` figures.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import streamlit as st

from dashboard import data, ui
from db.engine import display_url

# The page icon is a file of the package: a Material-symbol or emoji icon would make the
# browser fetch it from an outside font/CDN server, which a plant network blocks.
ICON = str(Path(__file__).resolve().parent / "static" / "page_icon.png")
st.set_page_config(page_title="heliaudit", page_icon=ICON, layout="wide")

weekly = st.Page(ui.PAGES["weekly"], title="Weekly check", icon=":material/calendar_view_week:",
                 url_path="weekly")
# whether this visit named a site (the sidebar below writes the chosen site into the URL
# before the page runs)
ASKED_SITE = "site" in st.query_params
portfolio = st.Page(ui.PAGES["portfolio"], title="Portfolio", icon=":material/apps:",
                    url_path="portfolio")


def _home() -> None:
    """The app's root address opens the weekly check at its own address, ``/weekly`` (the
    portfolio page, ``/portfolio``, when the store holds more than one site).

    Streamlit serves its default page only at the root and ignores that page's
    ``url_path``, so a default weekly page would make ``/weekly`` (the address the menu and
    links name) "page not found"; the hidden default page forwards there instead, keeping
    the site and date range of the query string.
    """
    try:
        several = len(data.site_list(data.db_url())) > 1
    except data.DatabaseUnreadable:
        several = False
    st.switch_page(portfolio if several and not ASKED_SITE else weekly,
                   query_params=st.query_params.to_dict())


pages = [
    st.Page(_home, title="heliaudit", url_path="home", default=True, visibility="hidden"),
    portfolio,
    weekly,
    st.Page(ui.PAGES["trends"], title="Inverter trends", icon=":material/show_chart:",
            url_path="trends"),
    st.Page(ui.PAGES["degradation"], title="Degradation & warranty",
            icon=":material/trending_down:", url_path="degradation"),
    st.Page(ui.PAGES["drilldown"], title="Alarm drill-down", icon=":material/zoom_in:",
            url_path="drilldown"),
    st.Page(ui.PAGES["quality"], title="Data quality", icon=":material/fact_check:",
            url_path="quality"),
]
page = st.navigation(pages)

url = data.db_url()
try:
    sites = data.site_list(url)
except data.DatabaseUnreadable as exc:
    st.title("heliaudit cannot read this database")
    st.error(str(exc), icon=":material/database:")
    st.markdown("Start the dashboard against a heliaudit store: "
                "`heliaudit --db PATH_OR_URL dashboard`, where the store was made by "
                "`heliaudit ingest SITE.toml` (or `heliaudit demo`). A SQLite path must be a "
                "file written by heliaudit; a PostgreSQL URL needs a running server.")
    st.stop()
qp = st.query_params


def _reset_window() -> None:
    st.session_state.pop("window", None)


with st.sidebar:
    st.markdown("### heliaudit")
    if sites.empty:
        st.caption(f"Database: `{display_url(url)}` — no site loaded.")  # password masked
    else:
        ids = list(sites["site_id"])
        if "site" not in st.session_state or st.session_state["site"] not in ids:
            st.session_state["site"] = qp.get("site") if qp.get("site") in ids else ids[0]
        names = dict(zip(sites["site_id"], sites["name"], strict=True))
        site_id = st.selectbox("Site", ids, key="site", format_func=lambda s: f"{names[s]} ({s})",
                               on_change=_reset_window)
        first, last = data.data_span(url, site_id)
        if "window" not in st.session_state:
            start, end = data.default_window(url, site_id)
            try:
                start = dt.date.fromisoformat(qp.get("start", "")) if qp.get("start") else start
                end = dt.date.fromisoformat(qp.get("end", "")) if qp.get("end") else end
            except ValueError:
                pass
            st.session_state["window"] = (start, end)
        st.date_input("Date range (local standard time)", key="window",
                      min_value=first, max_value=last, format="YYYY-MM-DD",
                      help="Shared by every page. The weekly check uses the 7 days ending on "
                           "the last day of the range.")
        window = st.session_state["window"]
        qp["site"] = site_id
        if len(window) == 2:
            qp["start"], qp["end"] = window[0].isoformat(), window[1].isoformat()
        st.caption(f"{names[site_id]} · data {first} → {last}")
        st.toggle("Wall-clock times (with daylight saving)", key="wall_clock",
                  help="Tables of events show the site's wall-clock time, as the logger and "
                       "the operators read it. Off: local standard time all year (the basis "
                       "of the daily figures; no hour repeats or goes missing).")
    st.caption("Colours: Okabe & Ito (2008) and Paul Tol (2021) colour-blind-safe schemes.")

with st.spinner("Computing this page…"):  # shown only when it takes longer than 0.5 s
    page.run()
