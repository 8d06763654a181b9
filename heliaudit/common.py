"""Helpers shared by the subcommands: the engine from ``--db``, and error rendering."""

from __future__ import annotations

from pathlib import Path

import click
import sqlalchemy as sa

from db.engine import display_url, make_engine, mask_secrets, resolve_url


def sqlite_path(url: str) -> Path | None:
    """The file of a SQLite URL (None for another database or an in-memory one)."""
    if not url.startswith("sqlite"):
        return None
    db = sa.engine.make_url(url).database
    return Path(db) if db and db != ":memory:" else None


def require_existing_db(db_url: str | None) -> str:
    """The resolved URL of ``--db``; a SQLite file that does not exist is refused, naming it.

    Only ``heliaudit ingest`` (and ``heliaudit demo``, which ingests) create a database: a
    read command pointed at a mistyped path must not silently create an empty store and
    report "no sites loaded yet"."""
    url = resolve_url(db_url)
    path = sqlite_path(url)
    if path is not None and not path.exists():
        raise click.ClickException(
            f"no database at {path} (from --db / $HELIAUDIT_DB); check the path. "
            "Only `heliaudit ingest` creates a database.")
    return url


def engine_from_ctx(ctx: click.Context, *, create: bool = False) -> sa.Engine:
    """The engine named by the group's ``--db`` (or ``$HELIAUDIT_DB`` / the default file).

    Without ``create`` a SQLite file that does not exist is refused (:func:`require_existing_db`);
    with it (``ingest``, ``demo``) a new database is created and a line says so on stderr."""
    root = ctx.find_root()
    obj = root.obj or {}
    if "engine" not in obj:
        if not create:
            require_existing_db(obj.get("db_url"))
        else:
            path = sqlite_path(resolve_url(obj.get("db_url")))
            if path is not None and not path.exists():
                click.echo(f"creating a new database at {path}", err=True)
        try:
            obj["engine"] = make_engine(obj.get("db_url"))
        except Exception as exc:  # noqa: BLE001 - any driver error becomes one line
            detail = str(getattr(exc, "orig", None) or exc).strip().splitlines()
            raise click.ClickException(mask_secrets(
                f"cannot open database {display_url(obj.get('db_url'))}: "
                f"{detail[0] if detail else type(exc).__name__}", obj.get("db_url"))) from None
        root.obj = obj
    return obj["engine"]
