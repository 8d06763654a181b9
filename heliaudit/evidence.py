"""Warranty evidence pack (issue #17): a folder that a module maker, an insurer or a court can
read without heliaudit and reproduce from the same export files.

``build_pack(engine, site_id, out_dir, ...)`` writes::

    report.pdf                 the report (heliaudit.evidence_pdf)
    data/results.json          the heliaudit-results/2 document of the chosen devices
    data/site_config.toml      the site configuration as ingested (stored text)
    data/daily_performance.csv the daily table of the chosen inverters (every daily figure)
    data/site_daily_index.csv  the site's daily index and the recommended-rate line (index chart)
    data/coverage_monthly.csv  valid / excluded / missing inverter-days per month (coverage chart)
    data/exclusions.csv        per inverter: days and excluded intervals by reason
    data/rates.csv             every method's rate and interval per device (rates chart)
    data/warranty_envelope.csv warranted minimum and measured index per month (warranty charts)
    data/flags.csv             flags in the period (sensor faults, soiling, outages, ...)
    data/source_files.csv      the export files behind the data, with their SHA-256
    manifest.json              software, parameters, hashes of sources and pack files, command

Numbers come from the store: the results of the last ``heliaudit compute`` when no period is
given, or — with ``start``/``end`` — a recomputation (daily table, flags, degradation) over
that period in a scratch SQLite store holding a copy of the site's inputs
(:func:`db.evidence.copy_site_window`), so stored results are never touched.

Reproducibility: everything under ``data/`` is a function of the store and the request; the
creation time lives only in ``manifest.json`` and on the report's title page. In
``data/results.json`` ``generated_utc`` is when the numbers were computed (period packs: when
the newest input file was loaded) and the computations' times are blanked (they are in the
manifest).

System-level field data are screening evidence; the warranty contract's own terms and test
procedure govern any claim (analytics.warranty.DISCLAIMER).
"""

from __future__ import annotations

import datetime as dt
import hashlib
import importlib.metadata
import json
import platform
import shlex
import shutil
import tempfile
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import sqlalchemy as sa

import heliaudit
from analytics.daily import standard_utc_offset_h
from analytics.filters import REASONS
from db import queries
from db.daily import daily_table
from db.engine import display_url
from db.evidence import contributing_batches, copy_site_window
from db.registry import SiteNotFoundError, site_row
from heliaudit.jobs_degradation import NothingComputedError, results_document

MANIFEST_SCHEMA = "heliaudit-evidence/1"
SITE = "(site)"
#: Method used when no ``recommended`` row exists (contract in issue #13).
FALLBACK_METHOD = "sensor_year_pairs"
STORED_BASIS = "stored results of the last \"heliaudit compute\""
FLOAT_FORMAT = "%.6g"
#: Libraries whose versions the manifest records.
LIBRARIES = ("numpy", "pandas", "scipy", "statsmodels", "pvlib", "ruptures", "sqlalchemy",
             "reportlab", "matplotlib")
SENSOR_FLAG_PREFIX = "sensor"

__all__ = ["EvidenceError", "NothingComputedError", "SiteNotFoundError", "build_pack",
           "pack_zip", "recommended_of"]


class EvidenceError(ValueError):
    """A request the pack builder refuses (unknown inverter, occupied folder, bad period)."""


@dataclass
class Pack:
    """Everything the report shows, gathered once (also what the data files hold)."""

    site: dict
    request: dict
    doc: dict
    inverters: pd.DataFrame
    sensors: pd.DataFrame
    config: dict
    config_toml: str
    daily: pd.DataFrame
    site_index: pd.DataFrame
    coverage: pd.DataFrame
    exclusions: pd.DataFrame
    rates: pd.DataFrame
    envelope: pd.DataFrame
    flags: pd.DataFrame
    sources: pd.DataFrame
    ingest_totals: dict
    basis: str
    period: tuple[str | None, str | None]
    summary: list[dict] = field(default_factory=list)
    computations: dict | None = None
    results_sha256: str = ""
    created_utc: str = ""
    command: str = ""


# ---------------------------------------------------------------- small helpers


def _num(x):
    if x is None:
        return None
    try:
        f = float(x)
    except (TypeError, ValueError):
        return None
    return f if np.isfinite(f) else None


def sha256_file(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def recommended_of(block: dict) -> dict:
    """The recommended rate of one device block of the results document.

    Uses the ``recommended`` block (issue #13 contract) when present, else the
    ``sensor_year_pairs`` method with a reason saying so (``fallback`` True).
    """
    rec = block.get("recommended")
    if isinstance(rec, dict) and (rec.get("method") or rec.get("rate_pct_per_yr") is None
                                  and rec.get("reason")):
        out = dict(rec)
        out["method"] = rec.get("method") or "none"  # refused: no method could be chosen
        out["reasons"] = list(rec.get("reasons") or [])
        out["caveats"] = list(rec.get("caveats") or [])
        out["fallback"] = False
        return out
    m = (block.get("degradation") or {}).get(FALLBACK_METHOD) or {}
    reasons = ["this version of heliaudit stored no recommended rate; the year-on-year rate "
               "of the sensor-based performance index is reported as the main rate"]
    if m.get("rate_pct_per_yr") is None and m.get("reason"):
        reasons.append(f"not computed: {m['reason']}")
    return {"method": FALLBACK_METHOD, "rate_pct_per_yr": _num(m.get("rate_pct_per_yr")),
            "ci_low": _num(m.get("ci_low")), "ci_high": _num(m.get("ci_high")),
            "confidence": _num(m.get("confidence")), "ci68_low": None, "ci68_high": None,
            "n_points": m.get("n_points"), "reasons": reasons, "caveats": [],
            "reason": m.get("reason"), "fallback": True}


def _blocks(doc: dict) -> list[dict]:
    return [*doc.get("inverters", []), doc.get("site_result") or {"device_id": SITE}]


def _overlap(a_lo, a_hi, b_lo, b_hi) -> bool | None:
    vals = [_num(v) for v in (a_lo, a_hi, b_lo, b_hi)]
    if any(v is None for v in vals):
        return None
    return bool(vals[0] <= vals[3] and vals[2] <= vals[1])


def _iso(ts_s) -> str | None:
    if ts_s is None or pd.isna(ts_s):
        return None
    return dt.datetime.fromtimestamp(int(ts_s), dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def mask_url(url: str) -> str:
    """The store's URL as shown to a user, password replaced by ``***`` (db.engine)."""
    return display_url(url)


def reproduce_command(db_url: str | None, site_id: str, inverters, start, end,
                      out_dir: str | Path) -> str:
    """The ``heliaudit evidence`` command line that rebuilds a pack (with ``--force``)."""
    args = ["heliaudit"]
    if db_url:
        args += ["--db", mask_url(db_url)]
    args += ["evidence", "--site", site_id]
    for i in inverters or ():
        args += ["--inverter", i]
    if start:
        args += ["--from", str(start)]
    if end:
        args += ["--to", str(end)]
    args += ["--out", str(out_dir), "--force"]
    return shlex.join(args)


# ---------------------------------------------------------------- checks


def check_out_dir(out_dir: Path, force: bool) -> None:
    """Refuse an existing non-empty folder unless ``force``; refuse a file."""
    if out_dir.exists() and not out_dir.is_dir():
        raise EvidenceError(f"--out {out_dir}: exists and is not a folder")
    if out_dir.is_dir() and any(out_dir.iterdir()) and not force:
        raise EvidenceError(f"--out {out_dir}: folder exists and is not empty; choose an empty "
                            "or new folder, or pass --force to replace the pack in it")


def _clear_pack(out_dir: Path) -> None:
    """With --force: remove a previous pack's files (report, manifest, data/) only."""
    for name in ("report.pdf", "manifest.json"):
        (out_dir / name).unlink(missing_ok=True)
    if (out_dir / "data").is_dir():
        shutil.rmtree(out_dir / "data")


def check_inverters(known: list[str], asked) -> list[str]:
    if not asked:
        return list(known)
    unknown = [i for i in asked if i not in known]
    if unknown:
        raise EvidenceError(f"unknown inverter id(s) {', '.join(unknown)}; known: "
                            f"{', '.join(known) or '(none)'}")
    return [i for i in known if i in set(asked)]


def _day_bounds_s(start: dt.date | None, end: dt.date | None, offset_h: float
                  ) -> tuple[int | None, int | None]:
    """UTC seconds of the start of ``start`` and of the day after ``end``, in local
    standard time (the days of the daily table)."""
    def at(day: dt.date) -> int:
        t = dt.datetime.combine(day, dt.time(), tzinfo=dt.UTC)
        return int(t.timestamp() - offset_h * 3600)
    return (at(start) if start else None,
            at(end + dt.timedelta(days=1)) if end else None)


# ---------------------------------------------------------------- tables


def _daily_csv(daily: pd.DataFrame) -> pd.DataFrame:
    d = daily.drop(columns=[c for c in ("computation_id", "details_json") if c in daily.columns])
    reasons = [_excluded(x) for x in daily.get("details_json", pd.Series([None] * len(daily)))]
    for r in REASONS[1:]:
        d[f"excluded_{r}_n"] = [x.get(r, 0) for x in reasons]
    return d


def _excluded(text) -> dict:
    if not isinstance(text, str) or not text:
        return {}
    try:
        return {k: int(v) for k, v in (json.loads(text).get("excluded") or {}).items()}
    except (ValueError, AttributeError, TypeError):
        return {}


def _site_index(daily: pd.DataFrame) -> pd.DataFrame:
    """Daily index of the chosen inverters: Σ e_ac_valid / Σ e_exp_valid over valid days
    (a ratio of sums, IEC 61724-1 practice for period figures)."""
    v = daily[daily["day_valid"] & daily["e_exp_valid_kwh"].gt(0)]
    if v.empty:
        return pd.DataFrame(columns=["day", "pi", "n_inverters"])
    g = v.groupby("day").agg(e_ac=("e_ac_valid_kwh", "sum"), e_exp=("e_exp_valid_kwh", "sum"),
                             n_inverters=("device_id", "nunique"))
    out = pd.DataFrame({"day": g.index, "pi": (g["e_ac"] / g["e_exp"]).to_numpy(),
                        "n_inverters": g["n_inverters"].to_numpy()})
    return out.reset_index(drop=True)


def _trend_line(site_index: pd.DataFrame, rate) -> pd.Series:
    """The recommended rate drawn through the index: median level at the mid-day, then
    exponential change at ``rate`` %/yr (year-on-year rates are relative, Jordan et al. 2018)."""
    rate = _num(rate)
    if rate is None or site_index.empty:
        return pd.Series(np.nan, index=site_index.index)
    days = pd.to_datetime(site_index["day"])
    t = (days - days.min()).dt.days.to_numpy() / 365.25
    t_mid = float(np.median(t))
    level = float(np.median(site_index["pi"]))
    return pd.Series(level * (1 + rate / 100) ** (t - t_mid), index=site_index.index)


def _coverage(daily: pd.DataFrame, inv_ids: list[str], first: str | None, last: str | None
              ) -> pd.DataFrame:
    cols = ["month", "days_valid", "days_not_valid", "days_missing"]
    if not first or not last:
        return pd.DataFrame(columns=cols)
    days = pd.date_range(first, last, freq="D")
    month = days.to_period("M").astype(str)
    expected = pd.Series(len(inv_ids), index=days).groupby(month).sum()
    d = daily.copy()
    d["month"] = pd.to_datetime(d["day"]).dt.to_period("M").astype(str)
    valid = d[d["day_valid"]].groupby("month").size()
    not_valid = d[~d["day_valid"]].groupby("month").size()
    out = pd.DataFrame({"month": expected.index})
    out["days_valid"] = [int(valid.get(m, 0)) for m in out["month"]]
    out["days_not_valid"] = [int(not_valid.get(m, 0)) for m in out["month"]]
    out["days_missing"] = [int(expected[m]) - a - b for m, a, b in
                           zip(out["month"], out["days_valid"], out["days_not_valid"], strict=True)]
    return out[cols]


def _exclusions(daily: pd.DataFrame, inv_ids: list[str], n_days_period: int,
                blocks: dict[str, dict]) -> pd.DataFrame:
    rows = []
    for dev in inv_ids:
        d = daily[daily["device_id"] == dev]
        ex: dict[str, int] = {}
        for text in d["details_json"]:
            for k, v in _excluded(text).items():
                ex[k] = ex.get(k, 0) + v
        data = (blocks.get(dev) or {}).get("data") or {}
        n_int = int(d["n_intervals"].sum()) if len(d) else 0
        rows.append({
            "device_id": dev, "days_in_period": n_days_period, "days_with_data": int(len(d)),
            "days_valid": int(d["day_valid"].sum()),
            "days_used_for_rates": data.get("n_days_used"),
            "coverage_median": _num(d["coverage"].median()) if len(d) else None,
            "intervals_with_reading": n_int, "intervals_valid": int(d["n_valid"].sum()),
            **{f"excluded_{r}_n": int(ex.get(r, 0)) for r in REASONS[1:]}})
    return pd.DataFrame(rows)


def _rates(doc: dict) -> pd.DataFrame:
    rows = []
    for b in _blocks(doc):
        dev = b.get("device_id", SITE)
        rec = recommended_of(b)
        for m, r in (b.get("degradation") or {}).items():
            if m in ("recommended", "overview"):
                continue
            rows.append({
                "device_id": dev, "method": m, "rate_pct_per_yr": _num(r.get("rate_pct_per_yr")),
                "ci_low": _num(r.get("ci_low")), "ci_high": _num(r.get("ci_high")),
                "confidence": _num(r.get("confidence")), "n_points": r.get("n_points"),
                "recommended": m == rec["method"],
                "overlaps_recommended": (None if m == rec["method"] else
                                         _overlap(r.get("ci_low"), r.get("ci_high"),
                                                  rec.get("ci_low"), rec.get("ci_high"))),
                "reason_not_computed": r.get("reason")})
    return pd.DataFrame(rows, columns=["device_id", "method", "rate_pct_per_yr", "ci_low",
                                       "ci_high", "confidence", "n_points", "recommended",
                                       "overlaps_recommended", "reason_not_computed"])


def _envelope(doc: dict) -> pd.DataFrame:
    rows = []
    for b in _blocks(doc):
        w = b.get("warranty") or {}
        for m in w.get("envelope") or []:
            rel, war = _num(m.get("relative")), _num(m.get("warranted"))
            rows.append({"device_id": b.get("device_id", SITE), "month": m.get("month"),
                         "years": _num(m.get("years")),
                         "relative_pct": None if rel is None else round(100 * rel, 4),
                         "warranted_pct": None if war is None else round(100 * war, 4)})
    return pd.DataFrame(rows, columns=["device_id", "month", "years", "relative_pct",
                                       "warranted_pct"])


def _flags(doc: dict, devices: set[str], start_s, end_s) -> pd.DataFrame:
    rows = []
    for f in doc.get("flags") or []:
        if f.get("device_id") not in devices and f.get("device_id") is not None:
            continue
        rows.append({"flag_id": f.get("flag_id"), "device_id": f.get("device_id") or SITE,
                     "kind": f.get("kind"), "severity": f.get("severity"),
                     "start_utc": f.get("start"), "end_utc": f.get("end"),
                     "lost_kwh": _num(f.get("lost_kwh")),
                     "details": json.dumps(f.get("details"), sort_keys=True, default=str)
                     if f.get("details") is not None else ""})
    out = pd.DataFrame(rows, columns=["flag_id", "device_id", "kind", "severity", "start_utc",
                                      "end_utc", "lost_kwh", "details"])
    if start_s is not None or end_s is not None:
        s = pd.to_datetime(out["start_utc"], utc=True)
        e = pd.to_datetime(out["end_utc"], utc=True)
        keep = pd.Series(True, index=out.index)
        if start_s is not None:
            keep &= e > pd.Timestamp(start_s, unit="s", tz="UTC")
        if end_s is not None:
            keep &= s < pd.Timestamp(end_s, unit="s", tz="UTC")
        out = out[keep]
    return out.reset_index(drop=True)


def _pack_doc(doc: dict, inv_ids: list[str], as_of: str | None) -> dict:
    """The results document restricted to the chosen inverters, with its times fixed so
    that a rebuild gives the same file: ``generated_utc`` is ``as_of`` (when the numbers
    were computed, or for a period pack when the newest input was loaded) and the
    computations' times are blanked (the manifest has them)."""
    out = dict(doc)
    out["inverters"] = [b for b in doc.get("inverters", []) if b.get("device_id") in inv_ids]
    all_invs = {b.get("device_id") for b in doc.get("inverters", [])}
    # flags of inverters that were not chosen are left out; sensor and site flags stay
    out["flags"] = [f for f in doc.get("flags", []) if f.get("device_id") not in all_invs
                    or f.get("device_id") in inv_ids]
    out["generated_utc"] = as_of
    comps = {}
    for k, v in (doc.get("computations") or {}).items():
        comps[k] = None if v is None else {**v, "started_utc": None, "finished_utc": None}
    out["computations"] = comps
    return out


def _summary(doc: dict, inv_ids: list[str]) -> list[dict]:
    out = []
    for b in [*[x for x in doc.get("inverters", []) if x.get("device_id") in inv_ids],
              doc.get("site_result") or {"device_id": SITE}]:
        rec = recommended_of(b)
        w = b.get("warranty") or {}
        comp = b.get("comparison") or {}
        out.append({
            "device_id": b.get("device_id", SITE),
            "method": rec["method"], "rate_pct_per_yr": _num(rec.get("rate_pct_per_yr")),
            "ci_low": _num(rec.get("ci_low")), "ci_high": _num(rec.get("ci_high")),
            "confidence": _num(rec.get("confidence")),
            "reasons": list(rec.get("reasons") or []), "caveats": list(rec.get("caveats") or []),
            "fallback": rec.get("fallback", False),
            "not_computed": rec.get("reason") or (b.get("degradation", {}).get(rec["method"], {})
                                                  or {}).get("reason") or b.get("reason"),
            "agree": comp.get("agree"), "compared": comp.get("compared") or [],
            "disagreements": comp.get("disagreements") or [],
            "warranty_method": w.get("measured_method") or w.get("method"),
            "warranty_rate": _num(w.get("measured_rate_pct_per_yr")),
            "exceeds": w.get("exceeds"), "verdict": w.get("verdict"),
            "one_sided_upper": _num(w.get("one_sided_upper_pct_per_yr")),
            "warranted_rate": _num(w.get("warranted_rate_pct_per_yr")),
            "warranty_confidence": _num(w.get("confidence")),
            "shortfall_kwh": _num(w.get("shortfall_kwh")), "months_below": w.get("months_below"),
            "warranty_reason": w.get("reason") or w.get("reason_envelope"),
            "warranty_note": w.get("note"),
            "data": b.get("data") or {}, "period": b.get("period") or {},
            "change_points": b.get("change_points") or [], "warnings": b.get("warnings") or []})
    return out


# ---------------------------------------------------------------- gather


def _sensors(engine, site_id: str, cfg: dict) -> pd.DataFrame:
    dev = queries.devices(engine, site_id)
    s = dev[dev["kind"] == "sensor"][["device_id", "quantity", "instrument"]].copy()
    notes = {x.get("id"): x.get("notes", "") for x in cfg.get("sensors", []) if isinstance(x, dict)}
    s["notes"] = [notes.get(i, "") for i in s["device_id"]]
    return s.reset_index(drop=True)


def gather(engine: sa.Engine, site_id: str, *, inverters=None, start: dt.date | None = None,
           end: dt.date | None = None, source_engine: sa.Engine | None = None,
           basis: str = "stored") -> Pack:
    """Read everything the pack needs from ``engine`` (results) and ``source_engine``
    (ingest log; default ``engine``)."""
    src = source_engine or engine
    site = site_row(engine, site_id)
    invs = queries.inverters(engine, site_id)
    inv_ids = check_inverters(list(invs["device_id"]), inverters)
    invs = invs[invs["device_id"].isin(inv_ids)].reset_index(drop=True)
    toml_text = site.get("config_toml") or ""
    try:
        cfg = tomllib.loads(toml_text)
    except tomllib.TOMLDecodeError:
        cfg = {}
    offset_h = standard_utc_offset_h(site["timezone"])
    start_s, end_s = _day_bounds_s(start, end, offset_h)
    doc = results_document(engine, site_id)
    daily = daily_table(engine, site_id, inv_ids, start, end)
    first = start.isoformat() if start else (min(daily["day"]).isoformat() if len(daily) else None)
    last = end.isoformat() if end else (max(daily["day"]).isoformat() if len(daily) else None)
    n_days = ((dt.date.fromisoformat(last) - dt.date.fromisoformat(first)).days + 1
              if first and last else 0)
    blocks = {b.get("device_id"): b for b in _blocks(doc)}
    site_idx = _site_index(daily)
    summary = _summary(doc, inv_ids)
    site_sum = summary[-1]
    site_idx["pi_recommended_line"] = _trend_line(site_idx, site_sum["rate_pct_per_yr"])
    sensors = _sensors(engine, site_id, cfg)
    devices = set(inv_ids) | set(sensors["device_id"])
    batches = contributing_batches(src, site_id, None, start_s, end_s)
    batches = batches.assign(ts_first_utc=[_iso(x) for x in batches["ts_first_s"]],
                             ts_last_utc=[_iso(x) for x in batches["ts_last_s"]])
    sources = batches[["batch_id", "source_name", "file_name", "file_path", "sha256",
                       "size_bytes", "rows_read", "rows_loaded", "rows_duplicate",
                       "rows_rejected", "values_rejected", "n_readings", "ts_first_utc",
                       "ts_last_utc"]].reset_index(drop=True)
    totals = {k: int(pd.to_numeric(sources[k]).sum()) if len(sources) else 0
              for k in ("rows_read", "rows_loaded", "rows_duplicate", "rows_rejected",
                        "values_rejected", "n_readings")}
    comp = (doc.get("computations") or {}).get("degradation") or {}
    if basis in ("stored", STORED_BASIS) and comp.get("finished_utc"):
        as_of = comp["finished_utc"]
    else:  # recomputed now: the time the newest input file was loaded
        as_of = max((x for x in batches["finished_utc"] if isinstance(x, str)), default=None)
    return Pack(
        site=site, doc=_pack_doc(doc, inv_ids, as_of), inverters=invs, sensors=sensors, config=cfg,
        config_toml=toml_text, daily=daily, site_index=site_idx,
        coverage=_coverage(daily, inv_ids, first, last),
        exclusions=_exclusions(daily, inv_ids, n_days, blocks), rates=_rates(
            {**doc, "inverters": [b for b in doc.get("inverters", [])
                                  if b.get("device_id") in inv_ids]}),
        envelope=_envelope({**doc, "inverters": [b for b in doc.get("inverters", [])
                                                 if b.get("device_id") in inv_ids]}),
        flags=_flags(doc, devices, start_s, end_s), sources=sources, ingest_totals=totals,
        basis=basis, period=(first, last), summary=summary,
        computations=doc.get("computations"),
        request={"site_id": site_id, "inverters": list(inverters) if inverters else None,
                 "from": start.isoformat() if start else None,
                 "to": end.isoformat() if end else None})


# ---------------------------------------------------------------- write


def _write_csv(df: pd.DataFrame, path: Path) -> None:
    df.to_csv(path, index=False, float_format=FLOAT_FORMAT, lineterminator="\n")


def write_data(pack: Pack, data_dir: Path) -> None:
    data_dir.mkdir(parents=True, exist_ok=True)
    (data_dir / "results.json").write_text(
        json.dumps(pack.doc, indent=2, allow_nan=False, sort_keys=True, default=str) + "\n",
        encoding="utf-8")
    (data_dir / "site_config.toml").write_text(pack.config_toml, encoding="utf-8")
    _write_csv(_daily_csv(pack.daily), data_dir / "daily_performance.csv")
    _write_csv(pack.site_index, data_dir / "site_daily_index.csv")
    _write_csv(pack.coverage, data_dir / "coverage_monthly.csv")
    _write_csv(pack.exclusions, data_dir / "exclusions.csv")
    _write_csv(pack.rates, data_dir / "rates.csv")
    _write_csv(pack.envelope, data_dir / "warranty_envelope.csv")
    _write_csv(pack.flags, data_dir / "flags.csv")
    _write_csv(pack.sources, data_dir / "source_files.csv")


def _libraries() -> dict[str, str]:
    out = {}
    for lib in LIBRARIES:
        try:
            out[lib] = importlib.metadata.version(lib)
        except importlib.metadata.PackageNotFoundError:
            out[lib] = None
    return out


def write_manifest(pack: Pack, out_dir: Path, db_url: str | None) -> dict:
    files = sorted(p for p in out_dir.rglob("*") if p.is_file() and p.name != "manifest.json")
    doc = pack.doc
    manifest = {
        "manifest": MANIFEST_SCHEMA,
        "created_utc": pack.created_utc,
        "software": {"name": "heliaudit", "version": heliaudit.__version__,
                     "python": platform.python_version(), "libraries": _libraries()},
        "command": pack.command,
        "request": pack.request,
        "results_basis": pack.basis,
        "period": {"first_day": pack.period[0], "last_day": pack.period[1]},
        "store": mask_url(db_url) if db_url else None,
        "site_config_sha256": hashlib.sha256(pack.config_toml.encode("utf-8")).hexdigest(),
        "parameters": doc.get("parameters"),
        "results_schema": doc.get("schema"),
        "computations": pack.computations,
        "sources": [{k: (None if pd.isna(v) else v.item() if hasattr(v, "item") else v)
                     for k, v in r.items()} for r in pack.sources.to_dict("records")],
        "files": [{"path": p.relative_to(out_dir).as_posix(), "sha256": sha256_file(p),
                   "bytes": p.stat().st_size} for p in files],
        "notice": ("Screening evidence from system-level field data; the warranty contract's "
                   "own terms and test procedure govern any claim."),
    }
    (out_dir / "manifest.json").write_text(
        json.dumps(manifest, indent=2, sort_keys=False, default=str) + "\n", encoding="utf-8")
    return manifest


def build_pack(engine: sa.Engine, site_id: str, out_dir: str | Path, *, inverters=None,
               start: dt.date | None = None, end: dt.date | None = None, force: bool = False,
               db_url: str | None = None, command: str | None = None,
               now: dt.datetime | None = None) -> dict:
    """Build the evidence pack in ``out_dir``; return the manifest.

    Raises :class:`SiteNotFoundError` (unknown site, listing the known ones),
    :class:`EvidenceError` (unknown inverter listing the known ones, an occupied folder
    without ``force``, ``start`` after ``end``) and :class:`NothingComputedError` (the site
    was never computed). A site with too little data for a rate still gets a pack whose
    summary says so.
    """
    from heliaudit import evidence_pdf

    out_dir = Path(out_dir)
    check_out_dir(out_dir, force)
    site_row(engine, site_id)  # SiteNotFoundError before any work
    check_inverters(list(queries.inverters(engine, site_id)["device_id"]), inverters)
    if start and end and start > end:
        raise EvidenceError(f"--from {start} is after --to {end}")
    created = (now or dt.datetime.now(dt.UTC)).strftime("%Y-%m-%dT%H:%M:%SZ")
    with tempfile.TemporaryDirectory(prefix="heliaudit-evidence-") as tmp:
        if start or end:
            work = _recompute_window(engine, site_id, start, end, Path(tmp))
            basis = (f"recomputed for the period {start or 'first day'} .. {end or 'last day'} "
                     "from a copy of the site's readings (daily table, flags, degradation)")
        else:
            work, basis = engine, STORED_BASIS
        try:
            pack = gather(work, site_id, inverters=inverters, start=start, end=end,
                          source_engine=engine, basis=basis)
        finally:
            if work is not engine:
                work.dispose()
    pack.created_utc = created
    pack.command = command or reproduce_command(db_url, site_id, inverters, start, end, out_dir)
    out_dir.parent.mkdir(parents=True, exist_ok=True)
    # build beside the target, then move in: a failure leaves no half-written pack
    with tempfile.TemporaryDirectory(prefix=".evidence-", dir=out_dir.parent) as tmp:
        stage = Path(tmp)
        write_data(pack, stage / "data")
        pack.results_sha256 = sha256_file(stage / "data" / "results.json")
        try:
            evidence_pdf.write_report(pack, stage / "report.pdf")
        except Exception as exc:  # noqa: BLE001 - reportlab layout errors: a bug, said plainly
            raise EvidenceError(f"the report could not be laid out ({type(exc).__name__}: "
                                f"{str(exc)[:200]}); nothing was written to {out_dir}") from exc
        manifest = write_manifest(pack, stage, db_url)
        out_dir.mkdir(parents=True, exist_ok=True)
        if force:
            _clear_pack(out_dir)
        for item in ("data", "report.pdf", "manifest.json"):
            shutil.move(str(stage / item), str(out_dir / item))
    return manifest


def _recompute_window(engine: sa.Engine, site_id: str, start, end, tmp: Path) -> sa.Engine:
    from db.engine import make_engine
    from heliaudit.cmd_compute import run_compute

    site = site_row(engine, site_id)
    start_s, end_s = _day_bounds_s(start, end, standard_utc_offset_h(site["timezone"]))
    scratch = make_engine(tmp / "window.sqlite")
    copy_site_window(engine, scratch, site_id, start_s, end_s)
    run_compute(scratch, site_id, full=True, echo=lambda *a, **k: None)
    return scratch


def pack_zip(out_dir: str | Path) -> bytes:
    """The pack folder as zip bytes (files in sorted order, fixed time stamps)."""
    import io
    import zipfile

    out_dir = Path(out_dir)
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", compression=zipfile.ZIP_DEFLATED) as zf:
        for p in sorted(x for x in out_dir.rglob("*") if x.is_file()):
            info = zipfile.ZipInfo(p.relative_to(out_dir).as_posix(), (1980, 1, 1, 0, 0, 0))
            info.compress_type = zipfile.ZIP_DEFLATED
            zf.writestr(info, p.read_bytes())
    return buf.getvalue()
