"""Sharing a portfolio between several ``heliaudit compute --worker`` processes (issue #16).

A worker walks the sites in order and, for each, tries to take the site's row of
``compute_claim`` with ``SELECT … FOR UPDATE SKIP LOCKED`` (PostgreSQL). The lock is held, in
its own connection and transaction, for as long as the worker computes that site; another
worker skips a locked site at once instead of waiting. Whether a site still needs computing
is decided *after* the lock is taken (from the store's own computation records), so a site is
never computed twice for the same data, and a worker that is killed loses its connection, the
server releases the lock, and the next worker finds the site still due and takes it over.

SQLite has one writer and no row locks: there a worker simply computes every due site in
turn (one worker per SQLite file; the claim is a no-op).
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager

import sqlalchemy as sa

from db import schema
from db.computations import now_utc


def supports_claims(engine: sa.Engine) -> bool:
    """True where row locks let several workers share a portfolio (PostgreSQL)."""
    return engine.dialect.name == "postgresql"


def _ensure_rows(engine: sa.Engine, site_ids: list[str]) -> None:
    t = schema.compute_claim
    with engine.begin() as conn:
        have = set(conn.execute(sa.select(t.c.site_id)).scalars())
        missing = [{"site_id": s} for s in site_ids if s not in have]
        if not missing:
            return
        if engine.dialect.name == "postgresql":
            from sqlalchemy.dialects.postgresql import insert
            conn.execute(insert(t).on_conflict_do_nothing(), missing)
        else:
            from sqlalchemy.dialects.sqlite import insert
            conn.execute(insert(t).on_conflict_do_nothing(), missing)


@contextmanager
def claim_site(engine: sa.Engine, site_id: str, worker: str) -> Iterator[bool]:
    """Hold the site's claim for the body of the ``with``; yields False when another worker
    holds it (skip the site). On leaving normally the claim records the worker and time."""
    _ensure_rows(engine, [site_id])
    t = schema.compute_claim
    done = t.update().where(t.c.site_id == site_id)
    if not supports_claims(engine):
        # SQLite: no row locks, one writer; an open read snapshot here would make the final
        # update fail once the computation has written, so record the finish on its own.
        yield True
        with engine.begin() as conn:
            conn.execute(done.values(worker=worker[:128], finished_utc=now_utc()))
        return
    with engine.connect() as conn:
        with conn.begin() as txn:
            got = conn.execute(sa.select(t.c.site_id).where(t.c.site_id == site_id)
                               .with_for_update(skip_locked=True)).scalar()
            if got is None:
                yield False
                return
            yield True
            conn.execute(done.values(worker=worker[:128], finished_utc=now_utc()))
            txn.commit()


def claims(engine: sa.Engine) -> list[dict]:
    """Every site's last finishing worker and time (for ``summary`` and tests)."""
    t = schema.compute_claim
    with engine.connect() as conn:
        return [dict(r._mapping) for r in conn.execute(sa.select(t).order_by(t.c.site_id))]
