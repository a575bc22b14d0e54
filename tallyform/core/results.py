"""Shared behaviour of result objects: one protocol, read-only arrays, notes shown with the
numbers.

Result classes are frozen dataclasses (``@dataclass(frozen=True, eq=False)``) that inherit
:class:`ResultMixin` and implement ``to_frame()`` and ``reading``. Every result then offers

* ``to_frame()``: its main table; ``tables()``: every table it has, by name (what the
  report, the exports and ``tly.run(...).tables()`` write);
* ``reading``: a plain sentence, never overstated;
* ``provenance``: the call that made it (function, options, seed, version), recorded by
  :func:`record_call` (the progress decorator calls it on every public long-running call);
  results that keep a ``provenance`` field of their own get the call added to it;
* ``figure(kind=None, **options)``: drawn by :mod:`tallyform.render.figures`, the one place
  that knows which figures a result has (imported lazily: the core never needs plotly);
* ``_repr_html_`` and ``__str__``.

Warnings that could change how a result is read (negative eigenvalues, too few
permutations, a group too small for an ellipse) go in ``notes`` and are printed with the
result, in the notebook and in the report, not only in the documentation.
"""
from __future__ import annotations

import html

import numpy as np
import pandas as pd

__all__ = ["ResultMixin", "readonly", "record_call", "snake_name"]


def readonly(a):
    """A read-only copy of an array (or a copy of a pandas object)."""
    if a is None:
        return None
    if isinstance(a, (pd.DataFrame, pd.Series)):
        return a.copy()
    arr = np.array(a, copy=True)
    arr.setflags(write=False)
    return arr


def snake_name(cls_name: str) -> str:
    """``PermanovaResult`` -> ``permanova``, ``TaxonContributions`` -> ``taxon_contributions``."""
    import re
    base = cls_name[:-6] if cls_name.endswith("Result") and len(cls_name) > 6 else cls_name
    return re.sub(r"(?<!^)(?=[A-Z])", "_", base).lower()


def _simple(value, depth: int = 0):
    """A value as it can be written in a provenance record (JSON-like, short)."""
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, (list, tuple)) and depth < 2 and len(value) <= 50:
        return [_simple(v, depth + 1) for v in value]
    if isinstance(value, dict) and depth < 2 and len(value) <= 50:
        return {str(k): _simple(v, depth + 1) for k, v in value.items()}
    if isinstance(value, np.random.Generator):
        return "a numpy Generator (its seed is not known: pass an int to repeat the call)"
    shape = getattr(value, "shape", None)
    name = type(value).__name__
    if shape is not None:
        return f"{name} of shape {tuple(shape)}"
    n = getattr(value, "n_samples", None)
    if n is not None:
        return f"{name} of {n} samples"
    return name


def record_call(result, function: str, arguments: dict) -> None:
    """Record on ``result`` the public call that made it (kept once: the innermost call of
    a nested computation keeps its own record, the outer one writes its own result's)."""
    if not isinstance(result, ResultMixin) or "_call" in vars(result):
        return
    from .. import __version__
    options = {k: _simple(v) for k, v in arguments.items()
               if k not in ("progress", "cancel") and not isinstance(v, pd.DataFrame)
               and type(v).__name__ not in ("CommunityTable", "Dissimilarity",
                                            "TiledDissimilarity", "Ordination")}
    data = [f"{k}: {_simple(v)}" for k, v in arguments.items() if k not in options
            and k not in ("progress", "cancel")]
    call = {"function": f"tallyform.{function}", "options": options, "data": data,
            "tallyform": __version__}
    object.__setattr__(result, "_call", call)
    own = vars(result).get("provenance")
    if isinstance(own, dict):
        for k, v in call.items():
            own.setdefault("call" if k == "options" else k, v)


class ResultMixin:
    """The result protocol (see the module notes) from ``to_frame()``, ``reading`` and the
    result's notes."""

    notes: tuple = ()

    def to_frame(self) -> pd.DataFrame:  # pragma: no cover - every result overrides it
        raise NotImplementedError

    def tables(self) -> dict:
        """Every table of this result by name (the main one first)."""
        return {snake_name(type(self).__name__): self.to_frame()}

    def figure(self, kind: str | None = None, **kwargs):
        """A plotly figure of this result; ``kind`` one of its figure kinds (None: the
        first). The kinds and their options: :mod:`tallyform.render.figures`."""
        from ..render.figures import figure_for    # the core's one door to the outer ring
        return figure_for(self, kind, **kwargs)

    def __getattr__(self, name):
        # only reached when normal lookup fails: results without a provenance field
        if name == "provenance":
            call = vars(self).get("_call")
            return dict(call) if call else {"result": type(self).__name__}
        raise AttributeError(f"{type(self).__name__!r} object has no attribute {name!r}")

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

    #: number format of the shown table
    _html_format = "{:.4g}"

    def _reading_html(self) -> str:
        text = getattr(self, "reading", "")
        return f"<p>{html.escape(text)}</p>" if isinstance(text, str) and text else ""

    def _repr_html_(self) -> str:
        """Title, the table as shown, the reading, the notes (one layout for every result)."""
        frame = self._frame_html(self.to_frame(), self._html_format)
        return (f"<div><p><b>{html.escape(self._title())}</b></p>{frame}"
                f"{self._reading_html()}{self._notes_html()}</div>")

    def __str__(self) -> str:
        with pd.option_context("display.float_format", "{:.4g}".format,
                               "display.width", 120):
            text = f"{self._title()}\n{self.to_frame().to_string()}"
        if self.notes:
            text += "\n" + "\n".join(f"note: {n}" for n in self.notes)
        return text
