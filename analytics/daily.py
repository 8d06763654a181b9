"""One inverter's interval frame -> one row per day of the ``daily_inverter`` table.

Days are calendar days in the site's **local standard time** (UTC offset without DST), so
every day has 24 hours (METHODS §10). Per interval k (τ_k = ``interval_h``):

* energy E_k = ``e_ac_kwh`` where the logger gives interval energy, else P_ac,k τ_k;
  power P_ac,k = ``p_ac_kw``, else E_k / τ_k;
* cell temperature from the back-of-module reading with the Sandia ΔT of the inverter's
  mounting (King et al. 2004, Eq. 12); where the module reading is missing, from ambient
  temperature and wind (Sandia Eq. 11 + 12), or from ambient alone with Faiman (2008) at
  1 m/s wind;
* expected AC power from PVWatts (Dobos 2014): linear DC model, inverter curve, AC limit;
* a reason code from :func:`analytics.filters.classify_intervals`.

Daily sums (ratios of sums, never means of ratios, METHODS §5):

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
* ``coverage``: share of the daylight insolation (measured POA, or clear-sky POA where the
  reading is missing) that falls in valid intervals; ``day_valid = coverage >= min_coverage``
  and a finite pi;
* availability (:mod:`analytics.availability`): ``t_daylight_h`` (G >= 50 W/m² with a
  power reading), ``t_unavailable_h``, ``e_lost_kwh``, ``avail_time``, ``avail_energy``;
* ``t_clipped_h``: hours with P_ac >= clip_fraction · P_ac,max;
* ``details_json``: excluded-interval counts by reason and how temperature was obtained.
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
    cell_temperature_faiman,
    cell_temperature_from_module,
    module_temperature_sandia,
    sapm_parameters,
)

#: The columns of one daily row, in ``daily_inverter`` order (without device_pk, computation_id).
DAILY_COLUMNS: tuple[str, ...] = (
    "day", "n_intervals", "n_daylight", "n_valid", "e_ac_kwh", "h_poa_kwhm2", "e_ref_kwh",
    "e_ref_stc_kwh", "e_ref_tcell_kwhc", "e_exp_kwh", "e_ac_valid_kwh", "e_exp_valid_kwh", "pr",
    "pr_stc", "pi", "t_cell_wavg_c", "coverage", "day_valid", "t_daylight_h", "t_unavailable_h",
    "e_lost_kwh", "avail_time", "avail_energy", "t_clipped_h", "details_json", "e_ac_pr_kwh",
)
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


def _sum_by(day_idx: np.ndarray, values: np.ndarray, mask: np.ndarray, n_days: int) -> np.ndarray:
    w = np.where(mask & np.isfinite(values), values, 0.0)
    return np.bincount(day_idx, weights=w, minlength=n_days)


def _div(num: np.ndarray, den: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)


@functools.lru_cache(maxsize=4096)
def _details(counts: tuple[int, ...], n_modelled: int) -> str:
    d: dict = {"excluded": {r: int(counts[i]) for i, r in enumerate(flt.REASONS)
                            if i and counts[i]}}
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
    at least one interval, ``day`` as ``datetime.date``.

    Examples
    --------
    A 100 kWp inverter, one 1-h interval at 1000 W/m², 25 °C cell and 80 kWh:
    e_ref = 100 kWh, so pr = 0.8.
    """
    f = flt.resolve_filters(filters)
    n = len(frame)
    if n == 0:
        return pd.DataFrame({c: pd.Series([], dtype=object if c in ("day", "details_json")
                                          else bool if c == "day_valid" else float)
                             for c in DAILY_COLUMNS})
    idx = pd.DatetimeIndex(frame.index)
    if idx.tz is None:
        raise ValueError("frame index ts_utc must be tz-aware UTC")
    ts_s = idx.as_unit("s").asi8
    tau = _col(frame, "interval_h", n)
    if not np.isfinite(tau).all() or (tau <= 0).any():
        raise ValueError("interval_h must be a positive number for every row")
    p_in, e_in = _col(frame, "p_ac_kw", n), _col(frame, "e_ac_kwh", n)
    g = _col(frame, "poa_wm2", n)
    t_mod_meas = _col(frame, "t_module_c", n)
    t_amb, wind = _col(frame, "t_amb_c", n), _col(frame, "wind_ms", n)
    e = np.where(np.isfinite(e_in), e_in, p_in * tau)
    p = np.where(np.isfinite(p_in), p_in, e_in / tau)

    def aligned(x):
        if x is None:
            return None
        if isinstance(x, pd.Series):
            return x.reindex(idx).to_numpy(dtype=float)
        return np.broadcast_to(np.asarray(x, dtype=float), (n,))

    elev = aligned(solar_elevation_deg)
    if elev is None and latitude_deg is not None and longitude_deg is not None:
        elev = flt.solar_elevation_deg(idx, latitude_deg, longitude_deg, altitude_m,
                                       interval_h=tau).to_numpy()
    g_cs = aligned(poa_clearsky_wm2)

    # module temperature: measured, else modelled from ambient (Sandia Eq. 11, or Faiman)
    par = sapm_parameters(inverter.mounting)
    gpos = np.where(g < 0, 0.0, g)
    t_mod_sandia = module_temperature_sandia(gpos, t_amb, wind, a=par["a"], b=par["b"])
    t_faiman = cell_temperature_faiman(gpos, t_amb, 1.0)
    t_mod = np.where(np.isfinite(t_mod_meas), t_mod_meas,
                     np.where(np.isfinite(t_mod_sandia), t_mod_sandia, t_faiman))
    t_cell = np.where(np.isfinite(t_mod_meas) | np.isfinite(t_mod_sandia),
                      cell_temperature_from_module(t_mod, gpos, par["delta_t_c"]), t_faiman)
    p_exp = expected_ac_power(gpos, t_cell, inverter.p_dc_kwp, inverter.gamma_pmp_per_c,
                              inverter.p_ac_max_kw, inverter.eta_inv_nom)
    codes = flt.classify_intervals(g, t_mod, p, inverter.p_ac_max_kw, elev, t_amb, wind, f)

    # day index
    day_no = local_standard_day_number(ts_s, utc_offset_h)
    if n < 2 or (np.diff(day_no) >= 0).all():  # time order (the usual case): no sort needed
        step = np.concatenate(([True], day_no[1:] != day_no[:-1]))
        days, d = day_no[step], np.cumsum(step) - 1
    else:
        days, d = np.unique(day_no, return_inverse=True)
    nd = len(days)
    ones = np.ones(n, dtype=bool)
    any_reading = np.isfinite(p) | np.isfinite(g) | np.isfinite(t_mod_meas)
    sun_up = (elev >= f["night_elevation_deg"]) if elev is not None else (g >= f["night_poa_wm2"])
    g_ok = np.isfinite(g) & (g >= f["poa_range_min_wm2"]) & (g <= f["poa_range_max_wm2"])
    in_pr = g_ok & np.isfinite(e)
    valid = codes == flt.VALID
    p0 = inverter.p_dc_kwp
    e_ref_k = p0 * gpos / 1000.0 * tau
    has_t = np.isfinite(t_cell)
    c_k = 1.0 + inverter.gamma_pmp_per_c * (t_cell - 25.0)
    e_exp_k = p_exp * tau

    e_ac = _sum_by(d, e, ones, nd)
    e_ac_pr = _sum_by(d, e, in_pr, nd)
    h_poa = _sum_by(d, gpos * tau / 1000.0, in_pr, nd)
    e_ref = _sum_by(d, e_ref_k, in_pr, nd)
    e_ref_stc = _sum_by(d, c_k * e_ref_k, in_pr & has_t, nd)
    e_ref_t = _sum_by(d, e_ref_k, in_pr & has_t, nd)
    e_ref_tcell = _sum_by(d, t_cell * e_ref_k, in_pr & has_t, nd)
    e_exp = _sum_by(d, e_exp_k, sun_up & g_ok & has_t, nd)
    e_ac_valid = _sum_by(d, e, valid, nd)
    e_exp_valid = _sum_by(d, e_exp_k, valid, nd)
    n_int = np.bincount(d, weights=any_reading.astype(float), minlength=nd)
    n_day = np.bincount(d, weights=sun_up.astype(float), minlength=nd)
    n_val = np.bincount(d, weights=valid.astype(float), minlength=nd)
    # a day where e_ref_stc could not cover every PR interval (temperature missing) is partial
    stc_complete = np.isclose(e_ref_t, e_ref)
    pr = _div(e_ac_pr, e_ref)
    pr_stc = np.where(stc_complete, _div(e_ac_pr, e_ref_stc), np.nan)
    pi = _div(e_ac_valid, e_exp_valid)
    t_wavg = _div(e_ref_tcell, e_ref_t)

    w_cov = np.where(g_ok, gpos, g_cs if g_cs is not None else 0.0)
    w_cov = np.where(np.isfinite(w_cov), w_cov, 0.0) * tau
    cov_base = np.bincount(d, weights=np.where(sun_up, w_cov, 0.0), minlength=nd)
    cov = _div(np.bincount(d, weights=np.where(valid & sun_up, w_cov, 0.0), minlength=nd), cov_base)
    dvalid = (cov >= f["min_coverage"]) & np.isfinite(pi)

    base = (g >= f["outage_poa_wm2"]) & np.isfinite(p)
    unavail = unavailable_mask(p, g, inverter.p_ac_max_kw, f["outage_fraction"], f["outage_poa_wm2"])
    t_daylight = _sum_by(d, tau, base, nd)
    t_unav = _sum_by(d, tau, base & unavail, nd)
    e_lost = _sum_by(d, e_exp_k, base & unavail, nd)
    avail_t = np.where(t_daylight > 0, 1.0 - _div(t_unav, t_daylight), np.nan)
    e_base = _sum_by(d, e, base, nd)
    avail_e = _div(e_base, e_base + e_lost)
    t_clip = _sum_by(d, tau, flt.clipping_mask(p, inverter.p_ac_max_kw, f["clip_fraction"]), nd)

    nr = len(flt.REASONS)
    counts = np.bincount(d * nr + codes.astype(np.int64), minlength=nd * nr).reshape(nd, nr)
    modelled = ~np.isfinite(t_mod_meas) & np.isfinite(t_cell)
    n_mod = np.bincount(d, weights=modelled.astype(float), minlength=nd).astype(int)
    details = [_details(tuple(c), m) for c, m in zip(counts.tolist(), n_mod.tolist(), strict=True)]
    nan_if_empty = lambda x, present: np.where(present > 0, x, np.nan)  # noqa: E731
    n_pr = np.bincount(d, weights=in_pr.astype(float), minlength=nd)
    out = pd.DataFrame({
        "day": [_EPOCH_DAY + dt.timedelta(days=int(k)) for k in days],
        "n_intervals": n_int.astype(int), "n_daylight": n_day.astype(int),
        "n_valid": n_val.astype(int),
        "e_ac_kwh": nan_if_empty(e_ac, np.bincount(d, weights=np.isfinite(e), minlength=nd)),
        "h_poa_kwhm2": nan_if_empty(h_poa, n_pr), "e_ref_kwh": nan_if_empty(e_ref, n_pr),
        "e_ref_stc_kwh": np.where(stc_complete & (n_pr > 0), e_ref_stc, np.nan),
        "e_ref_tcell_kwhc": np.where(stc_complete & (n_pr > 0), e_ref_tcell, np.nan),
        "e_exp_kwh": e_exp, "e_ac_valid_kwh": e_ac_valid, "e_exp_valid_kwh": e_exp_valid,
        "pr": pr, "pr_stc": pr_stc, "pi": pi, "t_cell_wavg_c": t_wavg, "coverage": cov,
        "day_valid": dvalid, "t_daylight_h": t_daylight, "t_unavailable_h": t_unav,
        "e_lost_kwh": e_lost, "avail_time": avail_t, "avail_energy": avail_e,
        "t_clipped_h": t_clip, "details_json": details,
        "e_ac_pr_kwh": nan_if_empty(e_ac_pr, n_pr),
    })
    return out[list(DAILY_COLUMNS)]
