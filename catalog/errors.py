"""Errors a user can cause and fix; shells print their message, never a traceback."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Problem:
    """One validation problem, located as precisely as the input allows.

    ``row`` is the 1-based line number in the file as a spreadsheet shows it (the header is row 1).
    """

    file: str
    row: int | None
    column: str | None
    message: str

    def __str__(self) -> str:
        where = self.file
        if self.row is not None:
            where += f", row {self.row}"
        if self.column is not None:
            where += f", column '{self.column}'"
        return f"{where}: {self.message}"


class CatalogError(Exception):
    """A user-facing error: bad input, busy database, missing data. The message is the whole story."""


class ValidationError(CatalogError):
    """Every problem found in one input, reported together; nothing was written."""

    def __init__(self, problems: list[Problem]):
        self.problems = list(problems)
        lines = [str(p) for p in self.problems]
        super().__init__(f"{len(lines)} problem(s) found; nothing was written:\n  " + "\n  ".join(lines))


class DatabaseBusyError(CatalogError):
    """Another process holds the database for writing."""
