"""Second invented demo site, "Fernhollow": several planes, a tracker, missing sensors (#11).

Seven small systems (6-13 kWp) at an invented location, two years, written by two loggers
into one monthly export. It exercises what a real plant has and the first demo site does
not:

* arrays on two fixed planes (30° south, 10° south-east) and on single-axis trackers
  (N-S axis, ±55°, backtracking, GCR 0.38), one inverter with two MPPT inputs on the two
  fixed planes;
* a POA pyranometer in the 30° plane, a reference cell on a tracker, and a horizontal
  pyranometer (GHI) as the only irradiance sensor of the 10° group and of one tracker;
* a back-of-module sensor on the 30° plane only (the other inverters need modelled cell
  temperature), ambient temperature and wind;
* one inverter whose AC rating and commissioning date the configuration does not know;
* 15-minute intervals for the first four months, 5-minute after;
* energy counters in whole kWh (coarse: a 1 kWh step is more than a 5-minute interval of
  a 5 kW inverter can deliver);
* two loggers in one export: logger LG2 (the tracker row) runs 60 minutes fast for three
  weeks, so its columns sit one hour late in those rows.

Physics as :mod:`heliaudit.demo_generator` (whose sky, weather and clear-sky functions it
reuses): Ineichen clear sky, stochastic clear-sky index, Hay & Davies (1980) transposition
(heliaudit itself transposes with Perez 1990, so the GHI-based sources carry a genuine model
difference), ASHRAE IAM, Sandia thermal model (King et al. 2004), PVWatts DC and inverter
(Dobos 2014); trackers by :func:`pvlib.tracking.singleaxis`. Deterministic for the seed.

Truth (``truth.json``): per inverter the IEC 61724-1 performance ratio computed from the
*true* plane-of-array irradiance of each array (capacity-weighted) and the true AC energy,
per year and over the 5-minute period; the interval change; counter resolution; the clock
error. The pipeline never reads it; the known-answer tests do.

Run: ``python -m heliaudit.demo_fernhollow [OUT_DIR]`` (default ``sample_scada/fernhollow``).
Nothing here describes a real plant, company or product.
"""

from __future__ import annotations

import datetime as dt
import json
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pvlib

from heliaudit import demo_generator as gen

GENERATOR_VERSION = "1.0"
SEED = 20311
SITE_ID = "fernhollow"
START = dt.date(2023, 1, 1)
END = dt.date(2025, 1, 1)  # first day not generated
CHANGE = dt.date(2023, 5, 1)  # 15-min logging before this local day, 5-min from it
CLOCK_ERROR = (dt.datetime(2024, 6, 3, 0, 0), dt.datetime(2024, 6, 24, 0, 0), 60)  # LG2 fast
TZ = "Europe/Paris"
LAT, LON, ALT, ALBEDO = 45.31, 5.12, 240.0, 0.20
DC_LOSS = 0.96  # wiring, mismatch, LID: the true DC derate (common practice for synthetic data)

PLANES = {  # id -> geometry (pvlib conventions)
    "roof30": {"kind": "fixed", "tilt_deg": 30.0, "azimuth_deg": 180.0},
    "shed10": {"kind": "fixed", "tilt_deg": 10.0, "azimuth_deg": 135.0},
    "trk": {"kind": "single_axis", "axis_tilt_deg": 0.0, "axis_azimuth_deg": 180.0,
            "max_angle_deg": 55.0, "backtrack": True, "gcr": 0.38},
}


@dataclass(frozen=True)
class System:
    id: str
    arrays: tuple[tuple[str, float], ...]  # (plane id, kWp)
    p_ac_max_kw: float  # true AC rating
    mounting: str
    logger: str
    config_ac_known: bool = True


SYSTEMS = (
    System("A1", (("roof30", 9.6),), 8.0, "close_mount_glass_glass", "LG1"),
    System("A2", (("roof30", 10.24),), 8.0, "close_mount_glass_glass", "LG1"),
    System("B1", (("shed10", 6.4),), 5.0, "open_rack_glass_polymer", "LG1"),
    System("B2", (("shed10", 7.2),), 6.0, "open_rack_glass_polymer", "LG1"),
    System("C1", (("trk", 12.8),), 10.0, "open_rack_glass_glass", "LG2"),
    System("C2", (("trk", 11.52),), 10.0, "open_rack_glass_glass", "LG2"),
    # two MPPT inputs on two planes; AC rating and commissioning date unknown to the config
    System("D1", (("roof30", 6.0), ("shed10", 4.0)), 10.0, "open_rack_glass_polymer", "LG1",
           config_ac_known=False),
)
GAMMA = -0.0037
ETA = 0.965


def _scenario() -> gen.Scenario:
    """A demo_generator Scenario carrying the location, period and seed (for its weather)."""
    return gen.Scenario(site_id=SITE_ID, name="Fernhollow Solar", owner="Ashgrove Parish Energy",
                        timezone=TZ, latitude_deg=LAT, longitude_deg=LON, altitude_m=ALT,
                        tilt_deg=30.0, azimuth_deg=180.0, albedo=ALBEDO, start=START, end=END,
                        interval_min=5, seed=SEED, inverters=())


def _plane_irradiance(sky: pd.DataFrame, wx: pd.DataFrame, plane: dict) -> pd.DataFrame:
    """POA global (pyranometer) and effective (behind glass) irradiance of one plane."""
    if plane["kind"] == "single_axis":
        tr = pvlib.tracking.singleaxis(sky["apparent_zenith"], sky["azimuth"],
                                       axis_tilt=plane["axis_tilt_deg"],
                                       axis_azimuth=plane["axis_azimuth_deg"],
                                       max_angle=plane["max_angle_deg"],
                                       backtrack=plane["backtrack"], gcr=plane["gcr"])
        tilt = tr["surface_tilt"].fillna(0.0).to_numpy()
        azim = tr["surface_azimuth"].fillna(plane["axis_azimuth_deg"]).to_numpy()
    else:
        tilt = np.full(len(sky), plane["tilt_deg"])
        azim = np.full(len(sky), plane["azimuth_deg"])
    poa = pvlib.irradiance.get_total_irradiance(
        tilt, azim, sky["zenith"].to_numpy(), sky["azimuth"].to_numpy(), wx["dni_wm2"].to_numpy(),
        wx["ghi_wm2"].to_numpy(), wx["dhi_wm2"].to_numpy(), dni_extra=sky["dni_extra"].to_numpy(),
        albedo=ALBEDO, model="haydavies", diffuse_components=True)
    aoi = pvlib.irradiance.aoi(tilt, azim, sky["zenith"].to_numpy(), sky["azimuth"].to_numpy())
    iam_b = np.where(aoi < 90, pvlib.iam.ashrae(np.minimum(aoi, 89.9), b=0.05), 0.0)
    # diffuse IAM at the mean tilt (Marion 2017), close enough for a tracker's moving plane
    iam_d = pvlib.iam.marion_diffuse("ashrae", float(np.mean(tilt[tilt > 0])) if (tilt > 0).any()
                                     else 0.0, b=0.05)
    direct = np.nan_to_num(np.asarray(poa["poa_direct"], dtype=float))
    sky_d = np.nan_to_num(np.asarray(poa["poa_sky_diffuse"], dtype=float))
    gnd_d = np.nan_to_num(np.asarray(poa["poa_ground_diffuse"], dtype=float))
    return pd.DataFrame({"poa": direct + sky_d + gnd_d,
                         "eff": direct * iam_b + sky_d * iam_d["sky"] + gnd_d * iam_d["ground"]},
                        index=sky.index)


def simulate() -> dict:
    """True and measured 5-minute series of the whole period (all systems and sensors)."""
    sc = _scenario()
    times = gen.interval_starts_utc(sc)
    sky = gen.sun_and_clearsky(sc, times)
    wx, _daily = gen.weather(sc, times, sky)
    rng = np.random.default_rng([SEED, 7])
    n = len(times)
    t_amb, wind = wx["t_amb_c"].to_numpy(), wx["wind_ms"].to_numpy()
    planes = {k: _plane_irradiance(sky, wx, p) for k, p in PLANES.items()}
    yrs = np.asarray((times - pd.Timestamp(START, tz=TZ)).total_seconds()) / (365.25 * 86400)
    p_ac, e_ref_true, e_ref_eff = {}, {}, {}
    t_mod_roof30 = None
    for s in SYSTEMS:
        p_dc = np.zeros(n)
        ref = np.zeros(n)
        ref_eff = np.zeros(n)
        for plane_id, kwp in s.arrays:
            g = planes[plane_id]
            prm = gen._sapm(s.mounting)
            t_mod = pvlib.temperature.sapm_module(g["poa"].to_numpy(), t_amb, wind, prm["a"], prm["b"])
            t_cell = pvlib.temperature.sapm_cell_from_module(t_mod, g["poa"].to_numpy(), prm["deltaT"])
            if plane_id == "roof30" and t_mod_roof30 is None:
                t_mod_roof30 = t_mod
            p_dc += np.asarray(pvlib.pvsystem.pvwatts_dc(g["eff"].to_numpy(), t_cell,
                                                         kwp * DC_LOSS, GAMMA), dtype=float)
            ref += kwp * g["poa"].to_numpy() / 1000.0  # IEC 61724-1 reference power [kW]
            ref_eff += kwp * g["eff"].to_numpy() / 1000.0  # as a reference cell would see it
        p_dc = np.clip(p_dc, 0.0, None) * (1.0 - 0.004 * yrs)  # -0.4 %/yr
        ac = pvlib.inverter.pvwatts(p_dc, s.p_ac_max_kw / ETA, eta_inv_nom=ETA)
        p_ac[s.id] = np.clip(np.nan_to_num(np.asarray(ac, dtype=float)), 0.0, None)
        e_ref_true[s.id] = ref
        e_ref_eff[s.id] = ref_eff
    meas = {
        "POA-30": planes["roof30"]["poa"].to_numpy() * (1 + 0.004 * rng.standard_normal(n)),
        "POA-TRK": planes["trk"]["eff"].to_numpy() * (1 + 0.003 * rng.standard_normal(n)),
        "GHI-1": wx["ghi_wm2"].to_numpy() * (1 + 0.004 * rng.standard_normal(n)),
        "TMOD-30": t_mod_roof30 + 0.25 * rng.standard_normal(n),
        "TAMB": t_amb + 0.1 * rng.standard_normal(n),
        "WIND": wind,
    }
    meas = {k: np.clip(v, 0.0, None) if k.startswith(("POA", "GHI")) else v for k, v in meas.items()}
    p_meas = {k: v * (1 + 0.002 * rng.standard_normal(n)) for k, v in p_ac.items()}
    return {"times": times, "p_ac_true": p_ac, "p_ac": p_meas, "e_ref_true": e_ref_true,
            "e_ref_eff": e_ref_eff,
            "meas": meas, "planes": planes}


def _columns() -> list[tuple[str, str, str, str, int, str]]:
    """(header, device, quantity, unit, decimals, logger) of the export, in order."""
    cols = []
    for s in SYSTEMS:
        cols.append((f"{s.logger}.{s.id}.Pac", s.id, "p_ac_kw", "W", 0, s.logger))
        cols.append((f"{s.logger}.{s.id}.Etot", s.id, "e_ac_total_kwh", "kWh", 0, s.logger))
    cols += [("LG1.POA-30", "POA-30", "poa_wm2", "W/m2", 0, "LG1"),
             ("LG1.GHI-1", "GHI-1", "ghi_wm2", "W/m2", 0, "LG1"),
             ("LG1.TMOD-30", "TMOD-30", "t_module_c", "C", 1, "LG1"),
             ("LG1.TAMB", "TAMB", "t_amb_c", "C", 1, "LG1"),
             ("LG1.WIND", "WIND", "wind_ms", "m/s", 1, "LG1"),
             ("LG2.POA-TRK", "POA-TRK", "poa_wm2", "W/m2", 0, "LG2")]
    return cols


def _export_frame(sim: dict) -> pd.DataFrame:
    """Rows as written: local end-of-interval labels, 15-min means before CHANGE, whole-kWh
    counters, LG2's columns shifted by its clock error."""
    times = sim["times"]
    k15 = np.asarray(times < pd.Timestamp(CHANGE, tz=TZ))
    vals: dict[str, np.ndarray] = {}
    e_cum = {}
    for s in SYSTEMS:
        vals[s.id + "p"] = sim["p_ac"][s.id]
        e_cum[s.id] = 1000.0 + np.cumsum(sim["p_ac_true"][s.id] * 5 / 60.0)  # kWh at interval end
    for k, v in sim["meas"].items():
        vals[k] = v
    df = pd.DataFrame(vals, index=times)
    for s in SYSTEMS:
        df[s.id + "e"] = np.floor(e_cum[s.id])  # whole kWh, truncated (coarse counter)
    # the first months: 15-minute means (counters: the reading at the 15-minute interval end)
    first = df[k15]
    g = np.arange(len(first)) // 3
    agg = first.groupby(g).mean()
    for s in SYSTEMS:
        agg[s.id + "e"] = first[s.id + "e"].groupby(g).last().to_numpy()
    agg.index = first.index[::3]
    step = np.r_[np.full(len(agg), 15), np.full(int((~k15).sum()), 5)]
    out = pd.concat([agg, df[~k15]])
    labels = (out.index + pd.to_timedelta(step, unit="min")).tz_convert(TZ)
    out.index = labels
    # logger LG2 60 min fast for three weeks: a row labelled L holds LG2's values of L - 60 min
    a, b, shift = CLOCK_ERROR
    lg2 = [c for c in out.columns if c.rstrip("pe") in ("C1", "C2") or c == "POA-TRK"]
    lab = out.index.tz_localize(None)
    in_err = (lab >= pd.Timestamp(a)) & (lab < pd.Timestamp(b))
    src = out[lg2].shift(shift // 5)  # 5-minute rows here (June 2024)
    out.loc[in_err, lg2] = src.loc[in_err, lg2].to_numpy()
    return out


def _fmt(x: np.ndarray, decimals: int) -> list[str]:
    x = np.round(np.asarray(x, float), decimals) + 0.0  # no "-0.0"
    return [("" if v != v else f"{v:.{decimals}f}") for v in x.tolist()]


def write(out_dir: str | Path = "sample_scada/fernhollow") -> dict:
    """Generate and write exports, configuration and truth; returns the truth dict."""
    out = Path(out_dir)
    (out / "exports").mkdir(parents=True, exist_ok=True)
    sim = simulate()
    rows = _export_frame(sim)
    cols = _columns()
    keys = {"p_ac_kw": "p", "e_ac_total_kwh": "e"}
    texts = []
    for _head, dev, q, _unit, dec, _lg in cols:
        v = rows[dev + keys[q]] if q in keys else rows[dev]
        if q == "p_ac_kw":
            v = v * 1000.0  # written in W
        texts.append(_fmt(v.to_numpy(), dec))
    labels = rows.index.strftime("%Y-%m-%d %H:%M").to_numpy()
    # a file per month of interval starts (its last row is labelled 00:00 of the next month)
    months = (rows.index - pd.Timedelta(minutes=1)).strftime("%Y-%m").to_numpy()
    header = ",".join(["time"] + [c[0] for c in cols])
    units = ",".join([""] + [c[3] for c in cols])
    files = []
    for m in sorted(set(months.tolist())):
        sel = np.flatnonzero(months == m)
        body = [",".join([labels[i]] + [t[i] for t in texts]) for i in sel]
        text = "\n".join([header, units, *body]) + "\n"
        name = f"exports/fernhollow_{m}.csv.gz"
        (out / name).write_bytes(gen._gz_bytes(text, encoding="utf-8", level=9))
        files.append(name)
    (out / "fernhollow.toml").write_text(config_toml(), encoding="utf-8")
    truth = truth_dict(sim)
    (out / "truth.json").write_text(json.dumps(truth, indent=1, sort_keys=True) + "\n",
                                    encoding="utf-8")
    return truth


def truth_dict(sim: dict) -> dict:
    """Per-system IEC 61724-1 PR from true POA (capacity-weighted) and true AC energy."""
    times = sim["times"]
    std = times + pd.Timedelta(hours=1)  # Europe/Paris standard time is UTC+1
    local_std_year = std.year
    month = std.strftime("%Y-%m").to_numpy()
    after = np.asarray(times >= pd.Timestamp(CHANGE, tz=TZ))
    systems = {}
    for s in SYSTEMS:
        e = sim["p_ac_true"][s.id] * 5 / 60.0
        ref = sim["e_ref_true"][s.id] * 5 / 60.0
        by_year = {str(y): round(float(e[local_std_year == y].sum() / ref[local_std_year == y].sum()), 5)
                   for y in sorted(set(local_std_year.tolist()))}
        ref_eff = sim["e_ref_eff"][s.id] * 5 / 60.0
        by_month = {m: round(float(e[month == m].sum() / ref[month == m].sum()), 5)
                    for m in sorted(set(month.tolist()))}
        by_month_eff = {m: round(float(e[month == m].sum() / ref_eff[month == m].sum()), 5)
                        for m in sorted(set(month.tolist()))}
        systems[s.id] = {
            "pr_by_month": by_month, "pr_by_month_effective_irradiance": by_month_eff,
            "pr_5min_period_effective_irradiance": round(float(e[after].sum() / ref_eff[after].sum()), 5),
            "arrays": [{"plane": p, "p_dc_kwp": k} for p, k in s.arrays],
            "p_ac_max_kw_true": s.p_ac_max_kw, "logger": s.logger,
            "pr_by_year": by_year,
            "pr_5min_period": round(float(e[after].sum() / ref[after].sum()), 5),
            "e_ac_kwh_5min_period": round(float(e[after].sum()), 1),
            "rd_pct_per_yr": -0.4,
        }
    a, b, shift = CLOCK_ERROR
    return {
        "generator": f"heliaudit.demo_fernhollow {GENERATOR_VERSION}", "seed": SEED,
        "site_id": SITE_ID, "planes": PLANES, "systems": systems,
        "interval_change": {"before_min": 15, "after_min": 5, "from_local_day": CHANGE.isoformat()},
        "counters": {"resolution_kwh": 1.0, "note": "whole kWh, truncated; a 1 kWh step exceeds "
                     "1.5 x rating x 5 min for every system (5-10 kW)"},
        "clock_errors": [{"logger": "LG2", "devices": ["C1", "C2", "POA-TRK"],
                          "columns": [c[0] for c in _columns() if c[5] == "LG2"],
                          "written_start_local": a.isoformat(), "written_end_local": b.isoformat(),
                          "logger_fast_minutes": shift, "shift_minutes_to_correct": -shift}],
        "sensors": {"POA-30": "thermopile pyranometer, roof30 plane, POA global",
                    "POA-TRK": "reference cell on tracker trk (sees IAM-reduced irradiance)",
                    "GHI-1": "thermopile pyranometer, horizontal",
                    "TMOD-30": "back of module, roof30 (A1's modules)"},
        "pr_definition": "IEC 61724-1: sum(E_ac) / sum(P0_j * G_poa,j * tau / 1000) over all "
                         "intervals, G_poa the true plane-of-array global irradiance of each "
                         "array (what a thermopile in the plane reads); months and years in "
                         "local standard time; *_effective_irradiance: with the irradiance "
                         "behind glass (ASHRAE IAM, b0 = 0.05), what a reference cell reads",
    }


def config_toml() -> str:
    """The site configuration of the demo (heliaudit format 1, site model of issue #11)."""
    inv = []
    for s in SYSTEMS:
        lines = ['[[inverters]]', f'id = "{s.id}"', f'gamma_pmp_per_c = {GAMMA}',
                 f'mounting = "{s.mounting}"', f'eta_inv_nom = {ETA}',
                 't_amb_sensor = "TAMB"', 'wind_sensor = "WIND"']
        if s.config_ac_known:
            lines += [f"p_ac_max_kw = {s.p_ac_max_kw}", "commissioned = 2022-12-20"]
        else:
            lines.insert(1, "# AC rating and commissioning date not on record (see docs/config.md)")
        if s.id.startswith("A"):
            lines += ['plane = "roof30"', f"p_dc_kwp = {s.arrays[0][1]}", 'poa_sensor = "POA-30"',
                      'peer_group = "roof30"']
            if s.id == "A1":
                lines.append('t_module_sensor = "TMOD-30"')
        elif s.id.startswith("B"):
            lines += ['plane = "shed10"', f"p_dc_kwp = {s.arrays[0][1]}", 'ghi_sensor = "GHI-1"',
                      'peer_group = "shed10"']
        elif s.id == "C1":
            lines += ['plane = "trk"', f"p_dc_kwp = {s.arrays[0][1]}", 'poa_sensor = "POA-TRK"',
                      'peer_group = "trk"']
        elif s.id == "C2":
            lines += ['plane = "trk"', f"p_dc_kwp = {s.arrays[0][1]}", 'ghi_sensor = "GHI-1"',
                      'peer_group = "trk"']
        else:
            lines += ['poa_sensor = "POA-30"', 'ghi_sensor = "GHI-1"', 'peer_group = "mixed"']
            for k, (p, kwp) in enumerate(s.arrays):
                lines += ["", "[[inverters.arrays]]", f'id = "mppt{k + 1}"', f"p_dc_kwp = {kwp}",
                          f'plane = "{p}"']
        inv.append("\n".join(lines))
    a, b, shift = CLOCK_ERROR
    cols = "\n\n".join(
        f'[[sources.columns]]\nheader = "{h}"\ndevice = "{d}"\nquantity = "{q}"\nunit = "{u}"'
        for h, d, q, u, _dec, _lg in _columns())
    return f'''# Site configuration of the INVENTED demo plant "Fernhollow Solar" (heliaudit format 1).
# Generated by heliaudit/demo_fernhollow.py (generator {GENERATOR_VERSION}, seed {SEED}).
# Nothing here describes a real plant, company or product. Hidden truths: truth.json.
format_version = 1

[site]
id = "{SITE_ID}"
name = "Fernhollow Solar"
owner = "Ashgrove Parish Energy"
timezone = "{TZ}"
latitude_deg = {LAT}
longitude_deg = {LON}
altitude_m = {ALT}
tilt_deg = 30.0              # the default plane of inverters and POA sensors without their own
azimuth_deg = 180.0
albedo = {ALBEDO}

# ---------------------------------------------------------------- planes
[[planes]]
id = "roof30"                # barn roof, 30° facing south
tilt_deg = 30.0
azimuth_deg = 180.0

[[planes]]
id = "shed10"                # low shed roof, 10° facing south-east
tilt_deg = 10.0
azimuth_deg = 135.0

[[planes]]
id = "trk"                   # single-axis trackers, north-south axis
kind = "single_axis"
axis_tilt_deg = 0.0
axis_azimuth_deg = 180.0
max_angle_deg = 55.0
backtrack = true
gcr = 0.38

# ---------------------------------------------------------------- sensors
[[sensors]]
id = "POA-30"
quantity = "poa_wm2"
instrument = "thermopile_pyranometer"
plane = "roof30"
notes = "pyranometer in the roof30 plane"

[[sensors]]
id = "POA-TRK"
quantity = "poa_wm2"
instrument = "reference_cell"
plane = "trk"
notes = "c-Si reference cell on tracker C1's torque tube"

[[sensors]]
id = "GHI-1"
quantity = "ghi_wm2"
instrument = "thermopile_pyranometer"
notes = "horizontal pyranometer on the weather mast: the only irradiance sensor of shed10"

[[sensors]]
id = "TMOD-30"
quantity = "t_module_c"
notes = "back-of-module Pt1000 on A1; the other systems have no module sensor"

[[sensors]]
id = "TAMB"
quantity = "t_amb_c"

[[sensors]]
id = "WIND"
quantity = "wind_ms"
notes = "cup anemometer at 10 m"

# ---------------------------------------------------------------- inverters
{chr(10).join(x + chr(10) for x in inv)}
# ---------------------------------------------------------------- exports
# One gzip CSV per month from two loggers merged by the data manager (LG1: roof, shed and
# weather mast; LG2: trackers). Local time with DST, stamped at the END of each interval:
# 15 minutes until April 2023, 5 minutes from May 2023. Counters in whole kWh.
# LG2's clock ran 60 minutes fast for three weeks in June 2024 (truth.json, clock_errors):
# corrected below for LG2's devices only (LG1's columns in the same rows are right).
[[sources]]
name = "loggers"
pattern = "exports/fernhollow_*.csv.gz"
layout = "wide"
unit_row = true

[sources.timestamp]
column = "time"
format = "%Y-%m-%d %H:%M"
zone = "local"
label = "end"
ambiguous = "infer"

{cols}

[[sources.clock_corrections]]
start = {a.isoformat()}            # in the export's own (LG2-shifted) time, inclusive
end = {(b - dt.timedelta(seconds=1)).isoformat()}
shift_minutes = {-shift}
devices = ["C1", "C2", "POA-TRK"]
note = "logger LG2 (trackers) ran {shift} min fast after a GPS outage"
'''


if __name__ == "__main__":  # pragma: no cover
    t = write(sys.argv[1] if len(sys.argv) > 1 else "sample_scada/fernhollow")
    print(json.dumps({k: v["pr_5min_period"] for k, v in t["systems"].items()}))
