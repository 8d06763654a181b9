"""``heliaudit evidence``: write a warranty evidence pack (report PDF, data, manifest)."""

from __future__ import annotations

import datetime as dt

import click

from heliaudit.common import engine_from_ctx


def _date(ctx, param, value):
    if value is None:
        return None
    try:
        return dt.date.fromisoformat(value)
    except ValueError:
        raise click.BadParameter(f"expected a date YYYY-MM-DD, got {value!r}") from None


@click.command("evidence")
@click.option("--site", "site_id", required=True, metavar="ID", help="Site id.")
@click.option("--inverter", "inverters", multiple=True, metavar="ID",
              help="Only these inverters (repeat the option); default: every inverter. "
                   "Site figures always use every inverter.")
@click.option("--from", "start", callback=_date, default=None, metavar="DATE",
              help="First day (YYYY-MM-DD, local standard time). With --from/--to the daily "
                   "table, flags and degradation are recomputed for the period in a scratch "
                   "copy; the store is not changed.")
@click.option("--to", "end", callback=_date, default=None, metavar="DATE",
              help="Last day (YYYY-MM-DD), inclusive.")
@click.option("--out", "out_dir", required=True, type=click.Path(file_okay=False),
              metavar="DIR", help="Folder for the pack (must be new or empty).")
@click.option("--force", is_flag=True,
              help="Replace the pack (report.pdf, manifest.json, data/) in a non-empty folder.")
@click.pass_context
def evidence(ctx: click.Context, site_id: str, inverters: tuple[str, ...], start, end,
             out_dir: str, force: bool) -> None:
    """Write a warranty evidence pack: report.pdf, data/ (CSV series, results JSON, site
    configuration) and manifest.json (SHA-256 of every source export and pack file, the
    software version, parameters and the command that rebuilds it).

    The report is screening evidence from system-level field data; the warranty contract's
    own terms and test procedure govern any claim.

    \b
    Example:
        heliaudit evidence --site quillpond --out evidence-quillpond
        heliaudit evidence --site quillpond --inverter INV-03 --from 2022-06-01 \\
            --to 2025-05-31 --out evidence-inv03
    """
    from heliaudit.evidence import (
        EvidenceError,
        NothingComputedError,
        SiteNotFoundError,
        build_pack,
        reproduce_command,
    )

    engine = engine_from_ctx(ctx)
    db_url = (ctx.find_root().obj or {}).get("db_url") or str(engine.url)
    command = reproduce_command(db_url, site_id, inverters, start, end, out_dir)
    try:
        man = build_pack(engine, site_id, out_dir, inverters=inverters or None, start=start,
                         end=end, force=force, db_url=db_url, command=command)
    except (SiteNotFoundError, EvidenceError, NothingComputedError) as exc:
        raise click.ClickException(str(exc).strip("'\"")) from None
    n_src = len(man["sources"])
    click.echo(f"wrote {out_dir}: report.pdf, {len(man['files']) - 1} data file(s), "
               f"manifest.json ({n_src} source export file(s) hashed)", err=True)
    click.echo(f"rebuild with: {command}", err=True)


COMMANDS = [evidence]
