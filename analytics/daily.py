"""One inverter's interval frame -> one row per day of the ``daily_inverter`` table.

Days are calendar days in the site's **local standard time** (UTC offset without DST), so
every day has 24 hours (common practice: DST days of 23 and 25 hours break daily sums). Per interval k (τ_k = ``interval_h``):

* energy E_k = ``e_ac_kwh`` where the logger gives interval energy, else P_ac,k τ_k;
  power P_ac,k = ``p_ac_kw``, else E_k / τ_k;
* cell temperature from the back-of-module reading with the Sandia ΔT of the inverter's
  mounting (King et al. 2004, Eq. 12); where the module reading is missing, from ambient
  temperature and wind (Sandia Eq. 11 + 12), or from ambient alone with Faiman (2008) at
  1 m/s wind;
* expected AC power from PVWatts (Dobos 2014): linear DC model, inverter curve, AC limit;
* a reason code from :func:`analytics.filters.classify_intervals`. Intervals with the sun
  below the horizon are ``night`` without further checks (and the model is not evaluated
  for them); flat-line runs do not continue across a night.

Daily sums (ratios of sums, never means of ratios, IEC 61724-1:2021):

* ``e_ac_kwh``: all measured AC energy of the day (net of night consumption);
* PR set: intervals with a plausible POA reading and an energy value; over it
  ``e_ac_pr_kwh``, ``h_poa_kwhm2``, ``e_ref_kwh`` (P0 H / 1 kW/m²), ``e_ref_stc_kwh``
  (Σ C_k P0 G_k τ_k / 1000, C_k = 1 + γ (T_cell,k - 25 °C)) and ``e_ref_tcell_kwhc``
  (Σ P0 G_k T_cell,k τ_k / 1000); ``pr = e_ac_pr_kwh / e_ref_kwh`` and
  ``pr_stc = e_ac_pr_kwh / e_ref_stc_kwh`` (IEC 61724-1). A missing POA reading thus drops the
  interval from numerator and denominator together; with complete data ``e_ac_pr_kwh``
  equals ``e_ac_kwh``;
* ``e_exp_kwh``: expected AC energy of daylight intervals having the model's inputs;
* valid set (reason code 0): ``n_valid``, ``e_ac_valid_kwh``, ``e_exp_valid_kwh`` and the
  performance index ``pi = e_ac_valid_kwh / e_exp_valid_kwh``;
* ``coverage``: data coverage, the share of the daylight insolation (measured POA, or
  clear-sky POA where the reading is missing) that falls in intervals with complete,
  plausible data (reason not ``missing``, ``out_of_range`` or ``stuck``). Intervals left out
  of pi for the plant's operating state (outage, clipping) or the irradiance window still
  count as covered, so that an inverter with a high DC/AC ratio, which clips on every clear
  summer day, keeps its summer days. ``day_valid``: coverage >= ``min_coverage`` (0.8), at
  least ``min_valid_fraction`` (0.5) of the insolation in valid intervals (so that an
  overcast day whose pi rests on two intervals does not enter trends; the share is in
  ``details_json`` as ``valid_insolation_fraction``), and a finite pi;
* availability (:mod:`analytics.availability`): ``t_daylight_h`` (sun up, G >= 50 W/m² and
  a power reading), ``t_unavailable_h``, ``e_lost_kwh``, ``avail_time``, ``avail_energy``;
* ``t_clipped_h``: hours with P_ac >= clip_fraction · P_ac,max;
* ``details_json``: excluded-interval counts by reason and how temperature was obtained, and
  ``trend`` {pi, day_valid, e_ac_kwh, e_exp_kwh}: the same index without the clipping zone
  judged from the expected power (``trend_clip_expected_fraction``), for degradation
  (issue #13).
"""

from __future__ import annotations

import datetime as dt
import functools
import json

import numpy as np
import pandas as pd

from analytics import filters as flt
from analytics.availability import unavailable_mask
from analytics.power import expected_ac_power
from analytics.temperature import (
    cell_temperature_best_available,
    cell_temperature_faiman,
    module_temperature_sandia,
    sapm_parameters,
)

#: The columns of one daily row, in ``daily_inverter`` order (without device_pk, computation_id).
DAILY_COLUMNS: tuple[str, ...] = (
    "day", "n_intervals", "n_daylight", "n_valid", "e_ac_kwh", "h_poa_kwhm2", "e_ref_kwh",
    "e_ref_stc_kwh", "e_ref_tcell_kwhc", "e_exp_kwh", "e_ac_valid_kwh", "e_exp_valid_kwh", "pr",
    "pr_stc", "pi", "t_cell_wavg_c", "coverage", "day_valid", "t_daylight_h", "t_unavailable_h",
    "e_lost_kwh", "avail_time", "avail_energy", "t_clipped_h", "details_json", "e_ac_pr_kwh",
    "irradiance_basis", "t_cell_basis",
)
#: How a day's cell temperature was obtained over its PR intervals: codes joined by '+'
#: when a day mixes them (e.g. a module sensor with gaps). None: no temperature at all.
T_CELL_BASES = ("module_sensor", "modelled_sandia_king2004", "modelled_faiman2008")
_T_BASIS_BY_MASK = [None] + ["+".join(b for j, b in enumerate(T_CELL_BASES) if m >> j & 1)
                             for m in range(1, 8)]
_EPOCH_DAY = dt.date(1970, 1, 1)


def local_standard_day_number(ts_s, utc_offset_h: float) -> np.ndarray:
    """Days since 1970-01-01 in local standard time for UTC epoch seconds (interval starts).

    Examples
    --------
    >>> local_standard_day_number([82800], 1.0).tolist()  # 23:00 UTC = 00:00 at UTC+1
    [1]
    """
    return np.floor_divide(np.asarray(ts_s, dtype=np.int64) + int(round(utc_offset_h * 3600)),
                           86400)


def standard_utc_offset_h(timezone: str, on: dt.date = dt.date(2024, 1, 15)) -> float:
    """The zone's standard UTC offset (its offset without daylight saving) on ``on``. [h]

    ``utcoffset - dst`` of the IANA zone, so a southern-hemisphere zone in its summer gives
    the same answer as in winter. Zones that changed their standard offset historically are
    taken at ``on``.

    Examples
    --------
    >>> standard_utc_offset_h("Europe/Madrid"), standard_utc_offset_h("Australia/Sydney")
    (1.0, 10.0)
    """
    import zoneinfo

    try:
        z = zoneinfo.ZoneInfo(timezone)
    except (zoneinfo.ZoneInfoNotFoundError, ValueError):
        raise ValueError(f"unknown IANA time zone {timezone!r}") from None
    t = dt.datetime.combine(on, dt.time(12), tzinfo=z)
    return (t.utcoffset() - (t.dst() or dt.timedelta(0))).total_seconds() / 3600.0


def _col(frame: pd.DataFrame, name: str, n: int) -> np.ndarray:
    if name in frame.columns:
        return frame[name].to_numpy(dtype=float, na_value=np.nan)
    return np.full(n, np.nan)


def _sum_by(day_idx: np.ndarray, values: np.ndarray, mask, n_days: int) -> np.ndarray:
    ok = np.isfinite(values)
    w = np.where(ok & mask if mask is not True else ok, values, 0.0)
    return np.bincount(day_idx, weights=w, minlength=n_days)


def _div(num: np.ndarray, den: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)


@functools.lru_cache(maxsize=4096)
def _details(counts: tuple[int, ...], n_modelled: int, valid_fraction: float,
             trend: tuple | None = None) -> str:
    d: dict = {"excluded": {r: int(counts[i]) for i, r in enumerate(flt.REASONS)
                            if i and counts[i]},
               "valid_insolation_fraction": None if valid_fraction != valid_fraction
               else valid_fraction}
    if trend is not None:  # the index for degradation trends (issue #13)
        pi_t, ok_t, e_ac_t, e_exp_t = trend
        d["trend"] = {"pi": None if pi_t != pi_t else pi_t, "day_valid": bool(ok_t),
                      "e_ac_kwh": e_ac_t, "e_exp_kwh": e_exp_t}
    if n_modelled:
        d["t_cell_modelled_from_ambient"] = int(n_modelled)
    return json.dumps(d, sort_keys=True)


def daily_performance(frame: pd.DataFrame, inverter, *, utc_offset_h: float = 0.0,
                      solar_elevation_deg=None, poa_clearsky_wm2=None,
                      latitude_deg: float | None = None, longitude_deg: float | None = None,
                      altitude_m: float = 0.0, filters: dict | None = None) -> pd.DataFrame:
    """Daily performance rows of one inverter (see the module docstring for every column).

    Parameters
    ----------
    frame : DataFrame
        Index ``ts_utc`` (tz-aware, interval start); columns ``p_ac_kw`` [kW], ``poa_wm2``
        [W/m²], ``t_module_c`` [°C], ``interval_h`` [h], optional ``e_ac_kwh`` [kWh],
        ``t_amb_c`` [°C], ``wind_ms`` [m/s].
    inverter : object with attributes
        ``p_dc_kwp`` [kWp], ``p_ac_max_kw`` [kW], ``gamma_pmp_per_c`` [1/°C],
        ``eta_inv_nom`` [-], ``mounting`` (a Sandia key, :data:`analytics.temperature.SAPM_PARAMETERS`)
        — e.g. ``ingest.config.Inverter``.
    utc_offset_h : float
        Site's standard UTC offset (no DST). [h]
    solar_elevation_deg, poa_clearsky_wm2 : Series, array or None
        Sun elevation [°] and clear-sky POA [W/m²] for the frame's rows (a Series is aligned
        on ``ts_utc``). If the elevation is None and ``latitude_deg``/``longitude_deg`` are
        given it is computed with pvlib; otherwise night is G < 5 W/m² alone.
    filters : dict or None
        Overrides of :data:`analytics.filters.DEFAULT_FILTERS` (``SiteConfig.filters``).

    Returns
    -------
    DataFrame with columns :data:`DAILY_COLUMNS`, one row per local standard day having
    at least one reading, ``day`` as ``datetime.date``. Rows with no reading at all (gaps
    filled with NaN) count as missing intervals where the sun is up.

    Examples
    --------
    A 100 kWp inverter, one 1-h interval at 1000 W/m², 25 °C cell and 80 kWh:
    e_ref = 100 kWh, so pr = 0.8.
    """
    out = daily_performance_many([frame], [inverter], utc_offset_h=utc_offset_h,
                                 solar_elevation_deg=[solar_elevation_deg],
                                 poa_clearsky_wm2=[poa_clearsky_wm2], latitude_deg=latitude_deg,
                                 longitude_deg=longitude_deg, altitude_m=altitude_m,
                                 filters=filters)
    return out.drop(columns="inverter_no").reset_index(drop=True)


def _empty_daily(extra: tuple[str, ...] = ()) -> pd.DataFrame:
    return pd.DataFrame({c: pd.Series([], dtype=object if c in (
        "day", "details_json", "irradiance_basis", "t_cell_basis")
                                      else bool if c == "day_valid" else "int64"
                                      if c.startswith("n_") or c == "inverter_no" else float)
                         for c in (*extra, *DAILY_COLUMNS)})


def daily_performance_many(frames: list[pd.DataFrame], inverters: list, *,
                           utc_offset_h: float = 0.0, solar_elevation_deg=None,
                           poa_clearsky_wm2=None, latitude_deg: float | None = None,
                           longitude_deg: float | None = None, altitude_m: float = 0.0,
                           filters: dict | None = None) -> pd.DataFrame:
    """:func:`daily_performance` of several inverters of one site in one vectorised pass.

    ``frames[i]`` belongs to ``inverters[i]``; ``solar_elevation_deg`` and
    ``poa_clearsky_wm2`` are None or lists with one entry (array, Series or None) per frame.
    Returns the daily rows of all of them with an ``inverter_no`` column (the list position)
    before the :data:`DAILY_COLUMNS`, ordered by inverter then day. Same results as calling
    :func:`daily_performance` per inverter; cheaper when the frames are short (a week).
    """
    f = flt.resolve_filters(filters)
    m = len(frames)
    if len(inverters) != m:
        raise ValueError(f"{m} frames but {len(inverters)} inverters")
    elev_in = solar_elevation_deg if solar_elevation_deg is not None else [None] * m
    cs_in = poa_clearsky_wm2 if poa_clearsky_wm2 is not None else [None] * m
    parts: dict[str, list[np.ndarray]] = {k: [] for k in (
        "ts", "tau", "p", "e", "g", "tm", "ta", "ws", "elev", "cs", "inv")}
    have_elev = have_cs = True
    for i, (frame, el, cs) in enumerate(zip(frames, elev_in, cs_in, strict=True)):
        n = len(frame)
        if n == 0:
            continue
        idx = pd.DatetimeIndex(frame.index)
        if idx.tz is None:
            raise ValueError("frame index ts_utc must be tz-aware UTC")
        tau = _col(frame, "interval_h", n)
        if not np.isfinite(tau).all() or (tau <= 0).any():
            raise ValueError("interval_h must be a positive number for every row")
        p_in, e_in = _col(frame, "p_ac_kw", n), _col(frame, "e_ac_kwh", n)
        parts["ts"].append(idx.as_unit("s").asi8)
        parts["tau"].append(tau)
        parts["e"].append(np.where(np.isfinite(e_in), e_in, p_in * tau))
        parts["p"].append(np.where(np.isfinite(p_in), p_in, e_in / tau))
        parts["g"].append(_col(frame, "poa_wm2", n))
        parts["tm"].append(_col(frame, "t_module_c", n))
        parts["ta"].append(_col(frame, "t_amb_c", n))
        parts["ws"].append(_col(frame, "wind_ms", n))
        parts["inv"].append(np.full(n, i, dtype=np.int64))

        def aligned(x, idx=idx, n=n):
            if x is None:
                return None
            if isinstance(x, pd.Series):
                return x.reindex(idx).to_numpy(dtype=float)
            return np.broadcast_to(np.asarray(x, dtype=float), (n,))

        el = aligned(el)
        if el is None and latitude_deg is not None and longitude_deg is not None:
            el = flt.solar_elevation_deg(idx, latitude_deg, longitude_deg, altitude_m,
                                         interval_h=tau).to_numpy()
        have_elev &= el is not None
        parts["elev"].append(el)
        cs = aligned(cs)
        have_cs &= cs is not None
        parts["cs"].append(cs)
    if not parts["ts"]:
        return _empty_daily(("inverter_no",))
    cat = {k: np.concatenate(v) for k, v in parts.items() if k not in ("elev", "cs")}
    elev = np.concatenate(parts["elev"]) if have_elev else None
    g_cs = np.concatenate(parts["cs"]) if have_cs else None
    ts_s, tau, p, e, g = cat["ts"], cat["tau"], cat["p"], cat["e"], cat["g"]
    t_mod_meas, t_amb, wind, inv_no = cat["tm"], cat["ta"], cat["ws"], cat["inv"]
    n = ts_s.size

    # per-row inverter parameters (one value per inverter, spread over its rows)
    def param(get):
        return np.asarray([get(x) for x in inverters], dtype=float)[inv_no]

    sap = [sapm_parameters(x.mounting) for x in inverters]
    a_s = np.asarray([q["a"] for q in sap])[inv_no]
    b_s = np.asarray([q["b"] for q in sap])[inv_no]
    dt_s = np.asarray([q["delta_t_c"] for q in sap])[inv_no]
    p_dc = param(lambda x: x.p_dc_kwp)
    p_max = param(lambda x: x.p_ac_max_kw)
    gamma = param(lambda x: x.gamma_pmp_per_c)
    eta = param(lambda x: x.eta_inv_nom)

    # module temperature: measured, else modelled from ambient (Sandia Eq. 11, or Faiman)
    gpos = np.where(g < 0, 0.0, g)
    t_mod_sandia = module_temperature_sandia(gpos, t_amb, wind, a=a_s, b=b_s)
    t_mod = np.where(np.isfinite(t_mod_meas), t_mod_meas,
                     np.where(np.isfinite(t_mod_sandia), t_mod_sandia,
                              cell_temperature_faiman(gpos, t_amb, 1.0)))
    t_cell = cell_temperature_best_available(gpos, t_mod_meas, t_amb, wind, a=a_s, b=b_s,
                                             delta_t_c=dt_s)
    # day index
    day_no = local_standard_day_number(ts_s, utc_offset_h)
    key = inv_no * (1 << 32) + (day_no - day_no.min())
    if n < 2 or (np.diff(key) >= 0).all():  # time order (the usual case): no sort needed
        step = np.concatenate(([True], key[1:] != key[:-1]))
        d = np.cumsum(step) - 1
        first = np.flatnonzero(step)
    else:
        _u, first, d = np.unique(key, return_index=True, return_inverse=True)
    days, group_inv = day_no[first], inv_no[first]
    nd = len(days)
    sun_up = (elev >= f["night_elevation_deg"]) if elev is not None else (g >= f["night_poa_wm2"])
    g_ok = np.isfinite(g) & (g >= f["poa_range_min_wm2"]) & (g <= f["poa_range_max_wm2"])
    in_pr = g_ok & np.isfinite(e)
    e_ref_k = p_dc * gpos / 1000.0 * tau
    has_t = np.isfinite(t_cell)
    c_k = 1.0 + gamma * (t_cell - 25.0)

    # sums over every interval (nights add ~0 to the reference sums and their net energy)
    e_ac = _sum_by(d, e, True, nd)
    e_ac_pr = _sum_by(d, e, in_pr, nd)
    h_poa = _sum_by(d, gpos * tau / 1000.0, in_pr, nd)
    e_ref = _sum_by(d, e_ref_k, in_pr, nd)
    e_ref_stc = _sum_by(d, c_k * e_ref_k, in_pr & has_t, nd)
    e_ref_t = _sum_by(d, e_ref_k, in_pr & has_t, nd)
    e_ref_tcell = _sum_by(d, t_cell * e_ref_k, in_pr & has_t, nd)
    any_reading = np.isfinite(p) | np.isfinite(g) | np.isfinite(t_mod_meas)
    n_int = np.bincount(d, weights=any_reading, minlength=nd)
    n_day = np.bincount(d, weights=sun_up, minlength=nd)
    n_e = np.bincount(d, weights=np.isfinite(e), minlength=nd)
    n_pr = np.bincount(d, weights=in_pr, minlength=nd)
    modelled = ~np.isfinite(t_mod_meas) & has_t
    n_mod = np.bincount(d, weights=modelled, minlength=nd).astype(int)
    # temperature basis over the PR intervals: measured, Sandia from ambient + wind, or
    # Faiman from ambient alone (1 m/s) - stated per day (#11)
    pr_t = in_pr & has_t
    by_meas = np.bincount(d, weights=pr_t & np.isfinite(t_mod_meas), minlength=nd) > 0
    by_sandia = np.bincount(d, weights=pr_t & modelled & np.isfinite(t_mod_sandia),
                            minlength=nd) > 0
    by_faiman = np.bincount(d, weights=pr_t & modelled & ~np.isfinite(t_mod_sandia),
                            minlength=nd) > 0
    t_basis = np.asarray(_T_BASIS_BY_MASK, dtype=object)[
        by_meas.astype(int) + 2 * by_sandia.astype(int) + 4 * by_faiman.astype(int)]
    irr_basis = np.asarray([getattr(x, "irradiance_basis", None) for x in inverters],
                           dtype=object)

    # the model and the filters only where the sun is up (night is night: code 1)
    k = np.flatnonzero(sun_up)
    # flat-line runs stop at each night and at each change of inverter
    breaks = np.concatenate(([True], (np.diff(k) > 1) | (np.diff(inv_no[k]) != 0)))
    gs, ps, es, taus, ds, pmax_s = g[k], p[k], e[k], tau[k], d[k], p_max[k]
    p_exp = expected_ac_power(gpos[k], t_cell[k], p_dc[k], gamma[k], pmax_s, eta[k])
    # clipping also judged from the unlimited expected power (analytics.filters, issue #13)
    p_exp_free = expected_ac_power(gpos[k], t_cell[k], p_dc[k], gamma[k], pmax_s, eta[k],
                                   limit=False)
    codes_s = flt.classify_intervals(gs, t_mod[k], ps, pmax_s,
                                     None if elev is None else elev[k], t_amb[k], wind[k], f,
                                     run_breaks=breaks, p_ac_exp_kw=p_exp_free)
    codes = np.full(n, flt.NIGHT, dtype=np.int8)
    codes[k] = codes_s
    valid = codes_s == flt.VALID
    e_exp_k = p_exp * taus
    e_exp = _sum_by(ds, e_exp_k, g_ok[k] & has_t[k], nd)
    e_ac_valid = _sum_by(ds, es, valid, nd)
    e_exp_valid = _sum_by(ds, e_exp_k, valid, nd)
    n_val = np.bincount(ds, weights=valid, minlength=nd)

    w_cov = np.where(g_ok[k], gpos[k], g_cs[k] if g_cs is not None else 0.0)
    w_cov = np.where(np.isfinite(w_cov), w_cov, 0.0) * taus
    covered = ~np.isin(codes_s, flt.DATA_PROBLEMS)
    w_day = np.bincount(ds, weights=w_cov, minlength=nd)
    cov = _div(np.bincount(ds, weights=np.where(covered, w_cov, 0.0), minlength=nd), w_day)
    frac_valid = _div(np.bincount(ds, weights=np.where(valid, w_cov, 0.0), minlength=nd), w_day)
    # an index for degradation trends (issue #13): the valid set without the clipping zone
    # judged from the expected power without the AC limit, a selection that does not move as
    # the array degrades (analytics.filters); kept apart from pi, which the flags use
    zone = p_exp_free >= f["trend_clip_expected_fraction"] * pmax_s
    tvalid = valid & ~zone
    e_ac_t = _sum_by(ds, es, tvalid, nd)
    e_exp_t = _sum_by(ds, e_exp_k, tvalid, nd)
    w_free = np.bincount(ds, weights=np.where(zone, 0.0, w_cov), minlength=nd)
    frac_t = _div(np.bincount(ds, weights=np.where(tvalid, w_cov, 0.0), minlength=nd), w_free)
    pi_t = _div(e_ac_t, e_exp_t)
    ok_t = (cov >= f["min_coverage"]) & (frac_t >= f["min_valid_fraction"]) & np.isfinite(pi_t)

    base = (gs >= f["outage_poa_wm2"]) & np.isfinite(ps)
    unavail = base & unavailable_mask(ps, gs, pmax_s, f["outage_fraction"],
                                      f["outage_poa_wm2"])
    t_daylight = _sum_by(ds, taus, base, nd)
    t_unav = _sum_by(ds, taus, unavail, nd)
    e_lost = _sum_by(ds, e_exp_k, unavail, nd)
    e_base = _sum_by(ds, es, base, nd)
    t_clip = _sum_by(ds, taus, flt.clipping_mask(ps, pmax_s, f["clip_fraction"]), nd)

    # a day where e_ref_stc could not cover every PR interval (temperature missing) is partial
    stc_ok = np.isclose(e_ref_t, e_ref) & (n_pr > 0)
    pi = _div(e_ac_valid, e_exp_valid)
    nr = len(flt.REASONS)
    counts = np.bincount(d * nr + codes, minlength=nd * nr).reshape(nd, nr)
    out = pd.DataFrame({
        "inverter_no": group_inv,
        "day": [_EPOCH_DAY + dt.timedelta(days=x) for x in days.tolist()],
        "n_intervals": n_int.astype(np.int64), "n_daylight": n_day.astype(np.int64),
        "n_valid": n_val.astype(np.int64),
        "e_ac_kwh": np.where(n_e > 0, e_ac, np.nan),
        "h_poa_kwhm2": np.where(n_pr > 0, h_poa, np.nan),
        "e_ref_kwh": np.where(n_pr > 0, e_ref, np.nan),
        "e_ref_stc_kwh": np.where(stc_ok, e_ref_stc, np.nan),
        "e_ref_tcell_kwhc": np.where(stc_ok, e_ref_tcell, np.nan),
        "e_exp_kwh": e_exp, "e_ac_valid_kwh": e_ac_valid, "e_exp_valid_kwh": e_exp_valid,
        "pr": _div(e_ac_pr, e_ref), "pr_stc": np.where(stc_ok, _div(e_ac_pr, e_ref_stc), np.nan),
        "pi": pi, "t_cell_wavg_c": _div(e_ref_tcell, e_ref_t), "coverage": cov,
        "day_valid": ((cov >= f["min_coverage"]) & (frac_valid >= f["min_valid_fraction"])
                      & np.isfinite(pi)),
        "t_daylight_h": t_daylight, "t_unavailable_h": t_unav, "e_lost_kwh": e_lost,
        "avail_time": np.where(t_daylight > 0, 1.0 - _div(t_unav, t_daylight), np.nan),
        "avail_energy": _div(e_base, e_base + e_lost), "t_clipped_h": t_clip,
        "details_json": [_details(tuple(c), m, v, t) for c, m, v, t in zip(
            counts.tolist(), n_mod.tolist(), np.round(frac_valid, 4).tolist(),
            zip(np.round(pi_t, 6).tolist(), ok_t.tolist(), np.round(e_ac_t, 4).tolist(),
                np.round(e_exp_t, 4).tolist(), strict=True), strict=True)],
        "e_ac_pr_kwh": np.where(n_pr > 0, e_ac_pr, np.nan),
        "irradiance_basis": irr_basis[group_inv], "t_cell_basis": t_basis,
    }, columns=["inverter_no", *DAILY_COLUMNS])
    # a day whose rows are all gaps (no reading at all) gets no row
    return out[n_int > 0].reset_index(drop=True) if (n_int == 0).any() else out
