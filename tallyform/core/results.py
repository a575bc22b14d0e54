"""Shared behaviour of result objects: read-only arrays, notes shown with the numbers.

Result classes are frozen dataclasses (``@dataclass(frozen=True, eq=False)``) that inherit
:class:`ResultMixin` and implement ``to_frame()``. Warnings that could change how a result
is read (negative eigenvalues, too few permutations, a group too small for an ellipse) go in
``notes`` and are printed with the result, in the notebook and in the report, not only in the
documentation.
"""
from __future__ import annotations

import html

import numpy as np
import pandas as pd

__all__ = ["ResultMixin", "readonly"]


def readonly(a):
    """A read-only copy of an array (or a copy of a pandas object)."""
    if a is None:
        return None
    if isinstance(a, (pd.DataFrame, pd.Series)):
        return a.copy()
    arr = np.array(a, copy=True)
    arr.setflags(write=False)
    return arr


class ResultMixin:
    """``_repr_html_`` and ``__str__`` from ``to_frame()`` plus the result's notes."""

    notes: tuple = ()

    def to_frame(self) -> pd.DataFrame:  # pragma: no cover - every result overrides it
        raise NotImplementedError

    def _title(self) -> str:
        return type(self).__name__

    def _notes_html(self) -> str:
        if not self.notes:
            return ""
        items = "".join(f"<li>{html.escape(str(n))}</li>" for n in self.notes)
        return f"<ul class='tallyform-notes'>{items}</ul>"

    def display_labels(self) -> dict:
        """Labels of this result's own columns for display (the shared ones are in
        :data:`tallyform.core.display.LABELS`); ``to_frame()`` keeps the programmatic names."""
        return {}

    def _frame_html(self, frame, fmt: str = "{:.4g}") -> str:
        """A table of this result as shown: columns in words, p < 0.001, yes/no."""
        from .display import display_frame
        return display_frame(frame, rename=self.display_labels()).to_html(
            float_format=fmt.format, na_rep="")

    def _repr_html_(self) -> str:
        frame = self._frame_html(self.to_frame())
        return (f"<div><p><b>{html.escape(self._title())}</b></p>{frame}"
                f"{self._notes_html()}</div>")

    def __str__(self) -> str:
        with pd.option_context("display.float_format", "{:.4g}".format,
                               "display.width", 120):
            text = f"{self._title()}\n{self.to_frame().to_string()}"
        if self.notes:
            text += "\n" + "\n".join(f"note: {n}" for n in self.notes)
        return text
