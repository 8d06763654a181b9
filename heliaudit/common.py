"""Helpers shared by the subcommands: the engine from ``--db``, and error rendering."""

from __future__ import annotations

import click
import sqlalchemy as sa

from db.engine import display_url, make_engine, mask_secrets


def engine_from_ctx(ctx: click.Context) -> sa.Engine:
    """The engine named by the group's ``--db`` (or ``$HELIAUDIT_DB`` / the default file)."""
    root = ctx.find_root()
    obj = root.obj or {}
    if "engine" not in obj:
        try:
            obj["engine"] = make_engine(obj.get("db_url"))
        except Exception as exc:  # noqa: BLE001 - any driver error becomes one line
            detail = str(getattr(exc, "orig", None) or exc).strip().splitlines()
            raise click.ClickException(mask_secrets(
                f"cannot open database {display_url(obj.get('db_url'))}: "
                f"{detail[0] if detail else type(exc).__name__}", obj.get("db_url"))) from None
        root.obj = obj
    return obj["engine"]
