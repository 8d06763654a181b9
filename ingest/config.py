"""Site configuration: one TOML file per site, validated on load.

The format is documented with a full example in docs/config.md ("Site configuration").
Every problem found is reported with the TOML key that holds it, for example
``quillpond.toml: inverters[3].gamma_pmp_per_c: expected a negative number per °C
(e.g. -0.0035 for -0.35 %/°C), got 0.35``. All problems are collected and raised
together in one :class:`ConfigError`, so a user fixes a file in one pass.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import math
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
#: "instant", a sample taken at the timestamp (see docs/config.md "Ingest rules").
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
    sampling: str = "mean"  # "mean" over the interval, or "instant" (a sample at the timestamp)
    input: str = ""  # an inverter input (MPPT / string group) id; "" = the whole inverter


@dataclass(frozen=True)
class TimestampSpec:
    column: str = "timestamp"
    format: str = "%Y-%m-%d %H:%M:%S"  # strptime pattern, or "epoch_s", or "iso8601"
    zone: str = "local"  # "local" (site zone with DST), "UTC", or a fixed offset "+01:00"
    label: str = "end"  # the logger stamps each interval at its "start" or its "end"
    ambiguous: str = "infer"  # repeated autumn hour: infer from order, first, second, reject
    earliest: dt.date | None = None  # plausible-date window: rows stamped before are rejected
    latest: dt.date | None = None  # ... and after (None: one day after the ingest runs)


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
    folder: str | None = None  # explicit search folder (may lie outside the config's folder)
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
    quantity_sampling: dict[str, str] = field(default_factory=dict)  # long: name -> "instant" (#11)
    quantity_inputs: dict[str, str] = field(default_factory=dict)  # long: name -> inverter input id (#11)
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


# ---------------------------------------------------------------- the key table
#
# Every key a site configuration may hold is declared here, table by table, with its type,
# range and default. The validator rejects any key not declared (naming the closest declared
# one), checks types and ranges, and rejects NaN/inf, NUL characters and strings longer than
# the store's columns. To add a key: ``register("inverters[]", my_key=Key("float", lo=0))``
# (usually next to the code that reads it) and read it with ``v.val(table, key_prefix, "my_key")``.

#: Store limit of id-like strings (site, device, source ids: VARCHAR(64) in db/schema.py).
ID_MAX = 64
#: The device id the store reserves for site-level rows (degradation_result).
RESERVED_IDS = ("(site)",)
_ID_RE = re.compile(r"[^\x00-\x1f\x7f]+")


@dataclass(frozen=True)
class Key:
    """One configuration key.

    ``kind``: ``str`` | ``id`` (non-empty, ≤ :data:`ID_MAX` characters, no control characters,
    no surrounding spaces) | ``int`` | ``float`` (finite) | ``bool`` | ``date`` | ``datetime``
    (local, no UTC offset) | ``list`` (of ``items``) | ``table`` | ``tables`` (array of tables)
    | ``any`` (checked by the reading code). ``lo``/``hi`` bound numbers (inclusive),
    ``choices`` lists the allowed strings, ``max_len`` bounds strings.
    """

    kind: str
    required: bool = False
    default: Any = None
    lo: float | None = None
    hi: float | None = None
    choices: tuple | None = None
    items: str | None = None
    max_len: int | None = None
    doc: str = ""


#: table path ("" = top level; "[]" marks an array of tables; "*" any name) -> key -> Key
SCHEMA: dict[str, dict[str, Key]] = {}


def register(table: str, **keys: Key) -> None:
    """Declare keys of a table, e.g. ``register("inverters[].arrays[]", tilt_deg=Key("float"))``."""
    SCHEMA.setdefault(table, {}).update(keys)


def table_path(key: str) -> str:
    """``sources[2].columns[0]`` -> ``sources[].columns[]`` (the :data:`SCHEMA` table path)."""
    return re.sub(r"\[\d+\]", "[]", key)


#: Keys naming a table's plane (#11): plane = "<[[planes]] id>" | "site" | "horizontal",
#: or an inline fixed plane.
_PLANE_REF_KEYS = dict(plane=Key("id"), tilt_deg=Key("float", lo=0, hi=90),
                       azimuth_deg=Key("float", lo=0, hi=360))
register(
    "planes[]",
    id=Key("id", required=True), kind=Key("str", default="fixed", choices=PLANE_KINDS),
    tilt_deg=Key("float", lo=0, hi=90), azimuth_deg=Key("float", lo=0, hi=360),
    axis_tilt_deg=Key("float", lo=0, hi=60), axis_azimuth_deg=Key("float", lo=0, hi=360),
    max_angle_deg=Key("float", lo=1, hi=90), backtrack=Key("bool"),
    gcr=Key("float", lo=0.01, hi=1.0, doc="ground coverage ratio of the tracker rows"),
)
register(
    "inverters[].arrays[]",
    id=Key("id"), p_dc_kwp=Key("float", required=True, lo=0.01, hi=1e6),
    poa_sensor=Key("id"), ghi_sensor=Key("id"), **_PLANE_REF_KEYS,
)
register(
    "",
    format_version=Key("int", default=FORMAT_VERSION, doc="format of this file"),
    site=Key("table", required=True), economics=Key("table"), warranty=Key("table"),
    filters=Key("table"), sensors=Key("tables"), inverters=Key("tables"), sources=Key("tables"),
    planes=Key("tables", doc="named fixed planes and single-axis trackers (#11)"),
)
register(
    "site",
    id=Key("id", required=True), name=Key("str", max_len=200), owner=Key("str", max_len=200),
    timezone=Key("str", required=True, max_len=64),
    latitude_deg=Key("float", required=True, lo=-90, hi=90),
    longitude_deg=Key("float", required=True, lo=-180, hi=180),
    altitude_m=Key("float", default=0.0, lo=-500, hi=9000),
    tilt_deg=Key("float", required=True, lo=0, hi=90),
    azimuth_deg=Key("float", required=True, lo=0, hi=360),
    albedo=Key("float", default=0.2, lo=0.0, hi=1.0),
)
register(
    "sensors[]",
    id=Key("id", required=True), quantity=Key("str", required=True, choices=SENSOR_QUANTITIES),
    instrument=Key("str", choices=INSTRUMENTS), notes=Key("str", default="", max_len=2000),
    **_PLANE_REF_KEYS,
)
register(
    "inverters[]",
    id=Key("id", required=True),
    # p_dc_kwp: required unless [[inverters.arrays]] give it; p_ac_max_kw, commissioned,
    # t_module_sensor optional (#11, docs/config.md "Optional ratings"); poa_sensor or ghi_sensor
    p_dc_kwp=Key("float", lo=0.1, hi=1e6),
    p_ac_max_kw=Key("float", lo=0.1, hi=1e6),
    gamma_pmp_per_c=Key("float", required=True),
    mounting=Key("str", required=True, choices=MOUNTINGS),
    poa_sensor=Key("id"), ghi_sensor=Key("id"), t_module_sensor=Key("id"),
    t_amb_sensor=Key("id"), wind_sensor=Key("id"),
    commissioned=Key("date"), arrays=Key("tables", doc="MPPT inputs / string groups (#11)"),
    **_PLANE_REF_KEYS,
    eta_inv_nom=Key("float", default=0.96, lo=0.5, hi=1.0),
    peer_group=Key("id", default="site"),
)
register(
    "sources[]",
    name=Key("id"), pattern=Key("str", default="*.csv*", max_len=1000),
    folder=Key("str", max_len=4096, doc="folder searched with pattern; absolute or relative to "
               "the config's folder; only an explicit folder may lie outside it"),
    layout=Key("str", default="wide", choices=LAYOUTS),
    encoding=Key("str", default="utf-8", max_len=40), delimiter=Key("str", default=",", max_len=3),
    decimal=Key("str", default=".", max_len=1), skip_lines=Key("int", default=0, lo=0, hi=1000),
    unit_row=Key("bool", default=False),
    missing_values=Key("list", items="str"), ignore_columns=Key("list", items="str"),
    timestamp=Key("table"), columns=Key("tables"), long=Key("table"),
    counter_rollover_kwh=Key("float", lo=1.0, hi=1e15), clock_corrections=Key("tables"),
)
register(
    "sources[].timestamp",
    column=Key("str", default="timestamp", max_len=200),
    format=Key("str", default="%Y-%m-%d %H:%M:%S", max_len=100),
    zone=Key("str", default="local", max_len=16), label=Key("str", default="end", choices=LABELS),
    ambiguous=Key("str", default="infer", choices=AMBIGUOUS),
    earliest=Key("date", doc="rows stamped before this date are rejected"),
    latest=Key("date", doc="rows stamped after this date are rejected"),
)
register(
    "sources[].columns[]",
    header=Key("str", required=True, max_len=200), device=Key("id"),
    quantity=Key("str", required=True, choices=tuple(QUANTITY_UNITS)), unit=Key("str", max_len=16),
)
register(  # #11: how a value relates to its timestamp; an inverter input (MPPT / string group)
    "sources[].columns[]",
    sampling=Key("str", default="mean", choices=SAMPLINGS,
                 doc="mean over the interval, or instant: a point sample at the timestamp"),
    input=Key("id", doc="the inverter input's id (its array / input id in the inverter's arrays)"),
)
register(
    "sources[].long",
    device_column=Key("str", default="device", max_len=200),
    quantity_column=Key("str", default="quantity", max_len=200),
    value_column=Key("str", default="value", max_len=200),
    unit_column=Key("str", max_len=200), quantities=Key("table"),
)
register("sources[].long.quantities", **{"*": Key("table")})
register(
    "sources[].long.quantities.*",
    quantity=Key("str", required=True, choices=tuple(QUANTITY_UNITS)), unit=Key("str", max_len=16),
    sampling=Key("str", default="mean", choices=SAMPLINGS,
                 doc="mean over the interval, or instant: a point sample at the timestamp (#11)"),
    input=Key("id", doc="the inverter input (array id) this quantity name carries (#11)"),
)
register(
    "sources[].clock_corrections[]",
    start=Key("datetime", required=True), end=Key("datetime", required=True),
    shift_minutes=Key("int", required=True, lo=-1440, hi=1440), note=Key("str", default="", max_len=2000),
    devices=Key("list", items="id", doc="only these devices' columns (#11)"),
    columns=Key("list", items="str", doc="only these column headers (#11)"),
)
register(
    "economics",
    currency=Key("str", default="EUR", max_len=8), tariff_per_kwh=Key("float", default=0.05, lo=0, hi=10),
    cleaning_cost=Key("float", default=0.0, lo=0, hi=1e9),
)
register(
    "warranty",
    start_date=Key("date", required=True),
    first_year_loss_pct=Key("float", required=True, lo=0, hi=20),
    annual_loss_pct=Key("float", required=True, lo=0, hi=5),
    years=Key("int", default=25, lo=1, hi=50), confidence=Key("float", default=0.95, lo=0.5, hi=0.999),
)
#: Default plausible-date window of timestamps (docs/config.md "Ingest rules"): grid-connected PV
#: logger data before 1990 is not expected (common practice); the latest date defaults to
#: one day after the ingest runs (a logger clock may run a little ahead).
EARLIEST_DEFAULT = dt.date(1990, 1, 1)
#: Dates a configuration may name at all (inside what the nanosecond time axis can hold).
DATE_MIN, DATE_MAX = dt.date(1900, 1, 1), dt.date(2200, 12, 31)


def _filter_keys() -> dict[str, Key]:
    from analytics.filters import DEFAULT_FILTERS  # the thresholds the daily table uses

    return {k: Key("float") for k in DEFAULT_FILTERS}


def closest(name: str, options) -> str | None:
    """The declared key closest to a misspelt ``name`` (difflib), or None."""
    import difflib

    hit = difflib.get_close_matches(name, [o for o in options if o != "*"], n=1, cutoff=0.6)
    if not hit:
        low = {o.lower(): o for o in options}
        return low.get(name.lower())
    return hit[0]


# ---------------------------------------------------------------- loading


def _input_ids(inv: Inverter) -> set[str] | None:
    """The input (array) ids an inverter declares, or None when it declares fewer than two
    (one array is the whole inverter: any input id a column names is then accepted)."""
    arrays = getattr(inv, "arrays", None) or ()
    ids = {str(a.id) for a in arrays if getattr(a, "id", None) is not None}
    return ids if len(ids) > 1 else None


def load_site_config(path: str | Path) -> SiteConfig:
    """Read and validate a site configuration file; raise :class:`ConfigError` listing every problem."""
    path = Path(path)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise ConfigError(str(path), [("(file)", f"cannot be read: {exc.strerror}")]) from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[:exc.start].count(b"\n") + 1
        raise ConfigError(str(path), [("(file)", (
            f"line {line}: byte {data[exc.start:exc.start + 1]!r} is not UTF-8; TOML files are "
            "UTF-8 text: save the file as UTF-8"))]) from None
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


_KIND_NAMES = {"str": "a string", "id": "an id (text)", "int": "an integer", "float": "a number",
               "bool": "true or false", "date": "a date (YYYY-MM-DD)",
               "datetime": "a local date-time (YYYY-MM-DDTHH:MM:SS)", "list": "an array",
               "table": "a table", "tables": "an array of tables ([[...]])"}


def _show(val: Any) -> str:
    text = repr(val)
    return text if len(text) <= 60 else text[:57] + "..."


class _Validator:
    def __init__(self, path: str):
        self.path = path
        self.problems: list[tuple[str, str]] = []

    def bad(self, key: str, msg: str) -> None:
        self.problems.append((key, msg))

    # ---------------------------------------------------------- schema-driven access
    def keys(self, table: dict, key: str, tpath: str | None = None) -> None:
        """Report every key of ``table`` that :data:`SCHEMA` does not declare for it."""
        tpath = table_path(key) if tpath is None else tpath
        known = _filter_keys() if tpath == "filters" else SCHEMA.get(tpath, {})
        if "*" in known:
            return
        for name in table:
            if name not in known:
                full = f"{key}.{name}" if key else name
                hint = closest(name, known)
                self.bad(full, "unknown key" + (f"; did you mean `{hint}`?" if hint else "")
                         + f" (known here: {', '.join(sorted(known)) or 'none'})")

    def table(self, parent: dict, name: str, key: str = "", *, required: bool = False) -> dict:
        """A sub-table of ``parent``, checked for unknown keys; {} (and a problem) if not a table."""
        full = f"{key}.{name}" if key else name
        val = parent.get(name)
        if val is None:
            if required:
                self.bad(full, f"a [{full}] table is required")
            return {}
        if not isinstance(val, dict):
            self.bad(full, f"expected a table, got {type(val).__name__} {_show(val)}")
            return {}
        self.keys(val, full)
        return val

    def array(self, parent: dict, name: str, key: str = "") -> list[dict]:
        """An array of tables of ``parent``, each checked for unknown keys."""
        full = f"{key}.{name}" if key else name
        items = parent.get(name, [])
        if not isinstance(items, list) or not all(isinstance(x, dict) for x in items):
            self.bad(full, f"expected an array of tables ([[{table_path(full)}]]), "
                           f"got {_show(items)}")
            return []
        for n, x in enumerate(items):
            self.keys(x, f"{full}[{n}]")
        return items

    def val(self, table: dict, key: str, name: str, tpath: str | None = None) -> Any:
        """The value of ``name`` in ``table`` checked against its :data:`SCHEMA` entry."""
        spec = SCHEMA[table_path(key) if tpath is None else tpath][name]
        return self.check(table, key, name, spec)

    def check(self, table: dict, key: str, name: str | int, spec: Key) -> Any:
        full = f"{key}[{name}]" if isinstance(name, int) else f"{key}.{name}" if key else name
        if name not in table:
            if spec.required:
                self.bad(full, "is required")
            return spec.default
        val = table[name]
        kind = spec.kind
        ok = True
        if kind in ("str", "id"):
            ok = isinstance(val, str)
        elif kind == "int":
            ok = isinstance(val, int) and not isinstance(val, bool)
        elif kind == "float":
            ok = isinstance(val, int | float) and not isinstance(val, bool)
            if ok:
                val = float(val)
                if not math.isfinite(val):
                    self.bad(full, f"expected a finite number, got {val}")
                    return None if spec.required else spec.default
        elif kind == "bool":
            ok = isinstance(val, bool)
        elif kind == "date":
            if isinstance(val, dt.datetime):
                val = val.date()
            elif isinstance(val, str):
                try:
                    val = dt.date.fromisoformat(val)
                except ValueError:
                    ok = False
            ok = ok and isinstance(val, dt.date)
        elif kind == "datetime":
            if isinstance(val, dt.datetime) and val.tzinfo is not None:
                self.bad(full, f"give the export's own local time without a UTC offset, got "
                               f"{val.isoformat()}")
                return None
            ok = isinstance(val, dt.date)
        elif kind == "list":
            ok = isinstance(val, list)
            if ok and spec.items:
                before = len(self.problems)
                for n, x in enumerate(val):
                    self.check({n: x}, full, n, Key(spec.items, required=True))
                if len(self.problems) > before:
                    return spec.default
                return val
        elif kind == "table":
            ok = isinstance(val, dict)
        elif kind == "tables":
            ok = isinstance(val, list) and all(isinstance(x, dict) for x in val)
        if not ok:
            self.bad(full,
                     f"expected {_KIND_NAMES.get(kind, kind)}, got {type(val).__name__} {_show(val)}")
            return None if spec.required else spec.default
        if isinstance(val, str):
            if "\x00" in val:
                self.bad(full, "contains a NUL character")
                return None if spec.required else spec.default
            limit = spec.max_len or (ID_MAX if kind == "id" else None)
            if limit is not None and len(val) > limit:
                self.bad(full,
                         f"at most {limit} characters (the store's limit), got {len(val)}")
                return None if spec.required else spec.default
            if kind == "id":
                if not val.strip():
                    self.bad(full, "must not be empty")
                    return None if spec.required else spec.default
                if val != val.strip() or not _ID_RE.fullmatch(val):
                    self.bad(full, f"no leading/trailing spaces or control characters, got {_show(val)}")
                    return None if spec.required else spec.default
            if spec.choices is not None and val not in spec.choices:
                hint = closest(val, spec.choices)
                self.bad(full, f"must be one of {', '.join(spec.choices)}; got {val!r}"
                         + (f" (did you mean `{hint}`?)" if hint else ""))
                return None if spec.required else spec.default
        if isinstance(val, int | float) and not isinstance(val, bool):
            if spec.lo is not None and val < spec.lo or spec.hi is not None and val > spec.hi:
                self.bad(full, f"must be between {spec.lo:g} and {spec.hi:g}, got {val}"
                         if spec.lo is not None and spec.hi is not None else
                         f"must be at least {spec.lo:g}, got {val}" if spec.lo is not None else
                         f"must be at most {spec.hi:g}, got {val}")
        return val

    # ---------------------------------------------------------- legacy typed getter
    def get(self, table: dict, name: str, key: str, kind: type | tuple, default: Any = ...,
            lo: float | None = None, hi: float | None = None) -> Any:
        """Typed getter for keys read outside the schema (kept for code written against it)."""
        kinds = kind if isinstance(kind, tuple) else (kind,)
        k = ("float" if float in kinds else "int" if int in kinds else "bool" if bool in kinds
             else "date" if dt.date in kinds else "list" if list in kinds else "str")
        spec = Key(k, required=default is ..., default=None if default is ... else default,
                   lo=lo, hi=hi)
        return self.check(table, key, name, spec)

    # ---------------------------------------------------------- the site
    def site_config(self, raw: dict, text: str) -> SiteConfig:
        self.keys(raw, "")
        fv = self.val(raw, "", "format_version")
        if fv is not None and fv != FORMAT_VERSION:
            self.bad("format_version", f"this heliaudit reads format {FORMAT_VERSION}, got {fv}")
        site = self.table(raw, "site", required=True)
        sid = self.val(site, "site", "id")
        if sid is not None and not re.fullmatch(r"[A-Za-z0-9][A-Za-z0-9_.-]{0,63}", sid):
            self.bad("site.id", "use letters, digits, '-', '_' or '.' (starting with a letter or "
                                f"digit), at most 64 characters; got {_show(sid)}")
            sid = None
        tz = self.val(site, "site", "timezone")
        if tz is not None:
            try:
                zoneinfo.ZoneInfo(tz)
            except (zoneinfo.ZoneInfoNotFoundError, ValueError, OSError):
                self.bad("site.timezone", f"unknown IANA time zone {tz!r} (e.g. 'Europe/Madrid')")
                tz = None
        site_plane = Plane(kind="fixed", id="site",
                           tilt_deg=self.val(site, "site", "tilt_deg") or 0.0,
                           azimuth_deg=self.val(site, "site", "azimuth_deg") or 0.0)
        planes = self.planes(self.array(raw, "planes"))
        sensors = self.sensors(self.array(raw, "sensors"), "sensors" in raw, planes, site_plane)
        sensor_ids = {s.id: s for s in sensors}
        inverters = self.inverters(self.array(raw, "inverters"), sensor_ids, planes, site_plane)
        device_ids = set(sensor_ids) | {i.id for i in inverters}
        dup = set(sensor_ids) & {i.id for i in inverters}
        for d in sorted(dup):
            self.bad("inverters", f"id {d!r} is also a sensor id; device ids must be unique")
        sources = self.sources(self.array(raw, "sources"), sensors, inverters, device_ids)
        econ = self.table(raw, "economics")
        economics = Economics(
            currency=self.val(econ, "economics", "currency"),
            tariff_per_kwh=self.val(econ, "economics", "tariff_per_kwh"),
            cleaning_cost=self.val(econ, "economics", "cleaning_cost"),
        )
        warranty = None
        if "warranty" in raw:
            w = self.table(raw, "warranty")
            warranty = Warranty(
                start_date=self.val(w, "warranty", "start_date"),
                first_year_loss_pct=self.val(w, "warranty", "first_year_loss_pct"),
                annual_loss_pct=self.val(w, "warranty", "annual_loss_pct"),
                years=self.val(w, "warranty", "years"),
                confidence=self.val(w, "warranty", "confidence"),
            )
        filters_raw = self.table(raw, "filters")
        filters = {}
        for k in filters_raw:
            if k in _filter_keys():
                x = self.check(filters_raw, "filters", k, Key("float"))
                if x is not None:
                    filters[k] = x
        name = self.val(site, "site", "name")
        return SiteConfig(
            id=sid or "", name=name if name is not None else (sid or ""),
            owner=self.val(site, "site", "owner") or "",
            timezone=tz or "UTC",
            latitude_deg=self.val(site, "site", "latitude_deg") or 0.0,
            longitude_deg=self.val(site, "site", "longitude_deg") or 0.0,
            altitude_m=self.val(site, "site", "altitude_m") or 0.0,
            tilt_deg=site_plane.tilt_deg, azimuth_deg=site_plane.azimuth_deg,
            planes=tuple(planes.values()),
            albedo=_or(self.val(site, "site", "albedo"), 0.2),
            sensors=tuple(sensors), inverters=tuple(inverters), sources=tuple(sources),
            economics=economics, warranty=warranty, filters=filters,
            path=self.path, toml_text=text,
        )

    # ---------------------------------------------------------- site model (#11)
    def planes(self, items: list[dict]) -> dict[str, Plane]:
        """``[[planes]]``: named fixed planes and single-axis trackers, referred to by id."""
        out: dict[str, Plane] = {}
        for n, p in enumerate(items):
            key = f"planes[{n}]"
            pid = self.val(p, key, "id")
            if pid in ("site", "horizontal"):
                self.bad(f"{key}.id", f"{pid!r} is reserved (the site plane / horizontal)")
            elif pid in out:
                self.bad(f"{key}.id", f"duplicate plane id {pid!r}")
            kind = self.val(p, key, "kind") or "fixed"
            if kind == "single_axis":
                for k in ("tilt_deg", "azimuth_deg"):
                    if k in p:
                        self.bad(f"{key}.{k}", "a single-axis tracker has no fixed tilt/azimuth; "
                                 "use axis_tilt_deg, axis_azimuth_deg")
                plane = Plane(
                    kind=kind, id=pid or f"?{n}",
                    axis_tilt_deg=_or(self.val(p, key, "axis_tilt_deg"), 0.0),
                    axis_azimuth_deg=_or(self.val(p, key, "axis_azimuth_deg"), 180.0),
                    max_angle_deg=_or(self.val(p, key, "max_angle_deg"), 60.0),
                    backtrack=_or(self.val(p, key, "backtrack"), True),
                    gcr=_or(self.val(p, key, "gcr"), 0.35))
            else:
                for k in ("axis_tilt_deg", "axis_azimuth_deg", "max_angle_deg", "backtrack", "gcr"):
                    if k in p:
                        self.bad(f"{key}.{k}", "only a kind = \"single_axis\" plane has this key")
                for k in ("tilt_deg", "azimuth_deg"):
                    if k not in p:
                        self.bad(f"{key}.{k}", "is required for a fixed plane")
                plane = Plane(kind="fixed", id=pid or f"?{n}",
                              tilt_deg=_or(self.val(p, key, "tilt_deg"), 0.0),
                              azimuth_deg=_or(self.val(p, key, "azimuth_deg"), 180.0))
            if pid:
                out[pid] = plane
        return out

    def plane_of(self, t: dict, key: str, planes: dict[str, Plane], default: Plane) -> Plane:
        """A table's plane: ``plane = "<id>" | "site" | "horizontal"``, or inline
        ``tilt_deg`` / ``azimuth_deg``, else ``default``."""
        inline = "tilt_deg" in t or "azimuth_deg" in t
        tpath = table_path(key)
        if "plane" in t:
            if inline:
                self.bad(f"{key}.plane", "give either plane or tilt_deg/azimuth_deg, not both")
            ref = self.val(t, key, "plane", tpath)
            if ref == "site":
                return Plane(kind="fixed", id="site", tilt_deg=default.tilt_deg,
                             azimuth_deg=default.azimuth_deg) if default.id != "site" else default
            if ref == "horizontal":
                return HORIZONTAL
            if ref is not None and ref not in planes:
                known = ["site", "horizontal", *sorted(planes)]
                hint = closest(ref, known)
                self.bad(f"{key}.plane", f"no plane {ref!r}"
                         + (f" (did you mean `{hint}`?)" if hint else "")
                         + f"; known: {', '.join(known)}")
            return planes.get(ref, default)
        if inline:
            tilt = self.val(t, key, "tilt_deg", tpath)
            azim = self.val(t, key, "azimuth_deg", tpath)
            return Plane(kind="fixed", tilt_deg=_or(tilt, default.tilt_deg),
                         azimuth_deg=_or(azim, default.azimuth_deg))
        return default

    def sensors(self, items: list[dict], given: bool = True, planes: dict | None = None,
                site_plane: Plane | None = None) -> list[Sensor]:
        planes = planes or {}
        site_plane = site_plane or Plane(id="site")
        out, seen = [], set()
        for n, s in enumerate(items):
            key = f"sensors[{n}]"
            sid = self.val(s, key, "id")
            if sid is not None and sid in seen:
                self.bad(f"{key}.id", f"duplicate sensor id {sid!r}")
            if sid in RESERVED_IDS:
                self.bad(f"{key}.id", f"{sid!r} is reserved for site-level results")
            seen.add(sid)
            q = self.val(s, key, "quantity")
            inst, plane = None, None
            if q in ("poa_wm2", "ghi_wm2"):
                inst = self.check(s, key, "instrument", Key("str", required=True, choices=INSTRUMENTS))
            elif "instrument" in s:
                self.bad(f"{key}.instrument", f"applies to irradiance sensors only, not {q}")
            if q == "poa_wm2":
                plane = self.plane_of(s, key, planes, site_plane)
            elif q == "ghi_wm2":
                plane = self.plane_of(s, key, planes, HORIZONTAL)
                if not plane.same_as(HORIZONTAL):
                    self.bad(f"{key}.plane", "a ghi_wm2 sensor is horizontal; a tilted sensor "
                             "is quantity = \"poa_wm2\" with its plane")
                plane = HORIZONTAL
            elif any(k in s for k in ("plane", "tilt_deg", "azimuth_deg")):
                self.bad(f"{key}.plane", "only irradiance sensors (poa_wm2, ghi_wm2) have a plane")
            out.append(Sensor(id=sid or f"?{n}", quantity=q or "", instrument=inst,
                              notes=self.val(s, key, "notes") or "", plane=plane))
        if not any(s.quantity in ("poa_wm2", "ghi_wm2") for s in out):
            self.bad("sensors", "at least one irradiance sensor (quantity = \"poa_wm2\" or "
                     "\"ghi_wm2\") is required")
        return out

    def _sensor_ref(self, t: dict, ref: str, key: str, qty: str, sensors: dict[str, Sensor]
                    ) -> str | None:
        sid = self.val(t, key, ref)
        if sid is None:
            return None
        if sid not in sensors:
            hint = closest(sid, sensors)
            self.bad(f"{key}.{ref}", f"no sensor with id {sid!r}"
                     + (f" (did you mean `{hint}`?)" if hint else "")
                     + f"; known: {', '.join(sorted(sensors)) or '(none)'}")
            return None
        if sensors[sid].quantity != qty:
            self.bad(f"{key}.{ref}", f"sensor {sid!r} measures {sensors[sid].quantity}, "
                     f"expected {qty}")
            return None
        return sid

    def _arrays(self, t: dict, key: str, inv_plane: Plane, p_dc: float | None,
                inv_poa: str | None, inv_ghi: str | None, sensors: dict[str, Sensor],
                planes: dict[str, Plane]) -> list[Array]:
        """``[[inverters.arrays]]`` (or one array: the whole inverter), each with its source."""
        specs = []
        if "arrays" not in t:
            specs.append(("1", p_dc or 1.0, inv_plane, None, None, key))
        else:
            ids = set()
            items = self.array(t, "arrays", key)
            if not items:
                self.bad(f"{key}.arrays", "give at least one array, or leave arrays out")
            for m, a in enumerate(items):
                akey = f"{key}.arrays[{m}]"
                aid = self.val(a, akey, "id") or str(m + 1)
                if aid in ids:
                    self.bad(f"{akey}.id", f"duplicate array id {aid!r}")
                ids.add(aid)
                specs.append((aid, self.val(a, akey, "p_dc_kwp") or 1.0,
                              self.plane_of(a, akey, planes, inv_plane),
                              self._sensor_ref(a, "poa_sensor", akey, "poa_wm2", sensors),
                              self._sensor_ref(a, "ghi_sensor", akey, "ghi_wm2", sensors), akey))
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

    def inverters(self, items: list[dict], sensors: dict[str, Sensor],
                  planes: dict | None = None, site_plane: Plane | None = None) -> list[Inverter]:
        planes = planes or {}
        site_plane = site_plane or Plane(id="site")
        out, seen = [], set()
        if not items:
            self.bad("inverters", "at least one [[inverters]] entry is required")
        for n, t in enumerate(items):
            key = f"inverters[{n}]"
            iid = self.val(t, key, "id")
            if iid is not None and iid in seen:
                self.bad(f"{key}.id", f"duplicate inverter id {iid!r}")
            if iid in RESERVED_IDS:
                self.bad(f"{key}.id", f"{iid!r} is reserved for site-level results")
            seen.add(iid)
            gamma = self.val(t, key, "gamma_pmp_per_c")
            if gamma is not None and not (-0.01 <= gamma < 0):
                self.bad(f"{key}.gamma_pmp_per_c",
                         "expected a negative number per °C (e.g. -0.0035 for -0.35 %/°C), "
                         f"got {gamma}")
            refs = {ref: self._sensor_ref(t, ref, key, qty, sensors)
                    for ref, qty in (("poa_sensor", "poa_wm2"), ("ghi_sensor", "ghi_wm2"),
                                     ("t_module_sensor", "t_module_c"), ("t_amb_sensor", "t_amb_c"),
                                     ("wind_sensor", "wind_ms"))}
            if "t_module_sensor" not in t and "t_amb_sensor" not in t:
                self.bad(key, "no t_module_sensor and no t_amb_sensor: cell temperature can be "
                         "neither measured (back-of-module sensor) nor modelled (Sandia / "
                         "Faiman from ambient temperature); assign at least one")
            has_arrays = "arrays" in t
            p_dc = self.val(t, key, "p_dc_kwp")
            if p_dc is None and not has_arrays and "p_dc_kwp" not in t:
                self.bad(f"{key}.p_dc_kwp", "is required (or give [[inverters.arrays]] with "
                         "their p_dc_kwp)")
            inv_plane = self.plane_of(t, key, planes, site_plane)
            arrays = self._arrays(t, key, inv_plane, p_dc, refs["poa_sensor"], refs["ghi_sensor"],
                                  sensors, planes)
            if has_arrays and arrays:
                total = sum(a.p_dc_kwp for a in arrays)
                if p_dc is not None and abs(total - p_dc) > 0.01 * p_dc:
                    self.bad(f"{key}.p_dc_kwp", f"{p_dc:g} kWp but its arrays add up to "
                             f"{total:g} kWp")
                p_dc = p_dc if p_dc is not None else total
            p_dc = p_dc or 1.0
            p_ac = self.val(t, key, "p_ac_max_kw")
            out.append(Inverter(
                id=iid or f"?{n}", p_dc_kwp=p_dc,
                # unknown AC rating: the DC nameplate is assumed (docs/config.md, "Optional ratings")
                p_ac_max_kw=p_ac if p_ac is not None else p_dc, p_ac_max_assumed=p_ac is None,
                gamma_pmp_per_c=gamma if gamma is not None else -0.004,
                mounting=self.val(t, key, "mounting"),
                eta_inv_nom=_or(self.val(t, key, "eta_inv_nom"), 0.96),
                commissioned=self.val(t, key, "commissioned"),
                peer_group=self.val(t, key, "peer_group") or "site",
                poa_sensor=refs["poa_sensor"], ghi_sensor=refs["ghi_sensor"],
                t_module_sensor=refs["t_module_sensor"],
                t_amb_sensor=refs["t_amb_sensor"], wind_sensor=refs["wind_sensor"],
                arrays=tuple(arrays),
            ))
        return out

    def pattern(self, pat: str, key: str, folder_given: bool) -> str | None:
        """A glob pattern relative to the search folder: not empty, '**' only as a whole part,
        no '..' and not absolute (use ``folder`` for files elsewhere)."""
        if pat is None:
            return None
        parts = pat.replace("\\", "/").split("/")
        if not pat.strip():
            self.bad(key, "must not be empty (e.g. \"*.csv\")")
        elif pat.startswith(("/", "\\")) or re.match(r"^[A-Za-z]:", pat):
            self.bad(key, "must be relative; set `folder` to search an absolute folder")
        elif ".." in parts:
            self.bad(key, "must not contain '..' (files outside the search folder); set `folder` "
                          "explicitly to search another folder")
        elif any("**" in p and p != "**" for p in parts):
            self.bad(key, "'**' must be a whole path part (e.g. \"**/*.csv\"), got " + repr(pat))
        elif not parts[-1] or parts[-1] == "**":
            self.bad(key, "must end with a file name pattern (e.g. \"*.csv\")")
        else:
            try:
                Path(".").glob(pat)  # syntax only; nothing is listed
            except (ValueError, NotImplementedError) as exc:
                self.bad(key, f"not a usable pattern: {exc}")
            else:
                return pat
        return None

    def sources(self, items: list[dict], sensors: list[Sensor], inverters: list[Inverter],
                device_ids: set[str]) -> list[Source]:
        out = []
        if not items:
            self.bad("sources", "at least one [[sources]] entry describing the export files is required")
        names = set()
        for n, s in enumerate(items):
            key = f"sources[{n}]"
            layout = self.val(s, key, "layout")
            tkey = f"{key}.timestamp"
            ts = self.table(s, "timestamp", key)
            zone = self.val(ts, tkey, "zone")
            if zone is not None and zone not in ("local", "UTC") and not _valid_offset(zone):
                self.bad(f"{tkey}.zone", "expected 'local', 'UTC' or a fixed offset from -12:00 "
                                         f"to +14:00 like '+01:00', got {zone!r}")
                zone = None
            fmt = self.val(ts, tkey, "format")
            if fmt is not None and fmt not in ("epoch_s", "iso8601"):
                problem = _check_strftime(fmt)
                if problem:
                    self.bad(f"{tkey}.format", problem)
                    fmt = None
            earliest = self.val(ts, tkey, "earliest")
            latest = self.val(ts, tkey, "latest")
            for nm, d in (("earliest", earliest), ("latest", latest)):
                if d is not None and not (DATE_MIN <= d <= DATE_MAX):
                    self.bad(f"{tkey}.{nm}", f"must be between {DATE_MIN} and {DATE_MAX}, got {d}")
                    earliest, latest = (None, latest) if nm == "earliest" else (earliest, None)
            if earliest and latest and latest < earliest:
                self.bad(f"{tkey}.latest", f"is before earliest ({earliest})")
            tspec = TimestampSpec(
                column=_or(self.val(ts, tkey, "column"), "timestamp"),
                format=fmt or "%Y-%m-%d %H:%M:%S",
                zone=zone or "local", label=self.val(ts, tkey, "label") or "end",
                ambiguous=self.val(ts, tkey, "ambiguous") or "infer",
                earliest=earliest or EARLIEST_DEFAULT, latest=latest,
            )
            columns: list[ColumnMap] = []
            for m, c in enumerate(self.array(s, "columns", key)):
                columns.extend(self._columns(c, f"{key}.columns[{m}]", sensors, inverters, device_ids))
            long_spec, qnames, qsampling, qinputs = None, {}, {}, {}
            if layout == "long":
                lkey = f"{key}.long"
                lt = self.table(s, "long", key)
                long_spec = LongSpec(
                    device_column=self.val(lt, lkey, "device_column"),
                    quantity_column=self.val(lt, lkey, "quantity_column"),
                    value_column=self.val(lt, lkey, "value_column"),
                    unit_column=self.val(lt, lkey, "unit_column"),
                )
                quantities = self.table(lt, "quantities", lkey)
                for name, spec in quantities.items():
                    qkey = f"{lkey}.quantities.{name}"
                    if not isinstance(spec, dict):
                        self.bad(qkey, "expected { quantity = ..., unit = ... }, got " + _show(spec))
                        continue
                    self.keys(spec, qkey, "sources[].long.quantities.*")
                    q = self.val(spec, qkey, "quantity", "sources[].long.quantities.*")
                    u = normalise_unit(self.val(spec, qkey, "unit", "sources[].long.quantities.*") or "")
                    if q in QUANTITY_UNITS and u and u not in QUANTITY_UNITS[q]:
                        self.bad(f"{qkey}.unit",
                                 f"unit {u!r} is not one of {', '.join(QUANTITY_UNITS[q])} for {q}")
                    if q is not None:
                        qnames[name] = (q, u or QUANTITY_UNITS[q][0])
                        smp = self.val(spec, qkey, "sampling", "sources[].long.quantities.*")
                        if smp == "instant":
                            if q not in SAMPLED_QUANTITIES:
                                self.bad(f"{qkey}.sampling", f"{q} cannot be an instantaneous "
                                         "sample: an energy or counter is a sum")
                            else:
                                qsampling[name] = "instant"
                        inp = self.val(spec, qkey, "input", "sources[].long.quantities.*") or ""
                        if self._input_ok(inp, q, f"{qkey}.input", inverters):
                            qinputs[name] = inp
                if not qnames:
                    self.bad(f"{lkey}.quantities", "long layout needs a table mapping quantity names")
            elif not columns:
                self.bad(f"{key}.columns", "wide layout needs at least one [[sources.columns]] entry")
            delim = self.val(s, key, "delimiter")
            if delim in ("\\t", "tab"):
                delim = "\t"
            if delim not in (",", ";", "\t", "|"):
                self.bad(f"{key}.delimiter", f"expected ',', ';', '\\t' or '|', got {delim!r}")
                delim = ","
            dec = self.val(s, key, "decimal")
            if dec not in (".", ","):
                self.bad(f"{key}.decimal", f"expected '.' or ',', got {dec!r}")
                dec = "."
            elif dec == delim:
                self.bad(f"{key}.decimal", "the decimal separator cannot equal the delimiter")
            enc = self.val(s, key, "encoding")
            try:
                "".encode(enc)
            except (LookupError, TypeError):
                self.bad(f"{key}.encoding", f"unknown text encoding {enc!r} (utf-8, utf-16, latin-1)")
                enc = "utf-8"
            miss = self.val(s, key, "missing_values")
            corrections = []
            for m, c in enumerate(self.array(s, "clock_corrections", key)):
                ckey = f"{key}.clock_corrections[{m}]"
                start = self.val(c, ckey, "start")
                end = self.val(c, ckey, "end")
                shift = self.val(c, ckey, "shift_minutes")
                start, end = (x if isinstance(x, dt.datetime) or x is None
                              else dt.datetime.combine(x, dt.time()) for x in (start, end))
                if isinstance(end, dt.datetime) and not isinstance(c.get("end"), dt.datetime):
                    end = end + dt.timedelta(days=1, seconds=-1)  # a date means the whole day
                for nm, d in (("start", start), ("end", end)):
                    if d is not None and not (DATE_MIN <= d.date() <= DATE_MAX):
                        self.bad(f"{ckey}.{nm}", f"must be between {DATE_MIN} and {DATE_MAX}, got {d}")
                        start = end = None
                if start and end and end < start:
                    self.bad(ckey, "end is before start")
                devs = list(self.val(c, ckey, "devices") or ())
                for d in devs:
                    if d not in device_ids:
                        self.bad(f"{ckey}.devices", f"no inverter or sensor with id {d!r}")
                cols = list(self.val(c, ckey, "columns") or ())
                headers = {cm.header for cm in columns}
                for h in cols:
                    if layout == "wide" and h not in headers:
                        self.bad(f"{ckey}.columns", f"no column with header {h!r} in this "
                                 "source's [[sources.columns]]")
                if cols and layout == "long":
                    self.bad(f"{ckey}.columns", "a long-layout source has no per-device columns: "
                             "name the devices with `devices = [...]`")
                if start and end and shift is not None:
                    corrections.append(ClockCorrection(start, end, shift,
                                                       self.val(c, ckey, "note") or "",
                                                       devices=tuple(devs), columns=tuple(cols)))
            name = self.val(s, key, "name") or f"source{n}"
            if name in names:
                self.bad(f"{key}.name", f"duplicate source name {name!r}")
            names.add(name)
            folder = self.val(s, key, "folder")
            if folder is not None and not folder.strip():
                self.bad(f"{key}.folder", "must not be empty (leave it out to search the config's folder)")
                folder = None
            out.append(Source(
                name=name,
                pattern=self.pattern(self.val(s, key, "pattern"), f"{key}.pattern",
                                     folder is not None) or "*.csv*",
                folder=folder,
                layout=layout or "wide", encoding=enc, delimiter=delim, decimal=dec,
                skip_lines=_or(self.val(s, key, "skip_lines"), 0),
                unit_row=bool(self.val(s, key, "unit_row")),
                missing_values=tuple(miss) if miss is not None else Source.missing_values,
                timestamp=tspec, columns=tuple(columns), long=long_spec, quantity_names=qnames,
                quantity_sampling=qsampling, quantity_inputs=qinputs,
                counter_rollover_kwh=self.val(s, key, "counter_rollover_kwh"),
                clock_corrections=tuple(corrections),
                ignore_columns=tuple(self.val(s, key, "ignore_columns") or ()),
            ))
        return out

    def _input_ok(self, inp: str, q: str, key: str, inverters: list[Inverter]) -> bool:
        """A long-layout quantity name's ``input`` (#11): an input quantity, a valid id that
        some inverter declares among its arrays. False (after reporting) when not usable."""
        if not inp:
            if q in ("i_dc_a", "v_dc_v"):
                self.bad(key, f"{q} is loaded per inverter input: name it with input = \"<input id>\"")
            return False
        if q not in INPUT_QUANTITIES:
            self.bad(key, f"an inverter input carries {', '.join(INPUT_QUANTITIES)}; got {q}")
            return False
        if not re.fullmatch(r"[A-Za-z0-9][A-Za-z0-9_.-]{0,63}", inp):
            self.bad(key, "use letters, digits, '-', '_' or '.', at most 64 characters")
            return False
        ids = sorted({str(a.id) for i in inverters for a in (_input_ids(i) and i.arrays or ())})
        if inp not in ids:
            hint = closest(inp, ids)
            self.bad(key, f"no inverter declares an input {inp!r} in its [[inverters.arrays]]"
                     + (f" (did you mean `{hint}`?)" if hint else
                        f"; declared inputs: {', '.join(ids) or '(none)'}"))
            return False
        return True

    def _columns(self, c: dict, key: str, sensors: list[Sensor], inverters: list[Inverter],
                 device_ids: set[str]) -> list[ColumnMap]:
        """One ``[[sources.columns]]`` entry; ``{inverter}`` / ``{sensor}`` in header expands."""
        header = self.val(c, key, "header")
        q = self.val(c, key, "quantity")
        unit = normalise_unit(self.val(c, key, "unit") or (QUANTITY_UNITS[q][0] if q else ""))
        sampling = self.val(c, key, "sampling") or "mean"
        inp = self.val(c, key, "input") or ""
        if header is None or q is None:
            return []
        if not header.strip():
            self.bad(f"{key}.header", "must not be empty")
            return []
        if unit not in QUANTITY_UNITS[q]:
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
        dev = self.check(c, key, "device", Key("id", required=True))
        if dev is None:
            return []
        if dev not in device_ids:
            hint = closest(dev, device_ids)
            self.bad(f"{key}.device", f"no inverter or sensor with id {dev!r}"
                     + (f" (did you mean `{hint}`?)" if hint else ""))
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


def _or(val: Any, default: Any) -> Any:
    return default if val is None else val


def _valid_offset(zone: str) -> bool:
    """A fixed UTC offset ``±HH:MM`` within -12:00..+14:00 (the offsets in civil use)."""
    m = re.fullmatch(r"([+-])(\d\d):(\d\d)", zone)
    if not m:
        return False
    minutes = int(m.group(2)) * 60 + int(m.group(3))
    return int(m.group(3)) < 60 and (minutes <= 14 * 60 if m.group(1) == "+" else minutes <= 12 * 60)


def _check_strftime(fmt: str) -> str | None:
    """Why ``fmt`` is not a usable strptime pattern, or None."""
    import pandas as pd

    if not fmt.strip():
        return "must not be empty (a strptime pattern such as \"%Y-%m-%d %H:%M\", \"iso8601\" or \"epoch_s\")"
    if "%" not in fmt:
        return (f"{fmt!r} has no % directive; expected a strptime pattern such as "
                "\"%Y-%m-%d %H:%M\", or \"iso8601\" or \"epoch_s\"")
    try:
        pd.to_datetime(pd.Series(["2001-02-03 04:05:06"]), format=fmt, errors="coerce")
        dt.datetime(2001, 2, 3, 4, 5, 6).strftime(fmt)
    except (ValueError, TypeError, re.error) as exc:
        return f"not a valid strptime pattern: {exc}"
    return None
