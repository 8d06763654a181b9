"""Benchmark: ingest of a wide CSV, ours against the plain way, in the same run.

Generates (numpy, its own simple generator) one year of 5-minute data for 100 inverters plus
5 sensor columns (~11 M readings) with a matching site config in a temp dir, then, each in a
fresh child process (peak RSS per step is the child's own VmHWM):

* ``ours``: ``ingest.load.ingest_paths`` into a fresh SQLite file (end to end: config,
  registration, parse, checks, write, commit);
* ``ours-overlap``: the same rows again from a changed copy of the file (one value per row
  changed), into that store: the compare-with-stored and upsert path;
* ``plain``: ``pandas.read_csv`` of the whole file, ``melt`` to readings, ``DataFrame.to_sql``
  (``chunksize=200_000``) into a fresh SQLite file with the same schema;
* ``limit``: the minimal best-case Python + SQLite loader (C-parser ``read_csv`` to float64,
  ``executemany`` into a ``WITHOUT ROWID`` table keyed (channel, ts), one transaction), the
  limit issue #16 measures ingest against (target >= 0.85 of its readings/s);

and prints readings/s, peak RSS and the ratio. ``--pg URL`` adds ours on PostgreSQL (day rows
by ``COPY ... (FORMAT BINARY)``), the bytes per reading it stored, a raw ``COPY`` of the same
readings one row each into a ``(channel_id, ts_s)``-keyed table (the baseline of issue #16:
only the COPY and its commit are timed) and a psycopg ``executemany`` upsert for comparison.

Run by hand, never in CI:  python tests/bench/bench_ingest.py [--inverters 100] [--days 365]
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[2]
SENSORS = [("POA1", "poa_wm2", "Irr_POA"), ("GHI1", "ghi_wm2", "Irr_GHI"),
           ("TMOD1", "t_module_c", "T_mod"), ("TAMB1", "t_amb_c", "T_amb"), ("WIND1", "wind_ms", "Wind")]


def write_config(d: Path, n_inv: int) -> Path:
    lines = ["format_version = 1", "", "[site]", 'id = "bench"', 'name = "Benchmark site"',
             'timezone = "UTC"', "latitude_deg = 40.0", "longitude_deg = -3.7", "altitude_m = 600",
             "tilt_deg = 30", "azimuth_deg = 180", ""]
    for sid, q, _h in SENSORS:
        lines += ["[[sensors]]", f'id = "{sid}"', f'quantity = "{q}"']
        if q in ("poa_wm2", "ghi_wm2"):
            lines.append('instrument = "thermopile_pyranometer"')
        lines.append("")
    for i in range(n_inv):
        lines += ["[[inverters]]", f'id = "INV{i + 1:03d}"', "p_dc_kwp = 120.0", "p_ac_max_kw = 100.0",
                  "gamma_pmp_per_c = -0.0037", 'mounting = "open_rack_glass_polymer"',
                  'poa_sensor = "POA1"', 't_module_sensor = "TMOD1"', "commissioned = 2022-01-01", ""]
    lines += ["[[sources]]", 'name = "scada"', 'pattern = "bench_*.csv"',
              'timestamp = { column = "Time", format = "%Y-%m-%d %H:%M", zone = "UTC", label = "end" }',
              "columns = [", '  { header = "{inverter}_PAC", quantity = "p_ac_kw", unit = "kW" },']
    for sid, q, h in SENSORS:
        lines.append(f'  {{ header = "{h}", device = "{sid}", quantity = "{q}" }},')
    lines += ["]", ""]
    p = d / "bench.toml"
    p.write_text("\n".join(lines))
    return p


def write_csv(path: Path, n_inv: int, days: int, bump: float = 0.0) -> int:
    """Wide CSV of 5-min rows; returns the number of readings (non-missing values)."""
    import pandas as pd

    rng = np.random.default_rng(7)
    n = days * 288
    t = np.datetime64("2023-01-01T00:05") + np.arange(n) * np.timedelta64(5, "m")
    hour = (np.arange(n) % 288) / 12.0
    doy = np.arange(n) / 288.0
    sun = np.clip(np.sin((hour - 6) / 12 * np.pi), 0, None) * (0.75 + 0.25 * np.cos((doy - 172) / 365 * 2 * np.pi))
    poa = np.round(1000 * sun * rng.uniform(0.7, 1.0, n), 1)
    cols = {"Time": pd.Series(t).dt.strftime("%Y-%m-%d %H:%M")}
    scale = rng.uniform(0.9, 1.0, n_inv)
    for i in range(n_inv):
        cols[f"INV{i + 1:03d}_PAC"] = np.round(poa * 0.1 * scale[i] + bump, 2)
    cols["Irr_POA"] = poa
    cols["Irr_GHI"] = np.round(poa * 0.85, 1)
    cols["T_mod"] = np.round(10 + 30 * sun, 2)
    cols["T_amb"] = np.round(8 + 15 * sun, 2)
    cols["Wind"] = np.round(rng.uniform(0, 8, n), 2)
    df = pd.DataFrame(cols)
    df.to_csv(path, index=False, chunksize=20_000)
    return n * (n_inv + len(SENSORS))


# ---------------------------------------------------------------- steps (child processes)

def step_ours(db: str, cfg_path: str, csv: str) -> None:
    from db.engine import make_engine
    from ingest.config import load_site_config
    from ingest.load import ingest_paths

    t0 = time.perf_counter()
    schema_name = os.environ.get("BENCH_PG_SCHEMA")
    if "://" in db and schema_name:  # PostgreSQL: an isolated schema made by main()
        import sqlalchemy as sa

        from db.engine import resolve_url
        from db.migrate import upgrade

        engine = sa.create_engine(resolve_url(db),
                                  connect_args={"options": f"-csearch_path={schema_name}"})
        upgrade(engine)
    else:
        engine = make_engine(db)
    cfg = load_site_config(cfg_path)
    (res,) = ingest_paths(engine, cfg, [csv])
    dt_s = time.perf_counter() - t0
    assert res.status == "loaded", res.message
    c = res.counts
    print(f"RESULT {dt_s:.3f} {c['values_loaded'] + c['values_duplicate']} {peak_rss_mib()} "
          f"conflicts={c['values_conflict']} duplicates={c['values_duplicate']}")


def step_plain(db: str, cfg_path: str, csv: str) -> None:
    import pandas as pd

    from db.engine import make_engine
    from db.registry import register_site
    from ingest.config import load_site_config

    engine = make_engine(db)
    chans = register_site(engine, load_site_config(cfg_path))
    header_to_channel = {}
    cfg = load_site_config(cfg_path)
    for c in cfg.sources[0].columns:
        header_to_channel[c.header] = chans[(c.device, c.quantity)]
    t0 = time.perf_counter()
    df = pd.read_csv(csv)
    ts = pd.to_datetime(df.pop("Time"), format="%Y-%m-%d %H:%M").astype("datetime64[s]").astype("int64") - 300
    df.insert(0, "ts_s", ts)
    long = df.melt(id_vars="ts_s", var_name="header", value_name="value").dropna()
    long["channel_id"] = long.pop("header").map(header_to_channel)
    long["batch_id"] = 0
    # chunksize bounds to_sql's memory (without it SQLAlchemy holds all 11 M rows as dicts)
    long[["channel_id", "ts_s", "value", "batch_id"]].to_sql("reading", engine, if_exists="append",
                                                             index=False, chunksize=200_000)
    dt_s = time.perf_counter() - t0
    print(f"RESULT {dt_s:.3f} {len(long)} {peak_rss_mib()}")


def step_pg_executemany(url: str, n: int) -> None:
    """Baseline on PostgreSQL: psycopg executemany of the same upsert, n rows."""
    import psycopg

    from db.engine import resolve_url

    raw = resolve_url(url).replace("postgresql+psycopg://", "postgresql://")
    rows = [(1, i * 300, float(i % 1000) / 10, 0) for i in range(n)]
    with psycopg.connect(raw) as conn, conn.cursor() as cur:
        cur.execute("CREATE TEMP TABLE r (channel_id int, ts_s bigint, value float8, batch_id int, "
                    "PRIMARY KEY (channel_id, ts_s))")
        t0 = time.perf_counter()
        cur.executemany("INSERT INTO r VALUES (%s, %s, %s, %s) ON CONFLICT (channel_id, ts_s) "
                        "DO UPDATE SET value = excluded.value", rows)
        conn.commit()
        dt_s = time.perf_counter() - t0
    print(f"RESULT {dt_s:.3f} {n} {peak_rss_mib()}")


def step_pg_copy_raw(url: str, cfg_path: str, csv: str) -> None:
    """Baseline on PostgreSQL: a raw COPY of the same readings, one row each.

    The file's values (``read_csv`` + ``melt``, not timed) are formatted as COPY text (not
    timed) and only the ``COPY`` into a table keyed ``(channel_id, ts_s)`` is timed, with its
    commit: the least a row-per-reading loader has to pay on the server."""
    import pandas as pd
    import psycopg

    from db.engine import resolve_url

    df = pd.read_csv(csv)
    ts = pd.to_datetime(df.pop("Time"), format="%Y-%m-%d %H:%M").astype("datetime64[s]").astype("int64") - 300
    vals = df.to_numpy(dtype=float)
    n_rows, n_cols = vals.shape
    ch = np.tile(np.arange(1, n_cols + 1), n_rows)
    t = np.repeat(ts.to_numpy(), n_cols)
    v = vals.ravel()
    ok = np.isfinite(v)
    data = "".join(f"{c}\t{x}\t{y!r}\n" for c, x, y in zip(ch[ok].tolist(), t[ok].tolist(),
                                                           v[ok].tolist(), strict=True))
    raw = resolve_url(url).replace("postgresql+psycopg://", "postgresql://")
    schema_name = os.environ.get("BENCH_PG_SCHEMA")
    opts = {"options": f"-csearch_path={schema_name}"} if schema_name else {}
    with psycopg.connect(raw, **opts) as conn, conn.cursor() as cur:
        cur.execute("CREATE TABLE raw_copy (channel_id integer, ts_s bigint, value double precision, "
                    "PRIMARY KEY (channel_id, ts_s))")
        conn.commit()
        t0 = time.perf_counter()
        with cur.copy("COPY raw_copy (channel_id, ts_s, value) FROM STDIN") as cp:
            cp.write(data)
        conn.commit()
        dt_s = time.perf_counter() - t0
        cur.execute("SELECT pg_total_relation_size('raw_copy')")
        size = cur.fetchone()[0]
    print(f"RESULT {dt_s:.3f} {int(ok.sum())} {peak_rss_mib()} bytes/reading={size / ok.sum():.1f}")


def pg_store_bytes(url: str, schema_name: str) -> float | None:
    """Bytes on disk of the schema's reading table(s) (indexes and TOAST included)."""
    import sqlalchemy as sa

    from db.engine import resolve_url

    eng = sa.create_engine(resolve_url(url))
    with eng.connect() as c:
        size = c.execute(sa.text(
            "SELECT coalesce(sum(pg_total_relation_size(quote_ident(table_schema) || '.' || "
            "quote_ident(table_name))), 0) FROM information_schema.tables WHERE table_schema = :s "
            "AND table_name IN ('reading', 'reading_day')"), {"s": schema_name}).scalar()
    eng.dispose()
    return float(size)


def step_limit(db: str, cfg_path: str, csv: str) -> None:
    """The minimal best-case loader (issue #16's "limit"): pandas' C parser to float64, then
    one ``executemany`` of (channel, ts, value) per column into a ``WITHOUT ROWID`` table keyed
    (channel_id, ts_s), WAL, synchronous=NORMAL, one transaction; no checks, no bookkeeping."""
    import sqlite3
    from itertools import repeat

    import pandas as pd

    t0 = time.perf_counter()
    df = pd.read_csv(csv, engine="c")
    ts = (pd.to_datetime(df.pop("Time"), format="%Y-%m-%d %H:%M").astype("datetime64[s]")
          .astype("int64") - 300).to_numpy()
    con = sqlite3.connect(db)
    con.execute("PRAGMA journal_mode=WAL")
    con.execute("PRAGMA synchronous=NORMAL")
    con.execute("CREATE TABLE reading (channel_id INTEGER NOT NULL, ts_s INTEGER NOT NULL, "
                "value REAL, PRIMARY KEY (channel_id, ts_s)) WITHOUT ROWID")
    n = 0
    with con:
        for k, col in enumerate(df.columns):
            v = df[col].to_numpy(dtype=float)
            ok = np.isfinite(v)
            con.executemany("INSERT INTO reading VALUES (?, ?, ?)",
                            zip(repeat(k), ts[ok].tolist(), v[ok].tolist()))
            n += int(ok.sum())
    con.close()
    print(f"RESULT {time.perf_counter() - t0:.3f} {n} {peak_rss_mib()}")


def peak_rss_mib() -> int:
    """Peak resident memory of this process since exec (VmHWM), MiB.

    Not ``getrusage().ru_maxrss``: that survives exec, so a child would report the RSS of the
    (large, data-generating) parent it was forked from.
    """
    with open("/proc/self/status") as f:
        return next(int(x.split()[1]) // 1024 for x in f if x.startswith("VmHWM"))


def run_child(*args: str) -> tuple[float, int, float, str]:
    """Run a step in a child process; return (seconds, readings, peak RSS MiB, extra text)."""
    env = dict(os.environ, PYTHONPATH=str(REPO))
    p = subprocess.run([sys.executable, __file__, "--step", *args], stdout=subprocess.PIPE,
                       text=True, env=env)
    if p.returncode != 0:
        raise SystemExit(f"step {args[0]} failed:\n{p.stdout}")
    line = next(x for x in p.stdout.splitlines() if x.startswith("RESULT"))
    parts = line.split()
    return float(parts[1]), int(parts[2]), float(parts[3]), " ".join(parts[4:])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--inverters", type=int, default=100)
    ap.add_argument("--days", type=int, default=365)
    ap.add_argument("--pg", metavar="URL", default=None)
    ap.add_argument("--pg-only", action="store_true", help="skip the SQLite steps")
    ap.add_argument("--step", nargs="+", help=argparse.SUPPRESS)
    a = ap.parse_args()
    if a.step:
        name, *rest = a.step
        if name == "pg_executemany":
            step_pg_executemany(rest[0], int(rest[1]))
        elif name == "pg_copy_raw":
            step_pg_copy_raw(*rest)
        else:
            {"ours": step_ours, "plain": step_plain, "limit": step_limit}[name](*rest)
        return
    with tempfile.TemporaryDirectory(prefix="bench_ingest_") as tmp:
        d = Path(tmp)
        cfg = write_config(d, a.inverters)
        t0 = time.perf_counter()
        csv = d / "bench_2023.csv"
        n = write_csv(csv, a.inverters, a.days)
        csv2 = d / "bench_2023_v2.csv"
        write_csv(csv2, a.inverters, a.days, bump=0.01)
        print(f"generated {n:,} readings ({a.days} days x 288 rows x {a.inverters + len(SENSORS)} "
              f"columns), {csv.stat().st_size / 1e6:.0f} MB, in {time.perf_counter() - t0:.1f} s")
        res = {}
        if not a.pg_only:
            res["ours"] = run_child("ours", str(d / "ours.sqlite"), str(cfg), str(csv))
            res["ours-overlap"] = run_child("ours", str(d / "ours.sqlite"), str(cfg), str(csv2))
            res["plain"] = run_child("plain", str(d / "plain.sqlite"), str(cfg), str(csv))
            res["limit"] = run_child("limit", str(d / "limit.sqlite"), str(cfg), str(csv))
        if a.pg:
            import sqlalchemy as sa

            from db.engine import resolve_url

            schema_name = f"bench_ingest_{os.getpid()}"
            admin = sa.create_engine(resolve_url(a.pg))
            with admin.begin() as conn:
                conn.execute(sa.text(f'CREATE SCHEMA "{schema_name}"'))
            os.environ["BENCH_PG_SCHEMA"] = schema_name
            try:
                res["pg-raw-copy"] = run_child("pg_copy_raw", a.pg, str(cfg), str(csv))
                res["ours-postgres"] = run_child("ours", a.pg, str(cfg), str(csv))
                size = pg_store_bytes(a.pg, schema_name)
                res["ours-postgres-overlap"] = run_child("ours", a.pg, str(cfg), str(csv2))
                res["pg-executemany"] = run_child("pg_executemany", a.pg, "500000")
            finally:
                with admin.begin() as conn:
                    conn.execute(sa.text(f'DROP SCHEMA "{schema_name}" CASCADE'))
        print(f"{'step':<24}{'seconds':>9}{'readings':>13}{'readings/s':>13}{'peak RSS':>11}")
        for k, (s, r, rss, extra) in res.items():
            print(f"{k:<24}{s:>9.1f}{r:>13,}{r / s:>13,.0f}{rss:>8.0f} MiB  {extra}")
        if "plain" in res:
            ratio = (res["ours"][1] / res["ours"][0]) / (res["plain"][1] / res["plain"][0])
            print(f"ratio ours / plain (readings/s): {ratio:.2f}")
        if "pg-raw-copy" in res:
            ratio = (res["ours-postgres"][1] / res["ours-postgres"][0]) / (
                res["pg-raw-copy"][1] / res["pg-raw-copy"][0])
            print(f"ratio ours-postgres (whole ingest: parse, checks, write, commit) / raw COPY "
                  f"of the same readings (readings/s): {ratio:.2f}  (target >= 0.8)")
            print(f"PostgreSQL store after ours-postgres: {size / res['ours-postgres'][1]:.1f} "
                  "bytes/reading (reading tables, indexes and TOAST)")
        if "limit" in res:
            ratio = (res["ours"][1] / res["ours"][0]) / (res["limit"][1] / res["limit"][0])
            print(f"ratio ours / minimal loader limit (readings/s): {ratio:.2f} (target >= 0.85)")


if __name__ == "__main__":
    main()
