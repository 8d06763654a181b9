"""The ingest log: one ``ingest_batch`` row per file per attempt, and its ``rejected_row`` rows.

Write side (called by :mod:`ingest.load`): :func:`start_batch` / :func:`finish_batch` inside
the file's transaction, :func:`add_rejected` in the same transaction, :func:`record_batch` for
a ``failed`` or ``unchanged`` attempt in a transaction of its own.

Read side (CLI ``summary`` and the dashboard): :func:`site_summary`, :func:`ingest_log`,
:func:`rejected_rows`, each returning a DataFrame.
"""

from __future__ import annotations

import json
from collections.abc import Iterable

import pandas as pd
import sqlalchemy as sa

from db import readings, schema
from db.computations import now_utc
from db.engine import write_lock
from ingest.errors import Rejected

B = schema.ingest_batch
COUNT_FIELDS = ("rows_read", "rows_loaded", "rows_duplicate", "rows_rejected", "values_loaded",
                "values_duplicate", "values_conflict", "values_rejected")


def lock_file(conn: sa.Connection, site_id: str, sha256: str) -> None:
    """Hold the lock under which a file's duplicate check and load run (see
    :func:`db.engine.write_lock`): the first statement of the file's transaction, so two
    processes loading the same file at once load it once."""
    write_lock(conn, f"heliaudit:file:{site_id}:{sha256}")


def lock_site_readings(conn: sa.Connection, site_id: str) -> None:
    """Serialise the writers of one site's readings for the rest of the transaction.

    Readings are stored one row per channel and day (schema v6), so two files of the same
    site loaded at once may merge into the same day row: on PostgreSQL they take turns on
    this lock (``pg_advisory_xact_lock``); SQLite has one writer at a time anyway."""
    write_lock(conn, f"heliaudit:readings:{site_id}")


def loaded_batch_with_sha(conn: sa.Connection, site_id: str, sha256: str) -> int | None:
    """The batch id of a successful load of a file with this content, or None."""
    return conn.execute(sa.select(B.c.batch_id).where(
        B.c.site_id == site_id, B.c.sha256 == sha256, B.c.status == "loaded")
        .order_by(B.c.batch_id.desc()).limit(1)).scalar()


def source_timestamp_offsets(conn: sa.Connection, site_id: str, source_name: str) -> bool | None:
    """Whether the loaded files of a source had timestamps with UTC offsets (the decision
    recorded in the notes of its latest loaded batch that made one), or None."""
    rows = conn.execute(sa.select(B.c.notes_json).where(
        B.c.site_id == site_id, B.c.source_name == source_name, B.c.status == "loaded",
        B.c.notes_json.is_not(None)).order_by(B.c.batch_id.desc()).limit(50)).scalars()
    for text in rows:
        try:
            val = json.loads(text).get("timestamp_offsets")
        except (ValueError, AttributeError):
            continue
        if isinstance(val, bool):
            return val
    return None


def _text(s: str | None, limit: int | None = None) -> str | None:
    """Text as the store can hold it: NUL (which PostgreSQL text cannot hold) and lone
    surrogates shown as U+FFFD; cut to ``limit`` characters."""
    if s is None:
        return None
    s = str(s).replace("\x00", "\ufffd").encode("utf-8", "replace").decode("utf-8")
    return s if limit is None or len(s) <= limit else s[: limit - 1] + "…"


def start_batch(conn: sa.Connection, *, site_id: str, source_name: str, file_name: str,
                file_path: str, sha256: str, size_bytes: int, status: str = "loading",
                message: str | None = None, notes: dict | None = None) -> int:
    res = conn.execute(B.insert().values(
        site_id=site_id, source_name=source_name, file_name=_text(file_name),
        file_path=_text(file_path), sha256=sha256, size_bytes=size_bytes, started_utc=now_utc(),
        status=status, message=_text(message), notes_json=json.dumps(notes) if notes else None,
        **{f: 0 for f in COUNT_FIELDS}))
    return int(res.inserted_primary_key[0])


def finish_batch(conn: sa.Connection, batch_id: int, *, status: str, counts: dict,
                 ts_first_s: int | None, ts_last_s: int | None, interval_s: str | None,
                 notes: dict, message: str | None = None) -> None:
    conn.execute(B.update().where(B.c.batch_id == batch_id).values(
        status=status, finished_utc=now_utc(), ts_first_s=ts_first_s, ts_last_s=ts_last_s,
        interval_s=interval_s, notes_json=json.dumps(notes, default=str) if notes else None,
        message=_text(message), **{f: int(counts.get(f, 0)) for f in COUNT_FIELDS}))


def record_batch(engine: sa.Engine, *, status: str, message: str | None, **fields) -> int:
    """Write a ``failed`` or ``unchanged`` batch row in its own transaction."""
    with engine.begin() as conn:
        bid = start_batch(conn, status=status, message=message, **fields)
        conn.execute(B.update().where(B.c.batch_id == bid).values(finished_utc=now_utc()))
        return bid


def add_rejected(conn: sa.Connection, batch_id: int, rejected: Iterable[Rejected]) -> int:
    rows = [dict(batch_id=batch_id, line_no=int(r.line), column_name=_text(r.column),
                 reason=_text(r.reason), raw_text=_text(r.raw)) for r in rejected]
    if rows:
        conn.execute(schema.rejected_row.insert(), rows)
    return len(rows)


# ---------------------------------------------------------------- read side

def ingest_log(engine: sa.Engine, site_id: str) -> pd.DataFrame:
    """All batches of a site, newest first (one row per file attempt)."""
    q = sa.select(B).where(B.c.site_id == site_id).order_by(B.c.batch_id.desc())
    with engine.connect() as conn:
        df = pd.DataFrame(conn.execute(q).mappings().all(), columns=[c.name for c in B.c])
    for c in ("ts_first_s", "ts_last_s"):
        df[c.replace("_s", "_utc")] = pd.to_datetime(df[c], unit="s", utc=True)
    return df


def rejected_rows(engine: sa.Engine, site_id: str, batch_id: int | None = None,
                  limit: int = 1000) -> pd.DataFrame:
    """Rejected rows and values of a site (or one batch): file, line, column, reason, raw text."""
    r = schema.rejected_row
    q = (sa.select(r.c.batch_id, B.c.file_name, r.c.line_no, r.c.column_name, r.c.reason,
                   r.c.raw_text)
         .join(B, B.c.batch_id == r.c.batch_id).where(B.c.site_id == site_id))
    if batch_id is not None:
        q = q.where(r.c.batch_id == batch_id)
    q = q.order_by(r.c.batch_id, r.c.line_no, r.c.rejected_id).limit(limit)
    with engine.connect() as conn:
        return pd.DataFrame(conn.execute(q).mappings().all(),
                            columns=["batch_id", "file_name", "line_no", "column_name", "reason",
                                     "raw_text"])


def site_summary(engine: sa.Engine, site_id: str | None = None) -> pd.DataFrame:
    """Per site: devices, date range, completeness, batches and rejects.

    ``completeness`` = time covered by stored readings / time expected: each reading covers
    its own interval as recorded at ingest (a reading stored before intervals were recorded
    counts one nominal interval = the most common final interval of the loaded batches), and
    every channel holding data is expected from the site's first interval to the end of its
    last one. A channel that changed from 15 to 5 minutes is therefore complete at 1.0.
    """
    s, d, c = schema.site, schema.device, schema.channel
    with engine.connect() as conn:
        sites = conn.execute(sa.select(s.c.site_id, s.c.name).order_by(s.c.site_id)
                             .where(s.c.site_id == site_id if site_id else sa.true())).all()
        out = []
        for sid, name in sites:
            kinds = dict(conn.execute(sa.select(d.c.kind, sa.func.count()).where(
                d.c.site_id == sid).group_by(d.c.kind)).all())
            chans = [x[0] for x in conn.execute(sa.select(c.c.channel_id).join(
                d, d.c.device_pk == c.c.device_pk).where(d.c.site_id == sid))]
            per = readings.channel_stats(conn, chans)
            b = conn.execute(sa.select(B.c.status, sa.func.count(), sa.func.sum(B.c.rows_rejected),
                                       sa.func.sum(B.c.values_rejected), sa.func.max(B.c.finished_utc))
                             .where(B.c.site_id == sid).group_by(B.c.status)).all()
            intervals = [x[0] for x in conn.execute(sa.select(B.c.interval_s).where(
                B.c.site_id == sid, B.c.status == "loaded", B.c.interval_s.is_not(None)))]
            n_read = sum(x[1] for x in per)
            first = min((x[2] for x in per), default=None)
            last = max((x[3] for x in per), default=None)
            nominal = nominal_interval(intervals)
            completeness = None
            if per and nominal:
                covered = sum(float(x[4] or 0) + (x[1] - x[5]) * nominal for x in per)
                expected = len(per) * (last - first + nominal)
                completeness = covered / expected if expected else None
            by_status = {x[0]: x for x in b}
            loaded = by_status.get("loaded")
            out.append(dict(
                site_id=sid, name=name, n_inverters=kinds.get("inverter", 0),
                n_sensors=kinds.get("sensor", 0), n_channels_with_data=len(per),
                first_utc=pd.to_datetime(first, unit="s", utc=True) if first is not None else pd.NaT,
                last_utc=pd.to_datetime(last, unit="s", utc=True) if last is not None else pd.NaT,
                interval_s=nominal, n_readings=n_read, completeness=completeness,
                batches_loaded=loaded[1] if loaded else 0,
                batches_unchanged=by_status["unchanged"][1] if "unchanged" in by_status else 0,
                batches_failed=by_status["failed"][1] if "failed" in by_status else 0,
                rows_rejected=int(loaded[2] or 0) if loaded else 0,
                values_rejected=int(loaded[3] or 0) if loaded else 0,
                last_ingest_utc=max((x[4] for x in b if x[4]), default=None),
            ))
    return pd.DataFrame(out, columns=[
        "site_id", "name", "n_inverters", "n_sensors", "n_channels_with_data", "first_utc",
        "last_utc", "interval_s", "n_readings", "completeness", "batches_loaded",
        "batches_unchanged", "batches_failed", "rows_rejected", "values_rejected",
        "last_ingest_utc"])


def nominal_interval(intervals) -> int | None:
    """The most common final interval [s] of batches' ``interval_s`` ("900", "900->300")."""
    finals = [int(str(x).split("->")[-1]) for x in intervals if x]
    if not finals:
        return None
    return max(set(finals), key=finals.count)
