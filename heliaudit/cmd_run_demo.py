"""``heliaudit demo``: the main job on the bundled, invented demo sites, end to end.

Loads ``sample_scada/quillpond`` and ``sample_scada/fernhollow`` (the second site of issue
#11: several planes, a tracker, missing sensors, 15 -> 5-minute logging, coarse counters;
idempotent: files already loaded are skipped), computes
the daily table, flags and degradation, prints the weekly check and the degradation
summary, then opens the dashboard. Everything it does is the ordinary commands
(``ingest``, ``compute``, ``check``, ``dashboard``) one after the other.
"""

from __future__ import annotations

import sys
from pathlib import Path

import click

from heliaudit.common import engine_from_ctx

DEMO_CONFIG = Path(__file__).resolve().parents[1] / "sample_scada" / "quillpond" / "quillpond.toml"
#: The second bundled site (#11): arrays on several planes, trackers, a GHI-only group.
FERNHOLLOW_CONFIG = DEMO_CONFIG.parents[1] / "fernhollow" / "fernhollow.toml"


@click.command("demo")
@click.option("--config", "config_paths", type=click.Path(dir_okay=False), multiple=True,
              help="Site configuration to run on; repeat for several (default: both bundled "
                   "demo sites, sample_scada/quillpond/quillpond.toml and "
                   "sample_scada/fernhollow/fernhollow.toml).")
@click.option("--no-dashboard", is_flag=True, help="Stop after printing the results.")
@click.option("--port", default=8501, show_default=True, type=click.IntRange(1, 65535),
              help="Dashboard port.")
@click.pass_context
def demo(ctx: click.Context, config_paths: tuple[str, ...], no_dashboard: bool,
         port: int) -> None:
    """Run the main job on the bundled demo sites and open the dashboard.

    Ingests the invented demo plants "Quillpond Solar" (14 inverters, 3.5 years of
    15-minute data with known injected faults) and "Fernhollow Solar" (7 small systems
    on three planes, one a single-axis tracker, 15- then 5-minute data, coarse
    counters), computes performance ratios, flags and degradation, prints the weekly
    check of each site's last week of data, then serves the dashboard on
    http://127.0.0.1:PORT until Ctrl-C. Running it again skips the files already
    loaded.

    \b
    Example:
        heliaudit demo
        heliaudit --db /tmp/demo.sqlite demo --no-dashboard
        heliaudit demo --config sample_scada/fernhollow/fernhollow.toml
    """
    from heliaudit.cmd_check import print_check
    from heliaudit.cmd_compute import run_compute
    from heliaudit.cmd_dashboard import dashboard
    from heliaudit.cmd_ingest import _file_line
    from ingest.config import ConfigError, load_site_config
    from ingest.load import discover, ingest_paths

    paths = [Path(p) for p in config_paths] or [DEMO_CONFIG, FERNHOLLOW_CONFIG]
    cfgs = []
    for path in paths:
        if not path.exists():
            raise click.ClickException(
                f"{path}: demo site not found; regenerate it with `heliaudit demo-data` "
                "(Fernhollow: `python -m heliaudit.demo_fernhollow`) or pass --config")
        try:
            cfgs.append((path, load_site_config(path)))
        except ConfigError as exc:
            raise click.ClickException(str(exc)) from None
    engine = engine_from_ctx(ctx, create=True)
    failed_files = 0
    for path, cfg in cfgs:
        failed_files += _run_site(engine, path, cfg, discover, ingest_paths, run_compute,
                                  print_check, _file_line)
    if failed_files:
        raise click.ClickException(f"{failed_files} files failed to load")
    if no_dashboard:
        return
    click.echo("4/4 dashboard", err=True)
    ctx.invoke(dashboard, port=port, host="127.0.0.1", no_browser=False)


def _run_site(engine, path: Path, cfg, discover, ingest_paths, run_compute, print_check,
              _file_line) -> int:
    """Steps 1-3 (load, compute, results) for one site; returns the number of failed files."""
    click.echo(f"1/4 loading {cfg.name} ({cfg.id}) from {path.parent} into {engine.url}",
               err=True)
    tty = sys.stderr.isatty()
    if tty:
        total = sum(f.stat().st_size for f, _src in discover(cfg, None))
        with click.progressbar(length=total, label="    files", file=sys.stderr) as bar:
            results = ingest_paths(engine, cfg, None, progress=bar.update)
    else:
        results = ingest_paths(engine, cfg, None)
    loaded = [r for r in results if r.status == "loaded"]
    failed = [r for r in results if r.status == "failed"]
    rejected = sum(r.counts.get("rows_rejected", 0) for r in loaded)
    click.echo(f"    {len(loaded)} files loaded, {len(results) - len(loaded) - len(failed)} "
               f"unchanged, {len(failed)} failed; {rejected} rows rejected (with reasons, "
               "see the dashboard's data-quality page)", err=True)
    for r in failed:
        click.echo("    " + _file_line(r), err=True)
    click.echo("2/4 computing daily performance, flags and degradation", err=True)
    run_compute(engine, cfg.id, full=False, tty=tty, echo=click.echo)
    click.echo(f"3/4 results of {cfg.name} ({cfg.id})", err=True)
    print_check(engine, cfg.id)
    return len(failed)


COMMANDS = [demo]
