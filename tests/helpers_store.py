"""Build small stores for tests by inserting rows directly with SQLAlchemy Core.

For tests that need sites, devices, channels and readings without going through ingest:

    engine = make_store(tmp_path)
    with engine.begin() as conn:
        add_site(conn, "s1", timezone="Europe/Madrid")
        poa = add_sensor(conn, "s1", "poa1", "poa_wm2", instrument="reference_cell")
        tmod = add_sensor(conn, "s1", "tmod1", "t_module_c")
        inv = add_inverter(conn, "s1", "inv1", poa_sensor_id="poa1", t_module_sensor_id="tmod1")
        add_readings(conn, poa, ts_s, values)
        add_readings(conn, inv["p_ac_kw"], ts_s, p)

``add_sensor`` returns the sensor's channel id; ``add_inverter`` returns
``{quantity: channel_id}`` for its channels (default ``p_ac_kw``).
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import sqlalchemy as sa

from db import readings, schema
from db.engine import make_engine


def make_store(tmp_path, name: str = "store.sqlite") -> sa.Engine:
    """A fresh SQLite store with the current schema in ``tmp_path``."""
    return make_engine(tmp_path / name)


def add_site(conn: sa.Connection, site_id: str = "s1", *, timezone: str = "UTC",
             latitude_deg: float = 40.0, longitude_deg: float = -3.7, altitude_m: float = 650.0,
             tilt_deg: float = 30.0, azimuth_deg: float = 180.0, albedo: float = 0.2,
             config_toml: str = "", name: str | None = None) -> None:
    """Insert a site row; ``config_toml`` may carry a ``[filters]`` table."""
    conn.execute(schema.site.insert().values(
        site_id=site_id, name=name or site_id, owner="", timezone=timezone,
        latitude_deg=latitude_deg, longitude_deg=longitude_deg, altitude_m=altitude_m,
        tilt_deg=tilt_deg, azimuth_deg=azimuth_deg, albedo=albedo, config_toml=config_toml,
        config_sha256="0" * 64, updated_utc="2026-01-01T00:00:00+00:00"))


def _device(conn: sa.Connection, site_id: str, device_id: str, kind: str) -> int:
    return conn.execute(schema.device.insert().values(
        site_id=site_id, device_id=device_id, kind=kind)).inserted_primary_key[0]


def add_channel(conn: sa.Connection, device_pk: int, quantity: str) -> int:
    return conn.execute(schema.channel.insert().values(
        device_pk=device_pk, quantity=quantity)).inserted_primary_key[0]


def add_sensor(conn: sa.Connection, site_id: str, device_id: str, quantity: str,
               instrument: str | None = None) -> int:
    """Insert a sensor device with one channel; return the channel id."""
    pk = _device(conn, site_id, device_id, "sensor")
    conn.execute(schema.sensor.insert().values(device_pk=pk, quantity=quantity,
                                               instrument=instrument))
    return add_channel(conn, pk, quantity)


def add_inverter(conn: sa.Connection, site_id: str, device_id: str, *, poa_sensor_id: str,
                 t_module_sensor_id: str, p_dc_kwp: float = 100.0, p_ac_max_kw: float = 90.0,
                 gamma_pmp_per_c: float = -0.004, eta_inv_nom: float = 0.96,
                 mounting: str = "open_rack_glass_polymer",
                 commissioned: dt.date = dt.date(2020, 1, 1), t_amb_sensor_id: str | None = None,
                 wind_sensor_id: str | None = None, peer_group: str = "site",
                 quantities: tuple[str, ...] = ("p_ac_kw",)) -> dict[str, int]:
    """Insert an inverter device, its inverter row and channels; return ``{quantity: channel_id}``."""
    pk = _device(conn, site_id, device_id, "inverter")
    conn.execute(schema.inverter.insert().values(
        device_pk=pk, p_dc_kwp=p_dc_kwp, p_ac_max_kw=p_ac_max_kw,
        gamma_pmp_per_c=gamma_pmp_per_c, eta_inv_nom=eta_inv_nom, mounting=mounting,
        commissioned=commissioned, poa_sensor_id=poa_sensor_id,
        t_module_sensor_id=t_module_sensor_id, t_amb_sensor_id=t_amb_sensor_id,
        wind_sensor_id=wind_sensor_id, peer_group=peer_group))
    return {q: add_channel(conn, pk, q) for q in quantities}


def add_readings(conn: sa.Connection, channel_id: int, ts_s, values, batch_id: int = 0) -> int:
    """Insert readings (NaN values are skipped, as ingest stores no row for a missing value)."""
    ts = np.asarray(ts_s, dtype=np.int64)
    v = np.asarray(values, dtype=float)
    ok = np.isfinite(v)
    # no interval recorded (as readings stored before schema v4): the reader infers it
    return readings.write_readings(conn, np.full(int(ok.sum()), int(channel_id)), ts[ok], v[ok],
                                   batch_id)


def stored_readings(engine_or_conn, site_id: str | None = None, device_id: str | None = None,
                    quantity: str | None = None):
    """Every stored reading (of a site / device / quantity) as a DataFrame ``channel_id,
    device_id, quantity, ts_s, value, batch_id, interval_s`` in (quantity, device, ts) order,
    read through the store's own read path (db.readings)."""
    import pandas as pd

    if isinstance(engine_or_conn, sa.Engine):
        with engine_or_conn.connect() as conn:
            return stored_readings(conn, site_id, device_id, quantity)
    conn = engine_or_conn
    d, c = schema.device, schema.channel
    q = sa.select(c.c.channel_id, d.c.device_id, c.c.quantity).join(d, d.c.device_pk == c.c.device_pk)
    if site_id is not None:
        q = q.where(d.c.site_id == site_id)
    if device_id is not None:
        q = q.where(d.c.device_id == device_id)
    if quantity is not None:
        q = q.where(c.c.quantity == quantity)
    names = {r.channel_id: (r.device_id, r.quantity) for r in conn.execute(q)}
    got = readings.read_many(conn, list(names), batches=True)
    out = pd.DataFrame({"channel_id": got["channel_id"],
                        "device_id": [names[x][0] for x in got["channel_id"].tolist()],
                        "quantity": [names[x][1] for x in got["channel_id"].tolist()],
                        "ts_s": got["ts_s"], "value": got["value"], "batch_id": got["batch_id"],
                        "interval_s": got["interval_s"]})
    return out.sort_values(["quantity", "device_id", "ts_s"], kind="stable").reset_index(drop=True)


def readings_to_old_layout(conn: sa.Connection, *, interval: bool = True) -> int:
    """Turn the store's readings back into the one-row-per-reading table ``reading`` of schema
    versions 1-5 (``interval_s`` from v4 on: ``interval=False`` for an older store) and drop
    ``reading_day``: a fixture for the forward migrations. Returns the readings moved."""
    chans = conn.execute(sa.select(schema.reading_day.c.channel_id).distinct()).scalars().all()
    got = readings.read_many(conn, chans, batches=True)
    iv_col = ", interval_s INTEGER" if interval else ""
    conn.execute(sa.text(
        "CREATE TABLE reading (channel_id INTEGER NOT NULL, ts_s BIGINT NOT NULL, "
        f"value FLOAT NOT NULL, batch_id INTEGER NOT NULL{iv_col}, "
        "PRIMARY KEY (channel_id, ts_s))" + (" WITHOUT ROWID" if conn.dialect.name == "sqlite"
                                             else "")))
    rows = [{"c": c, "t": t, "v": v, "b": b, "i": None if i != i else int(i)} for c, t, v, b, i in zip(
        got["channel_id"].tolist(), got["ts_s"].tolist(), got["value"].tolist(),
        got["batch_id"].tolist(), got["interval_s"].tolist(), strict=True)]
    if rows:
        conn.execute(sa.text(
            "INSERT INTO reading (channel_id, ts_s, value, batch_id"
            + (", interval_s) VALUES (:c, :t, :v, :b, :i)" if interval else ") VALUES (:c, :t, :v, :b)")),
            rows)
    conn.execute(sa.text("DROP TABLE reading_day"))
    return len(rows)


def clearsky_poa_15min(start: pd.Timestamp, n_days: int, lat: float, lon: float, alt: float,
                       tilt: float, azimuth: float) -> tuple[pd.DatetimeIndex, np.ndarray]:
    """15-minute interval starts from ``start`` and pvlib's clear-sky POA at their midpoints
    (Ineichen clear sky, isotropic transposition; NaN at night as pvlib gives it) [W/m²]:
    the invented sunshine of the store-level tests."""
    import pvlib

    ts = pd.date_range(start, periods=n_days * 96, freq="15min")
    mid = ts + pd.Timedelta(minutes=7.5)
    loc = pvlib.location.Location(lat, lon, "UTC", alt)
    sp = loc.get_solarposition(mid)
    cs = loc.get_clearsky(mid, model="ineichen", solar_position=sp)
    poa = pvlib.irradiance.get_total_irradiance(tilt, azimuth, sp["apparent_zenith"],
                                                sp["azimuth"], cs["dni"], cs["ghi"], cs["dhi"],
                                                model="isotropic")["poa_global"].to_numpy()
    return ts, poa
