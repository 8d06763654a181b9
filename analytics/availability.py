"""Inverter availability, time-based and energy-based (IEC 61724-1:2021; IEC TS 63019:2019 categories).

Definitions (common practice; the 50 W/m² base and 1 % threshold have no single published source):

* **daylight base**: intervals with POA G >= 50 W/m² *and* a power reading. Intervals
  with no power reading are "information unavailable" in IEC TS 63019:2019 and are left out
  of numerator and denominator (they are counted separately as missing data, which
  IEC 61724-1 asks to report).
* **unavailable** interval: P_ac <= 1 % of the AC rating while G >= 50 W/m². We cannot tell
  from SCADA power alone which IEC TS 63019 category applies (forced outage, scheduled
  maintenance, grid/curtailment outside the plant's control, force majeure); all count as
  unavailable here, and an operator's log is needed to reassign them.
* time-based availability A_t = 1 - t_unavailable / t_daylight;
* energy-based availability A_E = E_meas / (E_meas + E_lost), with
  E_lost = Σ P_ac,exp τ over unavailable intervals (expected power from :mod:`analytics.power`).
"""

from __future__ import annotations

import numpy as np

from analytics.temperature import _arr, _restore_type


def _bool_like(mask, *inputs):
    out = _restore_type(mask.astype(float), *inputs)
    if hasattr(out, "astype"):
        return out.astype(bool)
    return bool(out)


def daylight_mask(poa_wm2, poa_min_wm2: float = 50.0):
    """True where G >= ``poa_min_wm2`` (availability base, common practice). NaN -> False.

    Examples
    --------
    >>> daylight_mask([0.0, 49.0, 50.0, float("nan")]).tolist()
    [False, False, True, False]
    """
    return _bool_like(_arr(poa_wm2) >= poa_min_wm2, poa_wm2)


def unavailable_mask(p_ac_kw, poa_wm2, p_ac_max_kw: float, outage_fraction: float = 0.01,
                     poa_min_wm2: float = 50.0):
    """True where the inverter is out: P_ac <= ``outage_fraction`` · P_ac,max while G >= 50 W/m².

    Missing power or irradiance gives False (information unavailable, not an outage).

    Examples
    --------
    >>> unavailable_mask([0.0, 0.0, 50.0], [0.0, 600.0, 600.0], 100.0).tolist()
    [False, True, False]
    """
    m = (_arr(p_ac_kw) <= outage_fraction * p_ac_max_kw) & (_arr(poa_wm2) >= poa_min_wm2)
    return _bool_like(m, p_ac_kw, poa_wm2)


def availability_time(unavailable, daylight, interval_h=1.0) -> float:
    """Time-based availability A_t = 1 - Σ τ (unavailable) / Σ τ (daylight) (IEC TS 63019:2019 time-based availability). [fraction]

    ``daylight`` is the base (G >= 50 W/m² with a power reading); unavailable intervals
    outside it are ignored. NaN when the base is empty.

    Examples
    --------
    >>> availability_time([True, False, False, False], [True, True, True, True], 0.25)
    0.75
    """
    u, d, tau = np.broadcast_arrays(_arr(unavailable) > 0, _arr(daylight) > 0, _arr(interval_h))
    base = tau[d].sum()
    return float(1.0 - tau[d & u].sum() / base) if base > 0 else float("nan")


def lost_energy_kwh(p_ac_exp_kw, interval_h, unavailable) -> float:
    """E_lost = Σ P_ac,exp τ over unavailable intervals (IEC TS 63019:2019 energy-based availability). [kWh]

    Examples
    --------
    >>> lost_energy_kwh([80.0, 80.0], 0.25, [True, False])
    20.0
    """
    p, tau, u = np.broadcast_arrays(_arr(p_ac_exp_kw), _arr(interval_h), _arr(unavailable) > 0)
    ok = u & np.isfinite(p) & np.isfinite(tau)
    return float((p[ok] * tau[ok]).sum())


def availability_energy(e_ac_kwh, e_lost_kwh):
    """Energy-based availability A_E = E / (E + E_lost), elementwise (IEC TS 63019:2019). [fraction]

    NaN when E + E_lost <= 0 (no production expected).

    Examples
    --------
    >>> availability_energy(380.0, 20.0)
    0.95
    """
    e, lost = _arr(e_ac_kwh), _arr(e_lost_kwh)
    tot = e + lost
    with np.errstate(divide="ignore", invalid="ignore"):
        a = np.where(tot > 0, e / np.where(tot > 0, tot, 1.0), np.nan)
    return _restore_type(a, e_ac_kwh, e_lost_kwh)


def stopped_reporting_flags(last_seen_s: dict, site_last_s: int, *, min_days: float = 3.0,
                            kinds: dict | None = None, interval_s: int = 900) -> list[dict]:
    """Devices with no data while the rest of the site still reports: an open flag each.

    A device whose last reading is more than ``min_days`` days before the site's last
    reading (any device) has stopped reporting (a failed logger input, a replaced inverter
    never re-mapped, a system whose data ended). The flag runs from the interval after its
    last reading to the end of the site's data and stays open (``ongoing``) while the
    condition holds; the details say "no data since …". Three days is common practice:
    long enough to pass a weekend logger restart, short enough for a weekly check.

    Parameters
    ----------
    last_seen_s : dict
        device_id -> UTC epoch seconds of its last interval start with a reading.
    site_last_s : int
        The site's last interval start with any reading. [s]
    kinds : dict, optional
        device_id -> 'inverter' or a sensor quantity (inverters get 'alarm', sensors
        'warning').

    Returns
    -------
    list of flag dicts (kind 'stopped_reporting').

    Examples
    --------
    >>> f = stopped_reporting_flags({"inv1": 0, "inv2": 10 * 86400}, 10 * 86400)
    >>> [(r["device_id"], r["details"]["days_silent"]) for r in f]
    [('inv1', 10.0)]
    """
    import datetime as _dt

    kinds = kinds or {}
    out = []
    for dev, last in sorted(last_seen_s.items()):
        silent = (int(site_last_s) - int(last)) / 86400.0
        if silent <= min_days:
            continue
        since = _dt.datetime.fromtimestamp(int(last) + interval_s, tz=_dt.UTC)
        is_inv = kinds.get(dev, "inverter") == "inverter"
        out.append(dict(
            device_id=dev, kind="stopped_reporting", start_s=int(last) + int(interval_s),
            end_s=int(site_last_s) + int(interval_s), severity="alarm" if is_inv else "warning",
            lost_kwh=np.nan,
            details=dict(no_data_since=since.strftime("%Y-%m-%d %H:%M UTC"),
                         days_silent=round(silent, 2), ongoing=True,
                         quantity=kinds.get(dev, "inverter"),
                         rule=f"no reading for more than {min_days:g} days while other "
                              "devices of the site report",
                         note="check the device's communication and the logger mapping "
                              "before assuming a production loss")))
    return out
