"""``heliaudit dashboard``: start the browser dashboard (Streamlit) against the database."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import threading
import time
import webbrowser
from pathlib import Path

import click

from db.engine import ENV_VAR, display_url
from heliaudit.common import require_existing_db

APP = Path(__file__).resolve().parents[1] / "dashboard" / "app.py"


def streamlit_command(port: int = 8501, host: str = "127.0.0.1",
                      headless: bool = True) -> list[str]:
    """The ``streamlit run`` command line for the dashboard, theme flags included."""
    from dashboard.theme import STREAMLIT_THEME

    cmd = [sys.executable, "-m", "streamlit", "run", str(APP),
           "--server.address", host, "--server.port", str(port),
           "--server.headless", "true" if headless else "false",
           "--browser.gatherUsageStats", "false",
           "--client.toolbarMode", "minimal"]
    for key, value in STREAMLIT_THEME.items():
        cmd += [f"--{key}", value]
    return cmd


def _open_when_up(host: str, port: int, address: str, timeout_s: float = 60.0) -> None:
    """Open ``address`` in the user's browser once the server accepts connections."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        try:
            with socket.create_connection((host, port), timeout=1.0):
                webbrowser.open(address)
                return
        except OSError:
            time.sleep(0.5)


def _die_with_parent() -> None:
    """In the child before exec: ask Linux to send SIGTERM when the parent dies (prctl
    PR_SET_PDEATHSIG), so a killed ``heliaudit dashboard`` never leaves Streamlit serving
    the port. Elsewhere a no-op (the parent's signal handlers still stop the child)."""
    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, int(signal.SIGTERM), 0, 0, 0)  # 1 = PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        pass


def _serve(cmd: list[str], env: dict) -> int:
    """Run the server until it exits; stop it when this process is interrupted or
    terminated (Ctrl-C, SIGTERM, SIGHUP) or dies. Returns the server's exit code."""
    preexec = _die_with_parent if sys.platform.startswith("linux") else None
    proc = subprocess.Popen(cmd, env=env, preexec_fn=preexec)  # noqa: PLW1509

    def _stop(signum, _frame):
        raise KeyboardInterrupt

    old = {}
    for sig in (signal.SIGTERM, getattr(signal, "SIGHUP", None)):
        if sig is not None:
            try:
                old[sig] = signal.signal(sig, _stop)
            except ValueError:  # not the main thread (tests): rely on the death signal
                pass
    try:
        return proc.wait()
    except KeyboardInterrupt:
        return 130
    finally:
        if proc.poll() is None:
            proc.terminate()
            try:
                proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait()
        for sig, handler in old.items():
            signal.signal(sig, handler)


@click.command("dashboard")
@click.option("--port", default=8501, show_default=True, type=click.IntRange(1, 65535),
              help="TCP port to serve on.")
@click.option("--host", default="127.0.0.1", show_default=True,
              help="Address to listen on (0.0.0.0 for every interface: only behind a proxy "
                   "with authentication, the dashboard has no login).")
@click.option("--no-browser", is_flag=True, help="Do not open a browser window.")
@click.pass_context
def dashboard(ctx: click.Context, port: int, host: str, no_browser: bool) -> None:
    """Open the browser dashboard: weekly check, trends, degradation, drill-down, data quality.

    Serves the dashboard on http://HOST:PORT against the database of --db (or
    $HELIAUDIT_DB) until interrupted with Ctrl-C.

    \b
    Example:
        heliaudit --db heliaudit.sqlite dashboard --port 8502 --no-browser
    """
    url = require_existing_db((ctx.find_root().obj or {}).get("db_url"))
    env = dict(os.environ, **{ENV_VAR: url})
    # Always headless: a non-headless first run asks for an e-mail address on stdin and
    # exits when there is none (seen from `heliaudit demo`); we open the browser ourselves.
    cmd = streamlit_command(port, host, headless=True)
    address = f"http://{host}:{port}"
    click.echo(f"heliaudit dashboard on {address} (database {display_url(url)}); Ctrl-C stops it",
               err=True)
    if not no_browser:
        threading.Thread(target=_open_when_up, args=(host, port, address), daemon=True).start()
    try:
        code = _serve(cmd, env)
    except OSError as exc:
        raise click.ClickException(f"cannot start streamlit: {exc}") from None
    if code not in (0, -2, -15, 130):
        raise click.ClickException(f"streamlit exited with code {code}")


COMMANDS = [dashboard]
