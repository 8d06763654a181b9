"""``heliaudit results``: write everything computed for a site as JSON or one CSV table."""

from __future__ import annotations

import json
import sys

import click
import numpy as np
import pandas as pd

from analytics.labels import OLD_METHOD_CODES
from analytics.reporting import recommended_rate
from analytics.warranty import DISCLAIMER
from db.degradation import degradation_results
from heliaudit.common import engine_from_ctx
from heliaudit.jobs_degradation import (
    CSV_TABLES,
    NothingComputedError,
    SiteNotFoundError,
    results_document,
    results_table,
)

#: Decimals kept in CSV exports, by the end of a column's name (the unit): Wh resolution
#: for energies, 0.0001 %/yr for rates, five decimals for fractions (PR 0.87421).
CSV_DECIMALS = (("_kwh", 3), ("_kwhm2", 4), ("_kwhc", 2), ("_pct_per_yr", 4), ("_pct", 3),
                ("_h", 3), ("_c", 2), ("_wm2", 1), ("_kwp", 3), ("_kw", 3))
OVERVIEW_METHODS = ("overview", "summary")


def _decimals(column: str) -> int:
    if column in ("ci_low", "ci_high", "rate_pct_per_yr"):
        return 4
    for suffix, n in CSV_DECIMALS:
        if column.endswith(suffix):
            return n
    return 5


def tidy_numbers(df: pd.DataFrame) -> pd.DataFrame:
    """Floats rounded to the resolution of their unit (never 16 digits); float columns that
    hold only whole numbers (counts, epoch seconds) written as integers."""
    out = df.copy()
    for c in out.columns:
        col = out[c]
        if not pd.api.types.is_float_dtype(col):
            continue
        finite = col.dropna()
        if len(finite) and np.all(np.isfinite(finite)) and np.all(finite == np.round(finite)) \
                and (c.startswith("n_") or c.endswith("_s") or c.endswith("_id")):
            out[c] = col.round().astype("Int64")
        else:
            out[c] = col.round(_decimals(c))
    return out


def degradation_csv(engine, site_id: str, table: pd.DataFrame) -> pd.DataFrame:
    """The degradation CSV: one row per device and method (no overview pseudo-method row),
    with the method's warnings, ``recommended`` (the device's recommended method), the
    reasons for the choice and its caveats in words on that row, the number of change
    points, and the screening notice."""
    res = degradation_results(engine, site_id)
    det = {(r.device_id, OLD_METHOD_CODES.get(r.method, r.method)): (r.details or {})
           for r in res.itertuples()}
    t = table.copy()
    t["method"] = [OLD_METHOD_CODES.get(m, m) for m in t["method"]]
    ncp = {d: len((det.get((d, "overview")) or {}).get("change_points", []))
           for d in t["device_id"].unique()}
    t = t[~t["method"].isin(OVERVIEW_METHODS)].drop(columns=["n_change_points"],
                                                     errors="ignore")
    rec = {d: recommended_rate(res, d) for d in t["device_id"].unique()}
    t["recommended"] = [bool(rec.get(d) and rec[d]["method"] == m
                             and m != "recommended")
                        for d, m in zip(t["device_id"], t["method"], strict=True)]
    warn, cav, why = [], [], []
    for d, m, is_rec in zip(t["device_id"], t["method"], t["recommended"], strict=True):
        warn.append("; ".join(det.get((d, m), {}).get("warnings", []) or []))
        r = rec.get(d)
        mine = (is_rec or m == "recommended") and r
        cav.append("; ".join(c.get("text", "") for c in r.get("caveats", [])) if mine else "")
        why.append("; ".join(r.get("reasons", [])) if mine else "")
    t["warnings"] = warn
    t["reasons"] = why
    t["caveats"] = cav
    t["n_change_points"] = t["device_id"].map(ncp).astype("Int64")
    t["notice"] = DISCLAIMER
    return t.reset_index(drop=True)


@click.command("results")
@click.option("--site", "site_id", required=True, metavar="ID", help="Site id.")
@click.option("--format", "fmt", type=click.Choice(["json", "csv"]), default="json",
              show_default=True, help="JSON: the whole versioned document; CSV: one table.")
@click.option("--table", type=click.Choice(CSV_TABLES), default="degradation", show_default=True,
              help="Table for --format csv.")
@click.option("--out", "out_path", type=click.Path(dir_okay=False, writable=True), default=None,
              help="Output file (default: standard output).")
@click.pass_context
def results(ctx: click.Context, site_id: str, fmt: str, table: str, out_path: str | None) -> None:
    """Write a site's results: degradation per method, change points, warranty, PR, flags.

    The JSON document (schema "heliaudit-results/2", described by docs/results.schema.json
    and docs/results.md "Results export") holds the site, software version and parameters, per
    inverter and for the site the period, PR, temperature-corrected PR, the recommended rate
    with its reasons and caveats, every degradation method with its interval, and the
    flags. CSV writes one flat table per call; the degradation table carries each method's
    warnings, the recommended method's caveats and the screening notice.

    \b
    Example:
        heliaudit results --site quillpond --format json --out quillpond.json
        heliaudit results --site quillpond --format csv --table daily --out daily.csv
    """
    engine = engine_from_ctx(ctx)
    try:
        if fmt == "json":
            text = json.dumps(results_document(engine, site_id), indent=2, allow_nan=False,
                              default=str) + "\n"
        else:
            out = results_table(engine, site_id, table)
            if table == "degradation":
                out = degradation_csv(engine, site_id, out)
            text = tidy_numbers(out).to_csv(index=False, lineterminator="\n")
    except (SiteNotFoundError, NothingComputedError, ValueError) as exc:
        raise click.ClickException(str(exc).strip("'\"")) from None
    if out_path:
        with open(out_path, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
        click.echo(f"wrote {out_path}", err=True)
    else:
        sys.stdout.write(text)


COMMANDS = [results]
