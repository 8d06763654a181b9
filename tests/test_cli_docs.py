"""Every subcommand has help text with an example and is documented in README.md.

Same idea as sqlite-utils' test_docs.py: documentation that cannot drift from the code.
"""

import importlib
from pathlib import Path

import click
import pytest

from heliaudit.cli import COMMAND_MODULES, main

README = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
COMMANDS = sorted(COMMAND_MODULES)


def _command(name: str) -> click.Command:
    with click.Context(main) as ctx:
        return main.get_command(ctx, name)


def test_every_command_module_is_listed():
    """The lazy command table names every command of every module, and only those."""
    declared = {}
    for module in set(COMMAND_MODULES.values()):
        for cmd in importlib.import_module(module).COMMANDS:
            declared[cmd.name] = module
    assert declared == COMMAND_MODULES


def test_there_are_commands():
    # the job needs at least these verbs (issues #2-#7)
    assert {"ingest", "summary", "compute", "results", "dashboard", "demo", "demo-data"} <= set(COMMANDS)


@pytest.mark.parametrize("name", COMMANDS)
def test_command_has_help_and_example(name):
    cmd = _command(name)
    assert cmd.help and len(cmd.help.strip()) > 20, f"{name} lacks help text"
    assert "Example" in cmd.help, f"{name}'s help has no Example block"


@pytest.mark.parametrize("name", COMMANDS)
def test_command_in_readme(name):
    assert f"heliaudit {name}" in README, f"README.md does not document 'heliaudit {name}'"
