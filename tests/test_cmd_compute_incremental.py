"""`heliaudit compute` after `heliaudit ingest` recomputes only what new files touched.

Known-answer test of our own bookkeeping on the invented demo site: the daily computation
records the newest ingest batch it saw, and `compute` recomputes only batches after it.
"""

from pathlib import Path

import pytest
from click.testing import CliRunner

from heliaudit.cli import main

DEMO = Path(__file__).resolve().parents[1] / "sample_scada" / "quillpond"
FILES = [DEMO / "exports" / f"quillpond_2022-0{m}.csv.gz" for m in (1, 2, 3)]


@pytest.mark.skipif(not all(f.exists() for f in FILES), reason="demo site not generated")
def test_compute_after_ingest_touches_only_new_batches(tmp_path):
    url = f"sqlite:///{tmp_path / 'store.sqlite'}"
    cfg = str(DEMO / "quillpond.toml")
    run = CliRunner().invoke
    res = run(main, ["--db", url, "ingest", cfg, str(FILES[0]), str(FILES[1])])
    assert res.exit_code == 0, res.output
    assert "daily table updated for quillpond" in res.output
    # ingest already recomputed the days it touched: nothing new for the daily step
    res = run(main, ["--db", url, "compute", "--site", "quillpond"])
    assert res.exit_code == 0, res.output
    assert "daily table up to date" in res.output
    # one more month: ingest with --no-compute, then compute picks up exactly that file
    res = run(main, ["--db", url, "ingest", "--no-compute", cfg, str(FILES[2])])
    assert res.exit_code == 0, res.output
    res = run(main, ["--db", url, "compute", "--site", "quillpond"])
    assert res.exit_code == 0, res.output
    # March 2022 in local standard time (UTC+1): the file's first interval starts on
    # 2022-02-28 23:00 UTC = 2022-03-01 00:00 local standard time; 14 inverters x 31 days
    assert "daily rows 434 (14 inverters, days 2022-03-01..2022-03-31" in res.output
