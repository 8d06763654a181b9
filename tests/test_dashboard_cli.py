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

    def fake_serve(cmd, env):
        seen["cmd"], seen["env"] = cmd, env
        return returncode

    monkeypatch.setattr(cmd_dashboard, "_serve", fake_serve)
    for a in args:  # the store must exist (a missing SQLite path is refused)
        if a.endswith(".sqlite"):
            make_engine(a).dispose()
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


def test_a_missing_database_is_refused(tmp_path):
    res = CliRunner().invoke(main, ["--db", str(tmp_path / "nothing.sqlite"), "dashboard",
                                    "--no-browser"])
    assert res.exit_code == 1
    assert "Error: no database at" in res.output
    assert not (tmp_path / "nothing.sqlite").exists()  # and no empty file is left behind


def _port_answers(port: int) -> bool:
    import socket

    try:
        with socket.create_connection(("127.0.0.1", port), timeout=0.5):
            return True
    except OSError:
        return False


def test_the_server_ends_with_its_parent(tmp_path):
    """Killing `heliaudit dashboard` (SIGKILL: no handler runs) stops Streamlit too."""
    import os
    import signal
    import socket

    db = tmp_path / "store.sqlite"
    make_engine(db).dispose()
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    parent = subprocess.Popen([sys.executable, "-c", "from heliaudit.cli import main; main()",
                               "--db", str(db),
                               "dashboard", "--no-browser", "--port", str(port)],
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        t0 = time.monotonic()
        while not _port_answers(port):
            assert parent.poll() is None, "heliaudit dashboard exited early"
            assert time.monotonic() - t0 < 90, "the server did not start"
            time.sleep(0.3)
        os.kill(parent.pid, signal.SIGKILL)
        parent.wait()
        t0 = time.monotonic()
        while _port_answers(port) and time.monotonic() - t0 < 20:
            time.sleep(0.3)
        assert not _port_answers(port), "Streamlit kept serving after its parent died"
    finally:
        if parent.poll() is None:
            parent.kill()
