"""Schema version and forward migrations.

A new database gets every table of :mod:`db.schema` and version ``SCHEMA_VERSION``.
An older database is brought forward one step at a time by the functions in ``STEPS``
(``STEPS[n]`` takes a database from version ``n - 1`` to ``n``), each in its own
transaction, and each recorded in ``schema_version``. A database newer than this software
is refused rather than written to.
"""

from __future__ import annotations

import hashlib
from collections.abc import Callable

import numpy as np
import pandas as pd
import sqlalchemy as sa

from db import daypack, readings, schema
from db.computations import now_utc
from db.engine import write_lock
from db.flags import PACK_COLUMNS, pack_days


class SchemaTooNewError(RuntimeError):
    pass


# version -> function(connection) bringing the store from version-1 to version.
STEPS: dict[int, Callable[[sa.Connection], str | None]] = {}


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


def _v4_reading_interval(conn: sa.Connection) -> None:
    """reading.interval_s (interval recorded at ingest), channel.sampling and channel.input_id (#11)."""
    insp = sa.inspect(conn)
    if insp.has_table("reading") and "interval_s" not in {
            c["name"] for c in insp.get_columns("reading")}:
        # readings loaded before v4 keep NULL: the reader infers their interval from spacing
        conn.execute(sa.text("ALTER TABLE reading ADD COLUMN interval_s INTEGER"))
    cols = {c["name"] for c in insp.get_columns("channel")}
    if conn.dialect.name == "sqlite":
        # the unique key gains input_id: SQLite rebuilds the (small) table
        if "input_id" not in cols:
            conn.execute(sa.text(
                "CREATE TABLE channel_v4 (channel_id INTEGER NOT NULL PRIMARY KEY, "
                "device_pk INTEGER NOT NULL REFERENCES device (device_pk), "
                "quantity VARCHAR(32) NOT NULL, sampling VARCHAR(8) DEFAULT 'mean' NOT NULL, "
                "input_id VARCHAR(64) DEFAULT '' NOT NULL, "
                "CONSTRAINT uq_channel_device_quantity_input UNIQUE (device_pk, quantity, input_id))"))
            conn.execute(sa.text("INSERT INTO channel_v4 (channel_id, device_pk, quantity) "
                                 "SELECT channel_id, device_pk, quantity FROM channel"))
            conn.execute(sa.text("DROP TABLE channel"))
            conn.execute(sa.text("ALTER TABLE channel_v4 RENAME TO channel"))
        return
    if "sampling" not in cols:
        conn.execute(sa.text("ALTER TABLE channel ADD COLUMN sampling VARCHAR(8) "
                             "NOT NULL DEFAULT 'mean'"))
    if "input_id" not in cols:
        conn.execute(sa.text("ALTER TABLE channel ADD COLUMN input_id VARCHAR(64) "
                             "NOT NULL DEFAULT ''"))
        conn.execute(sa.text("ALTER TABLE channel DROP CONSTRAINT IF EXISTS "
                             "uq_channel_device_quantity"))
        conn.execute(sa.text("ALTER TABLE channel ADD CONSTRAINT uq_channel_device_quantity_input "
                             "UNIQUE (device_pk, quantity, input_id)"))


STEPS[4] = _v4_reading_interval


def _v5_site_model(conn: sa.Connection) -> None:
    """Site model (#11): daily_inverter.irradiance_basis / t_cell_basis; inverter.commissioned
    and t_module_sensor_id may be unknown (NULL)."""
    insp = sa.inspect(conn)
    cols = {c["name"] for c in insp.get_columns("daily_inverter")}
    for name in ("irradiance_basis", "t_cell_basis"):
        if name not in cols:
            conn.execute(sa.text(f"ALTER TABLE daily_inverter ADD COLUMN {name} VARCHAR(64)"))
    nullable = {c["name"]: c["nullable"] for c in insp.get_columns("inverter")}
    if nullable.get("commissioned") and nullable.get("t_module_sensor_id"):
        return
    if conn.dialect.name == "sqlite":  # SQLite cannot drop NOT NULL: rebuild the table
        conn.execute(sa.text("ALTER TABLE inverter RENAME TO inverter_v4"))
        schema.inverter.create(conn)
        names = ", ".join(c.name for c in schema.inverter.columns)
        conn.execute(sa.text(f"INSERT INTO inverter ({names}) SELECT {names} FROM inverter_v4"))
        conn.execute(sa.text("DROP TABLE inverter_v4"))
    else:
        conn.execute(sa.text("ALTER TABLE inverter ALTER COLUMN commissioned DROP NOT NULL, "
                             "ALTER COLUMN t_module_sensor_id DROP NOT NULL"))


STEPS[5] = _v5_site_model


class MigrationError(RuntimeError):
    pass


#: The pre-v6 readings table, one row per reading (what the v6 step moves).
_OLD_READING_DTYPE = np.dtype([("ts_s", "i8"), ("value", "f8"), ("interval_s", "i8"),
                               ("batch_id", "i8")])


def _v6_packed_readings(conn: sa.Connection) -> str:
    """Readings packed one row per channel and UTC day, table reading_day (#16)."""
    schema.reading_day.create(conn, checkfirst=True)
    insp = sa.inspect(conn)
    if not insp.has_table("reading"):
        return "no reading table to move"
    cols = {c["name"] for c in insp.get_columns("reading")}
    iv_col = "COALESCE(interval_s, 0)" if "interval_s" in cols else "0"
    ph = "?" if conn.dialect.paramstyle == "qmark" else "%s"
    sql = (f"SELECT ts_s, value, {iv_col}, batch_id FROM reading WHERE channel_id = {ph} "
           "ORDER BY ts_s")
    n_before = int(conn.execute(sa.text("SELECT count(*) FROM reading")).scalar())
    before, after = hashlib.sha256(), hashlib.sha256()
    n_moved, n_chans, ch = 0, 0, None
    while True:  # channel by channel: one channel's readings in memory at a time
        ch = conn.execute(sa.text("SELECT min(channel_id) FROM reading" + (
            "" if ch is None else " WHERE channel_id > :c")), {"c": ch}).scalar()
        if ch is None:
            break
        cur = conn.connection.cursor()
        try:
            cur.execute(sql, [int(ch)])
            old = np.fromiter((tuple(r) for r in cur), dtype=_OLD_READING_DTYPE)
        finally:
            cur.close()
        readings.write_day_rows(conn, daypack.pack(
            np.full(old.size, ch, dtype=np.int64), old["ts_s"], old["value"],
            old["interval_s"], old["batch_id"]))
        got = readings.read_rows(conn, int(ch), batches=True)
        new_iv = np.nan_to_num(got["interval_s"]).astype(np.int64)
        _digest(before, ch, old["ts_s"], old["value"], old["interval_s"], old["batch_id"])
        _digest(after, ch, got["ts_s"], got["value"], new_iv, got["batch_id"])
        if before.digest() != after.digest():
            raise MigrationError(f"channel {ch}: the packed readings differ from the stored ones; "
                                 "nothing was changed (the migration is rolled back)")
        n_moved += int(old.size)
        n_chans += 1
    n_after = readings.count_readings(conn)
    if not n_before == n_moved == n_after:
        raise MigrationError(f"readings before {n_before}, moved {n_moved}, after {n_after}; "
                             "nothing was changed (the migration is rolled back)")
    conn.execute(sa.text("DROP TABLE reading"))
    return (f"{n_after} readings of {n_chans} channels moved, every one read back equal; "
            f"sha256 of (channel, ts_s, value, interval_s, batch_id) before = after = "
            f"{after.hexdigest()}")


def _digest(h, channel_id: int, ts_s, value, interval_s, batch_id) -> None:
    h.update(np.int64(channel_id).tobytes())
    h.update(np.ascontiguousarray(ts_s, dtype="<i8").tobytes())
    h.update((np.ascontiguousarray(value, dtype="<f8") + 0.0).tobytes())  # -0.0 is 0.0
    h.update(np.ascontiguousarray(interval_s, dtype="<i8").tobytes())
    h.update(np.ascontiguousarray(batch_id, dtype="<i8").tobytes())


STEPS[6] = _v6_packed_readings

#: flag_day columns of store v7 (issue #16: per-day sensor judgements) and their SQL types.
V7_FLAG_DAY_COLUMNS = {"valid_reason": "VARCHAR(32)", "sky_ratio": "FLOAT",
                       "jump_ratio": "FLOAT", "rain_mm": "FLOAT", "amb_night_c": "BLOB",
                       "amb_day_c": "BLOB"}


def _v7_sensor_days(conn: sa.Connection) -> str:
    """flag_day gains each sensor's per-day judgement (#16); the next flags run is full."""
    insp = sa.inspect(conn)
    if not insp.has_table("flag_day"):
        return "no flag_day table yet (created with the v7 columns)"
    have = {c["name"] for c in insp.get_columns("flag_day")}
    blob = "BYTEA" if conn.dialect.name == "postgresql" else "BLOB"
    added = []
    for name, typ in V7_FLAG_DAY_COLUMNS.items():
        if name not in have:
            conn.execute(sa.text(f"ALTER TABLE flag_day ADD COLUMN {name} "
                                 f"{blob if typ == 'BLOB' else typ}"))
            added.append(name)
    return f"added {', '.join(added) or 'nothing'}"


STEPS[7] = _v7_sensor_days


def _v8_packed_flag_days(conn: sa.Connection) -> str:
    """The inverters' daily flag inputs move from flag_day rows to one packed row per
    inverter in flag_day_pack (#16); sensors' days stay in flag_day."""
    schema.flag_day_pack.create(conn, checkfirst=True)
    if not sa.inspect(conn).has_table("flag_day"):
        return "no flag_day table yet"
    td, d, sn = schema.flag_day, schema.device, schema.sensor
    # a row of a device that is not one of its site's sensors
    inverter_rows = ~sa.exists(
        sa.select(d.c.device_pk).join(sn, sn.c.device_pk == d.c.device_pk)
        .where(d.c.site_id == td.c.site_id, d.c.device_id == td.c.device_id))
    rows = conn.execute(sa.select(td.c.site_id, td.c.device_id, *(td.c[c] for c in PACK_COLUMNS))
                        .where(inverter_rows)
                        .order_by(td.c.site_id, td.c.device_id, td.c.day_no)).all()
    if not rows:
        return "moved 0 days"
    frame = pd.DataFrame(rows, columns=["site_id", "device_id", *PACK_COLUMNS])
    packs = []
    for (site, dev), g in frame.groupby(["site_id", "device_id"], sort=False):
        packs.append({"site_id": site, "device_id": dev, **pack_days(g)})
    if sum(p["n_days"] for p in packs) != len(frame):
        raise MigrationError("flag_day_pack: packed day count differs from the rows moved")
    conn.execute(schema.flag_day_pack.insert(), packs)
    conn.execute(td.delete().where(inverter_rows))
    return f"moved {len(frame)} days of {len(packs)} inverters"


STEPS[8] = _v8_packed_flag_days


def _v9_daily_pack(conn: sa.Connection) -> str:
    """The flags job's packed copy of daily columns, flag_daily_pack (#16): created empty;
    the next flags run fills it (until then it reads the daily table, as before)."""
    schema.flag_daily_pack.create(conn, checkfirst=True)
    return "created flag_daily_pack (empty)"


STEPS[9] = _v9_daily_pack


def current_version(conn: sa.Connection) -> int | None:
    if not sa.inspect(conn).has_table("schema_version"):
        return None
    return conn.execute(sa.select(sa.func.max(schema.schema_version.c.version))).scalar()


def upgrade(engine: sa.Engine, target: int = schema.SCHEMA_VERSION) -> int:
    """Create or migrate the schema of ``engine`` to ``target``; return the version reached.

    Safe when several processes start at once on a new or old database: a first look
    without a lock; if anything is to be done, it is done under the store's write lock
    (:func:`db.engine.write_lock`) after looking again, so one process creates or migrates
    and the others find it done.
    """
    with engine.connect() as conn:
        version = current_version(conn)
    if version is not None and version > target:
        raise SchemaTooNewError(
            f"the database has schema version {version}, this heliaudit knows up to {target}; "
            "upgrade heliaudit before using this database")
    if version == target and _complete(engine):
        return target
    with engine.begin() as conn:
        write_lock(conn, "heliaudit:schema")
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
            write_lock(conn, "heliaudit:schema")
            if (current_version(conn) or 0) >= step:
                continue  # another process did this step meanwhile
            done = STEPS[step](conn)
            note = STEPS[step].__doc__ or ""
            conn.execute(schema.schema_version.insert().values(
                version=step, applied_utc=now_utc(), note=f"{note} {done}" if done else note))
    # tables added in later versions without data changes
    with engine.begin() as conn:
        write_lock(conn, "heliaudit:schema")
        schema.metadata.create_all(conn)
    return target


def _complete(engine: sa.Engine) -> bool:
    """Whether every table of :mod:`db.schema` exists (tables added without a version step)."""
    with engine.connect() as conn:
        have = set(sa.inspect(conn).get_table_names())
    return all(t in have for t in schema.metadata.tables)
