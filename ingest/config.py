"""Site configuration: one TOML file per site, validated on load.

The format is documented with a full example in README.md ("Site configuration").
Every problem found is reported with the TOML key that holds it, for example
``quillpond.toml: inverters[3].gamma_pmp_per_c: expected a negative number per °C
(e.g. -0.0035 for -0.35 %/°C), got 0.35``. All problems are collected and raised
together in one :class:`ConfigError`, so a user fixes a file in one pass.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import re
import tomllib
import zoneinfo
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ingest.site_model import HORIZONTAL, PLANE_KINDS, Array, Plane, choose_source

FORMAT_VERSION = 1

#: Quantities a channel may carry, with the units accepted for each (first = stored unit).
QUANTITY_UNITS: dict[str, tuple[str, ...]] = {
    "p_ac_kw": ("kW", "W", "MW"),
    "p_dc_kw": ("kW", "W", "MW"),
    "e_ac_kwh": ("kWh", "Wh", "MWh"),  # energy of the interval
    "e_ac_total_kwh": ("kWh", "Wh", "MWh"),  # cumulative counter, turned into e_ac_kwh
    "poa_wm2": ("W/m2", "kW/m2"),
    "ghi_wm2": ("W/m2", "kW/m2"),
    "t_module_c": ("C", "F", "K"),
    "t_amb_c": ("C", "F", "K"),
    "wind_ms": ("m/s", "km/h"),
    "rain_mm": ("mm",),
}
INVERTER_QUANTITIES = ("p_ac_kw", "p_dc_kw", "e_ac_kwh", "e_ac_total_kwh")
SENSOR_QUANTITIES = ("poa_wm2", "ghi_wm2", "t_module_c", "t_amb_c", "wind_ms", "rain_mm")
INSTRUMENTS = ("thermopile_pyranometer", "reference_cell")
#: Sandia (King et al. 2004) mounting types; keys of pvlib TEMPERATURE_MODEL_PARAMETERS['sapm'].
MOUNTINGS = (
    "open_rack_glass_glass",
    "close_mount_glass_glass",
    "open_rack_glass_polymer",
    "insulated_back_glass_polymer",
)
LAYOUTS = ("wide", "long")
LABELS = ("start", "end")
AMBIGUOUS = ("infer", "first", "second", "reject")
_UNIT_ALIASES = {
    "w/m²": "W/m2", "w/m2": "W/m2", "wm2": "W/m2", "w m-2": "W/m2",
    "kw/m²": "kW/m2", "kw/m2": "kW/m2",
    "°c": "C", "degc": "C", "c": "C", "°f": "F", "degf": "F", "f": "F", "k": "K",
    "w": "W", "kw": "kW", "mw": "MW", "wh": "Wh", "kwh": "kWh", "mwh": "MWh",
    "m/s": "m/s", "km/h": "km/h", "mm": "mm",
}


class ConfigError(ValueError):
    """A site configuration that cannot be used; ``problems`` lists ``(key, message)``."""

    def __init__(self, path: str, problems: list[tuple[str, str]]):
        self.path = path
        self.problems = problems
        lines = [f"{path}: {key}: {msg}" for key, msg in problems]
        super().__init__("\n".join(lines))


def normalise_unit(unit: str) -> str:
    """Map a unit spelling (``'W/m²'``, ``'degC'``, ``'kw'``) to its canonical form."""
    return _UNIT_ALIASES.get(unit.strip().lower(), unit.strip())


@dataclass(frozen=True)
class Sensor:
    id: str
    quantity: str
    instrument: str | None = None  # POA/GHI only: thermopile_pyranometer | reference_cell
    notes: str = ""
    plane: Plane | None = None  # POA/GHI only: the plane the sensor lies in (GHI: horizontal)


@dataclass(frozen=True)
class Inverter:
    """One inverter. ``arrays`` always holds at least one :class:`ingest.site_model.Array`
    (an inverter without ``[[inverters.arrays]]`` has one array: its whole ``p_dc_kwp`` in its
    plane). ``p_ac_max_kw`` is the DC nameplate when the AC rating is unknown
    (``p_ac_max_assumed``); ``commissioned`` is None when unknown."""

    id: str
    p_dc_kwp: float
    p_ac_max_kw: float
    gamma_pmp_per_c: float
    mounting: str
    poa_sensor: str | None
    t_module_sensor: str | None
    commissioned: dt.date | None
    eta_inv_nom: float = 0.96
    t_amb_sensor: str | None = None
    wind_sensor: str | None = None
    peer_group: str = "site"
    ghi_sensor: str | None = None
    arrays: tuple[Array, ...] = ()
    p_ac_max_assumed: bool = False

    @property
    def irradiance_sensor(self) -> str:
        """The sensor of the first array's irradiance source (stored as ``poa_sensor_id``)."""
        return self.arrays[0].irradiance_sensor if self.arrays else (self.poa_sensor or "")


@dataclass(frozen=True)
class ColumnMap:
    """One mapped column: header text in the export, our device id, quantity and unit."""

    header: str
    device: str
    quantity: str
    unit: str


@dataclass(frozen=True)
class TimestampSpec:
    column: str = "timestamp"
    format: str = "%Y-%m-%d %H:%M:%S"  # strptime pattern, or "epoch_s", or "iso8601"
    zone: str = "local"  # "local" (site zone with DST), "UTC", or a fixed offset "+01:00"
    label: str = "end"  # the logger stamps each interval at its "start" or its "end"
    ambiguous: str = "infer"  # repeated autumn hour: infer from order, first, second, reject


@dataclass(frozen=True)
class ClockCorrection:
    """Shift applied at ingest to timestamps a logger wrote wrongly (e.g. an hour off).

    ``start``/``end`` are in the export's own (wrong) time, inclusive; ``shift_minutes`` is
    added to each timestamp in that range before conversion to UTC.
    """

    start: dt.datetime
    end: dt.datetime
    shift_minutes: int
    note: str = ""


@dataclass(frozen=True)
class LongSpec:
    device_column: str = "device"
    quantity_column: str = "quantity"
    value_column: str = "value"
    unit_column: str | None = None


@dataclass(frozen=True)
class Source:
    name: str
    pattern: str
    layout: str = "wide"
    encoding: str = "utf-8"  # utf-8 (BOM tolerated), utf-16, latin-1, or any Python codec
    delimiter: str = ","
    decimal: str = "."
    skip_lines: int = 0  # lines before the header line
    unit_row: bool = False  # a line of units right after the header
    missing_values: tuple[str, ...] = ("", "-", "NaN", "nan", "#N/A", "N/A", "null")
    timestamp: TimestampSpec = field(default_factory=TimestampSpec)
    columns: tuple[ColumnMap, ...] = ()  # wide layout: one entry per mapped column
    long: LongSpec | None = None  # long layout: which columns hold device/quantity/value
    quantity_names: dict[str, tuple[str, str]] = field(default_factory=dict)  # long: name -> (quantity, unit)
    counter_rollover_kwh: float | None = None  # wrap-around value of e_ac_total_kwh counters
    clock_corrections: tuple[ClockCorrection, ...] = ()
    ignore_columns: tuple[str, ...] = ()  # header names deliberately not loaded (status codes, ...)


@dataclass(frozen=True)
class Warranty:
    start_date: dt.date
    first_year_loss_pct: float
    annual_loss_pct: float
    years: int = 25
    confidence: float = 0.95


@dataclass(frozen=True)
class Economics:
    currency: str = "EUR"
    tariff_per_kwh: float = 0.05
    cleaning_cost: float = 0.0


@dataclass(frozen=True)
class SiteConfig:
    id: str
    name: str
    timezone: str
    latitude_deg: float
    longitude_deg: float
    altitude_m: float
    tilt_deg: float
    azimuth_deg: float
    albedo: float
    sensors: tuple[Sensor, ...]
    inverters: tuple[Inverter, ...]
    sources: tuple[Source, ...]
    economics: Economics
    warranty: Warranty | None
    filters: dict[str, float]
    planes: tuple[Plane, ...] = ()
    owner: str = ""
    path: str = ""
    toml_text: str = ""

    @property
    def sha256(self) -> str:
        return hashlib.sha256(self.toml_text.encode("utf-8")).hexdigest()

    def sensor(self, sensor_id: str) -> Sensor:
        return next(s for s in self.sensors if s.id == sensor_id)

    def inverter(self, inverter_id: str) -> Inverter:
        return next(i for i in self.inverters if i.id == inverter_id)

    @property
    def site_plane(self) -> Plane:
        """The site-level plane, default of every inverter and POA sensor without their own."""
        return Plane(kind="fixed", tilt_deg=self.tilt_deg, azimuth_deg=self.azimuth_deg, id="site")

    def device_ids(self) -> set[str]:
        return {s.id for s in self.sensors} | {i.id for i in self.inverters}

    def device_kind(self, device_id: str) -> str:
        return "inverter" if any(i.id == device_id for i in self.inverters) else "sensor"


# ---------------------------------------------------------------- loading


def load_site_config(path: str | Path) -> SiteConfig:
    """Read and validate a site configuration file; raise :class:`ConfigError` listing every problem."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise ConfigError(str(path), [("(file)", f"cannot be read: {exc.strerror}")]) from None
    return parse_site_config(text, str(path))


def parse_site_config(text: str, path: str = "<string>") -> SiteConfig:
    """Parse TOML text of a site configuration (see :func:`load_site_config`)."""
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(path, [("(syntax)", f"not valid TOML: {exc}")]) from None
    v = _Validator(path)
    cfg = v.site_config(raw, text)
    if v.problems:
        raise ConfigError(path, v.problems)
    return cfg


class _Validator:
    def __init__(self, path: str):
        self.path = path
        self.problems: list[tuple[str, str]] = []

    def bad(self, key: str, msg: str) -> None:
        self.problems.append((key, msg))

    # typed getters: record a problem and return a harmless default
    def get(self, table: dict, name: str, key: str, kind: type | tuple, default: Any = ...,
            lo: float | None = None, hi: float | None = None) -> Any:
        full = f"{key}.{name}" if key else name
        if name not in table:
            if default is ...:
                self.bad(full, "is required")
                return None
            return default
        val = table[name]
        kinds = kind if isinstance(kind, tuple) else (kind,)
        if float in kinds and isinstance(val, int) and not isinstance(val, bool):
            val = float(val)
        if not isinstance(val, kinds) or (isinstance(val, bool) and bool not in kinds):
            names = " or ".join(k.__name__ for k in kinds)
            self.bad(full, f"expected {names}, got {type(val).__name__} {val!r}")
            return None if default is ... else default
        if lo is not None and val < lo or hi is not None and val > hi:
            self.bad(full, f"must be between {lo} and {hi}, got {val}")
        return val

    def choice(self, table: dict, name: str, key: str, options: tuple, default: Any = ...) -> Any:
        val = self.get(table, name, key, str, default)
        if val is not None and val not in options:
            self.bad(f"{key}.{name}", f"must be one of {', '.join(options)}; got {val!r}")
        return val

    def date(self, table: dict, name: str, key: str, default: Any = ...) -> dt.date | None:
        val = self.get(table, name, key, (dt.date, str), default)
        if isinstance(val, dt.datetime):
            return val.date()
        if isinstance(val, str):
            try:
                return dt.date.fromisoformat(val)
            except ValueError:
                self.bad(f"{key}.{name}", f"expected a date YYYY-MM-DD, got {val!r}")
                return None
        return val

    def site_config(self, raw: dict, text: str) -> SiteConfig:
        fv = self.get(raw, "format_version", "", int, FORMAT_VERSION)
        if fv != FORMAT_VERSION:
            self.bad("format_version", f"this heliaudit reads format {FORMAT_VERSION}, got {fv}")
        known = {"format_version", "site", "economics", "warranty", "filters", "sensors",
                 "inverters", "sources", "planes"}
        for extra in sorted(set(raw) - known):
            self.bad(extra, f"unknown key; expected one of {', '.join(sorted(known))}")
        site = raw.get("site")
        if not isinstance(site, dict):
            self.bad("site", "a [site] table is required")
            site = {}
        sid = self.get(site, "id", "site", str)
        if sid is not None and not re.fullmatch(r"[A-Za-z0-9][A-Za-z0-9_.-]{0,63}", sid):
            self.bad("site.id", "use letters, digits, '-', '_' or '.', at most 64 characters")
        tz = self.get(site, "timezone", "site", str)
        if tz is not None:
            try:
                zoneinfo.ZoneInfo(tz)
            except (zoneinfo.ZoneInfoNotFoundError, ValueError):
                self.bad("site.timezone", f"unknown IANA time zone {tz!r} (e.g. 'Europe/Madrid')")
        site_plane = Plane(kind="fixed", id="site",
                           tilt_deg=self.get(site, "tilt_deg", "site", float, lo=0, hi=90) or 0.0,
                           azimuth_deg=self.get(site, "azimuth_deg", "site", float, lo=0, hi=360) or 0.0)
        planes = self.planes(raw.get("planes", []))
        sensors = self.sensors(raw.get("sensors", []), planes, site_plane)
        sensor_ids = {s.id: s for s in sensors}
        inverters = self.inverters(raw.get("inverters", []), sensor_ids, planes, site_plane)
        device_ids = set(sensor_ids) | {i.id for i in inverters}
        dup = set(sensor_ids) & {i.id for i in inverters}
        for d in sorted(dup):
            self.bad("inverters", f"id {d!r} is also a sensor id; device ids must be unique")
        sources = self.sources(raw.get("sources", []), sensors, inverters, device_ids)
        econ = raw.get("economics", {})
        economics = Economics(
            currency=self.get(econ, "currency", "economics", str, "EUR"),
            tariff_per_kwh=self.get(econ, "tariff_per_kwh", "economics", float, 0.05, 0.0, 10.0),
            cleaning_cost=self.get(econ, "cleaning_cost", "economics", float, 0.0, 0.0, 1e9),
        )
        warranty = None
        if "warranty" in raw:
            w = raw["warranty"]
            warranty = Warranty(
                start_date=self.date(w, "start_date", "warranty"),
                first_year_loss_pct=self.get(w, "first_year_loss_pct", "warranty", float, lo=0, hi=20),
                annual_loss_pct=self.get(w, "annual_loss_pct", "warranty", float, lo=0, hi=5),
                years=self.get(w, "years", "warranty", int, 25, 1, 50),
                confidence=self.get(w, "confidence", "warranty", float, 0.95, 0.5, 0.999),
            )
        filters = raw.get("filters", {})
        if not isinstance(filters, dict):
            self.bad("filters", "expected a table of filter settings")
            filters = {}
        for k, val in filters.items():
            if not isinstance(val, int | float) or isinstance(val, bool):
                self.bad(f"filters.{k}", f"expected a number, got {val!r}")
        return SiteConfig(
            id=sid or "", name=self.get(site, "name", "site", str, sid or ""),
            owner=self.get(site, "owner", "site", str, ""),
            timezone=tz or "UTC",
            latitude_deg=self.get(site, "latitude_deg", "site", float, lo=-90, hi=90) or 0.0,
            longitude_deg=self.get(site, "longitude_deg", "site", float, lo=-180, hi=180) or 0.0,
            altitude_m=self.get(site, "altitude_m", "site", float, 0.0, -500, 9000),
            tilt_deg=site_plane.tilt_deg, azimuth_deg=site_plane.azimuth_deg,
            planes=tuple(planes.values()),
            albedo=self.get(site, "albedo", "site", float, 0.2, 0.0, 1.0),
            sensors=tuple(sensors), inverters=tuple(inverters), sources=tuple(sources),
            economics=economics, warranty=warranty,
            filters={k: float(v) for k, v in filters.items() if isinstance(v, int | float)},
            path=self.path, toml_text=text,
        )

    def _list(self, items: Any, key: str) -> list[dict]:
        if not isinstance(items, list) or not all(isinstance(x, dict) for x in items):
            self.bad(key, f"expected an array of tables ([[{key}]])")
            return []
        return items

    def planes(self, items: Any) -> dict[str, Plane]:
        """``[[planes]]``: named fixed planes and single-axis trackers, referred to by id."""
        out: dict[str, Plane] = {}
        for n, p in enumerate(self._list(items, "planes")):
            key = f"planes[{n}]"
            pid = self.get(p, "id", key, str)
            if pid in ("site", "horizontal"):
                self.bad(f"{key}.id", f"{pid!r} is reserved (the site plane / horizontal)")
            elif pid in out:
                self.bad(f"{key}.id", f"duplicate plane id {pid!r}")
            kind = self.choice(p, "kind", key, PLANE_KINDS, "fixed")
            if kind == "single_axis":
                for k in ("tilt_deg", "azimuth_deg"):
                    if k in p:
                        self.bad(f"{key}.{k}", "a single-axis tracker has no fixed tilt/azimuth; "
                                 "use axis_tilt_deg, axis_azimuth_deg")
                plane = Plane(
                    kind=kind, id=pid or f"?{n}",
                    axis_tilt_deg=self.get(p, "axis_tilt_deg", key, float, 0.0, 0, 60),
                    axis_azimuth_deg=self.get(p, "axis_azimuth_deg", key, float, 180.0, 0, 360),
                    max_angle_deg=self.get(p, "max_angle_deg", key, float, 60.0, 1, 90),
                    backtrack=self.get(p, "backtrack", key, bool, True),
                    gcr=self.get(p, "gcr", key, float, 0.35, 0.01, 1.0))
            else:
                for k in ("axis_tilt_deg", "axis_azimuth_deg", "max_angle_deg", "backtrack", "gcr"):
                    if k in p:
                        self.bad(f"{key}.{k}", "only a kind = \"single_axis\" plane has this key")
                plane = Plane(kind="fixed", id=pid or f"?{n}",
                              tilt_deg=self.get(p, "tilt_deg", key, float, lo=0, hi=90) or 0.0,
                              azimuth_deg=self.get(p, "azimuth_deg", key, float, lo=0, hi=360) or 0.0)
            if pid:
                out[pid] = plane
        return out

    def plane_of(self, t: dict, key: str, planes: dict[str, Plane], default: Plane) -> Plane:
        """A table's plane: ``plane = "<id>" | "site" | "horizontal"``, or inline
        ``tilt_deg`` / ``azimuth_deg``, else ``default``."""
        inline = "tilt_deg" in t or "azimuth_deg" in t
        if "plane" in t:
            if inline:
                self.bad(f"{key}.plane", "give either plane or tilt_deg/azimuth_deg, not both")
            ref = self.get(t, "plane", key, str)
            if ref == "site":
                return default if default.id == "site" else Plane(kind="fixed", id="site",
                                                                   tilt_deg=default.tilt_deg,
                                                                   azimuth_deg=default.azimuth_deg)
            if ref == "horizontal":
                return HORIZONTAL
            if ref is not None and ref not in planes:
                known = ", ".join(["site", "horizontal", *sorted(planes)])
                self.bad(f"{key}.plane", f"no plane {ref!r}; known: {known}")
            return planes.get(ref, default)
        if inline:
            return Plane(kind="fixed",
                         tilt_deg=self.get(t, "tilt_deg", key, float, default.tilt_deg, 0, 90),
                         azimuth_deg=self.get(t, "azimuth_deg", key, float, default.azimuth_deg, 0, 360))
        return default

    def sensors(self, items: Any, planes: dict[str, Plane], site_plane: Plane) -> list[Sensor]:
        out, seen = [], set()
        for n, s in enumerate(self._list(items, "sensors")):
            key = f"sensors[{n}]"
            sid = self.get(s, "id", key, str)
            if sid in seen:
                self.bad(f"{key}.id", f"duplicate sensor id {sid!r}")
            seen.add(sid)
            q = self.choice(s, "quantity", key, SENSOR_QUANTITIES)
            inst, plane = None, None
            if q in ("poa_wm2", "ghi_wm2"):
                inst = self.choice(s, "instrument", key, INSTRUMENTS)
            if q == "poa_wm2":
                plane = self.plane_of(s, key, planes, site_plane)
            elif q == "ghi_wm2":
                plane = self.plane_of(s, key, planes, HORIZONTAL)
                if not plane.same_as(HORIZONTAL):
                    self.bad(f"{key}.plane", "a ghi_wm2 sensor is horizontal; a tilted sensor "
                             "is quantity = \"poa_wm2\" with its plane")
                plane = HORIZONTAL
            elif "plane" in s or "tilt_deg" in s or "azimuth_deg" in s:
                self.bad(f"{key}.plane", "only irradiance sensors (poa_wm2, ghi_wm2) have a plane")
            out.append(Sensor(id=sid or f"?{n}", quantity=q or "", instrument=inst,
                              notes=self.get(s, "notes", key, str, ""), plane=plane))
        if not any(s.quantity in ("poa_wm2", "ghi_wm2") for s in out):
            self.bad("sensors", "at least one irradiance sensor (quantity = \"poa_wm2\" or "
                     "\"ghi_wm2\") is required")
        return out

    def _sensor_ref(self, t: dict, ref: str, key: str, qty: str, sensors: dict[str, Sensor]
                    ) -> str | None:
        sid = self.get(t, ref, key, str, None)
        if sid is not None:
            if sid not in sensors:
                self.bad(f"{key}.{ref}", f"no sensor with id {sid!r}; known: "
                         f"{', '.join(sorted(sensors)) or '(none)'}")
                return None
            if sensors[sid].quantity != qty:
                self.bad(f"{key}.{ref}", f"sensor {sid!r} measures "
                         f"{sensors[sid].quantity}, expected {qty}")
                return None
        return sid

    def _arrays(self, t: dict, key: str, inv_plane: Plane, p_dc: float | None,
                inv_poa: str | None, inv_ghi: str | None, sensors: dict[str, Sensor],
                planes: dict[str, Plane]) -> list[Array]:
        """``[[inverters.arrays]]`` (or one array: the whole inverter), each with its source."""
        raw = t.get("arrays")
        specs = []
        if raw is None:
            specs.append(("1", p_dc or 1.0, inv_plane, None, None, key))
        else:
            ids = set()
            for m, a in enumerate(self._list(raw, f"{key}.arrays")):
                akey = f"{key}.arrays[{m}]"
                aid = str(self.get(a, "id", akey, (str, int), m + 1))
                if aid in ids:
                    self.bad(f"{akey}.id", f"duplicate array id {aid!r}")
                ids.add(aid)
                specs.append((aid, self.get(a, "p_dc_kwp", akey, float, lo=0.01, hi=1e6) or 1.0,
                              self.plane_of(a, akey, planes, inv_plane),
                              self._sensor_ref(a, "poa_sensor", akey, "poa_wm2", sensors),
                              self._sensor_ref(a, "ghi_sensor", akey, "ghi_wm2", sensors), akey))
            if not specs:
                self.bad(f"{key}.arrays", "give at least one array, or leave arrays out")
        out = []
        for aid, kwp, plane, a_poa, a_ghi, akey in specs:
            poa = [(s, sensors[s].plane or inv_plane) for s in (a_poa, inv_poa) if s]
            ghi = [s for s in (a_ghi, inv_ghi) if s]
            got = choose_source(plane, poa, ghi)
            if got is None:
                self.bad(akey, "no irradiance sensor: set poa_sensor (a plane-of-array sensor) "
                         "or ghi_sensor (a horizontal one)")
                got = ("poa_same_plane", "")
            out.append(Array(id=aid, p_dc_kwp=kwp, plane=plane, poa_sensor=a_poa, ghi_sensor=a_ghi,
                             irradiance_basis=got[0], irradiance_sensor=got[1]))
        return out

    def inverters(self, items: Any, sensors: dict[str, Sensor], planes: dict[str, Plane],
                  site_plane: Plane) -> list[Inverter]:
        out, seen = [], set()
        items = self._list(items, "inverters")
        if not items:
            self.bad("inverters", "at least one [[inverters]] entry is required")
        for n, t in enumerate(items):
            key = f"inverters[{n}]"
            iid = self.get(t, "id", key, str)
            if iid in seen:
                self.bad(f"{key}.id", f"duplicate inverter id {iid!r}")
            seen.add(iid)
            gamma = self.get(t, "gamma_pmp_per_c", key, float)
            if gamma is not None and not (-0.01 <= gamma < 0):
                self.bad(f"{key}.gamma_pmp_per_c",
                         "expected a negative number per °C (e.g. -0.0035 for -0.35 %/°C), "
                         f"got {gamma}")
            refs = {ref: self._sensor_ref(t, ref, key, qty, sensors)
                    for ref, qty in (("poa_sensor", "poa_wm2"), ("ghi_sensor", "ghi_wm2"),
                                     ("t_module_sensor", "t_module_c"), ("t_amb_sensor", "t_amb_c"),
                                     ("wind_sensor", "wind_ms"))}
            if not refs["t_module_sensor"] and not refs["t_amb_sensor"] and not any(
                    k in t for k in ("t_module_sensor", "t_amb_sensor")):
                self.bad(key, "no t_module_sensor and no t_amb_sensor: cell temperature can be "
                         "neither measured (back-of-module sensor) nor modelled (Sandia / "
                         "Faiman from ambient temperature); assign at least one")
            has_arrays = "arrays" in t
            p_dc = self.get(t, "p_dc_kwp", key, float, None if has_arrays else ..., 0.1, 1e6)
            inv_plane = self.plane_of(t, key, planes, site_plane)
            arrays = self._arrays(t, key, inv_plane, p_dc, refs["poa_sensor"], refs["ghi_sensor"],
                                  sensors, planes)
            if has_arrays and arrays:
                total = sum(a.p_dc_kwp for a in arrays)
                if p_dc is not None and abs(total - p_dc) > 0.01 * p_dc:
                    self.bad(f"{key}.p_dc_kwp", f"{p_dc} kWp but its arrays add up to {total:g} kWp")
                p_dc = p_dc if p_dc is not None else total
            p_ac = self.get(t, "p_ac_max_kw", key, float, None, 0.1, 1e6)
            p_dc = p_dc or 1.0
            out.append(Inverter(
                id=iid or f"?{n}", p_dc_kwp=p_dc,
                # unknown AC rating: the DC nameplate is assumed (README, "Optional ratings")
                p_ac_max_kw=p_ac if p_ac is not None else p_dc, p_ac_max_assumed=p_ac is None,
                gamma_pmp_per_c=gamma if gamma is not None else -0.004,
                mounting=self.choice(t, "mounting", key, MOUNTINGS),
                eta_inv_nom=self.get(t, "eta_inv_nom", key, float, 0.96, 0.5, 1.0),
                commissioned=self.date(t, "commissioned", key, None),
                peer_group=self.get(t, "peer_group", key, str, "site"),
                poa_sensor=refs["poa_sensor"], ghi_sensor=refs["ghi_sensor"],
                t_module_sensor=refs["t_module_sensor"],
                t_amb_sensor=refs["t_amb_sensor"], wind_sensor=refs["wind_sensor"],
                arrays=tuple(arrays),
            ))
        return out

    def sources(self, items: Any, sensors: list[Sensor], inverters: list[Inverter],
                device_ids: set[str]) -> list[Source]:
        out = []
        items = self._list(items, "sources")
        if not items:
            self.bad("sources", "at least one [[sources]] entry describing the export files is required")
        for n, s in enumerate(items):
            key = f"sources[{n}]"
            layout = self.choice(s, "layout", key, LAYOUTS, "wide")
            ts = s.get("timestamp", {})
            tkey = f"{key}.timestamp"
            zone = self.get(ts, "zone", tkey, str, "local")
            if zone not in ("local", "UTC") and not re.fullmatch(r"[+-]\d\d:\d\d", zone or ""):
                self.bad(f"{tkey}.zone", f"expected 'local', 'UTC' or a fixed offset like '+01:00', got {zone!r}")
            tspec = TimestampSpec(
                column=self.get(ts, "column", tkey, str, "timestamp"),
                format=self.get(ts, "format", tkey, str, "%Y-%m-%d %H:%M:%S"),
                zone=zone, label=self.choice(ts, "label", tkey, LABELS, "end"),
                ambiguous=self.choice(ts, "ambiguous", tkey, AMBIGUOUS, "infer"),
            )
            columns: list[ColumnMap] = []
            for m, c in enumerate(self._list(s.get("columns", []), f"{key}.columns")):
                columns.extend(self._columns(c, f"{key}.columns[{m}]", sensors, inverters, device_ids))
            long_spec, qnames = None, {}
            if layout == "long":
                lt = s.get("long", {})
                lkey = f"{key}.long"
                long_spec = LongSpec(
                    device_column=self.get(lt, "device_column", lkey, str, "device"),
                    quantity_column=self.get(lt, "quantity_column", lkey, str, "quantity"),
                    value_column=self.get(lt, "value_column", lkey, str, "value"),
                    unit_column=self.get(lt, "unit_column", lkey, str, None),
                )
                for name, spec in (lt.get("quantities") or {}).items():
                    if not isinstance(spec, dict):
                        self.bad(f"{lkey}.quantities.{name}", "expected { quantity = ..., unit = ... }")
                        continue
                    q = self.choice(spec, "quantity", f"{lkey}.quantities.{name}", tuple(QUANTITY_UNITS))
                    u = normalise_unit(self.get(spec, "unit", f"{lkey}.quantities.{name}", str, ""))
                    if q in QUANTITY_UNITS and u and u not in QUANTITY_UNITS[q]:
                        self.bad(f"{lkey}.quantities.{name}.unit",
                                 f"unit {u!r} is not one of {', '.join(QUANTITY_UNITS[q])} for {q}")
                    qnames[name] = (q, u or (QUANTITY_UNITS.get(q, ("",))[0]))
                if not qnames:
                    self.bad(f"{lkey}.quantities", "long layout needs a table mapping quantity names")
            elif not columns:
                self.bad(f"{key}.columns", "wide layout needs at least one [[sources.columns]] entry")
            delim = self.get(s, "delimiter", key, str, ",")
            if delim in ("\\t", "tab"):
                delim = "\t"
            if delim not in (",", ";", "\t", "|"):
                self.bad(f"{key}.delimiter", f"expected ',', ';', '\\t' or '|', got {delim!r}")
            dec = self.get(s, "decimal", key, str, ".")
            if dec not in (".", ","):
                self.bad(f"{key}.decimal", f"expected '.' or ',', got {dec!r}")
            elif dec == delim:
                self.bad(f"{key}.decimal", "the decimal separator cannot equal the delimiter")
            enc = self.get(s, "encoding", key, str, "utf-8")
            try:
                "".encode(enc)
            except LookupError:
                self.bad(f"{key}.encoding", f"unknown text encoding {enc!r} (utf-8, utf-16, latin-1)")
            miss = self.get(s, "missing_values", key, list, list(Source.missing_values))
            corrections = []
            for m, c in enumerate(self._list(s.get("clock_corrections", []), f"{key}.clock_corrections")):
                ckey = f"{key}.clock_corrections[{m}]"
                start = self.get(c, "start", ckey, (dt.datetime, dt.date))
                end = self.get(c, "end", ckey, (dt.datetime, dt.date))
                shift = self.get(c, "shift_minutes", ckey, int, lo=-1440, hi=1440)
                start, end = (x if isinstance(x, dt.datetime) or x is None
                              else dt.datetime.combine(x, dt.time()) for x in (start, end))
                if isinstance(end, dt.datetime) and end.time() == dt.time() and not isinstance(
                        c.get("end"), dt.datetime):
                    end = end + dt.timedelta(days=1, seconds=-1)  # a date means the whole day
                if start and end and end < start:
                    self.bad(ckey, "end is before start")
                if start and end and shift is not None:
                    corrections.append(ClockCorrection(start, end, shift, self.get(c, "note", ckey, str, "")))
            out.append(Source(
                name=self.get(s, "name", key, str, f"source{n}"),
                pattern=self.get(s, "pattern", key, str, "*.csv*"),
                layout=layout or "wide", encoding=enc, delimiter=delim, decimal=dec,
                skip_lines=self.get(s, "skip_lines", key, int, 0, 0, 1000),
                unit_row=self.get(s, "unit_row", key, bool, False),
                missing_values=tuple(str(x) for x in miss),
                timestamp=tspec, columns=tuple(columns), long=long_spec, quantity_names=qnames,
                counter_rollover_kwh=self.get(s, "counter_rollover_kwh", key, float, None, 1.0, 1e15),
                clock_corrections=tuple(corrections),
                ignore_columns=tuple(str(x) for x in self.get(s, "ignore_columns", key, list, [])),
            ))
        return out

    def _columns(self, c: dict, key: str, sensors: list[Sensor], inverters: list[Inverter],
                 device_ids: set[str]) -> list[ColumnMap]:
        """One ``[[sources.columns]]`` entry; ``{inverter}`` / ``{sensor}`` in header expands."""
        header = self.get(c, "header", key, str)
        q = self.choice(c, "quantity", key, tuple(QUANTITY_UNITS))
        unit = normalise_unit(self.get(c, "unit", key, str, QUANTITY_UNITS.get(q, ("",))[0] if q else ""))
        if header is None or q is None:
            return []
        if q in QUANTITY_UNITS and unit not in QUANTITY_UNITS[q]:
            self.bad(f"{key}.unit", f"unit {unit!r} is not one of {', '.join(QUANTITY_UNITS[q])} for {q}")
        if "{inverter}" in header:
            return [ColumnMap(header.replace("{inverter}", i.id), i.id, q, unit) for i in inverters]
        if "{sensor}" in header:
            return [ColumnMap(header.replace("{sensor}", s.id), s.id, q, unit)
                    for s in sensors if s.quantity == q]
        dev = self.get(c, "device", key, str)
        if dev is None:
            return []
        if dev not in device_ids:
            self.bad(f"{key}.device", f"no inverter or sensor with id {dev!r}")
            return []
        is_inv = any(i.id == dev for i in inverters)
        if is_inv and q not in INVERTER_QUANTITIES:
            self.bad(f"{key}.quantity", f"{q} is not an inverter quantity ({', '.join(INVERTER_QUANTITIES)})")
        if not is_inv:
            sq = next(s.quantity for s in sensors if s.id == dev)
            if q != sq:
                self.bad(f"{key}.quantity", f"sensor {dev!r} is configured as {sq}, column says {q}")
        return [ColumnMap(header, dev, q, unit)]
