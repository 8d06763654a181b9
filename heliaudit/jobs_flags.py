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

import datetime as dt
import itertools
import json
import tomllib
from collections.abc import Callable

import numpy as np
import pandas as pd
import pvlib
import sqlalchemy as sa

import heliaudit
from analytics import clock, energy_check, outages, outliers, sensor_qa, soiling
from analytics.availability import stopped_reporting_flags
from analytics.daily import standard_utc_offset_h
from analytics.outliers import FLAG_COLUMNS, epoch_s, flag_frame
from analytics.power import expected_ac_power
from analytics.temperature import (
    SAPM_PARAMETERS,
    cell_temperature_from_module,
    cell_temperature_sandia,
    module_temperature_sandia,
)
from db.computations import (
    batches_after,
    begin_computation,
    finish_computation,
    latest_batch_id,
)
from db.dailypack import read_daily_inputs, write_daily_pack
from db.degradation import last_computation
from db.flags import read_flag_days, read_flag_parts, read_inverter_days, store_flags
from db.jsontext import to_json
from db.queries import sensor_quantities
from db.registry import SiteNotFoundError, site_row  # noqa: F401 (re-exported)
from db.timeseries import (
    fill_gaps,
    fill_unknown_intervals,
    instant_channels,
    inverter_frames,
    read_channel,
    site_channels,
    site_inverters,
)
from ingest.counters import counter_resolution

Progress = Callable[[int, int], None]  # progress(done, total), in devices

#: Detector settings recorded with each computation (defaults are common practice unless a docstring in analytics/ names a source).
PARAMS = {
    "underperformance": {"z_threshold": -3.0, "min_deficit": 0.04, "min_peers": 5,
                         "window": 5, "k_required": 3, "escalate_days": 14,
                         "clear_days": 3, "own_min_pi": 0.80, "own_history_deficit": 0.10,
                         "history_days": 90, "history_lag_days": 30},
    "outage": {"min_poa_wm2": 50.0, "max_frac": 0.01, "min_duration_h": 0.5,
               "warning_h": 1.0, "alarm_h": 4.0, "min_elevation_deg": 10.0,
               "startup_frac": 0.01, "min_expected_multiple": 5.0, "edge_minutes": 30.0},
    "site_outage": {"min_share": 0.5, "min_inverters": 2, "max_start_diff_s": 7200},
    "power_limit": {"min_poa_wm2": 600.0, "tol_frac": 0.003, "min_share": 0.1,
                    "max_level_frac": 0.97},
    "stopped": {"min_days": 3.0},
    "input_mismatch": {"min_deficit": 0.05, "min_yield_kw_per_kwp": 0.1, "window": 5,
                       "k_required": 3, "runs_when": "an inverter has >= 2 loaded inputs and "
                       "its [[inverters]] arrays give each input's id and p_dc_kwp"},
    "clipping": {"frac": 0.98, "summary": "per local month; one site flag when >= 2 "
                                          "inverters clip that month"},
    "soiling": {"input": "site median of each inverter's daily pi over unclipped intervals "
                         "(POA >= 200 W/m2, expected < 95 % of rating, 1-98 % of rating "
                         "measured) on the daily table's valid days, each inverter divided "
                         "by its median ratio to the site median (days with >= 2 inverters)",
                "window": 7, "min_days": 7, "min_rate_pct_per_day": 0.04,
                "max_line_vs_step": 1.25, "clear_share": 0.5, "min_clear_days": 3,
                "clear_day": "the clock check's clear days (power profile variability "
                             "index <= 1.3) on at least clear_share of the inverters",
                "rain_threshold_mm": 5.0, "min_loss": 0.01, "horizon_days": 30,
                "n_runs": 1000},
    "sensor": {"ranges": sensor_qa.RANGES, "p_ac_range": [-0.02, 1.05],
               "flatline_samples": {"irradiance_power": 4, "temperature": 8},
               "p_ac_flat_min_frac": 0.05, "p_ac_flat_limit_band_frac": 0.01,
               "dropout_min_h": 1.0, "gap_flag_min_silence_h": 6.0,
               "night_wm2": 5.0, "night_elevation_deg": -3.0,
               "drift_threshold_pct_per_yr": 1.0, "daytime_elevation_deg": 10.0,
               "validity": {"day_elevation_deg": 15.0, "night_elevation_deg": -12.0,
                            "night_max_wm2": 5.0, "stuck_tol_wm2": 0.5,
                            "low_vs_power_factor": 0.25, "high_vs_power_min_pr": 0.4,
                            "full_sun_wm2": 600.0,
                            "colder_than_ambient_margin_c": 2.0, "model_margin_c": 20.0,
                            "ambient_night_max_c": 4.0, "ambient_day_max_c": 3.0}},
    "clock": {"threshold_min": 10.0, "n_clear": 7, "clear_day_max_vi": 1.3,
              "agreement": "shift on >= 2 devices (levels within 15 min), or the only device",
              "geometry": "clear-sky POA on each array's own plane"},
    "counter_mismatch": {"period": "local month", "rel_tol": energy_check.REL_TOL,
                         "resolution_units": energy_check.RESOLUTION_UNITS},
    "temperature": "cell from back-of-module (King et al. 2004 Eq. 12), from ambient "
                   "(Eq. 11-12) where the module sensor is missing",
    "power_model": "PVWatts V5 (Dobos 2014) via analytics.power.expected_ac_power",
    "clear_sky": "pvlib Ineichen, isotropic transposition, interval midpoints",
}
#: A data gap is a flag from a silence of 6 h (a quarter of a day, most of a winter day's
#: production) with >= 1 h missing; shorter gaps are routine communication losses whose
#: effect is in the daily table's coverage and day_valid (issue #14: 50 of 120 gap flags
#: on generated fleets were gaps of 1-6 h, information nobody acts on; common practice).
GAP_MIN_SILENCE_H = PARAMS["sensor"]["gap_flag_min_silence_h"]


# ---------------------------------------------------------------- solar geometry


def site_sun(index: pd.DatetimeIndex, site: dict, tau_h: float,
             plane=None) -> pd.DataFrame:
    """Solar elevation [°], AOI [°] and clear-sky POA [W/m²] at interval midpoints
    (pvlib NREL SPA numpy, Ineichen clear sky, isotropic transposition).

    ``plane``: None for the site's plane; ``(tilt_deg, azimuth_deg)`` of a fixed plane; or a
    device's planes from the site model as ``((Plane, p_dc_kwp), ...)``
    (:func:`device_planes`): a single-axis tracker turned as :func:`pvlib.tracking.singleaxis`
    turns it (Marion & Dobos 2013, :func:`analytics.irradiance.plane_orientation`), several
    arrays capacity-weighted (the AOI is the largest array's)."""
    if len(index) == 0:
        return pd.DataFrame({"elev": [], "aoi": [], "poa_cs": []}, index=index)
    return sun_on_plane(sun_base(index, site, tau_h), site, plane)


def sun_base(index: pd.DatetimeIndex, site: dict, tau_h: float) -> pd.DataFrame:
    """Sun position (pvlib NREL SPA numpy) and Ineichen clear sky at interval midpoints: the
    part of :func:`site_sun` that does not depend on the plane."""
    mid = index + pd.Timedelta(hours=tau_h / 2)
    loc = pvlib.location.Location(site["latitude_deg"], site["longitude_deg"], "UTC",
                                  site["altitude_m"])
    sp = pvlib.solarposition.get_solarposition(mid, site["latitude_deg"],
                                               site["longitude_deg"], site["altitude_m"],
                                               method="nrel_numpy")
    cs = loc.get_clearsky(mid, model="ineichen", solar_position=sp)
    return pd.DataFrame({"apparent_zenith": sp["apparent_zenith"].to_numpy(float),
                         "azimuth": sp["azimuth"].to_numpy(float),
                         "elevation": sp["elevation"].to_numpy(float),
                         "dni": cs["dni"].to_numpy(float), "ghi": cs["ghi"].to_numpy(float),
                         "dhi": cs["dhi"].to_numpy(float)}, index=index)


def sun_on_plane(sp: pd.DataFrame, site: dict, plane=None) -> pd.DataFrame:
    """:func:`site_sun` from the plane-independent part :func:`sun_base`."""
    index = sp.index
    if len(index) == 0:
        return pd.DataFrame({"elev": [], "aoi": [], "poa_cs": []}, index=index)
    if plane is None or not isinstance(plane[0], tuple):
        tilt, azim = plane if plane is not None else (site["tilt_deg"], site["azimuth_deg"])
        surfaces = [(tilt, azim, 1.0)]
    else:
        from analytics.irradiance import plane_orientation

        geo = pd.DataFrame({"apparent_zenith_deg": sp["apparent_zenith"].to_numpy(float),
                            "sun_azimuth_deg": sp["azimuth"].to_numpy(float)}, index=index)
        surfaces = [(*plane_orientation(pl, geo), float(kwp)) for pl, kwp in plane]
    poa = np.zeros(len(index))
    for tilt, azim, kwp in surfaces:
        g = pvlib.irradiance.get_total_irradiance(
            tilt, azim, sp["apparent_zenith"].to_numpy(float), sp["azimuth"].to_numpy(float),
            sp["dni"].to_numpy(float), sp["ghi"].to_numpy(float), sp["dhi"].to_numpy(float),
            albedo=site.get("albedo", 0.2), model="isotropic")["poa_global"]
        poa += kwp * np.nan_to_num(np.asarray(g, dtype=float))
    poa /= sum(k for _t, _a, k in surfaces)
    tilt, azim, _k = max(surfaces, key=lambda x: x[2])
    aoi = pvlib.irradiance.aoi(tilt, azim, sp["apparent_zenith"].to_numpy(float),
                               sp["azimuth"].to_numpy(float))
    return pd.DataFrame({"elev": sp["elevation"].to_numpy(float),
                         "aoi": np.asarray(aoi, dtype=float), "poa_cs": poa.clip(min=0)},
                        index=index)


class SunAt:
    """Sun at each row's own interval midpoint, on the site's plane or a device's plane
    (:func:`sun_base`, :func:`sun_on_plane`), computed once per (timestamp, interval, plane)
    and kept for the run: ``sun_at(index, interval_s, plane)`` gives a frame with ``elev``,
    ``aoi``, ``poa_cs`` and ``interval_s``. Each timestamp's values depend on it alone, so a
    window gets the same sun as the whole history at the same timestamps."""

    _COLS = ["elev", "aoi", "poa_cs"]

    def __init__(self, site: dict):
        self.site = site
        self._base: dict[int, pd.DataFrame] = {}  # interval [s] -> sun position, clear sky
        self._sun: dict[tuple, pd.DataFrame] = {}  # (interval [s], plane) -> sun
        self._last: dict = {}  # plane -> (index, intervals, sun) of the last call

    def _base_at(self, idx: pd.DatetimeIndex, u: int) -> pd.DataFrame:
        have = self._base.get(u)
        missing = idx if have is None else idx.difference(have.index)
        if len(missing):
            new = sun_base(missing, self.site, u / 3600.0)
            have = new if have is None else pd.concat([have, new]).sort_index()
            self._base[u] = have
        return have if have.index.equals(idx) else have.reindex(idx)

    def __call__(self, index: pd.DatetimeIndex, interval_s, plane=None) -> pd.DataFrame:
        cols = self._COLS
        out = pd.DataFrame(np.full((len(index), 3), np.nan), index=index, columns=cols)
        if len(index) == 0:
            return out
        if interval_s is None:
            interval_s = np.full(len(index), float(_tau_s(index)))
        iv = np.round(np.asarray(interval_s, dtype=float)).astype(np.int64)
        last = self._last.get(plane)  # the inverters of a site usually share one grid
        if last is not None and np.array_equal(last[1], iv) and last[0].equals(index):
            return last[2].copy()
        out["interval_s"] = iv.astype(float)
        for u in np.unique(iv):
            m = iv == u
            idx = index[m] if not m.all() else index
            have = self._sun.get((int(u), plane))
            missing = idx if have is None else idx.difference(have.index)
            if len(missing):
                new = sun_on_plane(self._base_at(missing, int(u)), self.site, plane)
                have = new if have is None else pd.concat([have, new]).sort_index()
                self._sun[(int(u), plane)] = have
            vals = have.reindex(idx)[cols].to_numpy() if not (
                len(have) == len(idx) and have.index.equals(idx)) else have[cols].to_numpy()
            out.iloc[np.flatnonzero(m), :3] = vals
        self._last[plane] = (index, iv, out.copy())
        return out


def sensor_intervals(entry) -> np.ndarray:
    """A sensor entry's ``(id, quantity, Series[, interval_s])`` interval per reading in
    time order: the recorded one, else from the spacing of its timestamps."""
    x = entry[2]
    given = entry[3] if len(entry) > 3 and entry[3] is not None else np.full(len(x), np.nan)
    return fill_unknown_intervals(epoch_s(x.sort_index().index), given)


def sensor_sun_for(sensors, planes: dict, sun_at: SunAt) -> tuple[dict, Callable]:
    """Each sensor's intervals (recorded, else from its spacing) and ``sensor_sun(index,
    sensor id)``: the sun at its readings' own interval midpoints on its own plane
    (``planes``, :func:`device_planes`). The flags job and the daily job's sibling check
    both take the sun this way, so a sensor's clear-day ratios are the same in both."""
    iv_of = {e[0]: sensor_intervals(e) for e in sensors}

    def sensor_sun(idx: pd.DatetimeIndex, sid: str | None = None) -> pd.DataFrame:
        iv = iv_of.get(sid)
        return sun_at(idx, iv if iv is not None and len(iv) == len(idx) else None,
                      planes.get(sid))

    return iv_of, sensor_sun


def device_planes(config_toml: str | None, site: dict) -> dict[str, tuple]:
    """Each device's own planes from the site model (#11), where they differ from the site's:
    inverter id -> ``((Plane, p_dc_kwp), ...)`` of its arrays (trackers included), irradiance
    sensor id -> ``((Plane, 1.0),)`` (a horizontal sensor: the horizontal plane). Devices in
    the site plane, and every device when the stored configuration no longer parses, are
    left out (None: the site plane) — as :func:`site_sun` takes them."""
    from ingest.config import ConfigError, parse_site_config
    from ingest.site_model import HORIZONTAL, Plane

    try:
        cfg = parse_site_config(config_toml or "", "<stored configuration>")
    except (ConfigError, ValueError):
        return {}
    site_plane = Plane(tilt_deg=float(site["tilt_deg"]), azimuth_deg=float(site["azimuth_deg"]))
    out: dict[str, tuple] = {}
    for inv in cfg.inverters:
        if inv.arrays and not all(a.plane.same_as(site_plane) for a in inv.arrays):
            planes = {a.plane for a in inv.arrays}
            # one plane: kWp does not matter (the key is shared with that plane's sensors)
            out[str(inv.id)] = (((planes.pop(), 1.0),) if len(planes) == 1 else
                                tuple((a.plane, float(a.p_dc_kwp)) for a in inv.arrays))
    for sen in cfg.sensors:
        pl = HORIZONTAL if sen.quantity == "ghi_wm2" else sen.plane
        if pl is not None and not pl.same_as(site_plane):
            out[str(sen.id)] = ((pl, 1.0),)
    return out


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


def _export_zone(source: tuple[str, str] | None, site_zone: str) -> str:
    """The zone an export's timestamps are written in ('local' is the site's zone)."""
    z = source[1] if source else "local"
    return site_zone if z in (None, "", "local") else z


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


def _grid_tau_s(grid_sun: pd.DataFrame, interval_s=None):
    """Each row's interval [s] of a sun frame from ``sun_at`` (its ``interval_s`` column),
    else one typical interval (:func:`_tau_s`)."""
    if "interval_s" in grid_sun and len(grid_sun):
        return grid_sun["interval_s"].to_numpy(float)
    if interval_s is not None and len(interval_s) == len(grid_sun):
        return np.asarray(interval_s, dtype=float)
    return _tau_s(grid_sun.index, interval_s)


def inverter_plane(inv: dict, site: dict) -> tuple[float, float] | None:
    """The array plane (tilt_deg, azimuth_deg) of an inverter when the configuration gives
    one that differs from the site's; None means the site plane."""
    t, a = inv.get("tilt_deg"), inv.get("azimuth_deg")
    try:
        t, a = float(t), float(a)
    except (TypeError, ValueError):
        return None
    if not (np.isfinite(t) and np.isfinite(a)):
        return None
    if abs(t - float(site["tilt_deg"])) < 0.5 and abs(a - float(site["azimuth_deg"])) < 0.5:
        return None
    return (t, a)


def mask_invalid_sensor_days(frame: pd.DataFrame, inv: dict, invalid_days: dict,
                             std_offset_s: int) -> pd.DataFrame:
    """The frame with the POA / module-temperature readings of days on which that sensor
    was judged faulty set to NaN (they give no evidence for any diagnosis)."""
    out = frame
    for col, key in (("poa_wm2", "poa_sensor_id"), ("t_module_c", "t_module_sensor_id"),
                     ("t_amb_c", "t_amb_sensor_id")):
        days = invalid_days.get(inv.get(key))
        if days is None or col not in frame or days.empty or days["valid"].all():
            continue
        bad = sensor_qa.invalid_interval_mask(frame.index, days, std_offset_s=std_offset_s)
        if bad.any():
            if out is frame:
                out = frame.copy()
            out.loc[bad, col] = np.nan
    return out


def inverter_flags(inv: dict, frame: pd.DataFrame, sun: pd.DataFrame, *, std_offset_s: int,
                   site_zone: str, source: tuple[str, str] | None = None,
                   cache: dict | None = None, withheld: dict | None = None,
                   soiling_pi: dict | None = None,
                   clock_days: dict | None = None, clock_series: dict | None = None,
                   power_limit: bool = True) -> list[pd.DataFrame]:
    """Outage, power limit, clipping, clock shift and power-channel QA flags of one inverter.

    ``sun`` is on the inverter's own plane (clock against the array's own geometry).
    ``cache`` (a dict kept by the caller) shares the clear-sky centroids between inverters
    logged on the same timestamps and plane; ``withheld`` (a dict) receives the daily
    energy withheld by a power limit, by device. With ``clock_days`` (a dict) the daily
    clock offsets are put there instead of being turned into flags (the caller does that
    over the whole history: :func:`inverter_clock_flags`), and with ``clock_series`` (a dict)
    the interval data that function needs to date a fix. ``power_limit`` False skips the
    power-limit check (its level needs the whole history; incremental runs, issue #16)."""
    dev = inv["device_id"]
    if frame.empty:
        return []
    p_max = float(inv["p_ac_max_kw"])
    s = sun.reindex(frame.index)
    tau_s = frame["interval_h"].to_numpy(float) * 3600.0  # each reading's own (#11)
    exp = _expected_power(frame, inv)
    o = PARAMS["outage"]
    out = [outages.outage_flags(frame, p_max, device_id=dev, p_ac_exp_kw=exp,
                                std_offset_s=std_offset_s,
                                solar_elevation_deg=s["elev"].to_numpy(),
                                min_poa_wm2=o["min_poa_wm2"], max_frac=o["max_frac"],
                                min_duration_h=o["min_duration_h"],
                                min_elevation_deg=o["min_elevation_deg"],
                                startup_frac=o["startup_frac"],
                                min_expected_multiple=o["min_expected_multiple"],
                                edge_minutes=o["edge_minutes"]),
           outages.clipping_flags(frame, p_max, device_id=dev, std_offset_s=std_offset_s)]
    lim, per_day = (outages.power_limit_flags(frame, p_max, device_id=dev, p_ac_exp_kw=exp,
                                              std_offset_s=std_offset_s) if power_limit
                    else (flag_frame([]), None))
    out.append(lim)
    p = frame["p_ac_kw"]
    pv = p.to_numpy(float)
    limited = np.zeros(len(p), dtype=bool)
    if len(lim):
        limited = outages.power_limit_mask(pv, float(lim["details"].iloc[0]["level_kw"]), p_max)
        if withheld is not None and per_day is not None:
            withheld[dev] = per_day
    if soiling_pi is not None:
        soiling_pi[dev] = unclipped_daily_pi(frame, exp, p_max, limited, std_offset_s)
    if p.notna().any():
        out.append(sensor_qa.range_flags(p, device_id=dev, quantity="p_ac_kw", lo=-0.02 * p_max,
                                         hi=1.05 * p_max, tau_s=tau_s))
        day = (s["elev"] > 10).to_numpy()
        # at its limit, at zero or in dim light (a few W of a waking inverter) power may be
        # flat without a stuck reading (issue #14: 137 "flatlines" at 12-24 W)
        near_limit = limited
        if len(lim):  # the limit's own noise band: a few samples near it are not stuck
            near_limit = outages.power_limit_mask(
                pv, float(lim["details"].iloc[0]["level_kw"]), p_max,
                tol_frac=PARAMS["sensor"]["p_ac_flat_limit_band_frac"])
        exclude = (outages.clipping_mask(pv, p_max) | limited | near_limit
                   | (pv <= PARAMS["sensor"]["p_ac_flat_min_frac"] * p_max))
        out.append(sensor_qa.flatline_flags(p, day, device_id=dev, quantity="p_ac_kw",
                                            tau_s=tau_s, exclude=exclude,
                                            sun_ref=s["poa_cs"].to_numpy()))
        tau_h = frame["interval_h"].to_numpy(float)
        cs_c = None
        if cache is not None:  # inverters on the same timestamps share clear-sky centroids
            ts = epoch_s(frame.index)
            key = (int(ts[0]), int(ts[-1]), len(ts), float(np.nansum(tau_h)),
                   float(s["poa_cs"].iloc[len(s) // 2]) if len(s) else 0.0)
            if key not in cache:
                cache[key] = clock.daily_centroid_min(s["poa_cs"], tau_h,
                                                      std_offset_s=std_offset_s)
            cs_c = cache[key]
        off = clock.clock_offsets(p, s["poa_cs"], tau_h, std_offset_s=std_offset_s,
                                  cs_centroid=cs_c)
        if clock_days is not None:
            clock_days[dev] = off
            if clock_series is not None:
                clock_series[dev] = (p, s["poa_cs"], tau_h)
            return out
        out += inverter_clock_flags({dev: off}, std_offset_s=std_offset_s, site_zone=site_zone,
                                    sources={dev: source} if source else {},
                                    series={dev: (p, s["poa_cs"], tau_h)})
    return out


def inverter_clock_flags(clock_days: dict[str, pd.DataFrame], *, std_offset_s: int,
                         site_zone: str, sources: dict, series: dict | None = None
                         ) -> list[pd.DataFrame]:
    """Clock-shift flags of each inverter from its daily offsets over the whole history
    (:func:`analytics.clock.clock_shift_flags`). ``series`` (device -> power, clear-sky POA,
    interval [h]) lets :func:`analytics.clock.refine_fix_moment` find the moment of a fix
    during the day where the interval data of that day were read in this run (an
    incremental run reads only its window: an older fix keeps its date-only end)."""
    out = []
    for dev, off in clock_days.items():
        source = sources.get(dev)
        fl = clock.clock_shift_flags(
            off, device_id=dev, std_offset_s=std_offset_s, site_zone=site_zone,
            source_name=source[0] if source else None,
            export_zone=source[1] if source else "local")
        if series is not None and dev in series:
            p, cs, tau_h = series[dev]
            fl = clock.refine_fix_moment(fl, p, cs, tau_h, std_offset_s=std_offset_s,
                                         zone=_export_zone(source, site_zone))
        out.append(fl)
    return out


def unclipped_daily_pi(frame: pd.DataFrame, exp: pd.Series, p_max: float, limited,
                       std_offset_s: int, *, min_poa_wm2: float = 200.0,
                       max_exp_frac: float = 0.95) -> pd.Series:
    """Daily performance index Σ P τ / Σ P_exp τ over the intervals where neither the
    inverter nor the model is near the AC limit, for the soiling estimate.

    An inverter at its limit hides soiling (the DC surplus absorbs it) and a model clipped at
    the rating compresses the ratio, so soiling read from those intervals comes out low
    (issue #14: summer soiling rates 30 % low on an arid site with DC/AC ≈ 1.3). Intervals:
    plausible POA ≥ ``min_poa_wm2`` (Deceglie et al. 2018 filter their inputs likewise,
    from memory), expected power below ``max_exp_frac`` of the rating, measured power above
    1 % (no outage) and below the clipping and power-limit levels.
    """
    p = frame["p_ac_kw"].to_numpy(float)
    e = exp.to_numpy(float)
    g = frame["poa_wm2"].to_numpy(float)
    tau = frame["interval_h"].to_numpy(float)
    with np.errstate(invalid="ignore"):
        ok = ((g >= min_poa_wm2) & (e < max_exp_frac * p_max) & (p > 0.01 * p_max)
              & (p < 0.98 * p_max) & ~np.asarray(limited, dtype=bool) & np.isfinite(e))
    day = (epoch_s(frame.index) + int(std_offset_s)) // 86400
    num = np.bincount(day[ok] - day.min(), weights=(p * tau)[ok]) if ok.any() else np.zeros(0)
    den = np.bincount(day[ok] - day.min(), weights=(e * tau)[ok]) if ok.any() else np.zeros(0)
    idx = pd.to_datetime((np.arange(num.size) + day.min()) * 86400, unit="s")
    with np.errstate(invalid="ignore", divide="ignore"):
        r = np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)
    return pd.Series(r, index=idx)


def power_dropout_flags(inv: dict, frame: pd.DataFrame, grid_sun: pd.DataFrame) -> pd.DataFrame:
    """Missing inverter power while the sun is well up (information unavailable); night
    and a sleeping inverter at low sun are not dropouts."""
    tau_s = _grid_tau_s(grid_sun, frame["interval_h"].to_numpy(float) * 3600.0
                        if "interval_h" in frame else None)
    p = frame["p_ac_kw"] if len(frame) else pd.Series(dtype=float)
    day = grid_sun["elev"] >= PARAMS["outage"]["min_elevation_deg"]
    fl = sensor_qa.dropout_flags(p, day, device_id=inv["device_id"], quantity="p_ac_kw",
                                 tau_s=tau_s, min_silence_h=GAP_MIN_SILENCE_H)
    # missing power is information unavailable (IEC TS 63019), not a faulty sensor
    fl["kind"] = "data_dropout"
    return fl


#: The daily-table columns the flags job reads (issue #16: a third of the table's columns, a
#: third of the time of reading a long history); a detector using another one adds it here.
DAILY_COLUMNS_USED = ("day_valid", "pi", "e_exp_kwh", "h_poa_kwhm2", "e_ac_kwh",
                      "e_exp_valid_kwh", "avail_time", "n_intervals")

#: A sensor's flags from runs of its readings (kept per flag in ``flag_part`` by incremental
#: runs); its other flags come from its day judgements over the whole history.
SENSOR_INTERVAL_KINDS = ("sensor_dropout", "data_dropout", "sensor_range", "sensor_flatline",
                         "sensor_night")


def sensor_flags(sensor_id: str, quantity: str, x: pd.Series, grid_sun: pd.DataFrame, *,
                 std_offset_s: int, site_zone: str,
                 source: tuple[str, str] | None = None,
                 x_valid: pd.Series | None = None,
                 interval_s: np.ndarray | None = None, prior=None,
                 keep: dict | None = None) -> tuple[list[pd.DataFrame], pd.Series | None]:
    """QA flags of one sensor; also returns its daily clear-sky ratio (POA) for sibling checks.

    Range, flatline, dropout and night checks run on the raw readings ``x``; the clock and
    drift diagnoses only on ``x_valid`` (the readings of days judged plausible).
    ``interval_s``: each reading's interval as recorded at ingest (None: from the spacing).
    ``prior`` and ``keep`` as in :func:`judge_sensors`: the clock offsets and clear-period
    ratios of the stored days before the cut are joined with this run's before the clock,
    level and drift checks."""
    # each reading's own interval (#11); the grid's rows carry theirs (sun_at's interval_s)
    tau_s = (np.asarray(interval_s, dtype=float) if interval_s is not None
             else _tau_s(x.index, interval_s))
    s = grid_sun.reindex(x.index)
    xv = x if x_valid is None else x_valid
    day_grid = grid_sun["elev"] >= PARAMS["sensor"]["daytime_elevation_deg"]
    drop = sensor_qa.dropout_flags(x, day_grid, device_id=sensor_id, quantity=quantity,
                                   tau_s=_grid_tau_s(grid_sun),
                                   min_silence_h=GAP_MIN_SILENCE_H)
    # a gap of hours or a day or two is data unavailable (communication); a sensor silent
    # for 36 or more daylight hours (about three days) is a sensor problem (common practice;
    # issue #14: 29-h column gaps of healthy sensors on generated fleets)
    short = [d["missing_daytime_hours"] < 36.0 for d in drop["details"]]
    drop.loc[np.asarray(short, dtype=bool), "kind"] = "data_dropout"
    out = [drop]
    stored = _stored(prior, sensor_id)
    if x.empty and stored is None:
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
    had = stored is not None and (stored.get("clock_delta_min", pd.Series(dtype=float)).notna().any()
                                  or stored.get("sky_ratio", pd.Series(dtype=float)).notna().any())
    if quantity == "poa_wm2" and (xv.notna().any() or had):
        tau_h = np.broadcast_to(np.asarray(tau_s, dtype=float) / 3600.0, (len(x),))
        clear = clock.clear_day_mask(xv, s["poa_cs"], std_offset_s=std_offset_s,
                                     ratio_range=(0.7, 1.3))
        off = clock.clock_offsets(xv, s["poa_cs"], tau_h, std_offset_s=std_offset_s,
                                  clear=clear)
        _keep(keep, sensor_id, "clock_delta_min", off["delta_min"])
        _keep(keep, sensor_id, "clock_clear", off["clear"])
        if prior is not None:
            old = None
            if stored is not None and "clock_clear" in stored:
                c = stored["clock_clear"].notna().to_numpy()
                old = pd.DataFrame({"delta_min": stored["clock_delta_min"].to_numpy(float)[c],
                                    "clear": stored["clock_clear"].to_numpy()[c].astype(bool)},
                                   index=stored.index[c])
            off = _join_series(old, off, prior)
        out.append(clock.refine_fix_moment(clock.clock_shift_flags(
            off, device_id=sensor_id, std_offset_s=std_offset_s, site_zone=site_zone,
            source_name=source[0] if source else None,
            export_zone=source[1] if source else "local"), xv, s["poa_cs"], tau_h,
            std_offset_s=std_offset_s, zone=_export_zone(source, site_zone)))
        ratio = sensor_qa.clear_period_ratio(xv, s["poa_cs"], s["aoi"].to_numpy(), clear,
                                             std_offset_s=std_offset_s)
        _keep(keep, sensor_id, "sky_ratio", ratio)
        if prior is not None:
            ratio = _join_series(None if stored is None or "sky_ratio" not in stored
                                 else stored["sky_ratio"].dropna(), ratio, prior)
            ratio = ratio if ratio is not None else pd.Series(dtype=float)
        out.append(sensor_qa.clear_sky_level_flags(ratio, device_id=sensor_id,
                                                   std_offset_s=std_offset_s))
        out.append(sensor_qa.drift_flags(ratio, device_id=sensor_id, method="clearsky",
                                         std_offset_s=std_offset_s,
                                         extra={"reference": "pvlib Ineichen clear-sky POA"}))
    return out, ratio


def _adjust_pi_for_limits(d: pd.DataFrame, withheld: dict) -> pd.DataFrame:
    """Add back the energy a power limit withheld: pi' = (E_valid + W_d) / E_exp,valid, so
    the underperformance check does not read an export limit as a weak array (the limit has
    its own 'power_limit' flag)."""
    if not withheld or "e_exp_valid_kwh" not in d:
        return d
    d = d.copy()
    for dev, w in withheld.items():
        m = (d["device_id"] == dev).to_numpy()
        if not m.any():
            continue
        wd = w.reindex(pd.DatetimeIndex(d.loc[m, "day"])).fillna(0.0).to_numpy(float)
        e = d.loc[m, "e_exp_valid_kwh"].to_numpy(float)
        with np.errstate(invalid="ignore", divide="ignore"):
            d.loc[m, "pi"] = np.where(e > 0, d.loc[m, "pi"].to_numpy(float) + wd / e,
                                      d.loc[m, "pi"].to_numpy(float))
    return d


def daily_flags(daily: pd.DataFrame, inverters: pd.DataFrame, *, std_offset_s: int,
                economics: dict, rain_daily: pd.Series | None = None,
                n_runs: int = 1000, withheld: dict | None = None,
                soiling_pi: dict | None = None,
                clock_days: dict | None = None) -> list[pd.DataFrame]:
    """Underperformance, soiling/cleaning and fleet-power drift flags from the daily table.

    Soiling reads the site median of each inverter's unclipped daily performance index
    (:func:`unclipped_daily_pi`) where the flags job computed it, else the daily ``pi``, each
    inverter relative to its own level (:func:`analytics.soiling.fleet_relative_pi`). With
    ``clock_days`` (each inverter's clock-check days, column ``clear``) a soiled interval
    must also show its decline on the site's clear days
    (:func:`analytics.soiling.site_clear_days`, :func:`analytics.soiling.soiling_intervals`)."""
    if daily.empty:
        return []
    d = daily.copy()
    d["day"] = pd.to_datetime(d["day"])
    groups = dict(zip(inverters["device_id"], inverters["peer_group"], strict=True))
    up = PARAMS["underperformance"]
    out = [outliers.underperformance_flags(_adjust_pi_for_limits(d, withheld or {}),
                                           peer_group=groups, std_offset_s=std_offset_s,
                                           **up)]
    valid = d[d["day_valid"].astype(bool)]
    if len(valid):
        wide = valid.pivot_table(index="day", columns="device_id", values="pi",
                                 aggfunc="first")
        if soiling_pi:
            ok = wide.notna()
            wide = pd.DataFrame(soiling_pi).reindex(index=ok.index, columns=ok.columns).where(ok)
        # each inverter relative to its own level, then the site median (issue #14)
        pi = soiling.fleet_relative_pi(wide)
        h = valid.groupby("day")["h_poa_kwhm2"].median()
        e_exp = d.groupby("day")["e_exp_kwh"].sum(min_count=1)
        clear = None
        if clock_days:
            clear = soiling.site_clear_days(
                pd.DataFrame({dev: off["clear"] for dev, off in clock_days.items()
                              if len(off)}).astype(float),
                min_share=PARAMS["soiling"]["clear_share"])
        soil = soiling.soiling_flags(
            pi, h, e_exp, rain_mm=rain_daily, clear_days=clear, tariff_per_kwh=economics.get("tariff_per_kwh", 0.05),
            cleaning_cost=economics.get("cleaning_cost", 0.0),
            currency=economics.get("currency", "EUR"), std_offset_s=std_offset_s,
            n_runs=n_runs, **{k: PARAMS["soiling"][k] for k in (
                "window", "min_days", "rain_threshold_mm", "min_loss", "horizon_days",
                "min_clear_days")})
        out[0], soil = attach_uneven_soiling(out[0], soil, valid, std_offset_s=std_offset_s,
                                             min_deficit=up["min_deficit"])
        out.append(soil)
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


def attach_uneven_soiling(up: pd.DataFrame, soil: pd.DataFrame, valid: pd.DataFrame, *,
                          std_offset_s: int, min_deficit: float, after_days: int = 14,
                          slack_days: int = 3) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Underperformance explained by uneven soiling is attached to the soiling flag.

    An inverter that soils faster than its peers drifts below them during a dry interval
    and comes back at the cleaning; a failed string does not come back (issue #14: false
    underperformance flags on an arid soiling site). An underperformance event lying inside
    one soiled interval (to ``slack_days``) whose inverter is back within ``min_deficit`` of
    its peers (median daily pi ratio) in the ``after_days`` after that interval's cleaning
    becomes a consequence of the soiling flag (``details.consequences``, with its lost
    energy), not an alarm of its own.
    """
    if up.empty or soil.empty:
        return up, soil
    so = soil[soil["kind"] == "soiling"]
    if so.empty:
        return up, soil
    wide = valid.pivot_table(index="day", columns="device_id", values="pi", aggfunc="first")
    ratio = wide.div(wide.median(axis=1), axis=0)
    day_s = _ts_days(ratio.index, std_offset_s)
    drop = []
    soil = soil.copy()
    for u in up.itertuples():
        hit = so[(so["start_s"] <= u.start_s + slack_days * 86400)
                 & (so["end_s"] >= u.end_s - slack_days * 86400)]
        if hit.empty or u.device_id not in ratio:
            continue
        k = hit.index[0]
        e0 = int(hit.at[k, "end_s"])
        m = (day_s >= e0) & (day_s < e0 + after_days * 86400)
        after = ratio[u.device_id].to_numpy(float)[m]
        after = after[np.isfinite(after)]
        if after.size < 3 or np.median(after) < 1.0 - min_deficit:
            continue
        det = dict(soil.at[k, "details"])
        det["consequences"] = det.get("consequences", []) + [dict(
            kind="underperformance", device_id=u.device_id, start_s=int(u.start_s),
            end_s=int(u.end_s), lost_kwh=None if not np.isfinite(u.lost_kwh) else float(u.lost_kwh),
            reading="uneven soiling: below its peers while soiling, back after the cleaning")]
        soil.at[k, "details"] = det
        drop.append(u.Index)
    return up.drop(index=drop).reset_index(drop=True), soil


def _ts_days(days, std_offset_s: int) -> np.ndarray:
    """UTC epoch seconds of the start of each local standard day."""
    return pd.DatetimeIndex(days).as_unit("s").asi8 - int(std_offset_s)


def _yield_by_sensor(daily: pd.DataFrame, inverters: pd.DataFrame) -> dict[str, pd.Series]:
    """Median daily final yield Y_f = E_ac / P_dc [h] of the inverters on each POA sensor."""
    if daily.empty or "e_ac_kwh" not in daily:
        return {}
    kwp = dict(zip(inverters["device_id"], inverters["p_dc_kwp"].astype(float), strict=True))
    d = daily[["device_id", "day", "e_ac_kwh"]].copy()
    d["yf"] = d["e_ac_kwh"].astype(float) / d["device_id"].map(kwp)
    d["day"] = pd.to_datetime(d["day"])
    out = {}
    for sid, invs in inverters.groupby("poa_sensor_id")["device_id"]:
        out[sid] = d[d["device_id"].isin(list(invs))].groupby("day")["yf"].median()
    return out


def _low_vs_yield(h: pd.Series, yf: pd.Series | None, *, min_yf_h: float = 1.0,
                  factor: float = 0.25, coverage: pd.Series | None = None,
                  min_coverage: float = 0.8) -> pd.Series:
    """Days on which the sensor's insolation ``h`` is below ``factor`` × the arrays' final
    yield (Y_f ≤ Y_r for any PR ≤ 1, IEC 61724-1): the sensor reads far less than the power
    delivered under it.

    Judged only on days whose readings cover at least ``min_coverage`` of the day's clear-sky
    insolation (``coverage``; 0.8, the daily table's minimum coverage of a valid day): a
    sensor silent for most of a day has a small insolation because it said nothing, not
    because it read low (issue #14: two healthy POA sensors with 17-18 h column gaps were
    judged ``low_vs_power`` on generated fleets). A gap in the power only lowers Y_f, which
    cannot make a sensor look low."""
    if yf is None or yf.empty or h.empty:
        return pd.Series(dtype=bool)
    y = yf.reindex(h.index)
    low = (y >= min_yf_h) & (h < factor * y)
    if coverage is not None:
        low &= coverage.reindex(h.index).fillna(0.0) >= min_coverage
    return low


def clear_sky_coverage(x: pd.Series, poa_cs: np.ndarray, interval_s: np.ndarray,
                       grid_sun_for, sensor_id: str, std_offset_s: int) -> pd.Series:
    """Share of each local standard day's clear-sky insolation on the sensor's plane that
    falls in intervals with a finite reading (1: complete, 0: silent all day). The day's
    clear-sky insolation is summed on a regular grid at the sensor's median interval, in
    phase with its readings, over whole local days."""
    if x.empty:
        return pd.Series(dtype=float)
    ts = epoch_s(x.index)
    tau = fill_unknown_intervals(ts, np.asarray(interval_s, dtype=float))
    step = max(int(np.median(tau)), 60)
    off = int(std_offset_s)
    d0 = (int(ts.min()) + off) // 86400 * 86400 - off
    d1 = ((int(ts.max()) + off) // 86400 + 1) * 86400 - off
    g_ts = np.arange(d0 + (int(ts.min()) - d0) % step, d1, step)
    g_idx = pd.DatetimeIndex(pd.to_datetime(g_ts, unit="s", utc=True), name="ts_utc")
    cs_grid = np.nan_to_num(grid_sun_for(g_idx, sensor_id)["poa_cs"].to_numpy(float))
    full = daily_insolation(pd.Series(cs_grid, index=g_idx), off, np.full(g_ts.size, step))
    seen = np.where(np.isfinite(x.to_numpy(float)), np.nan_to_num(np.asarray(poa_cs, float)),
                    0.0)
    got = daily_insolation(pd.Series(seen, index=x.index), off, tau)
    full = full.where(full > 0)
    return (got.reindex(full.index).fillna(0.0) / full).clip(upper=1.0)


def daily_insolation(x: pd.Series, std_offset_s: int, interval_s=None) -> pd.Series:
    """Daily insolation H [kWh/m²] of an irradiance series by local standard day (negative
    readings count as 0). ``interval_s``: each reading's interval [s] (a logging interval
    can change part-way); default the spacing of the timestamps."""
    if x.empty:
        return pd.Series(dtype=float)
    ts = epoch_s(x.index)
    if interval_s is None:
        interval_s = np.full(ts.size, np.nan)
    tau = fill_unknown_intervals(ts, np.asarray(interval_s, dtype=float))
    day = (ts + int(std_offset_s)) // 86400
    h = pd.Series(np.clip(x.to_numpy(float), 0, None) * tau / 3.6e6).groupby(day).sum()
    h.index = pd.to_datetime(h.index.to_numpy() * 86400, unit="s")
    return h


def high_vs_power_by_sensor(insolation: dict[str, pd.Series], daily: pd.DataFrame,
                            inverters: pd.DataFrame, *, min_avail: float = 0.95,
                            min_coverage: float = 0.9) -> dict[str, pd.Series]:
    """Sensor id -> days on which that POA sensor reads far more than the arrays under it
    deliver (:func:`analytics.sensor_qa.high_vs_power_days`): its daily insolation from the
    raw readings against each of its inverters' final yield Y_f = E_ac / P_dc on days that
    inverter was available (time availability ≥ ``min_avail``, or unknown because the
    sensor's days are already masked) and has at least ``min_coverage`` × the most
    readings any of them has that day. The daily job and the flags job both call this."""
    out: dict[str, pd.Series] = {}
    if daily.empty or "poa_sensor_id" not in inverters:
        return out
    for sid, h in insolation.items():
        invs = inverters.loc[inverters["poa_sensor_id"] == sid, ["device_id", "p_dc_kwp"]]
        if len(invs) < 2 or h.empty:
            continue
        kwp = dict(zip(invs["device_id"], invs["p_dc_kwp"].astype(float), strict=True))
        d = daily[daily["device_id"].isin(list(kwp))].copy()
        if d.empty:
            continue
        d["day"] = pd.to_datetime(d["day"])
        yf = d["e_ac_kwh"].astype(float) / d["device_id"].map(kwp)
        ok = np.ones(len(d), bool)
        if "avail_time" in d:  # unknown (NaN) once the sensor's days are masked: no veto
            av = pd.to_numeric(d["avail_time"], errors="coerce").astype(float)
            ok &= (av.isna() | (av >= min_avail)).to_numpy()
        if "n_intervals" in d:  # the inverter's readings cover the day like its siblings'
            n = pd.to_numeric(d["n_intervals"], errors="coerce").astype(float)
            ok &= (n >= min_coverage * n.groupby(d["day"]).transform("max")).to_numpy()
        d["yf"] = yf.where(ok)
        wide = d.pivot_table(index="day", columns="device_id", values="yf", aggfunc="first")
        out[sid] = sensor_qa.high_vs_power_days(
            h, wide, min_pr=PARAMS["sensor"]["validity"]["high_vs_power_min_pr"])
    return out


def _keep(keep: dict | None, sid: str, name: str, values: pd.Series) -> None:
    """Record one day product of a sensor for the next incremental run (``flag_day``)."""
    if keep is not None and len(values):
        keep.setdefault(sid, {})[name] = values


def _stored(prior, sid: str) -> pd.DataFrame | None:
    """A sensor's stored day judgements before the cut (incremental runs), by day."""
    from heliaudit.flags_window import stored_sensor_days

    if prior is None:
        return None
    return stored_sensor_days(prior.sensor_days.get(sid))


def _join_days(stored: pd.DataFrame | None, window: pd.DataFrame, prior) -> pd.DataFrame:
    """A sensor's validity day table: the stored days before the cut, this run's from it."""
    if prior is None:
        return window
    cut = pd.Timestamp(int(prior.cut_day) * 86400, unit="s")
    window = window[window.index >= cut]
    if stored is None or "valid_reason" not in stored:
        return window
    r = stored["valid_reason"].dropna()
    old = pd.DataFrame({"valid": (r == "").to_numpy(bool), "reason": r.to_numpy(object)},
                       index=r.index)
    return pd.concat([old, window]) if len(window) else old


def _join_series(stored: pd.Series | None, window: pd.Series | None, prior) -> pd.Series | None:
    """A day series: the stored days before the cut, this run's from it."""
    if prior is None:
        return window
    cut = pd.Timestamp(int(prior.cut_day) * 86400, unit="s")
    if window is not None:
        window = window[window.index >= cut]
    pieces = [x for x in (stored, window) if x is not None and len(x)]
    if not pieces:
        return window if window is not None else stored
    return pd.concat(pieces) if len(pieces) > 1 else pieces[0]


def _day_arrays(values: np.ndarray, mask: np.ndarray, index: pd.DatetimeIndex,
                std_offset_s: int) -> pd.Series:
    """The samples ``values`` (taken where ``mask``) grouped by local standard day."""
    if not len(index):
        return pd.Series(dtype=object)
    day = (epoch_s(index) + int(std_offset_s)) // 86400
    d = day[np.asarray(mask, bool)]
    uday = np.unique(day)
    pos = np.searchsorted(d, uday)
    ends = np.append(pos[1:], d.size)
    return pd.Series([np.asarray(values[a:b], dtype=float) for a, b in zip(pos, ends, strict=True)],
                     index=pd.to_datetime(uday * 86400, unit="s"), dtype=object)


class SensorsWholeNeeded(Exception):
    """An incremental run found a sibling jump: its invalid days change the judgement of
    days before the cut, so the sensors are judged whole."""


def judge_sensors(sensors, grid_sun_for, inverters: pd.DataFrame, daily: pd.DataFrame, *,
                  std_offset_s: int, intervals: dict | None = None,
                  site: dict | None = None, prior=None, keep: dict | None = None
                  ) -> tuple[dict, list[pd.DataFrame]]:
    """Plausibility of every sensor before any diagnosis.

    ``grid_sun_for(index, sensor_id)`` gives the sun and clear-sky POA on the sensor's own
    plane; ``intervals`` maps sensor id -> each (time-sorted) reading's interval [s];
    ``site`` (the site row) enables the checks across sensors and inverters (sibling jumps,
    a sensor reading high against its arrays). ``prior`` (an incremental run,
    :class:`heliaudit.flags_window.Prior`): ``sensors`` hold the readings from the cut minus
    the look-back; the days before the cut come from the store. ``keep`` receives each
    sensor's day judgements for the next incremental run.

    Returns
    -------
    (invalid_days, flags): ``invalid_days`` maps sensor id -> day table of
    :func:`analytics.sensor_qa.irradiance_validity` / ``module_temperature_validity``;
    ``flags`` the 'sensor_implausible' flags (faulty periods with their reason and the
    calculations they are excluded from, and an ambient-sensor offset).
    """
    planes = sensor_planes(site) if site is not None else {}
    by_id, iv_of = {}, {}
    for e in sensors:
        order = np.argsort(epoch_s(e[2].index), kind="stable")
        by_id[e[0]] = (e[1], e[2].iloc[order])
        given = e[3] if len(e) > 3 and e[3] is not None else np.full(len(e[2]), np.nan)
        iv_of[e[0]] = np.asarray(given, dtype=float)[order]
    # each daily row's day as UTC s of its midnight: a sensor is judged on the days of its
    # readings (its insolation h), so only those days of the daily table are taken (an
    # incremental run reads a window; issue #16). Per-day results are unchanged by it.
    if len(daily):
        codes, uniq = pd.factorize(daily["day"])
        daily_day_s = pd.DatetimeIndex(pd.to_datetime(uniq)).as_unit("s").asi8[codes]
    else:
        daily_day_s = np.empty(0, np.int64)
    invalid: dict = {}
    flags: list[pd.DataFrame] = []
    for sid, (q, x) in by_id.items():
        stored = _stored(prior, sid)
        if q not in ("poa_wm2", "ghi_wm2") or (x.empty and stored is None):
            continue
        gs = grid_sun_for(x.index, sid)  # on the sensor's own plane, at its own intervals
        s = gs.reindex(x.index)
        days = sensor_qa.irradiance_validity(x, s["elev"].to_numpy(), s["poa_cs"].to_numpy(),
                                             std_offset_s=std_offset_s)
        iv = (intervals or {}).get(sid)
        iv = iv_of[sid] if iv is None or len(iv) != len(x) else iv
        h = daily_insolation(x, std_offset_s, iv)
        cov = clear_sky_coverage(x, s["poa_cs"].to_numpy(), iv, grid_sun_for, sid,
                                 std_offset_s)
        on_days = daily.iloc[:0] if h.empty else daily[
            np.isin(daily_day_s, pd.DatetimeIndex(h.index).as_unit("s").asi8)]
        low = _low_vs_yield(h, _yield_by_sensor(on_days, inverters).get(sid), coverage=cov)
        high = high_vs_power_by_sensor({sid: h}, on_days, _in_plane_of(
            inverters, planes.get(sid, "site"), site)).get(sid, pd.Series(dtype=bool))
        for reason, m in (("low_vs_power", low), ("high_vs_power", high)):
            if len(m):
                lo = m.reindex(days.index).fillna(False).to_numpy(bool)
                days.loc[lo & days["valid"].to_numpy(bool), "reason"] = reason
        days["valid"] = days["reason"] == ""
        _keep(keep, sid, "valid_reason", days["reason"])
        days = _join_days(stored, days, prior)
        invalid[sid] = days
        flags.append(sensor_qa.validity_flags(days, device_id=sid, quantity=q,
                                              std_offset_s=std_offset_s))
    # a sensor that jumped against its siblings reads wrong from the jump on: excluded
    if site is not None:
        jumps, jump_days = sibling_jumps(sensors, site, std_offset_s=std_offset_s,
                                         sun_for=grid_sun_for, prior=prior, keep=keep)
        if len(jumps) and prior is not None:
            raise SensorsWholeNeeded
        if len(jumps):
            flags.append(jumps)
        for sid, tab in jump_days.items():
            cur = invalid[sid].reindex(tab.index.union(invalid[sid].index))
            cur["valid"] = cur["valid"].fillna(True).astype(bool)
            cur["reason"] = cur["reason"].fillna("")
            tab = tab.reindex(cur.index)
            tab["valid"] = tab["valid"].fillna(True).astype(bool)
            m = (~tab["valid"].to_numpy(bool)) & cur["valid"].to_numpy(bool)
            cur.loc[m, "reason"] = "jump_vs_sibling"
            cur["valid"] = cur["reason"] == ""
            invalid[sid] = cur

    def paired(tm_id: str, key: str, quantity: str) -> str | None:
        if key in inverters and "t_module_sensor_id" in inverters:
            ids = inverters.loc[inverters["t_module_sensor_id"] == tm_id, key].dropna()
            ids = [i for i in ids if i in by_id]
            if ids:
                return pd.Series(ids).mode().iloc[0]
        return next((i for i, (qq, _x) in by_id.items() if qq == quantity), None)

    mount = inverters["mounting"].mode().iloc[0] if len(inverters) else "open_rack_glass_polymer"
    par = SAPM_PARAMETERS.get(mount, SAPM_PARAMETERS["open_rack_glass_polymer"])
    for sid, (q, x) in by_id.items():
        stored = _stored(prior, sid)
        if q != "t_module_c" or (x.empty and stored is None):
            continue
        gs = grid_sun_for(x.index, sid).reindex(x.index)
        g_id, a_id, w_id = (paired(sid, "poa_sensor_id", "poa_wm2"),
                            paired(sid, "t_amb_sensor_id", "t_amb_c"),
                            paired(sid, "wind_sensor_id", "wind_ms"))
        g = by_id[g_id][1].reindex(x.index) if g_id else None
        if g is not None and g_id in invalid:
            g = g.mask(sensor_qa.invalid_interval_mask(x.index, invalid[g_id],
                                                       std_offset_s=std_offset_s))
        ta = by_id[a_id][1].reindex(x.index) if a_id else None
        wind = by_id[w_id][1].reindex(x.index).fillna(1.0) if w_id else 1.0
        model = None
        if g is not None and ta is not None and ta.notna().any():
            model = np.asarray(module_temperature_sandia(g.fillna(0.0).clip(lower=0), ta, wind,
                                                         a=par["a"], b=par["b"]), dtype=float)
        days = sensor_qa.module_temperature_validity(
            x, poa_wm2=None if g is None else g.to_numpy(float),
            t_amb_c=None if ta is None else ta.to_numpy(float), t_mod_model_c=model,
            std_offset_s=std_offset_s, day_mask=(gs["elev"] >= 15.0).to_numpy())
        _keep(keep, sid, "valid_reason", days["reason"])
        window_days = days
        days = _join_days(stored, days, prior)
        invalid[sid] = days
        flags.append(sensor_qa.validity_flags(days, device_id=sid, quantity=q,
                                              std_offset_s=std_offset_s))
        if a_id and model is not None:
            tm_ok = x.mask(sensor_qa.invalid_interval_mask(x.index, window_days,
                                                           std_offset_s=std_offset_s))
            ta_x = by_id[a_id][1].reindex(x.index)
            night, nd, sun, dr = sensor_qa.ambient_offset_samples(
                ta_x, tm_ok, model, gs["elev"].to_numpy(), g.to_numpy(float))
            an = _day_arrays(nd, night, x.index, std_offset_s)
            ad = _day_arrays(dr, sun, x.index, std_offset_s)
            _keep(keep, sid, "amb_night_c", an)
            _keep(keep, sid, "amb_day_c", ad)
            if prior is None:
                flags.append(sensor_qa.ambient_offset_flags(
                    ta_x, tm_ok, model, gs["elev"].to_numpy(), g.to_numpy(float),
                    device_id=a_id, module_sensor=sid))
            else:  # the stored days' samples with this run's from the cut
                flags.append(_ambient_from_days(stored, an, ad, prior, sid, a_id,
                                                ta_x, tm_ok, x.index))
    return invalid, flags


def _ambient_from_days(stored, an: pd.Series, ad: pd.Series, prior, sid: str, a_id: str,
                       ta_x: pd.Series, tm_ok: pd.Series, index: pd.DatetimeIndex
                       ) -> pd.DataFrame:
    """The ambient-offset check of an incremental run: the night and full-sun samples of
    the stored days before the cut and of this run's days from it, over the module sensor's
    whole period (its first row from the store)."""
    def joined(name, window):
        old = None if stored is None or name not in stored else stored[name].dropna()
        got = _join_series(old, window, prior)
        arrays = [a for a in ([] if got is None else got.tolist()) if a is not None]
        return np.concatenate(arrays) if arrays else np.zeros(0)

    nd, dr = joined("amb_night_c", an), joined("amb_day_c", ad)
    first = prior.sensor_span.get(sid, (None, None))[0]
    last = (int(epoch_s(index[-1:])[0]) if len(index)
            else prior.sensor_span.get(sid, (None, None))[1])
    if first is None and len(index):
        first = int(epoch_s(index[:1])[0])
    if first is None or last is None:
        return flag_frame([])
    if (ta_x.notna().sum() == 0 and not nd.size and not dr.size) or (
            tm_ok.notna().sum() == 0 and not nd.size and not dr.size):
        return flag_frame([])
    return sensor_qa.ambient_offset_flags(ta_x, tm_ok, None, None, None, device_id=a_id,
                                          module_sensor=sid, samples=(nd, dr),
                                          span_s=(int(first), int(last)))


def consolidate_clock_flags(flags: pd.DataFrame, *, n_clock_devices: int,
                            max_level_diff_min: float = 15.0) -> pd.DataFrame:
    """Keep a clock shift only where the healthy devices agree.

    A logger clock error shifts every channel it records; a profile that looks shifted on
    one device only is its orientation, shading or sensor (issue #14: arrays tilted
    differently from the site default "shifted" their noon by 30 min, 127 flags). Clock
    flags that overlap in time with levels within ``max_level_diff_min`` form a group; a
    group of at least two devices (or the only device able to show a shift) becomes one
    site-wide ``clock_shift`` flag with the median level, the correction and the dates
    (median of the members). Single-device shifts on a site with other devices are
    dropped (they are listed in the details of no flag; the rule is in the README).
    """
    if flags.empty:
        return flags
    is_clk = (flags["kind"] == "clock_shift").to_numpy()
    if not is_clk.any():
        return flags
    clk = flags[is_clk].sort_values("start_s", kind="stable")
    rows = list(clk.itertuples())
    used: set[int] = set()
    merged = []
    for i, r in enumerate(rows):
        if r.Index in used:
            continue
        lv = r.details["shift_minutes_measured"]
        grp = [r]
        for q in rows[i + 1:]:
            if q.Index in used or q.start_s >= r.end_s:
                continue
            if q.end_s > r.start_s and abs(q.details["shift_minutes_measured"] - lv) <= \
                    max_level_diff_min:
                grp.append(q)
        used.update(g.Index for g in grp)
        devices = sorted({str(g.device_id) for g in grp if g.device_id is not None})
        need = 2 if n_clock_devices >= 2 else 1
        if len(devices) < need:
            continue
        pick = grp[int(np.argsort([g.start_s for g in grp])[len(grp) // 2])]
        det = dict(pick.details)
        s0 = int(np.median([g.start_s for g in grp]) // 86400 * 86400
                 + pick.start_s % 86400)
        e0 = int(np.median([g.end_s for g in grp]) // 86400 * 86400 + pick.end_s % 86400)
        if e0 <= s0:
            s0, e0 = int(pick.start_s), int(pick.end_s)
        fixes = [g.details["fix_moment"] for g in grp if g.details.get("fix_moment")]
        fix = None
        if fixes and 2 * len(fixes) >= len(grp):  # most members show the moment of the fix
            order = np.argsort([f["first_right_reading_utc_s"] for f in fixes])
            fix = fixes[int(order[(len(fixes) - 1) // 2])]
            e0 = int(fix["first_right_reading_utc_s"])
            pick = next(g for g in grp if g.details.get("fix_moment") is fix)
            det = dict(pick.details)
        first = pd.Timestamp(det["first_day"]) + pd.Timedelta(seconds=s0 - int(pick.start_s))
        last = (pd.Timestamp(det["last_day"]) if fix is not None else
                pd.Timestamp(det["last_day"]) + pd.Timedelta(seconds=e0 - int(pick.end_s)))
        det.update(devices=devices, n_devices_agreeing=len(devices),
                   n_devices_checked=int(n_clock_devices),
                   shift_minutes_measured_by_device={str(g.device_id):
                                                     g.details["shift_minutes_measured"]
                                                     for g in grp},
                   shift_minutes_measured=float(np.median(
                       [g.details["shift_minutes_measured"] for g in grp])),
                   first_day=str(first.date()), last_day=str(last.date()),
                   agreement=f"{len(devices)} of {n_clock_devices} devices show the shift",
                   last_day_partly_shifted=bool(np.median(
                       [bool(g.details.get("last_day_partly_shifted")) for g in grp]) >= 0.5))
        det["correction_toml"] = _retarget_toml(
            det["correction_toml"], first, last, len(devices),
            end_text=None if fix is None else fix["correction_end_local"])
        if fix is not None:
            det.update(fix_moment=fix, last_day_partly_shifted=True)
        merged.append(dict(device_id=None if len(devices) > 1 else devices[0],
                           kind="clock_shift", start_s=s0, end_s=e0,
                           severity=max((g.severity for g in grp),
                                        key=["info", "warning", "alarm"].index),
                           lost_kwh=np.nan, details=det))
    rest = flags[~is_clk]
    return pd.concat([rest, flag_frame(merged)], ignore_index=True) if merged else rest


def _retarget_toml(toml: str, first: pd.Timestamp, last: pd.Timestamp, n_dev: int, *,
                   end_text: str | None = None) -> str:
    lines = []
    for ln in toml.splitlines():
        if ln.startswith("start = "):
            ln = f"start = {first.date().isoformat()}"
        elif ln.startswith("end = "):
            ln = f"end = {end_text or last.date().isoformat()}"
        elif ln.startswith("note = ") and n_dev > 1:
            ln = ln.replace("clock_shift on ", f"clock_shift on {n_dev} devices incl. ")
        lines.append(ln)
    return "\n".join(lines) + "\n"


def _attach(flags: pd.DataFrame, parent_idx, kids: pd.DataFrame, drop: list,
            extend: set[str] = frozenset()) -> None:
    det = dict(flags.at[parent_idx, "details"])
    det["consequences"] = det.get("consequences", []) + [
        dict(kind=k.kind, device_id=k.device_id, start_s=int(k.start_s), end_s=int(k.end_s))
        for k in kids.itertuples()]
    flags.at[parent_idx, "details"] = det
    ext = kids[kids["kind"].isin(extend)]
    if len(ext):  # the same fault seen at a finer time resolution: take its exact span
        flags.at[parent_idx, "start_s"] = int(min(flags.at[parent_idx, "start_s"],
                                                  ext["start_s"].min()))
        flags.at[parent_idx, "end_s"] = int(max(flags.at[parent_idx, "end_s"],
                                                ext["end_s"].max()))
    drop += list(kids.index)


def attach_consequences(flags: pd.DataFrame) -> pd.DataFrame:
    """Root causes first: a flag explained by another is attached to it, not raised alone.

    * a sensor's range / flatline / night / dropout / clock / drift flag lying inside one of
      its 'sensor_implausible' periods (its span is widened to a flatline's exact span), or
      after it stopped reporting; an inverter's outage or dropout after it stopped
      reporting;
    * night-time irradiance on any sensor inside a clock shift (dusk light shown at night
      is the clock, not the sensor).

    The parent's details get ``consequences``: [{kind, device_id, start_s, end_s}].
    """
    if flags.empty:
        return flags
    flags = flags.reset_index(drop=True)
    drop: list = []
    parents = flags[flags["kind"].isin(["sensor_implausible", "stopped_reporting"])
                    & flags["device_id"].notna()]
    # an offset explains no gap or flat line
    parents = parents[[d.get("reason") != "ambient_offset" for d in parents["details"]]]
    child_kinds = {"sensor_range", "sensor_flatline", "sensor_night", "sensor_dropout",
                   "data_dropout", "clock_shift", "sensor_drift", "outage"}
    for pr in parents.itertuples():
        m = ((flags["device_id"] == pr.device_id) & flags["kind"].isin(child_kinds)
             & (flags["start_s"] >= pr.start_s - 86400) & (flags["end_s"] <= pr.end_s + 86400)
             & ~flags.index.isin(drop))
        if m.any():
            _attach(flags, pr.Index, flags[m], drop, extend={"sensor_flatline"})
    for pr in flags[flags["kind"] == "clock_shift"].itertuples():
        m = ((flags["kind"] == "sensor_night") & (flags["start_s"] >= pr.start_s - 86400)
             & (flags["end_s"] <= pr.end_s + 86400) & ~flags.index.isin(drop))
        if m.any():
            _attach(flags, pr.Index, flags[m], drop)
    return flags.drop(index=sorted(set(drop))).reset_index(drop=True)


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
    keep = ~flags["kind"].isin(["sensor_dropout", "data_dropout", "clock_shift"])
    out = [flags[keep]]
    rest = flags[~keep].copy()
    rest["shift"] = [d.get("shift_minutes_correction") for d in rest["details"]]
    # a sensor's and an inverter's missing data over the same span are one logger gap
    rest["group"] = rest["kind"].replace({"sensor_dropout": "data_dropout"})
    for (_kind, _a, _b, _sh), grp in rest.groupby(["group", "start_s", "end_s", "shift"],
                                                  dropna=False, sort=False):
        grp = grp.drop(columns="group")
        if len(grp) < min_devices:
            out.append(grp.drop(columns="shift"))
            continue
        first = grp.iloc[0]
        devices = sorted(str(d) for d in grp["device_id"])
        det = dict(first["details"])
        det["devices"] = devices
        if first["kind"] in ("sensor_dropout", "data_dropout"):
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
        if row["kind"] == "sensor_dropout":
            row["kind"] = "data_dropout"
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
                  counters: dict | None = None, planes: dict | None = None, prior=None,
                  collect: dict | None = None) -> pd.DataFrame:
    """Every flag of a site from data in memory.

    Order (issue #14): judge every sensor first (faulty days are masked for everything that
    follows), then the per-device diagnoses, then root causes: simultaneous outages become
    one site event, clock shifts need agreement across devices, and flags explained by a
    faulty sensor or a device that stopped reporting are attached to that cause.

    Parameters
    ----------
    site : dict
        ``timezone``, ``latitude_deg``, ``longitude_deg``, ``altitude_m``, ``tilt_deg``,
        ``azimuth_deg``, ``albedo``.
    inverters : DataFrame
        Inverter rows (``device_id``, ``p_dc_kwp``, ``p_ac_max_kw``, ``gamma_pmp_per_c``,
        ``eta_inv_nom``, ``mounting``, ``poa_sensor_id``, ``peer_group``; optional
        ``t_module_sensor_id``, ``t_amb_sensor_id``, ``wind_sensor_id`` and the array plane
        ``tilt_deg``/``azimuth_deg``).
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
    planes : dict, optional
        Device id -> its own planes (:func:`device_planes`): an inverter's arrays (fixed or
        single-axis trackers), an irradiance sensor's plane. Clear-sky references (clock,
        flatline, sensor plausibility and drift) are then on each device's own geometry;
        devices without an entry use the ``tilt_deg``/``azimuth_deg`` of their inverter row,
        else the site plane.
    prior : heliaudit.flags_window.Prior, optional
        An incremental run (issue #16): ``frames`` and ``counters`` cover only the new data
        and a look-back; each inverter's own flags before the cut and its daily inputs of the
        whole-history detectors come from the store.
    collect : dict, optional
        Receives what the next incremental run needs: ``parts`` (each inverter's own flags
        before the site-wide merging), ``days`` (:func:`heliaudit.flags_window.day_products`),
        ``seen`` and ``last_seen`` (inverters with data, their last reading).

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
    cs_cache: dict[tuple, pd.Series] = {}
    sun_at = SunAt(site)

    def expected_grid(x: pd.Series, iv: np.ndarray) -> tuple[pd.DatetimeIndex, np.ndarray]:
        """The device's expected timestamps: its readings, the intervals missing between them
        and out to the site's span, stepping by each neighbouring reading's interval."""
        ts, step = fill_gaps(epoch_s(x.index), iv, span[0], span[1])
        return pd.DatetimeIndex(pd.to_datetime(ts, unit="s", utc=True), name="ts_utc"), step

    # span of the site's sensor data: each sensor's dropouts are judged over it
    spans = [(int(epoch_s(e[2].index).min()), int(epoch_s(e[2].index).max()
                                                   + sensor_intervals(e)[-1]))
             for e in sensors if len(e[2]) > 1]
    span = (min(a for a, _b in spans), max(b for _a, b in spans)) if spans else (None, None)
    # 1. plausibility of every sensor, before any diagnosis
    planes = planes or {}
    iv_of, sensor_sun = sensor_sun_for(sensors, planes, sun_at)

    # an incremental run judges the sensors' new days only (unless a sibling jump was found)
    sp = prior if prior is not None and prior.sensor_window else None
    skeep: dict = {}  # sensor id -> its day judgements, for the next incremental run
    invalid_days, judged = judge_sensors(sensors, sensor_sun, inverters, daily,
                                         std_offset_s=off_s, intervals=iv_of,
                                         site=site, prior=sp, keep=skeep)
    parts += judged
    last_seen: dict[str, int] = {}
    kinds: dict[str, str] = {}
    ratios: dict[str, pd.Series] = {}
    rain_parts: list[pd.Series] = []
    sensor_parts: list[pd.DataFrame] = []  # interval checks, kept in flag_part
    inv_rows = {r["device_id"]: r for r in inverters.to_dict("records")}
    n_clock = 0
    for entry in sensors:
        sid, q, x = entry[:3]
        iv = sensor_intervals(entry)
        if not x.index.is_monotonic_increasing:
            order = np.argsort(epoch_s(x.index), kind="stable")
            x = x.iloc[order]
        xn = x.dropna()
        if len(xn):
            last_seen[sid], kinds[sid] = int(epoch_s(xn.index[-1:])[0]), q
        elif sp is not None and sid in sp.sensor_last:
            last_seen[sid], kinds[sid] = sp.sensor_last[sid]
        if len(x) or _stored(sp, sid) is not None:
            g_idx, g_iv = expected_grid(x, iv) if len(x) else (x.index, iv)
            gs = sun_at(g_idx, g_iv, planes.get(sid))  # the sensor's own plane (#11)
            days = invalid_days.get(sid)
            xv = x if days is None else x.mask(sensor_qa.invalid_interval_mask(
                x.index, days, std_offset_s=off_s))
            fl, ratio = sensor_flags(sid, q, x, gs, std_offset_s=off_s, site_zone=zone,
                                     source=sources.get(sid), x_valid=xv, interval_s=iv,
                                     prior=sp, keep=skeep)
            for f in fl:
                (sensor_parts if len(f) and f["kind"].isin(SENSOR_INTERVAL_KINDS).all()
                 else parts).append(f)
            n_clock += q == "poa_wm2"
            if ratio is not None and len(ratio):
                ratios[sid] = ratio
            if q == "rain_mm":
                day = (epoch_s(x.index) + off_s) // 86400
                r = x.groupby(day).sum()
                r.index = pd.to_datetime(r.index.to_numpy() * 86400, unit="s")
                _keep(skeep, sid, "rain_mm", r)
                if sp is not None:
                    st = _stored(sp, sid)
                    r = _join_series(None if st is None or "rain_mm" not in st
                                     else st["rain_mm"].dropna(), r, sp)
                if r is not None and len(r):
                    rain_parts.append(r)
        done += 1
        if progress:
            progress(done, n_total)
    if sp is not None:  # the sensors' interval flags before the cut from the store
        sensor_parts = [p for p in [sp.sensor_parts, *(sp.keep_new(f) for f in sensor_parts)]
                        if p is not None and len(p)]
    parts += sensor_parts
    parts += sibling_flags(ratios, std_offset_s=off_s)
    # several rain gauges: the daily mean of those that reported
    rain_daily = pd.concat(rain_parts, axis=1).mean(axis=1) if rain_parts else None
    withheld: dict[str, pd.Series] = {}
    soiling_pi: dict[str, pd.Series] = {}
    clock_days: dict[str, pd.DataFrame] = {}
    clock_series: dict[str, tuple] = {}  # interval data that date a fix during the day
    inv_parts: list[pd.DataFrame] = []  # each inverter's own flags (kept by incremental runs)
    seen: set[str] = set()
    for inv, frame in frames:
        if len(frame):
            pn = frame["p_ac_kw"].dropna()
            if len(pn):
                last_seen[inv["device_id"]] = int(epoch_s(pn.index[-1:])[0])
                kinds[inv["device_id"]] = "inverter"
            iv_s = frame["interval_h"].to_numpy(float) * 3600.0
            gs = sun_at(frame.index, iv_s)
            # the inverter's own planes (#11): its arrays from the site model (trackers
            # included), else a plane given on its inverter row, else the site's
            dev = inv["device_id"]
            plane = planes.get(dev) or inverter_plane(inv_rows.get(dev, inv), site)
            gp = gs if plane is None else sun_at(frame.index, iv_s, plane)
            fr = mask_invalid_sensor_days(frame, inv, invalid_days, off_s)
            inv_parts += inverter_flags(inv, fr, gp, std_offset_s=off_s, site_zone=zone,
                                        source=sources.get(inv["device_id"]), cache=cs_cache,
                                        withheld=withheld, soiling_pi=soiling_pi,
                                        clock_days=clock_days, clock_series=clock_series,
                                        power_limit=prior is None
                                        or inv["device_id"] in prior.full_devices)
            inv_parts.append(power_dropout_flags(inv, frame, gs))
            seen.add(inv["device_id"])
            if counters and inv["device_id"] in counters:
                inv_parts.append(counter_flags(inv, frame, counters[inv["device_id"]],
                                               std_offset_s=off_s))
        done += 1
        if progress:
            progress(done, n_total)
    if prior is not None:  # an incremental run: earlier days and flags from the store
        inv_parts, withheld, soiling_pi, clock_days = prior.merge(inv_parts, withheld,
                                                                  soiling_pi, clock_days)
        for dev, ts in prior.last_seen.items():
            last_seen[dev] = max(ts, last_seen.get(dev, ts))
            kinds[dev] = "inverter"
        seen |= prior.seen
    if collect is not None:
        from heliaudit.flags_window import day_products, sensor_day_rows
        collect.update(sensor_parts=sensor_parts, sensor_days=sensor_day_rows(
                           {sid: pd.DataFrame(k) for sid, k in skeep.items()}),
                       sensor_last={sid: [int(last_seen[sid]), kinds[sid]]
                                    for sid in last_seen if kinds.get(sid) != "inverter"})
        collect.update(parts=[p for p in inv_parts if len(p)], seen=sorted(seen),
                       days=day_products(withheld, soiling_pi, clock_days,
                                         from_day=None if prior is None else prior.cut_day,
                                         keep=set() if prior is None else prior.full_devices),
                       last_seen={d: last_seen[d] for d in seen if d in last_seen})
    n_clock += len(seen)
    parts += inv_parts
    parts += inverter_clock_flags(clock_days, std_offset_s=off_s, site_zone=zone,
                                  sources=sources, series=clock_series)
    parts += daily_flags(daily, inverters, std_offset_s=off_s, economics=economics,
                         rain_daily=rain_daily, n_runs=n_runs, withheld=withheld,
                         soiling_pi=soiling_pi, clock_days=clock_days)
    if last_seen:
        parts.append(flag_frame(stopped_reporting_flags(
            last_seen, max(last_seen.values()), min_days=PARAMS["stopped"]["min_days"],
            kinds=kinds)))
    parts = [p for p in parts if len(p)]
    if not parts:
        return flag_frame([])
    out = pd.concat(parts, ignore_index=True)[list(FLAG_COLUMNS)]
    out = outages.site_outage_events(out, len(inverters), **PARAMS["site_outage"])
    out = outages.merge_clipping_by_month(out)
    out = consolidate_clock_flags(out, n_clock_devices=n_clock)
    out = merge_shared_flags(out)
    out = attach_consequences(out)
    return out.sort_values(["start_s", "kind", "device_id"], na_position="first",
                           kind="stable").reset_index(drop=True)


# ---------------------------------------------------------------- the job



def _arrays_by_inverter(cfg: dict) -> dict[str, list[dict]]:
    """inverter id -> its ``arrays`` entries (id, p_dc_kwp, tilt_deg, azimuth_deg) from the
    stored configuration, where given."""
    out: dict[str, list[dict]] = {}
    for inv in cfg.get("inverters", []) or []:
        if isinstance(inv, dict) and inv.get("id") and isinstance(inv.get("arrays"), list):
            out[str(inv["id"])] = [a for a in inv["arrays"] if isinstance(a, dict)]
    return out


def _resolved_arrays(config_toml: str | None, raw: dict[str, list[dict]]) -> dict[str, list[dict]]:
    """Every inverter's arrays as the site model resolves them (named ``[[planes]]``, an
    inverter's own ``plane``, inline tilt/azimuth, the site plane as default): id, kWp and the
    fixed plane's tilt/azimuth (None for a tracker, whose plane moves). Falls back to the raw
    ``arrays`` tables when the stored configuration no longer parses."""
    from ingest.config import ConfigError, parse_site_config

    try:
        cfg = parse_site_config(config_toml or "", "<stored configuration>")
    except (ConfigError, ValueError):
        return raw
    return {str(inv.id): [{"id": a.id, "p_dc_kwp": a.p_dc_kwp,
                           "tilt_deg": None if a.plane.is_tracker else a.plane.tilt_deg,
                           "azimuth_deg": None if a.plane.is_tracker else a.plane.azimuth_deg,
                           "plane": a.plane.label()}
                          for a in inv.arrays]
            for inv in cfg.inverters}


def _with_planes(inverters: pd.DataFrame, arrays: dict[str, list[dict]]) -> pd.DataFrame:
    """Inverter rows with ``tilt_deg``/``azimuth_deg`` where all of an inverter's arrays lie
    on one plane (the clock check then uses that plane)."""
    if not arrays or "tilt_deg" in inverters:
        return inverters
    tilt, azim = [], []
    for dev in inverters["device_id"]:
        planes = {(a.get("tilt_deg"), a.get("azimuth_deg")) for a in arrays.get(str(dev), [])}
        t, a = planes.pop() if len(planes) == 1 else (None, None)
        tilt.append(t)
        azim.append(a)
    return inverters.assign(tilt_deg=tilt, azimuth_deg=azim)


def input_mismatch_for_site(engine: sa.Engine, site_id: str, arrays: dict[str, list[dict]],
                            std_offset_s: int, start_s: int | None = None
                            ) -> tuple[list[pd.DataFrame], str]:
    """Input-mismatch flags of every inverter whose inputs are loaded and whose arrays give
    each input's kWp; returns the flags and a note on what ran."""
    from db import timeseries as tsdb

    read = getattr(tsdb, "input_dc_power", None)
    if read is None:
        return [], "not run: the store has no per-input DC query"
    out, n_run = [], 0
    for dev, arr in arrays.items():
        kwp = {str(a["id"]): float(a["p_dc_kwp"]) for a in arr
               if a.get("id") is not None and a.get("p_dc_kwp")}
        if len(kwp) < 2:
            continue
        df = read(engine, site_id, dev) if start_s is None else read(engine, site_id, dev, start_s)
        cols = [c for c in df.columns if c in kwp]
        if len(cols) < 2:
            continue
        # inputs are compared within one plane; a tracker's plane is its whole geometry
        plane = {str(a["id"]): a.get("plane") or (a.get("tilt_deg"), a.get("azimuth_deg"))
                 for a in arr}
        out.append(outliers.input_mismatch_flags(
            df[cols], kwp, device_id=dev, input_plane={c: plane.get(c) for c in cols},
            interval_h=df["interval_h"].to_numpy(float) if "interval_h" in df else None,
            std_offset_s=std_offset_s))
        n_run += 1
    return out, (f"run on {n_run} inverters" if n_run else
                 "not run: no inverter with two or more loaded inputs and their kWp")


def read_sensors(engine: sa.Engine, site_id: str, *, quantities: tuple[str, ...] | None = None,
                 start_s: int | None = None) -> list[tuple]:
    """Every sensor channel of a site (optionally only of ``quantities``, from ``start_s``)
    as ``(sensor id, quantity, Series on ts_utc, interval [s] per reading)``."""
    with engine.connect() as conn:
        setup = dict(sensor_rows=sensor_quantities(conn, site_id),
                     channels=site_channels(conn, site_id),
                     instant=instant_channels(conn, site_id))
        return _read_sensors(conn, setup, quantities, start_s)


def sibling_jumps(sensors, site: dict, *, std_offset_s: int, sun_for=None, prior=None,
                  keep: dict | None = None) -> tuple[pd.DataFrame, dict]:
    """Jumps of POA sensors against their siblings, and the invalid days they imply.

    Each POA sensor's clear-day ratio to the modelled clear-sky POA (on the site plane, on
    the days :func:`analytics.sensor_qa.irradiance_validity` finds plausible) goes into
    :func:`analytics.sensor_qa.sibling_jump_flags`; :func:`analytics.sensor_qa.jump_validity`
    turns each jump into invalid days of its suspect from the jump on. The daily job and the
    flags job both call this, so PR, filters and degradation leave out the same days that
    the flags report (issue #14).

    ``prior`` and ``keep`` as in :func:`judge_sensors` (an incremental run: the stored
    clear-day ratios and days before the cut; this run's ratios for the next run).

    Returns
    -------
    (flags, {sensor id: day table with reason 'jump_vs_sibling'})
    """
    planes = sensor_planes(site)
    poa = [(e[0], e[2].sort_index()) for e in sensors if e[1] == "poa_wm2"
           and (len(e[2]) or _stored(prior, e[0]) is not None)
           and planes.get(e[0], "site") != "tracker"]
    if len(poa) < 2:
        return flag_frame([]), {}
    ratios, days_of = {}, {}
    for sid, x in poa:
        plane = planes.get(sid, "site")
        sun = (sun_for(x.index, sid).reindex(x.index) if sun_for is not None
               else site_sun(x.index, site, _tau_s(x.index) / 3600.0,
                             None if plane == "site" else plane))
        days = sensor_qa.irradiance_validity(x, sun["elev"].to_numpy(),
                                             sun["poa_cs"].to_numpy(),
                                             std_offset_s=std_offset_s)
        days_of[sid] = days.index
        xv = x.mask(sensor_qa.invalid_interval_mask(x.index, days, std_offset_s=std_offset_s))
        r = sensor_qa.clear_day_ratio(xv, sun["poa_cs"], sun["aoi"].to_numpy(),
                                      std_offset_s=std_offset_s)
        _keep(keep, sid, "jump_ratio", r)
        if prior is not None:
            stored = _stored(prior, sid)
            old_days = (pd.DatetimeIndex([]) if stored is None or "valid_reason" not in stored
                        else stored.index[stored["valid_reason"].notna().to_numpy()])
            cut = pd.Timestamp(int(prior.cut_day) * 86400, unit="s")
            days_of[sid] = old_days.append(days.index[days.index >= cut])
            r = _join_series(None if stored is None or "jump_ratio" not in stored
                             else stored["jump_ratio"].dropna(), r, prior)
            r = r if r is not None else pd.Series(dtype=float)
        if len(r):
            ratios[sid] = r
    # only sensors in one plane are siblings: each plane's clear-day ratios are compared
    parts = []
    for _key, grp in itertools.groupby(sorted(ratios, key=lambda k: str(planes.get(k, "site"))),
                                       key=lambda k: str(planes.get(k, "site"))):
        grp = list(grp)
        if len(grp) >= 2:
            parts.append(sensor_qa.sibling_jump_flags({k: ratios[k] for k in grp},
                                                      std_offset_s=std_offset_s))
    jumps = pd.concat(parts, ignore_index=True) if parts else flag_frame([])
    return jumps, sensor_qa.jump_validity(jumps, days_of, std_offset_s=std_offset_s)


def _in_plane_of(inverters: pd.DataFrame, plane, site: dict | None) -> pd.DataFrame:
    """The inverters whose arrays lie in ``plane`` (a :func:`sensor_planes` value): only
    their power is evidence about a sensor in that plane (none for a tracker sensor)."""
    if plane == "tracker":
        return inverters.iloc[0:0]
    if site is None or "tilt_deg" not in inverters or "azimuth_deg" not in inverters:
        return inverters
    keys = []
    for t, a in zip(inverters["tilt_deg"], inverters["azimuth_deg"], strict=True):
        try:
            t, a = float(t), float(a)
        except (TypeError, ValueError):
            keys.append("site")
            continue
        if not (np.isfinite(t) and np.isfinite(a)) or (
                abs(t - float(site["tilt_deg"])) < 0.5
                and abs(a - float(site["azimuth_deg"])) < 0.5):
            keys.append("site")
        else:
            keys.append((t, a))

    def same(k):
        if k == "site" or plane == "site":
            return k == plane
        return abs(k[0] - plane[0]) < 0.5 and abs(k[1] - plane[1]) < 0.5

    return inverters[[same(k) for k in keys]]


def sensor_planes(site: dict) -> dict:
    """POA sensor id -> its plane from the stored configuration: ``"site"`` (the site's
    plane, also when none is given), ``"tracker"``, or (tilt_deg, azimuth_deg)."""
    from ingest.config import ConfigError, parse_site_config

    try:
        cfg = parse_site_config(site.get("config_toml") or "", "<stored configuration>")
    except (ConfigError, ValueError):
        return {}
    out = {}
    for sn in cfg.sensors:
        pl = getattr(sn, "plane", None)
        if pl is None:
            out[sn.id] = "site"
        elif pl.is_tracker:
            out[sn.id] = "tracker"
        elif (abs(pl.tilt_deg - float(site["tilt_deg"])) < 0.5
              and abs(pl.azimuth_deg - float(site["azimuth_deg"])) < 0.5):
            out[sn.id] = "site"
        else:
            out[sn.id] = (float(pl.tilt_deg), float(pl.azimuth_deg))
    return out


def _site_setup(engine: sa.Engine, site_id: str) -> dict:
    """Everything a flags run needs to know about the site, read once."""
    with engine.connect() as conn:
        site = site_row(conn, site_id)
        setup = dict(site=site, inverters=site_inverters(conn, site_id),
                     sensor_rows=sensor_quantities(conn, site_id),
                     channels=site_channels(conn, site_id),
                     instant=instant_channels(conn, site_id))
    try:
        cfg = tomllib.loads(site.get("config_toml") or "")
    except tomllib.TOMLDecodeError:
        cfg = {}
    econ = cfg.get("economics", {}) if isinstance(cfg.get("economics", {}), dict) else {}
    setup["cfg"] = cfg
    setup["economics"] = {"tariff_per_kwh": float(econ.get("tariff_per_kwh", 0.05)),
                          "cleaning_cost": float(econ.get("cleaning_cost", 0.0)),
                          "currency": str(econ.get("currency", "EUR"))}
    setup["params"] = {**PARAMS, "economics": setup["economics"], "timezone": site["timezone"]}
    setup["off_s"] = int(round(standard_utc_offset_h(site["timezone"]) * 3600))
    return setup


def _read_sensors(conn: sa.Connection, setup: dict,
                  quantities: tuple[str, ...] | None = None, start_s: int | None = None
                  ) -> list[tuple]:
    sensors = []
    for sid, q in setup["sensor_rows"]:
        ch = setup["channels"].get((sid, q))
        if ch is None or (quantities is not None and q not in quantities):
            continue
        ts, v, iv = read_channel(conn, ch, start_s, with_interval=True)
        iv = fill_unknown_intervals(ts, iv)
        if ch in setup["instant"]:  # samples: QA runs on the samples, durations by their spacing
            iv = np.append(np.diff(ts).astype(float), iv[-1:]) if ts.size else iv
        idx = pd.DatetimeIndex(pd.to_datetime(ts, unit="s", utc=True), name="ts_utc")
        sensors.append((sid, q, pd.Series(v, index=idx, name=q), iv))
    return sensors


def _read_counters(conn: sa.Connection, setup: dict, devices, start_s: int | None) -> dict:
    counters = {}
    for dev in devices:
        ch = setup["channels"].get((dev, "e_ac_total_kwh"))
        if ch is not None:
            ts, v, iv = read_channel(conn, ch, start_s, with_interval=True)
            if ts.size:
                counters[dev] = (ts, v, fill_unknown_intervals(ts, iv))
    return counters


def _prior(engine: sa.Engine, site_id: str, setup: dict, since_s: int | None = None
           ) -> tuple[object | None, str]:
    """The stored state for an incremental run, or None (and why) when the run must be full."""
    from heliaudit import flags_window as fw

    state, why = _stored_state(engine, site_id, setup)
    if state is None:
        return None, why
    new = batches_after(engine, site_id, state.get("through_batch_id") or 0)
    first_new = min([lo for lo, _hi in new] + ([int(since_s)] if since_s is not None else []),
                    default=state.get("through_s"))
    if first_new is None:
        return None, "no reading seen by the last flags run"
    parts = read_flag_parts(engine, site_id)
    cut = fw.find_cut(first_new, state.get("through_s"), parts, setup["off_s"],
                      state.get("full_devices", []))
    cut_day = (cut + setup["off_s"]) // 86400
    sensor_ids = [sid for sid, _q in setup["sensor_rows"]]
    return fw.Prior.from_store(cut, cut_day, parts,
                               read_flag_days(engine, site_id, sensor_ids, inverters=False),
                               state, sensor_ids=sensor_ids,
                               inverter_days=read_inverter_days(engine, site_id)
                               ), f"from {dt.datetime.fromtimestamp(cut, dt.UTC):%Y-%m-%d %H:%M} UTC"


def _stored_state(engine: sa.Engine, site_id: str, setup: dict) -> tuple[dict | None, str]:
    """The last flags run's window state when what it stored is valid now (same detector
    settings, software version and site configuration, sensors' days stored), else None
    and why."""
    last = last_computation(engine, site_id, "flags")
    state = (last or {}).get("params", {}).get("window")
    if not state:
        return None, "no earlier flags run with a stored window state"
    if not state.get("sensor_days"):
        return None, "the stored state predates the sensors' day judgements (store v7)"
    if {k: v for k, v in last["params"].items() if k != "window"} != json.loads(
            to_json(setup["params"])):
        return None, "detector settings changed since the last flags run"
    if last.get("software_version") != heliaudit.__version__:
        return None, "another heliaudit version made the stored flags"
    if state.get("config_sha256") != setup["site"].get("config_sha256"):
        return None, "the site configuration changed since the last flags run"
    return state, ""


def stored_poa_days(engine: sa.Engine, site_id: str, first_day: int):
    """For the daily job's sibling check (issue #16): the POA sensors' day judgements the
    last flags run stored, before a cut day, so only the readings from the cut (less the
    sensors' look-back) are read and judged; None when they cannot stand in for a judgement
    of the whole history (no valid stored state, a sibling jump being judged whole, a POA
    sensor with readings before the cut but no stored days).

    The cut is the earliest of ``first_day`` (the first day this daily run recomputes), the
    day of the last reading the flags run saw and the first day of any batch loaded since
    it, so every stored day was judged on the readings the store holds now. Returns an
    object with ``cut_day``, ``sensor_days`` (as :class:`heliaudit.flags_window.Prior`
    holds them) and ``read_from_s`` (UTC s)."""
    from types import SimpleNamespace

    from heliaudit import flags_window as fw

    setup = _site_setup(engine, site_id)
    state, _why = _stored_state(engine, site_id, setup)
    if state is None or state.get("sensors_whole") or state.get("through_s") is None:
        return None
    off_s = setup["off_s"]
    new = batches_after(engine, site_id, state.get("through_batch_id") or 0)
    first_s = min([int(state["through_s"]), *(int(lo) for lo, _hi in new)])
    cut_day = min(int(first_day), (first_s + off_s) // 86400)
    cut_s = cut_day * 86400 - off_s
    poa = [sid for sid, q in setup["sensor_rows"] if q == "poa_wm2"]
    days = read_flag_days(engine, site_id, poa, inverters=False)
    days = days[days["day_no"] < cut_day]
    sensor_days = {sid: g.reset_index(drop=True) for sid, g in days.groupby("device_id")}
    spans = state.get("sensor_span", {})
    if any(sid not in sensor_days and sid in spans and int(spans[sid][0]) < cut_s
           for sid in poa):
        return None
    return SimpleNamespace(cut_day=cut_day, sensor_days=sensor_days,
                           read_from_s=cut_s - fw.INTERVAL_LOOKBACK_DAYS * 86400)


def _sensor_spans(sensors, prior) -> dict:
    """Sensor id -> [first row, last row] (UTC s) over its whole history: the first from the
    store in an incremental run."""
    out = {}
    for e in sensors:
        sid, x = e[0], e[2]
        old = None if prior is None else prior.sensor_span.get(sid)
        if len(x):
            ts = epoch_s(x.index)
            first, last = int(ts.min()), int(ts.max())
            if old is not None and not prior.sensors_whole:
                first = min(first, old[0])
            out[sid] = [first, last]
        elif old is not None:
            out[sid] = list(old)
    return out


def _has_jump(flags: pd.DataFrame) -> bool:
    """Whether the flags hold a sensor jump against its siblings."""
    m = flags["kind"] == "sensor_implausible"
    return any(isinstance(d, dict) and d.get("reason") == "jump_vs_sibling"
               for d in flags.loc[m, "details"])


def _repack_daily(prior, daily_read: dict, daily: pd.DataFrame) -> bool:
    """Whether this run rewrites the packed copy of the daily columns (``flag_daily_pack``):
    after a full run, when an inverter had to be read whole, and when the pack would no
    longer reach the next run's cut (about the start of the month of the last day; a weekly
    cycle rewrites it about once a month, each rewrite costing about as much as reading a
    month of rows)."""
    if prior is None or daily_read["whole"] or daily_read["pack_last_day"] is None:
        return True
    if not len(daily):
        return False
    last = pd.Timestamp(max(daily["day"])) - pd.Timedelta(days=2)
    next_cut = (last - pd.Timedelta(days=last.day - 1)).normalize()
    return daily_read["pack_last_day"] + 1 < (next_cut - pd.Timestamp("1970-01-01")).days


def run_flags(engine: sa.Engine, site_id: str, progress: Progress | None = None, *,
              full: bool = True, since_s: int | None = None) -> int:
    """Recompute the flags of ``site_id`` and store them; return how many the site has.

    With ``full`` every flag is recomputed from the whole history; otherwise (issue #16) only
    the window new data can change, with each detector's look-back
    (:mod:`heliaudit.flags_window`), falling back to a full run when the store keeps no state
    from an earlier run or the detector settings changed. New data are the batches loaded
    since the last flags run, and readings from ``since_s`` (UTC s) when given. Records a ``computation`` row
    (kind ``flags``, ``heliaudit.__version__``, the detector parameters and the window state
    as JSON); only flags that changed are replaced. Reads the daily table, so run it after
    the daily job. Raises :class:`SiteNotFoundError` for an unknown site.
    """
    from heliaudit import flags_window as fw

    setup = _site_setup(engine, site_id)
    site, inverters, off_s = setup["site"], setup["inverters"], setup["off_s"]
    prior, how = (None, "full") if full else _prior(engine, site_id, setup, since_s)
    scope = "full" if prior is None else f"window {how}"
    with engine.connect() as conn:
        through_batch = latest_batch_id(conn, site_id)
    with engine.begin() as conn:
        comp_id = begin_computation(conn, site_id, "flags", setup["params"], scope=scope,
                                    software_version=heliaudit.__version__)
    # the days before the cut from the flags' own packed copy where provably unchanged (v9)
    daily, daily_read = read_daily_inputs(engine, site_id, DAILY_COLUMNS_USED,
                                          from_day=None if prior is None else prior.cut_day)
    all_inv = list(inverters["device_id"])
    if prior is None:
        frames = inverter_frames(engine, site_id)
        start_s = start_inputs = None
        read_whole = all_inv
    else:
        start_s = prior.cut_s - fw.INTERVAL_LOOKBACK_DAYS * 86400
        start_inputs = prior.cut_s - fw.INPUT_LOOKBACK_DAYS * 86400
        read_whole = [d for d in all_inv if d in prior.full_devices]
        window = [d for d in all_inv if d not in prior.full_devices]
        frames = itertools.chain(
            inverter_frames(engine, site_id, start_s, None, window) if window else (),
            inverter_frames(engine, site_id, None, None, read_whole) if read_whole else ())
    sensor_start = None if prior is None or prior.sensors_whole else start_s
    with engine.connect() as conn:
        sensors = _read_sensors(conn, setup, start_s=sensor_start)
        counters = _read_counters(conn, setup, read_whole, None)
        if prior is not None:
            counters.update(_read_counters(conn, setup, [d for d in all_inv
                                                         if d not in prior.full_devices],
                                           start_s))
    arrays = _resolved_arrays(site.get("config_toml"), _arrays_by_inverter(setup["cfg"]))
    collect: dict = {}
    kw = dict(economics=setup["economics"], sources=_sources_by_device(setup["cfg"]),
              progress=progress, counters=counters,
              planes=device_planes(site.get("config_toml"), site), collect=collect)
    try:
        flags = compute_flags(site, _with_planes(inverters, arrays), frames, sensors, daily,
                              prior=prior, **kw)
    except SensorsWholeNeeded:  # a sibling jump: the sensors are judged whole
        prior.sensors_whole = True
        prior.sensor_days, prior.sensor_parts = {}, None
        prior.whole_sensors = {sid for sid, _q in setup["sensor_rows"]}
        with engine.connect() as conn:
            sensors = _read_sensors(conn, setup)
        flags = compute_flags(site, _with_planes(inverters, arrays), frames, sensors, daily,
                              prior=prior, **kw)
    mism, _note = input_mismatch_for_site(engine, site_id, arrays, off_s, start_inputs)
    mism = [m for m in mism if len(m)]
    if prior is not None:
        mism = [m for m in (prior.keep_new(x) for x in mism) if len(m)]
        if len(prior.late_parts):
            mism.append(prior.late_parts)
    if mism:
        flags = pd.concat([flags, *mism], ignore_index=True)
    pieces = [*collect["sensor_parts"], *collect["parts"], *mism]
    parts = pd.concat(pieces, ignore_index=True) if pieces else flag_frame([])
    if prior is not None:  # stored parts before the cut stay where they are
        parts = prior.keep_new(parts)
    days = collect["days"]
    if len(collect["sensor_days"]):
        days = pd.concat([d for d in (days, collect["sensor_days"]) if len(d)],
                         ignore_index=True)
    if prior is not None and len(days):
        days = days[(days["day_no"] >= prior.cut_day)
                    | days["device_id"].isin(list(prior.full_devices | prior.whole_sensors))]
    seen_ts = [*collect["last_seen"].values(),
               *(int(epoch_s(x.index[-1:])[0]) for _s, _q, x, *_r in sensors if len(x))]
    limited = sorted({str(d) for d in parts.loc[parts["kind"] == "power_limit", "device_id"]})
    state = {"through_batch_id": through_batch, "through_s": max(seen_ts, default=None),
             "config_sha256": site.get("config_sha256"),
             "last_seen": collect["last_seen"], "seen": collect["seen"],
             "full_devices": limited if prior is None else sorted(
                 set(limited) | prior.full_devices), "scope": scope,
             # sensors' day judgements are stored (v7); a sibling jump: next run whole
             "sensor_days": True, "sensor_last": collect["sensor_last"],
             "sensor_span": _sensor_spans(sensors, prior),
             "sensors_whole": bool(_has_jump(flags)),
             "daily_read": {"packed_days": daily_read["packed_days"],
                            "rows_read": daily_read["rows_read"],
                            "inverters_whole": len(daily_read["whole"])}}
    with engine.begin() as conn:
        if _repack_daily(prior, daily_read, daily):
            write_daily_pack(conn, site_id, daily, DAILY_COLUMNS_USED)
        n = store_flags(conn, site_id, flags, comp_id, parts=parts, days=days,
                        cut_s=None if prior is None else prior.cut_s,
                        cut_day=None if prior is None else prior.cut_day,
                        full_devices=() if prior is None
                        else prior.full_devices | prior.whole_sensors)["flags"]
        finish_computation(conn, comp_id, params={**setup["params"], "window": state})
    return n
