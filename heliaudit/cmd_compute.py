"""``heliaudit compute``: recompute the daily performance table, then flags and degradation."""

from __future__ import annotations

import importlib
import importlib.util
import json
import sys

import click
import sqlalchemy as sa

from db import schema
from heliaudit.common import engine_from_ctx

#: Steps chained after the daily table, when their modules exist: (module, function).
LATER_STEPS = (("heliaudit.jobs_flags", "run_flags"),
               ("heliaudit.jobs_degradation", "run_degradation"))


def _sites(engine: sa.Engine, site_id: str | None) -> list[str]:
    with engine.connect() as conn:
        known = conn.execute(sa.select(schema.site.c.site_id).order_by(
            schema.site.c.site_id)).scalars().all()
    if site_id is not None and site_id not in known:
        raise click.ClickException(f"no site {site_id!r} in the database; known: "
                                   f"{', '.join(known) or '(none)'}")
    return [site_id] if site_id else list(known)


def _new_batches(engine: sa.Engine, site_id: str) -> list[tuple[int, int]] | None:
    """``(ts_first_s, ts_last_s)`` of batches loaded after those the site's last daily
    computation saw (by batch id), or None when the site was never computed."""
    c, b = schema.computation.c, schema.ingest_batch.c
    with engine.connect() as conn:
        last = conn.execute(sa.select(c.params_json).where(
            c.site_id == site_id, c.kind == "daily", c.finished_utc.is_not(None))
            .order_by(c.computation_id.desc()).limit(1)).scalar()
        if last is None:
            return None
        through = json.loads(last).get("through_batch_id") or 0
        rows = conn.execute(sa.select(b.ts_first_s, b.ts_last_s).where(
            b.site_id == site_id, b.status == "loaded", b.batch_id > through,
            b.ts_first_s.is_not(None))).all()
    return [(int(r[0]), int(r[1])) for r in rows]


class _Bar:
    """A progress callback ``(done, total)`` drawing a click progress bar on a terminal."""

    def __init__(self, label: str, enabled: bool):
        self.label, self.enabled, self.bar, self.done = label, enabled, None, 0

    def __call__(self, done: int, total: int) -> None:
        if not self.enabled:
            return
        if self.bar is None:
            self.bar = click.progressbar(length=max(total, 1), label=self.label, file=sys.stderr)
            self.bar.__enter__()
        self.bar.update(done - self.done)
        self.done = done
        if done >= total:
            self.close()

    def close(self) -> None:
        if self.bar is not None:
            self.bar.__exit__(None, None, None)
            self.bar = None


def run_compute(engine: sa.Engine, site_id: str | None = None, full: bool = False,
                tty: bool = False, echo=click.echo) -> list[dict]:
    """Recompute the daily table (all days with ``full``, else the days of newly loaded
    files), then the later steps that exist. Returns the daily summaries."""
    from heliaudit import jobs_daily

    summaries = []
    for sid in _sites(engine, site_id):
        bar = _Bar(f"{sid}: daily", tty)
        try:
            ranges = None if full else _new_batches(engine, sid)
            if ranges is None:
                summaries += jobs_daily.recompute_all(engine, sid, progress=bar)
            else:
                if not ranges:
                    echo(f"{sid}: daily table up to date (no files loaded since the last "
                         "computation; use --full after a configuration change)", err=True)
                for lo, hi in sorted(ranges):
                    summaries.append(jobs_daily.recompute_range(engine, sid, lo, hi, progress=bar))
        except ValueError as exc:  # e.g. filters.<key>: unknown setting in the site config
            raise click.ClickException(f"{sid}: {exc}") from None
        finally:
            bar.close()
        for s in summaries:
            if s["site_id"] == sid and s["rows"]:
                echo(f"{sid}: daily rows {s['rows']} ({s['inverters']} inverters, days "
                     f"{s['first_day']}..{s['last_day']}, {s['days_valid']} valid)", err=True)
        for module, func in LATER_STEPS:
            if importlib.util.find_spec(module) is None:
                continue
            step = getattr(importlib.import_module(module), func)
            bar = _Bar(f"{sid}: {func.removeprefix('run_')}", tty)
            try:
                step(engine, sid, progress=bar)
            finally:
                bar.close()
    return summaries


@click.command("compute")
@click.option("--site", "site_id", default=None, metavar="ID",
              help="Only this site (default: every site in the database).")
@click.option("--full", is_flag=True,
              help="Recompute every day, e.g. after a configuration change (default: the days "
                   "of files loaded since the last computation; everything if never computed).")
@click.pass_context
def compute(ctx: click.Context, site_id: str | None, full: bool) -> None:
    """Compute daily performance (PR, temperature-corrected PR, performance index,
    availability) for every inverter and day, then flags and degradation.

    Days are site-local standard time. Filter thresholds come from the site
    configuration's [filters] table. Progress goes to stderr.

    \b
    Example:
        heliaudit compute --site quillpond --full
    """
    engine = engine_from_ctx(ctx)
    run_compute(engine, site_id, full, tty=sys.stderr.isatty())


COMMANDS = [compute]
