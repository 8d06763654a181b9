"""The ``heliaudit`` command: one click group whose subcommands are verbs.

Each topic keeps its subcommands in its own module (``heliaudit/cmd_<topic>.py``) exposing a
``COMMANDS`` list; this file only assembles them. Library code raises specific exceptions;
the commands turn them into one ``Error:`` line and exit code 1 (a traceback means a bug).
"""

from __future__ import annotations

import importlib

import click

from heliaudit import __version__

COMMAND_MODULES = (
    "heliaudit.cmd_ingest",  # ingest, summary
    "heliaudit.cmd_demo",  # demo-data
    "heliaudit.cmd_compute",  # compute
    "heliaudit.cmd_check",  # check
    "heliaudit.cmd_results",  # results
    "heliaudit.cmd_evidence",  # evidence
    "heliaudit.cmd_dashboard",  # dashboard
    "heliaudit.cmd_run_demo",  # demo
)


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
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


for _name in COMMAND_MODULES:
    for _cmd in importlib.import_module(_name).COMMANDS:
        main.add_command(_cmd)
