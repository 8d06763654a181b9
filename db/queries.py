"""Read queries for the dashboard (issue #6): small named functions returning DataFrames.

Only ``db/`` writes SQL; the dashboard's pages call these through :mod:`dashboard.data`.
Each query reads only the rows a page shows (one site, one date window), so a 100-inverter,
5-year store answers the weekly check in well under a second (``tests/bench/bench_dashboard.py``).

Days are calendar days in the site's local standard time (DEVELOPERS.md "Days"); windows in
seconds are ``[start_s, end_s)`` on ``ts_s`` (interval start, UTC epoch seconds).
"""

from __future__ import annotations

import datetime as dt
import json

import numpy as np
import pandas as pd
import sqlalchemy as sa

from db import readings
from db import schema as s
from db.flags import READ_COLUMNS, read_flags

# ---------------------------------------------------------------- plant


def sites(engine: sa.Engine) -> pd.DataFrame:
    """Every site: ``site_id, name, owner, timezone, latitude_deg, longitude_deg, n_inverters``."""
    n_inv = (sa.select(s.device.c.site_id, sa.func.count().label("n_inverters"))
             .where(s.device.c.kind == "inverter").group_by(s.device.c.site_id).subquery())
    q = (sa.select(s.site.c.site_id, s.site.c.name, s.site.c.owner, s.site.c.timezone,
                   s.site.c.latitude_deg, s.site.c.longitude_deg,
                   sa.func.coalesce(n_inv.c.n_inverters, 0).label("n_inverters"))
         .select_from(s.site.outerjoin(n_inv, n_inv.c.site_id == s.site.c.site_id))
         .order_by(s.site.c.site_id))
    return _frame(engine, q)


def site_config_toml(engine: sa.Engine, site_id: str) -> str | None:
    """The site's configuration file as last loaded (TOML text), or None."""
    with engine.connect() as conn:
        return conn.execute(sa.select(s.site.c.config_toml)
                            .where(s.site.c.site_id == site_id)).scalar()


def inverters(engine: sa.Engine, site_id: str) -> pd.DataFrame:
    """The site's inverters with their ratings, sensors and peer group, ordered by id."""
    i = s.inverter.c
    q = (sa.select(s.device.c.device_pk, s.device.c.device_id, i.p_dc_kwp, i.p_ac_max_kw,
                   i.gamma_pmp_per_c, i.eta_inv_nom, i.mounting, i.commissioned,
                   i.poa_sensor_id, i.t_module_sensor_id, i.t_amb_sensor_id, i.wind_sensor_id,
                   i.peer_group)
         .select_from(s.device.join(s.inverter, s.inverter.c.device_pk == s.device.c.device_pk))
         .where(s.device.c.site_id == site_id).order_by(s.device.c.device_id))
    return _frame(engine, q)


def sensor_quantities(conn: sa.Connection, site_id: str) -> list[tuple[str, str]]:
    """``(sensor device_id, quantity)`` of the site's sensors, by device id."""
    d, sn = s.device, s.sensor
    q = (sa.select(d.c.device_id, sn.c.quantity).join(sn, sn.c.device_pk == d.c.device_pk)
         .where(d.c.site_id == site_id).order_by(d.c.device_id))
    return [(r.device_id, r.quantity) for r in conn.execute(q)]


def devices(engine: sa.Engine, site_id: str) -> pd.DataFrame:
    """Every device of a site: ``device_pk, device_id, kind, quantity, instrument``
    (quantity/instrument are set for sensors only)."""
    q = (sa.select(s.device.c.device_pk, s.device.c.device_id, s.device.c.kind,
                   s.sensor.c.quantity, s.sensor.c.instrument)
         .select_from(s.device.outerjoin(s.sensor, s.sensor.c.device_pk == s.device.c.device_pk))
         .where(s.device.c.site_id == site_id).order_by(s.device.c.kind, s.device.c.device_id))
    return _frame(engine, q)


# ---------------------------------------------------------------- daily table


def daily_span(engine: sa.Engine, site_id: str) -> tuple[dt.date | None, dt.date | None]:
    """First and last day in ``daily_inverter`` for the site (None, None when empty)."""
    d = s.daily_inverter.c
    q = (sa.select(sa.func.min(d.day), sa.func.max(d.day))
         .select_from(s.daily_inverter.join(s.device, s.device.c.device_pk == d.device_pk))
         .where(s.device.c.site_id == site_id))
    with engine.connect() as conn:
        lo, hi = conn.execute(q).one()
    return _as_date(lo), _as_date(hi)


DAILY_COLUMNS = ("e_ac_kwh", "e_ac_pr_kwh", "e_ref_kwh", "e_ref_stc_kwh", "e_exp_kwh", "e_ac_valid_kwh",
                 "e_exp_valid_kwh", "h_poa_kwhm2", "pr", "pr_stc", "pi", "t_cell_wavg_c",
                 "coverage", "day_valid", "t_daylight_h", "t_unavailable_h", "e_lost_kwh",
                 "avail_time", "avail_energy", "n_intervals", "n_daylight", "n_valid")


def daily_rows(engine: sa.Engine, site_id: str, start: dt.date | None = None,
               end: dt.date | None = None, columns: tuple[str, ...] = DAILY_COLUMNS,
               device_ids: list[str] | None = None) -> pd.DataFrame:
    """``daily_inverter`` rows of a site in ``[start, end]`` (days, inclusive), long format
    with ``device_id`` and ``day`` (datetime.date) first; only the named columns are read."""
    d = s.daily_inverter.c
    # the day as stored (ISO text on SQLite, a date on PostgreSQL): parsed below in one
    # vectorised call instead of one Python date object per row by the Date type
    cols = [s.device.c.device_id, sa.type_coerce(d.day, sa.String).label("day")] + [
        d[c] for c in columns]
    q = (sa.select(*cols)
         .select_from(s.daily_inverter.join(s.device, s.device.c.device_pk == d.device_pk))
         .where(s.device.c.site_id == site_id))
    if start is not None:
        q = q.where(d.day >= start)
    if end is not None:
        q = q.where(d.day <= end)
    if device_ids is not None:
        q = q.where(s.device.c.device_id.in_(list(device_ids)))
    out = _frame(engine, q.order_by(s.device.c.device_id, d.day), raw=True)
    out["day"] = pd.to_datetime(out["day"].astype(str), format="%Y-%m-%d").dt.date
    if "day_valid" in out:
        out["day_valid"] = out["day_valid"].fillna(False).astype(bool)
    return out


def _period_sum_columns() -> list:
    """The aggregates of :func:`period_sums` and :func:`portfolio_sums`: day counts, energy
    and daylight/unavailable hours over all days; the PR numerator and denominators over the
    valid days only (IEC 61724-1: both sides of a ratio over the same days)."""
    d = s.daily_inverter.c
    valid = d.day_valid.is_(True)

    def vsum(col):
        return sa.func.sum(sa.case((valid, col), else_=None))

    return [sa.func.count().label("n_days"),
            sa.func.sum(sa.case((valid, 1), else_=0)).label("n_days_valid"),
            sa.func.sum(d.e_ac_kwh).label("e_ac_kwh"),
            vsum(sa.func.coalesce(d.e_ac_pr_kwh, d.e_ac_kwh)).label("e_ac_pr_kwh"),
            vsum(d.e_ref_kwh).label("e_ref_kwh"),
            vsum(d.e_ref_stc_kwh).label("e_ref_stc_kwh"),
            sa.func.sum(d.e_lost_kwh).label("e_lost_kwh"),
            sa.func.sum(d.t_daylight_h).label("t_daylight_h"),
            sa.func.sum(d.t_unavailable_h).label("t_unavailable_h")]


def period_sums(engine: sa.Engine, site_id: str, start: dt.date, end: dt.date) -> pd.DataFrame:
    """Per inverter, sums over the days ``[start, end]`` from which any period KPI is a ratio
    of sums (IEC 61724-1: PR over a period is Σ energy / Σ reference energy, not a mean of
    daily ratios).

    Columns: ``device_id, n_days, n_days_valid, e_ac_kwh`` (all days), ``e_ac_pr_kwh,
    e_ref_kwh, e_ref_stc_kwh`` (valid days only, numerator and denominator together),
    ``e_lost_kwh, t_daylight_h, t_unavailable_h`` (all days).
    """
    d = s.daily_inverter.c
    q = (sa.select(s.device.c.device_id, *_period_sum_columns())
         .select_from(s.daily_inverter.join(s.device, s.device.c.device_pk == d.device_pk))
         .where(s.device.c.site_id == site_id, d.day >= start, d.day <= end)
         .group_by(s.device.c.device_id).order_by(s.device.c.device_id))
    return _frame(engine, q)


# ---------------------------------------------------------------- portfolio (#16)


def portfolio_sums(engine: sa.Engine, start: dt.date, end: dt.date) -> pd.DataFrame:
    """Per site, the sums of :func:`period_sums` over the local days ``[start, end]`` of all
    its inverters, in one statement for the whole store (a portfolio page reads every site).

    Columns: ``site_id, n_inverters_reporting, n_days, n_days_valid, e_ac_kwh, e_ac_pr_kwh,
    e_ref_kwh, e_ref_stc_kwh, e_lost_kwh, t_daylight_h, t_unavailable_h``.
    """
    d = s.daily_inverter.c
    q = (sa.select(s.device.c.site_id,
                   sa.func.count(sa.distinct(d.device_pk)).label("n_inverters_reporting"),
                   *_period_sum_columns())
         .select_from(s.daily_inverter.join(s.device, s.device.c.device_pk == d.device_pk))
         .where(d.day >= start, d.day <= end)
         .group_by(s.device.c.site_id).order_by(s.device.c.site_id))
    return _frame(engine, q)


def portfolio_spans(engine: sa.Engine) -> pd.DataFrame:
    """Per site: ``site_id, first_day, last_day`` of its daily table and ``p_dc_kwp`` (the
    sum of its inverters' DC ratings); sites without daily rows have no days."""
    d = s.daily_inverter.c
    days = (sa.select(s.device.c.site_id, sa.func.min(d.day).label("first_day"),
                      sa.func.max(d.day).label("last_day"))
            .select_from(s.daily_inverter.join(s.device, s.device.c.device_pk == d.device_pk))
            .group_by(s.device.c.site_id).subquery())
    kwp = (sa.select(s.device.c.site_id, sa.func.sum(s.inverter.c.p_dc_kwp).label("p_dc_kwp"))
           .select_from(s.device.join(s.inverter, s.inverter.c.device_pk == s.device.c.device_pk))
           .group_by(s.device.c.site_id).subquery())
    q = (sa.select(s.site.c.site_id, days.c.first_day, days.c.last_day, kwp.c.p_dc_kwp)
         .select_from(s.site.outerjoin(days, days.c.site_id == s.site.c.site_id)
                      .outerjoin(kwp, kwp.c.site_id == s.site.c.site_id))
         .order_by(s.site.c.site_id))
    out = _frame(engine, q)
    for c in ("first_day", "last_day"):
        out[c] = [_as_date(x) for x in out[c]]
    out["p_dc_kwp"] = pd.to_numeric(out["p_dc_kwp"], errors="coerce").astype("float64")
    return out


def portfolio_site_rates(engine: sa.Engine, device_id: str, method: str) -> pd.DataFrame:
    """The degradation row ``(device_id, method)`` of every site that has one (the site-level
    recommended rate: device ``"(site)"``, method ``"recommended"``): ``site_id,
    rate_pct_per_yr, ci_low, ci_high, details`` (dict)."""
    t = s.degradation_result.c
    q = (sa.select(t.site_id, t.rate_pct_per_yr, t.ci_low, t.ci_high, t.details_json)
         .where(t.device_id == device_id, t.method == method).order_by(t.site_id))
    out = _frame(engine, q)
    for c in ("rate_pct_per_yr", "ci_low", "ci_high"):
        out[c] = pd.to_numeric(out[c], errors="coerce").astype("float64")
    out["details"] = [_json(x) for x in out.pop("details_json")]
    return out


# ---------------------------------------------------------------- flags

FLAG_COLUMNS = READ_COLUMNS


def flags_overlapping(engine: sa.Engine, site_id: str, start_s: int | None = None,
                      end_s: int | None = None, device_ids: list[str] | None = None,
                      kinds: list[str] | None = None,
                      include_site_wide: bool = False) -> pd.DataFrame:
    """Flags of a site whose span ``[start_s, end_s)`` overlaps the window
    (:func:`db.flags.read_flags`), newest first; ``device_ids`` limits the devices, and
    ``include_site_wide`` adds the flags without a device."""
    fl = read_flags(engine, site_id, start_s=start_s, end_s=end_s)
    if device_ids is not None:
        keep = fl["device_id"].isin(list(device_ids))
        fl = fl[keep | fl["device_id"].isna()] if include_site_wide else fl[keep]
    if kinds is not None:
        fl = fl[fl["kind"].isin(list(kinds))]
    return fl.sort_values(["start_s", "flag_id"], ascending=False).reset_index(drop=True)


def flag_by_id(engine: sa.Engine, flag_id: int) -> dict | None:
    """One flag as a dict (``details`` parsed from JSON), or None when there is no such id."""
    f = s.flag.c
    with engine.connect() as conn:
        row = conn.execute(sa.select(*[f[c] for c in FLAG_COLUMNS])
                           .where(f.flag_id == int(flag_id))).mappings().first()
    if row is None:
        return None
    out = dict(row)
    out["details"] = _json(out.pop("details_json"))
    return out


# ---------------------------------------------------------------- interval readings


def channel_readings(engine: sa.Engine, site_id: str, device_ids: list[str],
                     quantities: list[str], start_s: int, end_s: int) -> pd.DataFrame:
    """Long frame ``device_id, quantity, ts_s, value`` for the named devices and quantities in
    ``[start_s, end_s)``: one statement (a range scan per channel on the ``(channel_id,
    ts_s)`` key) read straight into numpy."""
    ch = (sa.select(s.channel.c.channel_id, s.device.c.device_id, s.channel.c.quantity)
          .select_from(s.channel.join(s.device, s.device.c.device_pk == s.channel.c.device_pk))
          .where(s.device.c.site_id == site_id, s.device.c.device_id.in_(list(device_ids)),
                 s.channel.c.quantity.in_(list(quantities)),
                 s.channel.c.input_id == "")  # whole-device channels, not inverter inputs
          .order_by(s.device.c.device_id, s.channel.c.quantity))
    with engine.connect() as conn:
        chans = conn.execute(ch).all()
        names = {c.channel_id: (c.device_id, c.quantity) for c in chans}
        arr = _read_channels(conn, list(names), int(start_s), int(end_s))
    keys = np.array(sorted(names), dtype=np.int64)
    pos = np.searchsorted(keys, arr["channel_id"])  # row -> its channel's place in keys
    dev = np.array([names[k][0] for k in keys], dtype=object)[pos]
    qty = np.array([names[k][1] for k in keys], dtype=object)[pos]
    # one frame from whole columns (object ids: no per-row string inference)
    return pd.DataFrame({"device_id": pd.Series(dev, dtype=object),
                         "quantity": pd.Series(qty, dtype=object),
                         "ts_s": arr["ts_s"].astype("int64"), "value": arr["value"]})


_ROWS = np.dtype([("channel_id", "i8"), ("ts_s", "i8"), ("value", "f8")])


def _read_channels(conn: sa.Connection, channel_ids: list[int], start_s: int,
                   end_s: int) -> np.ndarray:
    """Readings of several channels as a structured array (``channel_id, ts_s, value``), in
    key order (:func:`db.readings.read_many`)."""
    got = readings.read_many(conn, channel_ids, start_s, end_s)
    arr = np.zeros(got["ts_s"].size, dtype=_ROWS)
    arr["channel_id"], arr["ts_s"], arr["value"] = got["channel_id"], got["ts_s"], got["value"]
    return arr


def daily_reading_counts(engine: sa.Engine, site_id: str, start_s: int, end_s: int,
                         offset_s: int, kinds: tuple[str, ...] = ("sensor",)) -> pd.DataFrame:
    """Readings per device, quantity and local-standard day in ``[start_s, end_s)``.

    ``offset_s`` is the site's standard-time UTC offset (seconds east); the day number is
    ``floor((ts_s + offset_s) / 86400)``. Columns: ``device_id, quantity, day, n``.
    """
    ch, dv = s.channel.c, s.device.c
    q = (sa.select(ch.channel_id, dv.device_id, ch.quantity)
         .select_from(s.channel.join(s.device, dv.device_pk == ch.device_pk))
         .where(dv.site_id == site_id, dv.kind.in_(list(kinds))))
    epoch = dt.date(1970, 1, 1)
    out = []
    with engine.connect() as conn:
        chans = conn.execute(q).all()
        counts = readings.daily_counts(conn, [c.channel_id for c in chans], int(start_s),
                                       int(end_s), int(offset_s))
    for c in chans:
        for day_no, n in zip(*(x.tolist() for x in counts.get(c.channel_id, ([], []))),
                             strict=True):
            out.append((c.device_id, c.quantity, epoch + dt.timedelta(days=int(day_no)), int(n)))
    # one row per device, quantity and day (several channels of one device and quantity,
    # e.g. inverter inputs, are summed as the SQL GROUP BY did)
    frame = pd.DataFrame(out, columns=["device_id", "quantity", "day", "n"])
    if frame.empty:
        return frame
    return frame.groupby(["device_id", "quantity", "day"], as_index=False, sort=False)["n"].sum()


# ---------------------------------------------------------------- helpers


def _frame(engine: sa.Engine, q, raw: bool = False) -> pd.DataFrame:
    """Run ``q`` and return its rows as a DataFrame. ``raw`` fetches from the DBAPI cursor
    without SQLAlchemy's per-value result processing (for large reads whose columns the
    caller converts itself: dates arrive as stored, booleans as 0/1 on SQLite)."""
    with engine.connect() as conn:
        res = conn.execute(q)
        keys = list(res.keys())
        rows = res.cursor.fetchall() if raw else res.all()
    # column-wise from plain tuples: pandas inspects Row objects one by one (10x slower)
    cols = list(zip(*rows, strict=True)) if rows else [()] * len(keys)
    return pd.DataFrame({k: pd.Series(v, dtype=object if not v else None)
                         for k, v in zip(keys, cols, strict=True)}, columns=keys)


def _json(text: str | None):
    if not text:
        return {}
    try:
        return json.loads(text)
    except ValueError:
        return {"_unparsed": text}


def _as_date(x) -> dt.date | None:
    if x is None:
        return None
    if isinstance(x, dt.datetime):
        return x.date()
    if isinstance(x, dt.date):
        return x
    return dt.date.fromisoformat(str(x)[:10])
