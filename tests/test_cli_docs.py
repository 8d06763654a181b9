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


# Documents beside the repository (../shared/) are not part of it: code, tests and docs cite
# the primary sources (papers, standards) instead, so the project stands alone.
OUTSIDE_DOC_MENTIONS = ("METHODS §", "METHODS.md", "STYLE §", "STYLE.md", "PERFORMANCE.md")


def _tracked_text_files(root: Path) -> list[Path]:
    import subprocess
    try:
        out = subprocess.run(["git", "ls-files", "-z"], cwd=root, capture_output=True,
                             check=True).stdout.decode()
        files = [root / p for p in out.split("\0") if p]
    except (OSError, subprocess.CalledProcessError):  # not a git checkout: walk the tree
        files = [p for p in root.rglob("*") if p.is_file()
                 and not any(part.startswith(".") or part.endswith(".egg-info")
                             for part in p.relative_to(root).parts)]
    return files


def test_no_file_cites_documents_outside_the_repository():
    root = Path(__file__).resolve().parents[1]
    me = Path(__file__).resolve()
    found = []
    files = _tracked_text_files(root)
    assert len(files) > 50  # the listing really saw the repository
    for path in files:
        if path.resolve() == me or not path.is_file():
            continue
        data = path.read_bytes()
        if b"\0" in data[:8192]:  # binary (gzip exports, images)
            continue
        text = data.decode("utf-8", errors="replace")
        for n, line in enumerate(text.splitlines(), 1):
            for needle in OUTSIDE_DOC_MENTIONS:
                if needle in line:
                    found.append(f"{path.relative_to(root)}:{n}: {needle}")
    assert not found, "cite the primary source instead:\n" + "\n".join(found)
