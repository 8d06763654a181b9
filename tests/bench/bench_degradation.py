"""Benchmark (issue #7): every degradation method, with bootstrap, for 100 inverters x 5 years.

Target: at most 10 s on this machine. Input: synthetic daily tables (our generator,
tests/degradation_synth.py) with seasonality, AR(1) noise, outliers and gaps; every fifth
inverter gets a 5 % step. Per inverter: year-on-year (1000 block-bootstrap resamples),
RLM + HAC, STL + RLM, peer-relative year-on-year, change points (PELT), year-on-year within
stable segments and a clear-sky year-on-year on a clear-day subset (the daily clear-sky index;
the interval-level clear-period detection is timed separately for one site), plus the site.

Baseline from the same run: one ordinary least-squares line per inverter (numpy.polyfit).
The methods run in the job's process pool (``HELIAUDIT_WORKERS``, default 2 on this machine)
and once more in one process; CPU time includes the workers.
Run by hand: ``python tests/bench/bench_degradation.py [n_inverters] [years] [n_resamples]
[--before SRC]``. ``--before SRC`` first runs the same benchmark of another checkout (e.g. a
clone of the previous main) in a child process and prints the ratio of the two all-methods
wall times, so a change is judged against "today's" code measured in the same run.
"""

from __future__ import annotations

import re
import resource
import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from analytics import degradation as adeg  # noqa: E402
from heliaudit.jobs_degradation import DEFAULTS, default_workers, methods_many  # noqa: E402
from tests.degradation_synth import daily_pi, interval_site  # noqa: E402


def make_fleet(n: int, years: float) -> tuple[dict, dict, dict]:
    rng = np.random.default_rng(7)
    pis, weights, clear = {}, {}, {}
    for i in range(n):
        s = daily_pi(years=years, rd_pct_per_yr=float(rng.uniform(-1.0, -0.2)), noise=0.01,
                     ar1=0.5, outlier_fraction=0.02, gap_fraction=0.05,
                     step_day=800 if i % 5 == 0 else None, step=-0.05, seed=i).dropna()
        pis[f"INV{i:03d}"] = s
        weights[f"INV{i:03d}"] = pd.Series(rng.uniform(200, 600, len(s)), s.index)
        c = s * (1 + rng.normal(0, 0.003, len(s)))
        clear[f"INV{i:03d}"] = c.where(rng.random(len(s)) < 0.4)
    return pis, weights, clear


def run_all(pis, weights, clear, p, workers: int | None = None) -> int:
    """Every method for every inverter and the site, as run_degradation runs them."""
    ratio = adeg.peer_relative_pi(pd.DataFrame(pis), min_peers=p["min_peers"])
    tasks = [dict(s=pis[dev], weights=weights[dev], ratio=ratio[dev], clear_pi=clear[dev],
                  clear_reason=None, p=p, rng_key=k) for k, dev in enumerate(pis)]
    tasks.append(dict(s=pd.DataFrame(pis).median(axis=1), weights=None, ratio=None,
                      clear_pi=pd.DataFrame(clear).median(axis=1), clear_reason=None, p=p,
                      rng_key=len(pis)))
    out = methods_many(tasks, workers=workers)
    return sum(all(r.rate_pct_per_yr is not None for m, r in res.items()
                   if m not in ("sensor_year_pairs_between_shifts",  # no shift: refused
                                "modelled_sky_between_shifts",
                                "sensor_year_pairs_unsoiled"))  # no soiling: refused
               for res, _ in out[:-1])


def _cpu() -> float:
    """CPU seconds of this process and of its finished child processes (the pool workers)."""
    own = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + kids.ru_utime + kids.ru_stime


def baseline(pis) -> float:
    t0 = time.perf_counter()
    for s in pis.values():
        t = ((s.index - s.index[0]) / pd.Timedelta(days=365.25)).to_numpy(dtype=float)
        b, a = np.polyfit(t, s.to_numpy(), 1)
        _ = 100 * b / a
    return time.perf_counter() - t0


def main(n: int = 100, years: float = 5.0, n_resamples: int | None = None) -> None:
    warnings.simplefilter("ignore")
    pis, weights, clear = make_fleet(n, years)
    p = dict(DEFAULTS)
    if n_resamples:
        p["n_resamples"] = n_resamples
    c0 = time.process_time()
    t_base = baseline(pis)
    c_base = time.process_time() - c0
    workers = default_workers(n + 1)
    t0, c0 = time.perf_counter(), _cpu()
    n_ok = run_all(pis, weights, clear, p, workers=workers)
    t_all, c_all = time.perf_counter() - t0, _cpu() - c0
    t0, c0 = time.perf_counter(), _cpu()
    run_all(pis, weights, clear, p, workers=1)
    t_one, c_one = time.perf_counter() - t0, _cpu() - c0
    print(f"degradation, all methods with bootstrap ({p['n_resamples']} resamples), "
          f"{n} inverters x {years:g} years + site, {workers} worker process(es): {t_all:.2f} s "
          f"({1000 * t_all / (n + 1):.0f} ms per series; {n_ok}/{n} inverters with every method)")
    print(f"  CPU time (this process and its workers): {c_all:.2f} s (CPU/wall {c_all / t_all:.2f};"
          f" below {workers} means other work shared the cores)")
    print(f"  same in one process: {t_one:.2f} s wall, {c_one:.2f} s CPU")
    print(f"baseline, one OLS line per inverter (numpy.polyfit): {t_base:.3f} s wall, "
          f"{c_base:.3f} s CPU")
    print(f"ratio all-methods / baseline: {t_all / t_base:.0f}x wall, {c_one / c_base:.0f}x CPU "
          f"(one process); target <= 10 s wall: {'met' if t_all <= 10 else 'NOT met'}")
    # interval-level clear-period detection, one 10-inverter site, 1 year of 30-min data
    _clearsky_timing()
    return t_all, c_one


def _clearsky_timing() -> None:
    t0 = time.perf_counter()
    site = interval_site(years=1, rates_pct_per_yr=(-0.5,) * 10, seed=2)
    t_gen = time.perf_counter() - t0
    from analytics.clearsky import clearsky_daily_pi, detect_clear_periods
    t0 = time.perf_counter()
    fleet = 1000 * site["p_ac"].sum(axis=1) / (site["p_dc_kwp"] * 10)
    clear_t = detect_clear_periods(fleet, site["poa_cs"])
    for name in site["p_ac"]:
        clearsky_daily_pi(site["p_ac"][name], site["poa_cs"], clear_t, p_dc_kwp=100,
                          gamma_pmp_per_c=site["gamma"], t_cell_c=site["t_cell"])
    t_cs = time.perf_counter() - t0
    print(f"clear-sky periods + daily clear-sky index, 10 inverters x 1 year of 30-min data: "
          f"{t_cs:.2f} s (clear-sky POA modelling for the generator: {t_gen:.2f} s)")


def before(src: str, argv: list[str]) -> tuple[float, float] | None:
    """Run ``src``'s own copy of this benchmark in a child process (its code on PYTHONPATH);
    return its (all-methods wall, one-process CPU) seconds."""
    script = Path(src) / "tests" / "bench" / "bench_degradation.py"
    out = subprocess.run([sys.executable, str(script), *argv], capture_output=True, text=True,
                         env={**__import__("os").environ, "PYTHONPATH": str(src)}, check=False,
                         cwd=src)
    print("before (" + src + "):\n  " + "\n  ".join(out.stdout.strip().splitlines()))
    m = re.search(r"process\(es\): ([\d.]+) s", out.stdout)
    c = re.search(r"one process: [\d.]+ s wall, ([\d.]+) s CPU", out.stdout)
    return (float(m.group(1)), float(c.group(1))) if m and c else None


if __name__ == "__main__":
    argv = sys.argv[1:]
    src = None
    if "--before" in argv:
        k = argv.index("--before")
        src = argv[k + 1]
        argv = argv[:k] + argv[k + 2:]
    args = [float(a) for a in argv]
    prev = before(src, argv) if src else None
    now = main(int(args[0]) if args else 100, args[1] if len(args) > 1 else 5.0,
               int(args[2]) if len(args) > 2 else None)
    if prev:
        print(f"after / before: {now[0] / prev[0]:.2f}x wall (pool), {now[1] / prev[1]:.2f}x CPU "
              f"(one process); target <= 1.5x")
