"""Flags job: read the daily table and the interval data, run every detector, replace flags.

``run_flags(engine, site_id)`` recomputes all flags of a site from the store (one
``computation`` row of kind ``flags`` with the software version and the parameters) and
replaces the site's previous flags in one transaction. The detection itself is
:func:`compute_flags`, which takes frames in memory (the benchmark calls it directly).

What runs where:

* daily table -> underperformance (peer ratio, robust z, persistence), soiling and
  cleaning (site-median ``pi``), the fleet-power drift check of each POA sensor;
* each inverter's interval frame -> outage, clipping, clock shift of its power profile,
  range / flatline / dropout of its power channel;
* each sensor channel -> range, flatline, dropout, night irradiance (POA/GHI), clock shift
  and clear-sky drift (POA), sibling drift (pairs of POA sensors).

Solar position and clear-sky POA are computed once per timestamp and interval length, at each
reading's own interval midpoint (the interval recorded at ingest, #11): every sample gets a sun
position however the logging interval changes. A device's expected timestamps (for dropouts)
step by its own intervals from the site's first to last reading (``db.timeseries.fill_gaps``).
"""

from __future__ import annotations

import itertools
import tomllib
from collections.abc import Callable

import numpy as np
import pandas as pd
import pvlib
import sqlalchemy as sa

import heliaudit
from analytics import clock, energy_check, outages, outliers, sensor_qa, soiling
from analytics.daily import standard_utc_offset_h
from analytics.outliers import FLAG_COLUMNS, epoch_s, flag_frame
from analytics.power import expected_ac_power
from analytics.temperature import (
    SAPM_PARAMETERS,
    cell_temperature_from_module,
    cell_temperature_sandia,
)
from db import schema
from db.computations import begin_computation, finish_computation
from db.daily import daily_table
from db.flags import write_flags
from db.registry import SiteNotFoundError, site_row  # noqa: F401 (re-exported)
from db.timeseries import (
    fill_gaps,
    fill_unknown_intervals,
    instant_channels,
    inverter_frames,
    read_channel,
    site_channels,
)
from ingest.counters import counter_resolution

Progress = Callable[[int, int], None]  # progress(done, total), in devices

#: Detector settings recorded with each computation (defaults cite METHODS §5, §8–§10).
PARAMS = {
    "underperformance": {"z_threshold": -3.0, "min_deficit": 0.02, "min_peers": 5,
                         "window": 5, "k_required": 3, "escalate_days": 14,
                         "clear_days": 3},
    "outage": {"min_poa_wm2": 50.0, "max_frac": 0.01, "min_duration_h": 0.5,
               "warning_h": 1.0, "alarm_h": 4.0},
    "clipping": {"frac": 0.98, "summary": "per local month"},
    "soiling": {"input": "site median of valid daily pi", "window": 7, "min_days": 10,
                "rain_threshold_mm": 5.0, "min_loss": 0.01, "horizon_days": 30,
                "n_runs": 1000},
    "sensor": {"ranges": sensor_qa.RANGES, "p_ac_range": [-0.02, 1.05],
               "flatline_samples": {"irradiance_power": 4, "temperature": 8},
               "dropout_min_h": 1.0, "night_wm2": 5.0, "night_elevation_deg": -3.0,
               "drift_threshold_pct_per_yr": 1.0, "daytime_elevation_deg": 10.0},
    "clock": {"threshold_min": 10.0, "n_clear": 7, "clear_day_max_vi": 1.3},
    "counter_mismatch": {"period": "local month", "rel_tol": energy_check.REL_TOL,
                         "resolution_units": energy_check.RESOLUTION_UNITS},
    "temperature": "cell from back-of-module (King et al. 2004 Eq. 12), from ambient "
                   "(Eq. 11-12) where the module sensor is missing",
    "power_model": "PVWatts V5 (Dobos 2014) via analytics.power.expected_ac_power",
    "clear_sky": "pvlib Ineichen, isotropic transposition, interval midpoints",
}


# ---------------------------------------------------------------- solar geometry


def site_sun(index: pd.DatetimeIndex, site: dict, tau_h: float) -> pd.DataFrame:
    """Solar elevation [°], AOI [°] and clear-sky POA [W/m²] at interval midpoints
    (pvlib NREL SPA numpy, Ineichen clear sky, isotropic transposition)."""
    if len(index) == 0:
        return pd.DataFrame({"elev": [], "aoi": [], "poa_cs": []}, index=index)
    mid = index + pd.Timedelta(hours=tau_h / 2)
    loc = pvlib.location.Location(site["latitude_deg"], site["longitude_deg"], "UTC",
                                  site["altitude_m"])
    sp = pvlib.solarposition.get_solarposition(mid, site["latitude_deg"],
                                               site["longitude_deg"], site["altitude_m"],
                                               method="nrel_numpy")
    cs = loc.get_clearsky(mid, model="ineichen", solar_position=sp)
    poa = pvlib.irradiance.get_total_irradiance(
        site["tilt_deg"], site["azimuth_deg"], sp["apparent_zenith"], sp["azimuth"],
        cs["dni"], cs["ghi"], cs["dhi"], albedo=site.get("albedo", 0.2),
        model="isotropic")["poa_global"]
    aoi = pvlib.irradiance.aoi(site["tilt_deg"], site["azimuth_deg"], sp["apparent_zenith"],
                               sp["azimuth"])
    return pd.DataFrame({"elev": sp["elevation"].to_numpy(float), "aoi": aoi.to_numpy(float),
                         "poa_cs": np.nan_to_num(poa.to_numpy(float)).clip(min=0)},
                        index=index)


def regular_grid(t0_s: int, t1_s: int, step_s: int) -> pd.DatetimeIndex:
    """Interval starts from ``t0_s`` to ``t1_s`` (inclusive) every ``step_s`` seconds, UTC."""
    ts = np.arange(int(t0_s), int(t1_s) + 1, int(step_s), dtype=np.int64)
    return pd.DatetimeIndex(pd.to_datetime(ts, unit="s", utc=True), name="ts_utc")


# ---------------------------------------------------------------- detection in memory


def _sources_by_device(cfg_raw: dict) -> dict[str, tuple[str, str]]:
    """device_id -> (source name, timestamp zone) from the stored configuration."""
    out: dict[str, tuple[str, str]] = {}
    inv_ids = [i.get("id") for i in cfg_raw.get("inverters", [])]
    sensors = cfg_raw.get("sensors", [])
    for s in cfg_raw.get("sources", []):
        zone = (s.get("timestamp") or {}).get("zone", "local")
        name = s.get("name", "")
        for c in s.get("columns", []):
            header = c.get("header", "")
            devs = (inv_ids if "{inverter}" in header else
                    [x.get("id") for x in sensors if x.get("quantity") == c.get("quantity")]
                    if "{sensor}" in header else [c.get("device")])
            for d in devs:
                if d:
                    out.setdefault(d, (name, zone))
    return out


def _expected_power(frame: pd.DataFrame, inv: dict) -> pd.Series:
    par = SAPM_PARAMETERS.get(inv.get("mounting"), SAPM_PARAMETERS["open_rack_glass_polymer"])
    g = frame["poa_wm2"]
    tc = cell_temperature_from_module(frame["t_module_c"], g, delta_t_c=par["delta_t_c"])
    if "t_amb_c" in frame and tc.isna().any():
        wind = frame["wind_ms"].fillna(1.0) if "wind_ms" in frame else 1.0
        tc = tc.fillna(cell_temperature_sandia(g, frame["t_amb_c"], wind, a=par["a"],
                                               b=par["b"], delta_t_c=par["delta_t_c"]))
    p = expected_ac_power(g.clip(lower=0), tc, float(inv["p_dc_kwp"]),
                          float(inv["gamma_pmp_per_c"]), float(inv["p_ac_max_kw"]),
                          float(inv.get("eta_inv_nom", 0.96)))
    return pd.Series(np.asarray(p, dtype=float), index=frame.index)


def _tau_s(index: pd.DatetimeIndex, interval_s=None) -> int:
    """A typical logging interval [s] for durations (median of the recorded intervals, else
    of the spacing of all rows)."""
    if interval_s is not None and np.isfinite(np.asarray(interval_s, dtype=float)).any():
        return int(round(float(np.nanmedian(np.asarray(interval_s, dtype=float)))))
    ts = epoch_s(index)
    return int(np.median(np.diff(ts))) if ts.size > 1 else 900


def inverter_flags(inv: dict, frame: pd.DataFrame, sun: pd.DataFrame, *, std_offset_s: int,
                   site_zone: str, source: tuple[str, str] | None = None,
                   cache: dict | None = None) -> list[pd.DataFrame]:
    """Outage, clipping, clock shift and power-channel QA flags of one inverter.

    ``cache`` (a dict kept by the caller) shares the clear-sky centroids between inverters
    logged on the same timestamps."""
    dev = inv["device_id"]
    if frame.empty:
        return []
    p_max = float(inv["p_ac_max_kw"])
    s = sun.reindex(frame.index)
    tau_s = _tau_s(frame.index, frame["interval_h"].to_numpy(float) * 3600.0)
    exp = _expected_power(frame, inv)
    out = [outages.outage_flags(frame, p_max, device_id=dev, p_ac_exp_kw=exp,
                                std_offset_s=std_offset_s, sun_up=(s["elev"] > 0).to_numpy()),
           outages.clipping_flags(frame, p_max, device_id=dev, std_offset_s=std_offset_s)]
    p = frame["p_ac_kw"]
    if p.notna().any():
        out.append(sensor_qa.range_flags(p, device_id=dev, quantity="p_ac_kw", lo=-0.02 * p_max,
                                         hi=1.05 * p_max, tau_s=tau_s))
        day = (s["elev"] > 10).to_numpy()
        exclude = (outages.clipping_mask(p.to_numpy(float), p_max)
                   | (p.to_numpy(float) <= 0.01 * p_max))
        out.append(sensor_qa.flatline_flags(p, day, device_id=dev, quantity="p_ac_kw",
                                            tau_s=tau_s, exclude=exclude,
                                            sun_ref=s["poa_cs"].to_numpy()))
        tau_h = frame["interval_h"].to_numpy(float)
        cs_c = None
        if cache is not None:  # inverters on the same timestamps share clear-sky centroids
            ts = epoch_s(frame.index)
            key = (int(ts[0]), int(ts[-1]), len(ts), float(np.nansum(tau_h)))
            if key not in cache:
                cache[key] = clock.daily_centroid_min(s["poa_cs"], tau_h,
                                                      std_offset_s=std_offset_s)
            cs_c = cache[key]
        off = clock.clock_offsets(p, s["poa_cs"], tau_h, std_offset_s=std_offset_s,
                                  cs_centroid=cs_c)
        out.append(clock.clock_shift_flags(
            off, device_id=dev, std_offset_s=std_offset_s, site_zone=site_zone,
            source_name=source[0] if source else None,
            export_zone=source[1] if source else "local"))
    return out


def power_dropout_flags(inv: dict, frame: pd.DataFrame, grid_sun: pd.DataFrame) -> pd.DataFrame:
    """Missing inverter power while the sun is up (information unavailable)."""
    tau_s = _tau_s(grid_sun.index, frame["interval_h"].to_numpy(float) * 3600.0
                   if "interval_h" in frame else None)
    p = frame["p_ac_kw"] if len(frame) else pd.Series(dtype=float)
    return sensor_qa.dropout_flags(p, grid_sun["elev"] > 0, device_id=inv["device_id"],
                                   quantity="p_ac_kw", tau_s=tau_s)


def sensor_flags(sensor_id: str, quantity: str, x: pd.Series, grid_sun: pd.DataFrame, *,
                 std_offset_s: int, site_zone: str,
                 source: tuple[str, str] | None = None,
                 interval_s: np.ndarray | None = None) -> tuple[list[pd.DataFrame], pd.Series | None]:
    """QA flags of one sensor; also returns its daily clear-sky ratio (POA) for sibling checks.

    ``interval_s``: each reading's interval as recorded at ingest (None: from the spacing)."""
    tau_s = _tau_s(x.index, interval_s)
    s = grid_sun.reindex(x.index)
    out = [sensor_qa.dropout_flags(x, grid_sun["elev"] > 0, device_id=sensor_id,
                                   quantity=quantity, tau_s=tau_s)]
    if x.empty:
        return out, None
    if quantity in sensor_qa.RANGES:
        out.append(sensor_qa.range_flags(x, device_id=sensor_id, quantity=quantity, tau_s=tau_s))
    if quantity != "rain_mm":
        day = (s["elev"] > 10).to_numpy()
        out.append(sensor_qa.flatline_flags(x, day, device_id=sensor_id, quantity=quantity,
                                            tau_s=tau_s, sun_ref=s["poa_cs"].to_numpy()))
    ratio = None
    if quantity in ("poa_wm2", "ghi_wm2"):
        out.append(sensor_qa.night_irradiance_flags(x, s["elev"].to_numpy(), device_id=sensor_id,
                                                    quantity=quantity, tau_s=tau_s))
    if quantity == "poa_wm2":
        tau_h = (np.asarray(interval_s, dtype=float) / 3600.0 if interval_s is not None
                 else np.full(len(x), tau_s / 3600.0))
        clear = clock.clear_day_mask(x, s["poa_cs"], std_offset_s=std_offset_s,
                                     ratio_range=(0.7, 1.3))
        off = clock.clock_offsets(x, s["poa_cs"], tau_h, std_offset_s=std_offset_s, clear=clear)
        out.append(clock.clock_shift_flags(
            off, device_id=sensor_id, std_offset_s=std_offset_s, site_zone=site_zone,
            source_name=source[0] if source else None,
            export_zone=source[1] if source else "local"))
        ratio = sensor_qa.clear_period_ratio(x, s["poa_cs"], s["aoi"].to_numpy(), clear,
                                             std_offset_s=std_offset_s)
        out.append(sensor_qa.drift_flags(ratio, device_id=sensor_id, method="clearsky",
                                         std_offset_s=std_offset_s,
                                         extra={"reference": "pvlib Ineichen clear-sky POA"}))
    return out, ratio


def daily_flags(daily: pd.DataFrame, inverters: pd.DataFrame, *, std_offset_s: int,
                economics: dict, rain_daily: pd.Series | None = None,
                n_runs: int = 1000) -> list[pd.DataFrame]:
    """Underperformance, soiling/cleaning and fleet-power drift flags from the daily table."""
    if daily.empty:
        return []
    d = daily.copy()
    d["day"] = pd.to_datetime(d["day"])
    groups = dict(zip(inverters["device_id"], inverters["peer_group"], strict=True))
    out = [outliers.underperformance_flags(d, peer_group=groups, std_offset_s=std_offset_s,
                                           **{k: v for k, v in PARAMS["underperformance"].items()
                                              if k != "min_peers"},
                                           min_peers=min(5, max(3, len(groups))))]
    valid = d[d["day_valid"].astype(bool)]
    if len(valid):
        pi = valid.groupby("day")["pi"].median()
        h = valid.groupby("day")["h_poa_kwhm2"].median()
        e_exp = d.groupby("day")["e_exp_kwh"].sum(min_count=1)
        out.append(soiling.soiling_flags(
            pi, h, e_exp, rain_mm=rain_daily, tariff_per_kwh=economics.get("tariff_per_kwh", 0.05),
            cleaning_cost=economics.get("cleaning_cost", 0.0),
            currency=economics.get("currency", "EUR"), std_offset_s=std_offset_s,
            n_runs=n_runs))
        # fleet power: pi of the inverters on each POA sensor; a rising trend is the sensor
        for sid, invs in inverters.groupby("poa_sensor_id")["device_id"]:
            med = valid[valid["device_id"].isin(list(invs))].groupby("day")["pi"].median()
            out.append(sensor_qa.drift_flags(
                med, device_id=sid, method="fleet_power", sign_rule="rising",
                std_offset_s=std_offset_s,
                extra={"inverters": sorted(invs),
                       "reading": "median daily pi of the inverters on this sensor rises: "
                                  "modules do not improve, the sensor reads low"}))
    return out


def sibling_flags(ratios: dict[str, pd.Series], *, std_offset_s: int) -> list[pd.DataFrame]:
    """Drift of the ratio of each pair of POA sensors (on days both were clear)."""
    out = []
    for a, b in itertools.combinations(sorted(ratios), 2):
        ra, rb = ratios[a], ratios[b]
        q = (ra / rb.reindex(ra.index)).dropna()
        if q.empty:
            continue
        ta = sensor_qa.drift_rate_pct_per_yr(ra)["drift_pct_per_yr"]
        tb = sensor_qa.drift_rate_pct_per_yr(rb)["drift_pct_per_yr"]
        suspect = a if not np.isfinite(tb) or (np.isfinite(ta) and abs(ta) >= abs(tb)) else b
        out.append(sensor_qa.drift_flags(
            q, device_id=suspect, method="sibling", std_offset_s=std_offset_s,
            extra={"pair": [a, b], "ratio": f"{a} / {b}",
                   "suspect_reason": "larger clear-sky drift of the two"}))
    return out


def merge_shared_flags(flags: pd.DataFrame, *, min_devices: int = 3) -> pd.DataFrame:
    """One site-wide flag for the same dropout or clock shift on many devices at once.

    A logger that is down, or whose clock is off, shows the same span on every channel it
    records; ``min_devices`` or more identical ``sensor_dropout`` (same start and end) or
    ``clock_shift`` (same start, end and correction) flags become one flag with
    ``device_id`` None and the devices listed in the details.
    """
    if flags.empty:
        return flags
    keep = ~flags["kind"].isin(["sensor_dropout", "clock_shift"])
    out = [flags[keep]]
    rest = flags[~keep].copy()
    rest["shift"] = [d.get("shift_minutes_correction") for d in rest["details"]]
    for (_kind, _a, _b, _sh), grp in rest.groupby(["kind", "start_s", "end_s", "shift"],
                                                  dropna=False, sort=False):
        if len(grp) < min_devices:
            out.append(grp.drop(columns="shift"))
            continue
        first = grp.iloc[0]
        devices = sorted(str(d) for d in grp["device_id"])
        det = dict(first["details"])
        det["devices"] = devices
        if first["kind"] == "sensor_dropout":
            det["quantity"] = sorted({d["quantity"] for d in grp["details"]})
            det["probable_cause"] = ("logger or communication outage: every listed channel "
                                     "is missing over the same span")
        else:
            det["shift_minutes_measured_by_device"] = {
                str(dv): d["shift_minutes_measured"] for dv, d in zip(grp["device_id"],
                                                                      grp["details"],
                                                                      strict=True)}
            det["shift_minutes_measured"] = float(np.median(
                list(det["shift_minutes_measured_by_device"].values())))
            det["correction_toml"] = det["correction_toml"].replace(
                f"on {first['device_id']}:", f"on {len(devices)} devices:")
            det["probable_cause"] += "; the same shift on every listed device: one logger clock"
        row = first.drop(labels="shift").to_dict()
        row.update(device_id=None, details=det,
                   severity=max(grp["severity"], key=["info", "warning", "alarm"].index))
        out.append(pd.DataFrame([row]))
    return pd.concat(out, ignore_index=True)


def counter_flags(inv: dict, frame: pd.DataFrame, counter, *, std_offset_s: int) -> pd.DataFrame:
    """Monthly cross-check of an inverter's energy counter against its integrated AC power
    (:mod:`analytics.energy_check`); ``counter`` is ``(ts_s, reading_kwh, interval_s)``."""
    ts, v, iv = counter
    if frame.empty or not len(ts) or not frame["p_ac_kw"].notna().any():
        return flag_frame([])
    res = counter_resolution(np.diff(v)) or 0.0
    c_day = energy_check.counter_daily_energy(np.asarray(ts) + np.asarray(iv).astype(np.int64),
                                              v, std_offset_s=std_offset_s)
    p_day = energy_check.power_daily_energy(epoch_s(frame.index), frame["p_ac_kw"].to_numpy(float),
                                            frame["interval_h"].to_numpy(float),
                                            std_offset_s=std_offset_s)
    check = energy_check.monthly_crosscheck(c_day, p_day, resolution_kwh=res)
    return energy_check.counter_mismatch_flags(check, device_id=inv["device_id"],
                                               std_offset_s=std_offset_s, resolution_kwh=res)


def compute_flags(site: dict, inverters: pd.DataFrame, frames, sensors, daily: pd.DataFrame, *,
                  economics: dict | None = None, sources: dict | None = None,
                  progress: Progress | None = None, n_runs: int = 1000,
                  counters: dict | None = None) -> pd.DataFrame:
    """Every flag of a site from data in memory.

    Parameters
    ----------
    site : dict
        ``timezone``, ``latitude_deg``, ``longitude_deg``, ``altitude_m``, ``tilt_deg``,
        ``azimuth_deg``, ``albedo``.
    inverters : DataFrame
        Inverter rows (``device_id``, ``p_dc_kwp``, ``p_ac_max_kw``, ``gamma_pmp_per_c``,
        ``eta_inv_nom``, ``mounting``, ``poa_sensor_id``, ``peer_group``).
    frames : iterable of (inverter row dict, interval frame)
        As :func:`db.timeseries.inverter_frames` yields them.
    sensors : list of (sensor_id, quantity, Series) or (sensor_id, quantity, Series, interval_s)
        Each sensor channel on its own timestamps (index ``ts_utc``), optionally with each
        reading's interval [s] as recorded at ingest (else inferred from the spacing).
    daily : DataFrame
        The daily table (:func:`db.daily.daily_table`).
    counters : dict, optional
        ``{inverter id: (ts_s, counter_kwh, interval_s)}``: energy-counter readings, checked
        month by month against integrated AC power (:func:`counter_flags`).

    Returns
    -------
    DataFrame with :data:`analytics.outliers.FLAG_COLUMNS`.
    """
    economics = economics or {}
    sources = sources or {}
    off_s = int(round(standard_utc_offset_h(site["timezone"]) * 3600))
    zone = site["timezone"]
    sensors = list(sensors)
    frames = iter(frames)
    n_total = len(inverters) + len(sensors)
    done = 0
    parts: list[pd.DataFrame] = []
    sun_cache: dict[int, pd.DataFrame] = {}  # interval [s] -> sun at those interval starts
    cs_cache: dict[tuple, pd.Series] = {}

    def sun_at(index: pd.DatetimeIndex, interval_s: np.ndarray) -> pd.DataFrame:
        """Sun at each row's own interval midpoint; computed once per (timestamp, interval)."""
        cols = ["elev", "aoi", "poa_cs"]
        out = pd.DataFrame(np.full((len(index), 3), np.nan), index=index, columns=cols)
        if len(index) == 0:
            return out
        iv = np.round(np.asarray(interval_s, dtype=float)).astype(np.int64)
        for u in np.unique(iv):
            m = iv == u
            idx = index[m] if not m.all() else index
            have = sun_cache.get(int(u))
            missing = idx if have is None else idx.difference(have.index)
            if len(missing):
                new = site_sun(missing, site, u / 3600.0)
                have = new if have is None else pd.concat([have, new]).sort_index()
                sun_cache[int(u)] = have
            vals = have.reindex(idx)[cols].to_numpy() if not (
                len(have) == len(idx) and have.index.equals(idx)) else have[cols].to_numpy()
            out.iloc[np.flatnonzero(m)] = vals
        return out

    def expected_grid(x: pd.Series, iv: np.ndarray) -> tuple[pd.DatetimeIndex, np.ndarray]:
        """The device's expected timestamps: its readings, the intervals missing between them
        and out to the site's span, stepping by each neighbouring reading's interval."""
        ts, step = fill_gaps(epoch_s(x.index), iv, span[0], span[1])
        return pd.DatetimeIndex(pd.to_datetime(ts, unit="s", utc=True), name="ts_utc"), step

    def sensor_intervals(entry) -> np.ndarray:
        x = entry[2]
        given = entry[3] if len(entry) > 3 and entry[3] is not None else np.full(len(x), np.nan)
        return fill_unknown_intervals(epoch_s(x.sort_index().index), given)

    # span of the site's sensor data: each sensor's dropouts are judged over it
    spans = [(int(epoch_s(e[2].index).min()), int(epoch_s(e[2].index).max()
                                                   + sensor_intervals(e)[-1]))
             for e in sensors if len(e[2]) > 1]
    span = (min(a for a, _b in spans), max(b for _a, b in spans)) if spans else (None, None)
    ratios: dict[str, pd.Series] = {}
    rain_parts: list[pd.Series] = []
    for entry in sensors:
        sid, q, x = entry[:3]
        iv = sensor_intervals(entry)
        if not x.index.is_monotonic_increasing:
            order = np.argsort(epoch_s(x.index), kind="stable")
            x = x.iloc[order]
        if len(x):
            g_idx, g_iv = expected_grid(x, iv)
            gs = sun_at(g_idx, g_iv)
            fl, ratio = sensor_flags(sid, q, x, gs, std_offset_s=off_s, site_zone=zone,
                                     source=sources.get(sid), interval_s=iv)
            parts += fl
            if ratio is not None and len(ratio):
                ratios[sid] = ratio
            if q == "rain_mm":
                day = (epoch_s(x.index) + off_s) // 86400
                r = x.groupby(day).sum()
                r.index = pd.to_datetime(r.index.to_numpy() * 86400, unit="s")
                rain_parts.append(r)
        done += 1
        if progress:
            progress(done, n_total)
    parts += sibling_flags(ratios, std_offset_s=off_s)
    # several rain gauges: the daily mean of those that reported
    rain_daily = pd.concat(rain_parts, axis=1).mean(axis=1) if rain_parts else None
    for inv, frame in frames:
        if len(frame):
            gs = sun_at(frame.index, frame["interval_h"].to_numpy(float) * 3600.0)
            parts += inverter_flags(inv, frame, gs, std_offset_s=off_s, site_zone=zone,
                                    source=sources.get(inv["device_id"]), cache=cs_cache)
            parts.append(power_dropout_flags(inv, frame, gs))
            if counters and inv["device_id"] in counters:
                parts.append(counter_flags(inv, frame, counters[inv["device_id"]],
                                           std_offset_s=off_s))
        done += 1
        if progress:
            progress(done, n_total)
    parts += daily_flags(daily, inverters, std_offset_s=off_s, economics=economics,
                         rain_daily=rain_daily, n_runs=n_runs)
    parts = [p for p in parts if len(p)]
    if not parts:
        return flag_frame([])
    out = merge_shared_flags(pd.concat(parts, ignore_index=True)[list(FLAG_COLUMNS)])
    return out.sort_values(["start_s", "kind", "device_id"], na_position="first",
                           kind="stable").reset_index(drop=True)


# ---------------------------------------------------------------- the job


def _sensor_rows(conn: sa.Connection, site_id: str) -> list[tuple[str, str]]:
    d, s = schema.device, schema.sensor
    q = (sa.select(d.c.device_id, s.c.quantity).join(s, s.c.device_pk == d.c.device_pk)
         .where(d.c.site_id == site_id).order_by(d.c.device_id))
    return [(r.device_id, r.quantity) for r in conn.execute(q)]


def _inverter_rows(conn: sa.Connection, site_id: str) -> pd.DataFrame:
    d, i = schema.device, schema.inverter
    q = (sa.select(d.c.device_id, i).join(i, i.c.device_pk == d.c.device_pk)
         .where(d.c.site_id == site_id).order_by(d.c.device_id))
    rows = [dict(r) for r in conn.execute(q).mappings()]
    return pd.DataFrame(rows, columns=["device_id", *(c.name for c in i.columns)])


def run_flags(engine: sa.Engine, site_id: str, progress: Progress | None = None) -> int:
    """Recompute every flag of ``site_id`` and replace the stored ones; return how many.

    Records a ``computation`` row (kind ``flags``, ``heliaudit.__version__``, the detector
    parameters as JSON) and stamps the flags with its id. Reads the daily table, so run it
    after the daily job. Raises :class:`SiteNotFoundError` for an unknown site.
    """
    with engine.connect() as conn:
        site = site_row(conn, site_id)
        inverters = _inverter_rows(conn, site_id)
        sensor_rows = _sensor_rows(conn, site_id)
        channels = site_channels(conn, site_id)
    try:
        cfg = tomllib.loads(site.get("config_toml") or "")
    except tomllib.TOMLDecodeError:
        cfg = {}
    econ = cfg.get("economics", {}) if isinstance(cfg.get("economics", {}), dict) else {}
    economics = {"tariff_per_kwh": float(econ.get("tariff_per_kwh", 0.05)),
                 "cleaning_cost": float(econ.get("cleaning_cost", 0.0)),
                 "currency": str(econ.get("currency", "EUR"))}
    params = {**PARAMS, "economics": economics, "timezone": site["timezone"]}
    with engine.begin() as conn:
        comp_id = begin_computation(conn, site_id, "flags", params,
                                    software_version=heliaudit.__version__)
    daily = daily_table(engine, site_id)
    sensors = []
    with engine.connect() as conn:
        inst = instant_channels(conn, site_id)
        for sid, q in sensor_rows:
            ch = channels.get((sid, q))
            if ch is None:
                continue
            ts, v, iv = read_channel(conn, ch, with_interval=True)
            iv = fill_unknown_intervals(ts, iv)
            if ch in inst:  # samples: QA runs on the samples, durations by their spacing
                iv = np.append(np.diff(ts).astype(float), iv[-1:]) if ts.size else iv
            idx = pd.DatetimeIndex(pd.to_datetime(ts, unit="s", utc=True), name="ts_utc")
            sensors.append((sid, q, pd.Series(v, index=idx, name=q), iv))
    counters = {}
    with engine.connect() as conn:
        for dev in inverters["device_id"]:
            ch = channels.get((dev, "e_ac_total_kwh"))
            if ch is not None:
                ts, v, iv = read_channel(conn, ch, with_interval=True)
                if ts.size:
                    counters[dev] = (ts, v, fill_unknown_intervals(ts, iv))
    flags = compute_flags(site, inverters, inverter_frames(engine, site_id), sensors, daily,
                          economics=economics, sources=_sources_by_device(cfg),
                          progress=progress, counters=counters)
    n = write_flags(engine, site_id, flags, comp_id)
    with engine.begin() as conn:
        finish_computation(conn, comp_id)
    return n
