"""Sites, devices and channels from a site configuration (``register_site``), and channel lookup.

Registering is idempotent: the site row is inserted or updated (with the TOML text and its
SHA-256), devices and their inverter/sensor rows are inserted or updated, channels are added
for every quantity the config's sources deliver. Devices and channels are never deleted here:
readings keep their channel when a device leaves the config.
"""

from __future__ import annotations

import sqlalchemy as sa

from db import runcache, schema
from db.computations import now_utc
from db.engine import write_lock
from ingest.config import INVERTER_QUANTITIES, SiteConfig

DERIVED = {"e_ac_total_kwh": "e_ac_kwh"}  # counter quantity -> the quantity ingest derives


def channel_specs(cfg: SiteConfig) -> dict[str, dict[tuple[str, str], str]]:
    """device_id -> {(quantity, input_id): sampling} of every channel the config delivers.

    ``input_id`` is "" for whole-device channels; ``sampling`` is "mean" or "instant" (the
    first column delivering the channel decides; a derived channel is "mean")."""
    out: dict[str, dict[tuple[str, str], str]] = {
        d: {(q, ""): "mean" for q in sorted(qs)} for d, qs in channel_quantities(cfg).items()}
    for src in cfg.sources:
        for c in src.columns:
            inp = getattr(c, "input", "") or ""
            key = (c.quantity, inp)
            sampling = getattr(c, "sampling", "mean") or "mean"
            if inp and key not in out[c.device]:
                out[c.device][key] = sampling
            elif sampling != "mean":
                out[c.device][key] = sampling
        inv_ids = {i.id for i in cfg.inverters}
        inputs = getattr(src, "quantity_inputs", None) or {}
        for name, sampling in (getattr(src, "quantity_sampling", None) or {}).items():
            q = src.quantity_names[name][0]
            for dev, specs in out.items():
                if (q, inputs.get(name, "")) in specs and (
                        (dev in inv_ids) == (q in INVERTER_QUANTITIES)):
                    specs[(q, inputs.get(name, ""))] = sampling
        # long layout (#11): a quantity name carrying an inverter input gives that input's
        # channel to every inverter that declares the input among its arrays
        for name, inp in inputs.items():
            q = src.quantity_names[name][0]
            for inv in cfg.inverters:
                if len(inv.arrays) > 1 and any(str(a.id) == inp for a in inv.arrays):
                    out[inv.id].setdefault(
                        (q, inp), (getattr(src, "quantity_sampling", None) or {}).get(name, "mean"))
    return out


def channel_quantities(cfg: SiteConfig) -> dict[str, set[str]]:
    """device_id -> quantities it gets a channel for (what the sources deliver, plus derived)."""
    out: dict[str, set[str]] = {d: set() for d in sorted(cfg.device_ids())}
    for s in cfg.sensors:
        out[s.id].add(s.quantity)
    inv_ids = [i.id for i in cfg.inverters]
    for src in cfg.sources:
        for c in src.columns:
            if not getattr(c, "input", ""):
                out[c.device].add(c.quantity)
        inputs = getattr(src, "quantity_inputs", None) or {}
        for name, (q, _u) in src.quantity_names.items():
            if name in inputs:
                continue  # an inverter input's channel (channel_specs), not the whole device's
            targets = inv_ids if q in ("p_ac_kw", "p_dc_kw", "e_ac_kwh", "e_ac_total_kwh") else [
                s.id for s in cfg.sensors if s.quantity == q]
            for d in targets:
                out[d].add(q)
    for qs in out.values():
        for q in list(qs):
            if q in DERIVED:
                qs.add(DERIVED[q])
    return out


def register_site(engine_or_conn: sa.Engine | sa.Connection, cfg: SiteConfig) -> dict[tuple[str, str], int]:
    """Insert or update the site, its devices and channels; return the channel map."""
    if isinstance(engine_or_conn, sa.Engine):
        with engine_or_conn.begin() as conn:
            write_lock(conn, f"heliaudit:site:{cfg.id}")  # two ingests of a new site at once
            return register_site(conn, cfg)
    conn = engine_or_conn
    t = schema.site
    row = dict(name=cfg.name, owner=cfg.owner, timezone=cfg.timezone,
               latitude_deg=cfg.latitude_deg, longitude_deg=cfg.longitude_deg,
               altitude_m=cfg.altitude_m, tilt_deg=cfg.tilt_deg, azimuth_deg=cfg.azimuth_deg,
               albedo=cfg.albedo, config_toml=cfg.toml_text, config_sha256=cfg.sha256,
               updated_utc=now_utc())
    exists = conn.execute(sa.select(t.c.site_id).where(t.c.site_id == cfg.id)).first()
    if exists:
        old = conn.execute(sa.select(t.c.config_sha256).where(t.c.site_id == cfg.id)).scalar()
        if old != cfg.sha256:
            conn.execute(t.update().where(t.c.site_id == cfg.id).values(**row))
    else:
        conn.execute(t.insert().values(site_id=cfg.id, **row))
    d = schema.device
    have = {r.device_id: r.device_pk for r in conn.execute(
        sa.select(d.c.device_id, d.c.device_pk).where(d.c.site_id == cfg.id))}
    for dev_id in sorted(cfg.device_ids()):
        kind = cfg.device_kind(dev_id)
        if dev_id not in have:
            res = conn.execute(d.insert().values(site_id=cfg.id, device_id=dev_id, kind=kind))
            have[dev_id] = res.inserted_primary_key[0]
        else:
            conn.execute(d.update().where(d.c.device_pk == have[dev_id]).values(kind=kind))
    for inv in cfg.inverters:
        vals = dict(p_dc_kwp=inv.p_dc_kwp, p_ac_max_kw=inv.p_ac_max_kw,
                    gamma_pmp_per_c=inv.gamma_pmp_per_c, eta_inv_nom=inv.eta_inv_nom,
                    mounting=inv.mounting, commissioned=inv.commissioned,
                    poa_sensor_id=inv.irradiance_sensor, t_module_sensor_id=inv.t_module_sensor,
                    t_amb_sensor_id=inv.t_amb_sensor, wind_sensor_id=inv.wind_sensor,
                    peer_group=inv.peer_group)
        _upsert_by_pk(conn, schema.inverter, have[inv.id], vals)
    for s in cfg.sensors:
        _upsert_by_pk(conn, schema.sensor, have[s.id],
                      dict(quantity=s.quantity, instrument=s.instrument))
    c = schema.channel
    existing = {(r.device_pk, r.quantity, r.input_id): (r.channel_id, r.sampling)
                for r in conn.execute(sa.select(c.c.device_pk, c.c.quantity, c.c.input_id,
                                                c.c.channel_id, c.c.sampling)
                                      .where(c.c.device_pk.in_(list(have.values()))))}
    for dev_id, specs in channel_specs(cfg).items():
        for (q, inp), sampling in sorted(specs.items()):
            got = existing.get((have[dev_id], q, inp))
            if got is None:
                conn.execute(c.insert().values(device_pk=have[dev_id], quantity=q, input_id=inp,
                                               sampling=sampling))
            elif got[1] != sampling:  # the config now says how this channel is sampled
                conn.execute(c.update().where(c.c.channel_id == got[0]).values(sampling=sampling))
    return channel_map(conn, cfg.id)


def _upsert_by_pk(conn: sa.Connection, table: sa.Table, device_pk: int, vals: dict) -> None:
    if conn.execute(sa.select(table.c.device_pk).where(table.c.device_pk == device_pk)).first():
        conn.execute(table.update().where(table.c.device_pk == device_pk).values(**vals))
    else:
        conn.execute(table.insert().values(device_pk=device_pk, **vals))


def channel_map(engine_or_conn: sa.Engine | sa.Connection, site_id: str) -> dict[tuple, int]:
    """``{(device_id, quantity): channel_id}`` for a site's whole-device channels, and
    ``{(device_id, quantity, input_id): channel_id}`` for its inverter-input channels."""
    d, c = schema.device, schema.channel
    q = (sa.select(d.c.device_id, c.c.quantity, c.c.input_id, c.c.channel_id)
         .join(c, c.c.device_pk == d.c.device_pk).where(d.c.site_id == site_id))
    if isinstance(engine_or_conn, sa.Engine):
        with engine_or_conn.connect() as conn:
            rows = conn.execute(q).all()
    else:
        rows = engine_or_conn.execute(q).all()
    return {((r.device_id, r.quantity) if not r.input_id else
             (r.device_id, r.quantity, r.input_id)): r.channel_id for r in rows}


class SiteNotFoundError(LookupError):
    """No site with that id in the store (the message lists the known ones)."""


def site_row(conn: sa.Connection | sa.Engine, site_id: str) -> dict:
    """The whole ``site`` row (geometry, time zone, stored configuration) as a dict; raise
    :class:`SiteNotFoundError` naming the known sites when there is none."""
    if isinstance(conn, sa.Engine):
        with conn.connect() as c:
            return site_row(c, site_id)
    # the site's configuration is read once per compute run (db.runcache, issue #16)
    return dict(runcache.memo(conn, "site_row", site_id, lambda: _site_row(conn, site_id)))


def _site_row(conn: sa.Connection, site_id: str) -> dict:
    row = conn.execute(sa.select(schema.site).where(schema.site.c.site_id == site_id)
                       ).mappings().first()
    if row is None:
        known = conn.execute(sa.select(schema.site.c.site_id).order_by(
            schema.site.c.site_id)).scalars().all()
        raise SiteNotFoundError(f"no site {site_id!r} in the database; known: "
                                f"{', '.join(known) or '(none)'}")
    return dict(row)
