"""Exceptions and warnings of ScreenLab (a leaf module: imports nothing of the project).

Every error a user can cause is a :class:`ScreenlabError`. Input problems are collected as
:class:`Problem` records (file, row, column, value, what was expected) so that one import reports
all of them at once instead of stopping at the first.
"""
from __future__ import annotations

from dataclasses import dataclass


class ScreenlabError(Exception):
    """Base class of every error ScreenLab raises on purpose."""


class UsageError(ScreenlabError, ValueError):
    """A command or function was called with arguments that do not fit (CLI exit code 2)."""


class NotFoundError(ScreenlabError, LookupError):
    """A campaign, catalyst or plate that was asked for is not in the store."""


class StoreBusyError(ScreenlabError):
    """The store file is held by another process (DuckDB allows one writer at a time)."""


class FrameError(ScreenlabError, TypeError):
    """A table handed to an analysis step lacks a column of its declared schema, or holds one of
    another kind (:func:`screenlab.schema.check_frame`): a programming error, not bad input."""


@dataclass(frozen=True)
class Problem:
    """One thing wrong with an input file.

    row is 1-based with the header as row 1 (so the first data row is row 2), or None when the
    problem concerns the whole file; column is the header name, or None.
    """

    file: str
    row: int | None
    column: str | None
    value: str | None
    message: str

    def __str__(self) -> str:
        where = self.file
        if self.row is not None:
            where += f", row {self.row}"
        if self.column is not None:
            where += f", column '{self.column}'"
        val = "" if self.value is None else f" (value {self.value!r})"
        return f"{where}: {self.message}{val}"


class ValidationError(ScreenlabError, ValueError):
    """A campaign folder failed validation; ``problems`` lists everything that was found."""

    def __init__(self, problems: list[Problem], *, source: str = "", cap: int = 50):
        self.problems = list(problems)
        self.source = source
        self.cap = cap
        super().__init__(self._text())

    def _text(self) -> str:
        n = len(self.problems)
        head = f"{self.source}: " if self.source else ""
        lines = [f"{head}{n} problem{'s' if n != 1 else ''} found; nothing was written"]
        for p in self.problems[: self.cap]:
            lines.append(f"  - {p}")
        if n > self.cap:
            lines.append(f"  ... and {n - self.cap} more")
        return "\n".join(lines)


class ScreenlabWarning(UserWarning):
    """Base class of ScreenLab's warnings."""


class DataQualityWarning(ScreenlabWarning):
    """Data that can be analysed but deserves a second look."""
