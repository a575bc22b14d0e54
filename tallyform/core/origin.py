"""Where a table's values came from: file, sheet, line and column of every label, so that
errors raised long after reading can still name the place the user can open.

Also the small helpers that write labels and values the way a person reads them.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Iterable, Mapping

import numpy as np

from .errors import Location

__all__ = ["Origin"]

MAX_LISTED = 8


def listing(items: Iterable, limit: int = MAX_LISTED) -> str:
    items = [str(x) for x in items]
    shown = ", ".join(repr(x) for x in items[:limit])
    more = len(items) - limit
    return shown + (f" and {more} more" if more > 0 else "")


def column_letter(j: int) -> str:
    """0-based column index -> spreadsheet letters (0 -> 'A', 26 -> 'AA')."""
    letters = ""
    j += 1
    while j:
        j, r = divmod(j - 1, 26)
        letters = chr(65 + r) + letters
    return letters


@dataclass(frozen=True)
class Origin:
    """Where a table's cells came from, so errors can name the place the user can open.

    Parameters
    ----------
    file : str or None
        File name as the user gave it.
    sheet : str or None
        Spreadsheet sheet name (XLSX only).
    rows : {'samples', 'taxa'}
        What the rows of the file were.
    row_numbers : mapping label -> int
        1-based line (text) or row (spreadsheet) number of each row label.
    column_numbers : mapping label -> int
        0-based column index of each column label in the file.
    spreadsheet : bool
        Report cells as spreadsheet references (``C7``) rather than line and column.
    """

    file: str | None = None
    sheet: str | None = None
    rows: str = "samples"
    row_numbers: Mapping[str, int] = field(default_factory=dict)
    column_numbers: Mapping[str, int] = field(default_factory=dict)
    spreadsheet: bool = False

    def cell(self, sample: str, taxon: str) -> Location:
        row_label, col_label = (sample, taxon) if self.rows == "samples" else (taxon, sample)
        r = self.row_numbers.get(row_label)
        c = self.column_numbers.get(col_label)
        if self.file is None:  # an in-memory table: name cells by label and position
            return Location(row=f"sample {sample!r}" + (f" (row {r})" if r else ""),
                            column=f"taxon {taxon!r}" + (f" (column {c + 1})" if c is not None
                                                         else ""))
        what = f"(sample {sample!r}, taxon {taxon!r})"
        if self.spreadsheet and r is not None and c is not None:
            return Location(file=self.file, sheet=self.sheet,
                            cell=f"{column_letter(c)}{r} {what}")
        row = f"line {r}" if r is not None else f"row {row_label!r}"
        col = (f"column {c + 1} ({col_label!r})" if c is not None else f"column {col_label!r}")
        return Location(file=self.file, sheet=self.sheet, row=f"{row} {what}", column=col)

    def label(self, label: str, axis: str) -> Location:
        """Location of a whole sample or taxon (``axis`` is 'samples' or 'taxa')."""
        if self.file is None:
            return Location(row=f"{'sample' if axis == 'samples' else 'taxon'} {label!r}")
        if axis == self.rows:
            r = self.row_numbers.get(label)
            return Location(file=self.file, sheet=self.sheet,
                            row=f"line {r} ({label!r})" if r is not None else repr(label))
        c = self.column_numbers.get(label)
        col = (column_letter(c) if self.spreadsheet else c + 1) if c is not None else None
        return Location(file=self.file, sheet=self.sheet,
                        column=f"column {col} ({label!r})" if col is not None else repr(label))


def shown_value(x) -> str:
    """A value as a person would write it (3, 0.5, 'abc'; never np.float64(3.0))."""
    if isinstance(x, (bool, np.bool_)):
        return repr(bool(x))
    if isinstance(x, (int, float, np.integer, np.floating)):
        return f"{float(x):g}"
    return repr(x)
