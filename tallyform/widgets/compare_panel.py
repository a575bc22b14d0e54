"""The Compare panel: two choices side by side (partition bars and ordinations).

For each of the two settings (transform + measure), the same core calls as the Size & shape
panel: ``tly.size_shape(tab, measure, transform=...)`` -> partition bars, and
``tly.pcoa(tly.dissimilarity(tab, measure, transform=...), dims=2)`` -> ordination. The
second ordination is drawn rotated/reflected onto the first (orthogonal Procrustes, a core
function), so the two pictures can be read against each other. A lab meeting sees at a
glance how much of each choice's variation is size and how much is shape.
"""
from __future__ import annotations

import html

import ipywidgets as widgets
import traitlets

from ..core.measures import MEASURES
from ..core.procrustes import align_ordination
from ..core.transforms import TRANSFORMS
from .common import (TABLE, Call, MessageArea, NotesArea, Ref, copy_figure, figure_widths,
                     fit_width, given, new_figure_widget, plots, transform_code)
from .help import add_help, transform_words

__all__ = ["ComparePanel", "DEFAULT_A", "DEFAULT_B"]

DEFAULT_A = ("none", "bray_curtis")          # counts as they are + Bray-Curtis
DEFAULT_B = ("none", "hellinger")            # Hellinger: composition only
COLUMN_WIDTH = 420                           # px: two columns on a 970 px screen


def _transform_options() -> list[tuple[str, str]]:
    return [(transform_words(name), name) for name in TRANSFORMS]


def _measure_options() -> list[tuple[str, str]]:
    return [(rec.label, name) for name, rec in MEASURES.items()]


def _setting_words(transform: str, measure: str) -> str:
    tr = transform_words(transform)
    return f"{MEASURES[measure].label}" + ("" if transform == "none" else f" of {tr}")


class ComparePanel(widgets.VBox):
    """Two (transform, measure) settings next to each other.

    Attributes
    ----------
    transform_a, measure_a, transform_b, measure_b : Dropdown
    group : Dropdown (linked to the dashboard's group)
    results : dict
        ``{"a": SizeShapeResult, "b": ...}`` of the settings shown.
    ordinations : dict
        ``{"a": Ordination, "b": Ordination}`` as drawn (b rotated onto a).
    calls : dict
        The core calls (``partition_a``, ``ordination_a``, ``partition_b``...).
    partition_a, partition_b, ordination_a, ordination_b : plotly FigureWidget
    """

    revision = traitlets.Int(0)

    def __init__(self, table, *, group: str | None = None, core=None, present: bool = False):
        import tallyform
        from .shape_panel import default_group, group_options
        self._table = table
        self._core = tallyform if core is None else core
        self._present = present
        self.results: dict = {}
        self.ordinations: dict = {}
        self.calls: dict = {}
        self.transform_a = widgets.Dropdown(options=_transform_options(), value=DEFAULT_A[0],
                                            description="A: transform")
        self.measure_a = widgets.Dropdown(options=_measure_options(), value=DEFAULT_A[1],
                                          description="A: measure")
        self.transform_b = widgets.Dropdown(options=_transform_options(), value=DEFAULT_B[0],
                                            description="B: transform")
        self.measure_b = widgets.Dropdown(options=_measure_options(), value=DEFAULT_B[1],
                                          description="B: measure")
        self.group = widgets.Dropdown(options=group_options(table), description="Group",
                                      value=default_group(table) if group is None else group)
        for w, cls in ((self.transform_a, "tf-compare-a"), (self.measure_a, "tf-compare-a"),
                       (self.transform_b, "tf-compare-b"), (self.measure_b, "tf-compare-b"),
                       (self.group, "tf-group")):
            w.add_class(cls)
            w.style.description_width = "90px"
            add_help(w, cls)
        for w, name in ((self.transform_a, "transform-a"), (self.measure_a, "measure-a"),
                        (self.transform_b, "transform-b"), (self.measure_b, "measure-b")):
            w.add_class(f"tf-compare-{name}")
        self.controls = [self.transform_a, self.measure_a, self.transform_b, self.measure_b,
                         self.group]
        self.partition_a = new_figure_widget("tf-compare-partition-a")
        self.partition_b = new_figure_widget("tf-compare-partition-b")
        self.ordination_a = new_figure_widget("tf-compare-ordination-a")
        self.ordination_b = new_figure_widget("tf-compare-ordination-b")
        style = figure_widths({f"tf-compare-{w}-{k}": COLUMN_WIDTH
                               for w in ("partition", "ordination") for k in "ab"})
        self.heading_a = widgets.HTML()
        self.heading_b = widgets.HTML()
        self.messages = MessageArea()
        self.notes = NotesArea()
        side = dict(width=f"{COLUMN_WIDTH + 6}px")
        col_a = widgets.VBox([self.heading_a, self.partition_a, self.ordination_a],
                             layout=widgets.Layout(**side))
        col_b = widgets.VBox([self.heading_b, self.partition_b, self.ordination_b],
                             layout=widgets.Layout(**side))
        col_a.add_class("tf-compare-a-column")
        col_b.add_class("tf-compare-b-column")
        super().__init__([
            widgets.HTML("<b>Compare two choices</b>: the same data under two settings, side "
                         "by side; B's ordination is turned to match A's (distances "
                         "unchanged)."),
            widgets.HBox([self.transform_a, self.measure_a]),
            widgets.HBox([self.transform_b, self.measure_b, self.group]),
            self.messages, style,
            widgets.HBox([col_a, col_b], layout=widgets.Layout(flex_flow="row wrap",
                                                               width="100%")),
            self.notes])
        self.add_class("tf-panel-compare")
        for w in self.controls:
            w.observe(lambda change: self.refresh(), names="value")
        self.refresh()

    def build_calls(self) -> dict:
        tab = Ref(TABLE, self._table)
        out = {}
        for key, tr, m in (("a", self.transform_a.value, self.measure_a.value),
                           ("b", self.transform_b.value, self.measure_b.value)):
            t = transform_code(tr)
            out[f"partition_{key}"] = Call("size_shape", (tab, m), given(transform=t))
            out[f"ordination_{key}"] = Call("pcoa", (Call("dissimilarity", (tab, m),
                                                          given(transform=t)),), {"dims": 2})
        return out

    def refresh(self) -> None:
        """Run the four calls, draw the four figures (B's ordination turned onto A's)."""
        self.messages.clear()
        calls = self.build_calls()
        self.calls = calls
        group = (self._table.group(self.group.value) if self.group.value else None)
        notes: list = []
        try:
            res = {k: calls[f"partition_{k}"].run(self._core) for k in ("a", "b")}
            ords = {k: calls[f"ordination_{k}"].run(self._core) for k in ("a", "b")}
            ords["b"] = align_ordination(ords["b"], ords["a"])
            p = plots()
            figs = {}
            for k in ("a", "b"):
                figs[f"partition_{k}"] = p.partition_bars(res[k], present=self._present)
                figs[f"ordination_{k}"] = p.ordination_figure(ords[k], group=group,
                                                              present=self._present)
        except Exception as err:             # shown in the panel, never a traceback
            self.results, self.ordinations = {}, {}
            self.messages.show_error(err)
            for fw in (self.partition_a, self.partition_b, self.ordination_a,
                       self.ordination_b):
                with fw.batch_update():
                    fw.data = ()
            self.revision += 1
            return
        self.results, self.ordinations = res, ords
        for k in ("a", "b"):
            copy_figure(getattr(self, f"partition_{k}"), figs[f"partition_{k}"])
            copy_figure(getattr(self, f"ordination_{k}"), figs[f"ordination_{k}"])
            notes += [f"{k.upper()}: {n}" for n in (*res[k].notes, *ords[k].notes)]
        for k, head in (("a", self.heading_a), ("b", self.heading_b)):
            f = res[k].fractions
            tr = self.transform_a.value if k == "a" else self.transform_b.value
            m = self.measure_a.value if k == "a" else self.measure_b.value
            head.value = (f"<div class='tf-compare-heading'><b>{k.upper()}: "
                          f"{html.escape(_setting_words(tr, m))}</b><br>size only "
                          f"<b>{f['size_only']:.1%}</b>, shared {f['shared']:.1%}, shape "
                          f"only <b>{f['shape_only']:.1%}</b>, residual "
                          f"{f['residual']:.1%}</div>")
        self.notes.show(notes)
        self.revision += 1

    def fit_figures(self) -> None:
        """Size the four figures for two columns (called when the tab is shown)."""
        for fw in (self.partition_a, self.partition_b, self.ordination_a, self.ordination_b):
            fit_width(fw, COLUMN_WIDTH)

    def code_lines(self) -> list[str]:
        """The calls as code (for the Report panel)."""
        out = []
        for k in ("a", "b"):
            out.append(f"s_{k} = {self.calls[f'partition_{k}'].code()}")
            out.append(f"o_{k} = {self.calls[f'ordination_{k}'].code()}")
        out.append("from tallyform.core.procrustes import align_ordination")
        out.append("o_b = align_ordination(o_b, o_a)   # B turned onto A, distances unchanged")
        return out

    def set_present(self, on: bool = True) -> None:
        self._present = on
        for w in self.controls:
            w.layout.display = "none" if on else None
        self.refresh()
