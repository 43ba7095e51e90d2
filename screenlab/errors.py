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


@dataclass(frozen=True)
class ProblemGroup:
    """The problems of one file that say the same thing about the same column and value on
    several rows (one mistyped plate id or well name reported on each of its readings, say):
    ``first`` (the one at the lowest row) and every ``rows`` it was found on, ascending."""

    first: Problem
    rows: tuple[int, ...]

    def __str__(self) -> str:
        p = self.first
        if len(self.rows) <= 1:
            return str(p)
        where = f"{p.file}, rows {row_ranges(self.rows)} ({len(self.rows)} rows)"
        if p.column is not None:
            where += f", column '{p.column}'"
        val = "" if p.value is None else f" (value {p.value!r})"
        return f"{where}: {p.message}{val}"


def row_ranges(rows, most: int = 6) -> str:
    """Ascending row numbers as runs: ``2-9, 14, 20-25``; after ``most`` runs, ``and N more``."""
    runs: list[list[int]] = []
    for r in rows:
        if runs and r == runs[-1][1] + 1:
            runs[-1][1] = r
        else:
            runs.append([r, r])
    text = [f"{a}" if a == b else f"{a}–{b}" for a, b in runs[:most]]
    if len(runs) > most:
        text.append(f"and {sum(b - a + 1 for a, b in runs[most:])} more")
    return ", ".join(text)


def group_problems(problems) -> list[ProblemGroup]:
    """``problems`` with the same file, column, value and message on different rows gathered into
    one :class:`ProblemGroup` each, in the order their first row was found; a problem of a whole
    file (no row) stays alone."""
    groups: dict[tuple, list[Problem]] = {}
    for i, p in enumerate(problems):
        key = (p.file, p.column, p.value, p.message) if p.row is not None else (i,)
        groups.setdefault(key, []).append(p)
    out = []
    for members in groups.values():
        rows = sorted({p.row for p in members if p.row is not None})
        first = min(members, key=lambda p: (p.row is None, p.row or 0))
        out.append(ProblemGroup(first, tuple(rows)))
    return out


class ValidationError(ScreenlabError, ValueError):
    """A campaign folder failed validation; ``problems`` lists everything that was found (its
    message gathers the problems that repeat over rows, :func:`group_problems`)."""

    def __init__(self, problems: list[Problem], *, source: str = "", cap: int = 50):
        self.problems = list(problems)
        self.source = source
        self.cap = cap
        super().__init__(self._text())

    def _text(self) -> str:
        n = len(self.problems)
        head = f"{self.source}: " if self.source else ""
        lines = [f"{head}{n} problem{'s' if n != 1 else ''} found; nothing was written"]
        groups = group_problems(self.problems)
        for g in groups[: self.cap]:
            lines.append(f"  - {g}")
        if len(groups) > self.cap:
            rest = sum(max(len(g.rows), 1) for g in groups[self.cap:])
            lines.append(f"  ... and {rest} more")
        return "\n".join(lines)


class ScreenlabWarning(UserWarning):
    """Base class of ScreenLab's warnings."""


class DataQualityWarning(ScreenlabWarning):
    """Data that can be analysed but deserves a second look."""
