"""``heliaudit ingest`` and ``heliaudit summary`` through click's CliRunner on a real SQLite file."""

import importlib.machinery
import shutil
import sys
import types
from pathlib import Path

import pytest
import sqlalchemy as sa
from click.testing import CliRunner

from db import schema
from db.engine import make_engine
from heliaudit import cmd_ingest
from heliaudit.cli import main

DATA = Path(__file__).resolve().parent / "data"


def run(db, *args):
    return CliRunner().invoke(main, ["--db", str(db), *map(str, args)], catch_exceptions=False)


@pytest.fixture
def site(tmp_path):
    shutil.copy(DATA / "site_basic.toml", tmp_path / "site.toml")
    shutil.copy(DATA / "basic_2023-06-01.csv", tmp_path / "basic_2023-06-01.csv")
    return tmp_path / "site.toml"


def test_ingest_prints_per_file_summary(tmp_path, site):
    r = run(tmp_path / "s.sqlite", "ingest", "--no-compute", site)
    assert r.exit_code == 0, r.output
    assert r.output == (
        f"creating a new database at {tmp_path / 's.sqlite'}\n"  # only ingest creates one
        "basic_2023-06-01.csv: 6 rows: 4 loaded, 0 duplicate, 2 rejected; 2023-06-01 10:00 .. "
        "2023-06-01 11:00 UTC (interval start); interval 900 s; values: 14 new or changed "
        "(0 conflicting), 0 duplicate, 2 rejected\n"
        # the first rejects follow, compiler-style (file:line[:column]: reason)
        "  rejected: basic_2023-06-01.csv:3:INV2_PAC: value 'n/a' is not a number (expected "
        "decimal separator '.', or a missing-value token such as '-', 'NaN', 'nan', '#N/A')\n"
        "  rejected: basic_2023-06-01.csv:4: no readings in this row (every mapped value is "
        "missing)\n"
        "  rejected: basic_2023-06-01.csv:5:Irr: value '-50' (W/m2) is impossible: irradiance "
        "below -10 W/m²\n"
        "  rejected: basic_2023-06-01.csv:6: timestamp '2023-06-01 11:60' does not match "
        "format '%Y-%m-%d %H:%M'\n")
    r = run(tmp_path / "s.sqlite", "ingest", "--no-compute", site, tmp_path / "basic_2023-06-01.csv")
    assert r.exit_code == 0
    assert r.output == ("basic_2023-06-01.csv: unchanged, skipped (same content (SHA-256) as "
                        "batch 1; nothing to do)\n")


def test_failed_file_exits_1_with_error_line(tmp_path, site):
    bad = tmp_path / "basic_bad.csv"
    bad.write_text("Time,INV1_PAC,PAC3\n2023-06-01 12:00,1,2\n")
    r = run(tmp_path / "s.sqlite", "ingest", "--no-compute", site, bad)
    assert r.exit_code == 1
    msg = ("basic_bad.csv:1: columns do not match the site config (unmapped columns: 'PAC3'; "
           "configured but missing: 'INV2_PAC', 'Irr', 'TMod'); map each column in "
           "[[sources.columns]] (header, device, quantity, unit) or list it in ignore_columns")
    assert r.stdout == f"basic_bad.csv: FAILED: {msg}\n"
    assert r.stderr == (f"creating a new database at {tmp_path / 's.sqlite'}\n"
                        f"Error: 1 of 1 files failed: {msg}\n")
    eng = make_engine(tmp_path / "s.sqlite")
    with eng.connect() as conn:
        assert conn.execute(sa.select(schema.ingest_batch.c.status)).scalars().all() == ["failed"]


def test_config_error_is_one_error_naming_the_key(tmp_path):
    cfg = tmp_path / "bad.toml"
    cfg.write_text((DATA / "site_basic.toml").read_text().replace(
        'timezone = "Europe/Madrid"', 'timezone = "Europe/Atlantis"'))
    r = run(tmp_path / "s.sqlite", "ingest", cfg)
    assert r.exit_code == 1
    assert r.stderr == (f"Error: {cfg}: site.timezone: unknown IANA time zone 'Europe/Atlantis' "
                        "(e.g. 'Europe/Madrid')\n")


def test_no_files_found(tmp_path):
    shutil.copy(DATA / "site_basic.toml", tmp_path / "site.toml")
    r = run(tmp_path / "s.sqlite", "ingest", tmp_path / "site.toml")
    assert r.exit_code == 1
    assert r.stderr == f"Error: no export files found in {tmp_path} matching 'basic_*.csv*'\n"


def test_missing_path(tmp_path, site):
    r = run(tmp_path / "s.sqlite", "ingest", site, tmp_path / "nope.csv")
    assert r.exit_code == 1 and r.stderr == f"Error: {tmp_path / 'nope.csv'}: no such file or folder\n"


def test_recompute_called_with_touched_range(tmp_path, site, monkeypatch):
    calls = []
    mod = types.ModuleType("fake_jobs_daily")
    mod.__spec__ = importlib.machinery.ModuleSpec("fake_jobs_daily", None)
    mod.recompute_range = lambda engine, site_id, lo, hi, progress=None: calls.append((site_id, lo, hi))
    monkeypatch.setitem(sys.modules, "fake_jobs_daily", mod)
    monkeypatch.setattr(cmd_ingest, "RECOMPUTE_MODULE", "fake_jobs_daily")
    r = run(tmp_path / "s.sqlite", "ingest", site)
    assert r.exit_code == 0, r.output
    # 2023-06-01 10:00 and 11:00 UTC interval starts
    assert calls == [("testsite", 1685613600, 1685617200)]
    assert r.output.endswith("daily table updated for testsite: 2023-06-01 10:00 .. 2023-06-01 11:00 UTC\n")


def test_recompute_missing_module_is_said(tmp_path, site, monkeypatch):
    monkeypatch.setattr(cmd_ingest, "RECOMPUTE_MODULE", "heliaudit.no_such_module")
    r = run(tmp_path / "s.sqlite", "ingest", site)
    assert r.exit_code == 0
    assert r.output.endswith("daily table not updated: analytics not installed\n")


def test_no_compute_flag_skips_recompute(tmp_path, site):
    r = run(tmp_path / "s.sqlite", "ingest", "--no-compute", site)
    assert "daily table" not in r.output


def test_summary(tmp_path, site):
    run(tmp_path / "s.sqlite", "ingest", "--no-compute", site)
    r = run(tmp_path / "s.sqlite", "summary")
    assert r.exit_code == 0
    lines = r.output.splitlines()
    assert lines[0] == "testsite (Test site)"
    assert lines[1] == "  devices:    2 inverters, 2 sensors, 4 channels with data"
    assert lines[2] == "  range:      2023-06-01 10:00 .. 2023-06-01 11:00 UTC, interval 900 s"
    # 14 readings over 4 channels x 5 intervals (10:00..11:00 every 15 min) = 70 %
    assert lines[3] == "  readings:   14, completeness 70.0 %"
    assert lines[4].startswith("  batches:    1 loaded, 0 unchanged, 0 failed; last ")
    r = run(tmp_path / "s.sqlite", "summary", "--site", "elsewhere")
    assert r.exit_code == 1
    assert r.stderr == "Error: no site 'elsewhere' in the database; known: testsite\n"


def test_summary_empty_database(tmp_path):
    make_engine(tmp_path / "s.sqlite").dispose()  # an existing, empty database
    r = run(tmp_path / "s.sqlite", "summary")
    assert r.exit_code == 0 and r.output == "no sites loaded yet; load one with `heliaudit ingest CONFIG`\n"


@pytest.mark.parametrize("args", [["summary"], ["check", "--site", "quillpond"],
                                  ["results", "--site", "quillpond"],
                                  ["compute"], ["dashboard", "--no-browser"]])
def test_read_commands_refuse_a_missing_database(tmp_path, args):
    # a mistyped --db must not create an empty store and report "no sites loaded yet" (#11)
    missing = tmp_path / "typo" / "heliaudit.sqlit"
    r = CliRunner().invoke(main, ["--db", str(missing), *args])
    assert r.exit_code != 0
    assert f"no database at {missing}" in r.output
    assert "Only `heliaudit ingest` creates a database" in r.output
    assert not missing.exists() and not missing.parent.exists()


def test_ingest_creates_the_database_and_says_so(tmp_path, site):
    db = tmp_path / "new.sqlite"
    r = run(db, "ingest", "--no-compute", site)
    assert r.exit_code == 0 and db.exists()
    assert r.output.splitlines()[0] == f"creating a new database at {db}"
    again = run(db, "ingest", "--no-compute", site)
    assert "creating a new database" not in again.output  # only when it is new
    assert run(db, "summary").exit_code == 0
