"""Errors and warnings that tallyform raises for the user to read.

Every error says *where* (file, row, column or argument), *what* was found and *what to do*.
All errors subclass :class:`ValueError`, so ``except ValueError`` keeps working in user code.
"""
from __future__ import annotations

__all__ = [
    "TallyformError",
    "InputError",
    "DesignError",
    "TooLargeError",
    "Cancelled",
    "TallyformWarning",
    "Location",
]

from dataclasses import dataclass


@dataclass(frozen=True)
class Location:
    """Where in the user's input something was found.

    ``row`` and ``column`` are what a person looking at the file would call them: a 1-based
    line number and a header name for delimited text, a cell reference for a spreadsheet,
    a label for an in-memory table.
    """

    file: str | None = None
    sheet: str | None = None
    row: str | int | None = None
    column: str | int | None = None
    cell: str | None = None

    def __str__(self) -> str:
        parts = []
        if self.file:
            parts.append(f"file {self.file!r}")
        if self.sheet:
            parts.append(f"sheet {self.sheet!r}")
        if self.cell:
            parts.append(f"cell {self.cell}")
        if self.row is not None:
            parts.append(f"row {self.row}" if isinstance(self.row, int) else str(self.row))
        if self.column is not None:
            parts.append(f"column {self.column}" if isinstance(self.column, int)
                         else str(self.column))
        return ", ".join(parts)


class TallyformError(ValueError):
    """Base class of the errors tallyform raises on purpose."""

    def __init__(self, message: str, *, location: Location | None = None,
                 hint: str | None = None):
        self.location = location
        self.hint = hint
        self.detail = message
        text = message
        where = str(location) if location is not None else ""
        if where and where not in message:      # no "'site': column 'site' is ..." echoes
            text = f"{where}: {text}"
        if hint:
            text = f"{text} {hint}"
        super().__init__(text)

    # Convenience accessors for programs (and the dashboard) that show errors in parts.
    @property
    def file(self):
        return None if self.location is None else self.location.file

    @property
    def row(self):
        return None if self.location is None else self.location.row

    @property
    def column(self):
        return None if self.location is None else self.location.column


class InputError(TallyformError):
    """The data cannot be used as given (a bad cell, a missing label, an empty table...)."""


class DesignError(TallyformError):
    """The sample design cannot support the analysis (unknown column, one-level factor...)."""


class TooLargeError(TallyformError):
    """A computation would need more memory than the configured limit.

    Attributes
    ----------
    needed_bytes, limit_bytes : int
    """

    def __init__(self, message: str, *, needed_bytes: int, limit_bytes: int,
                 hint: str | None = None):
        self.needed_bytes = int(needed_bytes)
        self.limit_bytes = int(limit_bytes)
        super().__init__(message, hint=hint)


class Cancelled(RuntimeError):
    """A long computation was stopped by its cancel callback; no partial result exists."""


class TallyformWarning(UserWarning):
    """A result can be computed but could mislead; the text says how."""


def format_bytes(n: float) -> str:
    """Human-readable size, e.g. ``format_bytes(3.2e9) == '3.2 GB'`` (decimal units)."""
    n = float(n)
    for unit in ("B", "kB", "MB", "GB", "TB"):
        if abs(n) < 1000 or unit == "TB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1000.0
    raise AssertionError("unreachable")
