"""Plain-language names for the codes the analysis stores (issue #15, issue #10).

Screens and printed reports show these words, never the stored codes (``clock_shift``,
``sensor_flatline``, method codes). The codes stay in the database, the results JSON and the
CSV, where programs read them. Pure data and two look-up functions; no I/O.
"""

from __future__ import annotations

#: Degradation methods (codes of results schema heliaudit-results/2).
METHOD_LABELS = {
    "recommended": "Recommended rate",
    "sensor_year_pairs": "Year-on-year, POA sensor",
    "sensor_monthly_robust_line": "Robust line through monthly index, POA sensor",
    "sensor_monthly_trend_line": "Seasonal-trend line, POA sensor",
    "peer_ratio_year_pairs": "Year-on-year relative to the peers",
    "modelled_sky_year_pairs": "Year-on-year on modelled clear sky (POA sensor not used)",
    "sensor_drift_check": "POA sensor drift against clear sky",
    "sensor_year_pairs_between_shifts": "Year-on-year between level shifts",
    "sensor_year_pairs_unsoiled": "Year-on-year with soiling removed, POA sensor",
    "modelled_sky_between_shifts": "Year-on-year on modelled clear sky between level shifts",
    "overview": "Overview",
}
#: Method codes before schema heliaudit-results/2, read from stores written by older runs.
OLD_METHOD_CODES = {
    "yoy": "sensor_year_pairs", "rlm": "sensor_monthly_robust_line",
    "stl": "sensor_monthly_trend_line", "peer_relative": "peer_ratio_year_pairs",
    "clearsky_yoy": "modelled_sky_year_pairs", "sensor_vs_clearsky": "sensor_drift_check",
    "yoy_stable_segments": "sensor_year_pairs_between_shifts", "summary": "overview",
}
#: Methods whose number is not an absolute degradation rate of the plant: a rate relative to
#: the peers, or a sensor's drift. They are drawn on their own axis.
RELATIVE_METHODS = ("peer_ratio_year_pairs", "sensor_drift_check")

FLAG_KIND_LABELS = {
    "underperformance": "Underperformance against peers",
    "outage": "Outage",
    "clipping": "Clipping at the AC limit",
    "soiling": "Soiling",
    "cleaning": "Cleaning or washing rain",
    "sensor_range": "Sensor reading out of range",
    "sensor_flatline": "Sensor stuck (flat line)",
    "sensor_dropout": "Sensor data missing",
    "sensor_night": "Sensor reads light at night",
    "sensor_drift": "Sensor drift",
    "clock_shift": "Logger clock shifted",
}
#: Flag kinds that can send someone to the equipment (field caution shown beside them).
FIELD_KINDS = ("underperformance", "outage", "sensor_range", "sensor_flatline",
               "sensor_dropout", "sensor_night", "sensor_drift", "soiling", "clock_shift")

SEVERITY_LABELS = {"alarm": "Alarm", "warning": "Warning", "info": "Info"}
SEVERITY_ORDER = {"alarm": 0, "warning": 1, "info": 2}

CAVEAT_LABELS = {
    "sensor_drift": "POA sensor drift",
    "level_shift": "Level shift (a failure, not degradation)",
    "soiling": "Soiling",
    "out_of_range": "Rate outside the usual range",
    "little_data": "Little data",
    "methods_disagree": "Methods disagree",
}

INSTRUMENT_LABELS = {
    "reference_cell": "reference cell",
    "thermopile_pyranometer": "pyranometer",
    "unknown": "unknown instrument",
}

CHANGE_POINT_LABELS = {"drop": "drop", "rise": "rise", "recovery": "recovery"}

#: Where an inverter's irradiance and cell temperature come from: the codes of the daily
#: table's ``irradiance_basis`` and ``t_cell_basis`` (issue #11). An inverter with arrays fed
#: from different sources joins their codes with "+". Decomposition and transposition models
#: are those of pvlib: DIRINT (Perez et al. 1992), GTI-DIRINT (Marion 2015), the Perez et al.
#: (1990) sky model; cell temperature models of King et al. (2004, Sandia) and Faiman (2008).
SOURCE_LABELS = {
    "poa_same_plane": "measured POA in the array plane",
    "ghi_transposed": "GHI decomposed with DIRINT (Perez et al. 1992), transposed with "
                      "Perez et al. (1990) (pvlib)",
    "poa_other_plane_transposed": "POA of another plane inverted to GHI/DNI/DHI with "
                                  "GTI-DIRINT (Marion 2015), transposed with Perez et al. "
                                  "(1990) (pvlib)",
    "module_sensor": "from a back-of-module sensor",
    "modelled_sandia_king2004": "modelled from ambient temperature, irradiance and wind "
                                "(Sandia model, King et al. 2004)",
    "modelled_faiman2008": "modelled from ambient temperature, irradiance and wind "
                           "(Faiman 2008)",
}
#: The same in a few words, for table cells.
SOURCE_SHORT_LABELS = {
    "poa_same_plane": "in plane",
    "ghi_transposed": "GHI transposed",
    "poa_other_plane_transposed": "other plane, transposed",
    "module_sensor": "sensor",
    "modelled_sandia_king2004": "modelled",
    "modelled_faiman2008": "modelled",
}#: The measured cases: a POA sensor in the array's own plane, a back-of-module sensor.
MEASURED_SOURCES = ("poa_same_plane", "module_sensor")


def method_code(code: str | None) -> str | None:
    """The current code of a method (an old code is mapped to its new name)."""
    if code is None:
        return None
    return OLD_METHOD_CODES.get(str(code), str(code))


def _human(code: str) -> str:
    return str(code).replace("_", " ").strip().capitalize()


def label(code, table: dict | None = None) -> str:
    """Human words for a stored code: the table's entry, else any known table's, else the
    code with its underscores turned into spaces (never the raw code).

    Examples
    --------
    >>> label("sensor_drift_check")
    'POA sensor drift against clear sky'
    >>> label("some_new_code"), label(None)
    ('Some new code', '–')
    """
    if code is None or (isinstance(code, float) and code != code):
        return "–"
    code = str(code)
    if table is not None and code in table:
        return table[code]
    for t in (METHOD_LABELS, FLAG_KIND_LABELS, SEVERITY_LABELS, CAVEAT_LABELS,
              INSTRUMENT_LABELS):
        if code in t:
            return t[code]
    if code in OLD_METHOD_CODES:
        return METHOD_LABELS[OLD_METHOD_CODES[code]]
    return _human(code)


def codes_in_words(text: str | None) -> str | None:
    """A stored reason text with every method code in it replaced by its words in quotes
    (reasons are written with codes, so the results document stays machine-readable; a
    screen shows words).

    >>> codes_in_words("sensor_year_pairs: daily index: 0 usable days")
    "'Year-on-year, POA sensor': daily index: 0 usable days"
    """
    if not text:
        return text
    import re

    codes = sorted({*METHOD_LABELS, *OLD_METHOD_CODES}, key=len, reverse=True)
    pattern = re.compile(r"(?<![\w./-])(" + "|".join(map(re.escape, codes)) + r")(?![\w-])")
    return pattern.sub(lambda m: f"'{method_label(m.group(1))}'", str(text))


def method_label(code) -> str:
    return label(method_code(code) if isinstance(code, str) else code, METHOD_LABELS)


def kind_label(code) -> str:
    return label(code, FLAG_KIND_LABELS)


def instrument_label(code) -> str:
    return label(code if code else "unknown", INSTRUMENT_LABELS)


def source_label(code, short: bool = False) -> str:
    """Words for an irradiance or cell-temperature source code (codes joined by "+" give
    their words joined by " + "); "–" when unknown (rows computed before sources were
    recorded).

    >>> source_label("poa_same_plane+ghi_transposed", short=True)
    'in plane + GHI transposed'
    """
    if code is None or (isinstance(code, float) and code != code) or code == "":
        return "–"
    table = SOURCE_SHORT_LABELS if short else SOURCE_LABELS
    return " + ".join(label(c, table) for c in str(code).split("+"))
