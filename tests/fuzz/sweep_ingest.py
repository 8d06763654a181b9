"""Mutation sweep of ``heliaudit ingest`` (issue #12), run by hand; not collected by pytest.

Writes a clean invented export (two inverters with power and energy counter, irradiance,
module temperature; 15-min rows), applies N seeded random mutations (one or more per file:
byte flips, lone CR, NUL, huge fields, stray quotes, whitespace-only lines, NaN spellings,
1e300 values, far years, gaps, truncated or corrupt gzip, UTF-16 without BOM, ...), ingests
each file into a fresh SQLite store through the CLI in-process and counts:

* ``traceback``: an exception escaped the command (or it printed a bare ``Aborted!``);
* ``error_without_line``: an ``Error:``/FAILED message that names no file and line;
* ``accounting``: data lines != loaded + duplicate + rejected + blank (``lost`` sums the lines
  not accounted for);
* ``bad_value_loaded``: a stored reading that is NaN/inf, |x| > 1e6 or a NaN spelling that was
  not configured as missing;
* ``exit_status``: exit 0 for a file with no usable row, or non-zero with every file loaded.

Usage (from the repo root; ~0.2 s per file)::

    python tests/fuzz/sweep_ingest.py --files 300 --seed 1
    PYTHONPATH=/path/to/old/checkout python tests/fuzz/sweep_ingest.py ...   # a baseline
"""

from __future__ import annotations

import argparse
import gzip
import random
import re
import sys
import tempfile
import traceback
from collections import Counter
from pathlib import Path


def _helpers_config():
    """tests/helpers_config.py loaded by path (no project imports), so that a baseline run
    with PYTHONPATH pointing at another checkout still measures that checkout's code."""
    import importlib.util

    path = Path(__file__).resolve().parents[1] / "helpers_config.py"
    spec = importlib.util.spec_from_file_location("helpers_config", path)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def config_text(encoding: str, fmt: str, zone: str, label: str) -> str:
    """The fuzz site (invented): two inverters on one pyranometer and one module sensor."""
    hc = _helpers_config()
    return hc.site_toml("fuzz", "Fuzz site (invented)", timezone="Europe/Madrid",
                        latitude_deg=40.4, longitude_deg=-3.7,
                        inverters=(("INV1", 120.0, 100.0), ("INV2", 120.0, 100.0))) + \
        hc.source_toml("scada", "fuzz_*", [
            ("{inverter}_PAC", None, "p_ac_kw", "kW"), ("{inverter}_E", None, "e_ac_total_kwh", "kWh"),
            ("Irr", "POA1", "poa_wm2", "W/m2"), ("TMod", "TMOD1", "t_module_c", "C")],
            encoding=encoding, fmt=fmt, zone=zone, label=label)


HEADER = "Time,INV1_PAC,INV2_PAC,INV1_E,INV2_E,Irr,TMod"


def clean_rows(n: int, rng: random.Random, iso: bool = False) -> list[str]:
    import datetime as dt

    t0 = dt.datetime(2023, 6, 1)
    rows, e1, e2 = [], 1000.0, 2000.0
    for k in range(n):
        t = t0 + dt.timedelta(minutes=15 * k)
        hour = t.hour + t.minute / 60
        g = max(0.0, 1000 * __import__("math").sin(__import__("math").pi * (hour - 6) / 12))
        p1, p2 = round(g * 0.09, 2), round(g * 0.088, 2)
        e1 += p1 / 4
        e2 += p2 / 4
        ts = t.strftime("%Y-%m-%dT%H:%M:%S") if iso else t.strftime("%Y-%m-%d %H:%M")
        rows.append(f"{ts},{p1},{p2},{e1:.2f},{e2:.2f},{g:.1f},{20 + g / 40:.1f}")
    return rows


def mutate(rows: list[str], rng: random.Random) -> tuple[list[str], str]:
    """One text-level mutation of the data rows; returns the rows and the mutation's name."""
    full = [k for k, x in enumerate(rows) if x.count(",") == 6] or list(range(len(rows)))
    i = rng.choice(full)  # a row with all its fields, where there is one
    kind = rng.choice([
        "lone_cr", "nul", "huge_field", "quote_start", "quote_mid", "ws_formfeed", "ws_nbsp",
        "ws_vtab", "blank", "nan_spelling", "huge_value", "inf", "far_year", "old_year",
        "gap_end", "delete_char", "dup_line", "swap_lines", "extra_field", "missing_field",
        "garbage_line", "truncate_line", "bad_ts", "negative_power", "byte_flip", "unicode",
        "only_delims", "all_bad", "counter_1e308", "neg_irr", "irr_9999", "crlf",
    ])
    r = rows[:]
    cells = (r[i].split(",") + [""] * 7)[:max(7, r[i].count(",") + 1)]
    if kind == "lone_cr":
        r[i] = r[i][:5] + "\r" + r[i][5:]
    elif kind == "nul":
        r[i] = r[i].replace(",", ",\x00", 1)
    elif kind == "huge_field":
        cells[rng.randrange(1, len(cells))] = "9" * 140_000
        r[i] = ",".join(cells)
    elif kind == "quote_start":
        cells[rng.randrange(1, len(cells))] = '"' + cells[1]
        r[i] = ",".join(cells)
    elif kind == "quote_mid":
        r[i] = r[i].replace(",", ',"', 1) + '"x'
    elif kind == "ws_formfeed":
        r.insert(i, "\f")
    elif kind == "ws_nbsp":
        r.insert(i, "\u00a0 ")
    elif kind == "ws_vtab":
        r.insert(i, " \v ")
    elif kind == "blank":
        r.insert(i, "")
    elif kind == "nan_spelling":
        cells[rng.randrange(1, len(cells))] = rng.choice(["nAn", "NAN", "-nan", "+NaN", "NaN%"])
        r[i] = ",".join(cells)
    elif kind == "huge_value":
        cells[rng.randrange(1, len(cells))] = rng.choice(["1e300", "-1e300", "1e30"])
        r[i] = ",".join(cells)
    elif kind == "inf":
        cells[rng.randrange(1, len(cells))] = rng.choice(["inf", "-Infinity", "1e400"])
        r[i] = ",".join(cells)
    elif kind == "far_year":
        r[i] = rng.choice(["2261", "2263", "9999", "3000"]) + r[i][4:]
    elif kind == "old_year":
        r[i] = rng.choice(["1677", "1500", "0001", "1969"]) + r[i][4:]
    elif kind == "gap_end":
        r = r[:-40] + [r[-1]]
    elif kind == "delete_char":
        j = rng.randrange(len(r[i]))
        r[i] = r[i][:j] + r[i][j + 1:]
    elif kind == "dup_line":
        r.insert(i, r[i])
    elif kind == "swap_lines":
        j = rng.randrange(len(r))
        r[i], r[j] = r[j], r[i]
    elif kind == "extra_field":
        r[i] += ",1"
    elif kind == "missing_field":
        r[i] = ",".join(cells[:-1])
    elif kind == "garbage_line":
        r.insert(i, "".join(rng.choice('abc,;"\t\\x7f\u00e9') for _ in range(rng.randrange(1, 40))))
    elif kind == "truncate_line":
        r[i] = r[i][: rng.randrange(len(r[i]))]
    elif kind == "bad_ts":
        r[i] = rng.choice(["2023-13-01 00:00", "2023-06-31 00:00", "yesterday", "", "2023-06-01"]) + \
            r[i][16:]
    elif kind == "negative_power":
        cells[1] = rng.choice(["-50", "-2", "-0.5"])
        r[i] = ",".join(cells)
    elif kind == "byte_flip":
        j = rng.randrange(len(r[i]))
        r[i] = r[i][:j] + chr(rng.randrange(1, 0x2FF)) + r[i][j + 1:]
    elif kind == "unicode":
        r[i] = r[i].replace("1", "\u0661", 1)  # Arabic-Indic digit one
    elif kind == "only_delims":
        r.insert(i, ",,,,,,")
    elif kind == "all_bad":
        r = ["x" + x[1:] for x in r]
    elif kind == "counter_1e308":
        cells[3] = "1e308"
        r[i] = ",".join(cells)
    elif kind == "neg_irr":
        cells[5] = "-500"
        r[i] = ",".join(cells)
    elif kind == "irr_9999":
        cells[5] = "9999"
        r[i] = ",".join(cells)
    elif kind == "crlf":
        r = [x + "\r" for x in r]
    return r, kind


def build(rng: random.Random, folder: Path, n: int) -> tuple[Path, Path, dict]:
    """A config and one mutated export; returns their paths and what was done."""
    iso = rng.random() < 0.2
    label = rng.choice(["start", "end"])
    rows = clean_rows(rng.randrange(20, 120), rng, iso)
    kinds = []
    for _ in range(rng.choice([1, 1, 1, 2, 3])):
        rows, k = mutate(rows, rng)
        kinds.append(k)
    text = HEADER + "\n" + "\n".join(rows) + "\n"
    container = rng.choice(["plain"] * 6 + ["gzip", "gzip_truncated", "gzip_corrupt", "utf16_nobom",
                                              "utf16"])
    encoding = "utf-8"
    if container.startswith("utf16"):
        encoding = "utf-16"
        data = text.encode("utf-16-le") if container == "utf16_nobom" else text.encode("utf-16")
    else:
        try:
            data = text.encode("utf-8")
        except UnicodeEncodeError:
            data = text.encode("utf-8", "surrogatepass")
        if container.startswith("gzip"):
            data = gzip.compress(data)
            if container == "gzip_truncated":
                data = data[: rng.randrange(2, len(data))]
            elif container == "gzip_corrupt":
                j = rng.randrange(10, len(data))
                data = data[:j] + bytes([data[j] ^ 0x5A]) + data[j + 1:]
    kinds.append(container)
    fmt = "iso8601" if iso else "%Y-%m-%d %H:%M"
    zone = rng.choice(["UTC", "local", "+01:00"])
    cfg = folder / "fuzz.toml"
    cfg.write_text(config_text(encoding, fmt, zone, label))
    f = folder / f"fuzz_{n:05d}.csv"
    f.write_bytes(data)
    data_lines = text.count("\n") - 1  # after the header line
    blank = sum(1 for x in text.split("\n")[1:-1] if not x.strip())
    return cfg, f, {"kinds": kinds, "data_lines": data_lines, "blank_lines": blank,
                    "container": container}


_COUNTS = re.compile(r": (\d+) rows: (\d+) loaded, (\d+) duplicate, (\d+) rejected(?:, (\d+) blank)?")


def run_one(cfg: Path, f: Path, db: Path, info: dict) -> Counter:
    from click.testing import CliRunner

    from heliaudit.cli import main

    out = Counter()
    res = CliRunner().invoke(main, ["--db", str(db), "ingest", "--no-compute", "--silent",
                                    str(cfg), str(f)])
    text = res.output + (getattr(res, "stderr", "") or "")
    if res.exception is not None and not isinstance(res.exception, SystemExit):
        out["traceback"] += 1
        out["tb:" + type(res.exception).__name__] += 1
        info["tb"] = "".join(traceback.format_exception(res.exception))[-600:]
        return out
    if "Aborted!" in text:
        out["traceback"] += 1
        out["tb:Aborted"] += 1
        return out
    m = _COUNTS.search(text)
    failed = "FAILED" in text
    if failed:
        msg = text.split("FAILED:", 1)[1].splitlines()[0]
        if not re.search(re.escape(f.name) + r":\d+", msg):
            out["error_without_line"] += 1
            info["msg"] = msg[:200]
        return out
    if not m:
        out["no_summary"] += 1
        info["msg"] = text[:300]
        return out
    read, loaded, dup, rej = (int(m.group(k)) for k in range(1, 5))
    blank = int(m.group(5) or 0) if m.group(5) is not None else info["blank_lines"]
    lost = info["data_lines"] - (loaded + dup + rej + blank)
    if lost:
        out["accounting"] += 1
        out["lost_lines"] += max(0, lost)
        info["lost"] = lost
    if loaded + dup == 0 and res.exit_code == 0:
        out["exit_status"] += 1
    import numpy as np
    import sqlalchemy as sa

    from db import readings

    eng = sa.create_engine(f"sqlite:///{db}")
    with eng.connect() as c:
        chans = c.execute(sa.text("SELECT channel_id FROM channel")).scalars().all()
        v = readings.read_many(c, chans)["value"]
        bad = int((~np.isfinite(v) | (np.abs(v) > 1e6)).sum())
    eng.dispose()
    if bad:
        out["bad_value_loaded"] += 1
    if any(k == "nan_spelling" for k in info["kinds"]) and "not a number" not in text \
            and rej == 0 and "values" in text and ", 0 rejected" in text.split("values:")[-1]:
        out["nan_spelling_silent"] += 1
    if "irr_9999" in info["kinds"] or "huge_value" in info["kinds"] or "counter_1e308" in info["kinds"]:
        if ", 0 rejected" in text.split("values:")[-1] and rej == 0:
            out["limit_not_applied"] += 1
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--files", type=int, default=300)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--show", type=int, default=5, help="examples to print per problem")
    a = ap.parse_args(argv)
    rng = random.Random(a.seed)
    total = Counter()
    examples: dict[str, list] = {}
    by_kind = Counter()
    with tempfile.TemporaryDirectory() as tmp:
        for n in range(a.files):
            folder = Path(tmp) / f"f{n}"
            folder.mkdir()
            cfg, f, info = build(rng, folder, n)
            res = run_one(cfg, f, folder / "s.sqlite", info)
            total.update(res)
            for k in res:
                if not k.startswith("tb:") and k != "lost_lines":
                    examples.setdefault(k, []).append(info)
                    for kk in info["kinds"]:
                        by_kind[(k, kk)] += 1
    import heliaudit

    print(f"code: {Path(heliaudit.__file__).parent.parent}")
    print(f"files: {a.files} (seed {a.seed})")
    for k in ("traceback", "error_without_line", "accounting", "lost_lines", "bad_value_loaded",
              "nan_spelling_silent", "limit_not_applied", "exit_status", "no_summary"):
        print(f"  {k}: {total.get(k, 0)}")
    for k, v in sorted(total.items()):
        if k.startswith("tb:"):
            print(f"    {k}: {v}")
    for (k, kk), v in sorted(by_kind.items()):
        print(f"    {k} with {kk}: {v}")
    for k, ex in examples.items():
        for info in ex[: a.show]:
            print(f"  example {k}: {info.get('kinds')} {info.get('msg', '')!r} "
                  f"lost={info.get('lost')} {info.get('tb', '')[-300:]!r}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
