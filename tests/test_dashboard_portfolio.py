"""The portfolio page (issue #16, "the dashboard reads a portfolio of sites from one server"):
every site of a store in one weekly table, the site that sends nothing first, on SQLite and
on one PostgreSQL server.

Two small invented sites (``heliaudit demo-data`` physics, 3 inverters, hourly) go through the
real pipeline; the second one's data end a month before the first's, as a site whose logger
stopped sending would.
"""

from __future__ import annotations

import datetime as dt
import os
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa
from streamlit.testing.v1 import AppTest

from analytics.weekly import STALE_AFTER_DAYS
from db import queries
from db.engine import ENV_VAR, make_engine

APP = str(Path(__file__).resolve().parents[1] / "dashboard" / "app.py")
TIMEOUT_S = 120
SITES = {"north": 14, "south": 13}  # site id -> months of data from 2022-01-01


def _build(eng: sa.Engine, out) -> None:
    from heliaudit import demo_generator as gen
    from heliaudit.cmd_compute import run_compute
    from ingest.config import load_site_config
    from ingest.load import ingest_paths

    for i, (site_id, months) in enumerate(SITES.items()):
        sc = gen.quillpond_scenario(n_inverters=3, start=dt.date(2022, 1, 1), months=months,
                                    interval_min=60, seed=11 + i, site_id=site_id)
        gen.write_site(sc, out / site_id)
        cfg = load_site_config(out / site_id / f"{site_id}.toml")
        ingest_paths(eng, cfg)
        run_compute(eng, cfg.id, full=True, echo=lambda *a, **k: None)


@pytest.fixture(scope="module")
def two_sites(tmp_path_factory):
    out = tmp_path_factory.mktemp("portfolio")
    path = out / "store.sqlite"
    eng = make_engine(path)
    _build(eng, out)
    eng.dispose()
    url = f"sqlite:///{path}"
    old = os.environ.get(ENV_VAR)
    os.environ[ENV_VAR] = url
    yield {"url": url, "path": path, "out": out}
    if old is None:
        os.environ.pop(ENV_VAR, None)
    else:
        os.environ[ENV_VAR] = old


def _portfolio(url: str, end: dt.date) -> pd.DataFrame:
    from dashboard import data

    data.st.cache_data.clear()
    return data.portfolio_week(url, end)


def _by_hand(eng: sa.Engine, site_id: str, w0: dt.date, w1: dt.date) -> dict:
    """Site KPIs of the week from its daily rows: IEC 61724-1 defines PR over a reporting
    period as a ratio of sums (Σ E_AC / Σ E_ref), here over the valid days, numerator and
    denominator over the same days."""
    d = queries.daily_rows(eng, site_id, w0, w1)
    v = d[d["day_valid"]]
    num = v["e_ac_pr_kwh"].fillna(v["e_ac_kwh"]).astype(float).sum()
    return {"e_ac_kwh": float(d["e_ac_kwh"].astype(float).sum()),
            "pr_stc": num / float(v["e_ref_stc_kwh"].astype(float).sum()),
            "n_inverters_reporting": int(d["device_id"].nunique())}


def test_portfolio_rows_are_each_sites_sums_and_the_silent_site_comes_first(two_sites):
    from dashboard import data

    eng = make_engine(two_sites["url"], create=False)
    end = data.portfolio_end(two_sites["url"])
    assert end == queries.daily_span(eng, "north")[1]
    south_last = queries.daily_span(eng, "south")[1]
    assert (end - south_last).days > STALE_AFTER_DAYS  # about a month behind
    t = _portfolio(two_sites["url"], end)
    assert list(t["site_id"]) == ["south", "north"]  # the site that sends nothing first
    south, north = t.iloc[0], t.iloc[1]
    assert south["status"] == (f"no daily results since {south_last} "
                               f"({(end - south_last).days} days)")
    assert south["n_inverters_reporting"] == 0 and np.isnan(south["e_ac_kwh"])
    w0 = end - dt.timedelta(days=6)
    hand = _by_hand(eng, "north", w0, end)
    assert north["e_ac_kwh"] == pytest.approx(hand["e_ac_kwh"], rel=1e-9)
    assert north["pr_stc"] == pytest.approx(hand["pr_stc"], rel=1e-9)
    assert north["n_inverters_reporting"] == hand["n_inverters_reporting"] == 3
    kwp = queries.inverters(eng, "north")["p_dc_kwp"].astype(float).sum()
    assert north["yf_h"] == pytest.approx(hand["e_ac_kwh"] / kwp, rel=1e-9)  # final yield
    # a week in which both report: each row is that site's own sums
    t2 = _portfolio(two_sites["url"], south_last)
    for r in t2.itertuples():
        hand = _by_hand(eng, r.site_id, south_last - dt.timedelta(days=6), south_last)
        assert r.e_ac_kwh == pytest.approx(hand["e_ac_kwh"], rel=1e-9)
        assert r.pr_stc == pytest.approx(hand["pr_stc"], rel=1e-9)
        assert not r.status.startswith("no daily results")
    eng.dispose()


def test_root_opens_the_portfolio_and_links_each_site(two_sites):
    at = AppTest.from_file(APP, default_timeout=TIMEOUT_S)
    at.run()
    assert not at.exception, [e.value for e in at.exception]
    assert [t.value for t in at.title] == ["Portfolio"]
    table = next(d.value for d in at.dataframe if "status" in d.value.columns)
    assert [v.split("site=")[1].split("&")[0] for v in table["link"]] == ["south", "north"]
    assert table["status"].iloc[0].startswith("no daily results since")
    assert any("south" in w.value for w in at.warning)  # named above the table
    # one site named in the address: its weekly check, as before
    at = AppTest.from_file(APP, default_timeout=TIMEOUT_S)
    at.query_params["site"] = "north"
    at.run()
    assert [t.value for t in at.title] == ["Weekly check"]


def test_the_same_portfolio_from_one_postgresql_server(two_sites, pg_engine):
    """The same two sites loaded into PostgreSQL give the same portfolio table."""
    _build(pg_engine, two_sites["out"] / "pg")
    with pg_engine.connect() as conn:
        schema_name = conn.execute(sa.text("SELECT current_schema()")).scalar()
    pg_url = (pg_engine.url.render_as_string(hide_password=False)
              + f"?options=-csearch_path%3D{schema_name}")
    from dashboard import data

    end = data.portfolio_end(two_sites["url"])
    assert data.portfolio_end(pg_url) == end
    a, b = _portfolio(two_sites["url"], end), _portfolio(pg_url, end)
    assert list(a["site_id"]) == list(b["site_id"])
    assert list(a["status"]) == list(b["status"])
    for c in ("e_ac_kwh", "pr_stc", "yf_h", "avail_energy", "lost_week_kwh", "p_dc_kwp"):
        np.testing.assert_allclose(a[c].astype(float), b[c].astype(float), rtol=1e-9,
                                   equal_nan=True, err_msg=c)


def test_a_device_without_rate_gets_words_and_no_pair_charts(two_sites):
    """14 months of data: the degradation job refuses every rate (Jordan et al. 2018 pair
    days one year apart; heliaudit asks for 2 usable years after stabilisation). The page
    says why in words (no method code) and draws no pair chart that would read as a rate."""
    import re

    from analytics.labels import METHOD_LABELS

    at = AppTest.from_file(APP, default_timeout=TIMEOUT_S)
    at.query_params["site"] = "north"
    at.switch_page("views/degradation.py")
    at.run()
    assert not at.exception, [e.value for e in at.exception]
    info = " ".join(i.value for i in at.info)
    assert info.startswith("No rate for this device"), info
    assert "2 years" in info  # the refusal's reason is shown
    codes = sorted((c for c in METHOD_LABELS if "_" in c), key=len, reverse=True)
    assert not re.search(r"(?<![\w'])(" + "|".join(codes) + r")(?![\w'])", info), info
    keys = [el.proto.id for el in at.get("plotly_chart")]
    assert not any("pair_grid" in k or "year_rates" in k for k in keys), keys
    assert any("No chart of year-on-year pairs" in c.value for c in at.caption)


def test_portfolio_warranty_column_says_what_the_degradation_page_says(dashboard_store):
    # The portfolio's "Against the warranty" words come from the same one-sided screening
    # test (analytics.warranty.warranty_rate_test, checked against hand test vectors in its
    # docstring) that the Degradation & warranty page shows for the site's recommended rate;
    # two screens must not disagree. The demo site (36 months, [warranty] 0.55 %/yr) has a
    # site rate; a site without warranty terms says why it is not tested.
    from dashboard import data
    from db.degradation import SITE_DEVICE

    url, sid = dashboard_store["url"], dashboard_store["site_id"]
    data.st.cache_data.clear()
    t = data.portfolio_week(url, data.portfolio_end(url)).set_index("site_id")
    res = data.degradation_table(url, sid)
    summary = data.summary_details(res, SITE_DEVICE)
    rec = res[(res["device_id"] == SITE_DEVICE) & (res["method"] == data.RECOMMENDED)].iloc[0]
    method = rec["details"]["chosen_method"]
    assert method, rec["details"]
    page = data.warranty_view(url, sid, SITE_DEVICE, method)["test"]
    words = t.loc[sid, "warranty_test"]
    assert words.startswith("exceeds" if page["exceeds"] else "no evidence it exceeds")
    conf = f"{summary['warranty']['confidence']:.0%} one-sided"
    assert conf in words and f"at {conf}" in page["verdict"], (words, page["verdict"])
    assert summary["warranty"]["exceeds"] == page["exceeds"]
    assert data.portfolio_warranty_words({"reason": "no [warranty] in the site configuration"}) \
        == "not tested: no warranty terms"
