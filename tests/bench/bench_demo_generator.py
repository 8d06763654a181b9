"""Benchmark: the demo generator writing a fleet of 100 inverters x 5 years of 15-minute data
(target: well under two minutes; memory bounded by one month of data).

Run by hand: ``python tests/bench/bench_demo_generator.py [n_inverters] [years] [interval_min]``.

Measured: :func:`heliaudit.demo_generator.write_site` (full physics chain and gzip export,
month by month) into a temporary folder; wall time, MB written, and the process peak RSS
right after it (before the baseline runs). The machine is shared: read the ratio.

Baseline, same run, same shape: a plain writer that only formats the same number of rows and
integer columns with ``DataFrame.to_csv`` and gzips them month by month (random values, no
physics) — the least any generator of these files must do.
"""

from __future__ import annotations

import gzip
import resource
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from heliaudit import demo_generator as gen  # noqa: E402

warnings.simplefilter("ignore")


def baseline(sc: gen.Scenario, out: Path) -> float:
    times = gen.interval_starts_utc(sc)
    n_cols = len(gen.export_columns(sc))
    month = np.asarray(times.strftime("%Y-%m"))
    t0 = time.perf_counter()
    rng = np.random.default_rng(0)
    for key in np.unique(month):
        n = int((month == key).sum())
        df = pd.DataFrame(rng.integers(0, 300000, (n, n_cols)))
        df.insert(0, "ts", times[month == key].strftime(gen.TS_FORMAT))
        text = df.to_csv(sep=";", index=False)
        (out / f"base_{key}.csv.gz").write_bytes(gzip.compress(text.encode("latin-1"), mtime=0))
    return time.perf_counter() - t0


def main() -> None:
    n_inv = int(sys.argv[1]) if len(sys.argv) > 1 else 100
    years = int(sys.argv[2]) if len(sys.argv) > 2 else 5
    interval = int(sys.argv[3]) if len(sys.argv) > 3 else 15
    sc = gen.quillpond_scenario(n_inverters=n_inv, months=12 * years, interval_min=interval,
                                site_id=f"fleet{n_inv}")
    with tempfile.TemporaryDirectory() as tmp:
        t0, c0 = time.perf_counter(), time.process_time()
        summary = gen.write_site(sc, Path(tmp) / "gen")
        t_gen, c_gen = time.perf_counter() - t0, time.process_time() - c0
        rss_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        (Path(tmp) / "base").mkdir()
        c0 = time.process_time()
        t_base = baseline(sc, Path(tmp) / "base")
        c_base = time.process_time() - c0
    values = summary["n_intervals"] * len(gen.export_columns(sc))
    print(f"demo generator: {n_inv} inverters x {years} yr at {interval} min = "
          f"{summary['n_intervals']} intervals, {values / 1e6:.1f} M values")
    print(f"  write_site         {t_gen:7.1f} s  ({values / t_gen / 1e6:.2f} M values/s), "
          f"{summary['bytes'] / 1e6:.1f} MB gzip, {len(summary['files'])} files")
    print(f"  baseline to_csv    {t_base:7.1f} s  (random ints, no physics)")
    print(f"  ratio              {t_gen / t_base:7.2f}")
    print(f"  CPU time           {c_gen:7.1f} s generator, {c_base:.1f} s baseline, "
          f"ratio {c_gen / c_base:.2f} (robust to a busy machine)")
    print(f"  process peak RSS after the generator {rss_mb:.0f} MB")


if __name__ == "__main__":
    main()
