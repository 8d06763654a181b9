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
