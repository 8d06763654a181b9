"""``heliaudit demo-data``: write the invented demo site, or a larger synthetic fleet."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import click

from heliaudit import demo_generator as gen


@click.command("demo-data")
@click.option("--out", "out_dir", type=click.Path(file_okay=False, path_type=Path), default=None,
              help="Output directory. Default: sample_scada/<site-id> in the current directory.")
@click.option("--inverters", "n_inverters", type=click.IntRange(1, 10000), default=14,
              show_default=True, help="Number of string inverters.")
@click.option("--years", type=click.FloatRange(0.05, 50), default=3.5, show_default=True,
              help="Length of the data in years (rounded to whole months, at least one).")
@click.option("--interval-min", type=click.Choice(["5", "10", "15", "30", "60"]), default="15",
              show_default=True, help="Logger interval in minutes.")
@click.option("--seed", type=int, default=20221, show_default=True,
              help="Random seed; the same seed and options give the same bytes.")
@click.option("--start", type=click.DateTime(formats=["%Y-%m-%d"]), default="2022-01-01",
              show_default=True, help="First local day (the first of a month).")
@click.option("--site-id", default="quillpond", show_default=True,
              help="Site id used in the file names and the configuration.")
def demo_data(out_dir: Path | None, n_inverters: int, years: float, interval_min: str, seed: int,
              start: dt.datetime, site_id: str) -> None:
    """Generate logger exports, site configuration and truth file of an invented plant.

    With no options this rewrites the bundled demo site "Quillpond Solar" (14 inverters,
    2022-01-01 to 2025-06-30, 15-minute data) in sample_scada/quillpond/. The data come from
    a physical model (pvlib clear sky, Hay-Davies transposition, Sandia temperatures, PVWatts
    power) with known faults injected and listed in truth.json. Larger fleets for
    benchmarks are written month by month.

    \b
    Example:
      heliaudit demo-data
      heliaudit demo-data --out /tmp/fleet --inverters 100 --years 5 --site-id fleet100
    """
    if start.day != 1:
        raise click.ClickException(f"--start must be the first day of a month, got {start:%Y-%m-%d}")
    months = max(1, round(years * 12))
    try:
        sc = gen.quillpond_scenario(n_inverters=n_inverters, start=start.date(), months=months,
                                    interval_min=int(interval_min), seed=seed, site_id=site_id)
    except ValueError as exc:
        raise click.ClickException(str(exc)) from None
    out = out_dir if out_dir is not None else Path("sample_scada") / site_id
    click.echo(f"writing {n_inverters} inverters, {months} months at {interval_min} min to {out}",
               err=True)
    summary = gen.write_site(sc, out, progress=lambda name: click.echo(f"  {name}", err=True))
    click.echo(f"{len(summary['files'])} export files, {summary['bytes'] / 1e6:.1f} MB, "
               f"{summary['n_intervals']} intervals, {summary['seconds']:.1f} s; "
               f"config {out / (site_id + '.toml')}, truth {out / 'truth.json'}")


COMMANDS = [demo_data]
