"""The ``heliaudit`` command: one click group whose subcommands are verbs.

Each topic keeps its subcommands in its own module (``heliaudit/cmd_<topic>.py``) exposing a
``COMMANDS`` list; this file only assembles them, and imports a module only when one of its
commands runs (issue #16: importing pvlib, scipy and the demo generator for every command cost
seconds of start-up). Library code raises specific exceptions; the commands turn them into one
``Error:`` line and exit code 1 (a traceback means a bug).
"""

from __future__ import annotations

import importlib

import click

from heliaudit import __version__

#: command name -> the module whose ``COMMANDS`` list holds it (a test checks the two agree).
COMMAND_MODULES = {
    "ingest": "heliaudit.cmd_ingest",
    "summary": "heliaudit.cmd_ingest",
    "demo-data": "heliaudit.cmd_demo",
    "compute": "heliaudit.cmd_compute",
    "check": "heliaudit.cmd_check",
    "results": "heliaudit.cmd_results",
    "evidence": "heliaudit.cmd_evidence",
    "dashboard": "heliaudit.cmd_dashboard",
    "demo": "heliaudit.cmd_run_demo",
}


class LazyGroup(click.Group):
    """A click group that imports a subcommand's module only when that command is used."""

    def list_commands(self, ctx: click.Context) -> list[str]:
        return sorted(COMMAND_MODULES)

    def get_command(self, ctx: click.Context, cmd_name: str) -> click.Command | None:
        module = COMMAND_MODULES.get(cmd_name)
        if module is None:
            return None
        for cmd in importlib.import_module(module).COMMANDS:
            if cmd.name == cmd_name:
                return cmd
        raise RuntimeError(f"{module} has no command {cmd_name!r}")  # a packaging bug


@click.group(cls=LazyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.option("--db", "db_url", envvar="HELIAUDIT_DB", default=None, metavar="URL",
              help="Database: a SQLAlchemy URL (sqlite:///file.sqlite, "
                   "postgresql://user@host/db) or a SQLite file path. "
                   "Default: $HELIAUDIT_DB, else db/heliaudit.sqlite in the source tree.")
@click.version_option(__version__, prog_name="heliaudit")
@click.pass_context
def main(ctx: click.Context, db_url: str | None) -> None:
    """heliaudit: check PV plants from their data-logger exports.

    Load exports, compute temperature-corrected performance ratios, degradation
    rates with confidence intervals and flags, and browse them in a dashboard.
    """
    ctx.ensure_object(dict)
    ctx.obj["db_url"] = db_url

