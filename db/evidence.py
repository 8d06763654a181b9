"""Read side of the warranty evidence pack (issue #17): which export files stand behind the
data, and a copy of one site's inputs over a window into a scratch store.

* :func:`contributing_batches` — the ingest batches (one per export file) whose readings are
  still in the store for the chosen devices and period, with the SHA-256 the ingest log
  recorded for each file. A file whose every reading was later overwritten by another file
  did not contribute and is not listed.
* :func:`copy_site_window` — the site's configuration, devices, channels, ingest log and the
  readings inside ``[start_s, end_s)`` copied into another (empty) store, so that the daily
  table, flags and degradation can be recomputed for that window only, without touching
  the results in the source store.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import sqlalchemy as sa

from db import daypack, readings, schema

B = schema.ingest_batch
BATCH_COLUMNS = ("batch_id", "source_name", "file_name", "file_path", "sha256", "size_bytes",
                 "status", "rows_read", "rows_loaded", "rows_duplicate", "rows_rejected",
                 "values_loaded", "values_rejected", "ts_first_s", "ts_last_s", "finished_utc")
#: Rows per insert when copying readings.
CHUNK_ROWS = 50_000


def _site_channel_ids(conn: sa.Connection, site_id: str, device_ids=None) -> list[int]:
    d, c = schema.device, schema.channel
    q = (sa.select(c.c.channel_id).join(d, d.c.device_pk == c.c.device_pk)
         .where(d.c.site_id == site_id))
    if device_ids is not None:
        q = q.where(d.c.device_id.in_(list(device_ids)))
    return [int(x) for x in conn.execute(q.order_by(c.c.channel_id)).scalars()]


def contributing_batches(engine: sa.Engine, site_id: str, device_ids=None,
                         start_s: int | None = None, end_s: int | None = None) -> pd.DataFrame:
    """Ingest batches with at least one reading stored for the site (or ``device_ids``) in
    ``[start_s, end_s)``, ordered by batch id.

    Columns :data:`BATCH_COLUMNS` plus ``n_readings`` (readings of that batch in the
    selection). ``device_ids`` should include the sensors the inverters read.
    """
    with engine.connect() as conn:
        chans = _site_channel_ids(conn, site_id, device_ids)
        if not chans:
            return pd.DataFrame(columns=[*BATCH_COLUMNS, "n_readings"])
        counts = readings.batch_counts(conn, chans, start_s, end_s)
        if not counts:
            return pd.DataFrame(columns=[*BATCH_COLUMNS, "n_readings"])
        rows = conn.execute(sa.select(*(B.c[c] for c in BATCH_COLUMNS))
                            .where(B.c.batch_id.in_(list(counts)))
                            .order_by(B.c.batch_id)).all()
    out = pd.DataFrame([tuple(x) for x in rows], columns=list(BATCH_COLUMNS))
    out["n_readings"] = [int(counts[b]) for b in out["batch_id"]]
    # readings written without an ingest batch (test stores) are counted but have no file
    return out


#: What a flags run keeps for the next incremental one (issue #16): derived from results.
FLAG_STATE_TABLES = ("flag_part", "flag_day", "flag_day_pack", "flag_daily_pack")


def _is_result_table(t: sa.Table) -> bool:
    """Results, and the state flags runs keep for the next run, are recomputed in the
    scratch store, not copied."""
    return (t.name in ("computation", "schema_version", *FLAG_STATE_TABLES)
            or "computation_id" in t.c)


def copy_site_window(src: sa.Engine, dst: sa.Engine, site_id: str, start_s: int | None,
                     end_s: int | None) -> dict:
    """Copy a site's inputs into ``dst`` (a store with the current schema and no such site).

    Copied: every table keyed by the site, its devices or its channels (site with its stored
    configuration, devices, inverter and sensor rows, channels and any per-device table other
    topics add), the ingest log (batches, not rejected rows) and the readings in
    ``[start_s, end_s)``. Not copied: results (any table with a ``computation_id`` column, the
    computation rows and the flags' kept state, :data:`FLAG_STATE_TABLES`), which the caller
    recomputes. Primary keys are kept, so references
    stay valid. Returns ``{table: rows copied}``.
    """
    counts: dict[str, int] = {}
    with src.connect() as s_conn, dst.begin() as d_conn:
        dev_pks = [int(x) for x in s_conn.execute(sa.select(schema.device.c.device_pk).where(
            schema.device.c.site_id == site_id)).scalars()]
        chans = _site_channel_ids(s_conn, site_id)
        batch_ids = [int(x) for x in s_conn.execute(sa.select(B.c.batch_id).where(
            B.c.site_id == site_id)).scalars()]
        for t in schema.metadata.sorted_tables:
            if _is_result_table(t) or t.name == "rejected_row":
                continue
            if t.name == readings.TABLE:  # the readings of the window, re-packed
                counts[t.name] = _copy_readings(s_conn, d_conn, chans, start_s, end_s)
                continue
            if "site_id" in t.c:
                q = sa.select(t).where(t.c.site_id == site_id)
            elif "device_pk" in t.c:
                q = sa.select(t).where(t.c.device_pk.in_(dev_pks))
            elif "channel_id" in t.c:
                q = sa.select(t).where(t.c.channel_id.in_(chans))
            elif "batch_id" in t.c:
                q = sa.select(t).where(t.c.batch_id.in_(batch_ids))
            else:
                continue
            n = 0
            res = s_conn.execution_options(yield_per=CHUNK_ROWS).execute(q)
            for part in res.mappings().partitions(CHUNK_ROWS):
                d_conn.execute(t.insert(), [dict(x) for x in part])
                n += len(part)
            counts[t.name] = n
    return counts


def _copy_readings(s_conn: sa.Connection, d_conn: sa.Connection, chans: list[int],
                   start_s: int | None, end_s: int | None) -> int:
    """Copy the readings of ``chans`` in ``[start_s, end_s)`` with their batch and interval."""
    n = 0
    for ch in chans:
        got = readings.read_rows(s_conn, ch, start_s, end_s, batches=True)
        if not got["ts_s"].size:
            continue
        readings.write_day_rows(d_conn, daypack.pack(
            np.full(got["ts_s"].size, ch), got["ts_s"], got["value"],
            np.nan_to_num(got["interval_s"]).astype(np.int64), got["batch_id"]))
        n += int(got["ts_s"].size)
    return n
