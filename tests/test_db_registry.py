"""register_site: sites, devices, channels from a config; idempotent; updates on change."""

from pathlib import Path

import sqlalchemy as sa

from db import schema
from db.registry import channel_map, register_site
from ingest.config import load_site_config, parse_site_config

DATA = Path(__file__).resolve().parent / "data"


def test_register_creates_rows_and_channels(engine):
    cfg = load_site_config(DATA / "site_basic.toml")
    chans = register_site(engine, cfg)
    assert set(chans) == {("INV1", "p_ac_kw"), ("INV2", "p_ac_kw"), ("POA1", "poa_wm2"),
                          ("TMOD1", "t_module_c")}
    with engine.connect() as conn:
        site = conn.execute(sa.select(schema.site)).mappings().one()
        assert site["config_toml"] == cfg.toml_text and site["config_sha256"] == cfg.sha256
        inv = conn.execute(sa.select(schema.inverter)).mappings().all()
        assert [r["p_ac_max_kw"] for r in inv] == [100.0, 100.0]
        sen = conn.execute(sa.select(schema.sensor.c.quantity, schema.sensor.c.instrument)).all()
        assert sorted(sen) == [("poa_wm2", "thermopile_pyranometer"), ("t_module_c", None)]


def test_register_is_idempotent_and_updates(engine):
    cfg = load_site_config(DATA / "site_basic.toml")
    first = register_site(engine, cfg)
    assert register_site(engine, cfg) == first
    changed = parse_site_config(cfg.toml_text.replace("p_ac_max_kw = 100.0", "p_ac_max_kw = 90.0", 1),
                                cfg.path)
    assert register_site(engine, changed) == first  # same channel ids
    with engine.connect() as conn:
        assert conn.execute(sa.select(sa.func.count()).select_from(schema.device)).scalar() == 4
        vals = conn.execute(sa.select(schema.inverter.c.p_ac_max_kw).order_by(
            schema.inverter.c.device_pk)).scalars().all()
        assert vals == [90.0, 100.0]
        sha = conn.execute(sa.select(schema.site.c.config_sha256)).scalar()
        assert sha == changed.sha256


def test_counter_gets_derived_energy_channel(engine):
    cfg = load_site_config(DATA / "dialects.toml")
    chans = register_site(engine, cfg)
    assert ("INV1", "e_ac_total_kwh") in chans and ("INV1", "e_ac_kwh") in chans
    assert channel_map(engine, "dialects") == chans
