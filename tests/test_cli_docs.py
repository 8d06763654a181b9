"""Every subcommand has help text with an example and is documented in README.md.

Same idea as sqlite-utils' test_docs.py: documentation that cannot drift from the code.
"""

from pathlib import Path

import pytest

from heliaudit.cli import main

README = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
COMMANDS = sorted(main.commands)


def test_there_are_commands():
    # the job needs at least these verbs (issues #2-#7)
    assert {"ingest", "summary", "compute", "results", "dashboard", "demo", "demo-data"} <= set(COMMANDS)


@pytest.mark.parametrize("name", COMMANDS)
def test_command_has_help_and_example(name):
    cmd = main.commands[name]
    assert cmd.help and len(cmd.help.strip()) > 20, f"{name} lacks help text"
    assert "Example" in cmd.help, f"{name}'s help has no Example block"


@pytest.mark.parametrize("name", COMMANDS)
def test_command_in_readme(name):
    assert f"heliaudit {name}" in README, f"README.md does not document 'heliaudit {name}'"
