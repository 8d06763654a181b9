"""Benchmark: the reading store itself: bytes per reading on disk and raw read speed.

Writes N inverters x Y years of interval data (``p_ac_kw`` per inverter with 2 decimals, a POA
sensor with 1 and a module temperature with 2 decimals, as logger CSV exports carry them;
night rows included, values invented for the benchmark) through the store's own write path
(``db.readings.write_readings``), then reads every channel back with the read path the jobs
use (``db.timeseries.read_channel(..., with_interval=True)``) and prints:

* bytes per reading on disk: SQLite file size after a WAL checkpoint / readings; PostgreSQL
  (``--pg URL``) ``pg_total_relation_size`` of the reading table(s), indexes and TOAST included;
* readings/s written and read;
* a plain baseline in the same run: the same values in a one-row-per-reading table
  ``(channel_id, ts_s, value)`` (SQLite ``WITHOUT ROWID``, the layout before schema v6), read
  per channel into numpy with ``np.fromiter`` over the cursor, and its bytes per reading.

Run by hand, never in CI:

    python tests/bench/bench_store.py                       # 100 inverters x 5 years, 15-min
    python tests/bench/bench_store.py --inverters 10 --years 1 --interval-min 5 --pg postgresql://127.0.0.1/test
"""

from __future__ import annotations

import argparse
import os
import sqlite3
import tempfile
import time
from pathlib import Path

import numpy as np
import sqlalchemy as sa

from db import schema
from db.engine import make_engine, resolve_url
from db.migrate import upgrade
from db.readings import write_readings
from db.timeseries import read_channel

START_S = 1_577_836_800  # 2020-01-01 00:00 UTC


def series(n_inv: int, years: float, interval_s: int, seed: int = 7):
    """Yield (name, timestamps, values) per channel: decimals as a logger writes them."""
    rng = np.random.default_rng(seed)
    n = int(round(years * 365.25 * 86400 / interval_s))
    ts = START_S + np.arange(n, dtype=np.int64) * interval_s
    hour = (ts % 86400) / 3600.0
    doy = (ts - START_S) / 86400.0
    sun = np.clip(np.sin((hour - 6) / 12 * np.pi), 0, None) * \
        (0.75 + 0.25 * np.cos((doy - 172) / 365 * 2 * np.pi))
    cloud = rng.uniform(0.4, 1.0, int(doy[-1]) + 2)[doy.astype(int)]
    poa = np.round(1000 * sun * cloud * (1 + 0.02 * rng.standard_normal(n)).clip(0), 1)
    yield "poa_wm2", ts, poa
    yield "t_module_c", ts, np.round(10 + 0.03 * poa + rng.standard_normal(n) * 0.2, 2)
    for _ in range(n_inv):
        yield "p_ac_kw", ts, np.round(poa * 0.1 * rng.uniform(0.85, 0.95) *
                                      (1 + 0.01 * rng.standard_normal(n)), 2).clip(0)


def build_store(engine: sa.Engine, n_inv: int, years: float, interval_s: int) -> tuple[list, int, float]:
    with engine.begin() as c:
        c.execute(schema.site.insert().values(
            site_id="bench", name="bench", timezone="UTC", latitude_deg=40.0, longitude_deg=-3.7,
            altitude_m=600.0, tilt_deg=30.0, azimuth_deg=180.0, albedo=0.2, config_toml="",
            config_sha256="0" * 64, updated_utc="x"))
        pk = c.execute(schema.device.insert().values(site_id="bench", device_id="D", kind="sensor")
                       ).inserted_primary_key[0]
    chans, n_total, t_write = [], 0, 0.0
    for k, (q, ts, v) in enumerate(series(n_inv, years, interval_s)):
        with engine.begin() as c:
            ch = c.execute(schema.channel.insert().values(
                device_pk=pk, quantity=q, input_id=str(k))).inserted_primary_key[0]
            t0 = time.perf_counter()
            write_readings(c, np.full(ts.size, ch, dtype=np.int64), ts, v, 1, upsert=False,
                           interval_s=np.full(ts.size, float(interval_s)))
        t_write += time.perf_counter() - t0
        chans.append(ch)
        n_total += ts.size
    return chans, n_total, t_write


def read_all(engine: sa.Engine, chans: list[int]) -> tuple[int, float]:
    n = 0
    t0 = time.perf_counter()
    with engine.connect() as c:
        for ch in chans:
            ts, v, iv = read_channel(c, ch, with_interval=True)
            n += ts.size
    return n, time.perf_counter() - t0


def plain_sqlite(path: Path, n_inv: int, years: float, interval_s: int) -> tuple[float, float, int]:
    """One row per reading (the layout before v6); returns bytes/reading, read seconds, rows."""
    raw = sqlite3.connect(path)
    raw.execute("PRAGMA journal_mode=WAL")
    raw.execute("PRAGMA synchronous=NORMAL")
    raw.execute("CREATE TABLE reading (channel_id INTEGER, ts_s INTEGER, value FLOAT, "
                "PRIMARY KEY (channel_id, ts_s)) WITHOUT ROWID")
    n = 0
    with raw:
        for k, (_q, ts, v) in enumerate(series(n_inv, years, interval_s)):
            raw.executemany("INSERT INTO reading VALUES (?, ?, ?)",
                            zip([k] * ts.size, ts.tolist(), v.tolist(), strict=True))
            n += ts.size
    raw.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    size = path.stat().st_size
    dt = np.dtype([("ts_s", np.int64), ("value", np.float64)])
    t0 = time.perf_counter()
    got = 0
    for k in range(n_inv + 2):
        cur = raw.execute("SELECT ts_s, value FROM reading WHERE channel_id = ? ORDER BY ts_s", (k,))
        got += np.fromiter(cur, dtype=dt).size
    t_read = time.perf_counter() - t0
    raw.close()
    assert got == n
    return size / n, t_read, n


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--inverters", type=int, default=100)
    ap.add_argument("--years", type=float, default=5.0)
    ap.add_argument("--interval-min", type=int, default=15)
    ap.add_argument("--pg", metavar="URL", default=None, help="also measure PostgreSQL")
    ap.add_argument("--no-plain", action="store_true", help="skip the plain baseline")
    a = ap.parse_args()
    iv = a.interval_min * 60
    print(f"load average before the run: {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs")
    with tempfile.TemporaryDirectory(prefix="bench_store_") as tmp:
        d = Path(tmp)
        eng = make_engine(d / "store.sqlite")
        chans, n, t_w = build_store(eng, a.inverters, a.years, iv)
        with eng.connect() as c:
            c.exec_driver_sql("PRAGMA wal_checkpoint(TRUNCATE)")
        size = (d / "store.sqlite").stat().st_size
        got, t_r = read_all(eng, chans)
        assert got == n, (got, n)
        eng.dispose()
        print(f"{n:,} readings ({a.inverters} inverters + 2 sensors, {a.years} years, "
              f"{a.interval_min}-min)")
        print(f"SQLite store : {size / n:6.2f} bytes/reading; write {n / t_w / 1e6:5.2f} M/s; "
              f"read {n / t_r / 1e6:6.2f} M readings/s ({t_r:.1f} s)")
        if not a.no_plain:
            b_size, b_read, _ = plain_sqlite(d / "plain.sqlite", a.inverters, a.years, iv)
            print(f"SQLite plain : {b_size:6.2f} bytes/reading; read {n / b_read / 1e6:6.2f} M "
                  f"readings/s ({b_read:.1f} s)  [one row per reading, same run]")
            print(f"  ratios store/plain: bytes {size / n / b_size:.2f}, read speed "
                  f"{b_read / t_r:.2f}x")
    if a.pg:
        name = f"bench_store_{os.getpid()}"
        admin = sa.create_engine(resolve_url(a.pg))
        with admin.begin() as c:
            c.execute(sa.text(f'CREATE SCHEMA "{name}"'))
        try:
            eng = sa.create_engine(resolve_url(a.pg),
                                   connect_args={"options": f"-csearch_path={name}"})
            upgrade(eng)
            chans, n, t_w = build_store(eng, a.inverters, a.years, iv)
            with eng.begin() as c:
                tables = [t for t in ("reading", "reading_day")
                          if sa.inspect(c).has_table(t)]
                size = sum(c.execute(sa.text(f"SELECT pg_total_relation_size('{name}.{t}')"))
                           .scalar() for t in tables)
            got, t_r = read_all(eng, chans)
            eng.dispose()
            print(f"PostgreSQL   : {size / n:6.2f} bytes/reading ({', '.join(tables)}); write "
                  f"{n / t_w / 1e6:5.2f} M/s; read {n / t_r / 1e6:6.2f} M readings/s")
        finally:
            with admin.begin() as c:
                c.execute(sa.text(f'DROP SCHEMA "{name}" CASCADE'))


if __name__ == "__main__":
    main()
