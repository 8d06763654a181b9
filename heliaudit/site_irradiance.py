"""Each inverter's own irradiance for the daily job: its arrays' planes and irradiance sources.

The store's inverter frame carries the reading of the inverter's first irradiance sensor as
``poa_wm2``. For most inverters that is already right (one plane, a POA sensor in it: the
``poa_same_plane`` basis) and nothing is done here. For the others — arrays on other planes
than their sensor, single-axis trackers, horizontal (GHI) sensors, several arrays on
different planes — :class:`SiteIrradiance` replaces ``poa_wm2`` by the capacity-weighted
irradiance of the inverter's arrays, each from its source (:mod:`ingest.site_model`), with
the models of :mod:`analytics.irradiance` (DIRINT Perez et al. 1992, GTI-DIRINT Marion 2015, Perez 1990,
single-axis tracking Marion & Dobos 2013), and gives the matching clear-sky POA for the
coverage weights.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import sqlalchemy as sa

from analytics import irradiance as airr
from db.timeseries import (
    fill_unknown_intervals,
    instant_channels,
    instant_to_means,
    overlap_mean,
    read_channel,
    site_channels,
)
from ingest.config import ConfigError, SiteConfig, parse_site_config
from ingest.site_model import BASIS_METHODS, Plane, inverter_basis, is_simple


def stored_config(site_row: dict) -> SiteConfig | None:
    """The site's configuration parsed from its stored TOML; None if it no longer parses."""
    try:
        return parse_site_config(site_row.get("config_toml") or "", f"site {site_row['site_id']!r}")
    except (ConfigError, KeyError):
        return None


def clearsky_references(site_row: dict, ts_utc: pd.DatetimeIndex, interval_h,
                        inverter_ids, sensors, *, model: str = "haydavies"
                        ) -> tuple[pd.DataFrame, dict[str, np.ndarray], dict[str, np.ndarray]]:
    """Modelled clear-sky irradiance of every inverter and irradiance sensor on its OWN plane.

    For the clear-sky cross-checks (degradation), never for PR. Each inverter gets the
    capacity-weighted clear-sky POA of its arrays (``Σ P0_j G_cs,j / Σ P0_j``), each array on
    its plane from the site model: fixed, or a single-axis tracker turned as
    :func:`pvlib.tracking.singleaxis` turns it (Marion & Dobos 2013). A POA sensor gets the
    clear-sky POA of its declared plane, a horizontal (GHI) sensor the clear-sky GHI. Clear
    sky: Ineichen & Perez (2002) with the Linke turbidity climatology; sky-diffuse
    transposition ``model`` (Hay & Davies 1980 by default; :func:`analytics.irradiance.poa_clearsky`);
    sun position by NREL SPA at each interval's own midpoint (``interval_h`` per row). Without
    a stored configuration that parses, every device is taken in the site plane.

    Parameters
    ----------
    site_row : dict
        The site row (``latitude_deg``, ``longitude_deg``, ``altitude_m``, ``tilt_deg``,
        ``azimuth_deg``, ``albedo``, ``config_toml``).
    ts_utc : DatetimeIndex
        Interval starts, UTC.
    interval_h : array
        Each row's interval length [h].
    inverter_ids : iterable of str
    sensors : iterable of (sensor_id, quantity)
        ``quantity`` ``poa_wm2`` or ``ghi_wm2``.

    Returns
    -------
    (geometry, {inverter id: G_cs [W/m²]}, {sensor id: G_cs [W/m²]})
    """
    cfg = stored_config(site_row)
    site_plane = Plane(tilt_deg=float(site_row["tilt_deg"]),
                       azimuth_deg=float(site_row["azimuth_deg"]), id="site")
    geo = airr.sun_geometry(ts_utc, site_row["latitude_deg"], site_row["longitude_deg"],
                            site_row["altitude_m"], interval_h,
                            solar_position_method="nrel_numpy")
    albedo = float(site_row["albedo"])
    cache: dict = {}

    def plane_cs(plane) -> np.ndarray:
        if plane not in cache:
            cache[plane] = airr.poa_clearsky(plane, geo, albedo, model=model)
        return cache[plane]

    invs = {i.id: i for i in cfg.inverters} if cfg else {}
    sens = {s.id: s for s in cfg.sensors} if cfg else {}
    inv_cs = {}
    for dev in inverter_ids:
        arrays = invs[dev].arrays if dev in invs else ()
        inv_cs[dev] = (airr.capacity_weighted_poa([plane_cs(a.plane) for a in arrays],
                                                  [a.p_dc_kwp for a in arrays])
                       if arrays else plane_cs(site_plane))
    sensor_cs = {}
    for sid, qty in sensors:
        if qty == "ghi_wm2":
            sensor_cs[sid] = geo["ghi_cs_wm2"].to_numpy(float)
            continue
        s = sens.get(sid)
        sensor_cs[sid] = plane_cs(s.plane if s is not None and s.plane is not None else site_plane)
    return geo, inv_cs, sensor_cs


class SiteIrradiance:
    """Per-run helper of the daily job for one site (reads sensor channels once per run)."""

    def __init__(self, engine: sa.Engine, site_row: dict, start_s: int | None, end_s: int | None):
        self.engine, self.site = engine, site_row
        self.start_s, self.end_s = start_s, end_s
        self.cfg = stored_config(site_row)
        self._inv = {i.id: i for i in self.cfg.inverters} if self.cfg else {}
        self._sensor = {s.id: s for s in self.cfg.sensors} if self.cfg else {}
        self._channels: dict | None = None
        self._readings: dict[int, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
        self._instant: set[int] = set()
        self._geo: pd.DataFrame | None = None
        self._plane_cache: dict = {}

    # ------------------------------------------------------------ what each inverter uses
    def basis(self, inverter_id: str) -> str:
        """The inverter's irradiance basis code (``poa_same_plane`` when unknown)."""
        inv = self._inv.get(inverter_id)
        return inverter_basis(inv.arrays) if inv and inv.arrays else "poa_same_plane"

    def needs_model(self, inverter_id: str) -> bool:
        inv = self._inv.get(inverter_id)
        return bool(inv and inv.arrays and not is_simple(inv, self.cfg.site_plane))

    def describe(self) -> dict:
        """Per inverter: arrays with plane, source, sensor and method; ratings assumed."""
        out = {}
        for inv in (self.cfg.inverters if self.cfg else ()):
            out[inv.id] = {
                "arrays": [{"id": a.id, "p_dc_kwp": a.p_dc_kwp, "plane": a.plane.label(),
                            "irradiance_basis": a.irradiance_basis, "sensor": a.irradiance_sensor,
                            "method": BASIS_METHODS[a.irradiance_basis]} for a in inv.arrays],
                "t_module_sensor": inv.t_module_sensor,
                "assumed": ([f"AC rating unknown: DC nameplate {inv.p_ac_max_kw:g} kW assumed "
                             "(no clipping modelled or flagged below it)"]
                            if inv.p_ac_max_assumed else [])
                + (["commissioning date unknown: no stabilisation period excluded"]
                   if inv.commissioned is None else []),
            }
        return out

    # ------------------------------------------------------------ data
    def _sensor_on_grid(self, sensor_id: str, quantity: str, ts_s: np.ndarray,
                        int_s: np.ndarray) -> np.ndarray:
        # as db.timeseries does for the inverter frame: each reading's recorded interval,
        # instantaneous samples as trapezoid means, time-overlap means into inverter intervals
        if self._channels is None:
            with self.engine.connect() as conn:
                self._channels = site_channels(conn, self.site["site_id"])
                self._instant = set(instant_channels(conn, self.site["site_id"]))
        ch = self._channels.get((sensor_id, quantity))
        if ch is None:
            return np.full(ts_s.size, np.nan)
        if ch not in self._readings:
            with self.engine.connect() as conn:
                ts, v, iv = read_channel(conn, ch, self.start_s, self.end_s, with_interval=True)
            iv = fill_unknown_intervals(ts, iv)
            self._readings[ch] = instant_to_means(ts, v, iv) if ch in self._instant else (ts, v, iv)
        st, sv, siv = self._readings[ch]
        return overlap_mean(ts_s, int_s, st, siv, sv)

    def _geometry(self, frame: pd.DataFrame) -> pd.DataFrame:
        if self._geo is None or not self._geo.index.equals(frame.index):
            s = self.site
            self._geo = airr.sun_geometry(frame.index, s["latitude_deg"], s["longitude_deg"],
                                          s["altitude_m"], frame["interval_h"].to_numpy())
            self._plane_cache = {}
        return self._geo

    def _array_poa(self, array, frame: pd.DataFrame, geo: pd.DataFrame) -> np.ndarray:
        key = (array.plane, array.irradiance_basis, array.irradiance_sensor)
        if key in self._plane_cache:
            return self._plane_cache[key]
        ts_s = frame.index.as_unit("s").asi8
        int_s = frame["interval_h"].to_numpy() * 3600.0
        albedo = float(self.site["albedo"])
        sensor = self._sensor[array.irradiance_sensor]
        if array.irradiance_basis == "ghi_transposed":
            ghi = self._sensor_on_grid(sensor.id, "ghi_wm2", ts_s, int_s)
            g = airr.poa_from_ghi(ghi, array.plane, geo, albedo)
        else:
            g = self._sensor_on_grid(sensor.id, "poa_wm2", ts_s, int_s)
            if array.irradiance_basis == "poa_other_plane_transposed":
                g = airr.poa_from_other_plane(g, sensor.plane, array.plane, geo, albedo)
        self._plane_cache[key] = g
        return g

    def apply(self, inverter_id: str, frame: pd.DataFrame) -> tuple[pd.DataFrame, np.ndarray]:
        """``(frame with poa_wm2 = the inverter's array irradiance, clear-sky POA)`` [W/m²]."""
        inv = self._inv[inverter_id]
        if not len(frame):
            return frame, np.zeros(0)
        geo = self._geometry(frame)
        albedo = float(self.site["albedo"])
        kwp = [a.p_dc_kwp for a in inv.arrays]
        g = airr.capacity_weighted_poa([self._array_poa(a, frame, geo) for a in inv.arrays], kwp)
        cs_key = ("clearsky", tuple(a.plane for a in inv.arrays), tuple(kwp))
        if cs_key not in self._plane_cache:
            self._plane_cache[cs_key] = airr.capacity_weighted_poa(
                [airr.poa_clearsky(a.plane, geo, albedo) for a in inv.arrays], kwp)
        out = frame.copy()
        out["poa_wm2"] = g
        return out, self._plane_cache[cs_key]
