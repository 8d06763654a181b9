"""Physics-based generator of the invented demo plant and of larger synthetic fleets.

One generator makes both the bundled demo site (``sample_scada/quillpond/``: logger exports,
site configuration, truth file) and, on demand, larger fleets for benchmarks. Everything is
deterministic for a given seed; the truth file lists every effect injected into the data, so
the test suite can check that heliaudit finds what was put in.

The chain, per 15-minute (or 5-minute) interval, evaluated at the interval midpoint:

1. **Sun.** Solar position by the NREL SPA (Reda & Andreas 2004) via
   :func:`pvlib.solarposition.get_solarposition`.
2. **Clear sky.** Ineichen & Perez (2002) clear-sky GHI/DNI/DHI with the monthly Linke
   turbidity climatology (Remund et al. 2003) via :meth:`pvlib.location.Location.get_clearsky`.
3. **Clouds.** A clear-sky index ``kc = GHI/GHI_clear``: a Markov chain of day types
   (clear / partly cloudy / overcast) with monthly climatological probabilities and
   day-to-day persistence, and within the day a first-order autoregressive (AR(1)) latent
   cloud field (cloud passages on partly cloudy days, slow variation on overcast days).
   ``kc`` is bounded to 0.05…1.10 (cloud enhancement is modest in 15-minute means).
4. **Beam/diffuse split.** The clear-sky components are scaled by the cloud index: beam
   ``DNI = kb · DNI_clear`` with ``kb = ((kc − 0.3)/0.7)^1.5`` clipped to 0…1, and diffuse
   the remainder ``DHI = kc · GHI_clear − DNI cos z`` (a simplification, common practice for
   synthetic data; with ``kc = 1`` it returns the Ineichen components exactly).
5. **Plane of array.** Hay & Davies (1980) sky-diffuse transposition with isotropic ground
   reflection via :func:`pvlib.irradiance.get_total_irradiance` (``model='haydavies'``).
6. **Angle of incidence.** ASHRAE incidence-angle modifier ``1 − b0 (1/cos θ − 1)``,
   ``b0 = 0.05`` (:func:`pvlib.iam.ashrae`) on the beam, and its hemispherical integral for
   sky and ground diffuse (Marion 2017, :func:`pvlib.iam.marion_diffuse`). The modules and
   the c-Si reference cell see this *effective* irradiance (both behind glass); the
   thermopile pyranometer is cosine-corrected and reads the plain POA global.
7. **Weather.** Ambient temperature = seasonal + diurnal (amplitude by day type) + AR(1)
   day-to-day anomaly; wind speed log-normal by day with an afternoon maximum; rain events
   on cloudy days, frequent in spring/autumn and rare in summer, quantised to 0.2 mm
   (tipping bucket).
8. **Temperature.** Back-of-module and cell temperature by the Sandia model, King et al.
   2004 (SAND2004-3535) Eq. 11–12, :func:`pvlib.temperature.sapm_module` and
   :func:`pvlib.temperature.sapm_cell_from_module`, per inverter mounting type.
9. **DC power.** PVWatts linear irradiance–temperature model, Dobos 2014 (NREL/TP-6A20-62641),
   :func:`pvlib.pvsystem.pvwatts_dc`, on effective irradiance times the soiling ratio, with
   each inverter's own ``p_dc_kwp`` (times its actual-to-nameplate factor), ``gamma_pmp_per_c``,
   a fixed DC loss, linear degradation from commissioning, and fault factors.
10. **AC power.** PVWatts inverter efficiency curve, Dobos 2014, :func:`pvlib.inverter.pvwatts`
    with ``pdc0 = p_ac_max_kw / eta_inv_nom``, which clips at ``p_ac_max_kw``.
11. **Measurement.** Small multiplicative noise on power and irradiance, additive noise on
    temperatures, a small negative night offset on the thermopile (thermal offset), a
    cumulative AC energy counter per inverter (integer kWh, truncated).

Injected truths (all written to ``truth.json``): per-inverter degradation, soiling with rain
and scheduled cleanings, a string failure, outages, pyranometer drift, a flat-lining
temperature sensor, a month with the logger clock one hour late, logger gaps, and a few
corrupted lines. Nothing here is a real plant, company or product.

Pure generation functions come first; :func:`write_site` is the only function that writes files.
"""

from __future__ import annotations

import datetime as dt
import gzip
import hashlib
import io
import json
import time
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd
import pvlib
from scipy.signal import lfilter
from scipy.special import ndtri

GENERATOR_VERSION = "1.0"

#: Monthly climatological probabilities of (clear, partly cloudy, overcast) days for the
#: invented semi-arid inland plateau (invented, tuned so that annual GHI is ~1800 kWh/m²,
#: plausible for central Spain; common practice for synthetic weather).
DAY_TYPE_PROBS = np.array([
    [0.45, 0.30, 0.25], [0.46, 0.32, 0.22], [0.45, 0.35, 0.20], [0.40, 0.38, 0.22],
    [0.50, 0.36, 0.14], [0.68, 0.27, 0.05], [0.82, 0.16, 0.02], [0.78, 0.19, 0.03],
    [0.60, 0.30, 0.10], [0.45, 0.33, 0.22], [0.40, 0.32, 0.28], [0.38, 0.30, 0.32],
])
DAY_TYPES = ("clear", "partly", "overcast")
#: Probability that tomorrow keeps today's sky type before a fresh climatological draw.
DAY_TYPE_PERSISTENCE = 0.55
#: Monthly factor on the rain probability of cloudy days (wet spring/autumn, dry summer).
RAIN_SEASON = np.array([0.8, 0.8, 0.9, 1.0, 1.0, 0.5, 0.15, 0.2, 0.7, 1.0, 1.0, 0.85])
#: DC losses other than soiling and degradation (wiring, mismatch, nameplate) as a factor.
DC_LOSS_FACTOR = 0.965
RAIN_FULL_CLEAN_MM = 5.0
RAIN_PARTIAL_CLEAN_MM = 2.0
PARTIAL_CLEAN_KEEP = 0.5  # share of the soiling loss left after a partial (2-5 mm) rain


# ---------------------------------------------------------------------- scenario


@dataclass(frozen=True)
class InverterSpec:
    """One inverter of the scenario: configured values and its hidden truth."""

    id: str
    p_dc_kwp: float
    p_ac_max_kw: float
    gamma_pmp_per_c: float
    mounting: str
    eta_inv_nom: float
    poa_sensor: str
    t_module_sensor: str
    commissioned: dt.date
    rd_pct_per_yr: float  # truth: linear degradation from commissioning (negative = loss)
    p_dc_actual_factor: float  # truth: actual array DC power / nameplate (module tolerance)
    soiling_multiplier: float  # truth: this array's soiling loss / the site base loss
    e_total_start_kwh: int  # counter reading at the start of the data


@dataclass(frozen=True)
class Outage:
    inverters: tuple[str, ...]
    start_local: dt.datetime  # wall-clock, site zone; interval starts in [start, end) are off
    end_local: dt.datetime
    kind: str  # whole_day | partial_day
    note: str


@dataclass(frozen=True)
class Corruption:
    kind: str  # non_numeric | truncated | bad_timestamp | duplicated
    label_local: dt.datetime  # the written (logger) timestamp of the affected line
    column: str | None = None  # header of the damaged column (non_numeric)
    text: str = ""  # the bad value, or the bad timestamp text


@dataclass(frozen=True)
class Scenario:
    """Everything the generator needs; :func:`quillpond_scenario` builds the demo."""

    site_id: str
    name: str
    owner: str
    timezone: str
    latitude_deg: float
    longitude_deg: float
    altitude_m: float
    tilt_deg: float
    azimuth_deg: float
    albedo: float
    start: dt.date  # first local day
    end: dt.date  # first local day NOT generated
    interval_min: int
    seed: int
    inverters: tuple[InverterSpec, ...]
    string_failure: tuple[str, dt.datetime, float] | None = None  # inverter, from (local), DC loss
    outages: tuple[Outage, ...] = ()
    py_drift: tuple[str, dt.date, float] | None = None  # sensor, start, %/yr (negative = low)
    flatline: tuple[str, dt.datetime, dt.datetime] | None = None  # sensor, start, end (local)
    clock_shift: tuple[dt.datetime, dt.datetime, int] | None = None  # true local start, end, minutes
    gaps: tuple[tuple[dt.datetime, dt.datetime], ...] = ()  # logger down, local [start, end)
    corruptions: tuple[Corruption, ...] = ()
    scheduled_cleanings: tuple[dt.date, ...] = ()
    soiling_rate_winter_pct_per_day: float = -0.04
    soiling_rate_summer_pct_per_day: float = -0.13
    sensor_ids: dict[str, str] = field(default_factory=lambda: {
        "poa_rc": "POA-RC1", "poa_py": "POA-PY2", "tmod_a": "TMOD-A", "tmod_b": "TMOD-B",
        "tamb": "TAMB", "wind": "WIND", "rain": "RAIN"})

    @property
    def interval_h(self) -> float:
        return self.interval_min / 60.0


def _dt(s: str) -> dt.datetime:
    return dt.datetime.fromisoformat(s)


def _add_months(d: dt.date, months: int) -> dt.date:
    y, m = divmod(d.month - 1 + months, 12)
    return dt.date(d.year + y, m + 1, 1)


def quillpond_scenario(n_inverters: int = 14, start: dt.date = dt.date(2022, 1, 1),
                       months: int = 42, interval_min: int = 15, seed: int = 20221,
                       site_id: str = "quillpond") -> Scenario:
    """The invented demo plant "Quillpond Solar" (or a larger fleet built the same way).

    With the defaults: 14 string inverters (330-380 kWp DC, 300 kW AC each, ~5 MWdc) on a
    fixed 25° south-facing rack at 38.90° N, 3.20° W, 650 m, Europe/Madrid, from 2022-01-01
    to 2025-06-30 at 15 minutes. The first half of the inverters uses reference cell POA-RC1
    and module sensor TMOD-A (glass/polymer modules, open rack), the second half the
    pyranometer POA-PY2 and TMOD-B (glass/glass modules, open rack). Event dates that fall
    outside ``start .. start + months`` or name an inverter that does not exist are dropped.
    """
    if n_inverters < 1:
        raise ValueError(f"n_inverters must be >= 1, got {n_inverters}")
    if interval_min not in (1, 5, 10, 15, 30, 60):
        raise ValueError(f"interval_min must be one of 1, 5, 10, 15, 30, 60; got {interval_min}")
    rng = np.random.default_rng([seed, 1])  # inverter parameters, independent of weather draws
    half = (n_inverters + 1) // 2
    width = max(2, len(str(n_inverters)))

    def name(k: int) -> str:  # inverter number k (1-based) -> id: INV-05, or INV-005 in big fleets
        return f"INV-{k:0{width}d}"

    invs = []
    for k in range(n_inverters):
        block_a = k < half
        p_dc = float(np.round(330 + 50 * rng.random(), 1))  # 330..380 kWp, ratio 1.10..1.27
        invs.append(InverterSpec(
            id=name(k + 1),
            p_dc_kwp=p_dc, p_ac_max_kw=300.0,
            gamma_pmp_per_c=-0.0037 if block_a else -0.0030,
            mounting="open_rack_glass_polymer" if block_a else "open_rack_glass_glass",
            eta_inv_nom=0.97, poa_sensor="POA-RC1" if block_a else "POA-PY2",
            t_module_sensor="TMOD-A" if block_a else "TMOD-B",
            commissioned=dt.date(2021, 12, 15),
            rd_pct_per_yr=float(np.round(-0.3 - 0.7 * rng.random(), 2)),
            p_dc_actual_factor=float(np.round(0.99 + 0.03 * rng.random(), 4)),
            soiling_multiplier=float(np.round(0.8 + 0.4 * rng.random(), 3)),
            e_total_start_kwh=int(rng.integers(500, 9000)),
        ))
    end = _add_months(start, months)
    ids = {i.id for i in invs}
    t0, t1 = dt.datetime.combine(start, dt.time()), dt.datetime.combine(end, dt.time())

    def inside(a: dt.datetime, b: dt.datetime | None = None) -> bool:
        return t0 <= a and (b or a) < t1

    outages = [
        Outage((name(3),), _dt("2022-08-09 00:00"), _dt("2022-08-10 00:00"), "whole_day",
               "inverter tripped on an insulation fault; reset next morning"),
        Outage((name(12),), _dt("2022-11-14 09:00"), _dt("2022-11-14 12:30"), "partial_day",
               "AC breaker tripped; reset by the site technician"),
        Outage((name(11),), _dt("2023-03-02 00:00"), _dt("2023-03-05 00:00"), "whole_day",
               "three days off: power module replaced"),
        Outage(tuple(i.id for i in invs), _dt("2024-07-29 13:00"), _dt("2024-07-29 14:30"),
               "partial_day", "grid outage: every inverter off (utility feeder trip)"),
        Outage((name(9),), _dt("2024-05-21 11:15"), _dt("2024-05-21 15:45"), "partial_day",
               "over-temperature derate to zero; fan replaced"),
        Outage((name(1),), _dt("2025-04-16 07:30"), _dt("2025-04-16 10:00"), "partial_day",
               "firmware update"),
    ]
    outages = [replace(o, inverters=tuple(i for i in o.inverters if i in ids)) for o in outages]
    outages = [o for o in outages if o.inverters and inside(o.start_local, o.end_local)]
    corruptions = [
        Corruption("non_numeric", _dt("2022-05-17 13:00"), f"{name(2)} Pac", "ERR"),
        Corruption("truncated", _dt("2023-04-11 12:15")),
        Corruption("non_numeric", _dt("2023-10-05 14:45"), "POA-RC1 Irradiance", "#VALUE!"),
        Corruption("bad_timestamp", _dt("2024-08-21 11:30"), None, "32.08.2024 11:30"),
        Corruption("duplicated", _dt("2025-01-09 12:00")),
    ]
    corruptions = [c for c in corruptions if inside(c.label_local)
                   and (c.column is None or c.column.split(" ")[0] in ids | {"POA-RC1"})]
    sf = (name(5), _dt("2023-09-12 10:30"), 0.06)
    flat = ("TMOD-B", _dt("2024-04-08 12:00"), _dt("2024-05-06 09:00"))
    clock = (_dt("2024-02-01 00:00"), _dt("2024-03-01 00:00"), 60)
    gaps = [(_dt("2022-06-14 10:00"), _dt("2022-06-14 16:30")),
            (_dt("2023-01-23 00:00"), _dt("2023-01-26 00:00")),
            (_dt("2024-10-07 14:00"), _dt("2024-10-08 09:00")),
            (_dt("2025-02-03 06:00"), _dt("2025-02-03 08:00"))]
    drift = ("POA-PY2", dt.date(2023, 7, 1), -0.8)
    return Scenario(
        site_id=site_id, name="Quillpond Solar", owner="Brackenmoor Energy Cooperative",
        timezone="Europe/Madrid", latitude_deg=38.90, longitude_deg=-3.20, altitude_m=650.0,
        tilt_deg=25.0, azimuth_deg=180.0, albedo=0.22,
        start=start, end=end, interval_min=interval_min, seed=seed, inverters=tuple(invs),
        string_failure=sf if sf[0] in ids and inside(sf[1]) else None,
        outages=tuple(outages),
        py_drift=drift if dt.datetime.combine(drift[1], dt.time()) < t1 else None,
        flatline=flat if inside(flat[1], flat[2]) else None,
        clock_shift=clock if inside(clock[0], clock[1]) else None,
        gaps=tuple(g for g in gaps if inside(*g)),
        corruptions=tuple(corruptions),
        scheduled_cleanings=tuple(d for d in (dt.date(2024, 7, 16),) if start <= d < end),
    )


# ---------------------------------------------------------------------- time axis


def interval_starts_utc(sc: Scenario) -> pd.DatetimeIndex:
    """UTC interval starts covering local days ``sc.start`` .. ``sc.end`` (exclusive)."""
    t0 = pd.Timestamp(sc.start).tz_localize(sc.timezone)
    t1 = pd.Timestamp(sc.end).tz_localize(sc.timezone)
    return pd.date_range(t0.tz_convert("UTC"), t1.tz_convert("UTC"),
                         freq=f"{sc.interval_min}min", inclusive="left", name="ts_utc")


def _std_offset(tz: str) -> pd.Timedelta:
    """The zone's standard-time UTC offset (January offset on the northern hemisphere)."""
    jan = pd.Timestamp("2001-01-15", tz=tz).utcoffset()
    jul = pd.Timestamp("2001-07-15", tz=tz).utcoffset()
    return min(jan, jul)


def _local_to_utc(sc: Scenario, t: dt.datetime) -> pd.Timestamp:
    return pd.Timestamp(t).tz_localize(sc.timezone, ambiguous=True,
                                       nonexistent="shift_forward").tz_convert("UTC")


def _mask_between(times: pd.DatetimeIndex, sc: Scenario, a: dt.datetime, b: dt.datetime) -> np.ndarray:
    return np.asarray((times >= _local_to_utc(sc, a)) & (times < _local_to_utc(sc, b)))


# ---------------------------------------------------------------------- sun and sky


def sun_and_clearsky(sc: Scenario, times: pd.DatetimeIndex) -> pd.DataFrame:
    """Solar position and Ineichen clear-sky irradiance at the interval midpoints.

    NREL SPA (Reda & Andreas 2004) and Ineichen & Perez (2002) with the Linke turbidity
    climatology, both via pvlib. Returns columns ``zenith, apparent_zenith, azimuth,
    ghi_cs, dni_cs, dhi_cs, dni_extra`` indexed like ``times`` (interval starts).
    """
    mid = times + pd.Timedelta(minutes=sc.interval_min / 2)
    loc = pvlib.location.Location(sc.latitude_deg, sc.longitude_deg, "UTC", sc.altitude_m)
    sp = pvlib.solarposition.get_solarposition(mid, sc.latitude_deg, sc.longitude_deg,
                                               sc.altitude_m)
    cs = loc.get_clearsky(mid, model="ineichen", solar_position=sp)
    out = pd.DataFrame({
        "zenith": sp["zenith"].to_numpy(), "apparent_zenith": sp["apparent_zenith"].to_numpy(),
        "azimuth": sp["azimuth"].to_numpy(),
        "ghi_cs": cs["ghi"].to_numpy(), "dni_cs": cs["dni"].to_numpy(), "dhi_cs": cs["dhi"].to_numpy(),
        "dni_extra": pvlib.irradiance.get_extra_radiation(mid).to_numpy(),
    }, index=times)
    return out


def irradiance_from_kc(sky: pd.DataFrame, kc: np.ndarray, tilt_deg: float, azimuth_deg: float,
                       albedo: float, iam_b0: float = 0.05) -> pd.DataFrame:
    """Horizontal, plane-of-array and effective irradiance for a clear-sky index ``kc``.

    Beam/diffuse by scaling the clear-sky components (module docstring, step 4); POA by
    Hay & Davies (1980) via :func:`pvlib.irradiance.get_total_irradiance`; effective
    irradiance with the ASHRAE IAM (b0 = 0.05, :func:`pvlib.iam.ashrae`) on beam and its
    diffuse integrals (Marion 2017, :func:`pvlib.iam.marion_diffuse`).

    Returns columns ``ghi_wm2, dni_wm2, dhi_wm2, poa_wm2`` (POA global, what a cosine-corrected
    pyranometer sees), ``poa_eff_wm2`` (what a glass-covered cell or module sees) and ``aoi_deg``.
    """
    kc = np.asarray(kc, dtype=float)
    # apparent (refracted) zenith, as pvlib's Ineichen uses to close GHI = DNI cos z + DHI
    cosz = np.clip(np.cos(np.radians(sky["apparent_zenith"].to_numpy())), 0.0, None)
    kb = np.clip((kc - 0.3) / 0.7, 0.0, 1.0) ** 1.5
    ghi = kc * sky["ghi_cs"].to_numpy()
    dni = kb * sky["dni_cs"].to_numpy()
    dhi = np.clip(ghi - dni * cosz, 0.0, None)
    poa = pvlib.irradiance.get_total_irradiance(
        tilt_deg, azimuth_deg, sky["zenith"].to_numpy(), sky["azimuth"].to_numpy(),
        dni, ghi, dhi, dni_extra=sky["dni_extra"].to_numpy(), albedo=albedo,
        model="haydavies", diffuse_components=True)
    aoi = pvlib.irradiance.aoi(tilt_deg, azimuth_deg, sky["zenith"].to_numpy(),
                               sky["azimuth"].to_numpy())
    iam_beam = np.where(aoi < 90, pvlib.iam.ashrae(np.minimum(aoi, 89.9), b=iam_b0), 0.0)
    iam_d = pvlib.iam.marion_diffuse("ashrae", tilt_deg, b=iam_b0)
    direct = np.nan_to_num(np.asarray(poa["poa_direct"], dtype=float))
    sky_d = np.nan_to_num(np.asarray(poa["poa_sky_diffuse"], dtype=float))
    gnd_d = np.nan_to_num(np.asarray(poa["poa_ground_diffuse"], dtype=float))
    eff = direct * iam_beam + sky_d * iam_d["sky"] + gnd_d * iam_d["ground"]
    return pd.DataFrame({"ghi_wm2": ghi, "dni_wm2": dni, "dhi_wm2": dhi,
                         "poa_wm2": direct + sky_d + gnd_d, "poa_eff_wm2": eff,
                         "aoi_deg": aoi}, index=sky.index)


def day_types(days: pd.DatetimeIndex, rng: np.random.Generator) -> np.ndarray:
    """Markov chain of sky day types (0 clear, 1 partly, 2 overcast) with monthly climatology.

    Each day keeps yesterday's type with probability ``DAY_TYPE_PERSISTENCE``, otherwise it
    draws from that month's ``DAY_TYPE_PROBS``; the stationary distribution of each month is
    therefore its climatology, and sky states persist over a few days (common practice).
    """
    months = np.asarray(days.month) - 1
    u_stay, u_draw = rng.random(len(days)), rng.random(len(days))
    cum = np.cumsum(DAY_TYPE_PROBS, axis=1)[months]
    fresh = (u_draw[:, None] > cum).sum(axis=1).clip(0, 2)
    out = np.empty(len(days), dtype=np.int8)
    prev = fresh[0]
    for d in range(len(days)):  # one cheap step per day
        prev = prev if (d > 0 and u_stay[d] < DAY_TYPE_PERSISTENCE) else fresh[d]
        out[d] = prev
    return out


def _ar1(n: int, phi: float, rng: np.random.Generator) -> np.ndarray:
    """Unit-variance AR(1) series x_t = phi x_{t-1} + sqrt(1-phi²) e_t (vectorised by lfilter)."""
    e = rng.standard_normal(n) * np.sqrt(1 - phi * phi)
    return lfilter([1.0], [1.0, -phi], e)


def clear_sky_index(day_idx: np.ndarray, types: np.ndarray, interval_min: int,
                    rng: np.random.Generator) -> np.ndarray:
    """Stochastic clear-sky index per interval, bounded to 0.05…1.10.

    clear: a daily turbidity level N(0.99, 0.015) ≤ 1.02 with tiny noise; partly cloudy: an
    AR(1) latent field (1.5 h correlation time) thresholded at the day's cloud fraction
    (U(0.15, 0.75)), smooth cloud edges, cloud transmission ~0.35, a mild edge enhancement;
    overcast: level N(0.30, 0.08) with slow AR(1) variation (common practice).
    """
    n_days = types.size
    tau_h = interval_min / 60.0
    z = _ar1(day_idx.size, float(np.exp(-tau_h / 1.5)), rng)
    slow = _ar1(day_idx.size, float(np.exp(-tau_h / 3.0)), rng)
    white = rng.standard_normal(day_idx.size)
    lvl_clear = np.minimum(rng.normal(0.99, 0.015, n_days), 1.02)
    frac = rng.uniform(0.15, 0.75, n_days)
    lvl_cloud = rng.uniform(0.25, 0.50, n_days)
    lvl_over = np.clip(rng.normal(0.30, 0.08, n_days), 0.12, 0.55)
    t = types[day_idx]
    thr = ndtri(1.0 - frac)[day_idx]
    c = 1.0 / (1.0 + np.exp(-(z - thr) / 0.25))  # cloud cover of the interval, 0..1
    kc_partly = lvl_clear[day_idx] * (1 - c) + lvl_cloud[day_idx] * c + 0.20 * c * (1 - c)
    kc_partly += 0.02 * white
    kc_clear = lvl_clear[day_idx] + 0.004 * white
    kc_over = lvl_over[day_idx] * (1 + 0.35 * slow) + 0.02 * white
    kc = np.select([t == 0, t == 1], [kc_clear, kc_partly], kc_over)
    return np.clip(kc, 0.05, 1.10)


def weather(sc: Scenario, times: pd.DatetimeIndex, sky: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Interval weather (irradiance, ambient, wind, rain) and daily summary for the scenario.

    Days are local-standard-time days (DEVELOPERS.md). Returns ``(intervals, daily)``; the
    interval frame adds ``t_amb_c, wind_ms, rain_mm, kc, day`` (day index) to the columns of
    :func:`irradiance_from_kc`; the daily frame has ``day_type, rain_mm, t_amb_mean_c``.
    """
    rng = np.random.default_rng([sc.seed, 2])
    std = _std_offset(sc.timezone)
    local_std = (times + std).tz_localize(None)
    day0 = local_std[0].normalize()  # a summer start begins on the previous standard-time day
    day_idx = np.asarray((local_std.normalize() - day0).days, dtype=np.int64)
    days = pd.date_range(day0, periods=int(day_idx.max()) + 1, freq="D")
    types = day_types(days, rng)
    kc = clear_sky_index(day_idx, types, sc.interval_min, rng)
    irr = irradiance_from_kc(sky, kc, sc.tilt_deg, sc.azimuth_deg, sc.albedo)

    # ambient temperature: seasonal (Jan min ~5 °C, Jul max ~25 °C daily mean) + diurnal + noise
    doy = np.asarray(days.day_of_year, dtype=float)
    seasonal = 14.5 - 10.0 * np.cos(2 * np.pi * (doy - 18) / 365.25)
    anomaly = 2.5 * _ar1(len(days), 0.75, rng) + np.array([0.6, 0.0, -1.8])[types]
    amp = np.array([7.5, 5.5, 2.5])[types] * (1 + 0.2 * np.cos(2 * np.pi * (doy - 200) / 365.25))
    hour_solar = np.asarray((times.hour + times.minute / 60.0 + sc.interval_min / 120.0
                             + sc.longitude_deg / 15.0) % 24.0)
    diurnal = np.cos(2 * np.pi * (hour_solar - 15.0) / 24.0)
    t_amb = (seasonal + anomaly)[day_idx] + amp[day_idx] * diurnal + 0.3 * _ar1(len(times), 0.9, rng)

    # wind at 10 m: log-normal daily mean, afternoon maximum, gusty noise
    w_day = np.exp(rng.normal(np.log(2.8), 0.45, len(days))) * np.array([0.9, 1.0, 1.3])[types]
    wind = w_day[day_idx] * (1 + 0.35 * np.cos(2 * np.pi * (hour_solar - 16.0) / 24.0))
    wind = np.clip(wind * (1 + 0.25 * _ar1(len(times), 0.7, rng)), 0.0, None)

    # rain: events on cloudy days, frequent in spring/autumn, rare in summer; 0.2 mm tips
    months = np.asarray(days.month) - 1
    p_rain = np.array([0.0, 0.25, 0.70])[types] * RAIN_SEASON[months]
    rain_day = rng.random(len(days)) < p_rain
    amount = rng.gamma(0.8, 8.0, len(days))
    n_per_day = int(round(24 * 60 / sc.interval_min))
    rain = np.zeros(len(times))
    first = np.searchsorted(day_idx, np.arange(len(days)))
    for d in np.flatnonzero(rain_day):
        tips = int(round(amount[d] / 0.2))
        if tips == 0:
            continue
        dur = int(rng.integers(max(1, n_per_day // 24), max(2, n_per_day // 3)))
        s0 = first[d] + int(rng.integers(0, n_per_day - dur))
        s1 = min(s0 + dur, len(times))
        if s1 <= s0:
            continue
        k = rng.multinomial(tips, np.full(s1 - s0, 1.0 / (s1 - s0)))
        rain[s0:s1] += 0.2 * k
    rain = np.round(rain, 1)

    out = irr.copy()
    out["t_amb_c"] = t_amb
    out["wind_ms"] = wind
    out["rain_mm"] = rain
    out["kc"] = kc
    out["day"] = day_idx
    daily = pd.DataFrame({"day_type": np.asarray(DAY_TYPES)[types],
                          "rain_mm": np.bincount(day_idx, weights=rain, minlength=len(days)),
                          "t_amb_mean_c": seasonal + anomaly}, index=days.date)
    return out, daily


def soiling(sc: Scenario, days: np.ndarray, rain_daily_mm: np.ndarray) -> tuple[np.ndarray, list[dict]]:
    """Site base soiling ratio per local-standard day, and the cleaning events.

    Loss accumulates linearly in dry spells at a seasonal rate (``soiling_rate_winter`` in
    January … ``soiling_rate_summer`` in July, cosine in between); rain of at least 5 mm in a
    day resets it from the next day (full), 2-5 mm halves it (partial); a scheduled cleaning
    resets it on its morning. Capped at 30 % loss. Inverter i sees
    ``SR_i = 1 − m_i (1 − SR_base)`` with its ``soiling_multiplier`` m_i. Linear, piecewise:
    the soiling-interval model of Deceglie et al. 2018 (common practice for synthetic data).
    """
    doy = np.array([d.timetuple().tm_yday for d in days], dtype=float)
    w = (1 - np.cos(2 * np.pi * (doy - 15) / 365.25)) / 2
    # soiling rate per day (negative = soiling, DEVELOPERS.md) -> daily loss increment
    rate_per_day = (sc.soiling_rate_winter_pct_per_day
                    + (sc.soiling_rate_summer_pct_per_day - sc.soiling_rate_winter_pct_per_day) * w) / 100
    loss = np.zeros(len(days))
    events = []
    sched = set(sc.scheduled_cleanings)
    cur = 0.0
    for d in range(len(days)):
        if days[d] in sched:  # done at dawn: the day starts clean
            events.append({"date": days[d].isoformat(), "kind": "scheduled_cleaning",
                           "effect": "full", "loss_before": round(cur, 5)})
            cur = 0.0
        loss[d] = cur
        cur = min(cur - rate_per_day[d], 0.30)  # dust settles during the day
        effect = ("full" if rain_daily_mm[d] >= RAIN_FULL_CLEAN_MM else
                  "partial" if rain_daily_mm[d] >= RAIN_PARTIAL_CLEAN_MM else None)
        if effect:  # rain washes the modules: effective from the next day
            events.append({"date": (days[d] + dt.timedelta(days=1)).isoformat(), "kind": "rain",
                           "rain_mm": round(float(rain_daily_mm[d]), 1), "effect": effect,
                           "loss_before": round(cur, 5)})
            cur = 0.0 if effect == "full" else cur * PARTIAL_CLEAN_KEEP
    return 1.0 - loss, events


# ---------------------------------------------------------------------- plant


def _sapm(mounting: str) -> dict:
    return pvlib.temperature.TEMPERATURE_MODEL_PARAMETERS["sapm"][mounting]


def simulate_chunk(sc: Scenario, times: pd.DatetimeIndex, wx: pd.DataFrame, sr_base: np.ndarray,
                   rng: np.random.Generator) -> dict[str, np.ndarray]:
    """True and measured values for a block of intervals (all inverters at once).

    ``wx`` is the slice of :func:`weather` for ``times``; ``sr_base`` the daily base soiling
    ratio for the whole scenario. Returns a dict of arrays: ``p_ac_kw`` (n, n_inv) measured,
    ``p_ac_true_kw``, ``p_dc_kw``, ``clipped`` (bool), ``t_module_c`` per mounting block,
    and the measured sensor readings keyed by sensor id.
    """
    inv = sc.inverters
    n, m = len(times), len(inv)
    g_eff = wx["poa_eff_wm2"].to_numpy()
    poa = wx["poa_wm2"].to_numpy()
    t_amb, wind = wx["t_amb_c"].to_numpy(), wx["wind_ms"].to_numpy()
    day = wx["day"].to_numpy()

    # temperatures per mounting type (Sandia, King et al. 2004 Eq. 11-12)
    t_mod, t_cell = {}, {}
    for mnt in sorted({i.mounting for i in inv}):
        p = _sapm(mnt)
        t_mod[mnt] = pvlib.temperature.sapm_module(poa, t_amb, wind, p["a"], p["b"])
        t_cell[mnt] = pvlib.temperature.sapm_cell_from_module(t_mod[mnt], poa, p["deltaT"])
    tc = np.column_stack([t_cell[i.mounting] for i in inv])

    gamma = np.array([i.gamma_pmp_per_c for i in inv])
    pdc0 = np.array([i.p_dc_kwp * i.p_dc_actual_factor for i in inv]) * DC_LOSS_FACTOR
    soil_m = np.array([i.soiling_multiplier for i in inv])
    sr = 1.0 - soil_m[None, :] * (1.0 - sr_base[day])[:, None]
    yrs = np.column_stack([
        (times - pd.Timestamp(i.commissioned).tz_localize(sc.timezone)).total_seconds()
        / (365.25 * 86400) for i in inv])
    degr = 1.0 + np.array([i.rd_pct_per_yr for i in inv])[None, :] / 100.0 * np.clip(yrs, 0, None)
    fault = np.ones((n, m))
    if sc.string_failure:
        inv_id, t_from, loss = sc.string_failure
        k = [i.id for i in inv].index(inv_id)
        fault[np.asarray(times >= _local_to_utc(sc, t_from)), k] = 1.0 - loss
    # PVWatts DC (Dobos 2014): pdc0 * G_eff/1000 * (1 + gamma (T_cell - 25))
    p_dc = pvlib.pvsystem.pvwatts_dc(g_eff[:, None] * sr, tc, pdc0[None, :], gamma[None, :])
    p_dc = np.clip(p_dc * degr * fault, 0.0, None)
    eta = np.array([i.eta_inv_nom for i in inv])
    p_ac_max = np.array([i.p_ac_max_kw for i in inv])
    p_ac = pvlib.inverter.pvwatts(p_dc, (p_ac_max / eta)[None, :], eta_inv_nom=eta[None, :])
    p_ac = np.nan_to_num(np.asarray(p_ac, dtype=float))
    clipped = p_ac >= p_ac_max[None, :] * 0.9999
    ids = [i.id for i in inv]
    for o in sc.outages:
        mask = _mask_between(times, sc, o.start_local, o.end_local)
        for iid in o.inverters:
            p_ac[mask, ids.index(iid)] = 0.0
    p_meas = np.clip(p_ac * (1 + 0.002 * rng.standard_normal((n, m))), 0.0, p_ac_max[None, :] * 1.002)

    s = sc.sensor_ids
    rc = g_eff * (1 + 0.003 * rng.standard_normal(n))
    drift = np.ones(n)
    if sc.py_drift:
        _, d0, rate = sc.py_drift
        yd = (times - pd.Timestamp(d0).tz_localize(sc.timezone)).total_seconds() / (365.25 * 86400)
        drift = 1.0 + rate / 100.0 * np.clip(np.asarray(yd), 0, None)
    night = poa <= 0.5
    py = poa * drift * (1 + 0.004 * rng.standard_normal(n)) + np.where(night, -1.5, 0.0) \
        + np.where(night, 0.4 * rng.standard_normal(n), 0.0)
    tmod_a = t_mod[inv[0].mounting]
    tmod_b = t_mod[inv[-1].mounting]
    meas = {
        s["poa_rc"]: np.clip(rc, 0.0, None),
        s["poa_py"]: py,
        s["tmod_a"]: tmod_a + 0.25 * rng.standard_normal(n),
        s["tmod_b"]: tmod_b + 0.25 * rng.standard_normal(n),
        s["tamb"]: t_amb + 0.1 * rng.standard_normal(n),
        s["wind"]: wind,
        s["rain"]: wx["rain_mm"].to_numpy(),
    }
    return {"p_ac_kw": p_meas, "p_ac_true_kw": p_ac, "p_dc_kw": p_dc, "clipped": clipped,
            "t_cell_c": tc, "meas": meas}


# ---------------------------------------------------------------------- export format

TS_FORMAT = "%d.%m.%Y %H:%M"
PREAMBLE_LINES = 2
HEADER_LINES = PREAMBLE_LINES + 2  # preamble, header, unit row


def export_columns(sc: Scenario) -> list[tuple[str, str, str, str, int]]:
    """Export columns: (header, device, quantity, unit as written, decimals)."""
    s = sc.sensor_ids
    cols = [(f"{i.id} Pac", i.id, "p_ac_kw", "W", 0) for i in sc.inverters]
    cols += [(f"{i.id} E_total", i.id, "e_ac_total_kwh", "kWh", 0) for i in sc.inverters]
    cols += [(f"{s['poa_rc']} Irradiance", s["poa_rc"], "poa_wm2", "W/m²", 1),
             (f"{s['poa_py']} Irradiance", s["poa_py"], "poa_wm2", "W/m²", 1),
             (f"{s['tmod_a']} Temp", s["tmod_a"], "t_module_c", "°C", 1),
             (f"{s['tmod_b']} Temp", s["tmod_b"], "t_module_c", "°C", 1),
             (f"{s['tamb']} Temp", s["tamb"], "t_amb_c", "°C", 1),
             (f"{s['wind']} Speed", s["wind"], "wind_ms", "m/s", 1),
             (f"{s['rain']} Sum", s["rain"], "rain_mm", "mm", 1)]
    return cols


def _fmt_decimal(x: np.ndarray, decimals: int) -> np.ndarray:
    """Fixed-point text with a decimal comma, via integers (fast and exact)."""
    scale = 10 ** decimals
    q = np.round(np.asarray(x) * scale).astype(np.int64)
    if decimals == 0:
        return q.astype(str)
    sign = np.where(q < 0, "-", "")
    a = np.abs(q)
    return np.char.add(np.char.add(np.char.add(sign, (a // scale).astype(str)), ","),
                       np.char.zfill((a % scale).astype(str), decimals))


def _file_text(sc: Scenario, key: str, body: list[str]) -> list[str]:
    """Lines (without newline) of one monthly export file, before any corruption."""
    heads = export_columns(sc)
    pre = [f"Logger QL-7 export;site {sc.site_id};{sc.name};interval {sc.interval_min} min;"
           f"values are interval means, timestamp = interval end (local time)",
           f"period {key};firmware 3.4.1;decimal comma"]
    header = ";".join(["Timestamp"] + [h[0] for h in heads])
    units = ";".join([""] + [h[3] for h in heads])
    return pre + [header, units] + body


def _body_lines(labels: np.ndarray, ints: np.ndarray, texts: list[np.ndarray]) -> list[str]:
    """Data lines: label; integer columns; preformatted text columns (fast: ints via tolist)."""
    a = [";".join(map(str, r)) for r in ints.tolist()]
    b = [";".join(r) for r in zip(*texts, strict=True)]
    return [f"{x};{y};{z}" for x, y, z in zip(labels.tolist(), a, b, strict=True)]


def config_toml(sc: Scenario) -> str:
    """The site configuration (``<site>.toml``), fully commented, for this scenario."""
    s = sc.sensor_ids
    inv_blocks = []
    for i in sc.inverters:
        inv_blocks.append(
            f'[[inverters]]\nid = "{i.id}"\np_dc_kwp = {i.p_dc_kwp}\np_ac_max_kw = {i.p_ac_max_kw}\n'
            f'gamma_pmp_per_c = {i.gamma_pmp_per_c}\nmounting = "{i.mounting}"\n'
            f'eta_inv_nom = {i.eta_inv_nom}\ncommissioned = {i.commissioned.isoformat()}\n'
            f'poa_sensor = "{i.poa_sensor}"\nt_module_sensor = "{i.t_module_sensor}"\n'
            f't_amb_sensor = "{s["tamb"]}"\nwind_sensor = "{s["wind"]}"\npeer_group = "site"\n')
    heads = {h[1] + h[2]: h for h in export_columns(sc)}
    sensor_cols = "".join(
        f'[[sources.columns]]\nheader = "{h[0]}"\ndevice = "{h[1]}"\nquantity = "{h[2]}"\n'
        f'unit = "{h[3]}"\n\n'
        for key, h in heads.items() if not key.startswith(tuple(i.id for i in sc.inverters)))
    return f'''# Site configuration of the INVENTED demo plant "{sc.name}" (heliaudit format 1).
# Generated by `heliaudit demo-data` (heliaudit/demo_generator.py, generator {GENERATOR_VERSION},
# seed {sc.seed}). Nothing here describes a real plant, company or product.
# The hidden truths injected into the data are in truth.json beside this file.
format_version = 1

[site]
id = "{sc.site_id}"                 # short id used in the database and on the command line
name = "{sc.name}"
owner = "{sc.owner}"
timezone = "{sc.timezone}"     # IANA zone: the logger writes local time with DST
latitude_deg = {sc.latitude_deg}          # north positive
longitude_deg = {sc.longitude_deg}         # east positive (this site is west of Greenwich)
altitude_m = {sc.altitude_m}
tilt_deg = {sc.tilt_deg}              # fixed-tilt racks, every inverter the same plane
azimuth_deg = {sc.azimuth_deg}          # 180 = facing south
albedo = {sc.albedo}                # dry grass and gravel

[economics]
currency = "EUR"
tariff_per_kwh = 0.055         # value of one lost kWh (PPA price), for lost-revenue figures
cleaning_cost = 4200.0         # one full-site module cleaning (water truck and crew)

[warranty]
# Module power warranty: year-1 loss at most 2.0 %, then at most 0.55 %/yr (linear).
# A claim follows its contract; system data are screening evidence, not a flash test.
start_date = 2022-01-01
first_year_loss_pct = 2.0
annual_loss_pct = 0.55
years = 25
confidence = 0.95

# ---------------------------------------------------------------- sensors
# Two plane-of-array sensors mounted in the module plane: a c-Si reference cell (same glass
# and angular response as the modules) and a thermopile pyranometer (cosine-corrected,
# spectrally flat). Their readings differ most at large angles of incidence.
[[sensors]]
id = "{s["poa_rc"]}"
quantity = "poa_wm2"
instrument = "reference_cell"
notes = "c-Si reference cell in the module plane, block A (first half of the inverters)"

[[sensors]]
id = "{s["poa_py"]}"
quantity = "poa_wm2"
instrument = "thermopile_pyranometer"
notes = "thermopile pyranometer in the module plane, block B (second half of the inverters)"

[[sensors]]
id = "{s["tmod_a"]}"
quantity = "t_module_c"
notes = "back-of-module Pt100, block A (glass/polymer modules)"

[[sensors]]
id = "{s["tmod_b"]}"
quantity = "t_module_c"
notes = "back-of-module Pt100, block B (glass/glass modules)"

[[sensors]]
id = "{s["tamb"]}"
quantity = "t_amb_c"
notes = "shaded, ventilated air temperature at 2 m"

[[sensors]]
id = "{s["wind"]}"
quantity = "wind_ms"
notes = "cup anemometer on a 10 m mast (the height the Sandia thermal model expects)"

[[sensors]]
id = "{s["rain"]}"
quantity = "rain_mm"
notes = "tipping-bucket rain gauge, 0.2 mm per tip"

# ---------------------------------------------------------------- inverters
# String inverters, 300 kW AC each; DC/AC ratios 1.10-1.27, so some clip on cold clear days.
# gamma_pmp_per_c is the module datasheet max-power temperature coefficient (1/°C, negative);
# mounting is the Sandia (King et al. 2004) thermal class of the modules.
{"".join(b + chr(10) for b in inv_blocks)}
# ---------------------------------------------------------------- exports
# One gzip-compressed CSV per month written by the site logger: two preamble lines, a header
# line, a unit line, then one line per interval. Semicolon-separated with decimal commas,
# latin-1 text (the unit line has "°C" and "W/m²"). Timestamps are local wall-clock time with
# DST, day first, stamped at the END of each {sc.interval_min}-minute interval; in October the
# repeated hour appears twice, in order, and in March the skipped hour is absent.
[[sources]]
name = "logger"
pattern = "exports/{sc.site_id}_*.csv.gz"
layout = "wide"
encoding = "latin-1"
delimiter = ";"
decimal = ","
skip_lines = {PREAMBLE_LINES}
unit_row = true

[sources.timestamp]
column = "Timestamp"
format = "{TS_FORMAT}"
zone = "local"
label = "end"
ambiguous = "infer"

# Inverter AC power, written in W ("{{inverter}}" expands to every inverter id).
[[sources.columns]]
header = "{{inverter}} Pac"
quantity = "p_ac_kw"
unit = "W"

# Cumulative AC energy counter of each inverter, whole kWh.
[[sources.columns]]
header = "{{inverter}} E_total"
quantity = "e_ac_total_kwh"
unit = "kWh"

{sensor_cols.rstrip()}
'''


# ---------------------------------------------------------------------- writer


def _gz_bytes(text: str, encoding: str = "latin-1", level: int = 6) -> bytes:
    """gzip with a fixed header (no name, mtime 0) so equal text gives equal bytes."""
    buf = io.BytesIO()
    with gzip.GzipFile(filename="", mode="wb", fileobj=buf, mtime=0, compresslevel=level) as f:
        f.write(text.encode(encoding))
    return buf.getvalue()


def write_site(sc: Scenario, out_dir: str | Path, *, with_config: bool = True,
               compresslevel: int = 6, progress=None) -> dict:
    """Generate the scenario and write exports, site configuration and truth file.

    Writes ``out_dir/exports/<site>_YYYY-MM.csv.gz`` (month of the logger's label), then
    ``out_dir/<site>.toml`` and ``out_dir/truth.json``. Weather is computed for the whole
    period (a few arrays of length n_intervals); inverter power is computed and written month
    by month, so memory stays at one month of n_inverters columns. Returns a summary dict
    (files, sizes, rows, seconds).
    """
    t_start = time.perf_counter()
    out = Path(out_dir)
    (out / "exports").mkdir(parents=True, exist_ok=True)
    times = interval_starts_utc(sc)
    sky = sun_and_clearsky(sc, times)
    wx, daily = weather(sc, times, sky)
    days = np.array(list(daily.index))
    sr_base, cleanings = soiling(sc, days, daily["rain_mm"].to_numpy())
    tau = pd.Timedelta(minutes=sc.interval_min)

    # the logger's labels: interval end, shifted during the clock fault; rows it never wrote
    ends = times + tau
    label_utc = ends.copy()
    if sc.clock_shift:
        a, b, minutes = sc.clock_shift
        in_shift = (ends > _local_to_utc(sc, a)) & (ends <= _local_to_utc(sc, b))
        label_utc = label_utc.where(~in_shift, label_utc + pd.Timedelta(minutes=minutes))
    lab_s = np.asarray(label_utc.as_unit("s").asi8)
    keep = lab_s > np.concatenate([[-np.inf], np.maximum.accumulate(lab_s)[:-1]])
    dropped_after_clock = int((~keep).sum())
    gap_mask = np.zeros(len(times), dtype=bool)
    for g0, g1 in sc.gaps:
        gap_mask |= _mask_between(times, sc, g0, g1)
    keep &= ~gap_mask
    label_local = label_utc.tz_convert(sc.timezone)
    label_txt = np.asarray(label_local.strftime(TS_FORMAT))
    file_key = np.asarray((label_local - pd.Timedelta(seconds=1)).strftime("%Y-%m"))

    heads = export_columns(sc)
    inv_ids = [i.id for i in sc.inverters]
    counter = np.array([float(i.e_total_start_kwh) for i in sc.inverters])
    corr_by_label = {c.label_local.strftime(TS_FORMAT): c for c in sc.corruptions}
    files, corrupted, pending = [], [], {}
    stats = {"e_ac_kwh": np.zeros(len(inv_ids)), "e_ac_kwh_by_year": {}, "clipped_h": np.zeros(len(inv_ids)),
             "h_poa_kwhm2_by_year": {}}
    flat_value = None

    def flush(key: str) -> None:
        lines = _file_text(sc, key, [x for part in pending.pop(key) for x in part])
        fname = f"{sc.site_id}_{key}.csv.gz"
        # deliberate corruption, recorded with 1-based line numbers of the uncompressed file
        for n in range(len(lines) - 1, HEADER_LINES - 1, -1):
            lab = lines[n].split(";", 1)[0]
            c = corr_by_label.get(lab)
            if c is None:
                continue
            rec = {"kind": c.kind, "file": f"exports/{fname}", "label_local": lab}
            if c.kind == "non_numeric":
                fields = lines[n].split(";")
                k = [h[0] for h in heads].index(c.column) + 1
                rec.update(column=c.column, original=fields[k], written=c.text)
                fields[k] = c.text
                lines[n] = ";".join(fields)
            elif c.kind == "truncated":
                lines[n] = lines[n][: int(len(lines[n]) * 0.4)]
                rec.update(written=lines[n])
            elif c.kind == "bad_timestamp":
                lines[n] = c.text + lines[n][len(lab):]
                rec.update(written=c.text)
            elif c.kind == "duplicated":
                lines.insert(n + 1, lines[n])
                rec.update(duplicate_of_line=n + 1)
                n += 1
            rec["line"] = n + 1
            corrupted.append(rec)
        text = "\r\n".join(lines) + "\r\n"
        data = _gz_bytes(text, level=compresslevel)
        (out / "exports" / fname).write_bytes(data)
        files.append({"file": f"exports/{fname}", "bytes": len(data), "lines": len(lines),
                      "sha256": hashlib.sha256(data).hexdigest()})
        if progress:
            progress(fname)

    month_key = np.asarray(pd.DatetimeIndex(times.tz_convert(sc.timezone)).strftime("%Y-%m"))
    bounds = np.flatnonzero(np.r_[True, month_key[1:] != month_key[:-1], True])
    for c0, c1 in zip(bounds[:-1], bounds[1:], strict=True):
        t = times[c0:c1]
        rng = np.random.default_rng([sc.seed, 3, int(month_key[c0][:4]), int(month_key[c0][5:])])
        sim = simulate_chunk(sc, t, wx.iloc[c0:c1], sr_base, rng)
        e = sim["p_ac_kw"] * sc.interval_h
        cum = counter[None, :] + np.cumsum(e, axis=0)
        counter = cum[-1].copy()
        meas = sim["meas"]
        if sc.flatline:
            sid, f0, f1 = sc.flatline
            fm = _mask_between(t, sc, f0, f1)
            if fm.any():
                first = int(np.flatnonzero(fm)[0])
                if flat_value is None:  # the sensor sticks at its first reading of the period
                    flat_value = float(np.round(meas[sid][first], 1))
                meas[sid] = np.where(fm, flat_value, meas[sid])
        yr = month_key[c0][:4]
        stats["e_ac_kwh"] += e.sum(axis=0)
        stats["e_ac_kwh_by_year"].setdefault(yr, np.zeros(len(inv_ids)))
        stats["e_ac_kwh_by_year"][yr] += sim["p_ac_true_kw"].sum(axis=0) * sc.interval_h
        stats["h_poa_kwhm2_by_year"][yr] = stats["h_poa_kwhm2_by_year"].get(yr, 0.0) + float(
            wx["poa_wm2"].to_numpy()[c0:c1].sum() * sc.interval_h / 1000)
        stats["clipped_h"] += sim["clipped"].sum(axis=0) * sc.interval_h
        k = keep[c0:c1]
        ints = np.concatenate([np.round(sim["p_ac_kw"][k] * 1000), np.floor(cum[k])],
                              axis=1).astype(np.int64)  # Pac in W, then E_total in kWh
        texts = [_fmt_decimal(meas[h[1]][k], h[4]) for h in heads[2 * len(inv_ids):]]
        body = _body_lines(label_txt[c0:c1][k], ints, texts)
        fk = file_key[c0:c1][k]
        for key in np.unique(fk):
            sel = np.flatnonzero(fk == key)
            pending.setdefault(str(key), []).append(body[sel[0]:sel[-1] + 1])
        last_key = str(fk[-1]) if fk.size else ""
        for key in sorted(pending):
            if key < last_key:  # no later chunk can add rows to this file
                flush(key)
    for key in sorted(pending):
        flush(key)

    truth = truth_dict(sc, daily, sr_base, cleanings, corrupted, stats, dropped_after_clock,
                       flat_value)
    (out / "truth.json").write_text(json.dumps(truth, indent=1) + "\n", encoding="utf-8")
    if with_config:
        (out / f"{sc.site_id}.toml").write_text(config_toml(sc), encoding="utf-8")
    return {"out_dir": str(out), "files": files, "n_intervals": len(times),
            "n_inverters": len(inv_ids), "seconds": round(time.perf_counter() - t_start, 2),
            "bytes": sum(f["bytes"] for f in files)}


def truth_dict(sc: Scenario, daily: pd.DataFrame, sr_base: np.ndarray, cleanings: list[dict],
               corrupted: list[dict], stats: dict, dropped_after_clock: int,
               flat_value: float | None) -> dict:
    """The truth file content: every injected effect, with dates in local wall-clock time."""
    def iso(x):
        return x.isoformat(sep=" ", timespec="minutes") if isinstance(x, dt.datetime) else x.isoformat()

    p_dc = np.array([i.p_dc_kwp for i in sc.inverters])
    years = {}
    for yr, e in stats["e_ac_kwh_by_year"].items():
        years[yr] = {"e_ac_kwh_site": round(float(e.sum()), 1),
                     "yf_h_site": round(float(e.sum() / p_dc.sum()), 1),
                     "h_poa_kwhm2": round(stats["h_poa_kwhm2_by_year"][yr], 1)}
    inv = []
    for j, i in enumerate(sc.inverters):
        d = asdict(i)
        d["commissioned"] = i.commissioned.isoformat()
        d["clipped_h"] = round(float(stats["clipped_h"][j]), 2)
        d["e_ac_kwh_total"] = round(float(stats["e_ac_kwh"][j]), 1)
        inv.append(d)
    t = {
        "about": f"Hidden truths of the INVENTED demo site {sc.name!r}; generated by "
                 f"heliaudit/demo_generator.py. Times are local wall-clock ({sc.timezone}) "
                 "unless said otherwise; days are local standard time days.",
        "generator_version": GENERATOR_VERSION, "seed": sc.seed, "site_id": sc.site_id,
        "period": {"start": sc.start.isoformat(), "end_exclusive": sc.end.isoformat(),
                   "interval_min": sc.interval_min},
        "models": {
            "solar_position": "NREL SPA (Reda & Andreas 2004), pvlib.solarposition.get_solarposition",
            "clearsky": "Ineichen & Perez 2002, Linke turbidity climatology (pvlib Location.get_clearsky)",
            "clouds": "Markov chain of day types + AR(1) intra-day latent field; clear-sky components scaled by kc",
            "transposition": "Hay & Davies 1980 (pvlib get_total_irradiance model='haydavies')",
            "iam": "ASHRAE b0=0.05 on beam; Marion 2017 diffuse integrals; modules and POA-RC1 see it, POA-PY2 does not",
            "temperature": "Sandia, King et al. 2004 (pvlib sapm_module / sapm_cell_from_module)",
            "dc": f"PVWatts DC, Dobos 2014 (pvlib pvwatts_dc), fixed DC loss factor {DC_LOSS_FACTOR}",
            "ac": "PVWatts inverter, Dobos 2014 (pvlib.inverter.pvwatts), pdc0 = p_ac_max_kw/eta_inv_nom",
            "spectral": "none: the reference cell is assumed spectrally matched to the modules",
        },
        "degradation": {"model": "linear from commissioning: factor = 1 + rd_pct_per_yr/100 * years",
                        "per_inverter_pct_per_yr": {i.id: i.rd_pct_per_yr for i in sc.inverters}},
        "inverters": inv,
        "soiling": {
            "model": "SR_i = 1 - m_i * (1 - SR_base); SR_base loses a seasonal rate per dry day; "
                     f"rain >= {RAIN_FULL_CLEAN_MM} mm/day cleans fully from the next day, "
                     f"{RAIN_PARTIAL_CLEAN_MM}-{RAIN_FULL_CLEAN_MM} mm halves the loss; a scheduled "
                     "cleaning resets it that morning; POA sensors are kept clean",
            "rate_pct_per_day_january": sc.soiling_rate_winter_pct_per_day,
            "rate_pct_per_day_july": sc.soiling_rate_summer_pct_per_day,
            "multiplier_per_inverter": {i.id: i.soiling_multiplier for i in sc.inverters},
            "scheduled_cleanings": [d.isoformat() for d in sc.scheduled_cleanings],
            "cleaning_events": cleanings,
            "sr_base_start": daily.index[0].isoformat(),
            "sr_base_daily": [round(float(x), 5) for x in sr_base],
        },
        "string_failure": None if not sc.string_failure else {
            "inverter": sc.string_failure[0], "from_local": iso(sc.string_failure[1]),
            "dc_loss_fraction": sc.string_failure[2],
            "note": "one string of the array open-circuited; applied to DC power, so it is hidden "
                    "while the inverter clips"},
        "outages": [{"inverters": list(o.inverters), "start_local": iso(o.start_local),
                     "end_local": iso(o.end_local), "kind": o.kind, "note": o.note,
                     "written_as": "p_ac 0 W, counter flat; rows present"} for o in sc.outages],
        "poa_drift": None if not sc.py_drift else {
            "sensor": sc.py_drift[0], "start": sc.py_drift[1].isoformat(),
            "rate_pct_per_yr": sc.py_drift[2], "model": "linear: reading = true * (1 + rate/100 * years since start)"},
        "t_module_flatline": None if not sc.flatline else {
            "sensor": sc.flatline[0], "start_local": iso(sc.flatline[1]),
            "end_local": iso(sc.flatline[2]), "value_c": flat_value},
        "clock_shift": None if not sc.clock_shift else {
            "true_interval_ends_local": [iso(sc.clock_shift[0]), iso(sc.clock_shift[1])],
            "range_note": "intervals whose true end is after the first and up to the second time",
            "shift_minutes": sc.clock_shift[2],
            "note": "the logger stamped each interval this many minutes late (labels too late); "
                    "after the clock was corrected it wrote nothing until its clock passed the "
                    "last label written, so those rows are missing. Not in the config on purpose.",
            "rows_not_written_after_correction": dropped_after_clock},
        "logger_gaps": [{"start_local": iso(a), "end_local": iso(b),
                         "note": "logger down: rows absent; counters keep counting, so the first "
                                 "counter after the gap includes the energy made during it"}
                        for a, b in sc.gaps],
        "corrupted_lines": corrupted,
        "daily_weather": {"day_type": list(daily["day_type"]),
                          "rain_mm": [round(float(x), 1) for x in daily["rain_mm"]]},
        "yield_by_year": years,
        "yield_by_year_note": "true AC energy before measurement noise, including intervals the "
                              "logger missed; yf_h_site = site energy / site p_dc_kwp; h_poa_kwhm2 "
                              "= true POA global (a drift-free pyranometer)",
        "measurement": {
            "p_ac": "x (1 + N(0, 0.002)), written in whole W, 0 at night",
            "e_ac_total_kwh": "cumulative measured energy, truncated to whole kWh; starts at "
                              "e_total_start_kwh; counts on through logger gaps",
            "POA-RC1": "effective irradiance x (1 + N(0, 0.003)), 0.1 W/m2",
            "POA-PY2": "POA global x drift x (1 + N(0, 0.004)); at night -1.5 +- 0.4 W/m2 thermal offset",
            "t_module": "Sandia back-of-module temperature + N(0, 0.25) degC; no thermal lag",
            "t_amb": "+ N(0, 0.1) degC", "wind": "10 m, no noise", "rain": "0.2 mm tips",
        },
    }
    return t
