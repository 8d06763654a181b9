"""Several `heliaudit compute --worker` processes share a PostgreSQL portfolio (issue #16).

What must hold (db.workqueue): a site is computed by one worker at a time and once for the same
data; a site held by another worker is skipped, not waited for; a killed worker's site is
taken over by the next worker. Counted from the store's own ``computation`` rows.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import sqlalchemy as sa

from db import schema
from db.workqueue import claim_site, claims
from heliaudit.cmd_compute import run_worker
from tests.helpers_store import add_inverter, add_readings, add_sensor, add_site

pytestmark = pytest.mark.postgres
ROOT = Path(__file__).resolve().parents[1]
SITES = ("s1", "s2", "s3", "s4")


def _fill(engine: sa.Engine, sites=SITES, days: int = 3) -> None:
    """Small sites: clear-sky-like days, 15-min data (invented for this bookkeeping test)."""
    ts = np.arange(0, days * 86400, 900, dtype=np.int64) + 1_656_633_600  # 2022-07-01 UTC
    hour = (ts % 86400) / 3600.0
    poa = np.clip(1000 * np.sin(np.pi * (hour - 6) / 12), 0, None)
    with engine.begin() as conn:
        for sid in sites:
            add_site(conn, sid)
            p = add_sensor(conn, sid, "poa1", "poa_wm2", instrument="reference_cell")
            t = add_sensor(conn, sid, "tmod1", "t_module_c")
            add_readings(conn, p, ts, poa)
            add_readings(conn, t, ts, 25 + poa / 40)
            for k in (1, 2):
                inv = add_inverter(conn, sid, f"inv{k}", poa_sensor_id="poa1",
                                   t_module_sensor_id="tmod1")
                add_readings(conn, inv["p_ac_kw"], ts, 0.08 * poa)


def _daily_runs(engine: sa.Engine) -> dict[str, int]:
    c = schema.computation.c
    with engine.connect() as conn:
        rows = conn.execute(sa.select(c.site_id, sa.func.count()).where(
            c.kind == "daily", c.finished_utc.is_not(None)).group_by(c.site_id)).all()
    return dict(rows)


def _quiet(*_a, **_k) -> None:
    pass


def test_busy_site_is_skipped_then_taken(pg_engine):
    _fill(pg_engine)
    with claim_site(pg_engine, "s2", "other") as mine:  # another worker holds s2
        assert mine
        out = run_worker(pg_engine, "w1", echo=_quiet)
        assert out == {"computed": ["s1", "s3", "s4"], "busy": ["s2"], "up_to_date": []}
    out = run_worker(pg_engine, "w1", echo=_quiet)
    assert out == {"computed": ["s2"], "busy": [], "up_to_date": ["s1", "s3", "s4"]}
    assert _daily_runs(pg_engine) == {s: 1 for s in SITES}
    assert {c["site_id"]: c["worker"] for c in claims(pg_engine)} == {
        "s1": "w1", "s2": "w1", "s3": "w1", "s4": "w1"}


def _cli_url(engine: sa.Engine) -> str:
    """The test schema's URL for a child process (search_path as a libpq option)."""
    with engine.connect() as conn:
        schema_name = conn.execute(sa.text("SELECT current_schema()")).scalar()
    return (engine.url.render_as_string(hide_password=False)
            + f"?options=-csearch_path%3D{schema_name}")


def test_killed_worker_is_taken_over(pg_engine):
    _fill(pg_engine, sites=("s1",))
    holder = subprocess.Popen(
        [sys.executable, "-c",
         "import sys, time; from db.engine import make_engine; from db.workqueue import claim_site\n"
         "e = make_engine(sys.argv[1], create=False)\n"
         "with claim_site(e, 's1', 'doomed') as mine:\n"
         "    print(mine, flush=True); time.sleep(120)\n", _cli_url(pg_engine)],
        cwd=ROOT, stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "True"  # it holds the claim
        assert run_worker(pg_engine, "w1", echo=_quiet)["busy"] == ["s1"]
    finally:
        os.kill(holder.pid, signal.SIGKILL)  # kill -9: no cleanup, the server drops the lock
        holder.wait()
    for _ in range(50):  # the server notices the dropped connection at once; allow a moment
        out = run_worker(pg_engine, "w2", echo=_quiet)
        if out["computed"]:
            break
        time.sleep(0.1)
    assert out["computed"] == ["s1"] and _daily_runs(pg_engine) == {"s1": 1}


def test_two_worker_processes_compute_each_site_once(pg_engine):
    _fill(pg_engine)
    cmd = [sys.executable, "-c", "from heliaudit.cli import main; main()",
           "--db", _cli_url(pg_engine), "compute", "--worker"]
    procs = [subprocess.Popen(cmd + ["--worker-id", f"w{k}"], cwd=ROOT, stderr=subprocess.PIPE,
                              text=True) for k in (1, 2)]
    errs = [p.communicate(timeout=600)[1] for p in procs]
    assert [p.returncode for p in procs] == [0, 0], errs
    assert _daily_runs(pg_engine) == {s: 1 for s in SITES}, errs
    assert {c["site_id"] for c in claims(pg_engine) if c["worker"] in ("w1", "w2")} == set(SITES)
