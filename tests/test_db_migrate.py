"""Forward migrations of the store (db/migrate.py)."""

from __future__ import annotations

import sqlalchemy as sa

from db import schema
from db.migrate import METHOD_RENAMES_V3, current_version, upgrade


def test_v2_store_gets_the_schema_2_method_names(tmp_path):
    """A version-2 store with schema-1 method codes is renamed in place (issue #10)."""
    eng = sa.create_engine(f"sqlite:///{tmp_path}/v2.sqlite")
    with eng.begin() as conn:
        schema.metadata.create_all(conn)
        conn.execute(schema.schema_version.insert().values(version=2, applied_utc="x", note="v2"))
        conn.execute(schema.site.insert().values(
            site_id="s1", name="s1", timezone="UTC", latitude_deg=0.0, longitude_deg=0.0,
            altitude_m=0.0, tilt_deg=0.0, azimuth_deg=180.0, albedo=0.2, config_toml="",
            config_sha256="0" * 64, updated_utc="x"))
        for old in METHOD_RENAMES_V3:
            conn.execute(schema.degradation_result.insert().values(
                site_id="s1", device_id="INV1", method=old, rate_pct_per_yr=-0.5))
    assert upgrade(eng) == schema.SCHEMA_VERSION
    with eng.connect() as conn:
        assert current_version(conn) == schema.SCHEMA_VERSION
        got = sorted(conn.execute(sa.select(schema.degradation_result.c.method)).scalars())
    assert got == sorted(METHOD_RENAMES_V3.values())
    assert "yoy" not in got and "summary" not in got


def test_v3_store_gets_the_site_model_columns_and_keeps_its_inverters(tmp_path):
    """v3 -> v5 (#11; the v5 step): daily_inverter gains irradiance_basis / t_cell_basis; inverter rows are
    kept while commissioned and t_module_sensor_id become optional (SQLite: table rebuilt)."""
    eng = sa.create_engine(f"sqlite:///{tmp_path}/v3.sqlite")
    with eng.begin() as conn:
        # the v3 shape of the two tables: without the v5 columns, NOT NULL where v3 had it
        conn.execute(sa.text(
            "CREATE TABLE inverter (device_pk INTEGER PRIMARY KEY, p_dc_kwp FLOAT NOT NULL, "
            "p_ac_max_kw FLOAT NOT NULL, gamma_pmp_per_c FLOAT NOT NULL, eta_inv_nom FLOAT NOT NULL, "
            "mounting VARCHAR(48) NOT NULL, commissioned DATE NOT NULL, "
            "poa_sensor_id VARCHAR(64) NOT NULL, t_module_sensor_id VARCHAR(64) NOT NULL, "
            "t_amb_sensor_id VARCHAR(64), wind_sensor_id VARCHAR(64), peer_group VARCHAR(64) NOT NULL)"))
        schema.metadata.create_all(conn, tables=[t for t in schema.metadata.sorted_tables
                                                 if t.name not in ("inverter", "daily_inverter")])
        conn.execute(sa.text("CREATE TABLE daily_inverter (device_pk INTEGER, day DATE, pr FLOAT)"))
        conn.execute(schema.schema_version.insert().values(version=3, applied_utc="x", note="v3"))
        conn.execute(sa.text(
            "INSERT INTO inverter VALUES (1, 100.0, 80.0, -0.004, 0.97, 'open_rack_glass_glass', "
            "'2020-01-01', 'POA1', 'TMOD1', NULL, NULL, 'site')"))
    assert upgrade(eng) == schema.SCHEMA_VERSION
    with eng.begin() as conn:
        cols = {c["name"]: c for c in sa.inspect(conn).get_columns("inverter")}
        assert cols["commissioned"]["nullable"] and cols["t_module_sensor_id"]["nullable"]
        row = conn.execute(sa.select(schema.inverter)).mappings().one()
        assert (row["p_dc_kwp"], row["poa_sensor_id"], row["t_module_sensor_id"]) == (100.0, "POA1", "TMOD1")
        conn.execute(schema.inverter.update().values(commissioned=None, t_module_sensor_id=None))
        daily = {c["name"] for c in sa.inspect(conn).get_columns("daily_inverter")}
    assert {"irradiance_basis", "t_cell_basis"} <= daily


def test_v5_step_on_postgres_drops_not_null(pg_engine):
    """The PostgreSQL branch of the v5 site-model step (ALTER COLUMN ... DROP NOT NULL), run on a store
    put back to the v3 constraints."""
    from db.migrate import STEPS
    with pg_engine.begin() as conn:
        conn.execute(sa.text("ALTER TABLE inverter ALTER COLUMN commissioned SET NOT NULL, "
                             "ALTER COLUMN t_module_sensor_id SET NOT NULL"))
        conn.execute(sa.text("ALTER TABLE daily_inverter DROP COLUMN irradiance_basis, "
                             "DROP COLUMN t_cell_basis"))
    with pg_engine.begin() as conn:
        STEPS[5](conn)
    with pg_engine.connect() as conn:
        cols = {c["name"]: c for c in sa.inspect(conn).get_columns("inverter")}
        daily = {c["name"] for c in sa.inspect(conn).get_columns("daily_inverter")}
    assert cols["commissioned"]["nullable"] and cols["t_module_sensor_id"]["nullable"]
    assert {"irradiance_basis", "t_cell_basis"} <= daily
