"""A process killed mid-file (SIGKILL) leaves the store exactly as it was before that file.

SQLite's rollback guarantee for an uncommitted transaction (https://sqlite.org/atomiccommit.html)
is what we rely on; the test checks our code keeps a whole file inside one transaction.
"""

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
import sqlalchemy as sa

from db import schema
from db.engine import make_engine
from ingest.config import load_site_config
from ingest.load import ingest_paths
from tests.helpers_ingest import KILLABLE_INGEST, write_basic_export
from tests.helpers_store import stored_readings

DATA = Path(__file__).resolve().parent / "data"
REPO = Path(__file__).resolve().parents[1]

def counts(engine):
    with engine.connect() as conn:
        df = stored_readings(conn)
        return (len(df),
                conn.execute(sa.select(sa.func.count()).select_from(schema.ingest_batch)).scalar(),
                float(df.value.sum()) if len(df) else None)


@pytest.mark.slow
def test_sigkill_mid_file_leaves_store_as_before(tmp_path):
    db = tmp_path / "store.sqlite"
    engine = make_engine(db)
    cfg = load_site_config(DATA / "site_basic.toml")
    ingest_paths(engine, cfg, [DATA / "basic_2023-06-01.csv"])
    before = counts(engine)
    engine.dispose()
    # a file of 60 000 15-min rows (about 1.7 years) x 4 columns, read in chunks of 5000 rows
    n = 60_000
    big = tmp_path / "basic_big.csv"
    write_basic_export(big, "2024-01-01T00:00", n, 1)
    env = dict(os.environ, PYTHONPATH=str(REPO))
    proc = subprocess.Popen([sys.executable, "-c", KILLABLE_INGEST, str(db), str(DATA / "site_basic.toml"),
                             str(big), "-", "5000"],
                            stdout=subprocess.PIPE, text=True, env=env)
    deadline = time.time() + 60
    line = ""
    while time.time() < deadline:
        line = proc.stdout.readline()
        if line.startswith(("MIDFILE", "FINISHED")) or not line:
            break
    assert line.strip() == "MIDFILE", f"child did not reach the middle of the file: {line!r}"
    assert proc.poll() is None
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait(timeout=10)
    assert proc.returncode == -signal.SIGKILL
    engine = make_engine(db)
    assert counts(engine) == before
    with engine.connect() as conn:
        assert conn.exec_driver_sql("PRAGMA integrity_check").scalar() == "ok"
    # and the file loads completely afterwards
    (res,) = ingest_paths(engine, cfg, [big])
    assert res.status == "loaded" and res.counts["rows_loaded"] == n
    engine.dispose()
