"""``heliaudit compute``: recompute the daily performance table, then flags and degradation."""

from __future__ import annotations

import datetime as dt
import importlib
import importlib.util
import os
import socket
import sys

import click
import sqlalchemy as sa

from db import queries
from db.computations import batches_since_last_daily, latest_finished
from db.degradation import last_computation
from db.runcache import read_once
from db.workqueue import claim_site, supports_claims
from heliaudit.common import engine_from_ctx

#: Degradation rates move by hundredths of %/yr per week of new data, and cost most of a
#: weekly cycle (issue #16): after an incremental daily update they are recomputed only when
#: the stored ones are this many days old (or with --full, or after a full daily recompute).
DEGRADATION_EVERY_DAYS = 28

#: Steps chained after the daily table, when their modules exist: (module, function).
LATER_STEPS = (("heliaudit.jobs_flags", "run_flags"),
               ("heliaudit.jobs_degradation", "run_degradation"))


def _sites(engine: sa.Engine, site_id: str | None) -> list[str]:
    known = queries.sites(engine)["site_id"].tolist()
    if site_id is not None and site_id not in known:
        raise click.ClickException(f"no site {site_id!r} in the database; known: "
                                   f"{', '.join(known) or '(none)'}")
    return [site_id] if site_id else list(known)


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
    files), then the later steps that exist (degradation on its schedule,
    :data:`DEGRADATION_EVERY_DAYS`, unless ``full`` or the whole table was recomputed).
    Returns the daily summaries."""
    from heliaudit import jobs_daily

    summaries = []
    for sid in _sites(engine, site_id):
        # one read of each channel and of the site configuration, shared by the steps (#16)
        with read_once():
            bar = _Bar(f"{sid}: daily", tty)
            try:
                ranges = None if full else batches_since_last_daily(engine, sid)
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
                if func == "run_degradation" and not full and ranges is not None:
                    age = _degradation_age_days(engine, sid)
                    if age is not None and age < DEGRADATION_EVERY_DAYS:
                        echo(f"{sid}: degradation rates kept from {age:.0f} day(s) ago (recomputed "
                             f"every {DEGRADATION_EVERY_DAYS} days; --full recomputes now)", err=True)
                        continue
                step = getattr(importlib.import_module(module), func)
                bar = _Bar(f"{sid}: {func.removeprefix('run_')}", tty)
                # flags: only the window new data can change, unless everything was recomputed
                kw = {"full": full or ranges is None} if func == "run_flags" else {}
                try:
                    step(engine, sid, progress=bar, **kw)
                finally:
                    bar.close()
    return summaries


def _degradation_age_days(engine: sa.Engine, site_id: str) -> float | None:
    """Days since the site's last finished degradation computation; None if never."""
    last = last_computation(engine, site_id, "degradation")
    if last is None or not last.get("finished_utc"):
        return None
    finished = dt.datetime.fromisoformat(last["finished_utc"])
    return (dt.datetime.now(dt.UTC) - finished).total_seconds() / 86400.0


def _due(engine: sa.Engine, site_id: str) -> bool:
    """Does the site need computing: files loaded since its last daily computation, never
    computed, or a later step (flags, degradation) older than the daily table?"""
    ranges = batches_since_last_daily(engine, site_id)
    if ranges is None or ranges:
        return True
    latest = latest_finished(engine, site_id)
    daily = latest.get("daily", -1)
    for module, func in LATER_STEPS:
        if importlib.util.find_spec(module) is None or latest.get(func.removeprefix("run_"),
                                                                   -1) >= daily:
            continue
        if func != "run_degradation":
            return True
        age = _degradation_age_days(engine, site_id)
        if age is None or age >= DEGRADATION_EVERY_DAYS:
            return True
    return False


def run_worker(engine: sa.Engine, worker: str, full: bool = False, tty: bool = False,
               echo=click.echo) -> dict[str, list[str]]:
    """Compute every due site that no other worker holds (db.workqueue): several workers on
    one PostgreSQL store share a portfolio, each site computed once, a killed worker's site
    taken over by the next. Returns the site ids ``computed``, ``busy`` and ``up_to_date``."""
    out: dict[str, list[str]] = {"computed": [], "busy": [], "up_to_date": []}
    for sid in _sites(engine, None):
        with claim_site(engine, sid, worker) as mine:
            if not mine:
                out["busy"].append(sid)
                echo(f"{sid}: being computed by another worker, skipped", err=True)
            elif not full and not _due(engine, sid):
                out["up_to_date"].append(sid)
            else:
                run_compute(engine, sid, full, tty, echo)
                out["computed"].append(sid)
    echo(f"worker {worker}: {len(out['computed'])} site(s) computed, {len(out['busy'])} held "
         f"by other workers, {len(out['up_to_date'])} up to date", err=True)
    return out


@click.command("compute")
@click.option("--site", "site_id", default=None, metavar="ID",
              help="Only this site (default: every site in the database).")
@click.option("--full", is_flag=True,
              help="Recompute every day, e.g. after a configuration change (default: the days "
                   "of files loaded since the last computation; everything if never computed).")
@click.option("--worker", "worker", is_flag=True,
              help="Share the portfolio with other workers: compute every due site that no "
                   "other `compute --worker` holds (PostgreSQL; on SQLite one worker at a time).")
@click.option("--worker-id", default=None, metavar="NAME",
              help="This worker's name in the store (default: host:pid).")
@click.pass_context
def compute(ctx: click.Context, site_id: str | None, full: bool, worker: bool,
            worker_id: str | None) -> None:
    """Compute daily performance (PR, temperature-corrected PR, performance index,
    availability) for every inverter and day, then flags and degradation.

    Days are site-local standard time. Filter thresholds come from the site
    configuration's [filters] table. Progress goes to stderr. After new files,
    only the new days of the daily table and the flags they can change (each
    detector with its look-back) are recomputed, and degradation rates when the
    stored ones are 28 days old (--full recomputes everything now).

    With --worker, several processes (on one machine or many) share a PostgreSQL
    portfolio: each takes the due sites no other worker holds, so no site is computed
    twice, and a killed worker's site is taken over by the next run.

    \b
    Example:
        heliaudit compute --site quillpond --full
        heliaudit --db postgresql://heliaudit@db/fleet compute --worker
    """
    engine = engine_from_ctx(ctx)
    if worker:
        if site_id is not None:
            raise click.ClickException("--worker takes every due site; leave out --site")
        if not supports_claims(engine):
            click.echo("note: SQLite has one writer; run one `compute --worker` per SQLite "
                       "file (several workers need PostgreSQL)", err=True)
        run_worker(engine, worker_id or f"{socket.gethostname()}:{os.getpid()}", full,
                   tty=sys.stderr.isatty())
        return
    run_compute(engine, site_id, full, tty=sys.stderr.isatty())


COMMANDS = [compute]
