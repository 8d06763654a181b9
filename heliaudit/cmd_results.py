"""``heliaudit results``: write everything computed for a site as JSON or one CSV table."""

from __future__ import annotations

import json
import sys

import click

from heliaudit.common import engine_from_ctx
from heliaudit.jobs_degradation import (
    CSV_TABLES,
    NothingComputedError,
    SiteNotFoundError,
    results_document,
    results_table,
)


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

    The JSON document (schema "heliaudit-results/2", see README "Results export") holds the
    site, software version and parameters, per inverter and for the site the period, PR,
    temperature-corrected PR and every degradation method with its interval, and the flags.
    CSV writes one flat table per call.

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
            text = results_table(engine, site_id, table).to_csv(index=False, lineterminator="\n")
    except (SiteNotFoundError, NothingComputedError, ValueError) as exc:
        raise click.ClickException(str(exc).strip("'\"")) from None
    if out_path:
        with open(out_path, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
        click.echo(f"wrote {out_path}", err=True)
    else:
        sys.stdout.write(text)


COMMANDS = [results]
