"""The Size & shape panel: transform exponent, measure, shape basis; partition and ordination.

Core calls, each shown as code by the Report panel:

* ``tly.size_shape(tab, measure, transform=..., size=..., shape=..., shape_dims=...)``
  -> partition bars, at once (the live path);
* ``tly.size_shape(..., n_boot=..., units=..., rng=...)`` -> the same shares with their 95 %
  intervals, drawn as the bars' side panel. It runs in the background once the controls
  have settled (debounced), is cancelled when they move again, and says "intervals:
  computing" meanwhile;
* ``tly.pcoa(tly.dissimilarity(tab, measure, transform=...), dims=2)`` (and
  ``o.ellipses(tab.group(column), kind=...)`` when a group is chosen) -> ordination.

A change re-runs only the calls whose arguments changed: the group touches only the
ellipses and colours, the shape basis only the partition.
"""
from __future__ import annotations

import contextlib
import html
import inspect
import time

import ipywidgets as widgets
import traitlets

from ..core.ellipses import describe as describe_ellipse
from ..core.measures import MEASURES
from ..core.partition import SHAPE_OPTIONS, SIZE_OPTIONS
from ..core.procrustes import align_ordination
from ..core.partition_math import shape_dims_limit
from ..core.transforms import POWER_EXPONENTS, TRANSFORMS
from .background import SettledRunner
from .help import add_help, exponent_words, transform_words
from .common import (TABLE, Call, MessageArea, NotesArea, Ref, copy_figure, error_text,
                     figure_widths, fit_width,
                     given, new_figure_widget, plots, transform_code)

__all__ = ["ShapePanel", "LIVE_BUDGET", "POWER", "group_options", "INTERVAL_CHOICES",
           "SETTLE_DELAY", "SPECTRUM_LIVE_MAX"]

LIVE_BUDGET = 0.15        # seconds of compute under which the slider updates while dragged
POWER = "power"           # the transform choice read from the exponent slider
_SIZE_LABELS = {"log_total": "log total", "total": "total",
                "log_total_per_effort": "log total per effort"}
_SHAPE_LABELS = {"chi_square": "chi-square profiles", "hellinger": "Hellinger profiles",
                 "aitchison": "Aitchison (log-ratios)",
                 "same_measure": "same measure, equal totals"}
_MAX_DIMS_LISTED = 30
ELLIPSE_KINDS = ("confidence", "prediction", "data")      # quick enough for the live path
ELLIPSE_LEVEL = 0.95
INTERVAL_CHOICES = (0, 199, 999)   # resamples of the share intervals (0: none)
SETTLE_DELAY = 0.5                 # seconds of quiet before the intervals start
# past this many samples the live partition skips the O(n^3) eigenvalues behind its
# negative-eigenvalue note (size_shape(spectrum=False)) and tabulates the fractions by number
# of shape dimensions only up to the one used (all_dims=False); the settled call does both
SPECTRUM_LIVE_MAX = 300
PARTITION_WIDTH = 370             # px: side by side on a 970 px screen (754 px of
                                   # notebook with the side bar closed), wrapped below
ORDINATION_WIDTH = 380


def ellipse_options(extra: str | None = None) -> list[tuple[str, object]]:
    """``(none)`` and every ellipse kind, worded by the core (``ellipses.describe``)."""
    kinds = list(ELLIPSE_KINDS) + ([extra] if extra and extra not in ELLIPSE_KINDS else [])
    return [("(none)", None)] + [(describe_ellipse(k, ELLIPSE_LEVEL), k) for k in kinds]


def _quiet(done, total) -> None:
    """Progress callback of the live calls: no bar for work that takes a blink."""


def transform_options() -> list[tuple[str, str]]:
    """Dropdown options: the exponent slider, then the named transforms it cannot reach."""
    named = [(transform_words(name), name) for name in TRANSFORMS
             if name not in POWER_EXPONENTS]
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
        The controls (set ``.value`` to drive the panel from code). ``ellipses`` is the
        ellipse kind (None for none), its options worded by the core.
    intervals, units, seed : widgets
        Resamples of the share intervals (0: none), the sampling units they leave out
        whole (False: single samples) and their seed.
    result : SizeShapeResult or None
        The partition shown (None after an error).
    intervals_result : SizeShapeResult or None
        The same partition with ``fractions_ci``, once the background run for the current
        settings has finished (None before, and when intervals are off). Past
        ``SPECTRUM_LIVE_MAX`` samples the live partition skips the negative-eigenvalue
        share (``spectrum=False``); the background run then measures it, intervals or not,
        and this holds that settled result.
    settled_ordination : Ordination or None
        Past ``SPECTRUM_LIVE_MAX`` samples: the ordination of the current settings with its
        negative-eigenvalue check, from the background run (its notes replace the live
        ones; the scores are the same).
    interval_state : HTML
        "intervals: computing", what was drawn, or why there are none.
    ordination, ellipse_set : Ordination, EllipseSet or None
    shown_ordination : Ordination or None
        The ordination as drawn: its axes rotated/reflected onto the previous view
        (``tallyform.core.procrustes.align_ordination``), so points move smoothly when a
        control changes; the ellipses are computed on it.
    partition_plot, ordination_plot : plotly FigureWidget
    messages : MessageArea
        The error that stopped an update (empty when all is well).
    notes : NotesArea
        Plain-language notes of the results shown.
    calls : dict
        The core calls behind what is shown (``partition``, ``intervals``, ``ordination``,
        ``ellipses``).
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
        self.shown_ordination = None     # the ordination as drawn (axes kept continuous)
        self._shown_scores = None
        self.intervals_result = None
        self._intervals_done: tuple | None = None    # (call code, result, error), last
        self._settled_o: tuple | None = None         # (call code, ordination), last
        self.settled_ordination = None
        self._intervals_code: str | None = None      # the call in the background now
        self._runner = SettledRunner(SETTLE_DELAY)
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
                                      value="chi_square", description="Shape as")
        self.shape.add_class("tf-shape-basis")
        top = max(1, min(shape_dims_limit(table.n_samples), _MAX_DIMS_LISTED))
        self.shape_dims = widgets.Dropdown(
            options=[("auto (75 % of composition)", 0)]
            + [(str(k), k) for k in range(1, top + 1)], value=0, description="Shape axes")
        self.shape_dims.add_class("tf-shape-dims")
        self.group = widgets.Dropdown(options=group_options(table), description="Group",
                                      value=default_group(table) if group is None else group)
        self.group.add_class("tf-group")
        self.ellipses = widgets.Dropdown(options=ellipse_options(), value="confidence",
                                         description="Ellipses",
                                         layout=widgets.Layout(width="520px"))
        self.ellipses.add_class("tf-ellipses")
        self.intervals = widgets.Dropdown(
            options=[("none", 0)] + [(f"95 %, {k} resamples", k)
                                     for k in INTERVAL_CHOICES if k],
            value=INTERVAL_CHOICES[1], description="Intervals")
        self.intervals.add_class("tf-intervals")
        self.units = widgets.Dropdown(
            options=[("single samples", False)]
            + [(f"whole units of {c!r}", str(c)) for c in table.samples.columns],
            value=False, description="Leave out")
        self.units.add_class("tf-interval-units")
        self.seed = widgets.BoundedIntText(value=1, min=0, max=2**31 - 1, description="Seed",
                                           continuous_update=False,
                                           layout=widgets.Layout(width="160px"))
        self.seed.add_class("tf-interval-seed")
        self.interval_state = widgets.HTML()
        self.interval_state.add_class("tf-interval-state")

        self.partition_plot = new_figure_widget("tf-partition-plot")
        self.ordination_plot = new_figure_widget("tf-ordination-plot")
        self.fractions_text = widgets.HTML()
        self.fractions_text.add_class("tf-partition-summary")
        self.messages = MessageArea()
        self.notes = NotesArea()

        self.controls = [self.transform, self.measure, self.size, self.shape,
                         self.shape_dims, self.group, self.ellipses, self.intervals,
                         self.units, self.seed]
        for w in [self.exponent] + self.controls:
            add_help(w)
        self.exponent_words = widgets.HTML(_exponent_html(self.exponent.value),
                                           layout=widgets.Layout(width="230px"))
        self.exponent_words.add_class("tf-exponent-words")
        row1 = widgets.HBox([self.exponent, self.exponent_words, self.transform,
                             self.measure])
        row2 = widgets.HBox([self.size, self.shape, self.shape_dims])
        row3 = widgets.HBox([self.group, self.ellipses])
        row4 = widgets.HBox([self.intervals, self.units, self.seed, self.interval_state])
        # side by side when the width allows (about 880 px of notebook), else stacked
        plots_row = widgets.HBox([figure_widths({"tf-partition-plot": PARTITION_WIDTH,
                                                 "tf-ordination-plot": ORDINATION_WIDTH}),
                                  self.partition_plot, self.ordination_plot],
                                 layout=widgets.Layout(flex_flow="row wrap", width="100%"))
        plots_row.add_class("tf-shape-plots")
        super().__init__([row1, row2, row3, row4, self.messages, self.fractions_text,
                          plots_row, self.notes])
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
        defer = self._table.n_samples > SPECTRUM_LIVE_MAX
        calls = {
            "partition": Call("size_shape", (tab, measure), given(
                transform=tr, size=self.size.value, shape=self.shape.value,
                shape_dims=self.shape_dims.value or None, spectrum=False if defer else None,
                all_dims=False if defer else None)),
            "ordination": Call("pcoa", (Call("dissimilarity", (tab, measure),
                                             given(transform=tr)),),
                               {"dims": 2, **({"spectrum": False} if defer else {})}),
        }
        if defer:                    # the ordination's own check, once the controls rest
            calls["ordination_settled"] = Call("pcoa", calls["ordination"].args, {"dims": 2})
        if int(self.intervals.value):
            units = self.units.value or None
            calls["intervals"] = Call("size_shape", (tab, measure), given(
                transform=tr, size=self.size.value, shape=self.shape.value,
                shape_dims=self.shape_dims.value or None, n_boot=int(self.intervals.value),
                units=units, rng=int(self.seed.value)))
        elif defer:                  # no intervals: the settled call measures the spectrum
            calls["settled"] = Call("size_shape", (tab, measure), given(
                transform=tr, size=self.size.value, shape=self.shape.value,
                shape_dims=self.shape_dims.value or None))
        if self.group.value:
            calls["group"] = Call("group", (self.group.value,), obj=tab)
            if self.ellipses.value:
                calls["ellipses"] = Call("ellipses", (calls["group"],),
                                         {"kind": self.ellipses.value}, obj=Ref("o", None))
        return calls

    def spec_values(self) -> dict:
        """This panel's choices under their :class:`tallyform.AnalysisSpec` names."""
        return {"transform": self.transform_value() or "none", "measure": self.measure.value,
                "size": self.size.value, "shape": self.shape.value,
                "shape_dims": self.shape_dims.value or None,
                "ellipse": self.ellipses.value,
                "group": self.group.value or None,
                **({"n_boot": int(self.intervals.value)} if _spec_has("n_boot") else {})}

    def apply_spec(self, spec) -> None:
        """Set the controls from a spec, with one update (the group is set by the dashboard)."""
        from ..core.transforms import Power, get_transform
        tr = get_transform(spec.transform)
        with self.hold():
            if isinstance(tr, Power) or tr.name in POWER_EXPONENTS:
                a = tr.a if isinstance(tr, Power) else POWER_EXPONENTS[tr.name]
                self.transform.value = POWER
                self.exponent.value = a
            else:
                self.transform.value = tr.name
            self.measure.value = spec.measure
            self.size.value = spec.size
            self.shape.value = spec.shape
            self.shape_dims.value = spec.shape_dims or 0
            if spec.ellipse not in [v for _, v in self.ellipses.options]:
                self.ellipses.options = ellipse_options(spec.ellipse)
            self.ellipses.value = spec.ellipse
            if spec.seed is not None:
                self.seed.value = int(spec.seed)
            n_boot = getattr(spec, "n_boot", None)
            if n_boot is not None:
                if n_boot not in [v for _, v in self.intervals.options]:
                    self.intervals.options = list(self.intervals.options) + [
                        (f"95 %, {int(n_boot)} resamples", int(n_boot))]
                self.intervals.value = int(n_boot)

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
        self.exponent_words.value = _exponent_html(self.exponent.value)
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
        """Run the calls whose arguments changed, then redraw from the results; the
        intervals follow in the background once the controls settle."""
        calls = self.build_calls()
        background = calls.get("intervals") or calls.get("settled")
        code = background.code() if background is not None else None
        if code != self._intervals_code:     # a result for other settings is dropped
            self._runner.cancel()
            self._intervals_code = None
        t0 = time.perf_counter()
        self.messages.clear()
        self.notes.clear()
        self.error = None
        self.result = self._attempt("partition", calls, self.partition_plot)
        self.ordination = self._attempt("ordination", calls, self.ordination_plot)
        # continuity: the new axes rotated/reflected onto those on screen (core function)
        self.shown_ordination = (align_ordination(self.ordination, self._shown_scores)
                                 if self.ordination is not None else None)
        groups = self.ellipse_set = None
        if self.ordination is not None and "group" in calls:
            groups = self._attempt("group", calls, self.ordination_plot)
            if groups is not None and "ellipses" in calls:
                # the ellipses belong to the ordination on screen: key them by its call
                # and its rotation (ellipses turn with the points)
                calls["ellipses"] = Call("ellipses", calls["ellipses"].args,
                                         calls["ellipses"].kwargs,
                                         obj=Ref("o", self.shown_ordination))
                rot = self.shown_ordination.provenance.get("rotation")
                self.ellipse_set = self._attempt(
                    "ellipses", calls, self.ordination_plot,
                    key_extra=calls["ordination"].code() + repr(rot))
        self.last_compute = time.perf_counter() - t0
        self.calls = calls
        ordination_ok = (self.ordination is not None
                         and ("group" not in calls or groups is not None)
                         and ("ellipses" not in calls or self.ellipse_set is not None))
        # figures: pure functions of the results, copied into the widgets in one batch each
        with self._runner.hold():            # no interval result lands while we draw
            ready, failed = self._ready_intervals(code)
            self.intervals_result = ready
            self.settled_ordination = (self._settled_o[1] if ready is not None
                                       and self._settled_o and self._settled_o[0] == code
                                       else None)
            try:
                p = plots()
                if self.result is not None:
                    copy_figure(self.partition_plot, p.partition_bars(
                        ready if ready is not None else self.result, present=self._present))
                if ordination_ok:
                    copy_figure(self.ordination_plot, p.ordination_figure(
                        self.shown_ordination, group=groups, ellipses=self.ellipse_set,
                        present=self._present))
                    self._shown_scores = self.shown_ordination.scores
            except Exception as err:         # a figure failed: say so, in one line
                if self.error is None:
                    self.error = err
                    self.messages.show_error(err)
            self._show_notes()
            self.fractions_text.value = _fractions_html(self.result, self._present)
            if code is None or self.result is None:
                self.interval_state.value = ""
            elif ready is not None or failed is not None:
                self._say_intervals(ready, failed)
            elif self._intervals_code != code:
                self._start_intervals(background, code)
        self.revision += 1

    def _show_notes(self) -> None:
        if self.error is None:
            # the settled result (same settings) holds the live one's notes, measured
            settled = self.intervals_result
            o = self.settled_ordination or self.shown_ordination
            self.notes.show(list(self.result.notes if settled is None else settled.notes)
                            + list(o.notes)
                            + list(getattr(self.ellipse_set, "notes", ())))

    def _attempt(self, name: str, calls: dict, plot, *, key_extra: str = ""):
        """Result of one call (reused when its arguments are unchanged), or None on error."""
        key = (name, calls[name].code() + key_extra)
        if key in self._done:
            return self._done[key]
        self._done = {k: v for k, v in self._done.items() if k[0] != name}
        try:
            result = calls[name].run(self._core, **_live_extra(self._core, calls[name]))
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

    # ------------------------------------------------------------------ intervals
    def _ready_intervals(self, code: str | None):
        """(result, error) of these interval settings when computed before, else Nones."""
        if code is None or self.result is None or self._intervals_done is None:
            return None, None
        done, result, err = self._intervals_done
        return (result, err) if done == code else (None, None)

    def _start_intervals(self, call: Call, code: str) -> None:
        what = "intervals" if "n_boot" in call.kwargs else "eigenvalues"
        self.interval_state.value = _state_html(f"{what}: computing")
        self._intervals_code = code
        core = self._core
        ocall = self.calls.get("ordination_settled") if self.calls else None

        def job(progress, cancel):
            result = call.run(core, progress=progress, cancel=cancel)
            # the eigenvalues are now known: the ordination's check costs no more
            return result, (ocall.run(core) if ocall is not None else None)
        self._runner.request(
            job, lambda out, err: self._intervals_finished(
                code, *(out if err is None else (None, None)), err),
            on_progress=self._intervals_progress)

    def _intervals_progress(self, done: int, total: int) -> None:
        if total > 0:
            self.interval_state.value = _state_html(
                f"intervals: computing ({int(done)} of {int(total)} resamples)")

    def _intervals_finished(self, code: str, result, settled_ordination, err) -> None:
        """Background thread, for the latest settings only (the runner drops the rest)."""
        self._intervals_code = None
        self._settled_o = (code, settled_ordination)
        self.settled_ordination = settled_ordination if err is None else None
        if err is None:
            try:
                fig = plots().partition_bars(result, present=self._present)
                copy_figure(self.partition_plot, fig)
            except Exception as fig_err:     # a figure failed: say so, in one line
                result, err = None, fig_err
        self._intervals_done = (code, result, err)
        self.intervals_result = result
        self._say_intervals(result, err)
        if result is not None:
            self._show_notes()
        self.revision += 1

    def _say_intervals(self, result, err) -> None:
        if err is not None:
            self.interval_state.value = _state_html(f"no intervals: {error_text(err)}",
                                                    warn=True)
            return
        prov = result.provenance
        if not prov.get("n_boot"):           # the settled call: no intervals to name
            self.interval_state.value = ""
            return
        how = f"{prov.get('n_boot')} resamples" + (
            f" leaving out whole units of {prov['units']!r}" if prov.get("units") else "")
        self.interval_state.value = _state_html(f"intervals: {how}")

    def wait_intervals(self, timeout: float | None = None) -> bool:
        """Wait for the background intervals of the current settings; True when done."""
        return self._runner.wait(timeout)

    def cancel_intervals(self) -> None:
        """Stop the background intervals (the bars stay, without them)."""
        self._runner.cancel()
        self._intervals_code = None
        if self.intervals_result is None:
            self.interval_state.value = "" if "intervals" not in self.calls else \
                _state_html("intervals: stopped")

    @property
    def intervals_pending(self) -> bool:
        """True while the intervals of the current settings wait or run."""
        return self._runner.busy

    def fit_figures(self) -> None:
        """Size the figures for side by side (called when the panel's tab is shown)."""
        fit_width(self.partition_plot, PARTITION_WIDTH)
        fit_width(self.ordination_plot, ORDINATION_WIDTH, legend_below=True)

    # ------------------------------------------------------------------ presentation
    def set_present(self, on: bool = True) -> None:
        """Projector mode: only the exponent slider stays; figures use large fonts."""
        self._present = on
        for w in self.controls:
            w.layout.display = "none" if on else None
        self.refresh()


def _spec_has(key: str) -> bool:
    """Does this version's AnalysisSpec hold ``key``? (Keys are read defensively.)"""
    from dataclasses import fields

    from ..core.spec import AnalysisSpec
    return key in {f.name for f in fields(AnalysisSpec)}


def _live_extra(core, call) -> dict:
    """``progress=_quiet`` for a live call that takes a progress argument (no bar for it)."""
    if call.obj is not None:
        return {}
    try:
        params = inspect.signature(getattr(core, call.func)).parameters
    except (AttributeError, TypeError, ValueError):
        return {}
    return {"progress": _quiet} if "progress" in params else {}


def _exponent_html(a) -> str:
    """The exponent in words beside the slider: ``0.50 = square root``."""
    return f"<span style='color:#555'>{html.escape(exponent_words(a))}</span>"


def _state_html(text: str, *, warn: bool = False) -> str:
    colour = "#A33" if warn else "#555"
    return f"<span style='color:{colour}'>{html.escape(text)}</span>"


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
