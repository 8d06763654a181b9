"""``heliaudit check``: the weekly check of one site, in the terminal.

The same figures as the dashboard's weekly page (:mod:`analytics.weekly` over
``db.queries.period_sums``), plus the flags of the week and the degradation summary, as
plain text that can go into an e-mail or a ticket.
"""

from __future__ import annotations

import datetime as dt
import math

import click
import pandas as pd
import sqlalchemy as sa

from analytics.daily import standard_utc_offset_h
from analytics.weekly import weekly_comparison
from db import queries
from db.degradation import degradation_results
from heliaudit.common import engine_from_ctx

TRAILING_WEEKS = 8
FIELD_CAUTION = ("Caution: a flag is a reason to look, not a diagnosis. PV arrays are "
                 "energised whenever lit; field work is for qualified people under local "
                 "electrical codes and lockout/tagout.")
WARRANTY_CAUTION = ("Degradation from system-level field data is screening evidence; a "
                    "warranty claim follows its contract's own terms and test procedure.")


def _f(x, fmt: str, missing: str = "-") -> str:
    return missing if x is None or (isinstance(x, float) and math.isnan(x)) or pd.isna(x) \
        else format(x, fmt)


def _std_offset_s(tz: str) -> int:
    return int(round(standard_utc_offset_h(tz) * 3600))


def print_check(engine: sa.Engine, site_id: str, week_end: dt.date | None = None,
                echo=click.echo) -> pd.DataFrame:
    """Print the weekly check of ``site_id`` for the 7 days ending ``week_end`` (default: the
    last day with data); return the per-inverter table."""
    site = queries.sites(engine)
    site = site[site["site_id"] == site_id]
    if site.empty:
        raise click.ClickException(f"no site {site_id!r} in the database")
    first, last = queries.daily_span(engine, site_id)
    if last is None:
        raise click.ClickException(f"{site_id}: no daily results yet; run `heliaudit compute`")
    end = week_end or last
    w0 = end - dt.timedelta(days=6)
    t0 = w0 - dt.timedelta(days=7 * TRAILING_WEEKS)
    table = weekly_comparison(
        queries.period_sums(engine, site_id, w0, end),
        queries.period_sums(engine, site_id, t0, w0 - dt.timedelta(days=1)),
        queries.inverters(engine, site_id))
    info = site.iloc[0]
    echo(f"Weekly check: {site_id} ({info['name']}), {w0} .. {end} (local standard time; "
         f"data {first} .. {last})")
    echo(f"{'inverter':<10} {'energy':>9} {'Yf':>6} {'PR_STC':>7} {'vs own':>7} "
         f"{'vs peers':>8} {'avail E':>8}")
    echo(f"{'':<10} {'[kWh]':>9} {'[h]':>6} {'':>7} {'8 wk [%]':>7} {'[%]':>8} {'[%]':>8}")
    for r in table.sort_values("d_peers_pct", na_position="last").itertuples():
        mark = "  <- below peers" if r.below_peers else ""
        echo(f"{r.device_id:<10} {_f(r.e_ac_kwh, ',.0f'):>9} {_f(r.yf_h, '.2f'):>6} "
             f"{_f(r.pr_stc, '.3f'):>7} {_f(r.d_trailing_pct, '+.1f'):>7} "
             f"{_f(r.d_peers_pct, '+.1f'):>8} {_f(100 * r.avail_energy, '.1f'):>8}{mark}")
    _print_flags(engine, site_id, w0, end, echo)
    _print_degradation(engine, site_id, echo)
    return table


def _print_flags(engine, site_id, w0, end, echo) -> None:
    tz = queries.sites(engine).set_index("site_id").loc[site_id, "timezone"]
    off = _std_offset_s(tz)
    a = int(pd.Timestamp(w0).timestamp()) - off
    b = int(pd.Timestamp(end + dt.timedelta(days=1)).timestamp()) - off
    fl = queries.flags_overlapping(engine, site_id, a, b)
    echo("")
    if fl.empty:
        echo("Flags in the week: none")
        return
    fl = fl.sort_values("lost_kwh", ascending=False, na_position="last")
    echo(f"Flags in the week ({len(fl)}; largest lost energy first):")
    for r in fl.head(15).itertuples():
        start = pd.Timestamp(r.start_s + off, unit="s").strftime("%Y-%m-%d %H:%M")
        end_ = pd.Timestamp(r.end_s + off, unit="s").strftime("%Y-%m-%d %H:%M")
        lost = f", {r.lost_kwh:,.0f} kWh lost" if pd.notna(r.lost_kwh) and r.lost_kwh else ""
        who = r.device_id if isinstance(r.device_id, str) and r.device_id else "site"
        echo(f"  #{r.flag_id} {who}: {r.kind} ({r.severity}) "
             f"{start} .. {end_}{lost}")
    if len(fl) > 15:
        echo(f"  ... and {len(fl) - 15} more (dashboard or `heliaudit results`)")
    echo("  " + FIELD_CAUTION)


def _rate(row) -> str:
    if row is None or pd.isna(row.rate_pct_per_yr):
        return "-"
    return f"{row.rate_pct_per_yr:+.2f} [{row.ci_low:+.2f}, {row.ci_high:+.2f}]"


def _print_degradation(engine, site_id, echo) -> None:
    deg = degradation_results(engine, site_id)
    echo("")
    if deg.empty:
        echo("Degradation: not computed yet (`heliaudit compute`)")
        return
    by = {(r.device_id, r.method): r for r in deg.itertuples()}
    conf = deg.loc[deg["method"] == "sensor_year_pairs", "confidence"].dropna()
    conf_txt = f"{100 * conf.iloc[0]:.0f} %" if len(conf) else ""
    echo(f"Degradation [%/yr, {conf_txt} interval], negative = loss: the recommended rate "
         "(chosen by the evidence, reasons below), year-on-year (Jordan et al. 2018), clear-sky year-on-year (independent of the POA sensor), within stable "
         "segments (steps removed); warranty screening against the configured terms")
    echo(f"{'device':<10} {'recommended':<24} {'year-on-year':<24} {'clear-sky':<24} "
         f"{'within segments':<24} warranty")
    for dev in sorted(deg["device_id"].unique(), key=lambda d: (d != "(site)", d)):
        yoy = by.get((dev, "sensor_year_pairs"))
        rec = by.get((dev, "recommended")) or yoy  # stored before #13: no recommended row
        if rec is not None and pd.isna(rec.rate_pct_per_yr):
            echo(f"{dev:<10} not computed: {rec.reason}")
            continue
        rdet = (rec.details or {}) if rec is not None and rec.method == "recommended" else {}
        summ = by.get((dev, "overview"))
        det = summ.details if summ is not None else {}
        w = det.get("warranty") or {}
        verdict = ("exceeds" if w.get("exceeds") else "not shown") if "exceeds" in w else "-"
        echo(f"{dev:<10} {_rate(rec):<24} {_rate(yoy):<24} "
             f"{_rate(by.get((dev, 'modelled_sky_year_pairs'))):<24} "
             f"{_rate(by.get((dev, 'sensor_year_pairs_between_shifts'))):<24} {verdict}")
        if rdet.get("chosen_method"):
            echo(f"{'':<10}   recommended = {rdet['chosen_method']}: "
                 + "; ".join(rdet.get("reasons") or []))
        for cav in rdet.get("caveats") or []:
            if cav.get("kind") != "level_shift":  # steps are listed below
                echo(f"{'':<10}   {cav.get('kind')} ({cav.get('method')}): {cav.get('text')}")
        for cp in det.get("change_points", []):
            if cp.get("kind") == "drop":
                echo(f"{'':<10}   step {cp['day']} {cp['size_pct']:+.1f} %: a failure (string, "
                     "module, inverter), not degradation: inspect the equipment")
        for warn in (det.get("comparison") or {}).get("warnings", []):
            echo(f"{'':<10}   {warn}")
    echo("  " + WARRANTY_CAUTION)


@click.command("check")
@click.option("--site", "site_id", required=True, metavar="ID", help="The site to check.")
@click.option("--week-ending", type=click.DateTime(["%Y-%m-%d"]), default=None,
              help="Last day of the week to check (default: the last day with data).")
@click.pass_context
def check(ctx: click.Context, site_id: str, week_ending) -> None:
    """Print the weekly check of a site: per inverter, the week's energy, final yield,
    temperature-corrected PR against its own trailing 8 weeks and against its peers,
    availability; the week's flags with lost energy; degradation rates.

    \b
    Example:
        heliaudit check --site quillpond
        heliaudit check --site quillpond --week-ending 2025-03-16
    """
    engine = engine_from_ctx(ctx)
    print_check(engine, site_id, week_ending.date() if week_ending else None)


COMMANDS = [check]
