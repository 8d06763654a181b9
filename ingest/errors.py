"""Errors raised for bad input files, rendered like compiler messages.

``IngestError(path, line, column, message)`` prints as
``site_a_2024-05.csv:118:PAC: value 'n/a' is not a number`` (``:column`` only where a column
applies; the column is the header text). The message says what was expected and, where we
can tell, how to fix it (``hint``). Commands turn an ``IngestError`` into one ``Error:`` line.
"""

from __future__ import annotations

import os
from dataclasses import dataclass


class IngestError(Exception):
    """A file that cannot be loaded; names the file, line (1-based, physical) and column."""

    def __init__(self, path: str | os.PathLike, line: int | None, column: str | None,
                 message: str, hint: str | None = None):
        self.path = os.fspath(path)
        self.line = line
        self.column = column
        self.message = message
        self.hint = hint
        super().__init__(self.render())

    def render(self) -> str:
        where = os.path.basename(self.path) or self.path
        if self.line is not None:
            where += f":{self.line}"
        if self.column is not None:
            where += f":{self.column}"
        text = f"{where}: {self.message}"
        if self.hint:
            text += f"; {self.hint}"
        return text


@dataclass(frozen=True)
class Rejected:
    """One rejected value (``column`` set) or whole row (``column`` None), kept in ``rejected_row``."""

    line: int
    column: str | None
    reason: str
    raw: str | None = None
