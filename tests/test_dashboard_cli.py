"""``heliaudit dashboard``: the streamlit command line it runs and the database it passes."""

from __future__ import annotations

import subprocess
import sys
import time

from click.testing import CliRunner

from db.engine import ENV_VAR, make_engine, resolve_url
from heliaudit import cmd_dashboard
from heliaudit.cli import main


def test_streamlit_command_line():
    cmd = cmd_dashboard.streamlit_command(8600, "127.0.0.1", headless=True)
    assert cmd[:4] == [sys.executable, "-m", "streamlit", "run"]
    assert cmd[4].endswith("dashboard/app.py")
    flags = dict(zip(cmd[5::2], cmd[6::2], strict=True))
    assert flags["--server.address"] == "127.0.0.1" and flags["--server.port"] == "8600"
    assert flags["--server.headless"] == "true"
    assert flags["--theme.primaryColor"].startswith("#")  # the theme goes with the command
    assert cmd_dashboard.streamlit_command(headless=False)[
        cmd_dashboard.streamlit_command(headless=False).index("--server.headless") + 1] == "false"


def _run(monkeypatch, args, returncode=0):
    seen = {}

    def fake_run(cmd, env, check):
        seen["cmd"], seen["env"] = cmd, env
        return subprocess.CompletedProcess(cmd, returncode)

    monkeypatch.setattr(cmd_dashboard.subprocess, "run", fake_run)
    res = CliRunner().invoke(main, args)
    return res, seen


def test_dashboard_passes_the_database_and_options(monkeypatch, tmp_path):
    db = tmp_path / "store.sqlite"
    make_engine(db).dispose()  # the dashboard only reads: the database must exist (#11)
    res, seen = _run(monkeypatch, ["--db", str(db), "dashboard", "--port", "8777", "--no-browser"])
    assert res.exit_code == 0, res.output
    assert seen["env"][ENV_VAR] == resolve_url(str(db))  # HELIAUDIT_DB from --db
    i = seen["cmd"].index("--server.port")
    assert seen["cmd"][i + 1] == "8777"
    assert seen["cmd"][seen["cmd"].index("--server.headless") + 1] == "true"


def test_dashboard_is_headless_even_when_opening_a_browser(monkeypatch, tmp_path):
    # A non-headless Streamlit asks for an e-mail on its first run and exits without a
    # terminal; heliaudit serves headless and opens the browser itself.
    opened = []
    monkeypatch.setattr(cmd_dashboard, "_open_when_up", lambda *a: opened.append(a))
    make_engine(tmp_path / "s.sqlite").dispose()
    res, seen = _run(monkeypatch, ["--db", str(tmp_path / "s.sqlite"), "dashboard"])
    assert res.exit_code == 0, res.output
    assert seen["cmd"][seen["cmd"].index("--server.headless") + 1] == "true"
    for _ in range(50):  # the opener runs in a thread
        if opened:
            break
        time.sleep(0.01)
    assert opened and opened[0][2] == "http://127.0.0.1:8501"


def test_dashboard_reports_a_failed_server(monkeypatch, tmp_path):
    make_engine(tmp_path / "s.sqlite").dispose()
    res, _ = _run(monkeypatch, ["--db", str(tmp_path / "s.sqlite"), "dashboard"], returncode=3)
    assert res.exit_code == 1
    assert "Error: streamlit exited with code 3" in res.output
