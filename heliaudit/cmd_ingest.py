"""``heliaudit ingest`` and ``heliaudit summary``: thin click wrappers over :mod:`ingest.load`."""

from __future__ import annotations

import importlib
import importlib.util
import os
import sys

import click
import pandas as pd
import sqlalchemy as sa

from db.engine import mask_secrets
from db.ingest_log import rejected_rows, site_summary
from heliaudit.common import engine_from_ctx
from ingest.config import ConfigError, load_site_config
from ingest.load import BatchResult, discover, ingest_paths, touched_ranges
from ingest.timestamps import fmt_utc

RECOMPUTE_MODULE = "heliaudit.jobs_daily"


def _file_line(r: BatchResult) -> str:
    if r.status == "failed":
        return f"{r.file_name}: FAILED: {r.message}"
    if r.status == "unchanged":
        return f"{r.file_name}: unchanged, skipped ({r.message})"
    c = r.counts
    blank = (r.notes or {}).get("lines", {}).get("blank", 0)
    return (f"{r.file_name}: {c.get('rows_read', 0)} rows: {c.get('rows_loaded', 0)} loaded, "
            f"{c.get('rows_duplicate', 0)} duplicate, {c.get('rows_rejected', 0)} rejected"
            + (f", {blank} blank" if blank else "") + "; "
            f"{fmt_utc(r.ts_first_s)} .. {fmt_utc(r.ts_last_s)} UTC (interval start); "
            f"interval {r.interval_s or '?'} s; values: {c.get('values_loaded', 0)} new or "
            f"changed ({c.get('values_conflict', 0)} conflicting), "
            f"{c.get('values_duplicate', 0)} duplicate, {c.get('values_rejected', 0)} rejected")


def _note_lines(r: BatchResult) -> list[str]:
    n = r.notes or {}
    out = []
    for c in n.get("clock_corrections", []):
        out.append(f"clock correction {c['shift_minutes']:+d} min applied to {c['rows']} rows "
                   f"({c['start']} .. {c['end']}{': ' + c['note'] if c['note'] else ''})")
    for day, k in n.get("dst_gap_rejected", {}).items():
        out.append(f"DST {day}: {k} rows with a local time that does not exist were rejected")
    for day, k in n.get("dst_repeated_hour", {}).items():
        out.append(f"DST {day}: repeated hour ({k['rule']}): {k.get('summer', 0)} rows as summer "
                   f"time, {k.get('standard', 0)} as standard time, {k.get('rejected', 0)} rejected")
    all_counters = n.get("counters", {})
    coarse = {d: ev for d, ev in all_counters.items() if ev.get("coarse")}
    for source in ("p_ac_kw", "counter"):
        devs = sorted(d for d, ev in coarse.items() if ev.get("interval_energy_from") == source)
        if devs:
            # a counter can be judged coarse before its resolution is measured (one step
            # beyond an interval's possible energy in a short file): resolution_kwh is None
            steps = sorted({coarse[d]["resolution_kwh"] for d in devs} - {None})
            size = (f"steps of {', '.join(f'{x:g}' for x in steps)} kWh" if steps else
                    "steps larger than one interval's possible energy")
            out.append(f"coarse energy counters ({size}) "
                       f"on {len(devs)} inverters ({', '.join(devs[:8])}): " + (
                           "interval energy from AC power; the counters are kept for daily and "
                           "monthly totals (cross-checked against integrated power)"
                           if source == "p_ac_kw" else
                           "no AC power in this file, interval energy from counter steps (daily "
                           "totals are right, single intervals are not)"))
    counters = {d: ev for d, ev in all_counters.items()
                if any(ev.get(k) for k in ("resets", "rollovers", "jumps", "gaps_not_assigned"))}
    if counters:  # one line for all counters: totals, and the devices with resets
        tot = {k: sum(ev.get(k, {}).get("count", 0) for ev in counters.values())
               for k in ("resets", "rollovers", "jumps")}
        gaps = sum(ev.get("gaps_not_assigned", 0) for ev in counters.values())
        reset_devs = sorted(d for d, ev in counters.items() if ev.get("resets"))
        out.append(f"energy counters of {len(counters)} inverters: {tot['resets']} resets"
                   + (f" ({', '.join(reset_devs[:8])})" if reset_devs else "")
                   + f", {tot['rollovers']} rollovers, {tot['jumps']} jumps, {gaps} gaps "
                   "(no interval energy assigned across a reset, jump or gap)")
    if n.get("configured_columns_missing"):
        out.append("configured columns not in this file: "
                   + ", ".join(n["configured_columns_missing"][:10]))
    return ["  note: " + x for x in out]


SHOW_REJECTS = 5


def _reject_lines(engine, r: BatchResult) -> list[str]:
    """The first rejected rows/values of a loaded file, compiler-style, then a count."""
    n = r.counts.get("rows_rejected", 0) + r.counts.get("values_rejected", 0)
    if r.status != "loaded" or not n or r.batch_id is None:
        return []
    rej = rejected_rows(engine, r.site_id, batch_id=r.batch_id, limit=SHOW_REJECTS)
    out = []
    for x in rej.itertuples():
        col = f":{x.column_name}" if isinstance(x.column_name, str) and x.column_name else ""
        out.append(f"  rejected: {x.file_name}:{x.line_no}{col}: {x.reason}")
    if n > len(rej):
        out.append(f"  ... {n - len(rej)} more rejected (heliaudit dashboard, data quality page)")
    return out


@click.command()
@click.argument("config", type=click.Path(dir_okay=False))
@click.argument("paths", nargs=-1, type=click.Path())
@click.option("--no-compute", is_flag=True,
              help="Do not recompute the daily results of the days the new data touches.")
@click.option("--silent", is_flag=True, help="No progress bar.")
@click.pass_context
def ingest(ctx: click.Context, config: str, paths: tuple[str, ...], no_compute: bool,
           silent: bool) -> None:
    """Load logger exports of one site into the database.

    CONFIG is the site's TOML file. PATHS are export files or folders; without PATHS each
    source's `pattern` is searched relative to CONFIG's folder. The site, its devices and
    channels are registered (or updated) from CONFIG first. A file already loaded unchanged
    is skipped; each file is loaded completely or not at all. Prints one summary line per
    file and exits with status 1 if any file failed or had no usable row (every row rejected,
    or none at all).

    \b
    Example:
        heliaudit ingest sample_scada/quillpond/quillpond.toml
        heliaudit --db plant.sqlite ingest site.toml exports/2024-05/ extra.csv.gz
    """
    try:
        cfg = load_site_config(config)
    except ConfigError as exc:
        raise click.ClickException(str(exc)) from None
    for p in paths:
        if not os.path.exists(p):
            raise click.ClickException(f"{p}: no such file or folder")
    files = discover(cfg, paths)
    if not files:
        where = ", ".join(paths) if paths else os.path.dirname(os.path.abspath(config))
        raise click.ClickException(
            f"no export files found in {where} matching "
            + ", ".join(repr(s.pattern) for s in cfg.sources))
    engine = engine_from_ctx(ctx, create=True)
    total = sum(os.path.getsize(f) for f, _s in files if f.is_file())
    show = not silent and sys.stderr.isatty()
    results: list[BatchResult] = []
    try:
        if show:
            with click.progressbar(length=total, label=f"Loading {len(files)} files",
                                   file=sys.stderr) as bar:
                results = ingest_paths(engine, cfg, paths, progress=bar.update)
        else:
            results = ingest_paths(engine, cfg, paths)
    except sa.exc.SQLAlchemyError as exc:
        detail = str(getattr(exc, "orig", None) or exc).strip().splitlines()
        url = (ctx.find_root().obj or {}).get("db_url")
        raise click.ClickException(mask_secrets(
            "database error while loading (the file being loaded was rolled back): "
            + (detail[0] if detail else type(exc).__name__), url)) from None
    for r in results:
        click.echo(_file_line(r))
        for line in _note_lines(r):
            click.echo(line)
        for line in _reject_lines(engine, r):
            click.echo(line)
    if not no_compute:
        _recompute(engine, touched_ranges(results))
    failed = [r for r in results if r.status == "failed"]
    if failed:
        raise click.ClickException(
            f"{len(failed)} of {len(results)} files failed: " + failed[0].message
            + (" (and more above)" if len(failed) > 1 else ""))
    unusable = [r for r in results if r.status == "loaded"
                and r.counts.get("rows_loaded", 0) + r.counts.get("rows_duplicate", 0) == 0]
    if unusable:
        r = unusable[0]
        raise click.ClickException(
            f"{len(unusable)} of {len(results)} files had no usable row: {r.file_name}: "
            f"{r.counts.get('rows_rejected', 0)} rows rejected, none loaded (see the rejected "
            "lines above)" + (" (and more above)" if len(unusable) > 1 else ""))


def _recompute(engine, ranges: dict[str, tuple[int, int]]) -> None:
    if not ranges:
        return
    fn = None
    if importlib.util.find_spec(RECOMPUTE_MODULE) is not None:
        fn = getattr(importlib.import_module(RECOMPUTE_MODULE), "recompute_range", None)
    if fn is None:
        click.echo("daily table not updated: analytics not installed")
        return
    for site_id, (lo, hi) in sorted(ranges.items()):
        try:
            fn(engine, site_id, lo, hi, progress=None)
        except Exception as exc:  # noqa: BLE001 - the data is loaded; say what to rerun
            raise click.ClickException(
                f"data loaded, but recomputing the daily table of {site_id} failed: {exc}; "
                "run `heliaudit compute` after fixing the cause") from None
        click.echo(f"daily table updated for {site_id}: {fmt_utc(lo)} .. {fmt_utc(hi)} UTC")


@click.command()
@click.option("--site", "site_id", metavar="ID", default=None, help="Only this site.")
@click.pass_context
def summary(ctx: click.Context, site_id: str | None) -> None:
    """Show what is loaded, per site: devices, date range, completeness, batches, rejects.

    Completeness is readings stored over readings expected (one per nominal interval and
    channel with data, from the first to the last interval).

    \b
    Example:
        heliaudit summary
        heliaudit summary --site quillpond
    """
    engine = engine_from_ctx(ctx)
    df = site_summary(engine, site_id)
    if df.empty:
        if site_id:
            known = site_summary(engine)["site_id"].tolist()
            raise click.ClickException(f"no site {site_id!r} in the database; known: "
                                       f"{', '.join(known) or '(none)'}")
        click.echo("no sites loaded yet; load one with `heliaudit ingest CONFIG`")
        return
    for row in df.itertuples():
        comp = f"{row.completeness * 100:.1f} %" if pd.notna(row.completeness) else "-"
        rng = (f"{row.first_utc:%Y-%m-%d %H:%M} .. {row.last_utc:%Y-%m-%d %H:%M} UTC"
               if pd.notna(row.first_utc) else "no readings")
        click.echo(f"{row.site_id} ({row.name})")
        click.echo(f"  devices:    {row.n_inverters} inverters, {row.n_sensors} sensors, "
                   f"{row.n_channels_with_data} channels with data")
        click.echo(f"  range:      {rng}, interval {row.interval_s or '?'} s")
        click.echo(f"  readings:   {row.n_readings}, completeness {comp}")
        click.echo(f"  batches:    {row.batches_loaded} loaded, {row.batches_unchanged} unchanged, "
                   f"{row.batches_failed} failed; last {row.last_ingest_utc or '-'}")
        click.echo(f"  rejected:   {row.rows_rejected} rows, {row.values_rejected} values "
                   "(each with file, line and reason: `heliaudit dashboard`, page "
                   "\"Data quality\", table \"Rejected rows\")")


COMMANDS = [ingest, summary]
