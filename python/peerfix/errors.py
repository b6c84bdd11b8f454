"""Errors that point at the bad input: file, line and field."""

from __future__ import annotations

from pathlib import Path


class InputError(Exception):
    """Bad input: names the file, the 1-based line (0 = whole file) and the field.

    The CLI prints str(error) on stderr and exits with status 2.
    """

    def __init__(self, path: str | Path, line: int, field: str | None, message: str):
        self.path = str(path)
        self.line = line
        self.field = field
        self.message = message
        where = f"{self.path}:{line}" if line else self.path
        what = f" field '{field}':" if field else ""
        super().__init__(f"{where}:{what} {message}")
