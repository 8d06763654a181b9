"""Text of small invented site configurations, shared by tests and the fuzz sweeps.

No project imports, so a sweep run by hand against another checkout (``PYTHONPATH=...``) can
load it by path. Every site has one plane-of-array pyranometer ``POA1`` and one back-of-module
sensor ``TMOD1`` on a 30° south-facing fixed plane; every inverter reads both.
"""

from __future__ import annotations

SENSORS = """
[[sensors]]
id = "POA1"
quantity = "poa_wm2"
instrument = "thermopile_pyranometer"

[[sensors]]
id = "TMOD1"
quantity = "t_module_c"
"""

#: The two sensor columns most exports here carry, as ``source_toml`` column tuples.
SENSOR_COLUMNS = (("POA", "POA1", "poa_wm2", "W/m2"), ("TMOD", "TMOD1", "t_module_c", "C"))


def inverter_toml(inverter_id: str, p_dc_kwp: float, p_ac_max_kw: float) -> str:
    """One ``[[inverters]]`` table on POA1 and TMOD1 (glass/polymer, open rack)."""
    return f"""
[[inverters]]
id = "{inverter_id}"
p_dc_kwp = {p_dc_kwp}
p_ac_max_kw = {p_ac_max_kw}
gamma_pmp_per_c = -0.0037
mounting = "open_rack_glass_polymer"
poa_sensor = "POA1"
t_module_sensor = "TMOD1"
commissioned = 2020-01-01
"""


def site_toml(site_id: str, name: str, *, timezone: str = "UTC", latitude_deg: float = 40.0,
              longitude_deg: float = 0.0, altitude_m: float | None = None,
              inverters=(("INV1", 120.0, 100.0),)) -> str:
    """``[site]``, the two sensors and ``inverters`` ((id, p_dc_kwp, p_ac_max_kw), ...)."""
    altitude = "" if altitude_m is None else f"altitude_m = {altitude_m}\n"
    head = (f'format_version = 1\n[site]\nid = "{site_id}"\nname = "{name}"\n'
            f'timezone = "{timezone}"\nlatitude_deg = {latitude_deg}\n'
            f"longitude_deg = {longitude_deg}\n{altitude}tilt_deg = 30\nazimuth_deg = 180\n")
    return head + SENSORS + "".join(inverter_toml(*inv) for inv in inverters)


def source_toml(name: str, pattern: str, columns, *, label: str = "end", zone: str = "UTC",
                fmt: str = "%Y-%m-%d %H:%M", time_column: str = "Time", encoding: str | None = None,
                extra: str = "") -> str:
    """One wide ``[[sources]]`` table; ``columns`` are (header, device, quantity, unit) with an
    optional fifth item of extra inline keys (``'sampling = "instant"'``); ``device`` None
    leaves the key out (a ``{inverter}`` header template). ``extra`` follows the table."""
    lines = []
    for col in columns:
        header, device, quantity, unit, *more = col
        keys = [f'header = "{header}"'] + ([f'device = "{device}"'] if device else [])
        keys += [f'quantity = "{quantity}"', f'unit = "{unit}"', *more]
        lines.append("  { " + ", ".join(keys) + " },")
    enc = "" if encoding is None else f'encoding = "{encoding}"\n'
    return (f'\n[[sources]]\nname = "{name}"\npattern = "{pattern}"\n{enc}'
            f'timestamp = {{ column = "{time_column}", format = "{fmt}", zone = "{zone}", '
            f'label = "{label}" }}\ncolumns = [\n' + "\n".join(lines) + "\n]\n" + extra)
