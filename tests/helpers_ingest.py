"""Shared pieces of the ingest crash and concurrency tests: a large invented export for the
``tests/data/site_basic.toml`` site and a child process that ingests it and can be killed
mid-file (inside its open transaction)."""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np

#: ``python -c KILLABLE_INGEST DB CONFIG FILE slow|- CHUNK_ROWS``: prints MIDFILE after three
#: chunks are written (and sleeps there with ``slow``, to be killed), then FINISHED <status>.
KILLABLE_INGEST = textwrap.dedent("""
    import sys, time
    from db.engine import make_engine
    from ingest.config import load_site_config
    from ingest.load import ingest_file
    eng = make_engine(sys.argv[1])
    cfg = load_site_config(sys.argv[2])
    done = [0]
    def progress(n):
        done[0] += 1
        if done[0] == 3:  # three chunks written inside the open transaction
            print("MIDFILE", flush=True)
            if sys.argv[4] == "slow":
                time.sleep(60)  # a slow writer: killed here, inside its open transaction
    res = ingest_file(eng, cfg, cfg.sources[0], sys.argv[3], progress=progress,
                      chunk_rows=int(sys.argv[5]))
    print("FINISHED", res.status, flush=True)
""")


def write_basic_export(path: Path, start: str, n: int, seed: int) -> None:
    """``n`` 15-min rows from ``start`` of the basic site's columns, invented values 0-90."""
    t0 = np.datetime64(start)
    ts = (t0 + np.arange(n) * np.timedelta64(15, "m")).astype(str)
    vals = np.round(np.random.default_rng(seed).uniform(0, 90, size=(n, 4)), 2)
    path.write_text("Time,INV1_PAC,INV2_PAC,Irr,TMod\n" + "\n".join(
        f"{t[:16].replace('T', ' ')},{a},{b},{c},{d}" for t, (a, b, c, d)
        in zip(ts, vals.tolist(), strict=True)) + "\n")
