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


@pytest.mark.skipif(not all(f.exists() for f in FILES), reason="demo site not generated")
def test_degradation_recomputed_on_its_schedule(tmp_path):
    """After new files, degradation is kept while younger than DEGRADATION_EVERY_DAYS, then
    recomputed; --full always recomputes (issue #16). Counted from the computation rows."""
    import datetime as dt

    import sqlalchemy as sa

    from db import schema
    from db.engine import make_engine
    from heliaudit.cmd_compute import DEGRADATION_EVERY_DAYS

    url = f"sqlite:///{tmp_path / 'store.sqlite'}"
    cfg = str(DEMO / "quillpond.toml")
    run = CliRunner().invoke
    assert run(main, ["--db", url, "ingest", cfg, str(FILES[0])]).exit_code == 0
    assert run(main, ["--db", url, "compute"]).exit_code == 0  # first: degradation computed
    eng = make_engine(url, create=False)
    c = schema.computation

    def n_degradation() -> int:
        with eng.connect() as conn:
            return conn.execute(sa.select(sa.func.count()).where(
                c.c.kind == "degradation", c.c.finished_utc.is_not(None))).scalar()

    assert n_degradation() == 1
    assert run(main, ["--db", url, "ingest", "--no-compute", cfg, str(FILES[1])]).exit_code == 0
    res = run(main, ["--db", url, "compute"])
    assert res.exit_code == 0 and "degradation rates kept from 0 day(s) ago" in res.output
    assert n_degradation() == 1
    # the stored rates grow old: the next new file brings them up to date
    old = (dt.datetime.now(dt.UTC) - dt.timedelta(days=DEGRADATION_EVERY_DAYS + 1)).isoformat()
    with eng.begin() as conn:
        conn.execute(c.update().where(c.c.kind == "degradation").values(finished_utc=old))
    assert run(main, ["--db", url, "ingest", "--no-compute", cfg, str(FILES[2])]).exit_code == 0
    assert run(main, ["--db", url, "compute"]).exit_code == 0
    assert n_degradation() == 2
    assert run(main, ["--db", url, "compute", "--full"]).exit_code == 0
    assert n_degradation() == 3
    eng.dispose()
