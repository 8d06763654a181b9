"""The ``computation`` rows: one per run of a job (daily table, flags, degradation), with the
software version, the parameters used and the scope, so every stored result can be traced to
how it was computed."""

from __future__ import annotations

import datetime as dt
import json

import sqlalchemy as sa

from db import schema
from db.jsontext import to_json


def now_utc() -> str:
    """The current UTC time as ISO 8601 text to the second (the store's timestamp format)."""
    return dt.datetime.now(dt.UTC).isoformat(timespec="seconds")


def begin_computation(conn: sa.Connection, site_id: str, kind: str, params: dict, *,
                      software_version: str, scope: str = "full") -> int:
    """Insert an unfinished ``computation`` row in ``conn``'s transaction; return its id."""
    return conn.execute(schema.computation.insert().values(
        site_id=site_id, kind=kind, software_version=software_version,
        params_json=to_json(params), started_utc=now_utc(), scope=scope)).inserted_primary_key[0]


def finish_computation(conn: sa.Connection, computation_id: int, *,
                       params: dict | None = None) -> None:
    """Mark a computation finished (in the transaction that stores its results); ``params``
    replaces the recorded parameters (e.g. with what the run found, for the next run)."""
    values = {"finished_utc": now_utc()}
    if params is not None:
        values["params_json"] = to_json(params)
    conn.execute(schema.computation.update().where(
        schema.computation.c.computation_id == computation_id).values(**values))


def latest_batch_id(conn: sa.Connection, site_id: str) -> int | None:
    """The newest ingest batch of the site (what a computation starting now sees)."""
    b = schema.ingest_batch.c
    return conn.execute(sa.select(sa.func.max(b.batch_id)).where(b.site_id == site_id)).scalar()


def batches_after(engine: sa.Engine, site_id: str, batch_id: int) -> list[tuple[int, int]]:
    """``(ts_first_s, ts_last_s)`` of the site's loaded batches with an id above ``batch_id``."""
    b = schema.ingest_batch.c
    with engine.connect() as conn:
        rows = conn.execute(sa.select(b.ts_first_s, b.ts_last_s).where(
            b.site_id == site_id, b.status == "loaded", b.batch_id > int(batch_id),
            b.ts_first_s.is_not(None))).all()
    return [(int(r[0]), int(r[1])) for r in rows]


def latest_finished(engine: sa.Engine, site_id: str) -> dict[str, int]:
    """Per job kind, the id of the site's latest finished computation (kinds never run are
    absent). Ids grow with time, so a later step is stale when its id is below the daily one."""
    c = schema.computation.c
    with engine.connect() as conn:
        rows = conn.execute(sa.select(c.kind, sa.func.max(c.computation_id)).where(
            c.site_id == site_id, c.finished_utc.is_not(None)).group_by(c.kind)).all()
    return {k: int(v) for k, v in rows}


def batches_since_last_daily(engine: sa.Engine, site_id: str) -> list[tuple[int, int]] | None:
    """``(ts_first_s, ts_last_s)`` of the batches loaded after those the site's last finished
    daily computation saw (by batch id, recorded as ``through_batch_id``), or None when the
    site's daily table was never computed."""
    c, b = schema.computation.c, schema.ingest_batch.c
    with engine.connect() as conn:
        last = conn.execute(sa.select(c.params_json).where(
            c.site_id == site_id, c.kind == "daily", c.finished_utc.is_not(None))
            .order_by(c.computation_id.desc()).limit(1)).scalar()
        if last is None:
            return None
        through = json.loads(last).get("through_batch_id") or 0
        rows = conn.execute(sa.select(b.ts_first_s, b.ts_last_s).where(
            b.site_id == site_id, b.status == "loaded", b.batch_id > through,
            b.ts_first_s.is_not(None))).all()
    return [(int(r[0]), int(r[1])) for r in rows]
