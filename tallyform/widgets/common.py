"""Pieces shared by the dashboard panels: core calls as code, messages, figure copies.

Nothing here computes on data. A :class:`Call` is one public core call written down once:
the panel runs it (through an injectable namespace, ``tallyform`` by default) and the Report
panel prints the very same call as code, so what the widgets did can be rerun without them.
"""
from __future__ import annotations

import html
from dataclasses import dataclass, field
from typing import Any

import ipywidgets as widgets

from ..core.errors import Cancelled, TallyformError

__all__ = ["Ref", "Call", "literal", "given", "transform_code", "error_text", "MessageArea",
           "NotesArea", "copy_figure", "new_figure_widget", "figure_widths", "fit_width", "plots",
           "html_table",
           "LABEL_STYLE", "TABLE"]

TABLE = "tab"   # the variable name the reproduced code gives the table


# ---------------------------------------------------------------------------- calls as code
@dataclass(frozen=True, eq=False)
class Ref:
    """A value that the reproduced code names by an expression (``tab``, ``tab.samples``)."""

    code: str
    value: Any = field(repr=False)


def literal(value) -> str:
    """Python source for a plain option value (str, number, bool, None, tuple, list)."""
    if isinstance(value, Ref):
        return value.code
    if isinstance(value, Call):
        return value.code()
    if isinstance(value, (list, tuple)):
        inner = ", ".join(literal(v) for v in value)
        return f"({inner},)" if isinstance(value, tuple) and len(value) == 1 else (
            f"({inner})" if isinstance(value, tuple) else f"[{inner}]")
    if isinstance(value, str) and '"' not in value and "\\" not in value:
        return f'"{value}"'                  # double quotes, as in our docs
    return repr(value)


@dataclass(frozen=True, eq=False)
class Call:
    """One public core call: ``tly.<func>(*args, **kwargs)``, or ``<obj>.<func>(...)``.

    Arguments may be literals, :class:`Ref` values or nested calls (``tly.pcoa(
    tly.dissimilarity(...))``). ``run`` resolves nested calls first, then calls the function
    found on ``core`` (the ``tallyform`` module unless a test injects another namespace).
    Build ``kwargs`` with :func:`given` to leave out options that should take the core's
    default (in the code and in the call alike).

    Examples
    --------
    >>> import tallyform as tly
    >>> tab = tly.demo("mesocosm")
    >>> call = Call("size_shape", (Ref("tab", tab), "hellinger"), given(transform="sqrt"))
    >>> call.code()
    'tly.size_shape(tab, "hellinger", transform="sqrt")'
    >>> call.run(tly).fractions.equals(
    ...     tly.size_shape(tab, "hellinger", transform="sqrt").fractions)
    True
    """

    func: str
    args: tuple = ()
    kwargs: dict = field(default_factory=dict)
    obj: Ref | None = None

    def _kwargs(self) -> dict:
        return dict(self.kwargs)

    def code(self, prefix: str = "tly") -> str:
        parts = [literal(a) if not isinstance(a, Call) else a.code(prefix) for a in self.args]
        parts += [f"{k}={literal(v) if not isinstance(v, Call) else v.code(prefix)}"
                  for k, v in self._kwargs().items()]
        head = f"{self.obj.code}.{self.func}" if self.obj is not None else f"{prefix}.{self.func}"
        return f"{head}({', '.join(parts)})"

    def run(self, core, **extra):
        """Evaluate the call; ``extra`` keywords (progress, cancel) are not part of the code."""
        def value(v):
            if isinstance(v, Call):
                return v.run(core)
            if isinstance(v, Ref):
                return v.value
            return v
        args = [value(a) for a in self.args]
        kwargs = {k: value(v) for k, v in self._kwargs().items()}
        fn = getattr(self.obj.value, self.func) if self.obj is not None else getattr(core,
                                                                                   self.func)
        return fn(*args, **kwargs, **extra)

    def settings(self) -> dict:
        """The literal options of this call and of the calls nested in it (for the spec)."""
        out = {}
        for a in self.args:
            if isinstance(a, Call):
                out.update(a.settings())
        for k, v in self._kwargs().items():
            if isinstance(v, Call):
                out.update(v.settings())
            elif not isinstance(v, Ref):
                out[k] = v
        return out


def given(**kwargs) -> dict:
    """Keyword options without those set to None (None: use the core's default)."""
    return {k: v for k, v in kwargs.items() if v is not None}


def transform_code(transform) -> str | None:
    """The canonical name of a transform as the core accepts it (None for no transform)."""
    if transform is None:
        return None
    name = transform if isinstance(transform, str) else transform.name
    return None if name == "none" else name


# ---------------------------------------------------------------------------- messages
def error_text(err: BaseException) -> str:
    """A readable one-paragraph message: tallyform's own errors as written, others in a line."""
    if isinstance(err, TallyformError):
        return str(err)
    if isinstance(err, Cancelled):
        return "Cancelled: the run was stopped; nothing was changed."
    text = " ".join(str(err).split()) or "(no message)"
    if len(text) > 300:
        text = text[:297] + "..."
    return f"Unexpected {type(err).__name__}: {text}"


class MessageArea(widgets.HTML):
    """Where a panel says what went wrong (class ``tf-error``; empty when all is well)."""

    def __init__(self, **kw):
        super().__init__(value="", **kw)
        self.add_class("tf-error")
        self.text = ""

    def show_error(self, err: BaseException) -> None:
        self.text = error_text(err)
        self.value = (f"<div class='tf-message' style='color:#A33;padding:4px 0'>"
                      f"{html.escape(self.text)}</div>")

    def clear(self) -> None:
        self.text = ""
        self.value = ""


class NotesArea(widgets.HTML):
    """The plain-language notes of the results on screen (class ``tf-notes``)."""

    def __init__(self, **kw):
        super().__init__(value="", **kw)
        self.add_class("tf-notes")
        self.items: list[str] = []

    def show(self, notes) -> None:
        self.items = list(dict.fromkeys(str(n) for n in (notes or ())))
        if not self.items:
            self.value = ""
            return
        lis = "".join(f"<li>{html.escape(n)}</li>" for n in self.items)
        self.value = f"<ul style='margin:2px 0'>{lis}</ul>"

    def clear(self) -> None:
        self.show(())


# ---------------------------------------------------------------------------- figures
def plots():
    """The render ring's figure functions (imported on first use)."""
    from ..render import plots as _plots
    return _plots


def copy_figure(target, fig) -> None:
    """Replace the traces and layout of a FigureWidget by those of ``fig``, in one redraw.

    When the template is the one already on the widget, only the other layout keys are
    written (keys of the previous figure that ``fig`` lacks are reset), which skips
    re-validating the whole template: about half the cost of a copy on the live path.
    """
    fixed = getattr(target, "_tf_fixed", None)
    if fixed:                        # the size given once the widget was shown
        fig.update_layout(fixed)
    layout = fig.layout.to_plotly_json()
    template = layout.pop("template", None)
    same = template is not None and template == getattr(target, "_tf_template", None)
    with target.batch_update():
        target.data = ()
        target.add_traces(list(fig.data))
        if same:
            for key in getattr(target, "_tf_keys", set()) - set(layout):
                layout[key] = None
            target.update_layout(layout, overwrite=True)
        else:
            target.layout = fig.layout
    target._tf_template = template
    target._tf_keys = set(layout)


def new_figure_widget(css_class: str | None = None):
    import plotly.graph_objects as go
    fw = go.FigureWidget()
    if css_class:
        fw.add_class(css_class)
    return fw


def fit_width(fw, width: int, *, legend_below: bool = False) -> None:
    """Give a figure widget on screen a fixed width (px), in one relayout. Called when its
    tab is shown: a figure first drawn in a hidden tab has plotly's default 700 px.
    ``legend_below`` moves the legend under a narrow plot (styling only)."""
    fixed = {"width": int(width)}
    if legend_below:
        fixed["legend"] = {"orientation": "h", "x": 0.0, "y": -0.25}
    fw._tf_fixed = fixed                 # kept by every later copy_figure
    with fw.batch_update():
        fw.update_layout(fixed)


def figure_widths(widths: dict) -> "widgets.HTML":
    """A style giving figure widgets (by CSS class) a fixed width in px, so that two sit
    side by side where the page is wide enough and wrap below otherwise; plotly sizes the
    figure to it when the tab is shown (a width in the figure itself is not used: the
    widget then skips that resize)."""
    rules = "".join(f".{cls}{{width:{int(w)}px;flex:none;max-width:100%}}"
                    for cls, w in widths.items())
    return widgets.HTML(f"<style>{rules}</style>", layout=widgets.Layout(height="0px"))


LABEL_STYLE = {"description_width": "110px"}   # room for "Permutations", "Shape measure"


def html_table(frame, *, float_format="{:.4g}".format) -> str:
    """A DataFrame as an HTML table for display (formatting only: columns in words,
    p < 0.001, yes/no)."""
    from ..core.display import display_frame
    return TABLE_STYLE + display_frame(frame).to_html(float_format=float_format, border=0,
                                                      classes="tf-table", na_rep="")


# widgets' HTML is not styled by the notebook's table rules: a small style of our own
TABLE_STYLE = ("<style>.tf-table{border-collapse:collapse;font-size:13px;margin:4px 0}"
               ".tf-table th,.tf-table td{border:1px solid #d6d6d6;padding:2px 8px;"
               "text-align:right}.tf-table thead th{background:#f1f3f5}"
               ".tf-table tbody tr:nth-child(even){background:#fafafa}</style>")
