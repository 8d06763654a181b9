"""``heliaudit check``: the weekly check of one site, in the terminal.

The same figures as the dashboard's weekly page (:mod:`analytics.weekly` over
``db.queries.period_sums``), as plain text that can go into an e-mail or a ticket, in the
order a reader needs them: alarms (new and still open alike), then warnings, the week's
energy against the expected energy, each inverter against its own trailing weeks and its
peers on the same type of irradiance sensor, and the recommended degradation rate of each
inverter with its caveats. Lost energy is the week's share of each flag's lost energy.
"""

from __future__ import annotations

import datetime as dt
import math
import tomllib

import click
import pandas as pd
import sqlalchemy as sa

from analytics.daily import standard_utc_offset_h
from analytics.labels import (
    CAVEAT_LABELS,
    FIELD_KINDS,
    SEVERITY_ORDER,
    codes_in_words,
    instrument_label,
    kind_label,
    method_label,
)
from analytics.reporting import recommended_rate
from analytics.weekly import week_share_of_lost_energy, weekly_comparison
from db import queries
from db.degradation import degradation_results
from db.registry import SiteNotFoundError, site_row
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


def _economics(engine, site_id: str) -> dict:
    try:
        e = tomllib.loads(queries.site_config_toml(engine, site_id) or "").get("economics")
    except tomllib.TOMLDecodeError:
        return {}
    if not e or not e.get("tariff_per_kwh"):
        return {}
    return {"currency": str(e.get("currency", "")), "tariff_per_kwh": float(e["tariff_per_kwh"])}


def _money(kwh: float, econ: dict) -> str:
    if not econ or kwh is None or kwh != kwh:
        return ""
    return f" ({kwh * econ['tariff_per_kwh']:,.0f} {econ['currency']})".replace(" )", ")")


def _instruments(engine, site_id: str) -> pd.DataFrame:
    inv = queries.inverters(engine, site_id)
    dev = queries.devices(engine, site_id)
    kind = dict(zip(dev["device_id"], dev["instrument"], strict=True))
    inv["instrument"] = [kind.get(s) or "unknown" for s in inv["poa_sensor_id"]]
    return inv


def print_check(engine: sa.Engine, site_id: str, week_end: dt.date | None = None,
                echo=click.echo) -> pd.DataFrame:
    """Print the weekly check of ``site_id`` for the 7 days ending ``week_end`` (default: the
    last day with data); return the per-inverter table."""
    try:
        site = site_row(engine, site_id)
    except SiteNotFoundError as exc:
        raise click.ClickException(str(exc).strip("'\"")) from None
    first, last = queries.daily_span(engine, site_id)
    if last is None:
        raise click.ClickException(f"{site_id}: no daily results yet; run `heliaudit compute "
                                   f"--site {site_id}`")
    end = week_end or last
    if end > last or end < first:
        raise click.ClickException(
            f"{site_id}: the daily results cover {first} .. {last}; --week-ending {end} is "
            f"{'after' if end > last else 'before'} them. Choose a day from {first} to {last}.")
    w0 = end - dt.timedelta(days=6)
    t0 = w0 - dt.timedelta(days=7 * TRAILING_WEEKS)
    invs = _instruments(engine, site_id)
    table = weekly_comparison(
        queries.period_sums(engine, site_id, w0, end),
        queries.period_sums(engine, site_id, t0, w0 - dt.timedelta(days=1)), invs)
    econ = _economics(engine, site_id)
    short = " (part week: the data start inside it)" if w0 < first else ""
    echo(f"Weekly check: {site_id} ({site['name']}), {w0} .. {end}{short} (local standard "
         f"time; data {first} .. {last})")
    fl = _print_flags(engine, site_id, site, w0, end, last, econ, echo)
    _print_energy(engine, site_id, w0, end, invs, fl, econ, echo)
    echo("")
    echo("Inverters: PR_STC against the own trailing 8 weeks and against the peers (same peer "
         "group, same type of POA sensor)")
    echo(f"{'inverter':<10} {'sensor':<15} {'energy':>9} {'Yf':>6} {'PR_STC':>7} {'vs own':>7} "
         f"{'vs peers':>8} {'avail E':>8}")
    echo(f"{'':<10} {'':<15} {'[kWh]':>9} {'[h]':>6} {'':>7} {'8 wk [%]':>7} {'[%]':>8} "
         f"{'[%]':>8}")
    for r in table.sort_values("d_peers_pct", na_position="last").itertuples():
        mark = "  <- below peers" if r.below_peers else ""
        echo(f"{r.device_id:<10} {instrument_label(r.instrument):<15} "
             f"{_f(r.e_ac_kwh, ',.0f'):>9} {_f(r.yf_h, '.2f'):>6} "
             f"{_f(r.pr_stc, '.3f'):>7} {_f(r.d_trailing_pct, '+.1f'):>7} "
             f"{_f(r.d_peers_pct, '+.1f'):>8} {_f(100 * r.avail_energy, '.1f'):>8}{mark}")
    _print_sources(engine, site_id, w0, end, echo)
    _print_degradation(engine, site_id, echo)
    return table


def _print_sources(engine, site_id, w0, end, echo) -> None:
    """Where each PR's irradiance and cell temperature came from this week (#11), where it
    is not the plain case (a POA sensor in the array's plane, a back-of-module sensor)."""
    from analytics.labels import MEASURED_SOURCES, source_label

    d = queries.daily_rows(engine, site_id, w0, end,
                           columns=("irradiance_basis", "t_cell_basis"))
    lines = []
    for col in ("irradiance_basis", "t_cell_basis"):
        if col not in d:
            continue
        for code, g in d.dropna(subset=[col]).groupby(col, sort=True):
            if code in MEASURED_SOURCES:
                continue
            what = source_label(code)
            devs = ", ".join(sorted(g["device_id"].unique()))
            lines.append(f"  {devs}: {'irradiance' if col == 'irradiance_basis' else 'cell temperature'}"
                         f" {what}")
    if lines:
        echo("Sources that are modelled rather than measured in the array's plane (a "
             "transposed PR carries a seasonal error of a few per cent; compare like with like):")
        for line in lines:
            echo(line)


def _print_energy(engine, site_id, w0, end, invs, fl, econ, echo) -> None:
    d = queries.daily_rows(engine, site_id, w0, end,
                           columns=("e_ac_kwh", "e_exp_kwh", "h_poa_kwhm2", "e_ac_pr_kwh",
                                    "e_ref_stc_kwh", "day_valid"))
    d = d.merge(invs[["device_id", "instrument", "poa_sensor_id"]], on="device_id", how="left")
    e_ac, e_exp = float(d["e_ac_kwh"].sum()), float(d["e_exp_kwh"].sum())
    echo("")
    ratio = f", {100 * (e_ac / e_exp - 1):+.1f} % against expected" if e_exp > 0 else ""
    echo(f"Energy: {e_ac / 1000:,.1f} MWh measured, {e_exp / 1000:,.1f} MWh expected from the "
         f"measured irradiance (clean-plant model){ratio}")
    lost = float(fl["lost_week_kwh"].fillna(0).sum()) if not fl.empty else 0.0
    echo(f"Lost energy in flags this week: {lost:,.0f} kWh{_money(lost, econ)}"
         + ("" if econ else " (no tariff in the site configuration's [economics])"))
    for inst, g in d.groupby("instrument", sort=True):
        v = g[g["day_valid"]]
        pr = (v["e_ac_pr_kwh"].sum() / v["e_ref_stc_kwh"].sum()
              if not v.empty and v["e_ref_stc_kwh"].sum() > 0 else float("nan"))
        h = g.groupby("device_id")["h_poa_kwhm2"].sum(min_count=1).median()
        sensors = ", ".join(sorted(g["poa_sensor_id"].dropna().unique()))
        echo(f"  {instrument_label(inst)} ({sensors}): insolation {_f(h, ',.1f')} kWh/m², "
             f"PR_STC {_f(pr, '.3f')} over {g['device_id'].nunique()} inverters")
    if d["instrument"].nunique() > 1:
        echo("  PRs are given per sensor type: a reference cell and a pyranometer report "
             "irradiance a few per cent apart, so PRs across types are not compared.")


def _print_flags(engine, site_id, site, w0, end, last, econ, echo) -> pd.DataFrame:
    off = _std_offset_s(site["timezone"])
    a = int(pd.Timestamp(w0).timestamp()) - off
    b = int(pd.Timestamp(end + dt.timedelta(days=1)).timestamp()) - off
    fl = queries.flags_overlapping(engine, site_id, a, b)
    echo("")
    if fl.empty:
        echo("Flags in the week: none")
        fl["lost_week_kwh"] = pd.Series(dtype=float)
        return fl
    lo = (min(int(fl["start_s"].min()), a) + off) // 86400
    hi = (max(int(fl["end_s"].max()), b) + off) // 86400
    exp = queries.daily_rows(engine, site_id, dt.date(1970, 1, 1) + dt.timedelta(days=lo),
                             dt.date(1970, 1, 1) + dt.timedelta(days=hi),
                             columns=("e_exp_kwh",))
    fl["lost_week_kwh"] = week_share_of_lost_energy(fl, exp, a, b, std_offset_s=off).to_numpy()
    data_end = (int(pd.Timestamp(last + dt.timedelta(days=1)).timestamp()) - off)
    fl["ongoing"] = fl["end_s"] >= data_end - 7200
    fl["rank"] = fl["severity"].map(SEVERITY_ORDER).fillna(3)
    fl["new"] = fl["start_s"] >= a
    fl = fl.sort_values(["rank", "new", "lost_week_kwh"], ascending=[True, False, False],
                        na_position="last")
    serious = fl[fl["severity"] != "info"]
    n_al = int((fl["severity"] == "alarm").sum())
    echo(f"Alarms ({n_al}) and warnings ({len(serious) - n_al}) in the week, new and still "
         "open alike; lost energy is this week's share:")
    if serious.empty:
        echo("  none")
    for r in serious.head(20).itertuples():
        start = pd.Timestamp(r.start_s + off, unit="s").strftime("%Y-%m-%d %H:%M")
        if r.ongoing:
            span = f"since {start}, still open"
        else:
            span = f"{start} .. {pd.Timestamp(r.end_s + off, unit='s'):%Y-%m-%d %H:%M}"
        status = "new" if r.new else "open before the week"
        lost = (f", {r.lost_week_kwh:,.0f} kWh lost this week{_money(r.lost_week_kwh, econ)}"
                if pd.notna(r.lost_week_kwh) and r.lost_week_kwh > 0 else "")
        who = r.device_id if isinstance(r.device_id, str) and r.device_id else "whole site"
        echo(f"  {r.severity.upper():<7} #{r.flag_id} {who}: {kind_label(r.kind)}, {span} "
             f"({status}){lost}")
    if len(serious) > 20:
        echo(f"  ... and {len(serious) - 20} more (dashboard, or `heliaudit results`)")
    info = fl[fl["severity"] == "info"]
    if not info.empty:
        kinds = info["kind"].map(kind_label).value_counts()
        echo("  Info only: " + ", ".join(f"{n} × {k}" for k, n in kinds.items()))
    if fl["kind"].isin(FIELD_KINDS).any() and not serious.empty:
        echo("  " + FIELD_CAUTION)
    return fl


def _rate_text(rec: dict) -> str:
    if rec is None or rec.get("rate_pct_per_yr") is None:
        return "-"
    conf = rec.get("confidence")
    ci = (f" [{rec['ci_low']:+.2f}, {rec['ci_high']:+.2f}]"
          if rec.get("ci_low") is not None and rec.get("ci_high") is not None else "")
    c = f" ({100 * conf:.0f} % interval)" if conf else ""
    return f"{rec['rate_pct_per_yr']:+.2f}{ci} %/yr{c}"


def _print_degradation(engine, site_id, echo) -> None:
    deg = degradation_results(engine, site_id)
    echo("")
    if deg.empty:
        echo(f"Degradation: not computed yet (`heliaudit compute --site {site_id}`)")
        return
    echo("Degradation, recommended rate per device (negative = loss), its method, why it was "
         "chosen and its caveats:")
    fallback_said = False
    for dev in sorted(deg["device_id"].unique(), key=lambda d: (d != "(site)", d)):
        rec = recommended_rate(deg, dev)
        if rec is not None and not rec.get("stored") and not fallback_said:
            echo("  " + " ".join(rec["reasons"]))
            fallback_said = True
        name = "site" if dev == "(site)" else dev
        if rec is None or rec.get("rate_pct_per_yr") is None:
            why = (rec or {}).get("reason") or "no rate"
            why = codes_in_words(why)
            if len(why) > 200 and "; '" in why:  # one refusal per method: the first says why
                why = (why.split("; '")[0] + "; … every method's reason: `heliaudit results "
                       f"--site {site_id}`)")
            echo(f"{name:<10} not computed: {why}")
            continue
        echo(f"{name:<10} {_rate_text(rec)}  {method_label(rec['method'])}")
        if rec.get("stored") and rec.get("reasons"):
            echo(f"{'':<10}   why: " + "; ".join(rec["reasons"]))
        for c in rec.get("caveats", []):
            echo(f"{'':<10}   ! {CAVEAT_LABELS.get(c.get('kind'), c.get('kind'))}: "
                 f"{c.get('text', '')}")
    echo("  " + WARRANTY_CAUTION)


@click.command("check")
@click.option("--site", "site_id", required=True, metavar="ID", help="The site to check.")
@click.option("--week-ending", type=click.DateTime(["%Y-%m-%d"]), default=None,
              help="Last day of the week to check (default: the last day with data).")
@click.pass_context
def check(ctx: click.Context, site_id: str, week_ending) -> None:
    """Print the weekly check of a site: alarms and warnings first (the week's share of
    their lost energy), the week's energy against the expected energy, per inverter the
    temperature-corrected PR against its own trailing 8 weeks and its peers on the same
    sensor type, availability, and the recommended degradation rate with its caveats.

    \b
    Example:
        heliaudit check --site quillpond
        heliaudit check --site quillpond --week-ending 2025-03-16
    """
    engine = engine_from_ctx(ctx)
    print_check(engine, site_id, week_ending.date() if week_ending else None)


COMMANDS = [check]
