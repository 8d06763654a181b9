"""Degradation job (issue #7): daily table -> every method per inverter and site -> store.

``run_degradation(engine, site_id)`` reads the stored daily performance table (and, for the
clear-sky cross-check, the interval power), computes per inverter and for the site
(``device_id = "(site)"``):

* ``sensor_year_pairs`` — year-on-year (Jordan et al. 2018) with a moving-block bootstrap interval;
* ``sensor_monthly_robust_line`` — Huber RLM of the monthly insolation-weighted index with annual harmonics, HAC
  interval;
* ``sensor_monthly_trend_line`` — RLM of the robust STL trend (Cleveland et al. 1990);
* ``peer_ratio_year_pairs`` — year-on-year rate of the index divided by the peer median (inverters
  only; the rate *relative to the fleet*);
* ``modelled_sky_year_pairs`` — year-on-year rate of the clear-sky index on clear periods found without
  the POA sensor (analytics.clearsky);
* ``sensor_drift_check`` — year-on-year rate of sensor-based / clear-sky index on clear days:
  the POA sensor's drift against the clear-sky model (a paired, tight check);
* ``sensor_year_pairs_between_shifts`` — year-on-year without pairs that span a detected level shift
  (drops and rises that persist in year-on-year pairs; upward steps after a soiling ramp,
  i.e. cleanings, are not breaks), from segments whose pairs cover ≥ 9 calendar months;
* ``overview`` — the headline rate (``sensor_year_pairs``) with the data report, change points and segments,
  the method-agreement verdict and warnings, and the warranty screening in ``details``.

The per-series methods run in a pool of forked worker processes (:func:`methods_many`;
``workers``, ``HELIAUDIT_WORKERS``); each series seeds its own generators, so results do not
depend on the number of workers. The clear-sky method reads only the AC power and module
temperature channels (:func:`db.degradation.clearsky_inputs`).

One ``computation`` row (kind ``degradation``) records the software version and parameters;
the site's previous rows are replaced in one transaction.

System-level field data are screening evidence; a warranty claim follows its contract and the
test procedure it names (see analytics.warranty.DISCLAIMER).
"""

from __future__ import annotations

import datetime as dt
import multiprocessing as mp
import os
import tomllib
import warnings
from collections.abc import Callable
from concurrent.futures import ProcessPoolExecutor

import numpy as np
import pandas as pd

import heliaudit
from analytics import changepoint as acp
from analytics import clearsky as acs
from analytics import degradation as adeg
from analytics import warranty as awar
from analytics.daily import standard_utc_offset_h
from analytics.reporting import shortfall_from_rate
from db import queries
from db.computations import begin_computation
from db.daily import daily_table
from db.degradation import (
    SITE_DEVICE,
    clearsky_inputs,
    irradiance_channels,
    write_degradation,
)
from db.jsontext import clean
from db.registry import SiteNotFoundError, site_row  # noqa: F401 (re-exported)

Progress = Callable[[int, int], None]

#: Standard deviation σ_a [%] of the yearly level error shared by all days of a year (that
#: year's weather against the expected-power model), assumed for records with fewer than two
#: year groups of pairs (under three years), where it cannot be measured
#: (analytics.degradation.year_component). Measured on the 15 drift-free validation fleets of
#: 3–4 years (tests/validation/scorecard_degradation.py, suite seeds): the spread of each
#: fleet's mean per-year pair medians gives σ_a = 0.000–0.066 %, root mean square 0.028 %;
#: 0.03 is that figure rounded up (README "Degradation validation").
MIN_YEAR_SD_PCT = 0.03

#: Parameters of a run (recorded in the computation row). Sources in analytics docstrings.
DEFAULTS: dict = {
    "confidence": 0.95,
    "n_resamples": 1000,
    "seed": 0,
    "stabilisation_days": 180,
    "min_years": 2.0,
    "warn_years": 3.0,
    "lag_days": 365,
    "reference": "start",  # pair rates in % of the initial level: linear warranties (#13)
    "min_peers": 3,
    "rlm_aggregate": "monthly",
    "rlm_harmonics": 1,
    "stl_seasonal": 7,
    "changepoint_penalty_factor": 3.0,
    "changepoint_min_step_pct": 2.75,  # false shifts of 2.1-2.5 % on validation fleets (#13)
    "clearsky": True,
    "clearsky_transposition": "haydavies",
    "clearsky_window_days": 15,
    "site_min_inverter_fraction": 0.5,
    "sigma_extra_pct_per_yr": 0.0,
    "soiling_min_loss_pct": 2.0,  # below: soiling not material (recommended rate, issue #13)
    "soiling_draws": 1000,  # soiling-ratio draws carried into the soiling-corrected interval
    # sigma_a assumed when a record is too short to measure the shared yearly error (#13)
    "min_year_sd_pct": MIN_YEAR_SD_PCT,
}
METHODS = ("sensor_year_pairs", "sensor_monthly_robust_line", "sensor_monthly_trend_line", "peer_ratio_year_pairs", "modelled_sky_year_pairs", "sensor_drift_check",
           "sensor_year_pairs_between_shifts", "sensor_year_pairs_unsoiled", "modelled_sky_between_shifts")


def _try(method: str, fn, *args, **kwargs) -> adeg.RateResult:
    """Run one estimator; too little data or invalid input becomes a refused result."""
    if fn in (adeg.degradation_yoy, adeg.degradation_rlm, adeg.degradation_stl):
        kwargs["method"] = method  # its warnings name the method they are about
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # estimator warnings are kept in result.warnings
        try:
            res = fn(*args, **kwargs)
        except (adeg.InsufficientDataError, ValueError) as exc:
            return adeg.RateResult.refused(method, str(exc))
    res.method = method
    return res


def warranty_terms(config_toml: str | None) -> dict | None:
    """``[warranty]`` of the stored site configuration (ingest.config.Warranty fields)."""
    try:
        raw = tomllib.loads(config_toml or "").get("warranty")
    except tomllib.TOMLDecodeError:
        return None
    if not isinstance(raw, dict) or "annual_loss_pct" not in raw:
        return None
    start = raw.get("start_date")
    if isinstance(start, str):
        start = dt.date.fromisoformat(start)
    return {"start_date": start, "first_year_loss_pct": float(raw.get("first_year_loss_pct", 0.0)),
            "annual_loss_pct": float(raw["annual_loss_pct"]), "years": int(raw.get("years", 25)),
            "confidence": float(raw.get("confidence", 0.95))}


# ---------------------------------------------------------------- inputs


def _daily_by_device(daily: pd.DataFrame) -> dict[str, pd.DataFrame]:
    out = {}
    for dev, d in daily.groupby("device_id"):
        d = d.set_index(pd.DatetimeIndex(pd.to_datetime(d["day"]))).sort_index()
        out[str(dev)] = adeg.trend_index(d)
    return out


def _site_daily(usable: dict[str, pd.Series], by_dev: dict[str, pd.DataFrame],
                min_fraction: float) -> tuple[pd.Series, pd.Series]:
    """Site index per day: Σ e_ac_valid / Σ e_exp_valid over inverters with a usable day,
    on days where at least ``min_fraction`` of the inverters have one (common practice)."""
    num, den, cnt = [], [], []
    for dev, s in usable.items():
        d = by_dev[dev].reindex(s.index)
        num.append(d["e_ac_valid_kwh"])
        den.append(d["e_exp_valid_kwh"])
        cnt.append(pd.Series(1, s.index))
    if not num:
        return pd.Series(dtype=float), pd.Series(dtype=float)
    n = pd.concat(cnt, axis=1, sort=True).sum(axis=1)
    e_ac = pd.concat(num, axis=1, sort=True).sum(axis=1, min_count=1)
    e_exp = pd.concat(den, axis=1, sort=True).sum(axis=1, min_count=1)
    ok = (n >= min_fraction * len(usable)) & (e_exp > 0)
    return (e_ac / e_exp)[ok].rename("pi"), e_exp[ok]


def _clearsky_daily(engine, site: dict, invs: pd.DataFrame, offset_h: float, p: dict
                    ) -> tuple[dict[str, pd.Series], str, str | None]:
    """Clear-day index per inverter; returns (series by id, how clear periods were found,
    reason when not computed).

    Every device is modelled on its own plane (#11): an inverter's clear-sky POA is the
    capacity-weighted one of its arrays (fixed planes and single-axis trackers,
    :func:`heliaudit.site_irradiance.clearsky_references`), a POA sensor's that of its
    declared plane and a horizontal sensor's the clear-sky GHI, so a sensor in another plane
    than the site default is not read as faulty. Each row carries its own recorded interval:
    the sun is taken at its midpoint, clear periods are tested per interval length and the
    index weighs each reading by its own τ."""
    from db.timeseries import (
        fill_unknown_intervals,
        instant_channels,
        instant_to_means,
        overlap_mean,
        read_channel,
    )
    from heliaudit.site_irradiance import clearsky_references

    # only what the method needs: one power channel per inverter and the module temperature
    power, t_mod, iv_s = clearsky_inputs(engine, site["site_id"], invs, with_interval=True)
    if power.empty or not power.notna().to_numpy().any():
        return {}, "", "no interval power readings"
    lo_s, hi_s = acs.DETECT_INTERVAL_S
    if not ((iv_s >= lo_s) & (iv_s <= hi_s)).any():
        return {}, "", (f"no reading with an interval of {lo_s / 60:g}-{hi_s / 60:g} min; "
                        "clear-sky detection (Jordan & Hansen 2023 thresholds) needs such data")
    p0 = {dev: float(r) for dev, r in zip(invs["device_id"], invs["p_dc_kwp"], strict=True)
          if dev in power}
    sensors = irradiance_channels(engine, site["site_id"])
    _geo, inv_cs, sensor_cs = clearsky_references(
        site, power.index, iv_s / 3600.0, list(power.columns),
        [(sid, qty) for sid, qty, _ch in sensors], model=p["clearsky_transposition"])
    grid_s = power.index.as_unit("s").asi8
    # clear periods from every irradiance sensor, each checked against the others (#13),
    # each against the clear sky of its own plane (#11)
    readings, refs = {}, {}
    with engine.connect() as conn:
        inst = set(instant_channels(conn, site["site_id"]))
    for sid, _qty, ch in sensors:
        with engine.connect() as conn:
            ts, val, iv = read_channel(conn, ch, with_interval=True)
        if not np.isfinite(val).any():
            continue
        iv = fill_unknown_intervals(ts, iv)
        if ch in inst:  # point samples -> interval means (trapezoidal rule)
            ts, val, iv = instant_to_means(ts, val, iv)
        # the sensor's readings averaged into the power rows by time overlap, each reading
        # over its own recorded interval (db.timeseries.overlap_mean)
        on_grid = overlap_mean(grid_s, iv_s, ts, iv, val)
        readings[sid] = pd.Series(on_grid, power.index)
        refs[sid] = pd.Series(sensor_cs[sid], power.index)
    if readings:
        clear, info = acs.clear_periods_from_sensors(readings, refs, interval_s=iv_s)
        how = ("Reno & Hansen 2016 on every irradiance sensor against the clear sky of its "
               "own plane (" + ", ".join(
                   f"{sid}: {v['days_faulty']} days judged faulty" for sid, v in sorted(info.items()))
               + "); clear where every healthy sensor agrees")
    else:
        on = power.notna()
        rated_on = on.mul(pd.Series(p0), axis=1).sum(axis=1)
        fleet = 1000 * power.sum(axis=1, min_count=1) / rated_on.where(rated_on > 0)
        # the fleet's clear-sky reference: Σ P0_i G_cs,i / Σ P0_i over inverters reporting
        g_on = pd.DataFrame(inv_cs, index=power.index).where(on).mul(pd.Series(p0), axis=1)
        ref = g_on.sum(axis=1) / rated_on.where(rated_on > 0)
        clear = acs.detect_clear_periods(fleet, ref.fillna(0.0), interval_s=iv_s)
        how = ("Reno & Hansen 2016 on the fleet's AC power shape against the capacity-weighted "
               "clear-sky POA of the inverters' own planes")
    out = {}
    tau_h = pd.Series(iv_s / 3600.0, power.index)
    for _, inv in invs.iterrows():
        dev = inv["device_id"]
        if dev not in power:
            continue
        g_cs = pd.Series(inv_cs[dev], power.index)
        d_t = 3.0  # Sandia ΔT at 1000 W/m² (King et al. 2004, open rack)
        t_cell = t_mod[dev].astype(float) + d_t * g_cs / 1000.0
        daily = acs.clearsky_daily_pi(
            power[dev].astype(float), g_cs, clear, p_dc_kwp=float(inv["p_dc_kwp"]),
            gamma_pmp_per_c=float(inv["gamma_pmp_per_c"]), eta_inv_nom=float(inv["eta_inv_nom"]),
            p_ac_max_kw=float(inv["p_ac_max_kw"]), interval_h=tau_h,
            t_cell_c=t_cell if t_cell.notna().any() else None, utc_offset_h=offset_h)
        out[dev] = daily["pi_clearsky"]
    return out, how, None


def _name_stabilisation(res: dict, report: dict, days: int) -> None:
    """Append the end of the skipped stabilisation period to each refusal for a short span
    (``check_span``'s "usable data span"), in place."""
    until = report.get("stabilisation_until")
    if not until:
        return
    for r in res.values():
        if r.reason and "usable data span" in r.reason and "stabilisation" not in r.reason:
            r.reason += (f" (the days before {until} are skipped: the first "
                         f"{days} days after commissioning, "
                         "light-induced and metastable effects)")


# ---------------------------------------------------------------- per series


def _methods_for(s: pd.Series, weights: pd.Series | None, *, ratio: pd.Series | None,
                 clear_pi: pd.Series | None, clear_reason: str | None, p: dict,
                 rng_key: int, insolation: pd.Series | None = None,
                 energy_kwh: float | None = None) -> tuple[dict[str, adeg.RateResult], dict]:
    conf, seed = p["confidence"], [p["seed"], rng_key]
    yoy_kw = dict(confidence=conf, n_resamples=p["n_resamples"], lag_days=p["lag_days"],
                  reference=p["reference"], min_years=p["min_years"], warn_years=p["warn_years"])
    # absolute rates: a short record's interval carries the assumed between-year error (the
    # ratios below, peer-relative and the drift check, cancel what the fleet's weather shares)
    abs_kw = dict(yoy_kw, min_year_sd_pct_per_yr=p["min_year_sd_pct"])
    res = {
        "sensor_year_pairs": _try("sensor_year_pairs", adeg.degradation_yoy, s, rng=np.random.default_rng(seed + [1]), **abs_kw),
        "sensor_monthly_robust_line": _try("sensor_monthly_robust_line", adeg.degradation_rlm, s, weights, aggregate=p["rlm_aggregate"],
                    harmonics=p["rlm_harmonics"], confidence=conf, min_years=p["min_years"],
                    warn_years=p["warn_years"]),
        "sensor_monthly_trend_line": _try("sensor_monthly_trend_line", adeg.degradation_stl, s, weights, confidence=conf,
                    seasonal=p["stl_seasonal"], min_years=p["min_years"], warn_years=p["warn_years"]),
    }
    if ratio is not None:
        res["peer_ratio_year_pairs"] = _try("peer_ratio_year_pairs", adeg.degradation_yoy, ratio.dropna(),
                                    rng=np.random.default_rng(seed + [2]), **yoy_kw)
        res["peer_ratio_year_pairs"].details["relative_to"] = "median of the peer group (same day)"
    dense = None
    if clear_pi is not None:
        clear_pi = clear_pi.where((clear_pi >= 0.3) & (clear_pi <= 1.3))  # plausibility window (common practice)
        dense = acs.densify_clear_days(clear_pi, window_days=p["clearsky_window_days"])
        res["modelled_sky_year_pairs"] = _try("modelled_sky_year_pairs", adeg.degradation_yoy, dense,
                                   rng=np.random.default_rng(seed + [3]), **abs_kw)
        res["modelled_sky_year_pairs"].details["n_clear_days"] = int(clear_pi.notna().sum())
        res["sensor_drift_check"] = _try("sensor_drift_check", adeg.sensor_clearsky_drift, s,
                                         clear_pi, window_days=p["clearsky_window_days"],
                                         rng=np.random.default_rng(seed + [5]), **yoy_kw)
    else:
        res["modelled_sky_year_pairs"] = adeg.RateResult.refused("modelled_sky_year_pairs", clear_reason or "not computed")
        res["sensor_drift_check"] = adeg.RateResult.refused("sensor_drift_check",
                                                            clear_reason or "not computed")
    res[adeg.SOILING_CORRECTED], soil = _soiling_corrected(
        s, weights, p, seed + [6], abs_kw, insolation=insolation, energy_kwh=energy_kwh)
    base = ratio.dropna() if ratio is not None and ratio.notna().sum() > 400 else s
    cps = acp.detect_level_shifts(base, penalty_factor=p["changepoint_penalty_factor"],
                                  min_step_pct=p["changepoint_min_step_pct"],
                                  deseason=ratio is None or base is s)
    cps["series"] = "peer-relative index" if base is not s else "de-seasonalised index"
    # cleanings (recoveries) repeat with the seasons and largely cancel in year-on-year pairs
    breaks = [c["day"] for c in cps["change_points"] if c["kind"] != "recovery"]
    if breaks:
        res["sensor_year_pairs_between_shifts"] = _try("sensor_year_pairs_between_shifts", adeg.degradation_yoy, s,
                                          breaks=breaks, rng=np.random.default_rng(seed + [4]),
                                          **abs_kw)
        if res["modelled_sky_year_pairs"].rate_pct_per_yr is not None:
            res[adeg.SKY_BETWEEN_SHIFTS] = _try(
                adeg.SKY_BETWEEN_SHIFTS, adeg.degradation_yoy, dense, breaks=breaks,
                rng=np.random.default_rng(seed + [7]), **abs_kw)
        else:
            res[adeg.SKY_BETWEEN_SHIFTS] = adeg.RateResult.refused(
                adeg.SKY_BETWEEN_SHIFTS, "no clear-sky index: " + str(
                    res["modelled_sky_year_pairs"].reason))
    else:
        res[adeg.SKY_BETWEEN_SHIFTS] = adeg.RateResult.refused(
            adeg.SKY_BETWEEN_SHIFTS, "no level shift (drop or rise) found: the whole-period "
                                     "clear-sky rate applies")
        res["sensor_year_pairs_between_shifts"] = adeg.RateResult.refused(
            "sensor_year_pairs_between_shifts", "no level shift (drop or rise) found: the whole-period year-on-year "
                                   "rate applies")
    cps["soiling"] = soil
    return res, cps


def _soiling_corrected(s: pd.Series, weights: pd.Series | None, p: dict, seed: list,
                       yoy_kw: dict, insolation: pd.Series | None = None,
                       energy_kwh: float | None = None) -> tuple[adeg.RateResult, dict]:
    """Year-on-year rate of the index divided by its soiling ratio, and the soiling loss.

    The soiling ratio follows Deceglie, Micheli & Muller (2018) as analytics.soiling builds it
    (cleanings from upward steps of the index, Theil-Sen rate per dry interval, kept only when
    its 95 % interval lies below zero, so noise is not read as soiling). Two losses:
    ``loss_pct`` = 1 - the ``weights``-weighted mean SR of the usable days (the trend index's
    weights, expected energy outside the clipping zone: the figure the recommended rate's
    materiality rule reads, unchanged since it was validated), and ``loss_insolation_pct``
    with the daily POA insolation as weights, the insolation-weighted soiling ratio of
    Deceglie et al. (2018) and the soiling energy loss reported, with its Monte-Carlo
    interval ``loss_low_pct`` / ``loss_high_pct``. (The trend weights under-weight clear
    summer middays; on the two arid validation fleets the mean inverter loss read +0.16 and
    +0.00 pp against the truth with them, −0.01 and −0.14 pp with insolation, the truth's own
    weighting.) ``energy_kwh``
    (the inverter's expected energy on those days) is kept as ``weight`` for the fleet figure.
    """
    from analytics import soiling as asoil

    m = adeg.SOILING_CORRECTED
    try:
        full = s.reindex(pd.date_range(s.index[0], s.index[-1], freq="D"))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ev = asoil.detect_cleanings(full)
            # slopes on 3-day medians: a ninth of the Theil-Sen pairs (O(n^2)) for rates of
            # weeks-long dry intervals; an interval needs 4 such points (12 days)
            thin = full.rolling(3, min_periods=1).median().iloc[2::3]
            iv = asoil.soiling_intervals(thin, list(ev.index), min_days=4, step_days=3)
            if len(iv):  # the intervals tile the daily index, first day to last
                iv.loc[iv.index[0], "start"] = full.index[0]
                iv.loc[iv.index[-1], "end"] = full.index[-1]
        if len(iv):  # only dry intervals whose Theil-Sen slope is significantly negative
            insignificant = iv["rate_high"] >= 0
            iv.loc[insignificant, ["soiling_rate_per_day", "rate_low", "rate_high"]] = 0.0
            iv.loc[insignificant, "soiled"] = False
        sr = asoil.soiling_ratio_series(full.index, iv).reindex(s.index)
    except (ValueError, KeyError, IndexError) as exc:
        return adeg.RateResult.refused(m, f"soiling ratio not computed: {exc}"), {}
    w = (weights.reindex(s.index).fillna(0.0) if weights is not None
         else pd.Series(1.0, s.index))
    loss = float(100 * (1 - (sr * w).sum() / w.sum())) if w.sum() > 0 else None
    info = {"loss_pct": None if loss is None else round(loss, 3),
            "n_cleanings": int(len(ev)), "n_soiled_intervals": int(iv["soiled"].sum())
            if len(iv) else 0,
            "weight": float(energy_kwh) if energy_kwh is not None else float(w.sum())}
    h = insolation.reindex(s.index).fillna(0.0) if insolation is not None else w
    loss_h = float(100 * (1 - (sr * h).sum() / h.sum())) if h.sum() > 0 else loss
    info["loss_insolation_pct"] = None if loss_h is None else round(loss_h, 3)
    sr_d = None
    if p.get("soiling_draws") and info["n_soiled_intervals"] and loss_h is not None:
        # the soiling ratio's own uncertainty: draws of each soiled interval's rate from its
        # Theil-Sen standard error (analytics.soiling.soiling_ratio_draws), full recovery at
        # each cleaning as in the point estimate
        sr_d = asoil.soiling_ratio_draws(full.index, iv, n_runs=int(p["soiling_draws"]),
                                         rng=np.random.default_rng(seed + [1]))
        pos_s = full.index.get_indexer(s.index)
        ld = 100 * (1 - (sr_d[:, pos_s] @ h.to_numpy()) / h.sum())
        lo, hi = np.percentile(ld, [2.5, 97.5])
        info.update(loss_low_pct=round(float(min(lo, loss_h)), 3),
                    loss_high_pct=round(float(max(hi, loss_h)), 3), _loss_draws=ld)
    if loss is None or loss < p["soiling_min_loss_pct"]:
        res = adeg.RateResult.refused(
            m, f"soiling loss {0 if loss is None else loss:.1f} % of the expected energy of the "
               "days the rate uses is below "
               f"{p['soiling_min_loss_pct']:g} %: not material, the year-on-year rate applies")
        res.details["soiling_loss_pct"] = info["loss_pct"]
        return res, info
    corrected = (s / sr.where(sr > 0.5)).dropna()
    draws = None
    if sr_d is not None:
        # the correction's uncertainty carried into the year-pairs bootstrap: the index
        # divided by each draw of its soiling ratio (analytics.degradation.degradation_yoy)
        pos = full.index.get_indexer(corrected.index)
        draws = s.reindex(corrected.index).to_numpy()[None, :] / np.maximum(sr_d[:, pos], 0.5)
    res = _try(m, adeg.degradation_yoy, corrected, rng=np.random.default_rng(seed),
               pi_draws=draws, **yoy_kw)
    res.details.update({"soiling_loss_pct": info["loss_pct"],
                        "soiling_ratio": "Deceglie et al. 2018 (analytics.soiling)"})
    return res, info


def _methods_task(task: dict) -> tuple[dict[str, adeg.RateResult], dict]:
    return _methods_for(**task)


def default_workers(n_tasks: int) -> int:
    """Worker processes for :func:`methods_many`: ``HELIAUDIT_WORKERS`` if set, else the
    usable cores (at most 2, the size of the project's machines), 1 for fewer than 4 series."""
    env = os.environ.get("HELIAUDIT_WORKERS")
    if env:
        return max(1, int(env))
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        cores = os.cpu_count() or 1
    return 1 if n_tasks < 4 else max(1, min(2, cores))


def methods_many(tasks: list[dict], *, workers: int | None = None,
                 progress: Callable[[int], None] | None = None
                 ) -> list[tuple[dict[str, adeg.RateResult], dict]]:
    """:func:`_methods_for` of every task (its keyword arguments), in task order.

    With ``workers`` > 1 the series run in a pool of forked processes. Every series draws
    its bootstrap resamples from its own generator seeded by ``(seed, rng_key, method)``,
    so results are identical for any number of workers and any scheduling.
    """
    workers = default_workers(len(tasks)) if workers is None else max(1, int(workers))
    out = []
    if workers == 1 or len(tasks) < 2 or "fork" not in mp.get_all_start_methods():
        for task in tasks:
            out.append(_methods_for(**task))
            if progress:
                progress(len(out))
        return out
    with ProcessPoolExecutor(max_workers=workers, mp_context=mp.get_context("fork")) as pool:
        for r in pool.map(_methods_task, tasks, chunksize=1):
            out.append(r)
            if progress:
                progress(len(out))
    return out


#: What the two shortfall figures of a warranty block count (results JSON, issue #15).
SHORTFALL_NOTE = ("shortfall_from_rate_kwh counts only what the measured (recommended) rate "
                  "attributes to degradation: energy below the warranted envelope of the straight "
                  "line of that rate from 100 % at the warranty start. shortfall_kwh counts every "
                  "month whose de-seasonalised index is below the envelope, including soiling dips, "
                  "outages, weather and level steps from failures: it is not evidence of "
                  "degradation.")


def _warranty_block(rate: adeg.RateResult, s: pd.Series, weights, e_ac: pd.Series,
                    terms: dict | None, commissioned, p: dict) -> dict:
    if terms is None:
        return {"reason": "no [warranty] in the site configuration"}
    if rate.rate_pct_per_yr is None:
        return {"reason": f"no measured rate: {rate.reason}"}
    test = awar.warranty_rate_test(rate.rate_pct_per_yr, rate.ci_high, rate.confidence,
                                   annual_loss_pct=terms["annual_loss_pct"],
                                   confidence=terms["confidence"],
                                   sigma_extra_pct_per_yr=p["sigma_extra_pct_per_yr"])
    chosen = (rate.details or {}).get("chosen_method") or rate.method
    start = terms["start_date"] or commissioned
    try:  # compare the envelope with the de-seasonalised index, not with seasonal dips
        m_pi = adeg.deseasonalised_monthly(s, weights, harmonics=p["rlm_harmonics"])
    except adeg.InsufficientDataError as exc:
        return {**test, "measured_method": chosen, "method": chosen, "terms": terms, "envelope": [], "shortfall_kwh": None,
                "reason_envelope": str(exc), "disclaimer": awar.DISCLAIMER}
    e = e_ac.copy()
    e.index = pd.DatetimeIndex(e.index)
    m_e = e.groupby(e.index.to_period("M")).sum()
    m_e.index = m_e.index.to_timestamp()
    env = awar.warranty_envelope(m_pi, m_e, start_date=start,
                                 first_year_loss_pct=terms["first_year_loss_pct"],
                                 annual_loss_pct=terms["annual_loss_pct"], term_years=terms["years"],
                                 rate_pct_per_yr=rate.rate_pct_per_yr)
    # the part of the shortfall the chosen rate attributes to degradation (issue #15): the
    # monthly figure also counts soiling dips, outages and weather, which are not evidence
    months = env["months"]
    from_rate = None
    if months:
        e_at = m_e.reindex(pd.DatetimeIndex([f"{m['month']}-01" for m in months])).to_numpy()
        from_rate = round(shortfall_from_rate([m["years"] for m in months], e_at,
                                              [m["warranted"] for m in months],
                                              rate.rate_pct_per_yr), 3)
    return {**test, "measured_method": chosen, "method": chosen, "terms": terms, "envelope": months,
            "shortfall_kwh": env["shortfall_kwh"], "shortfall_from_rate_kwh": from_rate,
            "shortfall_note": SHORTFALL_NOTE, "months_below": env["months_below"],
            "baseline": env.get("baseline"), "disclaimer": awar.DISCLAIMER}


def _rows(device_id: str, res: dict[str, adeg.RateResult], summary: dict) -> list[dict]:
    if "recommended" not in res:
        why = next((r.reason for r in res.values() if r.reason), "no method gave a rate")
        res = {**res, "recommended": adeg.RateResult.refused("recommended", why)}
        res["recommended"].details = {"chosen_method": None, "reasons": [], "caveats": [],
                                      "ci68_low": None, "ci68_high": None}
    rows = [{"device_id": device_id, "method": m, "rate_pct_per_yr": r.rate_pct_per_yr,
             "ci_low": r.ci_low, "ci_high": r.ci_high, "confidence": r.confidence,
             "n_points": r.n_points if r.rate_pct_per_yr is not None else None,
             "reason": r.reason, "details": {**r.details, "warnings": r.warnings}}
            for m, r in res.items()]
    head = res["recommended"] if res["recommended"].rate_pct_per_yr is not None \
        else res["sensor_year_pairs"]
    rows.append({"device_id": device_id, "method": "overview", "rate_pct_per_yr": head.rate_pct_per_yr,
                 "ci_low": head.ci_low, "ci_high": head.ci_high, "confidence": head.confidence,
                 "n_points": head.n_points if head.rate_pct_per_yr is not None else None,
                 "reason": head.reason, "details": summary})
    return rows


# ---------------------------------------------------------------- the job


def run_degradation(engine, site_id: str, progress: Progress | None = None, *,
                    workers: int | None = None, **params) -> dict:
    """Compute and store every degradation method for a site's inverters and the site.

    ``params`` override :data:`DEFAULTS`. ``workers``: processes for the per-series methods
    (default :func:`default_workers`); results do not depend on it. Returns ``{"site_id", "computation_id", "rows",
    "inverters", "refused"}``. Raises :class:`SiteNotFoundError` for an unknown site.
    """
    site = site_row(engine, site_id)
    unknown = sorted(set(params) - set(DEFAULTS))
    if unknown:
        raise ValueError(f"unknown degradation parameter(s) {', '.join(unknown)}; "
                         f"known: {', '.join(sorted(DEFAULTS))}")
    p = {**DEFAULTS, **params}
    invs = queries.inverters(engine, site_id)
    daily = daily_table(engine, site_id)
    terms = warranty_terms(site.get("config_toml"))
    offset_h = standard_utc_offset_h(site["timezone"])
    with engine.begin() as conn:
        comp_id = begin_computation(conn, site_id, "degradation",
                                    {**p, "methods": list(METHODS), "warranty": terms,
                                     "utc_standard_offset_h": offset_h},
                                    software_version=heliaudit.__version__)
    total = len(invs) + 1
    if progress:
        progress(0, total)
    by_dev = _daily_by_device(daily)
    usable, reports, weights, insol, energy = {}, {}, {}, {}, {}
    for _, inv in invs.iterrows():
        dev = inv["device_id"]
        d = by_dev.get(dev)
        if d is None or d.empty:
            reports[dev] = {"n_days_input": 0, "n_days_used": 0}
            continue
        # commissioning date unknown (#11): no stabilisation period is excluded
        comm = inv["commissioned"] if pd.notna(inv["commissioned"]) else None
        s, rep = adeg.usable_daily_pi(d["pi"], d["day_valid"], commissioned=comm,
                                      stabilisation_days=p["stabilisation_days"])
        usable[dev], reports[dev] = s, rep
        weights[dev] = d["e_exp_valid_kwh"].reindex(s.index)
        if "h_poa_kwhm2" in d:  # the soiling loss weighs days by insolation (Deceglie 2018)
            insol[dev] = d["h_poa_kwhm2"].reindex(s.index)
        if "e_exp_kwh" in d:
            energy[dev] = float(d["e_exp_kwh"].reindex(s.index).sum())
    ratios: dict[str, pd.Series] = {}
    for _group, members in invs.groupby("peer_group"):
        ids = [i for i in members["device_id"] if i in usable]
        if len(ids) >= 2:
            frame = pd.DataFrame({i: usable[i] for i in ids})
            rel = adeg.peer_relative_pi(frame, min_peers=p["min_peers"])
            ratios.update({i: rel[i] for i in ids})
    clear, how, clear_reason = {}, "", None
    if not p["clearsky"]:
        clear_reason = "clear-sky method switched off"
    elif not usable:
        clear_reason = "no usable daily data"
    else:
        try:
            clear, how, clear_reason = _clearsky_daily(engine, site, invs, offset_h, p)
        except (ImportError, ValueError, KeyError) as exc:
            clear_reason = f"clear-sky index not computed: {exc}"
    # the clear-sky index skips the same stabilisation period as the sensor-based index
    # (light-induced and metastable effects after commissioning): every method of a device
    # rests on the same days after commissioning
    for dev, rep in reports.items():
        until = rep.get("stabilisation_until")
        if until and dev in clear and clear[dev] is not None:
            x = clear[dev]
            clear[dev] = x[pd.DatetimeIndex(pd.to_datetime(x.index)) >= pd.Timestamp(until)]
    # every series' methods (the costly part) first, in a process pool; then summaries
    tasks, task_of = [], {}
    for k, (_, inv) in enumerate(invs.iterrows()):
        dev = inv["device_id"]
        if dev in usable:
            task_of[dev] = len(tasks)
            tasks.append(dict(s=usable[dev], weights=weights[dev], ratio=ratios.get(dev),
                              clear_pi=clear.get(dev),
                              clear_reason=clear_reason or "inverter has no interval power",
                              p=p, rng_key=k, insolation=insol.get(dev),
                              energy_kwh=energy.get(dev)))
    s, w = _site_daily(usable, by_dev, p["site_min_inverter_fraction"])
    if len(s):
        cl = None
        if clear:
            # the site's clear-day index follows the site index's rule: a day counts when at
            # least site_min_inverter_fraction of the inverters have one (so one inverter
            # without a commissioning date does not carry the site through the others'
            # stabilisation period alone)
            cw = pd.DataFrame(clear)
            n_clear = cw.notna().sum(axis=1)
            cl = cw.median(axis=1)[n_clear >= p["site_min_inverter_fraction"] * cw.shape[1]]
        site_h = (pd.DataFrame(insol).median(axis=1).reindex(s.index) if insol else None)
        tasks.append(dict(s=s, weights=w, ratio=None, clear_pi=cl, clear_reason=clear_reason,
                          p=p, rng_key=len(invs), insolation=site_h,
                          energy_kwh=sum(energy.values()) if energy else None))
    results = methods_many(tasks, workers=workers,
                           progress=(lambda i: progress(i, total)) if progress else None)
    # a refusal for a short span says when the skipped stabilisation period ended: two years
    # of data commissioned shortly before hold only about 1.5 usable years
    for dev, k in task_of.items():
        _name_stabilisation(results[k][0], reports[dev], p["stabilisation_days"])
    if len(s):
        firsts = [r["stabilisation_until"] for r in reports.values()
                  if r.get("stabilisation_until")]
        if firsts:
            _name_stabilisation(results[-1][0], {"stabilisation_until": min(firsts)},
                                p["stabilisation_days"])
    # the irradiance sensor's drift, judged from the drift checks of all inverters it serves
    drift_by_sensor = {}
    for sid, members in invs.groupby("poa_sensor_id")["device_id"]:
        checks = [results[task_of[d]][0].get(adeg.DRIFT_CHECK) for d in members if d in task_of]
        drift_by_sensor[sid] = {**adeg.judge_sensor_drift(checks), "sensor_id": sid}
    rows, refused = [], 0
    soil_of, loss_draws = {}, {}
    for _, inv in invs.iterrows():
        dev = inv["device_id"]
        if dev not in usable:
            res = {m: adeg.RateResult.refused(m, "no daily performance rows; run `heliaudit "
                                                 "compute` first") for m in METHODS}
            summary = {"data": reports[dev]}
        else:
            ratio = ratios.get(dev)
            res, cps = results[task_of[dev]]
            if isinstance(cps.get("soiling"), dict):
                soil_of[dev] = cps["soiling"]
                loss_draws[dev] = cps["soiling"].pop("_loss_draws", None)
            if ratio is None:
                res["peer_ratio_year_pairs"] = adeg.RateResult.refused(
                    "peer_ratio_year_pairs", f"fewer than {p['min_peers'] + 1} inverters in peer group "
                                     f"{inv['peer_group']!r}")
            drift = drift_by_sensor.get(inv["poa_sensor_id"])
            _shift_energy(cps, by_dev[dev])
            res["recommended"] = adeg.recommend_rate(
                res, drift=drift, shifts=cps.get("change_points"), soiling=cps.get("soiling"),
                sensor_id=inv["poa_sensor_id"])
            summary = _summary(res, cps, reports[dev], how, drift)
            summary["sensor_drift"] = drift
            summary["warranty"] = _warranty_block(res["recommended"], usable[dev], weights[dev],
                                                  by_dev[dev]["e_ac_kwh"], terms,
                                                  inv["commissioned"], p)
            _note_steps(summary)
        refused += res["sensor_year_pairs"].rate_pct_per_yr is None
        rows += _rows(dev, res, summary)
    # the site as a whole
    if len(s):
        res, cps = results[-1]
        if isinstance(cps.get("soiling"), dict):
            cps["soiling"].pop("_loss_draws", None)
            fleet = _fleet_soiling(soil_of, loss_draws)
            if fleet:
                cps["soiling"].update(fleet)
        res["peer_ratio_year_pairs"] = adeg.RateResult.refused(
            "peer_ratio_year_pairs", "not defined for the site as a whole (relative to itself)")
        rep = {"n_days_used": int(len(s)), "n_inverters": len(usable),
               "rule": f"days with >= {p['site_min_inverter_fraction']:.0%} of inverters usable"}
        judged = [d for d in drift_by_sensor.values() if d["judged"]]
        site_drift = None
        if judged:  # a drifting sensor biases the site index through its inverters
            onsets = sorted(d["onset_day"] for d in judged if d.get("onset_day"))
            site_drift = {"judged": True, "sensor_id": ", ".join(d["sensor_id"] for d in judged),
                          "drift_pct_per_yr": float(np.median([d["drift_pct_per_yr"]
                                                               for d in judged])),
                          "onset_day": onsets[0] if onsets else None}
        e_exp_site = pd.concat([by_dev[i]["e_exp_kwh"] for i in by_dev], axis=1).sum(axis=1)
        _shift_energy(cps, pd.DataFrame({"e_exp_kwh": e_exp_site}))
        res["recommended"] = adeg.recommend_rate(
            res, drift=site_drift, shifts=cps.get("change_points"), soiling=cps.get("soiling"),
            sensor_id=site_drift["sensor_id"] if site_drift else None,
            min_soiling_loss_pct=p["soiling_min_loss_pct"])
        summary = _summary(res, cps, rep, how, site_drift)
        summary["sensor_drift"] = site_drift
        e_site = pd.concat([by_dev[i]["e_ac_kwh"] for i in by_dev], axis=1).sum(axis=1)
        first = min((inv["commissioned"] for _, inv in invs.iterrows()
                     if pd.notna(inv["commissioned"])), default=None)
        summary["warranty"] = _warranty_block(res["recommended"], s, w, e_site, terms, first, p)
        _note_steps(summary)
    else:
        res = {m: adeg.RateResult.refused(m, "no usable daily data for the site") for m in METHODS}
        summary = {"data": {"n_days_used": 0}}
    rows += _rows(SITE_DEVICE, res, summary)
    n = write_degradation(engine, site_id, rows, comp_id)
    if progress:
        progress(total, total)
    return {"site_id": site_id, "computation_id": comp_id, "rows": n, "inverters": len(invs),
            "refused": int(refused)}


def _fleet_soiling(soil_of: dict, loss_draws: dict) -> dict:
    """The fleet's soiling energy loss: each inverter's loss (its own insolation-weighted daily
    soiling ratio, Deceglie et al. 2018) weighted by its expected energy on the usable days, with the
    Monte-Carlo 95 % interval of the same weighted mean over the inverters' soiling-ratio
    draws (draw k of every inverter together; an inverter without soiled intervals keeps
    its point loss). Empty when no inverter has a loss."""
    def loss_of(v):
        x = v.get("loss_insolation_pct")
        return v.get("loss_pct") if x is None else x

    have = {d: v for d, v in soil_of.items() if loss_of(v) is not None
            and v.get("weight", 0) > 0}
    if not have:
        return {}
    wsum = sum(v["weight"] for v in have.values())
    point = sum(v["weight"] * loss_of(v) for v in have.values()) / wsum
    n = max((len(x) for x in loss_draws.values() if x is not None), default=0)
    out = {"fleet_loss_pct": round(point, 3), "fleet_n_inverters": len(have),
           "fleet_method": "expected-energy-weighted mean of the inverters' soiling losses "
                           "(each from its own insolation-weighted daily soiling ratio, "
                           "Deceglie et al. 2018); "
                           "interval: 2.5-97.5 % of the same mean over Monte-Carlo draws of "
                           "each dry interval's Theil-Sen rate, full recovery at cleanings"}
    if n:
        tot = np.zeros(n)
        for d, v in have.items():
            x = loss_draws.get(d)
            tot += v["weight"] * (x[:n] if x is not None and len(x) >= n else loss_of(v))
        lo, hi = np.percentile(tot / wsum, [2.5, 97.5])
        out["fleet_loss_interval_pct"] = [round(float(min(lo, point)), 3),
                                          round(float(max(hi, point)), 3)]
    return out


def _shift_energy(cps: dict, d: pd.DataFrame) -> None:
    """Energy of each level shift since its day: size × expected energy after it [kWh]
    (negative for a drop: energy lost against the level before the shift)."""
    if "e_exp_kwh" not in d:
        return
    e = d["e_exp_kwh"]
    idx = pd.DatetimeIndex(pd.to_datetime(e.index))
    for c in cps.get("change_points", []):
        if c.get("kind") in ("drop", "rise") and c.get("size_pct") is not None:
            after = float(e[idx >= pd.Timestamp(c["day"])].sum())
            c["energy_kwh"] = round(c["size_pct"] / 100.0 * after, 1)


def _note_steps(summary: dict) -> None:
    """A level drop inside the period: the whole-period rate mixes a failure with degradation."""
    drops = [c for c in summary.get("change_points", []) if c.get("kind") == "drop"]
    if not drops:
        return
    msg = ("sensor_year_pairs: level drop(s) on " + ", ".join(f"{c['day']} ({c['size_pct']:+.1f} %)" for c in drops)
           + ": a step is a failure (string, module, inverter), not degradation; the whole-period "
             "rate includes it, see sensor_year_pairs_between_shifts and inspect the equipment")
    summary["warnings"] = sorted(set(summary.get("warnings", [])) | {msg})
    if isinstance(summary.get("warranty"), dict):
        summary["warranty"]["note"] = msg


def _summary(res: dict[str, adeg.RateResult], cps: dict, report: dict, clear_how: str,
             drift: dict | None = None) -> dict:
    """The overview row: data report, method comparison, change points, warnings.

    Every warning starts with the code of the method it is about. The sensor-drift warning
    comes from the sensor's judged drift (:func:`analytics.degradation.judge_sensor_drift`
    over all inverters on the sensor), not from one inverter's intervals."""
    verdict = adeg.compare_methods({k: v for k, v in res.items() if k != "recommended"},
                                   drift=drift if drift is not None else {"judged": False})

    def named(m, w):
        return w if w.startswith(m) else f"{m}: {w}"

    all_warn = {named(m, w) for m, r in res.items() if m != "recommended" for w in r.warnings}
    all_warn |= set(verdict["warnings"])
    rec = res.get("recommended")
    if rec is not None:
        all_warn |= {c["text"] if c["text"].startswith(str(c.get("method"))) else
                     f"{c.get('method')}: {c['text']}"
                     for c in rec.details.get("caveats", []) if c["kind"] == "sensor_drift"}
    all_warn = sorted(all_warn)
    rec = res.get("recommended")
    chosen = rec.details.get("chosen_method") if rec is not None else None
    return {"recommended_method": chosen, "data": report, "comparison": verdict,
            "change_points": cps.get("change_points", []), "segments": cps.get("segments", []),
            "changepoint_method": cps.get("method"), "changepoint_series": cps.get("series"),
            "clear_periods": clear_how or None, "warnings": all_warn,
            "soiling": cps.get("soiling"),
            "note": awar.DISCLAIMER}


# ---------------------------------------------------------------- results export

RESULTS_SCHEMA = "heliaudit-results/2"
CSV_TABLES = ("degradation", "daily", "flags")


class NothingComputedError(LookupError):
    """The site exists but nothing has been computed for it yet."""


def _iso_s(ts_s) -> str | None:
    if ts_s is None or (isinstance(ts_s, float) and np.isnan(ts_s)):
        return None
    return dt.datetime.fromtimestamp(int(ts_s), dt.UTC).isoformat().replace("+00:00", "Z")


def _flags(engine, site_id: str) -> tuple[pd.DataFrame, bool]:
    """The site's flags (db.flags.read_flags) and whether the flags module exists."""
    try:
        from db.flags import read_flags
    except ImportError:
        return pd.DataFrame(columns=["flag_id", "site_id", "device_id", "kind", "start_s", "end_s",
                                     "severity", "lost_kwh", "details_json"]), False
    return read_flags(engine, site_id), True


def _basis(d: pd.DataFrame) -> dict:
    """Where a device's PR and rates got irradiance and cell temperature (#11): days per code
    (ingest.site_model.IRRADIANCE_BASES, analytics.daily.T_CELL_BASES; null: not recorded)."""
    def counts(col):
        if col not in d:
            return {}
        return {str(k): int(v) for k, v in d[col].dropna().value_counts().sort_index().items()}
    return {"irradiance": counts("irradiance_basis"), "cell_temperature": counts("t_cell_basis")}


def _period(d: pd.DataFrame) -> dict:
    """Period and PRs of one device from daily sums: PR = Σ e_ac / Σ e_ref (IEC 61724-1),
    PR_STC = Σ e_ac / Σ e_ref_stc, over days where both terms exist (all days, not only valid
    ones: an energy PR that keeps outages)."""
    if d.empty:
        return {"first_day": None, "last_day": None, "n_days": 0, "n_days_valid": 0,
                "pr": None, "pr_stc": None, "e_ac_kwh": None}
    ok = d["e_ac_kwh"].notna() & d["e_ref_kwh"].gt(0)
    ok_stc = d["e_ac_kwh"].notna() & d["e_ref_stc_kwh"].gt(0)
    pr = d.loc[ok, "e_ac_kwh"].sum() / d.loc[ok, "e_ref_kwh"].sum() if ok.any() else None
    pr_stc = (d.loc[ok_stc, "e_ac_kwh"].sum() / d.loc[ok_stc, "e_ref_stc_kwh"].sum()
              if ok_stc.any() else None)
    return {"first_day": min(d["day"]).isoformat(), "last_day": max(d["day"]).isoformat(),
            "n_days": int(len(d)), "n_days_valid": int(d["day_valid"].sum()),
            "pr": None if pr is None else round(float(pr), 5),
            "pr_stc": None if pr_stc is None else round(float(pr_stc), 5),
            "e_ac_kwh": round(float(d["e_ac_kwh"].sum()), 3),
            "pr_basis": "sums over all days of the daily table (energy PR, outages included)"}


def _num(v) -> float | None:
    return None if v is None or pd.isna(v) else float(v)


def _device_block(res: pd.DataFrame) -> dict:
    methods, summary, rec = {}, {}, None
    for _, r in res.iterrows():
        if r["method"] == "overview":
            summary = r["details"] or {}
            continue
        if r["method"] == "recommended":
            det = r["details"] or {}
            rec = {"method": det.get("chosen_method"), "rate_pct_per_yr": _num(r["rate_pct_per_yr"]),
                   "ci_low": _num(r["ci_low"]), "ci_high": _num(r["ci_high"]),
                   "confidence": _num(r["confidence"]), "ci68_low": _num(det.get("ci68_low")),
                   "ci68_high": _num(det.get("ci68_high")),
                   "n_points": None if pd.isna(r["n_points"]) else int(r["n_points"]), "reasons": det.get("reasons", []),
                   "caveats": det.get("caveats", []), "reason": r["reason"]}
            continue
        det = dict(r["details"] or {})
        methods[r["method"]] = {
            "rate_pct_per_yr": None if pd.isna(r["rate_pct_per_yr"]) else float(r["rate_pct_per_yr"]),
            "ci_low": None if pd.isna(r["ci_low"]) else float(r["ci_low"]),
            "ci_high": None if pd.isna(r["ci_high"]) else float(r["ci_high"]),
            "confidence": None if pd.isna(r["confidence"]) else float(r["confidence"]),
            "n_points": None if pd.isna(r["n_points"]) else int(r["n_points"]),
            "reason": r["reason"], "warnings": det.pop("warnings", []), "details": det}
    if rec is None and "sensor_year_pairs" in methods:  # stored before issue #13
        y = methods["sensor_year_pairs"]
        rec = {"method": "sensor_year_pairs", **{k: y[k] for k in ("rate_pct_per_yr", "ci_low",
                                                                   "ci_high", "confidence")},
               "ci68_low": None, "ci68_high": None, "reasons": [
                   "stored by an older version without a recommended rate: sensor_year_pairs"],
               "caveats": [], "reason": y["reason"]}
    return {"degradation": methods, "recommended": rec,
            "recommended_method": summary.get("recommended_method"),
            "comparison": summary.get("comparison"),
            "change_points": summary.get("change_points", []),
            "segments": summary.get("segments", []),
            "changepoint_method": summary.get("changepoint_method"),
            "warnings": summary.get("warnings", []),
            "data": summary.get("data"), "clear_periods": summary.get("clear_periods"),
            "sensor_drift": summary.get("sensor_drift"), "soiling": summary.get("soiling"),
            "warranty": summary.get("warranty")}


def results_document(engine, site_id: str) -> dict:
    """Everything computed so far for a site, as the ``heliaudit-results/2`` JSON document.

    Raises :class:`SiteNotFoundError` for an unknown site and :class:`NothingComputedError`
    when the site has no daily rows, no degradation rows and no flags.
    """
    from db.degradation import degradation_results, last_computation

    site = site_row(engine, site_id)
    deg = degradation_results(engine, site_id)
    daily = daily_table(engine, site_id)
    flags, have_flags = _flags(engine, site_id)
    if deg.empty and daily.empty and flags.empty:
        raise NothingComputedError(
            f"nothing computed for site {site_id!r} yet: run `heliaudit compute --site "
            f"{site_id}` after loading its exports")
    invs = queries.inverters(engine, site_id)
    comps = {k: last_computation(engine, site_id, k) for k in ("daily", "flags", "degradation")}
    inverters = []
    for _, inv in invs.iterrows():
        dev = inv["device_id"]
        block = {"device_id": dev, "p_dc_kwp": float(inv["p_dc_kwp"]),
                 "commissioned": str(inv["commissioned"]) if pd.notna(inv["commissioned"])
                 else None, "peer_group": inv["peer_group"],
                 "period": _period(daily[daily["device_id"] == dev]),
                 "basis_days": _basis(daily[daily["device_id"] == dev])}
        rows = deg[deg["device_id"] == dev]
        block.update(_device_block(rows) if len(rows) else
                     {"degradation": {}, "reason": "degradation not computed"})
        inverters.append(block)
    site_rows = deg[deg["device_id"] == SITE_DEVICE]
    site_block = {"device_id": SITE_DEVICE, "period": _period(daily)}
    site_block.update(_device_block(site_rows) if len(site_rows) else
                      {"degradation": {}, "reason": "degradation not computed"})
    flag_items = [{"flag_id": int(f["flag_id"]), "device_id": f["device_id"], "kind": f["kind"],
                   "start": _iso_s(f["start_s"]), "end": _iso_s(f["end_s"]),
                   "severity": f["severity"],
                   "lost_kwh": None if pd.isna(f["lost_kwh"]) else float(f["lost_kwh"]),
                   "details": _json_or_none(f["details_json"])} for _, f in flags.iterrows()]
    deg_comp = comps["degradation"]
    return clean({
        "schema": RESULTS_SCHEMA,
        "generated_utc": dt.datetime.now(dt.UTC).isoformat(timespec="seconds").replace("+00:00", "Z"),
        "software": {"name": "heliaudit", "version": heliaudit.__version__},
        "site": {"site_id": site_id, "name": site["name"], "timezone": site["timezone"],
                 "utc_standard_offset_h": standard_utc_offset_h(site["timezone"]),
                 "latitude_deg": site["latitude_deg"], "longitude_deg": site["longitude_deg"]},
        "parameters": None if deg_comp is None else deg_comp["params"],
        "computations": {k: None if v is None else
                         {"computation_id": v["computation_id"], "software_version": v["software_version"],
                          "started_utc": v["started_utc"], "finished_utc": v["finished_utc"],
                          "scope": v.get("scope")} for k, v in comps.items()},
        "notice": awar.DISCLAIMER,
        "inverters": inverters,
        "site_result": site_block,
        "flags": flag_items,
        "flags_available": have_flags,
    })


def _json_or_none(text):
    import json

    if text is None or (isinstance(text, float) and np.isnan(text)):
        return None
    try:
        return json.loads(text)
    except ValueError:
        return {"text": str(text)}


def results_table(engine, site_id: str, table: str) -> pd.DataFrame:
    """One flat table for CSV export: ``degradation``, ``daily`` or ``flags``."""
    from db.degradation import degradation_results

    if table not in CSV_TABLES:
        raise ValueError(f"unknown table {table!r}; choose one of {', '.join(CSV_TABLES)}")
    site_row(engine, site_id)  # raises SiteNotFoundError
    if table == "degradation":
        out = degradation_results(engine, site_id)
        if out.empty:
            raise NothingComputedError(f"no degradation results for site {site_id!r}: run "
                                       f"`heliaudit compute --site {site_id}` first")
        out["n_change_points"] = [len((d or {}).get("change_points", [])) if m == "overview" else None
                                  for d, m in zip(out["details"], out["method"], strict=True)]
        return out.drop(columns=["details"])
    if table == "daily":
        out = daily_table(engine, site_id)
        if out.empty:
            raise NothingComputedError(f"no daily performance rows for site {site_id!r}: run "
                                       f"`heliaudit compute --site {site_id}` first")
        return out
    out, _ = _flags(engine, site_id)
    out = out.copy()
    out.insert(out.columns.get_loc("start_s"), "start", [_iso_s(x) for x in out["start_s"]])
    out.insert(out.columns.get_loc("end_s"), "end", [_iso_s(x) for x in out["end_s"]])
    return out
