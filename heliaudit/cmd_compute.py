"""Subcommands (filled by the owning issue)."""

COMMANDS: list = []
