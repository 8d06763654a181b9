"""Connections to the store: any SQLAlchemy URL; the embedded default is a SQLite file.

The URL comes from, in order: the ``url`` argument (the CLI's ``--db``), the environment
variable ``HELIAUDIT_DB``, then ``sqlite:///<repo>/db/heliaudit.sqlite``. A bare file path
is accepted too and means SQLite. SQLite connections get WAL journalling,
``synchronous=NORMAL``, foreign keys on and a busy timeout so the dashboard can read while
an ingest writes.
"""

from __future__ import annotations

import hashlib
import os
from pathlib import Path

import sqlalchemy as sa

ENV_VAR = "HELIAUDIT_DB"
DEFAULT_SQLITE_PATH = Path(__file__).resolve().parent / "heliaudit.sqlite"
SQLITE_BUSY_TIMEOUT_MS = 30_000


def resolve_url(url: str | os.PathLike | None = None) -> str:
    """Return the database URL to use (argument, then ``$HELIAUDIT_DB``, then the default file)."""
    raw = os.fspath(url) if url is not None else os.environ.get(ENV_VAR) or str(DEFAULT_SQLITE_PATH)
    if "://" not in raw:
        return f"sqlite:///{Path(raw).expanduser().resolve()}"
    if raw.startswith("postgresql://") or raw.startswith("postgres://"):
        # psycopg 3 is the driver we ship; SQLAlchemy's bare postgresql:// means psycopg2.
        raw = "postgresql+psycopg://" + raw.split("://", 1)[1]
    return raw


def _sqlite_pragmas(dbapi_conn, _record) -> None:
    cur = dbapi_conn.cursor()
    cur.execute("PRAGMA journal_mode=WAL")
    cur.execute("PRAGMA synchronous=NORMAL")
    cur.execute("PRAGMA foreign_keys=ON")
    cur.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
    cur.execute("PRAGMA cache_size=-65536")  # 64 MiB page cache
    cur.close()


def make_engine(url: str | os.PathLike | None = None, *, create: bool = True) -> sa.Engine:
    """Create an engine for ``url`` and, with ``create``, bring its schema up to date."""
    full = resolve_url(url)
    if full.startswith("sqlite"):
        path = sa.engine.make_url(full).database
        if path and path != ":memory:":
            Path(path).parent.mkdir(parents=True, exist_ok=True)
        engine = sa.create_engine(full, connect_args={"timeout": SQLITE_BUSY_TIMEOUT_MS / 1000})
        sa.event.listen(engine, "connect", _sqlite_pragmas)
    else:
        engine = sa.create_engine(full, pool_pre_ping=True)
    if create:
        from db.migrate import upgrade

        upgrade(engine)
    return engine


def is_sqlite(engine: sa.Engine) -> bool:
    return engine.dialect.name == "sqlite"


def write_lock(conn: sa.Connection, name: str) -> None:
    """Serialise writers on ``name`` for the rest of ``conn``'s transaction.

    SQLite: start the transaction with ``BEGIN IMMEDIATE`` (the database's one write lock,
    waiting up to the busy timeout), so what the transaction reads next cannot be changed by
    another writer before it commits. Must be the transaction's first statement.
    PostgreSQL: a transaction-scoped advisory lock on a 64-bit hash of ``name``
    (``pg_advisory_xact_lock``), released at commit or rollback.
    """
    if conn.dialect.name == "sqlite":
        raw = conn.connection.driver_connection
        if not raw.in_transaction:
            conn.exec_driver_sql("BEGIN IMMEDIATE")
    elif conn.dialect.name == "postgresql":
        k = int.from_bytes(hashlib.sha256(name.encode("utf-8")).digest()[:8], "big", signed=True)
        conn.execute(sa.text("SELECT pg_advisory_xact_lock(:k)"), {"k": k})


def is_busy(exc: BaseException) -> bool:
    """Whether a database error means another writer holds the lock (SQLite ``database is
    locked``), so the same work may simply be tried again."""
    text = str(getattr(exc, "orig", exc)).lower()
    return "database is locked" in text or "database table is locked" in text


def display_url(url: str | os.PathLike | None) -> str:
    """The database URL as shown to a user: the password replaced by ``***``."""
    full = resolve_url(url)
    try:
        return sa.engine.make_url(full).render_as_string(hide_password=True)
    except Exception:  # noqa: BLE001 - not a URL SQLAlchemy can parse: hide anything after ':' before '@'
        import re

        return re.sub(r"(://[^:/@]*:)[^@]*@", r"\1***@", full)


def mask_secrets(text: str, url: str | os.PathLike | None) -> str:
    """``text`` with the password of ``url`` (if any) replaced by ``***``."""
    try:
        pw = sa.engine.make_url(resolve_url(url)).password
    except Exception:  # noqa: BLE001
        pw = None
    if pw:
        text = text.replace(str(pw), "***")
    return text
