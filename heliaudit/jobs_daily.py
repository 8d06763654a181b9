"""Daily performance job: read interval frames, compute daily rows, replace them in the store.

``recompute_range`` recomputes only the site-local standard days that ``[start_s, end_s]``
touches (the ingest step calls it after each file with the file's first and last interval
start); ``recompute_all`` recomputes every day that has readings. Each run records one
``computation`` row (kind ``daily``, the software version, the parameters including the
site's filter settings, and its scope) and stamps the rows it writes with its id.

Solar position and clear-sky POA are computed once per site timestamp grid and shared by
the site's inverters; each sensor channel is read once per run.
"""

from __future__ import annotations

import datetime as dt
import tomllib
from collections.abc import Callable

import numpy as np
import pandas as pd
import sqlalchemy as sa

import heliaudit
from analytics import daily as adaily
from analytics import filters as flt
from analytics import sensor_qa
from analytics.temperature import SAPM_PARAMETERS
from db import queries
from db.computations import begin_computation, finish_computation, latest_batch_id
from db.daily import write_daily
from db.readings import stored_range
from db.registry import SiteNotFoundError, site_row  # noqa: F401 (re-exported)
from db.timeseries import inverter_frames, site_channels, site_inverters
from heliaudit.site_irradiance import SiteIrradiance

Progress = Callable[[int, int], None]  # progress(done, total), in inverters
BATCH_ROWS = 300_000  # intervals per vectorised call (a week of 100 inverters is ~70 000)
_EPOCH = dt.date(1970, 1, 1)


def site_filters(site_row: dict) -> dict[str, float]:
    """The site's ``[filters]`` (from its stored configuration) merged with the defaults.

    Raises ``ValueError`` naming ``filters.<key>`` for an unknown setting.
    """
    try:
        raw = tomllib.loads(site_row.get("config_toml") or "").get("filters", {})
    except tomllib.TOMLDecodeError:
        raw = {}
    return flt.resolve_filters(raw)


def _params(site_row: dict, filters: dict, offset_h: float) -> dict:
    return {
        "filters": filters,
        "utc_standard_offset_h": offset_h,
        "temperature_model": "Sandia Eq. 12 from back-of-module (King et al. 2004), "
                             "Eq. 11 / Faiman 2008 from ambient where missing",
        "sapm_parameters": SAPM_PARAMETERS,
        "power_model": "PVWatts V5 DC + inverter curve (Dobos 2014)",
        "night": "solar elevation (pvlib ephemeris) < night_elevation_deg or G < night_poa_wm2",
        "coverage_weight": "measured POA, clear-sky POA (Ineichen, isotropic) where missing",
        "sensor_exclusions": "POA / module temperature of days the sensor is judged faulty "
                             "(analytics.sensor_qa.frame_sensor_validity), and POA from the "
                             "day a sensor jumped against its siblings (jump_vs_sibling) on, "
                             "are missing (their flags in the flags job give the reason)",
        "irradiance_sources": "per array, best first: POA sensor in the array plane; GHI "
                              "sensor with DIRINT (Perez et al. 1992) decomposition and Perez (1990) "
                              "transposition; POA sensor of another plane via GTI-DIRINT "
                              "(Marion 2015) and Perez (1990); trackers by "
                              "pvlib.tracking.singleaxis (Marion & Dobos 2013)",
    }


class _Inv:
    """Duck-typed inverter parameters for analytics.daily from an inverter-table row."""

    def __init__(self, row: dict, irradiance_basis: str = "poa_same_plane"):
        self.irradiance_basis = irradiance_basis
        self.p_dc_kwp = float(row["p_dc_kwp"])
        self.p_ac_max_kw = float(row["p_ac_max_kw"])
        self.gamma_pmp_per_c = float(row["gamma_pmp_per_c"])
        self.eta_inv_nom = float(row["eta_inv_nom"])
        self.mounting = row["mounting"]


def _mask_faulty_sensor_days(frame: pd.DataFrame, inv: dict, sun: pd.DataFrame,
                             off_s: int, memo: dict | None = None) -> pd.DataFrame:
    """POA / module temperature of days on which the sensor is judged faulty -> NaN
    (reason 'missing' in the filters; issue #14, ``analytics.sensor_qa.frame_sensor_validity``).
    ``memo``: kept across the run's inverters, so inverters on one module sensor share its
    judgement (issue #16: it was recomputed for each inverter)."""
    par = SAPM_PARAMETERS.get(inv.get("mounting"), SAPM_PARAMETERS["open_rack_glass_polymer"])
    g_bad, t_bad = sensor_qa.frame_sensor_validity(
        frame, sun["solar_elevation_deg"].to_numpy(), sun["poa_clearsky_wm2"].to_numpy(),
        p_dc_kwp=float(inv["p_dc_kwp"]), std_offset_s=off_s, a=par["a"], b=par["b"],
        memo=memo)
    if not (g_bad.any() or t_bad.any()):
        return frame
    frame = frame.copy()
    frame.loc[g_bad, "poa_wm2"] = np.nan
    frame.loc[t_bad, "t_module_c"] = np.nan
    return frame


def _fleet_sensor_checks(engine: sa.Engine, site_id: str, site: dict, off_s: int,
                         first_day: int | None = None) -> tuple[dict, dict]:
    """The sensor judgements that need more than one inverter's frame.

    Returns ``(jump_days, insolation)``: sensor id -> day table of the days a POA sensor is
    excluded because it jumped against its siblings (:func:`heliaudit.jobs_flags.
    sibling_jumps`, on the sensors' whole history: a step needs weeks on either side,
    whatever range this run recomputes), and sensor id -> its daily insolation from the raw
    readings (for :func:`heliaudit.jobs_flags.high_vs_power_by_sensor`).

    With ``first_day`` (a range run) the days before a cut come from the day judgements the
    last flags run stored (:func:`heliaudit.jobs_flags.stored_poa_days`; issue #16: this
    check read and judged every POA reading of the site's history on every run), and only
    the readings from the cut are read; the clear-day ratios and the jumps found are the same
    as from the whole history, the sun being taken as the flags job takes it
    (:func:`heliaudit.jobs_flags.sensor_sun_for`). Insolation is then known from the cut on,
    which covers the recomputed days; a site with fewer than two POA sensors has no sibling
    check, and its insolation is read from the day before ``first_day``."""
    from heliaudit.jobs_flags import (
        SunAt,
        daily_insolation,
        device_planes,
        read_sensors,
        sensor_sun_for,
        sibling_jumps,
        stored_poa_days,
    )

    with engine.connect() as conn:
        n_poa = sum(q == "poa_wm2" for _sid, q in queries.sensor_quantities(conn, site_id))
    if first_day is not None and n_poa < 2:  # no siblings: insolation of the run's days only
        sensors = read_sensors(engine, site_id, quantities=("poa_wm2",),
                               start_s=(int(first_day) - 1) * 86400 - off_s)
        return {}, {e[0]: daily_insolation(e[2], off_s, e[3]) for e in sensors}
    prior = None if first_day is None else stored_poa_days(engine, site_id, first_day)
    sensors = read_sensors(engine, site_id, quantities=("poa_wm2",),
                           start_s=None if prior is None else prior.read_from_s)
    h = {e[0]: daily_insolation(e[2], off_s, e[3]) for e in sensors}
    if len(sensors) < 2:
        return {}, h
    _iv, sun_for = sensor_sun_for(sensors, device_planes(site.get("config_toml"), site),
                                  SunAt(site))
    return sibling_jumps(sensors, site, std_offset_s=off_s, sun_for=sun_for, prior=prior)[1], h


def _high_sensor_days(rows: pd.DataFrame, invs: list[dict], insolation: dict) -> dict:
    """Inverter id -> day table of the days its POA sensor reads far more than the arrays
    under it deliver (:func:`heliaudit.jobs_flags.high_vs_power_by_sensor`), from the daily
    rows' energies and availability."""
    from heliaudit.jobs_flags import high_vs_power_by_sensor

    if rows.empty or not invs:
        return {}
    inverters = pd.DataFrame([{"device_id": i["device_id"], "p_dc_kwp": i["p_dc_kwp"],
                               "poa_sensor_id": i.get("poa_sensor_id")} for i in invs])
    out = {}
    for sid, days in high_vs_power_by_sensor(insolation, rows, inverters).items():
        if not days.any():
            continue
        tab = pd.DataFrame({"valid": ~days.to_numpy(bool),
                            "reason": np.where(days.to_numpy(bool), "high_vs_power", "")},
                           index=days.index)
        for dev in inverters.loc[inverters["poa_sensor_id"] == sid, "device_id"]:
            out[dev] = tab
    return out


def _mask_days(frame: pd.DataFrame, col: str, days: pd.DataFrame | None,
               off_s: int) -> pd.DataFrame:
    """``col`` set to NaN on the invalid days of ``days`` (a sensor_qa day table)."""
    if days is None or col not in frame or days.empty or days["valid"].all():
        return frame
    bad = sensor_qa.invalid_interval_mask(frame.index, days, std_offset_s=off_s)
    if not bad.any():
        return frame
    frame = frame.copy()
    frame.loc[bad, col] = np.nan
    return frame


def _compute(engine: sa.Engine, site_id: str, first_day: int | None, last_day: int | None,
             scope: str, progress: Progress | None) -> dict:
    with engine.connect() as conn:
        site = site_row(conn, site_id)
        n_inv = len(site_inverters(conn, site_id))
    filters = site_filters(site)
    offset_h = adaily.standard_utc_offset_h(site["timezone"])
    off_s = int(round(offset_h * 3600))
    start_s = None if first_day is None else first_day * 86400 - off_s
    end_s = None if last_day is None else (last_day + 1) * 86400 - off_s
    with engine.begin() as conn:
        # The newest batch this computation sees: `heliaudit compute` recomputes only batches
        # loaded after it (ids, not clock times, which tie within a second).
        through = latest_batch_id(conn, site_id)
        site_irr = SiteIrradiance(engine, site, start_s, end_s)
        params = {**_params(site, filters, offset_h), "through_batch_id": through,
                  "inverters": site_irr.describe()}
        comp_id = begin_computation(conn, site_id, "daily", params, scope=scope,
                                    software_version=heliaudit.__version__)

    jump_days, insolation = _fleet_sensor_checks(engine, site_id, site, off_s,
                                                 None if scope == "full" else first_day)
    high_days: dict[str, pd.DataFrame] = {}  # inverter id -> days its POA sensor reads high
    invs: list[dict] = []
    sun = pd.DataFrame({"solar_elevation_deg": [], "poa_clearsky_wm2": []},
                       index=pd.DatetimeIndex([], tz="UTC"))
    parts, ids, done = [], [], 0
    days_seen: list[int] = []
    batch: list[tuple[dict, pd.DataFrame]] = []
    validity_memo: dict = {}  # sensors -> their last module-temperature judgement

    def sun_for(frame: pd.DataFrame) -> pd.DataFrame:
        # solar position once per site timestamp grid: the inverters usually share it
        nonlocal sun
        if not (len(sun) == len(frame) and sun.index.equals(frame.index)):
            missing = frame.index.difference(sun.index)
            if len(missing):
                new = flt.sun_and_clearsky(
                    missing, site["latitude_deg"], site["longitude_deg"], site["altitude_m"],
                    site["tilt_deg"], site["azimuth_deg"], site["albedo"],
                    interval_h=frame["interval_h"].reindex(missing).to_numpy())
                sun = pd.concat([sun, new]).sort_index() if len(sun) else new
        return sun if sun.index.equals(frame.index) else sun.reindex(frame.index)

    def flush() -> None:
        nonlocal done
        if not batch:
            return
        suns = [sun_for(fr) for _inv, fr in batch]
        frames, clearsky = [], []
        for k, (inv, fr) in enumerate(batch):
            sun_k = suns[k]
            cs = sun_k["poa_clearsky_wm2"].to_numpy()
            # an inverter whose arrays are not all in its POA sensor's plane (#11)
            if site_irr.needs_model(inv["device_id"]):
                fr, cs = site_irr.apply(inv["device_id"], fr)
                sun_k = sun_k.assign(poa_clearsky_wm2=cs)
            # a sensor judged faulty gives no PR evidence (#14), nor one that jumped
            # against its siblings, from the jump on
            fr = _mask_faulty_sensor_days(fr, inv, sun_k, off_s, validity_memo.setdefault(
                (inv.get("t_module_sensor_id"), inv.get("poa_sensor_id"),
                 inv.get("t_amb_sensor_id"), inv.get("wind_sensor_id")), {}))
            fr = _mask_days(fr, "poa_wm2", high_days.get(inv["device_id"]), off_s)
            frames.append(_mask_days(fr, "poa_wm2", jump_days.get(inv.get("poa_sensor_id")),
                                     off_s))
            clearsky.append(cs)
        rows = adaily.daily_performance_many(
            frames, [_Inv(inv, site_irr.basis(inv["device_id"])) for inv, _fr in batch],
            utc_offset_h=offset_h,
            solar_elevation_deg=[x["solar_elevation_deg"].to_numpy() for x in suns],
            poa_clearsky_wm2=clearsky, filters=filters)
        names = np.array([inv["device_id"] for inv, _fr in batch], dtype=object)
        rows.insert(0, "device_id", names[rows.pop("inverter_no").to_numpy()])
        if len(rows):
            parts.append(rows)
            days_seen.extend([(rows["day"].min() - _EPOCH).days, (rows["day"].max() - _EPOCH).days])
        done += len(batch)
        batch.clear()
        if progress and done <= n_inv:
            progress(done, n_inv)

    if progress:
        progress(0, n_inv)
    n_batch = 0
    for inv, frame in inverter_frames(engine, site_id, start_s, end_s, prefetch=True):
        ids.append(inv["device_id"])
        if not site_irr.needs_model(inv["device_id"]):  # arrays in its POA sensor's plane
            invs.append(inv)
        batch.append((inv, frame))
        n_batch += len(frame)
        if n_batch >= BATCH_ROWS:  # a few inverters at a time: vectorised, bounded memory
            flush()
            n_batch = 0
    flush()
    out = pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(
        columns=["device_id", *adaily.DAILY_COLUMNS])
    # a POA sensor reading far more than the arrays under it deliver (judged on the first
    # pass's energies and availability): its inverters' days are recomputed without it
    high_days.update(_high_sensor_days(out, invs, insolation))
    if high_days:
        parts.clear()
        redo = sorted(high_days)
        for inv, frame in inverter_frames(engine, site_id, start_s, end_s, inverter_ids=redo):
            batch.append((inv, frame))
        flush()
        keep = out[~out["device_id"].isin(redo)]
        out = pd.concat([keep, *parts], ignore_index=True)
    lo = first_day if first_day is not None else (min(days_seen) if days_seen else 0)
    hi = last_day if last_day is not None else (max(days_seen) if days_seen else 0)
    with engine.begin() as conn:
        n = write_daily(conn, site_id, out, first_day=_EPOCH + dt.timedelta(days=lo),
                        last_day=_EPOCH + dt.timedelta(days=hi), device_ids=ids,
                        computation_id=comp_id)
        finish_computation(conn, comp_id)
    return {"site_id": site_id, "computation_id": comp_id, "rows": n, "inverters": len(ids),
            "first_day": _EPOCH + dt.timedelta(days=lo) if (first_day is not None or days_seen) else None,
            "last_day": _EPOCH + dt.timedelta(days=hi) if (last_day is not None or days_seen) else None,
            "days_valid": int(out["day_valid"].sum()) if len(out) else 0}


def local_days(start_s: int, end_s: int, timezone: str) -> tuple[int, int]:
    """First and last local-standard day numbers (days since 1970-01-01) touched by [start_s, end_s]."""
    off = adaily.standard_utc_offset_h(timezone)
    d = adaily.local_standard_day_number(np.array([start_s, end_s]), off)
    return int(d[0]), int(d[1])


def recompute_range(engine: sa.Engine, site_id: str, start_s: int, end_s: int,
                    progress: Progress | None = None) -> dict:
    """Recompute the daily rows of every inverter for the local standard days touched by
    ``[start_s, end_s]`` (UTC epoch seconds, inclusive; e.g. a file's first and last interval
    start). Returns a summary dict (computation_id, rows, first_day, last_day, ...).

    Raises ``SiteNotFoundError`` for an unknown site, ``ValueError`` if ``end_s < start_s``.
    """
    if end_s < start_s:
        raise ValueError(f"end_s {end_s} is before start_s {start_s}")
    with engine.connect() as conn:
        site = site_row(conn, site_id)
    d0, d1 = local_days(int(start_s), int(end_s), site["timezone"])
    scope = f"days {_EPOCH + dt.timedelta(days=d0)}..{_EPOCH + dt.timedelta(days=d1)}"
    return _compute(engine, site_id, d0, d1, scope, progress)


def _site_span(conn: sa.Connection, site_id: str) -> tuple[int | None, int | None]:
    # per-channel index seeks: one MIN/MAX over "channel_id IN (...)" scans every reading of
    # the site (4 M readings, 40 channels: 0.6-1.2 s against 2-13 ms, issue #16)
    spans = stored_range(conn, list(site_channels(conn, site_id).values())).values()
    if not spans:
        return None, None
    return min(lo for lo, _ in spans), max(hi for _, hi in spans)


def recompute_all(engine: sa.Engine, site_id: str | None = None,
                  progress: Progress | None = None) -> list[dict]:
    """Recompute every day of one site (or of every site): all days with readings are
    rewritten and rows of days without readings any more are deleted. Returns one summary
    per site."""
    if site_id is None:
        sites = sorted(queries.sites(engine)["site_id"])
    else:
        site_row(engine, site_id)
        sites = [site_id]
    out = []
    for sid in sites:
        with engine.connect() as conn:
            lo, hi = _site_span(conn, sid)
            tz = site_row(conn, sid)["timezone"]
        dmin, dmax = queries.daily_span(engine, sid)
        if lo is None:
            d0 = d1 = None
        else:
            d0, d1 = local_days(int(lo), int(hi), tz)
        # widen to the days already stored, so stale rows outside the readings disappear
        stored = [(pd.Timestamp(x).date() - _EPOCH).days for x in (dmin, dmax) if x is not None]
        if stored:
            d0 = min(stored + ([d0] if d0 is not None else []))
            d1 = max(stored + ([d1] if d1 is not None else []))
        if d0 is None:
            out.append({"site_id": sid, "computation_id": None, "rows": 0, "inverters": 0,
                        "first_day": None, "last_day": None, "days_valid": 0})
            continue
        out.append(_compute(engine, sid, d0, d1, "full", progress))
    return out
