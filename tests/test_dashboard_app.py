"""The dashboard's pages with Streamlit's AppTest on the demo store (issue #6).

Every page renders without an exception and shows its widgets and charts; the figures shown
equal the analytics layer's values computed here independently from the db read functions
(db.daily.daily_table, db.flags.read_flags, db.degradation.degradation_results,
db.ingest_log.ingest_log, db.timeseries.inverter_frame). The store is the invented demo site
built by the ``dashboard_store`` fixture (tests/conftest.py) through demo generator, ingest
and compute.
"""

from __future__ import annotations

import base64
import datetime as dt
import json
import os
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from streamlit.testing.v1 import AppTest

from analytics.power import expected_ac_power
from analytics.temperature import cell_temperature_from_module, sapm_parameters
from db import queries
from db.daily import daily_table
from db.degradation import degradation_results
from db.engine import ENV_VAR, make_engine
from db.flags import read_flags
from db.ingest_log import ingest_log, rejected_rows
from db.timeseries import inverter_frame

APP = str(Path(__file__).resolve().parents[1] / "dashboard" / "app.py")
PAGES = ["views/weekly.py", "views/trends.py", "views/degradation.py", "views/drilldown.py",
         "views/quality.py"]
TIMEOUT_S = 120  # the machine is shared; a first run also warms the caches


@pytest.fixture(scope="module")
def store(dashboard_store):
    old = os.environ.get(ENV_VAR)
    os.environ[ENV_VAR] = dashboard_store["url"]
    eng = make_engine(dashboard_store["url"], create=False)
    yield {**dashboard_store, "engine": eng}
    eng.dispose()
    if old is None:
        os.environ.pop(ENV_VAR, None)
    else:
        os.environ[ENV_VAR] = old


def _app(page: str | None = None, **query) -> AppTest:
    at = AppTest.from_file(APP, default_timeout=TIMEOUT_S)
    for k, v in query.items():
        at.query_params[k] = v
    if page:
        at.switch_page(page)
    at.run()
    assert not at.exception, [e.value for e in at.exception]
    return at


def _arr(v) -> np.ndarray:
    """A plotly JSON array: a list, or plotly's typed-array form {dtype, bdata, shape}."""
    if isinstance(v, dict) and "bdata" in v:
        a = np.frombuffer(base64.b64decode(v["bdata"]), dtype=np.dtype(v["dtype"]))
        shape = v.get("shape")
        if shape:
            a = a.reshape([int(x) for x in str(shape).split(",")] if isinstance(shape, str)
                          else shape)
        return a.astype(float)
    return np.array(v, dtype=float)


def _figures(at: AppTest) -> list[dict]:
    return [json.loads(el.proto.spec) for el in at.get("plotly_chart")]


def _frame(at: AppTest, column: str) -> pd.DataFrame:
    return next(d.value for d in at.dataframe if column in d.value.columns)


def _metric(at: AppTest, label: str) -> str:
    return next(m.value for m in at.metric if m.label == label)


def _last_week(store) -> tuple[dt.date, dt.date]:
    _, last = queries.daily_span(store["engine"], store["site_id"])
    return last - dt.timedelta(days=6), last


# ---------------------------------------------------------------- every page


EXPECT = {  # page -> (title, widget keys, minimum number of charts)
    "views/weekly.py": ("Weekly check", [], 2),
    "views/trends.py": ("Inverter trends", ["trend_inverters", "trend_period", "trend_method"], 1),
    "views/degradation.py": ("Degradation & warranty", ["deg_device", "deg_method"], 3),
    "views/drilldown.py": ("Alarm drill-down", ["dd_inverter", "dd_start", "dd_days", "dd_pick"], 1),
    "views/quality.py": ("Data quality", ["rej_batch"], 2),
}


@pytest.mark.parametrize("page", PAGES)
def test_page_renders_with_widgets_and_charts(store, page):
    at = _app(page)
    title, keys, n_charts = EXPECT[page]
    assert [t.value for t in at.title] == [title]
    for key in ["site", "window", *keys]:  # widget keys live in session state once drawn
        assert key in at.session_state, key
    assert at.selectbox(key="site").value == store["site_id"]
    figs = _figures(at)
    assert len(figs) >= n_charts
    for fig in figs:  # every chart has axis titles (units are checked in test_dashboard_charts)
        titles = [v["title"]["text"] for k, v in fig["layout"].items()
                  if k.startswith(("xaxis", "yaxis")) and isinstance(v, dict) and v.get("title")]
        assert titles, fig["layout"].get("title")
    assert not at.error


def test_empty_database_shows_a_hint(tmp_path):
    old = os.environ.get(ENV_VAR)
    os.environ[ENV_VAR] = f"sqlite:///{tmp_path / 'empty.sqlite'}"
    try:
        make_engine(os.environ[ENV_VAR]).dispose()  # schema, no site
        at = _app()
        assert any("No site in the database" in i.value for i in at.info)
    finally:
        if old is None:
            os.environ.pop(ENV_VAR, None)
        else:
            os.environ[ENV_VAR] = old


# ---------------------------------------------------------------- weekly check


def test_weekly_figures_are_ratios_of_sums_of_the_daily_table(store):
    eng, site = store["engine"], store["site_id"]
    w0, w1 = _last_week(store)
    t = daily_table(eng, site, start=w0 - dt.timedelta(days=56), end=w1)
    week = t[(t["day"] >= w0)]
    trail = t[(t["day"] < w0)]
    at = _app("views/weekly.py")
    # site metric: IEC 61724-1 period PR = Σ E / Σ E_ref,STC over the valid days
    v = week[week["day_valid"]]
    pr_site = v["e_ac_pr_kwh"].sum() / v["e_ref_stc_kwh"].sum()
    assert _metric(at, "PR_STC last week") == f"{pr_site:.3f}"
    assert _metric(at, "Energy last week") == f"{week['e_ac_kwh'].sum() / 1000:,.1f} MWh"
    table = _frame(at, "pr_stc_trailing").set_index("device_id")
    assert set(table.index) == set(t["device_id"])
    for inv in table.index:
        vw = week[(week["device_id"] == inv) & week["day_valid"]]
        vt = trail[(trail["device_id"] == inv) & trail["day_valid"]]
        pr_w = vw["e_ac_pr_kwh"].sum() / vw["e_ref_stc_kwh"].sum()
        pr_t = vt["e_ac_pr_kwh"].sum() / vt["e_ref_stc_kwh"].sum()
        assert_allclose(table.loc[inv, "pr_stc"], pr_w, rtol=1e-12)
        assert_allclose(table.loc[inv, "pr_stc_trailing"], pr_t, rtol=1e-12)
        assert_allclose(table.loc[inv, "d_trailing_pct"], 100 * (pr_w / pr_t - 1), rtol=1e-9)
        assert_allclose(table.loc[inv, "e_ac_kwh"],
                        week.loc[week["device_id"] == inv, "e_ac_kwh"].sum(), rtol=1e-12)
    # against peers: METHODS §9 peer ratio PR_i / median_j PR_j (one peer group here)
    med = float(np.median(table["pr_stc"]))
    assert_allclose(table["d_peers_pct"], 100 * (table["pr_stc"] / med - 1), rtol=1e-9)
    # sorted lowest against peers first
    assert list(table["d_peers_pct"]) == sorted(table["d_peers_pct"])


def test_heatmap_cells_are_relative_to_the_daily_site_median(store):
    eng, site = store["engine"], store["site_id"]
    at = _app("views/weekly.py")
    heat = next(f for f in _figures(at) if f["data"][0]["type"] == "heatmap")["data"][0]
    start, end = at.date_input(key="window").value
    t = daily_table(eng, site, start=start, end=end)
    t = t[t["day_valid"]]
    day = t["day"].value_counts().index[0]  # a day with valid inverters
    d = t[t["day"] == day].set_index("device_id")["pr_stc"]
    col = [pd.Timestamp(x).date() for x in heat["x"]].index(day)
    rows = heat["y"]
    z = _arr(heat["z"])[:, col]
    expect = 100 * (d.reindex(rows) / d.median() - 1)
    assert_allclose(z, expect.to_numpy(), rtol=1e-9, equal_nan=True)


def test_week_flags_link_to_the_drilldown(store):
    eng, site = store["engine"], store["site_id"]
    f = _inverter_flag(store)
    info = queries.sites(eng).set_index("site_id").loc[site]
    off_s = int(pd.Timestamp("2001-01-15", tz=info["timezone"]).utcoffset().total_seconds())
    end = (dt.datetime.fromtimestamp(int(f["start_s"]) + off_s, dt.UTC) + dt.timedelta(days=2)).date()
    at = _app("views/weekly.py", start=(end - dt.timedelta(days=41)).isoformat(),
              end=end.isoformat())
    assert at.date_input(key="window").value[1] == end
    links = {p.proto.query_string: p.proto for p in at.get("page_link")}
    assert f"flag={f['flag_id']}" in links  # the flag started in the week: listed as new
    link = links[f"flag={f['flag_id']}"]
    assert link.page == "drilldown" and f["kind"] in link.label and f["device_id"] in link.label
    # every flag overlapping the week is in the table, each with its drill-down link
    w0 = end - dt.timedelta(days=6)
    a = (w0 - dt.date(1970, 1, 1)).days * 86400 - off_s
    b = a + 7 * 86400
    expect = read_flags(eng, site, start_s=a, end_s=b)
    table = _frame(at, "flag_id")
    assert sorted(table["flag_id"]) == sorted(expect["flag_id"])
    assert _metric(at, "Flags in the week") == f"{len(expect)}"
    for row in table.itertuples():
        assert row.open == f"./drilldown?flag={row.flag_id}"


# ---------------------------------------------------------------- selection


def test_site_and_window_persist_across_pages(store):
    at = _app("views/weekly.py")
    _, end = _last_week(store)
    window = (end - dt.timedelta(days=27), end)
    at.date_input(key="window").set_value(window).run()
    assert at.query_params["start"] == [window[0].isoformat()] or \
        at.query_params["start"] == window[0].isoformat()
    at.switch_page("views/quality.py").run()
    assert not at.exception
    assert at.date_input(key="window").value == window
    comp = next(f for f in _figures(at) if f["data"][0]["type"] == "heatmap")["data"][0]
    assert len(comp["x"]) == 28  # one column per day of the window


# ---------------------------------------------------------------- drill-down


def _inverter_flag(store) -> pd.Series:
    fl = read_flags(store["engine"], store["site_id"])
    inv = fl[fl["device_id"].str.startswith("INV", na=False) & (fl["kind"] == "outage")]
    if inv.empty:
        inv = fl[fl["device_id"].str.startswith("INV", na=False)]
    return inv.iloc[0]


def test_drilldown_from_a_flag_shows_its_inverter_and_window(store):
    eng, site = store["engine"], store["site_id"]
    f = _inverter_flag(store)
    at = _app("views/drilldown.py", flag=str(f["flag_id"]))
    assert at.selectbox(key="dd_inverter").value == f["device_id"]
    assert any(f"Flag #{f['flag_id']}" in s.value for s in at.subheader)
    lost = f["lost_kwh"]
    assert _metric(at, "Lost energy") == (f"{lost:,.1f} kWh" if lost == lost else "–")
    fig = _figures(at)[0]
    x = pd.to_datetime(fig["data"][0]["x"])
    info = queries.sites(eng).set_index("site_id").loc[site]
    off = pd.Timestamp("2001-01-15", tz=info["timezone"]).utcoffset()  # standard time
    a = (x.min() - off).tz_localize("UTC")
    assert a <= pd.Timestamp(f["start_s"], unit="s", tz="UTC")  # the window holds the flag
    # expected power on the chart = PVWatts (Dobos 2014) from the stored interval frame,
    # Sandia cell temperature (King et al. 2004 Eq. 12), computed here independently
    start = int((x.min() - off).tz_localize("UTC").timestamp())
    end = int((x.max() - off).tz_localize("UTC").timestamp()) + 1
    frame = inverter_frame(eng, site, f["device_id"], start, end)
    inv = queries.inverters(eng, site).set_index("device_id").loc[f["device_id"]]
    t_cell = cell_temperature_from_module(frame["t_module_c"], frame["poa_wm2"],
                                          delta_t_c=sapm_parameters(inv["mounting"])["delta_t_c"])
    p_exp = expected_ac_power(frame["poa_wm2"], t_cell, inv["p_dc_kwp"], inv["gamma_pmp_per_c"],
                              inv["p_ac_max_kw"], inv["eta_inv_nom"])
    shown = next(t for t in fig["data"] if t["name"] == "expected AC power")
    assert_allclose(_arr(shown["y"]), p_exp.to_numpy(), rtol=1e-9,
                    equal_nan=True)
    measured = next(t for t in fig["data"] if t["name"].endswith("AC power")
                    and t["name"] != "expected AC power")
    assert_allclose(_arr(measured["y"]), frame["p_ac_kw"].to_numpy(),
                    rtol=1e-12, equal_nan=True)
    assert fig["layout"]["shapes"], "the flag is shaded"


def test_drilldown_flag_picker_moves_the_window(store):
    f = _inverter_flag(store)
    at = _app("views/drilldown.py")
    at.selectbox(key="dd_inverter").set_value(f["device_id"]).run()
    at.date_input(key="dd_start").set_value(
        (pd.Timestamp(f["start_s"], unit="s") - pd.Timedelta(days=3)).date()).run()
    at.selectbox(key="dd_pick").set_value(int(f["flag_id"])).run()
    assert not at.exception
    assert any(f"Flag #{f['flag_id']}" in s.value for s in at.subheader)


# ---------------------------------------------------------------- degradation, quality


def test_degradation_page_shows_the_stored_rates_and_warranty(store):
    eng, site = store["engine"], store["site_id"]
    res = degradation_results(eng, site)
    at = _app("views/degradation.py")
    table = _frame(at, "rate_pct_per_yr")
    shown = table.set_index(["device_id", "method"])["rate_pct_per_yr"]
    stored = res[res["method"] != "overview"].set_index(["device_id", "method"])["rate_pct_per_yr"]
    assert_allclose(shown.reindex(stored.index).to_numpy(dtype=float),
                    stored.to_numpy(dtype=float), rtol=1e-12, equal_nan=True)
    at.selectbox(key="deg_device").set_value("(site)").run()
    yoy = res[(res["device_id"] == "(site)") & (res["method"] == "sensor_year_pairs")].iloc[0]
    if yoy["rate_pct_per_yr"] == yoy["rate_pct_per_yr"]:
        assert _metric(at, "Measured rate") == f"{yoy['rate_pct_per_yr']:+.2f} %/yr"
        summ = res[(res["device_id"] == "(site)") & (res["method"] == "overview")].iloc[0]
        details = summ["details"] if isinstance(summ["details"], dict) else \
            json.loads(summ["details_json"])
        w = details.get("warranty", {})
        if "shortfall_kwh" in w:
            assert _metric(at, "Energy shortfall") == f"{w['shortfall_kwh']:,.0f} kWh"
    assert any("screening evidence" in c.value for c in at.caption)


def test_quality_page_counts_match_the_ingest_log(store):
    log = ingest_log(store["engine"], store["site_id"])
    at = _app("views/quality.py")
    assert _metric(at, "Files") == f"{len(log)}"
    assert _metric(at, "Rows loaded") == f"{int(log['rows_loaded'].sum()):,}"
    assert _metric(at, "Rows rejected") == f"{int(log['rows_rejected'].sum()):,}"
    assert _metric(at, "Values rejected") == f"{int(log['values_rejected'].sum()):,}"
    # the rejected rows shown are the store's, with file, line and reason
    rej = rejected_rows(store["engine"], store["site_id"])
    if not rej.empty:
        shown_rej = _frame(at, "reason")
        assert list(shown_rej["line_no"]) == list(rej["line_no"][:500])
        assert list(shown_rej["reason"]) == list(rej["reason"][:500])
    shown = _frame(at, "sha256")
    assert set(shown["sha256"]) == set(log["sha256"])


def _rendered_text(at: AppTest) -> str:
    """Every string the page rendered: element protos (text, tables, chart JSON, options)."""
    out = []

    def walk(node):
        proto = getattr(node, "proto", None)
        if proto is not None:
            out.append(str(proto))
        for child in getattr(node, "children", {}).values():
            walk(child)

    walk(at._tree)
    return "\n".join(out)


@pytest.mark.parametrize("page", PAGES)
def test_pages_show_none_of_the_schema_1_codes(store, page):
    """Issue #10: our own names on every screen (the pattern is checked live in
    tests/test_jobs_degradation.py::test_old_codes_pattern_is_live)."""
    from tests.test_jobs_degradation import OLD_CODES

    text = _rendered_text(_app(page))
    assert "Measured" in text or len(text) > 1000  # the walk really saw the page
    hits = sorted({m.group(0) for m in OLD_CODES.finditer(text)})
    assert hits == [], f"{page}: {hits}"
