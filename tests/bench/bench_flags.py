"""Benchmark: every flag for 100 inverters x 5 years of 15-minute data (target <= 30 s).

Run by hand: ``python tests/bench/bench_flags.py [n_inverters] [years]``.

Input is synthetic and in memory (no database): one site's weather from pvlib clear sky
with seeded clouds, 100 inverters sharing one POA and one module-temperature sensor, each
with its own noise, plus injected faults (an outage, a string loss, a stuck sensor) so the
detectors have events to process. Frames are built lazily, one inverter at a time, as
``db.timeseries.inverter_frames`` yields them; building them is inside both timings.

Baseline, same run, same frames: a plain pass that only sums each inverter's energy per
day (``groupby(day).sum()``) — the least any per-day analysis of the data must do.
"""

from __future__ import annotations

import os
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from heliaudit.jobs_flags import compute_flags  # noqa: E402
from tests.flags_synth import ALT, AZ, LAT, LON, TILT, site_weather  # noqa: E402

warnings.simplefilter("ignore")


def make_inputs(n_inv: int, years: int):
    w = site_weather(start="2020-01-01", days=int(365.25 * years), seed=1)
    g = w["poa_wm2"].to_numpy()
    tm = w["t_module_c"].to_numpy()
    g_stuck = g.copy()
    g_stuck[96 * 400 + 40: 96 * 401 + 60] = 480.0  # stuck POA sensor for a day
    idx = w.index.rename("ts_utc")
    tau = np.full(len(idx), 0.25)
    p_clean = np.clip(120 * g / 1000 * (1 - 0.0035 * (tm + g / 1000 * 3 - 25)) * 0.96, 0, 100)
    inverters = pd.DataFrame({
        "device_id": [f"inv{i:03d}" for i in range(n_inv)], "p_dc_kwp": 120.0,
        "p_ac_max_kw": 100.0, "gamma_pmp_per_c": -0.0035, "eta_inv_nom": 0.96,
        "mounting": "open_rack_glass_polymer", "poa_sensor_id": "poa1", "peer_group": "site"})

    def frames():
        for i, inv in enumerate(inverters.to_dict("records")):
            rng = np.random.default_rng(i)
            p = p_clean * (1 + 0.005 * rng.standard_normal(len(idx)))
            if i == 3:
                p[96 * 200 + 30: 96 * 202 + 60] = 0.0  # outage
            if i == 7:
                p[96 * 500: 96 * 540] *= 0.85  # string loss
            yield inv, pd.DataFrame({"p_ac_kw": p, "e_ac_kwh": p * 0.25, "poa_wm2": g_stuck,
                                     "t_module_c": tm, "t_amb_c": np.nan, "wind_ms": np.nan,
                                     "interval_h": tau}, index=idx)

    sensors = [("poa1", "poa_wm2", pd.Series(g_stuck, index=idx)),
               ("tmod1", "t_module_c", pd.Series(tm, index=idx))]
    # daily table as the daily job would store it (pi with 1 % noise and a string loss)
    days = pd.date_range("2020-01-01", periods=int(365.25 * years), freq="D")
    rng = np.random.default_rng(99)
    weather = 0.97 + 0.02 * rng.standard_normal(len(days))
    rows = []
    for i, dev in enumerate(inverters["device_id"]):
        pi = weather * (1 + 0.01 * rng.standard_normal(len(days)))
        if i == 7:
            pi[500:540] *= 0.85
        rows.append(pd.DataFrame({"device_id": dev, "day": days.date, "pi": pi,
                                  "day_valid": True, "e_exp_kwh": 450.0, "h_poa_kwhm2": 6.0}))
    daily = pd.concat(rows, ignore_index=True)
    site = dict(timezone="America/Denver", latitude_deg=LAT, longitude_deg=LON, altitude_m=ALT,
                tilt_deg=TILT, azimuth_deg=AZ, albedo=0.2)
    return site, inverters, frames, sensors, daily


def main(n_inv: int = 100, years: int = 5) -> None:
    t0 = time.perf_counter()
    site, inverters, frames, sensors, daily = make_inputs(n_inv, years)
    t_setup = time.perf_counter() - t0
    n_rows = len(sensors[0][2])

    t0, c0 = time.perf_counter(), time.process_time()
    total = 0.0
    for _inv, f in frames():
        day = f.index.as_unit("s").asi8 // 86400
        total += f["e_ac_kwh"].groupby(day).sum().sum()
    t_base, c_base = time.perf_counter() - t0, time.process_time() - c0

    t0, c0 = time.perf_counter(), time.process_time()
    flags = compute_flags(site, inverters, frames(), sensors, daily,
                          economics={"tariff_per_kwh": 0.08, "cleaning_cost": 1500.0})
    t_flags, c_flags = time.perf_counter() - t0, time.process_time() - c0

    print(f"input: {n_inv} inverters x {years} years x 15-min = {n_inv * n_rows:,} rows "
          f"(synthetic, in memory; weather set-up {t_setup:.1f} s, not timed)")
    print(f"flags: {t_flags:.1f} s wall, {c_flags:.1f} s CPU for {len(flags)} flags "
          f"({n_inv * n_rows / t_flags / 1e6:.2f} M rows/s wall); target <= 30 s")
    print(f"baseline (daily energy sums, same frames): {t_base:.1f} s wall, {c_base:.1f} s CPU")
    print(f"ratio flags / baseline: {t_flags / t_base:.1f} wall, {c_flags / c_base:.1f} CPU")
    print(f"load average at the end: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores "
          "(shared machine: wall time includes other processes)")
    print("flags by kind:", flags["kind"].value_counts().to_dict())


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:3]))
