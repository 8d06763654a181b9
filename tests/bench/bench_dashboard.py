"""Benchmark of the dashboard's server-side work (issue #6). Run by hand:

    python tests/bench/bench_dashboard.py [--inverters 100] [--years 5] [--db PATH]

Targets (issue #6): fleet page <= 1.5 s cold and <= 0.3 s warm (cached); drill-down of one
inverter-week of 5-minute data <= 0.3 s. Times the same ``dashboard.data`` and
``dashboard.charts`` functions the pages call, cold (caches cleared) and warm, beside a plain
baseline (``pd.read_sql`` of the same rows, from a one-row-per-reading copy ``reading_plain``
written beside the store for it) and the ratio.

The 100 x 5 y store is written directly (daily table, flags, degradation results and the last
four weeks of 5-minute readings), not through the demo generator + ingest + compute: those
would spend minutes producing 50 M readings the dashboard never reads. The numbers are
invented load for timing only, not a test of any method.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import os
import sqlite3
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

SITE = "benchfleet"
TZ = "Etc/GMT-1"  # fixed UTC+1, no DST: local standard time = local time
OFFSET_S = 3600


def build_fleet_db(path: Path, n_inverters: int = 100, years: int = 5, reading_days: int = 28,
                   seed: int = 7) -> dict:
    """Write a fleet store at ``path``; return facts used by the benchmark."""
    from db.engine import make_engine

    path = Path(path)
    if path.exists():
        path.unlink()
    make_engine(f"sqlite:///{path}").dispose()
    rng = np.random.default_rng(seed)
    con = sqlite3.connect(path)
    con.execute("PRAGMA journal_mode=WAL")
    con.execute("PRAGMA synchronous=OFF")
    now = "2026-01-01T00:00:00+00:00"
    con.execute("INSERT INTO site VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?)",
                (SITE, "Bench fleet", "bench", TZ, 50.0, 10.0, 200.0, 30.0, 180.0, 0.2,
                 "# benchmark store\n", "0" * 64, now))
    con.execute("INSERT INTO computation (site_id, kind, software_version, params_json, "
                "started_utc) VALUES (?,?,?,?,?)", (SITE, "daily", "bench", "{}", now))
    n_groups = max(1, n_inverters // 20)
    pk = 0
    sensor_pk = {}
    for g in range(n_groups):
        for sid, qty, inst in ((f"POA-{g + 1}", "poa_wm2", "reference_cell"),
                               (f"TMOD-{g + 1}", "t_module_c", None)):
            pk += 1
            con.execute("INSERT INTO device VALUES (?,?,?,?)", (pk, SITE, sid, "sensor"))
            con.execute("INSERT INTO sensor VALUES (?,?,?)", (pk, qty, inst))
            sensor_pk[sid] = (pk, qty)
    pk += 1
    con.execute("INSERT INTO device VALUES (?,?,?,?)", (pk, SITE, "TAMB-1", "sensor"))
    con.execute("INSERT INTO sensor VALUES (?,?,?)", (pk, "t_amb_c", None))
    sensor_pk["TAMB-1"] = (pk, "t_amb_c")
    inv_pk = {}
    for i in range(n_inverters):
        pk += 1
        did = f"INV{i + 1:03d}"
        g = min(i // 20, n_groups - 1)
        con.execute("INSERT INTO device VALUES (?,?,?,?)", (pk, SITE, did, "inverter"))
        con.execute("INSERT INTO inverter VALUES (?,?,?,?,?,?,?,?,?,?,?,?)",
                    (pk, 110.0, 100.0, -0.0037, 0.975, "open_rack_glass_polymer",
                     "2021-01-01", f"POA-{g + 1}", f"TMOD-{g + 1}", "TAMB-1", None,
                     f"block-{chr(65 + g)}"))
        inv_pk[did] = pk
    # daily table
    n_days = 365 * years
    day0 = dt.date(2021, 1, 1)
    days = [day0 + dt.timedelta(days=k) for k in range(n_days)]
    doy = np.arange(n_days) % 365
    season = np.sin(2 * np.pi * (doy - 80) / 365)
    clouds = rng.uniform(0.3, 1.0, n_days)
    h = np.clip((4.0 + 2.5 * season) * clouds, 0.2, None)
    t_cell = 22 + 14 * season + 6 * clouds
    rows = []
    for dpk in inv_pk.values():
        rd = -0.005 + rng.normal(0, 0.002)
        pr_stc = 0.88 * (1 + rd) ** (np.arange(n_days) / 365) * (1 + rng.normal(0, 0.01, n_days))
        e_ref = 110.0 * h
        e_ref_stc = e_ref * (1 - 0.0037 * (t_cell - 25))
        e_ac = pr_stc * e_ref_stc
        e_exp = e_ref_stc * 0.95
        for k in range(n_days):
            rows.append((dpk, days[k].isoformat(), 288, 150, 130, e_ac[k], h[k], e_ref[k],
                         e_ref_stc[k], e_ref[k] * t_cell[k], e_exp[k], e_ac[k] * 0.97,
                         e_exp[k] * 0.97, e_ac[k] / e_ref[k], pr_stc[k], e_ac[k] / e_exp[k],
                         t_cell[k], 0.95, 1, 12.5, 0.0, 0.0, 1.0, 1.0, 0.0, 1, None, e_ac[k]))
    cols = ("device_pk, day, n_intervals, n_daylight, n_valid, e_ac_kwh, h_poa_kwhm2, e_ref_kwh, "
            "e_ref_stc_kwh, e_ref_tcell_kwhc, e_exp_kwh, e_ac_valid_kwh, e_exp_valid_kwh, pr, "
            "pr_stc, pi, t_cell_wavg_c, coverage, day_valid, t_daylight_h, t_unavailable_h, "
            "e_lost_kwh, avail_time, avail_energy, t_clipped_h, computation_id, details_json, "
            "e_ac_pr_kwh")
    con.executemany(f"INSERT INTO daily_inverter ({cols}) VALUES ({','.join('?' * 28)})", rows)
    # flags, a few per inverter
    last_s = int(dt.datetime.combine(days[-1], dt.time()).replace(tzinfo=dt.UTC).timestamp())
    kinds = ("underperformance", "outage", "soiling", "clipping")
    frows = []
    for did in inv_pk:
        for _ in range(5):
            st = last_s - int(rng.integers(0, 365 * years)) * 86400
            frows.append((SITE, did, kinds[int(rng.integers(0, 4))], st,
                          st + int(rng.integers(1, 20)) * 86400, "warning",
                          float(rng.uniform(1, 500)), "{}", 1))
    con.executemany("INSERT INTO flag (site_id, device_id, kind, start_s, end_s, severity, "
                    "lost_kwh, details_json, computation_id) VALUES (?,?,?,?,?,?,?,?,?)", frows)
    drows = []
    for did in inv_pk:
        r = float(rng.normal(-0.5, 0.2))
        for m in ("sensor_year_pairs", "regression"):
            drows.append((SITE, did, m, r, r - 0.2, r + 0.2, 0.95, 1500, None,
                          json.dumps({"yoy_rates_pct_per_yr": list(rng.normal(r, 1, 50))}), 1))
    con.executemany("INSERT INTO degradation_result VALUES (?,?,?,?,?,?,?,?,?,?,?)", drows)
    # readings: last reading_days of 5-minute data
    con.execute("INSERT INTO ingest_batch (site_id, source_name, file_name, file_path, sha256, "
                "size_bytes, rows_read, rows_loaded, rows_duplicate, rows_rejected, "
                "values_loaded, values_duplicate, values_conflict, values_rejected, "
                "started_utc, status, interval_s) VALUES "
                "(?,?,?,?,?,?,0,0,0,0,0,0,0,0,?,?,?)",
                (SITE, "bench", "bench.csv", "bench.csv", "0" * 64, 0, now, "loaded", "300"))
    start_s = last_s - (reading_days - 1) * 86400 - OFFSET_S
    ts = np.arange(start_s, last_s + 86400 - OFFSET_S, 300, dtype=np.int64)
    hour = ((ts + OFFSET_S) % 86400) / 3600.0
    day_shape = np.clip(np.sin(np.pi * (hour - 6) / 12), 0, None) ** 1.3
    dayk = (ts - ts[0]) // 86400
    poa = 950 * day_shape * rng.uniform(0.4, 1.0, dayk.max() + 1)[dayk]
    tmod = 15 + 0.03 * poa
    ch = 0
    series = []  # written through the store's write path (db.readings) below
    # the same readings one row each, for the plain baseline (the layout before schema v6)
    con.execute("CREATE TABLE reading_plain (channel_id INTEGER, ts_s INTEGER, value FLOAT, "
                "PRIMARY KEY (channel_id, ts_s)) WITHOUT ROWID")

    def add(dev_pk, qty, values):
        nonlocal ch
        ch += 1
        con.execute("INSERT INTO channel (channel_id, device_pk, quantity) VALUES (?,?,?)", (ch, dev_pk, qty))
        series.append((ch, np.round(values, 4)))
        con.executemany("INSERT INTO reading_plain (channel_id, ts_s, value) VALUES (?,?,?)",
                        zip([ch] * len(ts), ts.tolist(), np.round(values, 4).tolist(),
                            strict=True))

    for spk, qty in sensor_pk.values():
        add(spk, qty, poa if qty == "poa_wm2" else tmod if qty == "t_module_c" else tmod - 10)
    for dpk in inv_pk.values():
        p = np.minimum(110 * poa / 1000 * 0.86 * (1 - 0.0037 * (tmod + 3 - 25))
                       * rng.normal(1, 0.01, len(ts)), 100.0)
        add(dpk, "p_ac_kw", p)
    con.execute("UPDATE ingest_batch SET ts_first_s = ?, ts_last_s = ?",
                (int(ts[0]), int(ts[-1])))
    con.commit()
    con.close()
    from db.readings import write_readings

    eng = make_engine(f"sqlite:///{path}")
    with eng.begin() as c:
        for k, values in series:
            write_readings(c, np.full(len(ts), k), ts, values, 1, upsert=False,
                           interval_s=np.full(len(ts), 300.0))
    eng.dispose()
    return {"site_id": SITE, "last_day": days[-1], "inverters": list(inv_pk),
            "reading_start_s": int(start_s), "reading_end_s": int(ts[-1] + 300)}


REPEATS = 3  # the machines are shared and noisy: report the median of a few runs


def _timed(fn, *args, before=None, **kw):
    """(median seconds over REPEATS runs, result); ``before`` runs untimed before each."""
    times = []
    for _ in range(REPEATS):
        if before is not None:
            before()
        t0 = time.perf_counter()
        out = fn(*args, **kw)
        times.append(time.perf_counter() - t0)
    return float(np.median(times)), out


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--inverters", type=int, default=100)
    ap.add_argument("--years", type=int, default=5)
    ap.add_argument("--db", type=Path, default=None, help="store to (re)build; default: a temp file")
    ap.add_argument("--reuse", action="store_true", help="reuse --db if it exists")
    args = ap.parse_args(argv)
    tmp = tempfile.mkdtemp(prefix="bench_dashboard_")
    path = args.db or Path(tmp) / "fleet.sqlite"
    if not (args.reuse and path.exists()):
        t, facts = _timed(build_fleet_db, path, args.inverters, args.years)
        print(f"built {args.inverters} inverters x {args.years} y store in {t:.1f} s: {path}")
    else:
        facts = {"site_id": SITE}
    os.environ["HELIAUDIT_DB"] = f"sqlite:///{path}"
    run_bench(f"sqlite:///{path}", facts["site_id"])


def run_bench(url: str, site_id: str) -> None:
    import logging

    import pandas as pd
    import sqlalchemy as sa
    import streamlit as st

    # bare mode (no server): silence "No runtime found, using MemoryCacheStorageManager"
    logging.getLogger("streamlit.runtime.caching.cache_data_api").setLevel(logging.ERROR)

    from dashboard import charts, data

    def clear():
        st.cache_data.clear()

    # ---- fleet page: everything the page computes
    def fleet_page():
        start, end = data.default_window(url, site_id)
        fleet = data.fleet_week(url, site_id, end)
        heat = data.pr_relative_heatmap(url, site_id, start, end)
        flags = data.week_flags(url, site_id, end)
        figs = [charts.pr_heatmap(heat), charts.fleet_quadrant(fleet)]
        return fleet, heat, flags, figs

    data.engine(url)  # the engine is a resource made once per server, not per page view
    cold, (fleet, heat, flags, _) = _timed(fleet_page, before=clear)
    warm, _ = _timed(fleet_page)
    start, end = data.default_window(url, site_id)
    trail_start = end - dt.timedelta(days=7 * (data.TRAILING_WEEKS + 1) - 1)
    eng = sa.create_engine(url)
    sql = ("SELECT d.* FROM daily_inverter d JOIN device v ON v.device_pk = d.device_pk "
           "WHERE v.site_id = :s AND d.day >= :a AND d.day <= :b")
    tb, base = _timed(pd.read_sql, sa.text(sql), eng,
                      params={"s": site_id, "a": min(start, trail_start).isoformat(),
                              "b": end.isoformat()})
    n_inv = fleet.shape[0]
    print(f"median of {REPEATS} runs; cold = every st.cache_data cleared first")
    print(f"fleet page ({n_inv} inverters, heatmap {heat.shape[0]} x {heat.shape[1]}): "
          f"cold {cold:.3f} s (target <= 1.5), warm {warm:.4f} s (target <= 0.3)")
    print(f"  baseline pd.read_sql of the same {len(base)} daily rows: {tb:.3f} s; "
          f"ratio cold/baseline {cold / tb:.1f}, warm/baseline {warm / tb:.2f}")

    # ---- drill-down: one inverter-week of 5-minute data + peers
    inv = data.inverter_list(url, site_id)["device_id"].iloc[0]
    w_end = pd.Timestamp(data.readings_end(url, site_id), unit="s", tz="UTC")
    w_start = w_end - pd.Timedelta(days=7)

    def drill():
        frame = data.drilldown_frame(url, site_id, inv, int(w_start.timestamp()),
                                     int(w_end.timestamp()))
        peers = data.peer_normalised_power(url, site_id, inv, int(w_start.timestamp()),
                                           int(w_end.timestamp()))
        fl = data.flags_for(url, site_id, [inv], int(w_start.timestamp()),
                            int(w_end.timestamp()))
        info = data.site_info(url, site_id)
        return frame, peers, charts.drilldown(frame, peers, fl, inv, info["std_offset_s"])

    dcold, (frame, peers, _) = _timed(drill, before=clear)
    dwarm, _ = _timed(drill)
    inv_row = data.inverter_list(url, site_id).set_index("device_id").loc[inv]
    devices = [inv, inv_row["poa_sensor_id"], inv_row["t_module_sensor_id"],
               inv_row["t_amb_sensor_id"], *sorted(peers["device_id"].unique())]
    names = ", ".join(f"'{d}'" for d in devices if d)
    sql = ("SELECT v.device_id, c.quantity, r.ts_s, r.value FROM reading_plain r "
           "JOIN channel c ON c.channel_id = r.channel_id "
           "JOIN device v ON v.device_pk = c.device_pk WHERE v.site_id = :s "
           f"AND v.device_id IN ({names}) AND r.ts_s >= :a AND r.ts_s < :b")
    tb2, base2 = _timed(pd.read_sql, sa.text(sql), eng,
                        params={"s": site_id, "a": int(w_start.timestamp()),
                                "b": int(w_end.timestamp())})
    print(f"drill-down ({inv}, {len(frame)} intervals, {peers['device_id'].nunique()} peers, "
          f"{len(peers)} peer rows): cold {dcold:.3f} s (target <= 0.3), warm {dwarm:.4f} s")
    print(f"  baseline pd.read_sql of the same {len(base2)} readings (inverter, its sensors, "
          f"peers): {tb2:.4f} s; ratio cold/baseline {dcold / tb2:.1f}, "
          f"warm/baseline {dwarm / tb2:.2f}")


if __name__ == "__main__":
    main()
