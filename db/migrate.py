"""Schema version and forward migrations.

A new database gets every table of :mod:`db.schema` and version ``SCHEMA_VERSION``.
An older database is brought forward one step at a time by the functions in ``STEPS``
(``STEPS[n]`` takes a database from version ``n - 1`` to ``n``), each in its own
transaction, and each recorded in ``schema_version``. A database newer than this software
is refused rather than written to.
"""

from __future__ import annotations

from collections.abc import Callable

import sqlalchemy as sa

from db import schema
from db.computations import now_utc


class SchemaTooNewError(RuntimeError):
    pass


# version -> function(connection) bringing the store from version-1 to version.
STEPS: dict[int, Callable[[sa.Connection], None]] = {}


def _v2_daily_e_ac_pr(conn: sa.Connection) -> None:
    """daily_inverter.e_ac_pr_kwh: AC energy over the PR intervals (#4)."""
    cols = {c["name"] for c in sa.inspect(conn).get_columns("daily_inverter")}
    if "e_ac_pr_kwh" not in cols:
        conn.execute(sa.text("ALTER TABLE daily_inverter ADD COLUMN e_ac_pr_kwh FLOAT"))


STEPS[2] = _v2_daily_e_ac_pr

#: Degradation method codes of results schema 1 and their names since schema 2 (#10).
METHOD_RENAMES_V3 = {
    "yoy": "sensor_year_pairs",
    "rlm": "sensor_monthly_robust_line",
    "stl": "sensor_monthly_trend_line",
    "peer_relative": "peer_ratio_year_pairs",
    "clearsky_yoy": "modelled_sky_year_pairs",
    "sensor_vs_clearsky": "sensor_drift_check",
    "yoy_stable_segments": "sensor_year_pairs_between_shifts",
    "summary": "overview",
}


def _v3_method_names(conn: sa.Connection) -> None:
    """degradation_result.method: our own plain-word method names (#10)."""
    table = schema.degradation_result
    for old, new in METHOD_RENAMES_V3.items():
        conn.execute(table.update().where(table.c.method == old).values(method=new))


STEPS[3] = _v3_method_names


def current_version(conn: sa.Connection) -> int | None:
    if not sa.inspect(conn).has_table("schema_version"):
        return None
    return conn.execute(sa.select(sa.func.max(schema.schema_version.c.version))).scalar()


def upgrade(engine: sa.Engine, target: int = schema.SCHEMA_VERSION) -> int:
    """Create or migrate the schema of ``engine`` to ``target``; return the version reached."""
    with engine.begin() as conn:
        version = current_version(conn)
        if version is None:
            schema.metadata.create_all(conn)
            conn.execute(schema.schema_version.insert().values(
                version=target, applied_utc=now_utc(), note="created"))
            return target
    if version > target:
        raise SchemaTooNewError(
            f"the database has schema version {version}, this heliaudit knows up to {target}; "
            "upgrade heliaudit before using this database")
    for step in range(version + 1, target + 1):
        with engine.begin() as conn:
            STEPS[step](conn)
            conn.execute(schema.schema_version.insert().values(
                version=step, applied_utc=now_utc(), note=STEPS[step].__doc__ or ""))
    # tables added in later versions without data changes
    schema.metadata.create_all(engine)
    return target
