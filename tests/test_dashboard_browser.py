"""The dashboard in a real browser (issues #6, #15): Debian's headless Chromium driven by
Playwright.

Starts ``streamlit run dashboard/app.py`` (the command line of ``heliaudit dashboard``) on a
free localhost port against the demo store, opens every page at a one-year and at the full
range, waits for its charts, checks that no error box is shown and that no request leaves
the machine (a plant network blocks outside servers: fonts, icons, CDNs), follows a flag
link from the weekly check to the drill-down, and saves screenshots under
test-output/screenshots/. No browser is downloaded: Playwright drives /usr/bin/chromium
(``apt-get install chromium``; .ci/run installs it).
"""

from __future__ import annotations

import datetime as dt
import os
import shutil
import socket
import subprocess
import time
import urllib.parse
import urllib.request
from pathlib import Path

import pytest

from db import queries
from db.engine import ENV_VAR, make_engine
from db.flags import read_flags
from heliaudit.cmd_dashboard import streamlit_command

pytestmark = pytest.mark.browser

CHROMIUM = "/usr/bin/chromium"
SHOTS = Path(__file__).resolve().parents[1] / "test-output" / "screenshots"
ARGS = ["--no-sandbox", "--disable-gpu", "--no-first-run", "--disable-background-networking",
        "--disable-component-update", "--disable-sync"]
PAGES = [("trends", "Inverter trends"), ("degradation", "Degradation & warranty"),
         ("drilldown", "Alarm drill-down"), ("quality", "Data quality")]
ALL_PAGES = [("portfolio", "Portfolio"), ("weekly", "Weekly check"), *PAGES]
NO_CHARTS = {"portfolio"}  # tables only
LOCAL_HOSTS = ("127.0.0.1", "localhost", "[::1]", "::1")
WAIT_MS = 60_000


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _wait_healthy(url: str, proc: subprocess.Popen, timeout_s: float = 60) -> None:
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout_s:
        if proc.poll() is not None:
            raise RuntimeError(f"streamlit exited with code {proc.returncode}")
        try:
            with urllib.request.urlopen(url + "/_stcore/health", timeout=2) as r:
                if r.read().strip() == b"ok":
                    return
        except OSError:
            time.sleep(0.3)
    raise TimeoutError(f"dashboard not healthy after {timeout_s} s")


@pytest.fixture(scope="module")
def server(dashboard_store, tmp_path_factory):
    if not Path(CHROMIUM).exists() and not shutil.which("chromium"):
        reason = "Debian's chromium is not installed (apt-get install chromium)"
        if os.environ.get("CI") == "true":
            pytest.fail(reason)
        pytest.skip(reason)
    pytest.importorskip("playwright.sync_api", reason="playwright for Python not installed")
    port = _free_port()
    log = tmp_path_factory.mktemp("streamlit") / "server.log"
    env = dict(os.environ, **{ENV_VAR: dashboard_store["url"]})
    with open(log, "wb") as out:
        proc = subprocess.Popen(streamlit_command(port, "127.0.0.1", headless=True), env=env,
                                stdout=out, stderr=subprocess.STDOUT)
    base = f"http://127.0.0.1:{port}"
    try:
        _wait_healthy(base, proc)
        yield {"base": base, **dashboard_store}
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


def _charts_ready(page, n: int = 1) -> None:
    if n:
        page.locator('[data-testid="stPlotlyChart"] .main-svg').nth(0).wait_for(
            state="attached", timeout=WAIT_MS)
        page.wait_for_function(
            f"document.querySelectorAll('[data-testid=\"stPlotlyChart\"] .plot-container')"
            f".length >= {n}", timeout=WAIT_MS)
    # the script has finished when Streamlit's status widget stops showing "Running" and no
    # element is still a loading placeholder (skeleton)
    page.wait_for_function("!document.querySelector('[data-testid=\"stStatusWidget\"]') && "
                           "!document.querySelector('[data-testid=\"stSkeleton\"]')",
                           timeout=WAIT_MS)
    page.wait_for_timeout(500)  # let the last element paint before a screenshot


def _no_error_box(page) -> None:
    assert page.locator('[data-testid="stException"]').count() == 0, \
        page.locator('[data-testid="stException"]').first.inner_text()
    # Streamlit's dialog for an address that names no page ("Page not found")
    assert page.get_by_text("Page not found").count() == 0, page.url


def _watch_requests(page, outside: list) -> None:
    def on_request(req):
        u = urllib.parse.urlparse(req.url)
        if u.scheme in ("data", "blob", "about", "chrome", "chrome-extension"):
            return
        if u.hostname not in LOCAL_HOSTS:
            outside.append(req.url)

    page.on("request", on_request)


def test_every_page_at_one_year_and_full_range(server, tmp_path):
    """Screenshots of every page over the last year and over the whole record; no page
    raises, shows an error box or asks a server outside the machine for anything."""
    from playwright.sync_api import sync_playwright

    SHOTS.mkdir(parents=True, exist_ok=True)
    eng = make_engine(server["url"], create=False)
    first, last = queries.daily_span(eng, server["site_id"])
    eng.dispose()
    ranges = {"one_year": (last - dt.timedelta(days=364), last), "full": (first, last)}
    outside: list[str] = []
    with sync_playwright() as p:
        ctx = p.chromium.launch_persistent_context(
            str(tmp_path / "profile"), executable_path=CHROMIUM, headless=True, args=ARGS,
            viewport={"width": 1440, "height": 2400})  # Streamlit scrolls an inner element
        try:
            page = ctx.pages[0] if ctx.pages else ctx.new_page()
            _watch_requests(page, outside)
            for label, (a, b) in ranges.items():
                for k, (path, title) in enumerate(ALL_PAGES, start=1):
                    # every page at its own address, the one the menu and links name
                    page.goto(f"{server['base']}/{path}?site={server['site_id']}"
                              f"&start={a}&end={b}")
                    page.get_by_role("heading", name=title).wait_for(timeout=WAIT_MS)
                    _charts_ready(page, 0 if path in NO_CHARTS else 1)
                    _no_error_box(page)
                    assert urllib.parse.urlparse(page.url).path == f"/{path}", page.url
                    page.screenshot(path=str(SHOTS / f"{label}_{k}_{path}.png"), full_page=True)
        finally:
            ctx.close()
    assert not outside, f"requests left the machine: {sorted(set(outside))[:5]}"
    for label in ranges:
        for k, (path, _) in enumerate(ALL_PAGES, start=1):
            assert (SHOTS / f"{label}_{k}_{path}.png").stat().st_size > 10_000


def test_every_page_in_chromium_and_flag_to_drilldown(server, tmp_path):
    from playwright.sync_api import sync_playwright

    SHOTS.mkdir(parents=True, exist_ok=True)
    outside: list[str] = []
    eng = make_engine(server["url"], create=False)
    fl = read_flags(eng, server["site_id"])
    eng.dispose()
    inv_flags = fl[fl["device_id"].str.startswith("INV", na=False)]
    flag = inv_flags[inv_flags["kind"] == "outage"]
    flag = (flag if not flag.empty else inv_flags).iloc[-1]
    # a window whose last week contains the flag's start: it is listed under "New flags"
    end = (dt.datetime.fromtimestamp(int(flag["start_s"]), dt.UTC) + dt.timedelta(days=2)).date()
    start = end - dt.timedelta(days=41)

    with sync_playwright() as p:
        ctx = p.chromium.launch_persistent_context(
            str(tmp_path / "profile"), executable_path=CHROMIUM, headless=True, args=ARGS,
            viewport={"width": 1440, "height": 1800})
        try:
            page = ctx.pages[0] if ctx.pages else ctx.new_page()
            _watch_requests(page, outside)
            page.goto(f"{server['base']}/?site={server['site_id']}&start={start}&end={end}")
            page.get_by_role("heading", name="Weekly check").wait_for(timeout=WAIT_MS)
            _charts_ready(page, 2)
            _no_error_box(page)
            # the root address forwards to the weekly check's own, keeping site and range
            u = urllib.parse.urlparse(page.url)
            q = urllib.parse.parse_qs(u.query)
            assert u.path == "/weekly", page.url
            assert (q["site"], q["start"], q["end"]) == ([server["site_id"]], [str(start)],
                                                          [str(end)]), page.url
            page.screenshot(path=str(SHOTS / "1_weekly_check.png"), full_page=True)

            for k, (path, title) in enumerate(PAGES, start=2):
                page.locator(f'[data-testid="stSidebarNav"] a[href$="/{path}"]').click()
                page.get_by_role("heading", name=title).wait_for(timeout=WAIT_MS)
                _charts_ready(page)
                _no_error_box(page)
                page.screenshot(path=str(SHOTS / f"{k}_{path}.png"), full_page=True)

            # back to the weekly check (the window persists), then follow the flag's link
            page.locator('[data-testid="stSidebarNav"] a[href$="/weekly"]').click()
            page.get_by_role("heading", name="Weekly check").wait_for(timeout=WAIT_MS)
            link = page.locator(f'a[href*="flag={int(flag["flag_id"])}"]').first
            link.wait_for(timeout=WAIT_MS)
            link.click()
            page.get_by_text(f"Flag #{int(flag['flag_id'])}:").wait_for(timeout=WAIT_MS)
            _charts_ready(page)
            _no_error_box(page)
            assert "/drilldown" in page.url
            page.screenshot(path=str(SHOTS / "6_drilldown_from_flag.png"), full_page=True)
        finally:
            ctx.close()
    assert not outside, f"requests left the machine: {sorted(set(outside))[:5]}"
    for name in ("1_weekly_check", "2_trends", "3_degradation", "4_drilldown", "5_quality",
                 "6_drilldown_from_flag"):
        assert (SHOTS / f"{name}.png").stat().st_size > 10_000
