"""Benchmark: a small portfolio through the whole weekly cycle, on SQLite and PostgreSQL (#16).

Generates a portfolio with the invented demo generator (``heliaudit demo-data`` physics:
pvlib clear sky, Sandia temperatures, PVWatts power, injected faults), one seed per site, then
for each store, every step through the real command line in child processes:

1. ``heliaudit ingest --no-compute`` of every site's history (all months but the last);
2. one raw read of every reading (``db.timeseries.read_channel``; the reference of the compute
   ratios);
3. ``heliaudit compute --full`` of the whole portfolio (PostgreSQL: with 1, then 2
   ``compute --worker --full`` processes);
4. one more week for every site (``ingest --no-compute``), then the incremental
   ``heliaudit compute`` (PostgreSQL: week 1 with 1 worker, week 2 with 2 workers);
5. the plain way, in the same run: ``pandas.read_csv`` of the same history files, ``melt``
   and ``DataFrame.to_sql`` into SQLite.

Prints readings/s, bytes per reading on disk, incremental / full, full / raw read and
ingest / plain, and extrapolates to 50 sites x 40 inverters x 10 years.

The issue's size (10 sites x 20 inverters x 3 years of 5-minute data, ~70 M readings) takes
hours on a shared 2-core machine; ``--quick`` runs 3 sites x 6 inverters x 1 year (plus a
month for the new weeks), and any size can be given. Run by hand, never in CI:

    python tests/bench/bench_portfolio.py --quick
    python tests/bench/bench_portfolio.py --sites 10 --inverters 20 --years 3
    python tests/bench/bench_portfolio.py --quick --pg postgresql+psycopg://postgres@127.0.0.1:5432/test
"""

from __future__ import annotations

import argparse
import datetime as dt
import gzip
import os
import subprocess
import sys
import tempfile
import time
import uuid
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO))

import pandas as pd  # noqa: E402
import sqlalchemy as sa  # noqa: E402

from heliaudit import demo_generator as gen  # noqa: E402

HEADER_LINES = 4  # the demo exports: two comment lines, column names, units
WEEK_LINES_PER_DAY = {5: 288, 10: 144, 15: 96, 30: 48, 60: 24}


def generate(out: Path, n_sites: int, n_inv: int, years: float, interval_min: int) -> list[dict]:
    """Every site's config, history files and two one-week files (setup, not timed)."""
    months = max(1, round(years * 12))
    sites = []
    for k in range(n_sites):
        sid = f"pf{k + 1:02d}"
        sc = gen.quillpond_scenario(n_inverters=n_inv, start=dt.date(2022, 1, 1),
                                    months=months + 1, interval_min=interval_min,
                                    seed=1000 + k, site_id=sid)
        d = out / sid
        gen.write_site(sc, d)
        files = sorted((d / "exports").glob("*.csv.gz"))
        last = files[-1]
        lines = gzip.open(last, "rt", encoding="latin-1").read().splitlines()
        head, body = lines[:HEADER_LINES], lines[HEADER_LINES:]
        n = 7 * WEEK_LINES_PER_DAY[interval_min]
        weeks = []
        for w in range(2):
            p = d / f"{sid}_week{w + 1}.csv.gz"
            with gzip.open(p, "wt", encoding="latin-1") as f:
                f.write("\n".join(head + body[w * n:(w + 1) * n]) + "\n")
            weeks.append(p)
        last.unlink()
        sites.append({"id": sid, "config": d / f"{sid}.toml", "history": files[:-1],
                      "weeks": weeks})
    return sites


def cli(url: str, *args: str, env: dict | None = None) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-c", "from heliaudit.cli import main; main()",
                             "--db", url, *args],
                            cwd=REPO, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                            text=True, env={**os.environ, **(env or {})})


def run(procs: list[subprocess.Popen]) -> float:
    """Wait for child processes started together; their wall time."""
    t0 = time.perf_counter()
    for p in procs:
        _out, err = p.communicate()
        if p.returncode != 0:
            raise SystemExit(f"child failed ({p.args}):\n{err[-2000:]}")
    return time.perf_counter() - t0


def timed(url: str, *args: str, n: int = 1) -> float:
    t0 = time.perf_counter()
    run([cli(url, *args) for _ in range(n)])
    return time.perf_counter() - t0


def ingest_all(url: str, sites: list[dict], key: str, week: int = 0) -> float:
    t0 = time.perf_counter()
    for s in sites:
        files = s["history"] if key == "history" else [s["weeks"][week]]
        run([cli(url, "ingest", "--no-compute", str(s["config"]), *map(str, files))])
    return time.perf_counter() - t0


def count_and_raw_read(url: str, connect_args: dict) -> tuple[int, float]:
    """Readings in the store and the time of one raw read of all of them."""
    from db import timeseries as dts

    eng = sa.create_engine(url, connect_args=connect_args)
    with eng.connect() as conn:
        sites = [r[0] for r in conn.execute(sa.text("SELECT site_id FROM site"))]
        chans = [ch for s in sites for ch in dts.site_channels(conn, s).values()]
        chans += [ch for s in sites for ch in dts.input_channels(conn, s).values()]
    t0 = time.perf_counter()
    n = 0
    with eng.connect() as conn:
        for ch in chans:
            n += dts.read_channel(conn, ch, with_interval=True)[0].size
    took = time.perf_counter() - t0
    eng.dispose()
    return n, took


def sqlite_bytes(path: Path) -> int:
    con = __import__("sqlite3").connect(path)
    con.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    con.close()
    return sum(p.stat().st_size for p in path.parent.glob(path.name + "*"))


def pg_bytes(url: str, schema: str) -> int:
    eng = sa.create_engine(url)
    with eng.connect() as conn:
        n = conn.execute(sa.text(
            "SELECT COALESCE(SUM(pg_total_relation_size(c.oid)), 0) FROM pg_class c "
            "JOIN pg_namespace n ON n.oid = c.relnamespace WHERE n.nspname = :s "
            "AND c.relkind IN ('r', 'm')"), {"s": schema}).scalar()
    eng.dispose()
    return int(n)


def plain(sites: list[dict], path: Path) -> tuple[float, int]:
    """pandas read_csv + melt + to_sql of the history files (the plain way)."""
    eng = sa.create_engine(f"sqlite:///{path}")
    t0 = time.perf_counter()
    n = 0
    for s in sites:
        for f in s["history"]:
            df = pd.read_csv(f, sep=";", decimal=",", skiprows=[0, 1, 3], header=0,
                             encoding="latin-1")
            long = df.melt(id_vars=df.columns[0], var_name="channel", value_name="value")
            long = long.dropna(subset=["value"])
            long.to_sql("reading", eng, if_exists="append", index=False, chunksize=200_000)
            n += len(long)
    took = time.perf_counter() - t0
    eng.dispose()
    return took, n


def cycle(label: str, url: str, sites: list[dict], *, pg_schema: str | None,
          sqlite_path: Path | None, workers: bool) -> dict:
    print(f"\n== {label}")
    r: dict = {}
    r["ingest_s"] = ingest_all(url, sites, "history")
    connect_args = {} if pg_schema is None else {"options": f"-csearch_path={pg_schema}"}
    base = url.split("?")[0]
    r["readings"], r["raw_read_s"] = count_and_raw_read(base, connect_args)
    r["bytes"] = sqlite_bytes(sqlite_path) if sqlite_path else pg_bytes(base, pg_schema)
    print(f"ingest: {r['readings']:,} readings in {r['ingest_s']:.1f} s "
          f"({r['readings'] / r['ingest_s'] / 1e3:.0f} k readings/s, CLI per site incl. imports); "
          f"{r['bytes'] / r['readings']:.1f} bytes per reading on disk (all tables and indexes)")
    print(f"raw read: {r['raw_read_s']:.1f} s ({r['readings'] / r['raw_read_s'] / 1e6:.2f} M "
          "readings/s)")
    r["full_s"] = timed(url, "compute", "--full")
    print(f"full compute (one process): {r['full_s']:.1f} s = "
          f"{r['full_s'] / r['raw_read_s']:.1f} x one raw read; "
          f"{r['readings'] / r['full_s'] / 1e3:.0f} k readings/s")
    if workers:
        r["full_w1_s"] = timed(url, "compute", "--worker", "--full")
        r["full_w2_s"] = timed(url, "compute", "--worker", "--full", n=2)
        print(f"full compute with --worker: 1 worker {r['full_w1_s']:.1f} s, 2 workers "
              f"{r['full_w2_s']:.1f} s (speed-up {r['full_w1_s'] / r['full_w2_s']:.2f} on "
              f"{os.cpu_count()} shared CPUs)")
    r["week_ingest_s"] = ingest_all(url, sites, "week", 0)
    r["inc_s"] = timed(url, "compute", *(["--worker"] if workers else []))
    print(f"one more week per site: ingest {r['week_ingest_s']:.1f} s, incremental compute "
          f"{r['inc_s']:.1f} s{' (1 worker)' if workers else ''} = "
          f"{100 * r['inc_s'] / r['full_s']:.1f} % of the full compute")
    if workers:
        ingest_all(url, sites, "week", 1)
        r["inc_w2_s"] = timed(url, "compute", "--worker", n=2)
        print(f"second week, 2 workers: incremental compute {r['inc_w2_s']:.1f} s")
    r.update(portfolio_page(url))
    return r


def portfolio_page(url: str) -> dict:
    """The dashboard's portfolio page for the last week (every site from one store), cold
    (caches cleared) and warm, against reading the same daily rows with ``pd.read_sql``."""
    import logging

    import streamlit as st

    logging.getLogger("streamlit.runtime.caching.cache_data_api").setLevel(logging.ERROR)
    from dashboard import data

    end = data.portfolio_end(url)
    st.cache_data.clear()
    t0 = time.perf_counter()
    table = data.portfolio_week(url, end)
    cold = time.perf_counter() - t0
    t0 = time.perf_counter()
    data.portfolio_week(url, end)
    warm = time.perf_counter() - t0
    t0_day = end - dt.timedelta(days=7 * (data.TRAILING_WEEKS + 1) - 1)
    eng = sa.create_engine(url)
    t0 = time.perf_counter()
    base = pd.read_sql(sa.text("SELECT * FROM daily_inverter WHERE day >= :a AND day <= :b"),
                       eng, params={"a": t0_day, "b": end})
    tb = time.perf_counter() - t0
    eng.dispose()
    print(f"portfolio page ({len(table)} sites, week ending {end}): cold {cold:.2f} s, warm "
          f"{warm:.3f} s; baseline pd.read_sql of the same {len(base):,} daily rows "
          f"{tb:.3f} s (cold / baseline {cold / tb:.1f})")
    return {"portfolio_cold_s": cold, "portfolio_warm_s": warm, "portfolio_base_s": tb}


def extrapolate(r: dict, n_sites: int, n_inv: int, years: float, label: str) -> None:
    per_inv_year = r["readings"] / (n_sites * n_inv * years)
    big = per_inv_year * 50 * 40 * 10
    full_h = big / (r["readings"] / r["full_s"]) / 3600
    print(f"\n{label}, 50 sites x 40 inverters x 10 years at these rates: {big / 1e9:.1f} G "
          f"readings, {big * r['bytes'] / r['readings'] / 1e9:.0f} GB on disk, ingest "
          f"{big / (r['readings'] / r['ingest_s']) / 3600:.1f} h, full compute {full_h:.1f} h "
          "in one process (divide by the workers the server's cores and disks can feed), "
          f"weekly incremental about {r['inc_s'] / (n_sites * n_inv) * 2000 / 60:.0f} min "
          "(scaled by inverter count; the whole-history daily detectors grow with the years)")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sites", type=int, default=10)
    ap.add_argument("--inverters", type=int, default=20)
    ap.add_argument("--years", type=float, default=3.0)
    ap.add_argument("--interval-min", type=int, default=5, choices=sorted(WEEK_LINES_PER_DAY))
    ap.add_argument("--quick", action="store_true", help="3 sites x 6 inverters x 1 year")
    ap.add_argument("--pg", metavar="URL", default=None, help="also run on this PostgreSQL")
    a = ap.parse_args()
    if a.quick:
        a.sites, a.inverters, a.years = 3, 6, 1.0
    print(f"portfolio: {a.sites} sites x {a.inverters} inverters x {a.years:g} years of "
          f"{a.interval_min}-minute data; load average {os.getloadavg()[0]:.1f} on "
          f"{os.cpu_count()} CPUs (shared machine: compare within this run)")
    with tempfile.TemporaryDirectory(prefix="heliaudit_portfolio_") as tmp:
        tmp = Path(tmp)
        t0 = time.perf_counter()
        sites = generate(tmp / "data", a.sites, a.inverters, a.years, a.interval_min)
        print(f"setup: generated in {time.perf_counter() - t0:.0f} s [not timed]")
        db = tmp / "portfolio.sqlite"
        res = {"sqlite": cycle("SQLite", f"sqlite:///{db}", sites, pg_schema=None,
                               sqlite_path=db, workers=False)}
        plain_s, plain_n = plain(sites, tmp / "plain.sqlite")
        print(f"plain way (read_csv + melt + to_sql): {plain_n:,} values in {plain_s:.1f} s "
              f"({plain_n / plain_s / 1e3:.0f} k/s); ingest / plain time "
              f"{res['sqlite']['ingest_s'] / plain_s:.2f} (per reading: "
              f"{(res['sqlite']['ingest_s'] / res['sqlite']['readings']) / (plain_s / plain_n):.2f})")
        if a.pg:
            schema = f"bench_{uuid.uuid4().hex[:8]}"
            admin = sa.create_engine(a.pg)
            with admin.begin() as conn:
                conn.execute(sa.text(f'CREATE SCHEMA "{schema}"'))
            try:
                url = f"{a.pg}?options=-csearch_path%3D{schema}"
                res["pg"] = cycle("PostgreSQL", url, sites, pg_schema=schema, sqlite_path=None,
                                  workers=True)
                print(f"PostgreSQL / SQLite: ingest {res['pg']['ingest_s'] / res['sqlite']['ingest_s']:.2f}, "
                      f"full compute {res['pg']['full_s'] / res['sqlite']['full_s']:.2f}")
            finally:
                with admin.begin() as conn:
                    conn.execute(sa.text(f'DROP SCHEMA "{schema}" CASCADE'))
                admin.dispose()
        for k, r in res.items():
            extrapolate(r, a.sites, a.inverters, a.years, k)


if __name__ == "__main__":
    main()
