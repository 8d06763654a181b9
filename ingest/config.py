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

FORMAT_VERSION = 1

#: Quantities a channel may carry, with the units accepted for each (first = stored unit).
QUANTITY_UNITS: dict[str, tuple[str, ...]] = {
    "p_ac_kw": ("kW", "W", "MW"),
    "p_dc_kw": ("kW", "W", "MW"),
    "i_dc_a": ("A", "mA"),  # DC current of an inverter input (with v_dc_v: DC power = I V)
    "v_dc_v": ("V", "kV"),  # DC voltage of an inverter input
    "e_ac_kwh": ("kWh", "Wh", "MWh"),  # energy of the interval
    "e_ac_total_kwh": ("kWh", "Wh", "MWh"),  # cumulative counter, turned into e_ac_kwh
    "poa_wm2": ("W/m2", "kW/m2"),
    "ghi_wm2": ("W/m2", "kW/m2"),
    "t_module_c": ("C", "F", "K"),
    "t_amb_c": ("C", "F", "K"),
    "wind_ms": ("m/s", "km/h"),
    "rain_mm": ("mm",),
}
INVERTER_QUANTITIES = ("p_ac_kw", "p_dc_kw", "e_ac_kwh", "e_ac_total_kwh", "i_dc_a", "v_dc_v")
#: Quantities an inverter input (MPPT / string group, ``input = "<id>"``) may carry.
INPUT_QUANTITIES = ("p_dc_kw", "i_dc_a", "v_dc_v")
#: How a column's value relates to its timestamp: "mean" over the interval (the default) or
#: "instant", a sample taken at the timestamp (see README "Ingest rules").
SAMPLINGS = ("mean", "instant")
#: Quantities that may be declared instantaneous samples (not energies: an energy is a sum).
SAMPLED_QUANTITIES = ("p_ac_kw", "p_dc_kw", "i_dc_a", "v_dc_v", "poa_wm2", "ghi_wm2",
                      "t_module_c", "t_amb_c", "wind_ms")
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
    "a": "A", "ma": "mA", "v": "V", "kv": "kV",
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


@dataclass(frozen=True)
class Inverter:
    id: str
    p_dc_kwp: float
    p_ac_max_kw: float
    gamma_pmp_per_c: float
    mounting: str
    poa_sensor: str
    t_module_sensor: str
    commissioned: dt.date
    eta_inv_nom: float = 0.96
    t_amb_sensor: str | None = None
    wind_sensor: str | None = None
    peer_group: str = "site"


@dataclass(frozen=True)
class ColumnMap:
    """One mapped column: header text in the export, our device id, quantity and unit."""

    header: str
    device: str
    quantity: str
    unit: str
    sampling: str = "mean"  # "mean" over the interval, or "instant" (a sample at the timestamp)
    input: str = ""  # an inverter input (MPPT / string group) id; "" = the whole inverter


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
    devices: tuple[str, ...] = ()  # only these devices' columns (empty: every column)
    columns: tuple[str, ...] = ()  # only these column headers (wide layout)

    @property
    def everywhere(self) -> bool:
        return not self.devices and not self.columns

    def applies_to(self, device: str, header: str) -> bool:
        return self.everywhere or device in self.devices or header in self.columns


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

    def device_ids(self) -> set[str]:
        return {s.id for s in self.sensors} | {i.id for i in self.inverters}

    def device_kind(self, device_id: str) -> str:
        return "inverter" if any(i.id == device_id for i in self.inverters) else "sensor"


# ---------------------------------------------------------------- loading


def _input_ids(inv: Inverter) -> set[str] | None:
    """The input (array) ids an inverter declares, or None when it declares none (then any
    input id a column names is accepted)."""
    arrays = getattr(inv, "arrays", None) or ()
    ids = {a.id for a in arrays if getattr(a, "id", None)}
    return ids or None


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
                 "inverters", "sources"}
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
        sensors = self.sensors(raw.get("sensors", []))
        sensor_ids = {s.id: s for s in sensors}
        inverters = self.inverters(raw.get("inverters", []), sensor_ids)
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
            tilt_deg=self.get(site, "tilt_deg", "site", float, lo=0, hi=90) or 0.0,
            azimuth_deg=self.get(site, "azimuth_deg", "site", float, lo=0, hi=360) or 0.0,
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

    def sensors(self, items: Any) -> list[Sensor]:
        out, seen = [], set()
        for n, s in enumerate(self._list(items, "sensors")):
            key = f"sensors[{n}]"
            sid = self.get(s, "id", key, str)
            if sid in seen:
                self.bad(f"{key}.id", f"duplicate sensor id {sid!r}")
            seen.add(sid)
            q = self.choice(s, "quantity", key, SENSOR_QUANTITIES)
            inst = None
            if q in ("poa_wm2", "ghi_wm2"):
                inst = self.choice(s, "instrument", key, INSTRUMENTS)
            out.append(Sensor(id=sid or f"?{n}", quantity=q or "", instrument=inst,
                              notes=self.get(s, "notes", key, str, "")))
        if not any(s.quantity == "poa_wm2" for s in out):
            self.bad("sensors", "at least one POA irradiance sensor (quantity = \"poa_wm2\") is required")
        return out

    def inverters(self, items: Any, sensors: dict[str, Sensor]) -> list[Inverter]:
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
            refs = {}
            for ref, qty, required in (("poa_sensor", "poa_wm2", True),
                                       ("t_module_sensor", "t_module_c", True),
                                       ("t_amb_sensor", "t_amb_c", False),
                                       ("wind_sensor", "wind_ms", False)):
                sid = self.get(t, ref, key, str, ... if required else None)
                if sid is not None:
                    if sid not in sensors:
                        self.bad(f"{key}.{ref}", f"no sensor with id {sid!r}; known: "
                                 f"{', '.join(sorted(sensors)) or '(none)'}")
                    elif sensors[sid].quantity != qty:
                        self.bad(f"{key}.{ref}", f"sensor {sid!r} measures "
                                 f"{sensors[sid].quantity}, expected {qty}")
                refs[ref] = sid
            p_dc = self.get(t, "p_dc_kwp", key, float, lo=0.1, hi=1e6)
            p_ac = self.get(t, "p_ac_max_kw", key, float, lo=0.1, hi=1e6)
            out.append(Inverter(
                id=iid or f"?{n}", p_dc_kwp=p_dc or 1.0, p_ac_max_kw=p_ac or 1.0,
                gamma_pmp_per_c=gamma if gamma is not None else -0.004,
                mounting=self.choice(t, "mounting", key, MOUNTINGS),
                eta_inv_nom=self.get(t, "eta_inv_nom", key, float, 0.96, 0.5, 1.0),
                commissioned=self.date(t, "commissioned", key),
                peer_group=self.get(t, "peer_group", key, str, "site"),
                poa_sensor=refs["poa_sensor"], t_module_sensor=refs["t_module_sensor"],
                t_amb_sensor=refs["t_amb_sensor"], wind_sensor=refs["wind_sensor"],
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
                devs = self._str_list(c, "devices", ckey)
                for d in devs:
                    if d not in device_ids:
                        self.bad(f"{ckey}.devices", f"no inverter or sensor with id {d!r}")
                cols = self._str_list(c, "columns", ckey)
                headers = {cm.header for cm in columns}
                for h in cols:
                    if layout == "wide" and h not in headers:
                        self.bad(f"{ckey}.columns", f"no column with header {h!r} in this "
                                 "source's [[sources.columns]]")
                if cols and layout == "long":
                    self.bad(f"{ckey}.columns", "a long-layout source has no per-device columns: "
                             "name the devices with `devices = [...]`")
                if start and end and shift is not None:
                    corrections.append(ClockCorrection(start, end, shift, self.get(c, "note", ckey, str, ""),
                                                       devices=tuple(devs), columns=tuple(cols)))
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

    def _str_list(self, table: dict, name: str, key: str) -> list[str]:
        val = self.get(table, name, key, list, [])
        if not all(isinstance(x, str) for x in val):
            self.bad(f"{key}.{name}", f"expected a list of strings, got {val!r}")
            return []
        return list(val)

    def _columns(self, c: dict, key: str, sensors: list[Sensor], inverters: list[Inverter],
                 device_ids: set[str]) -> list[ColumnMap]:
        """One ``[[sources.columns]]`` entry; ``{inverter}`` / ``{sensor}`` in header expands."""
        header = self.get(c, "header", key, str)
        q = self.choice(c, "quantity", key, tuple(QUANTITY_UNITS))
        unit = normalise_unit(self.get(c, "unit", key, str, QUANTITY_UNITS.get(q, ("",))[0] if q else ""))
        sampling = self.choice(c, "sampling", key, SAMPLINGS, "mean") or "mean"
        inp = self.get(c, "input", key, str, "") or ""
        if header is None or q is None:
            return []
        if q in QUANTITY_UNITS and unit not in QUANTITY_UNITS[q]:
            self.bad(f"{key}.unit", f"unit {unit!r} is not one of {', '.join(QUANTITY_UNITS[q])} for {q}")
        if sampling == "instant" and q not in SAMPLED_QUANTITIES:
            self.bad(f"{key}.sampling", f"{q} cannot be an instantaneous sample (only "
                     f"{', '.join(SAMPLED_QUANTITIES)}): an energy or counter is a sum")
        if inp:
            if q not in INPUT_QUANTITIES:
                self.bad(f"{key}.input", f"an inverter input carries {', '.join(INPUT_QUANTITIES)}; "
                         f"got {q}")
            if not re.fullmatch(r"[A-Za-z0-9][A-Za-z0-9_.-]{0,63}", inp):
                self.bad(f"{key}.input", "use letters, digits, '-', '_' or '.', at most 64 characters")
        elif q in ("i_dc_a", "v_dc_v"):
            self.bad(f"{key}.input", f"{q} is loaded per inverter input: name it with "
                     "input = \"<input id>\"")
        if "{inverter}" in header:
            if inp:
                self.bad(f"{key}.input", "an input column names its device: use device = ... "
                         "rather than {inverter} in the header")
            return [ColumnMap(header.replace("{inverter}", i.id), i.id, q, unit, sampling)
                    for i in inverters]
        if "{sensor}" in header:
            return [ColumnMap(header.replace("{sensor}", s.id), s.id, q, unit, sampling)
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
            if inp:
                self.bad(f"{key}.input", f"{dev!r} is a sensor; inputs belong to inverters")
        elif inp:
            known = _input_ids(next(i for i in inverters if i.id == dev))
            if known is not None and inp not in known:
                self.bad(f"{key}.input", f"inverter {dev!r} has no input {inp!r}; its arrays "
                         f"are {', '.join(sorted(known)) or '(none)'}")
        return [ColumnMap(header, dev, q, unit, sampling, inp)]
