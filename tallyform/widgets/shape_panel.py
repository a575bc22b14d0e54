"""The Size & shape panel: transform exponent, measure, shape basis; partition and ordination.

Two core calls drive it, each shown as code by the Report panel:

* ``tly.size_shape(tab, measure, transform=..., size=..., shape=..., shape_dims=...)``
  -> partition bars;
* ``tly.pcoa(tly.dissimilarity(tab, measure, transform=...), dims=2)`` (and
  ``o.ellipses(tab.group(column))`` when a group is chosen) -> ordination.

A change re-runs only the calls whose arguments changed: the group touches only the
ellipses and colours, the shape basis only the partition.
"""
from __future__ import annotations

import contextlib
import html
import time

import ipywidgets as widgets
import traitlets

from ..core.measures import MEASURES
from ..core.partition import SHAPE_OPTIONS, SIZE_OPTIONS
from ..core.transforms import TRANSFORMS
from .common import (TABLE, Call, MessageArea, NotesArea, Ref, copy_figure, given,
                     new_figure_widget, plots, transform_code)

__all__ = ["ShapePanel", "LIVE_BUDGET", "POWER", "group_options"]

LIVE_BUDGET = 0.15        # seconds of compute under which the slider updates while dragged
POWER = "power"           # the transform choice read from the exponent slider
_POWER_FAMILY = {"none", "sqrt", "fourth_root", "presence"}   # exponents 1, 1/2, 1/4, 0
_SIZE_LABELS = {"log_total": "log total", "total": "total",
                "log_total_per_effort": "log total per effort"}
_SHAPE_LABELS = {"chi_square": "chi-square profiles", "hellinger": "Hellinger profiles",
                 "aitchison": "Aitchison (log-ratios)",
                 "same_measure": "same measure, equal totals"}
_MAX_DIMS_LISTED = 30


def transform_options() -> list[tuple[str, str]]:
    """Dropdown options: the exponent slider, then the named transforms it cannot reach."""
    named = [(t.label, name) for name, t in TRANSFORMS.items() if name not in _POWER_FAMILY]
    return [("power (exponent slider)", POWER)] + named


def measure_options() -> list[tuple[str, str]]:
    return [(rec.label, name) for name, rec in MEASURES.items()]


def group_options(table) -> list[tuple[str, str]]:
    """``(none)`` and every column of the sample information ('' stands for none)."""
    return [("(none)", "")] + [(str(c), str(c)) for c in table.samples.columns]


def default_group(table) -> str:
    """The first sample-information column that is not numeric, or none."""
    import pandas as pd
    for c in table.samples.columns:
        col = table.samples[c]
        if not pd.api.types.is_numeric_dtype(col) or pd.api.types.is_bool_dtype(col):
            return str(c)
    return ""


class ShapePanel(widgets.VBox):
    """Partition bars and ordination of the current (transform, measure) choice, kept live.

    Parameters
    ----------
    table : CommunityTable
    group : str, optional
        Sample-information column that colours the ordination ('' for none).
    present : bool
        Large fonts in the figures (the dashboard hides the other controls).
    core : module-like, optional
        Where the public functions are looked up (``tallyform`` by default; tests inject
        a recording namespace).

    Attributes
    ----------
    exponent, transform, measure, size, shape, shape_dims, group, ellipses : widgets
        The controls (set ``.value`` to drive the panel from code).
    result : SizeShapeResult or None
        The partition shown (None after an error).
    ordination, ellipse_set : Ordination, EllipseSet or None
    partition_plot, ordination_plot : plotly FigureWidget
    messages : MessageArea
        The error that stopped an update (empty when all is well).
    notes : NotesArea
        Plain-language notes of the results shown.
    calls : dict
        The core calls behind what is shown (``partition``, ``ordination``, ``ellipses``).
    last_compute : float
        Seconds spent in core calls by the last update.
    """

    revision = traitlets.Int(0)      # incremented after every update (the Report listens)

    def __init__(self, table, *, group: str | None = None, present: bool = False, core=None):
        import tallyform
        self._table = table
        self._core = tallyform if core is None else core
        self._present = present
        self._hold = False
        self._done: dict = {}        # call code -> result, for the calls now on screen
        self.result = self.ordination = self.ellipse_set = None
        self.error: BaseException | None = None
        self.calls: dict = {}
        self.last_compute = 0.0

        self.exponent = widgets.FloatSlider(value=1.0, min=0.0, max=1.0, step=0.05,
                                            description="Exponent", readout_format=".2f",
                                            continuous_update=False)
        self.exponent.add_class("tf-exponent-slider")
        self.transform = widgets.Dropdown(options=transform_options(), value=POWER,
                                          description="Transform")
        self.transform.add_class("tf-transform")
        self.measure = widgets.Dropdown(options=measure_options(), value="bray_curtis",
                                        description="Measure")
        self.measure.add_class("tf-measure")
        sizes = [s for s in SIZE_OPTIONS
                 if s != "log_total_per_effort" or table.effort is not None]
        self.size = widgets.Dropdown(options=[(_SIZE_LABELS[s], s) for s in sizes],
                                     value="log_total", description="Size")
        self.size.add_class("tf-size")
        self.shape = widgets.Dropdown(options=[(_SHAPE_LABELS[s], s) for s in SHAPE_OPTIONS],
                                      value="chi_square", description="Shape basis")
        self.shape.add_class("tf-shape-basis")
        top = max(1, min(table.n_samples - 3, _MAX_DIMS_LISTED))
        self.shape_dims = widgets.Dropdown(
            options=[("auto", 0)] + [(str(k), k) for k in range(1, top + 1)], value=0,
            description="Shape dims")
        self.shape_dims.add_class("tf-shape-dims")
        self.group = widgets.Dropdown(options=group_options(table), description="Group",
                                      value=default_group(table) if group is None else group)
        self.group.add_class("tf-group")
        self.ellipses = widgets.Checkbox(value=True, description="95 % confidence ellipses",
                                         indent=False)
        self.ellipses.add_class("tf-ellipses")

        self.partition_plot = new_figure_widget("tf-partition-plot")
        self.ordination_plot = new_figure_widget("tf-ordination-plot")
        self.fractions_text = widgets.HTML()
        self.fractions_text.add_class("tf-partition-summary")
        self.messages = MessageArea()
        self.notes = NotesArea()

        self.controls = [self.transform, self.measure, self.size, self.shape,
                         self.shape_dims, self.group, self.ellipses]
        row1 = widgets.HBox([self.exponent, self.transform, self.measure])
        row2 = widgets.HBox([self.size, self.shape, self.shape_dims])
        row3 = widgets.HBox([self.group, self.ellipses])
        plots_row = widgets.HBox([self.partition_plot, self.ordination_plot],
                                 layout=widgets.Layout(flex_flow="row wrap"))
        super().__init__([row1, row2, row3, self.messages, self.fractions_text, plots_row,
                          self.notes])
        self.add_class("tf-panel-shape")

        self.exponent.observe(self._exponent_moved, names="value")
        for w in self.controls:
            w.observe(self._changed, names="value")
        self.refresh()
        # live while dragging only when an update fits the budget (measured, not assumed)
        self.exponent.continuous_update = self.last_compute <= LIVE_BUDGET
        if present:
            self.set_present(True)

    # ------------------------------------------------------------------ controls -> spec
    def transform_value(self) -> str | None:
        """The transform as the core accepts it: a canonical name, or None."""
        if self.transform.value == POWER:
            from ..core.transforms import Power
            return transform_code(Power(round(float(self.exponent.value), 4)))
        return transform_code(self.transform.value)

    def build_calls(self) -> dict:
        """The core calls for the current control values (nothing is run)."""
        tab = Ref(TABLE, self._table)
        measure, tr = self.measure.value, self.transform_value()
        calls = {
            "partition": Call("size_shape", (tab, measure), given(
                transform=tr, size=self.size.value, shape=self.shape.value,
                shape_dims=self.shape_dims.value or None)),
            "ordination": Call("pcoa", (Call("dissimilarity", (tab, measure),
                                             given(transform=tr)),), {"dims": 2}),
        }
        if self.group.value:
            calls["group"] = Call("group", (self.group.value,), obj=tab)
            if self.ellipses.value:
                calls["ellipses"] = Call("ellipses", (calls["group"],),
                                         {"kind": "confidence"}, obj=Ref("o", None))
        return calls

    def spec_values(self) -> dict:
        """This panel's choices under their :class:`tallyform.AnalysisSpec` names."""
        return {"transform": self.transform_value() or "none", "measure": self.measure.value,
                "size": self.size.value, "shape": self.shape.value,
                "shape_dims": self.shape_dims.value or None,
                "ellipse": "confidence" if self.ellipses.value else None,
                "group": self.group.value or None}

    def apply_spec(self, spec) -> None:
        """Set the controls from a spec, with one update (the group is set by the dashboard)."""
        from ..core.transforms import Power, get_transform
        tr = get_transform(spec.transform)
        with self.hold():
            if isinstance(tr, Power) or tr.name in _POWER_FAMILY:
                a = tr.a if isinstance(tr, Power) else {"none": 1.0, "sqrt": 0.5,
                                                       "fourth_root": 0.25,
                                                       "presence": 0.0}[tr.name]
                self.transform.value = POWER
                self.exponent.value = a
            else:
                self.transform.value = tr.name
            self.measure.value = spec.measure
            self.size.value = spec.size
            self.shape.value = spec.shape
            self.shape_dims.value = spec.shape_dims or 0
            self.ellipses.value = spec.ellipse is not None

    # ------------------------------------------------------------------ events
    @contextlib.contextmanager
    def hold(self):
        """Set several controls with a single update at the end."""
        self._hold = True
        try:
            yield
        finally:
            self._hold = False
        self.refresh()

    def _exponent_moved(self, change):
        if self._hold:
            return
        if self.transform.value != POWER:
            with self.hold():                 # moving the slider means "use the exponent"
                self.transform.value = POWER
        else:
            self._changed(change)
        # live while dragging only as long as an update fits the budget (measured each time)
        self.exponent.continuous_update = self.last_compute <= LIVE_BUDGET

    def _changed(self, change=None):
        if not self._hold:
            self.refresh()

    # ------------------------------------------------------------------ the one handler
    def refresh(self) -> None:
        """Run the calls whose arguments changed, then redraw from the results."""
        calls = self.build_calls()
        t0 = time.perf_counter()
        self.messages.clear()
        self.notes.clear()
        self.error = None
        self.result = self._attempt("partition", calls, self.partition_plot)
        self.ordination = self._attempt("ordination", calls, self.ordination_plot)
        groups = self.ellipse_set = None
        if self.ordination is not None and "group" in calls:
            groups = self._attempt("group", calls, self.ordination_plot)
            if groups is not None and "ellipses" in calls:
                # the ellipses belong to the ordination on screen: key them by its call
                calls["ellipses"] = Call("ellipses", calls["ellipses"].args,
                                         calls["ellipses"].kwargs,
                                         obj=Ref("o", self.ordination))
                self.ellipse_set = self._attempt("ellipses", calls, self.ordination_plot,
                                                 key_extra=calls["ordination"].code())
        self.last_compute = time.perf_counter() - t0
        self.calls = calls
        ordination_ok = (self.ordination is not None
                         and ("group" not in calls or groups is not None)
                         and ("ellipses" not in calls or self.ellipse_set is not None))
        # figures: pure functions of the results, copied into the widgets in one batch each
        try:
            p = plots()
            if self.result is not None:
                copy_figure(self.partition_plot,
                            p.partition_bars(self.result, present=self._present))
            if ordination_ok:
                copy_figure(self.ordination_plot, p.ordination_figure(
                    self.ordination, group=groups, ellipses=self.ellipse_set,
                    present=self._present))
        except Exception as err:             # a figure failed: say so, in one line
            if self.error is None:
                self.error = err
                self.messages.show_error(err)
        if self.error is None:
            self.notes.show(list(self.result.notes) + list(self.ordination.notes)
                            + list(getattr(self.ellipse_set, "notes", ())))
        self.fractions_text.value = _fractions_html(self.result, self._present)
        self.revision += 1

    def _attempt(self, name: str, calls: dict, plot, *, key_extra: str = ""):
        """Result of one call (reused when its arguments are unchanged), or None on error."""
        key = (name, calls[name].code() + key_extra)
        if key in self._done:
            return self._done[key]
        self._done = {k: v for k, v in self._done.items() if k[0] != name}
        try:
            result = calls[name].run(self._core)
        except Exception as err:              # shown in the panel, never as a traceback
            if self.error is None:
                self.error = err
                self.messages.show_error(err)
            with plot.batch_update():         # never leave a figure that no longer matches
                plot.data = ()
            if plot is self.partition_plot:
                self.fractions_text.value = ""
            return None
        self._done[key] = result
        return result

    # ------------------------------------------------------------------ presentation
    def set_present(self, on: bool = True) -> None:
        """Projector mode: only the exponent slider stays; figures use large fonts."""
        self._present = on
        for w in self.controls:
            w.layout.display = "none" if on else None
        self.refresh()


def _fractions_html(result, present: bool = False) -> str:
    """The four shares as a sentence (numbers from the result, formatting only)."""
    if result is None:
        return ""
    size = "font-size:1.5em;" if present else ""
    f = result.fractions
    parts = [f"{label} <b>{f[key]:.1%}</b>" for key, label in
             (("size_only", "size only"), ("shared", "shared"),
              ("shape_only", "shape only"), ("residual", "residual"))]
    return (f"<div class='tf-fractions' style='{size}'>" + ", ".join(parts)
            + f"<br><small>{html.escape(result.shape_dims_reason)}</small></div>")
