"""Benchmark: daily-table recompute for 100 inverters x 5 years of 15-minute data.

Targets (issue #4): full recompute <= 60 s; incremental recompute after one new week <= 5 s.
Issue #16: the whole weekly cycle (daily table, flags, degradation on its schedule) after one
new week <= 5 % of a full recompute of all three, and a full recompute <= 1.3 x one raw read of
the same readings (``db.timeseries.read_channel`` of every channel), both measured in this run.
Prints both, how the time splits between reading the store, computing and writing, and a plain
baseline in the same run: ``pandas.read_sql`` of the same rows plus a naive groupby daily sum.

Measured 2026-12-02 (README *Performance*), main 5c5cd64 against store v8 back to back from
copies of one store, twice each, load 3.0-3.1 on 2 shared CPUs: one new week cost 8.5 / 6.2 %
of the full compute's wall time and 8.1 / 7.2 % of its CPU before, 5.7 / 5.5 % wall and
5.4 / 5.4 % CPU after (flags window 3.31 / 3.07 s -> 2.15 / 2.12 s; full compute CPU 43-46 s
both); again after the soiling clear-day check (588da25 -> 8fb90ee, load 0.5-1.5): CPU
8.3 / 8.4 % -> 5.7 / 6.2 %, wall 9.9 / 12.6 % -> 6.7 / 6.2 %; store v9 (the flags job's packed
copy of the daily columns, line_vs_step by running medians), 4f45e9c -> this version, twice
each, load 0.7-1.2: CPU 5.1 / 5.7 % -> 4.2 / 4.6 %, wall 6.1 / 6.8 % -> 4.9 / 5.3 % (flags
window 1.89 / 1.99 s -> 1.29 / 1.48 s); with the stored days sliced from their packs, again
(load 1.0-1.1): CPU 5.3 / 5.8 % -> 4.6 / 4.6 %, wall 6.1 / 6.8 % -> 5.5 / 5.3 % (flags window
2.04 / 2.03 s -> 1.38 / 1.38 s; the full compute's flags got faster too). Wall-time shares
stay above CPU shares: the full compute's degradation runs in 2 processes, a week in one.
Wall-time shares swing with
the machine's load (a slowed full run makes the week look cheap): compare the CPU shares.
Each run appends a week to the store it is given: to compare two versions, run each on its own
copy of the store (``--db``), as the figures above were.

Run by hand (never in CI):

    python tests/bench/bench_compute.py            # builds /tmp/heliaudit_bench_compute.sqlite once
    python tests/bench/bench_compute.py --rebuild  # rebuild the benchmark store
    python tests/bench/bench_compute.py --inverters 10 --years 1   # a quick run

The store is written through ``db.readings.write_readings`` (setup, not timed), values at a
logger's resolution (POA 0.1 W/m², temperature 0.01 °C, power 1 W): one site, one POA
reference cell and one module-temperature sensor shared by all inverters, ``p_ac_kw`` per
inverter. The baseline reads the same readings from a one-row-per-reading copy
(``<db>.plain.sqlite``, the layout before schema v6). The data are invented for the benchmark only (clear-sky POA from pvlib scaled by a
random daily cloud factor; power a random fraction of the PVWatts expectation).
"""

from __future__ import annotations

import argparse
import contextlib
import os
import sqlite3
import sys
import time
from itertools import repeat
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

import db.daily as ddaily  # noqa: E402
import db.timeseries as dts  # noqa: E402
from analytics import daily as adaily  # noqa: E402
from analytics import filters as flt  # noqa: E402
from analytics.power import expected_ac_power  # noqa: E402
from analytics.temperature import cell_temperature_from_module  # noqa: E402
from db.engine import make_engine  # noqa: E402
from db.readings import write_readings  # noqa: E402
from db.runcache import read_once  # noqa: E402
from heliaudit import jobs_daily, jobs_degradation, jobs_flags  # noqa: E402
from heliaudit.cmd_compute import DEGRADATION_EVERY_DAYS  # noqa: E402
from tests.helpers_store import add_inverter, add_sensor, add_site  # noqa: E402

LAT, LON, ALT, TILT, AZ = 38.9, -3.2, 650.0, 25.0, 180.0


def cpu_s() -> float:
    """CPU seconds of this process and its finished children (the degradation pool): less
    sensitive than wall time to the other users of a shared machine."""
    import resource

    ch = resource.getrusage(resource.RUSAGE_CHILDREN)
    return time.process_time() + ch.ru_utime + ch.ru_stime
START = pd.Timestamp("2020-01-01", tz="UTC")


def _weather(ts: pd.DatetimeIndex, rng) -> tuple[np.ndarray, np.ndarray]:
    sc = flt.sun_and_clearsky(ts, LAT, LON, ALT, TILT, AZ, 0.2, interval_h=0.25)
    days = (ts.as_unit("s").asi8 // 86400)
    day_no = days - days[0]
    cloud = rng.uniform(0.3, 1.0, day_no.max() + 1)[day_no]
    poa = sc["poa_clearsky_wm2"].to_numpy() * cloud * (1 + 0.02 * rng.standard_normal(len(ts)))
    poa = np.clip(poa, 0, None)
    t_mod = 15 + 10 * np.sin(2 * np.pi * (day_no - 100) / 365.25) + 0.03 * poa \
        + 0.2 * rng.standard_normal(len(ts))
    return poa, t_mod


def _insert(conn, plain: sqlite3.Connection, ch: int, ts_s: np.ndarray, v: np.ndarray,
            decimals: int) -> None:
    # values at a logger's resolution (as CSV exports carry them), each reading with its
    # 15-min interval as ingest records it, through the store's write path (db.readings);
    # the same rows one per reading into the plain file for the baseline
    v = np.round(v, decimals)
    write_readings(conn, np.full(ts_s.size, ch), ts_s, v, 0, interval_s=np.full(ts_s.size, 900.0))
    plain.executemany("INSERT OR REPLACE INTO reading (channel_id, ts_s, value) VALUES (?, ?, ?)",
                      zip(repeat(ch), ts_s.tolist(), v.tolist(), strict=False))


def _plain(path: Path) -> sqlite3.Connection:
    """The baseline's store: the same readings one row each (the layout before schema v6)."""
    raw = sqlite3.connect(path.with_suffix(".plain.sqlite"))
    raw.execute("PRAGMA journal_mode=WAL")
    raw.execute("PRAGMA synchronous=NORMAL")
    raw.execute("CREATE TABLE IF NOT EXISTS reading (channel_id INTEGER, ts_s INTEGER, "
                "value FLOAT, PRIMARY KEY (channel_id, ts_s)) WITHOUT ROWID")
    return raw


def build(path: Path, n_inv: int, years: float, seed: int = 7) -> dict:
    if path.exists():
        path.unlink()
    eng = make_engine(path)
    with eng.begin() as c:
        add_site(c, "bench", timezone="Europe/Madrid", latitude_deg=LAT, longitude_deg=LON,
                 altitude_m=ALT, tilt_deg=TILT, azimuth_deg=AZ)
        poa_ch = add_sensor(c, "bench", "POA", "poa_wm2", "reference_cell")
        tmod_ch = add_sensor(c, "bench", "TMOD", "t_module_c")
        inv_ch = [add_inverter(c, "bench", f"INV-{k:03d}", poa_sensor_id="POA",
                               t_module_sensor_id="TMOD", p_dc_kwp=330.0, p_ac_max_kw=300.0,
                               eta_inv_nom=0.97)["p_ac_kw"] for k in range(n_inv)]
    n = int(round(years * 365.25 * 96))
    ts = pd.date_range(START, periods=n, freq="15min")
    rng = np.random.default_rng(seed)
    poa, t_mod = _weather(ts, rng)
    ts_s = ts.as_unit("s").asi8
    p_exp = expected_ac_power(poa, cell_temperature_from_module(t_mod, poa, 3.0), 330.0,
                              -0.0037, 300.0, 0.97)
    path.with_suffix(".plain.sqlite").unlink(missing_ok=True)
    raw = _plain(path)
    t0 = time.perf_counter()
    with raw, eng.begin() as c:
        _insert(c, raw, poa_ch, ts_s, poa, 1)
        _insert(c, raw, tmod_ch, ts_s, t_mod, 2)
        for k, ch in enumerate(inv_ch):
            frac = 0.85 + 0.1 * rng.random()
            _insert(c, raw, ch, ts_s, frac * p_exp * (1 + 0.01 * rng.standard_normal(n)), 3)
            if k % 10 == 9:
                print(f"  setup: {k + 1}/{n_inv} inverters written", flush=True)
    raw.close()
    eng.dispose()
    return {"rows": (n_inv + 2) * n, "seconds": time.perf_counter() - t0,
            "last_ts_s": int(ts_s[-1]), "channels": [poa_ch, tmod_ch, *inv_ch], "n": n}


def append_week(path: Path, after_ts_s: int, seed: int = 8) -> tuple[int, int]:
    """Write one more week for every channel (setup of the incremental run, not timed)."""
    eng = make_engine(path)
    with eng.connect() as c:
        chans = dts.site_channels(c, "bench")
    ts = pd.date_range(pd.Timestamp(after_ts_s + 900, unit="s", tz="UTC"), periods=7 * 96,
                       freq="15min")
    rng = np.random.default_rng(seed)
    poa, t_mod = _weather(ts, rng)
    p_exp = expected_ac_power(poa, cell_temperature_from_module(t_mod, poa, 3.0), 330.0,
                              -0.0037, 300.0, 0.97)
    ts_s = ts.as_unit("s").asi8
    raw = _plain(path)
    with raw, eng.begin() as c:
        for (_dev, q), ch in chans.items():
            v = poa if q == "poa_wm2" else t_mod if q == "t_module_c" else 0.9 * p_exp
            _insert(c, raw, ch, ts_s, v, 1 if q == "poa_wm2" else 2 if q == "t_module_c" else 3)
    raw.close()
    eng.dispose()
    return int(ts_s[0]), int(ts_s[-1])


@contextlib.contextmanager
def timers():
    """Accumulate the time spent in reading (db.timeseries.read_channel) and writing."""
    acc = {"read": 0.0, "write": 0.0, "rows_read": 0, "daily": 0.0, "sun": 0.0}
    orig_read, orig_write = dts.read_channel, ddaily.write_daily
    orig_daily, orig_sun = adaily.daily_performance_many, flt.sun_and_clearsky

    def timed(fn, key):
        def wrapper(*a, **k):
            t = time.perf_counter()
            out = fn(*a, **k)
            acc[key] += time.perf_counter() - t
            return out
        return wrapper

    def read(*a, **k):
        t = time.perf_counter()
        out = orig_read(*a, **k)
        acc["read"] += time.perf_counter() - t
        acc["rows_read"] += out[0].size
        return out

    def write(*a, **k):
        t = time.perf_counter()
        out = orig_write(*a, **k)
        acc["write"] += time.perf_counter() - t
        return out

    dts.read_channel, jobs_daily.write_daily = read, write
    adaily.daily_performance_many = timed(orig_daily, "daily")
    flt.sun_and_clearsky = timed(orig_sun, "sun")
    try:
        yield acc
    finally:
        dts.read_channel, jobs_daily.write_daily = orig_read, orig_write
        adaily.daily_performance_many, flt.sun_and_clearsky = orig_daily, orig_sun


def baseline(path: Path, channels: list[int]) -> tuple[float, float, int]:
    """pandas read_sql of the same rows + a naive groupby daily energy sum per channel."""
    eng = make_engine(path.with_suffix(".plain.sqlite"), create=False)
    t0 = time.perf_counter()
    df = pd.read_sql(f"SELECT channel_id, ts_s, value FROM reading WHERE channel_id IN "
                     f"({', '.join(map(str, channels))})", eng)
    t1 = time.perf_counter()
    df["day"] = (df["ts_s"] + 3600) // 86400
    df["e"] = df["value"] * 0.25
    df.groupby(["channel_id", "day"])["e"].sum()
    t2 = time.perf_counter()
    eng.dispose()
    return t1 - t0, t2 - t1, len(df)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--db", default="/tmp/heliaudit_bench_compute.sqlite")
    ap.add_argument("--inverters", type=int, default=100)
    ap.add_argument("--years", type=float, default=5.0)
    ap.add_argument("--rebuild", action="store_true")
    a = ap.parse_args()
    print(f"load average before the run: {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs "
          "(the machine is shared: compare with the baseline of the same run)")
    path = Path(a.db)
    meta_path = path.with_suffix(".meta.npy")
    if (a.rebuild or not path.exists() or not meta_path.exists()
            or not path.with_suffix(".plain.sqlite").exists()):
        print(f"setup: writing {a.inverters} inverters x {a.years} years of 15-min data to {path}")
        meta = build(path, a.inverters, a.years)
        np.save(meta_path, np.array([meta["last_ts_s"], meta["rows"]]))
        print(f"setup: {meta['rows']:,} readings in {meta['seconds']:.1f} s "
              f"({meta['rows'] / meta['seconds'] / 1e6:.2f} M rows/s) [not timed]")
    last_ts_s, n_rows = (int(x) for x in np.load(meta_path))
    eng = make_engine(path)
    with eng.connect() as c:
        chans = sorted(dts.site_channels(c, "bench").values())
        n_inv = len(dts.site_inverters(c, "bench"))

    # -- one raw read of every reading (the reference of issue #16)
    t0 = time.perf_counter()
    n_raw = 0
    with eng.connect() as c:
        for ch in chans:
            n_raw += dts.read_channel(c, ch, with_interval=True)[0].size
    raw_read = time.perf_counter() - t0
    print(f"raw read: {n_raw:,} readings in {raw_read:.1f} s "
          f"({n_raw / raw_read / 1e6:.2f} M readings/s, db.timeseries.read_channel)")

    # -- full recompute, one read of each channel shared by the three steps (as `compute`)
    run = read_once()
    stats = run.__enter__()
    c0 = cpu_s()
    with timers() as acc:
        t0 = time.perf_counter()
        (s,) = jobs_daily.recompute_all(eng, "bench")
        full = time.perf_counter() - t0
    print(f"\nfull recompute: {n_inv} inverters, {s['rows']:,} daily rows written")
    print(f"  total {full:6.1f} s   (target <= 60 s)")
    print(f"  read    {acc['read']:6.1f} s  ({acc['rows_read']:,} rows, "
          f"{acc['rows_read'] / max(acc['read'], 1e-9) / 1e6:.2f} M rows/s; reader thread, "
          "overlaps computing)")
    print(f"  compute {acc['daily'] + acc['sun']:6.1f} s  (daily_performance_many {acc['daily']:.1f} s: "
          f"filters, models, daily sums; solar position + clear sky {acc['sun']:.1f} s)")
    print(f"  write   {acc['write']:6.1f} s")
    print(f"  other / waiting {full - acc['daily'] - acc['sun'] - acc['write']:6.1f} s "
          "(frame assembly, waiting for the reader)")

    t0 = time.perf_counter()
    jobs_flags.run_flags(eng, "bench", full=True)
    full_flags = time.perf_counter() - t0
    t0 = time.perf_counter()
    jobs_degradation.run_degradation(eng, "bench")
    full_degr = time.perf_counter() - t0
    full_all = full + full_flags + full_degr
    full_cpu = cpu_s() - c0
    run.__exit__(None, None, None)
    print(f"read once: {stats['readings_read']:,} readings read from the store by the three "
          f"steps ({stats['reads']} channel reads, {stats['hits']} served from the run's copy)")
    print(f"full compute (daily {full:.1f} s + flags {full_flags:.1f} s + degradation "
          f"{full_degr:.1f} s) = {full_all:.1f} s = {full_all / raw_read:.1f} x one raw read "
          f"(target <= 1.3); CPU {full_cpu:.1f} s")

    # -- baseline in the same run
    b_read, b_group, b_rows = baseline(path, chans)
    print(f"baseline: pandas read_sql of the same {b_rows:,} rows {b_read:.1f} s + naive groupby "
          f"daily sum {b_group:.1f} s = {b_read + b_group:.1f} s")
    print(f"  ratio full recompute / baseline = {full / (b_read + b_group):.2f}")

    # -- incremental: one new week
    lo, hi = append_week(path, last_ts_s)
    np.save(meta_path, np.array([hi, n_rows]))
    c0 = cpu_s()
    with read_once():
        with timers() as acc:
            t0 = time.perf_counter()
            s = jobs_daily.recompute_range(eng, "bench", lo, hi)
            inc = time.perf_counter() - t0
        print(f"\nincremental recompute after one new week ({s['first_day']}..{s['last_day']}): "
              f"{inc:.2f} s (target <= 5 s); read {acc['read']:.2f} s, write {acc['write']:.2f} s, "
              f"compute {acc['daily'] + acc['sun']:.2f} s, {acc['rows_read']:,} readings")
        t0 = time.perf_counter()
        jobs_flags.run_flags(eng, "bench", full=False, since_s=lo)
        inc_flags = time.perf_counter() - t0
    inc_cpu = cpu_s() - c0
    plain = make_engine(path.with_suffix(".plain.sqlite"), create=False)
    inc_all = inc + inc_flags
    print(f"incremental cycle: daily {inc:.2f} s + flags {inc_flags:.2f} s (window) + "
          f"degradation 0 s (kept: recomputed every {DEGRADATION_EVERY_DAYS} days) = "
          f"{inc_all:.2f} s = {100 * inc_all / full_all:.1f} % of the full compute (target <= 5 %); "
          f"CPU {inc_cpu:.1f} s = {100 * inc_cpu / full_cpu:.1f} % of the full compute's CPU")
    print(f"  flags alone: incremental / full = {100 * inc_flags / full_flags:.1f} %")
    t0 = time.perf_counter()
    df = pd.read_sql(f"SELECT channel_id, ts_s, value FROM reading WHERE channel_id IN "
                     f"({', '.join(map(str, chans))}) AND ts_s >= {lo - 86400} AND ts_s <= {hi}",
                     plain)
    df.groupby(["channel_id", df["ts_s"] // 86400])["value"].sum()
    print(f"  baseline: read_sql + groupby of the same week {time.perf_counter() - t0:.2f} s")


if __name__ == "__main__":
    main()
