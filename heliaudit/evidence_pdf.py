"""The report of the warranty evidence pack (issue #17), written with reportlab (platypus).

The report stands on its own: the system, the data and what was excluded, the methods in
words with their published sources, the recommended rate per inverter and for the site with
every other method beside it, level shifts and soiling kept apart from degradation, the
warranty comparison, limitations and cautions, references, and how to reproduce the pack.
Text uses DejaVu Sans (shipped with matplotlib) so that symbols such as Σ, ≥ and − print.
Every number printed is taken from the pack's ``data/`` files (via :class:`Pack`).
"""

from __future__ import annotations

import io
import os
from pathlib import Path

import matplotlib
import pandas as pd
from reportlab.lib import colors
from reportlab.lib.enums import TA_LEFT
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle, getSampleStyleSheet
from reportlab.lib.units import cm
from reportlab.pdfbase import pdfmetrics
from reportlab.pdfbase.ttfonts import TTFont
from reportlab.platypus import (
    Image,
    KeepTogether,
    PageBreak,
    Paragraph,
    SimpleDocTemplate,
    Spacer,
    Table,
    TableStyle,
)
from reportlab.platypus.flowables import HRFlowable

from analytics.filters import REASONS
from dashboard.theme import PRIMARY, SECONDARY_BACKGROUND
from heliaudit import evidence_charts as charts

FONT, FONT_BOLD = "DejaVuSans", "DejaVuSans-Bold"
_FONT_DIR = Path(matplotlib.get_data_path()) / "fonts" / "ttf"
if FONT not in pdfmetrics.getRegisteredFontNames():
    pdfmetrics.registerFont(TTFont(FONT, str(_FONT_DIR / "DejaVuSans.ttf")))
    pdfmetrics.registerFont(TTFont(FONT_BOLD, str(_FONT_DIR / "DejaVuSans-Bold.ttf")))
    pdfmetrics.registerFont(TTFont("DejaVuSansMono", str(_FONT_DIR / "DejaVuSansMono.ttf")))
    pdfmetrics.registerFontFamily(FONT, normal=FONT, bold=FONT_BOLD, italic=FONT,
                                  boldItalic=FONT_BOLD)

CAUTION_SCREENING = (
    "System-level field data are screening evidence, not proof of module degradation: the "
    "measured index also holds inverter, wiring, soiling, shading, availability and "
    "irradiance-sensor effects, and it has no absolute STC baseline.")
CAUTION_CONTRACT = (
    "The warranty contract's own terms and test procedure govern any claim (usually STC flash "
    "tests of sampled modules with IEC 60891 corrections and the stated measurement "
    "tolerance). Take legal and technical advice before filing or rejecting a claim.")
CAUTION_SAFETY = (
    "PV arrays are energised whenever they are lit; disconnecting an inverter does not "
    "de-energise its DC side. Inspection, sampling and testing of modules on site are for "
    "qualified people working under local electrical codes and lockout/tagout procedures.")
CAUTIONS = (CAUTION_SCREENING, CAUTION_CONTRACT, CAUTION_SAFETY)

#: Plain-language description of each degradation method code, with its sources.
METHOD_TEXT: dict[str, tuple[str, str]] = {
    "sensor_year_pairs": (
        "Year-on-year rate of the sensor-based index",
        "Every valid day's performance index is paired with the same day one year later; each "
        "pair gives a relative change per year and the rate is the median of all pairs "
        "(Jordan et al. 2018). Seasonal effects cancel within a pair. The interval comes from "
        "a moving-block bootstrap of the pair rates (Künsch 1989), so runs of correlated "
        "days are resampled together."),
    "sensor_monthly_robust_line": (
        "Robust line through the monthly index",
        "Monthly insolation-weighted index fitted with a straight line plus an annual "
        "harmonic by robust regression with Huber weights (Huber 1964; statsmodels RLM); "
        "the interval uses heteroskedasticity- and autocorrelation-consistent standard errors "
        "(Newey & West 1987)."),
    "sensor_monthly_trend_line": (
        "Line through the seasonal-trend decomposition",
        "The monthly index is split into trend, season and remainder by STL (Cleveland et "
        "al. 1990); a robust line through the trend gives the rate."),
    "peer_ratio_year_pairs": (
        "Year-on-year rate relative to the peer inverters",
        "The inverter's daily index divided by the median of its peer group on the same day, "
        "then the year-on-year method (Jordan et al. 2018). Irradiance-sensor drift cancels; "
        "the result is the rate relative to the fleet, not an absolute rate."),
    "modelled_sky_year_pairs": (
        "Year-on-year rate on clear days against a clear-sky model",
        "Clear periods are found from the measured signals (Reno & Hansen 2016); the expected "
        "power comes from modelled clear-sky irradiance (Ineichen & Perez 2002; transposition "
        "Hay & Davies 1980; pvlib) instead of the irradiance sensor; then year-on-year "
        "(Jordan et al. 2018). Independent of the irradiance sensor's drift."),
    "sensor_drift_check": (
        "Irradiance-sensor drift check",
        "Year-on-year rate of the ratio of the sensor-based to the clear-sky-based index on "
        "clear days: a trend here is the irradiance sensor drifting (soiling of the sensor, "
        "calibration), not the modules."),
    "modelled_sky_between_shifts": (
        "Clear-sky year-on-year rate without pairs that span a level shift",
        "The clear-sky index of \"modelled_sky_year_pairs\" (independent of the irradiance "
        "sensor; clear periods after Reno & Hansen 2016), with the year-on-year pairs that "
        "straddle a lasting step (PELT, Killick et al. 2012) left out: used when the "
        "irradiance sensor drifts and a step (failure, repair) was found too (Jordan et al. "
        "2018 pairs)."),
    "sensor_year_pairs_unsoiled": (
        "Year-on-year rate of the soiling-corrected index",
        "The daily index is divided by its soiling ratio, estimated from the dry intervals "
        "between cleanings (Deceglie et al. 2018), then the year-on-year method (Jordan et al. "
        "2018). Used when soiling is material and uneven between seasons, which otherwise "
        "leaks into year-on-year pairs."),
    "sensor_year_pairs_between_shifts": (
        "Year-on-year rate without pairs that span a level shift",
        "Change points are found by PELT (Killick et al. 2012); pairs of days that straddle "
        "a lasting step (a failed string, a repair) are dropped, so a one-off failure is not "
        "counted as gradual degradation."),
}
#: Methods whose number is not an absolute module-plus-system rate: shown, not compared.
NOT_ABSOLUTE = {"peer_ratio_year_pairs": "relative to peers",
                "sensor_drift_check": "sensor drift, not a module rate"}
DAILY_TEXT = (
    "Daily figures per inverter follow IEC 61724-1: the performance ratio PR = Σ E_AC / "
    "(P0 Σ G τ / 1 kW/m²) over the day's intervals and its temperature-corrected form. The "
    "performance index compares the measured AC energy with the energy expected from the "
    "measured plane-of-array irradiance and cell temperature: the PVWatts DC and inverter "
    "model (Dobos 2014) with the Sandia module-temperature model (King et al. 2004). Only "
    "intervals that pass every check enter the index (night, missing input, out of range, "
    "outage, clipping, stuck signal, irradiance below 200 or above 1200 W/m²), and a day is "
    "valid only if enough of its insolation falls in intervals with complete, plausible data.")
SOILING_TEXT = (
    "Soiling is estimated separately from degradation, from dry intervals between cleanings "
    "or rain (Deceglie et al. 2018): the loss builds up and is recovered at a cleaning, so it "
    "moves the index up and down rather than along a trend. Year-on-year pairs of the same "
    "calendar day largely cancel a repeating soiling cycle.")
REFERENCES = [
    "Cleveland, R. B., Cleveland, W. S., McRae, J. E., Terpenning, I. (1990). STL: a "
    "seasonal-trend decomposition procedure based on loess. Journal of Official Statistics "
    "6(1), 3–73.",
    "Deceglie, M. G., Micheli, L., Muller, M. (2018). Quantifying soiling loss directly from "
    "PV yield. IEEE Journal of Photovoltaics 8(2), 547–551.",
    "Dobos, A. P. (2014). PVWatts version 5 manual. NREL/TP-6A20-62641, National Renewable "
    "Energy Laboratory.",
    "Hay, J. E., Davies, J. A. (1980). Calculation of the solar radiation incident on an "
    "inclined surface. Proc. First Canadian Solar Radiation Data Workshop, 59–72.",
    "Huber, P. J. (1964). Robust estimation of a location parameter. Annals of Mathematical "
    "Statistics 35(1), 73–101.",
    "IEC 61724-1:2021. Photovoltaic system performance – Part 1: Monitoring. International "
    "Electrotechnical Commission.",
    "Ineichen, P., Perez, R. (2002). A new airmass independent formulation for the Linke "
    "turbidity coefficient. Solar Energy 73(3), 151–157.",
    "Jordan, D. C., Deline, C., Kurtz, S. R., Kimball, G. M., Anderson, M. (2018). Robust PV "
    "degradation methodology and application. IEEE Journal of Photovoltaics 8(2), 525–531.",
    "Killick, R., Fearnhead, P., Eckley, I. A. (2012). Optimal detection of changepoints with "
    "a linear computational cost. Journal of the American Statistical Association 107(500), "
    "1590–1598.",
    "King, D. L., Boyson, W. E., Kratochvil, J. A. (2004). Photovoltaic array performance "
    "model. SAND2004-3535, Sandia National Laboratories.",
    "Künsch, H. R. (1989). The jackknife and the bootstrap for general stationary "
    "observations. Annals of Statistics 17(3), 1217–1241.",
    "Newey, W. K., West, K. D. (1987). A simple, positive semi-definite, heteroskedasticity "
    "and autocorrelation consistent covariance matrix. Econometrica 55(3), 703–708.",
    "Reno, M. J., Hansen, C. W. (2016). Identification of periods of clear sky irradiance in "
    "time series of GHI measurements. Renewable Energy 90, 520–531.",
    "Okabe, M., Ito, K. (2008). Color Universal Design (CUD): how to make figures and "
    "presentations that are friendly to colorblind people. J*FLY (chart colours).",
]


# ---------------------------------------------------------------- formatting


def fmt_rate(x) -> str:
    """A rate as printed everywhere in the report: sign and two decimals, e.g. ``-0.45``."""
    return "n/a" if x is None or pd.isna(x) else f"{float(x):+.2f}"


def fmt_interval(lo, hi) -> str:
    return "n/a" if lo is None or hi is None or pd.isna(lo) or pd.isna(hi) else \
        f"{float(lo):+.2f} to {float(hi):+.2f}"


def fmt_kwh(x) -> str:
    return "n/a" if x is None or pd.isna(x) else f"{float(x):.0f}"


def fmt_pct(x, nd: int = 0) -> str:
    return "n/a" if x is None or pd.isna(x) else f"{100 * float(x):.{nd}f} %"


def _esc(s) -> str:
    return (str(s).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;"))


def _styles() -> dict:
    base = getSampleStyleSheet()
    st = {
        "body": ParagraphStyle("body", parent=base["BodyText"], fontName=FONT, fontSize=9,
                               leading=12.2, alignment=TA_LEFT, spaceAfter=4),
        "small": ParagraphStyle("small", parent=base["BodyText"], fontName=FONT, fontSize=7.6,
                                leading=9.6, spaceAfter=2),
        "cell": ParagraphStyle("cell", fontName=FONT, fontSize=7.6, leading=9.2),
        "h1": ParagraphStyle("h1", parent=base["Heading1"], fontName=FONT_BOLD, fontSize=16,
                             leading=19, textColor=colors.HexColor(PRIMARY), spaceAfter=6),
        "h2": ParagraphStyle("h2", parent=base["Heading2"], fontName=FONT_BOLD, fontSize=12.5,
                             leading=15, textColor=colors.HexColor(PRIMARY), spaceBefore=10,
                             spaceAfter=4, keepWithNext=1),
        "h3": ParagraphStyle("h3", parent=base["Heading3"], fontName=FONT_BOLD, fontSize=10,
                             leading=12.5, spaceBefore=6, spaceAfter=3, keepWithNext=1),
        "box": ParagraphStyle("box", fontName=FONT, fontSize=8.6, leading=11.2, leftIndent=4,
                              rightIndent=4),
    }
    return st


#: A table cell holds at most this many characters: a row cannot break across pages, so a
#: long refusal (every method's reason) in a narrow column would not fit one page; the full
#: text is in data/results.json.
CELL_MAX_CHARS = 300


def _cell_text(text: str) -> str:
    """``text``, or its first words up to :data:`CELL_MAX_CHARS` with a pointer to the full
    text.

    >>> _cell_text("short")
    'short'
    >>> _cell_text("word " * 100).endswith("… (in full: data/results.json)")
    True
    """
    if len(text) <= CELL_MAX_CHARS:
        return text
    return text[:CELL_MAX_CHARS].rsplit(" ", 1)[0] + " … (in full: data/results.json)"


def _table(rows: list[list], widths: list[float] | None = None, header: bool = True,
           st: dict | None = None) -> Table:
    st = st or _styles()
    data = [[c if not isinstance(c, str) else Paragraph(_esc(_cell_text(c)), st["cell"])
             for c in r] for r in rows]
    t = Table(data, colWidths=widths, repeatRows=1 if header else 0, hAlign="LEFT")
    style = [("FONTNAME", (0, 0), (-1, -1), FONT), ("FONTSIZE", (0, 0), (-1, -1), 7.6),
             ("VALIGN", (0, 0), (-1, -1), "TOP"),
             ("LINEBELOW", (0, 0), (-1, -1), 0.25, colors.HexColor("#CCCCCC")),
             ("TOPPADDING", (0, 0), (-1, -1), 2), ("BOTTOMPADDING", (0, 0), (-1, -1), 2),
             ("LEFTPADDING", (0, 0), (-1, -1), 3), ("RIGHTPADDING", (0, 0), (-1, -1), 3)]
    if header:
        style += [("BACKGROUND", (0, 0), (-1, 0), colors.HexColor(SECONDARY_BACKGROUND)),
                  ("LINEBELOW", (0, 0), (-1, 0), 0.8, colors.HexColor(PRIMARY))]
    t.setStyle(TableStyle(style))
    return t


def _box(paragraphs: list[str], st: dict, title: str) -> Table:
    body = [Paragraph(f"<b>{_esc(title)}</b>", st["box"])]
    body += [Paragraph("• " + _esc(p), st["box"]) for p in paragraphs]
    t = Table([[body]], colWidths=[17 * cm], hAlign="LEFT")
    t.setStyle(TableStyle([("BOX", (0, 0), (-1, -1), 1.0, colors.HexColor(PRIMARY)),
                           ("BACKGROUND", (0, 0), (-1, -1), colors.HexColor("#F6F3EC")),
                           ("TOPPADDING", (0, 0), (-1, -1), 5),
                           ("BOTTOMPADDING", (0, 0), (-1, -1), 5)]))
    return t


def _image(png: bytes, width_cm: float = 17.0, max_height_cm: float = 23.0) -> Image:
    """A PNG at the text width, scaled down to fit a page when it is taller."""
    img = Image(io.BytesIO(png))
    ratio = img.imageHeight / img.imageWidth
    width_cm = min(width_cm, max_height_cm / ratio)
    img.drawWidth = width_cm * cm
    img.drawHeight = width_cm * cm * ratio
    img.hAlign = "LEFT"
    return img


def _latlon(x: float, pos: str, neg: str) -> str:
    return f"{abs(float(x)):.4f}° {pos if float(x) >= 0 else neg}"


def _label(dev: str) -> str:
    return "Site (all inverters)" if dev == "(site)" else dev


# ---------------------------------------------------------------- sections


def _title(pack, st) -> list:
    site = pack.site
    first, last = pack.period
    invs = list(pack.inverters["device_id"])
    out = [Paragraph("Degradation and warranty evidence", st["h1"]),
           Paragraph(f"<b>{_esc(site['name'])}</b> (site id {_esc(site['site_id'])})"
                     + (f", owner {_esc(site['owner'])}" if site.get("owner") else ""), st["body"]),
           Paragraph(f"Period analysed: {first or 'n/a'} to {last or 'n/a'} (days in local "
                     f"standard time). Inverters in this report: {len(invs)} "
                     f"({_esc(', '.join(invs))}); site figures always use every inverter.",
                     st["body"]),
           Paragraph(f"Numbers: {_esc(pack.basis)}. Created {pack.created_utc} by heliaudit "
                     f"{_esc(pack.doc.get('software', {}).get('version', ''))}. "
                     "The files in data/ hold every number and the series behind every figure; "
                     "manifest.json holds the SHA-256 of every file and the command that "
                     "rebuilds this pack.", st["small"]),
           HRFlowable(width="100%", color=colors.HexColor(PRIMARY), thickness=0.8,
                      spaceBefore=4, spaceAfter=6)]
    return out


def _summary_section(pack, st) -> list:
    out = [Paragraph("1. Summary", st["h2"])]
    rows = [["Device", "Rate [%/yr]", "Interval [%/yr]", "Method",
             "Methods agree", "Exceeds warranty?", "Shortfall [kWh]"]]
    short = []
    for s in pack.summary:
        conf = s["confidence"]
        agree = ("n/a" if s["agree"] is None else "yes" if s["agree"] else "no")
        if s["exceeds"] is None:
            test = "not tested"
        else:
            test = "exceeds" if s["exceeds"] else "not shown"
        rows.append([_label(s["device_id"]), fmt_rate(s["rate_pct_per_yr"]),
                     (fmt_interval(s["ci_low"], s["ci_high"])
                      + (f" ({conf:.0%})" if conf is not None else "")),
                     s["method"], agree, test, fmt_kwh(s["shortfall_kwh"])])
        if s["rate_pct_per_yr"] is None:
            short.append(s)
    out.append(_table(rows, [2.6 * cm, 1.5 * cm, 3.4 * cm, 4.6 * cm, 1.5 * cm, 2.0 * cm,
                             1.4 * cm], st=st))
    out.append(Spacer(1, 4))
    notes = []
    for s in pack.summary:
        # the recommended rate's caveats (issue #13) already say these in their own words
        kinds = {c.get("kind") for c in s["caveats"] if isinstance(c, dict)}
        drops = [c for c in s["change_points"] if c.get("kind") == "drop"]
        if drops and "level_shift" not in kinds:
            notes.append(f"{_label(s['device_id'])}: level drop on "
                         + ", ".join(f"{c['day']} ({c['size_pct']:+.1f} %)" for c in drops)
                         + ": a failure, not degradation; see sections 5 and 6.")
        if s["agree"] is False and "methods_disagree" not in kinds:
            notes.append(f"{_label(s['device_id'])}: methods disagree ("
                         f"{_pairs(s['disagreements'])}); read section 5 before using the rate.")
        for c in s["caveats"]:
            notes.append(f"{_label(s['device_id'])}: "
                         + (c.get("text", "") if isinstance(c, dict) else str(c)))
    if any(s["fallback"] for s in pack.summary):
        notes.append("This heliaudit version stored no recommended rate; the year-on-year rate "
                     "of the sensor-based index (sensor_year_pairs) is shown as the main rate.")
    if notes:
        out.append(Paragraph("Notes", st["h3"]))
        out += [Paragraph("• " + _esc(n), st["small"]) for n in notes]
    if short:
        names = ", ".join(_label(s["device_id"]) for s in short)
        reasons = "; ".join(sorted({str(s["not_computed"]) for s in short if s["not_computed"]}))
        out.append(Paragraph(
            f"<b>Too little data for a degradation rate</b> for {_esc(names)}"
            + (f": {_esc(reasons)}" if reasons else "") + ". Year-on-year methods need at "
            "least two years of valid days after the stabilisation period; no rate and no "
            "warranty test are reported for these devices.", st["body"]))
    out.append(Paragraph(
        "Rate: the recommended rate (section 5). Negative rates are losses. A rate is the "
        "relative change of the performance index "
        "per year; the interval is two-sided at the confidence shown. \"Methods agree\" means "
        "the intervals of the absolute-rate methods overlap. The warranty test is one-sided "
        "(section 7); \"not shown\" means the data do not show the loss rate to exceed the "
        "warranted rate. The shortfall is energy below the warranted envelope (section 7).",
        st["small"]))
    out.append(Spacer(1, 4))
    out.append(_box(list(CAUTIONS), st, "Read before using these numbers"))
    return out


def _system_section(pack, st) -> list:
    site, cfg = pack.site, pack.config
    out = [Paragraph("2. The system", st["h2"]),
           Paragraph(f"Location {_latlon(site['latitude_deg'], 'N', 'S')}, "
                     f"{_latlon(site['longitude_deg'], 'E', 'W')}, altitude {site['altitude_m']:.0f} m, time zone "
                     f"{_esc(site['timezone'])}. Site plane as configured: tilt "
                     f"{site['tilt_deg']:.1f}°, azimuth {site['azimuth_deg']:.1f}° "
                     f"(180° = south), ground albedo {site['albedo']:.2f}.", st["body"])]
    inv_cfg = {x.get("id"): x for x in cfg.get("inverters", []) or [] if isinstance(x, dict)}
    rows = [["Inverter", "DC [kWp]", "AC [kW]", "γ [%/°C]", "Mounting (thermal class)",
             "Commissioned", "Plane", "Irradiance sensor", "Module T sensor", "Peer group"]]
    for _, i in pack.inverters.iterrows():
        c = inv_cfg.get(i["device_id"], {})
        rows.append([i["device_id"], _fmt(i["p_dc_kwp"], "{:.1f}"),
                     _fmt(i["p_ac_max_kw"], "{:.1f}"),
                     _fmt(i["gamma_pmp_per_c"], "{:.2f}", 100),
                     _txt(i["mounting"]).replace("_", " "), _txt(i["commissioned"], "unknown"),
                     _txt(c.get("plane"), "per array" if c.get("arrays") else "site plane"),
                     _txt(i["poa_sensor_id"]),
                     _txt(i["t_module_sensor_id"], "none (modelled)"), _txt(i["peer_group"])])
    total = pd.to_numeric(pack.inverters["p_dc_kwp"], errors="coerce").sum()
    out += [Paragraph(f"Inverters in this report: {len(pack.inverters)}, "
                      f"{total:.1f} kWp DC in total (ratings as configured).", st["body"]),
            _table(rows, [1.4 * cm, 1.2 * cm, 1.1 * cm, 1.2 * cm, 2.5 * cm, 2.2 * cm, 1.6 * cm,
                          2.0 * cm, 2.0 * cm, 1.8 * cm], st=st)]
    planes = _plain_rows(cfg.get("planes"))
    if planes:
        out += [Paragraph("Planes (as configured)", st["h3"]), _table(planes, st=st)]
    arrays = _arrays(cfg, set(pack.inverters["device_id"]))
    if arrays:
        out += [Paragraph("Arrays (inverter inputs) as configured", st["h3"]),
                _table(arrays, st=st)]
    if not planes and not arrays:
        out.append(Paragraph("No planes or arrays are configured: every inverter is taken to "
                             "face the site plane above.", st["small"]))
    sens_cfg = {x.get("id"): x for x in cfg.get("sensors", []) or [] if isinstance(x, dict)}
    srows = [["Sensor", "Quantity", "Instrument", "Plane", "Notes (from the configuration)"]]
    for _, s in pack.sensors.iterrows():
        srows.append([s["device_id"], _txt(s["quantity"]), _txt(s["instrument"]).replace("_", " "),
                      _txt(sens_cfg.get(s["device_id"], {}).get("plane"), ""),
                      _txt(s["notes"], "")])
    out += [Paragraph("Sensors", st["h3"]),
            _table(srows, [2.0 * cm, 2.0 * cm, 3.2 * cm, 1.8 * cm, 8.0 * cm], st=st)]
    w = cfg.get("warranty")
    out.append(Paragraph("Warranty terms as configured", st["h3"]))
    if isinstance(w, dict):
        w1 = 100 - float(w.get("first_year_loss_pct", 0))
        out.append(Paragraph(
            f"Start {w.get('start_date')}; year-1 loss at most {w.get('first_year_loss_pct')} % "
            f"(guaranteed {w1:.1f} % of nameplate), then at most {w.get('annual_loss_pct')} %/yr "
            f"(linear) for {w.get('years', 25)} years; the test in section 7 uses a one-sided "
            f"confidence of {float(w.get('confidence', 0.95)):.0%}. These are the terms typed "
            "into the site configuration; check them against the signed contract.", st["body"]))
    else:
        out.append(Paragraph("No [warranty] table in the site configuration: no warranty "
                             "comparison is made.", st["body"]))
    return out


def _fmt(x, spec: str, scale: float = 1.0) -> str:
    """A configured number, or "–" when it is not configured."""
    try:
        f = float(x)
    except (TypeError, ValueError):
        return "–"
    return "–" if pd.isna(f) else spec.format(scale * f)


def _txt(x, missing: str = "–") -> str:
    if x is None or (isinstance(x, float) and pd.isna(x)) or (isinstance(x, str) and not x):
        return missing
    return str(x)


def _plain_rows(items) -> list[list]:
    """A table of a configuration array of tables (scalar keys only), header first."""
    items = [x for x in items or [] if isinstance(x, dict)]
    keys: list[str] = []
    for x in items:
        keys += [k for k in x if k not in keys and not isinstance(x[k], dict | list)]
    if not keys:
        return []
    return [keys, *[[_txt(x.get(k), "") for k in keys] for x in items]]


def _arrays(cfg: dict, chosen: set[str]) -> list[list]:
    """Rows of any per-inverter ``arrays`` (or ``planes``) list in the configuration."""
    rows: list[list] = []
    keys: list[str] = []
    for inv in cfg.get("inverters", []) or []:
        if not isinstance(inv, dict) or inv.get("id") not in chosen:
            continue
        for name in ("arrays", "planes"):
            for a in inv.get(name) or []:
                if isinstance(a, dict):
                    keys += [k for k in a if k not in keys and not isinstance(a[k], dict | list)]
    if not keys:
        return rows
    rows.append(["Inverter", *keys])
    for inv in cfg.get("inverters", []) or []:
        if not isinstance(inv, dict) or inv.get("id") not in chosen:
            continue
        for name in ("arrays", "planes"):
            for a in inv.get(name) or []:
                if isinstance(a, dict):
                    rows.append([str(inv["id"]), *[str(a.get(k, "")) for k in keys]])
    return rows


def _data_section(pack, st) -> list:
    first, last = pack.period
    t = pack.ingest_totals
    ex = pack.exclusions
    out = [Paragraph("3. The data", st["h2"]),
           Paragraph(f"Period {first or 'n/a'} to {last or 'n/a'}. Source: {len(pack.sources)} "
                     f"export file(s) whose readings are in the store for this period "
                     f"({t['n_readings']} readings); the files as loaded had {t['rows_read']} "
                     f"rows: {t['rows_loaded']} loaded, {t['rows_duplicate']} duplicates of rows "
                     f"already stored, {t['rows_rejected']} rejected as unreadable, and "
                     f"{t['values_rejected']} single values rejected as implausible. Each "
                     "file's name and SHA-256 are in data/source_files.csv and manifest.json.",
                     st["body"])]
    rows = [["Inverter", "Days in period", "Days with data", "Valid days", "Days used for rates",
             "Median coverage", "Valid intervals"]]
    for _, r in ex.iterrows():
        rows.append([r["device_id"], str(r["days_in_period"]), str(r["days_with_data"]),
                     str(r["days_valid"]),
                     "n/a" if r["days_used_for_rates"] is None or pd.isna(r["days_used_for_rates"])
                     else str(int(r["days_used_for_rates"])),
                     fmt_pct(r["coverage_median"]), str(r["intervals_valid"])])
    out += [Paragraph("Coverage per inverter", st["h3"]), _table(rows, st=st),
            Paragraph("Coverage is the share of a day's insolation that falls in intervals with "
                      "complete, plausible data; days below the minimum are not valid. Days used "
                      "for rates also leave out the stabilisation period after commissioning.",
                      st["small"])]
    reasons = [r for r in REASONS[1:] if f"excluded_{r}_n" in ex.columns]
    erows = [["Inverter", *[r.replace("_", " ") for r in reasons]]]
    for _, r in ex.iterrows():
        erows.append([r["device_id"], *[str(r[f"excluded_{x}_n"]) for x in reasons]])
    out += [Paragraph("Intervals excluded from the performance index, by reason", st["h3"]),
            _table(erows, st=st),
            Paragraph("Each interval is counted once, under the first check it fails (order of "
                      "the columns). Night intervals are not losses; outage and clipping are "
                      "states of the plant and stay in the energy PR but not in the index.",
                      st["small"]),
            _image(charts.coverage_chart(pack.coverage))]
    fl = pack.flags
    sensor = fl[fl["kind"].astype(str).str.startswith("sensor")] if len(fl) else fl
    out.append(Paragraph("Sensor faults and how they were handled", st["h3"]))
    if sensor.empty:
        out.append(Paragraph("No sensor fault was flagged in the period.", st["body"]))
    else:
        f = sensor.assign(s=pd.to_datetime(sensor["start_utc"], utc=True),
                          e=pd.to_datetime(sensor["end_utc"], utc=True))
        f["h"] = (f["e"] - f["s"]).dt.total_seconds() / 3600
        g = f.groupby(["kind", "device_id"]).agg(n=("kind", "size"), first=("s", "min"),
                                                 last=("e", "max"), h=("h", "sum")).reset_index()
        srows = [["Fault", "Sensor / device", "Flags", "First starts (UTC)", "Last ends (UTC)",
                  "Hours flagged"]] + [
            [r["kind"].replace("_", " "), r["device_id"], str(r["n"]),
             r["first"].strftime("%Y-%m-%d %H:%M") if pd.notna(r["first"]) else "",
             r["last"].strftime("%Y-%m-%d %H:%M") if pd.notna(r["last"]) else "",
             f"{r['h']:.1f}" if pd.notna(r["h"]) else ""] for _, r in g.iterrows()]
        out.append(_table(srows, [3.4 * cm, 2.6 * cm, 1.2 * cm, 3.2 * cm, 3.2 * cm, 2.2 * cm],
                          st=st))
        out.append(Paragraph("Every flag with its details is in data/flags.csv.", st["small"]))
    out.append(Paragraph(
        "Intervals with a missing, out-of-range or stuck reading are excluded by the interval "
        "checks above (they lower the day's coverage). A drifting irradiance sensor cannot be "
        "excluded interval by interval: it is checked against a clear-sky model (method "
        "\"sensor_drift_check\") and against methods that do not use the sensor "
        "(\"peer_ratio_year_pairs\", \"modelled_sky_year_pairs\"); see section 5.", st["small"]))
    return out


def _methods_section(pack, st) -> list:
    out = [Paragraph("4. Methods", st["h2"]), Paragraph(DAILY_TEXT, st["body"])]
    seen = list(dict.fromkeys(pack.rates["method"])) if len(pack.rates) else []
    for code in [*[m for m in METHOD_TEXT if m in seen], *[m for m in seen if m not in METHOD_TEXT]]:
        title, text = METHOD_TEXT.get(code, (code, "See the heliaudit README, section Methods."))
        out.append(Paragraph(f"<b>{_esc(title)}</b> (code {_esc(code)}). {_esc(text)}",
                             st["body"]))
    out.append(Paragraph(
        "<b>Level shifts.</b> Steps in the index are found by PELT change-point detection "
        "(Killick et al. 2012) and kept only if year-on-year pairs confirm that they last; "
        "recoveries after a soiling build-up (cleanings) are not counted as steps.", st["body"]))
    out.append(Paragraph("<b>Soiling.</b> " + _esc(SOILING_TEXT), st["body"]))
    params = pack.doc.get("parameters") or {}
    if params:
        keys = ["confidence", "n_resamples", "seed", "stabilisation_days", "min_years",
                "lag_days", "changepoint_penalty_factor", "changepoint_min_step_pct",
                "sigma_extra_pct_per_yr"]
        txt = ", ".join(f"{k} = {params[k]}" for k in keys if k in params)
        out.append(Paragraph(f"Parameters of the degradation run: {_esc(txt)} (all parameters "
                             "are in data/results.json and manifest.json).", st["small"]))
    return out


def _results_section(pack, st) -> list:
    out = [Paragraph("5. Degradation rates", st["h2"])]
    for s in pack.summary:
        dev = s["device_id"]
        blk = [Paragraph(f"{_esc(_label(dev))}", st["h3"])]
        if s["rate_pct_per_yr"] is None:
            blk.append(Paragraph(
                f"{_esc(dev)}: no recommended rate: "
                f"{_esc(s['not_computed'] or 'too little data')}.", st["body"]))
        else:
            conf = s["confidence"]
            blk.append(Paragraph(
                f"{_esc(dev)}: recommended rate {fmt_rate(s['rate_pct_per_yr'])} %/yr, interval "
                f"{fmt_interval(s['ci_low'], s['ci_high'])} %/yr"
                + (f" ({conf:.0%} two-sided)" if conf is not None else "")
                + f", method {_esc(s['method'])}.", st["body"]))
        if s["reasons"]:
            blk.append(Paragraph("Why this method: " + _esc("; ".join(s["reasons"])) + ".",
                                 st["small"]))
        for c in s["caveats"]:
            txt = c.get("text") if isinstance(c, dict) else str(c)
            blk.append(Paragraph("Caveat: " + _esc(txt), st["small"]))
        r = pack.rates[pack.rates["device_id"] == dev]
        rows = [["Method", "Rate [%/yr]", "Interval [%/yr]", "Points", "Overlaps recommended",
                 "Not computed because"]]
        for _, m in r.iterrows():
            ov = m["overlaps_recommended"]
            ovs = ("(recommended)" if m["recommended"] else
                   NOT_ABSOLUTE.get(m["method"]) or
                   ("n/a" if ov is None or pd.isna(ov) else "yes" if ov else "no"))
            rows.append([m["method"], fmt_rate(m["rate_pct_per_yr"]),
                         fmt_interval(m["ci_low"], m["ci_high"]),
                         "" if m["n_points"] is None or pd.isna(m["n_points"])
                         else str(int(m["n_points"])), ovs,
                         "" if m["reason_not_computed"] is None or pd.isna(m["reason_not_computed"])
                         else str(m["reason_not_computed"])])
        blk.append(_table(rows, [5.0 * cm, 1.5 * cm, 2.7 * cm, 1.2 * cm, 2.4 * cm, 4.2 * cm],
                          st=st))
        if s["agree"] is not None:
            blk.append(Paragraph(
                ("Methods agree (their intervals overlap): " if s["agree"] else
                 "Methods disagree: ") + _esc(", ".join(s["compared"]))
                + (f"; intervals that do not overlap: {_esc(_pairs(s['disagreements']))}"
                   if s["disagreements"] else "") + ".", st["small"]))
        for w in s["warnings"]:
            blk.append(Paragraph("Warning: " + _esc(w), st["small"]))
        out.append(KeepTogether(blk))
    out.append(Spacer(1, 4))
    shown = pack.rates[pack.rates["method"] != "sensor_drift_check"]
    devs = list(dict.fromkeys(shown["device_id"]))
    for k in range(0, max(len(devs), 1), 6):  # at most 6 devices per chart
        out.append(_image(charts.rates_chart(shown[shown["device_id"].isin(devs[k:k + 6])])))
    si = pack.site_index
    trend = (si[["day"]].assign(pi_trend=si["pi_recommended_line"])
             if "pi_recommended_line" in si else None)
    site_s = pack.summary[-1]
    spans = _soiling_spans(pack.flags)
    out.append(_image(charts.index_chart(
        si[["day", "pi"]] if len(si) else si, trend, site_s["change_points"], spans,
        "Daily performance index of the inverters in this report")))
    out.append(Paragraph("Data: data/site_daily_index.csv (points, line) and data/rates.csv "
                         "(rates chart; the sensor drift check is left out of the chart because it is the "
                         "sensor's drift, not a rate of the plant). The dashed line is the site's recommended rate drawn "
                         "through the median level; it shows the slope, not a fit.",
                         st["small"]))
    return out


def _pairs(items) -> str:
    out = []
    for x in items:
        out.append(" vs ".join(map(str, x)) if isinstance(x, list | tuple) else str(x))
    return "; ".join(out)


def _soiling_spans(flags: pd.DataFrame) -> pd.DataFrame:
    rows = []
    for _, f in flags[flags["kind"] == "soiling"].iterrows() if len(flags) else []:
        try:
            import json

            d = json.loads(f["details"]) if f["details"] else {}
        except ValueError:
            d = {}
        rows.append({"first_day": d.get("first_day") or str(f["start_utc"])[:10],
                     "last_day": d.get("last_day") or str(f["end_utc"])[:10],
                     "loss_at_end_pct": d.get("loss_at_end_pct"),
                     "rate_pct_per_day": d.get("soiling_rate_pct_per_day"),
                     "lost_kwh": f["lost_kwh"]})
    return pd.DataFrame(rows, columns=["first_day", "last_day", "loss_at_end_pct",
                                       "rate_pct_per_day", "lost_kwh"])


def _shifts_section(pack, st) -> list:
    out = [Paragraph("6. Level shifts and soiling, kept apart from degradation", st["h2"]),
           Paragraph("A step down is a failure (a string, a module, an inverter), not "
                     "degradation; a soiling loss comes and goes with cleaning and rain. Both "
                     "are reported here and not folded into the rate. Where a lasting step was "
                     "found, the method \"sensor_year_pairs_between_shifts\" gives the rate "
                     "without the pairs that span it.", st["body"])]
    rows = [["Device", "Day", "Kind", "Size [%]", "How measured"]]
    for s in pack.summary:
        for c in s["change_points"]:
            rows.append([_label(s["device_id"]), str(c.get("day")), str(c.get("kind")),
                         "n/a" if c.get("size_pct") is None else f"{c['size_pct']:+.1f}",
                         str(c.get("size_from") or "")])
    if len(rows) > 1:
        out += [Paragraph("Change points", st["h3"]),
                _table(rows, [2.6 * cm, 2.2 * cm, 2.0 * cm, 1.6 * cm, 8.6 * cm], st=st),
                Paragraph("Kind \"recovery\" is a rise after a soiling build-up (a cleaning or "
                          "rain); it is shown for completeness and does not split the rate.",
                          st["small"])]
    else:
        out.append(Paragraph("No change point was found in the period.", st["body"]))
    sp = _soiling_spans(pack.flags)
    out.append(Paragraph("Soiling intervals (flags)", st["h3"]))
    if sp.empty:
        out.append(Paragraph("No soiling interval was flagged in the period.", st["body"]))
    else:
        n_clean = int((pack.flags["kind"] == "cleaning").sum())
        rows = [["First day", "Last day", "Loss at end [%]", "Rate [%/day]", "Energy lost [kWh]"]]
        for _, r in sp.iterrows():
            rows.append([r["first_day"], r["last_day"],
                         "n/a" if r["loss_at_end_pct"] is None else f"{r['loss_at_end_pct']:.1f}",
                         "n/a" if r["rate_pct_per_day"] is None else f"{r['rate_pct_per_day']:+.3f}",
                         fmt_kwh(r["lost_kwh"])])
        out += [_table(rows, st=st),
                Paragraph(f"{len(sp)} soiling interval(s) and {n_clean} cleaning or rain "
                          f"event(s) in the period; energy lost to soiling in these intervals "
                          f"{fmt_kwh(sp['lost_kwh'].sum())} kWh (expected-power model). "
                          "Method: Deceglie et al. 2018.", st["small"])]
    return out


def _warranty_section(pack, st) -> list:
    out = [Paragraph("7. Warranty comparison", st["h2"])]
    if not isinstance(pack.config.get("warranty"), dict):
        return out + [Paragraph("No warranty terms are configured; no comparison.", st["body"])]
    out.append(Paragraph(
        "<b>Test.</b> The hypothesis that the loss rate is at most the warranted annual loss "
        "is rejected when the upper bound of the one-sided interval of the measured rate, at "
        "the configured confidence, lies below minus the warranted loss. The one-sided bound "
        "comes from the upper half of the rate's two-sided interval (normal approximation); "
        "other independent uncertainty (sensor drift, soiling), if configured, is added in "
        "quadrature.", st["body"]))
    rows = [["Device", "Method", "Measured [%/yr]", "One-sided upper bound [%/yr]",
             "Warranted [%/yr]", "Verdict", "Shortfall [kWh]", "Months below"]]
    for s in pack.summary:
        if s["exceeds"] is None:
            rows.append([_label(s["device_id"]), s["warranty_method"] or "", "n/a", "n/a", "n/a",
                         "not tested: " + str(s["warranty_reason"] or "no rate"), "n/a", "n/a"])
            continue
        rows.append([_label(s["device_id"]), s["warranty_method"] or "",
                     fmt_rate(s["warranty_rate"]), fmt_rate(s["one_sided_upper"]),
                     fmt_rate(s["warranted_rate"]),
                     "exceeds" if s["exceeds"] else "not shown to exceed",
                     fmt_kwh(s["shortfall_kwh"]),
                     "n/a" if s["months_below"] is None else str(s["months_below"])])
    out.append(_table(rows, [2.4 * cm, 3.1 * cm, 1.7 * cm, 2.2 * cm, 1.7 * cm, 2.6 * cm,
                             1.7 * cm, 1.6 * cm], st=st))
    for s in pack.summary:
        if s["exceeds"] is not None:
            conf = s["warranty_confidence"]
            out.append(Paragraph(
                f"{_esc(s['device_id'])}: measured {fmt_rate(s['warranty_rate'])} %/yr "
                f"({_esc(s['warranty_method'] or '')}); one-sided "
                + (f"{conf:.0%} " if conf is not None else "")
                + f"upper bound {fmt_rate(s['one_sided_upper'])} %/yr against the warranted "
                f"{fmt_rate(s['warranted_rate'])} %/yr: {_esc(s['verdict'] or '')}; energy "
                f"shortfall {fmt_kwh(s['shortfall_kwh'])} kWh in "
                f"{s['months_below'] if s['months_below'] is not None else 'n/a'} month(s).",
                st["small"]))
        if s["warranty_note"]:
            out.append(Paragraph(f"{_esc(_label(s['device_id']))}: {_esc(s['warranty_note'])}.",
                                 st["small"]))
    out.append(Paragraph(
        "<b>Energy shortfall.</b> For each month the measured de-seasonalised index, relative "
        "to the warranty start, is compared with the warranted minimum; where it is below, the "
        "shortfall is the month's measured AC energy times (warranted / measured − 1), summed "
        "over the months. A shortfall in some months can occur while the rate test shows no "
        "exceedance (a step, a soiling season or noise pushes single months below the line): "
        "the test asks whether the loss rate exceeds the warranty, the shortfall how much "
        "energy the months below the line lacked. <b>It includes</b> every cause that lowers the system's index "
        "(module degradation, but also inverter, wiring, soiling and shading losses and "
        "irradiance-sensor drift). <b>It excludes</b> energy lost while the plant was "
        "unavailable (outage intervals do not enter the index, and the shortfall scales the "
        "energy actually produced), initial light-induced loss before the first "
        "analysed months (the measured index has no absolute baseline and is taken as 100 % at "
        "the warranty start, which understates a shortfall), and any loss before the period "
        "analysed. It is not a claim amount.", st["body"]))
    env = pack.envelope
    site_env = env[env["device_id"] == "(site)"]
    out.append(_image(charts.warranty_chart(
        site_env, "Warranted minimum and measured index, site (all inverters)")))
    devs = [d for d in pack.inverters["device_id"]]
    for k in range(0, len(devs), 8):
        part = devs[k:k + 8]
        out.append(_image(charts.warranty_panels(
            env, part, "Per inverter" + (f" ({k // 8 + 1})" if len(devs) > 8 else ""))))
    out.append(Paragraph("Data: data/warranty_envelope.csv (every device).", st["small"]))
    return out


def _limitations_section(pack, st) -> list:
    items = [
        "The rates are of the whole system seen through its inverters' AC output: they are not "
        "a measurement of module power at STC and cannot replace flash tests of sampled "
        "modules.",
        "Irradiance sensors drift and soil; a drift of the sensor appears as a change of the "
        "index. Methods that do not rely on the sensor are shown beside the main rate for this "
        "reason; where they disagree, the sensor or the model needs checking before any claim.",
        "The expected-power model (PVWatts, Sandia temperature model) uses the configured "
        "ratings and temperature coefficient; errors there scale the index but largely cancel "
        "in year-on-year rates.",
        "Intervals are two-sided at the stated confidence and assume the data are "
        "representative of the period; a short period (under about three years) gives wide "
        "intervals and rates that depend on the season of the start and end.",
        "Configuration (ratings, commissioning dates, warranty terms) is as typed by the "
        "operator; check it against the plant documentation and the contract.",
    ]
    out = [Paragraph("8. Limitations and cautions", st["h2"])]
    out += [Paragraph("• " + _esc(x), st["body"]) for x in items]
    out.append(Spacer(1, 4))
    out.append(_box(list(CAUTIONS), st, "Cautions"))
    return out


def _references_section(pack, st) -> list:
    out = [Paragraph("9. References", st["h2"])]
    out += [Paragraph(_esc(r), st["small"]) for r in REFERENCES]
    out += [Paragraph("10. Reproducing this pack", st["h2"]),
            Paragraph("Load the export files listed in data/source_files.csv (their SHA-256 "
                      "must match) with the configuration in data/site_config.toml, run "
                      "<font face='DejaVuSans'>heliaudit compute</font>, then:", st["body"]),
            Paragraph(f"<font size=8>{_esc(pack.command)}</font>", st["body"]),
            Paragraph("The same software version gives the same numbers and the same files in "
                      "data/ (compare the hashes in manifest.json); only the creation time on "
                      "this page and in the manifest change.", st["small"])]
    return out


def _sources_appendix(pack, st) -> list:
    src = pack.sources
    out = [PageBreak(), Paragraph("Appendix A. Source export files", st["h2"]),
           Paragraph(f"{len(src)} file(s) whose readings are in the store for the period, as "
                     "recorded by the ingest log when each file was loaded: name, rows loaded, "
                     "span of readings (UTC) and SHA-256 of the file's bytes. Anyone holding the "
                     "original exports can check them with any SHA-256 tool (e.g. sha256sum).",
                     st["small"])]
    rows = [["File", "Rows loaded", "First reading (UTC)", "Last reading (UTC)", "SHA-256"]]
    mono = ParagraphStyle("mono", fontName="DejaVuSansMono", fontSize=5.4, leading=7)

    def t(x) -> str:
        return str(x or "").replace("T", " ")[:16]
    for _, r in src.iterrows():
        rows.append([str(r["file_name"]), str(r["rows_loaded"]), t(r["ts_first_utc"]),
                     t(r["ts_last_utc"]), Paragraph(str(r["sha256"]), mono)])
    out.append(_table(rows, [3.2 * cm, 1.3 * cm, 2.45 * cm, 2.45 * cm, 7.6 * cm], st=st))
    if pack.results_sha256:
        out.append(Paragraph(f"This report was written from data/results.json with SHA-256 "
                             f"{pack.results_sha256}.", st["small"]))
    return out


def _numbered_canvas(footer: str):
    """A canvas class that prints the footer and "page n of N" on every page (N is known
    only after the last page, so pages are kept and drawn at the end)."""
    from reportlab.pdfgen.canvas import Canvas

    class NumberedCanvas(Canvas):
        def __init__(self, *args, **kwargs):
            super().__init__(*args, **kwargs)
            self._pages: list[dict] = []

        def showPage(self):  # noqa: N802 - reportlab's name
            self._pages.append(dict(self.__dict__))
            self._startPage()

        def save(self):
            n = len(self._pages)
            for state in self._pages:
                self.__dict__.update(state)
                self.saveState()
                self.setFont(FONT, 7)
                self.setFillColor(colors.HexColor("#666666"))
                self.drawString(2 * cm, 1.2 * cm, footer)
                self.drawRightString(A4[0] - 2 * cm, 1.2 * cm, f"page {self._pageNumber} of {n}")
                self.restoreState()
                super().showPage()
            super().save()

    return NumberedCanvas


def write_report(pack, path: os.PathLike) -> None:
    """Write the report PDF of ``pack`` (:class:`heliaudit.evidence.Pack`) to ``path``."""
    st = _styles()
    story = [*_title(pack, st), *_summary_section(pack, st), PageBreak(),
             *_system_section(pack, st), *_data_section(pack, st), PageBreak(),
             *_methods_section(pack, st), *_results_section(pack, st),
             *_shifts_section(pack, st), *_warranty_section(pack, st),
             *_limitations_section(pack, st), *_references_section(pack, st),
             *_sources_appendix(pack, st)]
    foot = (f"heliaudit evidence pack · {pack.site['site_id']} · {pack.period[0]} to "
            f"{pack.period[1]} · screening evidence, the contract governs")
    doc = SimpleDocTemplate(str(path), pagesize=A4, leftMargin=2 * cm, rightMargin=2 * cm,
                            topMargin=1.8 * cm, bottomMargin=1.8 * cm,
                            title=f"Degradation and warranty evidence: {pack.site['name']}",
                            author="heliaudit", subject="PV degradation and warranty evidence",
                            creator="heliaudit (reportlab)")
    doc.build(story, canvasmaker=_numbered_canvas(foot))
