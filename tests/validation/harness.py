"""Validation harness (issue #13): synthetic fleet -> site config -> whole pipeline -> scorer.

Uses the independent generator and scorer in ``../shared/validation/synth_fleet.py`` (outside
this repository; never copied in). One :func:`run_case` call:

1. generates a scenario + seed (+ ``--set`` overrides) into a temporary folder;
2. writes a heliaudit site TOML from the generator's ``site.json`` and the header line of one
   export file, exactly what a user has in hand (``truth.json`` is never read here);
3. runs the pipeline through the CLI into a fresh SQLite store:
   ``heliaudit ingest``, ``heliaudit compute``, ``heliaudit results``;
4. maps the results document into the scorer's accepted shape (:func:`map_results`) and runs
   ``synth_fleet.py --score``, returning the scorer's JSON report.

Only the scoring side (the scorer, and :func:`warning_rates` in the scorecard) looks at the
truth. Run by hand; these scripts are not collected by pytest (``tests/validation`` has no
``test_*`` files) and skip with a reason when ``../shared/validation`` is absent.

Example::

    python tests/validation/harness.py clean 7 --set n_inverters=6 --set years=3
"""

from __future__ import annotations

import argparse
import json
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]


def _find_shared() -> Path:
    """``../shared`` beside the repository (for a git worktree: beside the main checkout)."""
    if os.environ.get("HELIAUDIT_SHARED"):
        return Path(os.environ["HELIAUDIT_SHARED"])
    cands = [REPO.parent / "shared"]
    try:
        common = subprocess.run(["git", "-C", str(REPO), "rev-parse", "--git-common-dir"],
                                capture_output=True, text=True, check=False).stdout.strip()
        if common:
            cands.append((REPO / common).resolve().parent.parent / "shared")
    except OSError:
        pass
    cands.append(REPO.parent.parent / "shared")
    return next((c for c in cands if (c / "validation").is_dir()), cands[0])


SHARED = _find_shared()
GENERATOR = SHARED / "validation" / "synth_fleet.py"


def shared_available() -> tuple[bool, str]:
    """Whether the outside generator exists, and the reason when it does not."""
    if GENERATOR.is_file():
        return True, ""
    return False, (f"skipped: the independent generator {GENERATOR} is absent (it lives outside "
                   "the repository, in ../shared/validation/; set HELIAUDIT_SHARED to its parent)")


def _heliaudit() -> list[str]:
    exe = shutil.which("heliaudit", path=str(Path(sys.executable).parent))
    return [exe] if exe else [sys.executable, "-m", "heliaudit.cli"]


def _run(cmd: list[str], *, log: Path, env: dict | None = None) -> subprocess.CompletedProcess:
    with open(log, "a", encoding="utf-8") as fh:
        fh.write("$ " + " ".join(cmd) + "\n")
        fh.flush()
        res = subprocess.run(cmd, stdout=fh, stderr=subprocess.STDOUT, env=env, check=False)
    return res


# ---------------------------------------------------------------- site configuration

_KIND_TO_QUANTITY = {
    "poa_irradiance": "poa_wm2", "global_horizontal_irradiance": "ghi_wm2",
    "ghi": "ghi_wm2", "horizontal_irradiance": "ghi_wm2",
    "module_temperature": "t_module_c", "ambient_temperature": "t_amb_c",
    "wind_speed": "wind_ms", "rain": "rain_mm",
}
_INV_REF = {"poa_irradiance": "poa_sensor", "module_temperature": "t_module_sensor",
            "ambient_temperature": "t_amb_sensor", "wind_speed": "wind_sensor"}


def _toml_str(v: str) -> str:
    return json.dumps(str(v), ensure_ascii=False)


def sniff_export(path: Path) -> dict:
    """Dialect of one export file as a user reads it off the file: encoding (BOM), delimiter,
    decimal separator, header names with their bracketed units, missing-value token."""
    raw = path.read_bytes()
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        enc, text = "utf-16", raw.decode("utf-16")
    else:
        enc, text = "utf-8", raw.decode("utf-8-sig")
    lines = text.splitlines()
    header = lines[0]
    delim = ";" if header.count(";") > header.count(",") else ","
    names = [h.strip() for h in header.split(delim)]
    body = "\n".join(lines[1:200])
    decimal = "," if delim == ";" and re.search(r"\d,\d", body) else "."
    tokens = {t.strip() for ln in lines[1:2000] for t in ln.split(delim)[1:]}
    missing = ["", "-", "NaN", "nan", "#N/A", "N/A", "null"]
    missing += sorted(t for t in tokens if t and not re.fullmatch(r"[-+]?[\d.,]+(e[-+]?\d+)?", t)
                      and t not in missing)
    cols = []
    for n in names[1:]:
        m = re.fullmatch(r"(.+?)\s*\[(.+)\]", n)
        cols.append((n, m.group(1).strip(), m.group(2).strip()) if m else (n, n, None))
    return {"encoding": enc, "delimiter": delim, "decimal": decimal, "timestamp": names[0],
            "columns": cols, "missing": missing}


def site_toml(site_json: dict, export_dir: Path, config_dir: Path) -> str:
    """heliaudit site TOML (format 1) for a generated site, from site.json and an export header."""
    site = site_json["site"]
    files = sorted(export_dir.glob("*.csv"))
    if not files:
        raise FileNotFoundError(f"no CSV exports in {export_dir}")
    dia = sniff_export(files[0])
    sensors = {s["id"]: s for s in site_json["sensors"]}
    rel = os.path.relpath(export_dir, config_dir)
    out = ["format_version = 1", "", "[site]",
           f"id = {_toml_str(site['id'])}", f"name = {_toml_str(site.get('name', site['id']))}",
           f"timezone = {_toml_str(site['timezone'])}",
           f"latitude_deg = {float(site['latitude'])}", f"longitude_deg = {float(site['longitude'])}",
           f"altitude_m = {float(site.get('altitude_m', 0.0))}",
           f"tilt_deg = {float(site['tilt_deg'])}", f"azimuth_deg = {float(site['azimuth_deg'])}"]
    if "albedo" in site:
        out.append(f"albedo = {float(site['albedo'])}")
    out.append("")
    for sid, s in sensors.items():
        q = _KIND_TO_QUANTITY.get(s["kind"])
        if q is None:
            continue
        out += ["[[sensors]]", f"id = {_toml_str(sid)}", f"quantity = {_toml_str(q)}"]
        if q in ("poa_wm2", "ghi_wm2"):
            inst = "reference_cell" if "reference cell" in s.get("instrument", "").lower() \
                else "thermopile_pyranometer"
            out.append(f"instrument = {_toml_str(inst)}")
        out.append("")
    commissioned = site.get("commissioning_date")
    for inv in site_json["inverters"]:
        out += ["[[inverters]]", f"id = {_toml_str(inv['id'])}",
                f"p_dc_kwp = {float(inv['dc_capacity_kw'])}",
                f"p_ac_max_kw = {float(inv['ac_capacity_kw'])}",
                f"gamma_pmp_per_c = {float(inv['gamma_pdc_per_degC'])}",
                f"mounting = {_toml_str(inv['mounting'])}",
                f"commissioned = {commissioned}"]
        for kind, key in _INV_REF.items():
            sid = inv.get("sensors", {}).get(kind)
            if sid and sid in sensors:
                out.append(f"{key} = {_toml_str(sid)}")
        out.append("")
    ts_fmt = "%Y-%m-%d %H:%M"
    out += ["[[sources]]", 'name = "logger"', f"folder = {_toml_str(rel)}", 'pattern = "*.csv"',
            'layout = "wide"', f"encoding = {_toml_str(dia['encoding'])}",
            f"delimiter = {_toml_str(dia['delimiter'])}", f"decimal = {_toml_str(dia['decimal'])}",
            "missing_values = [" + ", ".join(_toml_str(m) for m in dia["missing"]) + "]", "",
            "[sources.timestamp]", f"column = {_toml_str(dia['timestamp'])}",
            f"format = {_toml_str(ts_fmt)}", 'zone = "local"', 'label = "end"', ""]
    inv_ids = {i["id"] for i in site_json["inverters"]}
    quantities = {"Pac": "p_ac_kw", "Pdc": "p_dc_kw"}
    for header, name, unit in dia["columns"]:
        parts = name.split()
        if parts[0] in inv_ids and len(parts) > 1 and parts[1] in quantities:
            out += ["[[sources.columns]]", f"header = {_toml_str(header)}",
                    f"device = {_toml_str(parts[0])}", f"quantity = {_toml_str(quantities[parts[1]])}",
                    f"unit = {_toml_str(unit or 'kW')}", ""]
        elif name in sensors and _KIND_TO_QUANTITY.get(sensors[name]["kind"]):
            q = _KIND_TO_QUANTITY[sensors[name]["kind"]]
            u = {"degC": "C"}.get(unit, unit) if unit else None
            out += ["[[sources.columns]]", f"header = {_toml_str(header)}",
                    f"device = {_toml_str(name)}", f"quantity = {_toml_str(q)}"]
            if u:
                out.append(f"unit = {_toml_str(u)}")
            out.append("")
    return "\n".join(out) + "\n"


# ---------------------------------------------------------------- results -> scorer shape


def _rate(block: dict) -> dict | None:
    rate = block.get("rate_pct_per_yr")
    if rate is None:
        rate = block.get("rate_pct_per_year")
    if rate is None:
        return None
    lo, hi = block.get("ci_low"), block.get("ci_high")
    return {"rate_pct_per_yr": float(rate),
            "ci": [float(lo), float(hi)] if lo is not None and hi is not None else None}


#: methods that measure a sensor's drift, not the array's degradation (not scored as rates)
DRIFT_CHECKS = ("sensor_drift_check", "sensor_vs_clearsky")


def _soiling_loss_pct(flags: list[dict]) -> float | None:
    """Site soiling energy loss from the soiling flags' insolation-weighted soiling ratio."""
    for f in flags:
        det = f.get("details") or {}
        for key in ("soiling_ratio_weighted", "sr_iw"):
            if f.get("kind") == "soiling" and isinstance(det.get(key), (int, float)):
                return 100.0 * (1.0 - float(det[key]))
    return None


def map_results(doc: dict) -> dict:
    """heliaudit results JSON -> the scorer's accepted shape.

    Per inverter: every method with a rate under its own code, plus ``recommended`` (95 %
    interval) and ``recommended_ci68`` (same rate, 68 % interval) so the scorer reports both
    coverages; soiling loss (site-wide) and soiling intervals; the flags of the inverter.
    Site-level and sensor flags go to ``flags``.
    """
    inv_ids = {b["device_id"] for b in doc.get("inverters", [])}
    flags = doc.get("flags", []) or []
    soil = _soiling_loss_pct(flags)
    soil_iv = [{"start": f["start"], "end": f["end"]} for f in flags if f.get("kind") == "soiling"]
    out = {"inverters": {}, "flags": []}
    for b in doc.get("inverters", []):
        deg = {}
        for m, v in (b.get("degradation") or {}).items():
            if m in ("summary", "overview", *DRIFT_CHECKS) or not isinstance(v, dict):
                continue
            r = _rate(v)
            if r:
                deg[m] = r
        rec = b.get("recommended")
        if isinstance(rec, dict) and _rate(rec):
            deg["recommended"] = _rate(rec)
            if rec.get("ci68_low") is not None and rec.get("ci68_high") is not None:
                deg["recommended_ci68"] = {"rate_pct_per_yr": float(rec["rate_pct_per_yr"]),
                                           "ci": [float(rec["ci68_low"]), float(rec["ci68_high"])]}
        out["inverters"][b["device_id"]] = {
            "degradation": deg,
            "soiling": {"loss_pct": soil, "intervals": soil_iv},
            "flags": [{"kind": f["kind"], "start": f["start"], "end": f["end"]}
                      for f in flags if f.get("device_id") == b["device_id"]]}
    for f in flags:
        if f.get("device_id") in inv_ids or f.get("kind") == "soiling":
            continue
        item = {"kind": f["kind"], "start": f["start"], "end": f["end"]}
        dev = f.get("device_id")
        if dev and dev not in ("(site)", "site"):
            item["sensor"] = dev
        out["flags"].append(item)
    return out


# ---------------------------------------------------------------- one case


def redo_degradation(workdir: Path, *, env: dict | None = None) -> dict:
    """Recompute only the degradation rates of a kept case (its store from an earlier run of
    the same ingest/daily/flags code), then ``heliaudit results`` and the scorer again: a
    change to the degradation methods is measured on the same fleets in a fraction of the
    time. The rates are computed as ``heliaudit compute`` computes them
    (:func:`heliaudit.jobs_degradation.run_degradation` with its defaults)."""
    base = Path(workdir)
    site_json = json.loads((base / "gen" / "site.json").read_text(encoding="utf-8"))
    site_id = site_json["site"]["id"]
    db = base / "store.sqlite"
    log = base / "pipeline.log"
    t = {}
    t0 = time.perf_counter()
    code = ("import sys; from db.engine import make_engine; "
            "from heliaudit.jobs_degradation import run_degradation; "
            "run_degradation(make_engine(sys.argv[1]), sys.argv[2])")
    r = _run([sys.executable, "-c", code, f"sqlite:///{db}", site_id], log=log, env=env)
    t["degradation"] = time.perf_counter() - t0
    if r.returncode:
        return {"ok": False, "error": f"degradation failed; see {log}", "dir": str(base)}
    heli = _heliaudit() + ["--db", f"sqlite:///{db}"]
    r = _run(heli + ["results", "--site", site_id, "--out", str(base / "results.json")],
             log=log, env=env)
    if r.returncode:
        return {"ok": False, "error": f"heliaudit results failed; see {log}", "dir": str(base)}
    doc = json.loads((base / "results.json").read_text(encoding="utf-8"))
    mapped = map_results(doc)
    (base / "mapped.json").write_text(json.dumps(mapped, indent=1), encoding="utf-8")
    r = _run([sys.executable, str(GENERATOR), "--score", str(base / "mapped.json"), "--truth",
              str(base / "gen" / "truth.json"), "--score-out", str(base / "score.json")],
             log=base / "score.log")
    if r.returncode:
        return {"ok": False, "error": f"scorer failed; see {base / 'score.log'}", "dir": str(base)}
    t["total"] = time.perf_counter() - t0
    return {"ok": True, "dir": str(base), "results": doc, "mapped": mapped, "site": site_json,
            "score": json.loads((base / "score.json").read_text(encoding="utf-8")), "timing_s": t}


def run_case(scenario: str, seed: int, sets: list[str] | tuple = (), *, workdir: Path | None = None,
             keep: bool = False, env: dict | None = None, quiet: bool = True,
             reuse: bool = False, redo: bool = False) -> dict:
    """Generate, configure, run the pipeline, score. Returns a dict with ``results`` (the
    heliaudit document), ``mapped``, ``score`` (the scorer's JSON report), ``timing_s``,
    ``dir`` and ``ok``/``error``. ``reuse``: a ``workdir`` that already holds a scored run
    is read back instead of run again (to re-print a scorecard); ``redo``: its degradation
    rates are recomputed first (:func:`redo_degradation`)."""
    ok, why = shared_available()
    if not ok:
        return {"ok": False, "error": why, "skipped": True}
    if redo and workdir is not None and (Path(workdir) / "store.sqlite").is_file():
        res = redo_degradation(Path(workdir), env=env)
        res.update({"scenario": scenario, "seed": seed, "sets": list(sets)})
        return res
    if reuse and workdir is not None and (Path(workdir) / "score.json").is_file():
        base = Path(workdir)
        return {"ok": True, "scenario": scenario, "seed": seed, "sets": list(sets),
                "dir": str(base), "reused": True, "timing_s": {},
                "results": json.loads((base / "results.json").read_text(encoding="utf-8")),
                "mapped": json.loads((base / "mapped.json").read_text(encoding="utf-8")),
                "site": json.loads((base / "gen" / "site.json").read_text(encoding="utf-8")),
                "score": json.loads((base / "score.json").read_text(encoding="utf-8"))}
    base = Path(workdir) if workdir else Path(tempfile.mkdtemp(prefix=f"ha-{scenario}-{seed}-"))
    base.mkdir(parents=True, exist_ok=True)
    gen = base / "gen"
    log = base / "pipeline.log"
    t = {}
    t0 = time.perf_counter()
    cmd = [sys.executable, str(GENERATOR), "--out", str(gen), "--scenario", scenario,
           "--seed", str(seed), "--quiet"]
    for s in sets:
        cmd += ["--set", s]
    if _run(cmd, log=log).returncode:
        return {"ok": False, "error": f"generator failed; see {log}", "dir": str(base)}
    t["generate"] = time.perf_counter() - t0
    site_json = json.loads((gen / "site.json").read_text(encoding="utf-8"))
    cfg_dir = base / "config"
    cfg_dir.mkdir(exist_ok=True)
    cfg = cfg_dir / "site.toml"
    cfg.write_text(site_toml(site_json, gen / site_json.get("data_logger", {}).get(
        "export_folder", "export"), cfg_dir), encoding="utf-8")
    db = base / "store.sqlite"
    if db.exists():
        db.unlink()
    run_env = dict(os.environ if env is None else env)
    heli = _heliaudit() + ["--db", f"sqlite:///{db}"]
    site_id = site_json["site"]["id"]
    steps = [("ingest", ["ingest", str(cfg), "--silent"]),
             ("compute", ["compute", "--site", site_id]),
             ("results", ["results", "--site", site_id, "--out", str(base / "results.json")])]
    for name, args in steps:
        t1 = time.perf_counter()
        r = _run(heli + args, log=log, env=run_env)
        t[name] = time.perf_counter() - t1
        if r.returncode:
            return {"ok": False, "error": f"heliaudit {name} exited {r.returncode}; see {log}",
                    "dir": str(base), "timing_s": t}
    doc = json.loads((base / "results.json").read_text(encoding="utf-8"))
    mapped = map_results(doc)
    (base / "mapped.json").write_text(json.dumps(mapped, indent=1), encoding="utf-8")
    score_path = base / "score.json"
    r = _run([sys.executable, str(GENERATOR), "--score", str(base / "mapped.json"), "--truth",
              str(gen / "truth.json"), "--score-out", str(score_path)], log=base / "score.log")
    if r.returncode:
        return {"ok": False, "error": f"scorer failed; see {base / 'score.log'}", "dir": str(base)}
    t["total"] = time.perf_counter() - t0
    out = {"ok": True, "scenario": scenario, "seed": seed, "sets": list(sets), "dir": str(base),
           "results": doc, "mapped": mapped, "site": site_json,
           "score": json.loads(score_path.read_text(encoding="utf-8")), "timing_s": t}
    if not quiet:
        print((base / "score.log").read_text(encoding="utf-8"))
    if not keep and workdir is None:
        shutil.rmtree(gen / "export", ignore_errors=True)
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("scenario")
    ap.add_argument("seed", type=int)
    ap.add_argument("--set", action="append", default=[], metavar="KEY=VALUE")
    ap.add_argument("--dir", type=Path, default=None, help="work folder (kept)")
    a = ap.parse_args(argv)
    ok, why = shared_available()
    if not ok:
        print(why)
        return 0
    res = run_case(a.scenario, a.seed, a.set, workdir=a.dir, keep=a.dir is not None, quiet=False)
    if not res["ok"]:
        print("FAILED:", res["error"])
        return 1
    print("timing (s):", {k: round(v, 1) for k, v in res["timing_s"].items()}, "folder:", res["dir"])
    return 0


if __name__ == "__main__":
    sys.exit(main())
