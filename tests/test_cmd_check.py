"""`heliaudit check`: the weekly check in the terminal, against the daily table it summarises.

The store is the invented 6-inverter demo of `dashboard_store` (conftest), built with the real
ingest and compute. Expected figures are recomputed here from db.daily.daily_table as ratios of
sums over the week's valid days (IEC 61724-1: a period PR is sum E_out / sum E_ref, never a mean
of daily ratios).
"""

import datetime as dt

import pandas as pd
import pytest
from click.testing import CliRunner

from db.daily import daily_table
from db.engine import make_engine
from heliaudit.cli import main


def _week_pr_stc(engine, site_id, w0, w1) -> pd.Series:
    d = daily_table(engine, site_id, start=w0, end=w1)
    v = d[d["day_valid"]]
    g = v.groupby("device_id")
    return g["e_ac_pr_kwh"].sum() / g["e_ref_stc_kwh"].sum()


def test_check_prints_week_pr_stc_and_peers(dashboard_store):
    url, site = dashboard_store["url"], dashboard_store["site_id"]
    engine = make_engine(url)
    last = daily_table(engine, site)["day"].max()
    res = CliRunner().invoke(main, ["--db", url, "check", "--site", site])
    assert res.exit_code == 0, res.output
    w0 = last - dt.timedelta(days=6)
    assert f"{w0} .. {last}" in res.output
    pr = _week_pr_stc(engine, site, w0, last)
    peers = pr.median()  # one peer group: the site (config default)
    weekly = res.output.split("Flags in the week")[0].splitlines()
    lines = {ln.split()[0]: ln for ln in weekly if ln.startswith("INV-")}
    for dev, val in pr.items():
        cols = lines[dev].split()
        assert cols[3] == f"{val:.3f}"  # PR_STC column
        assert cols[5] == f"{100 * (val / peers - 1):+.1f}"  # vs peers [%]
    # the largest deficit is listed first and marked when more than 3 % below the peers
    worst = (pr / peers - 1).idxmin()
    first_row = next(ln for ln in weekly if ln.startswith("INV-"))
    assert first_row.startswith(worst)
    assert ("<- below peers" in first_row) == bool(pr[worst] / peers - 1 < -0.03)
    # degradation section and the cautions are printed
    assert "year-on-year" in res.output and "clear-sky" in res.output
    assert "energised whenever lit" in res.output
    assert "warranty claim follows its contract" in res.output


def test_check_week_ending_and_errors(dashboard_store):
    url, site = dashboard_store["url"], dashboard_store["site_id"]
    res = CliRunner().invoke(main, ["--db", url, "check", "--site", site,
                                    "--week-ending", "2023-06-30"])
    assert res.exit_code == 0, res.output
    assert "2023-06-24 .. 2023-06-30" in res.output
    res = CliRunner().invoke(main, ["--db", url, "check", "--site", "nope"])
    assert res.exit_code == 1
    assert "Error: no site 'nope' in the database" in res.output


@pytest.mark.parametrize("args", [["demo", "--help"], ["check", "--help"]])
def test_help_has_example(args):
    res = CliRunner().invoke(main, args)
    assert res.exit_code == 0 and "Example:" in res.output
