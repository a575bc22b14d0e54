"""The Tests panel: size, shape and spread; pairwise PERMANOVA; taxon contributions.

Each run is one core call, run in a background thread with ``progress`` and ``cancel``
callbacks so the notebook stays responsive:

* ``tly.compare_groups(tab, group, shape_measure=..., ...)`` (size test, shape test,
  dispersion test and a plain reading);
* ``tly.pairwise_permanova(tly.dissimilarity(tab, shape_measure), tab, group, ...)``;
* ``tly.taxon_contributions(tab, group, a, b, measure=..., rng=...)`` when the core has it.

The options are those of :class:`tallyform.AnalysisSpec` (shape measure, size method,
blocks, permutations, seed, pairwise adjustment, contrast, contribution measure), so the
panel's settings are always a valid spec and ``tly.run(spec, tab)`` gives the same numbers.

Widgets are updated from the thread by trait assignment only, which ipywidgets supports.
"""
from __future__ import annotations

import html
import inspect
import threading
import time

import ipywidgets as widgets
import traitlets

from ..core.errors import Cancelled, DesignError
from ..core.measures import MEASURES
from ..core.spec import _CHOICES
from ..core.taxon_terms import PAIR_MEASURES, SPLIT_MEASURES
from .common import (LABEL_STYLE, TABLE, Call, MessageArea, Ref, copy_figure, given,
                     new_figure_widget, plots)
from .shape_panel import default_group, group_options

__all__ = ["TestsPanel", "ANALYSES"]

ANALYSES = {"compare": "size, shape and spread", "pairwise": "pairwise PERMANOVA",
            "contributions": "taxon contributions"}
_SIZE_METHOD_LABELS = {"anova": "ANOVA", "welch": "Welch ANOVA", "kruskal": "Kruskal-Wallis",
                       "permutation": "permutation F", "negbin": "negative binomial"}
_ADJUST_LABELS = {"holm": "Holm", "bh": "Benjamini-Hochberg", None: "none"}


class TestsPanel(widgets.VBox):
    """Permutation tests run in the background, with a progress bar and a cancel button.

    Attributes
    ----------
    analysis, group, shape_measure, contribution_measure, size_method, adjust, blocks,
    pair_a, pair_b, n_permutations, seed : widgets
    run_button, cancel_button : Button
    progress : IntProgress
    results : HTML
        The result's table, notes and reading.
    plot, plot2 : plotly FigureWidget
    result : ComparisonResult, PairwiseResult, TaxonContributions or None
        The last completed run (None while running, after an error or a cancel).
    call : Call or None
        The core call of the last run (shown as code by the Report panel).
    status : str
        'idle', 'running', 'done', 'cancelled' or 'error'.
    """

    revision = traitlets.Int(0)
    __test__ = False           # not a pytest test class, despite the name

    def __init__(self, table, *, group: str | None = None, present: bool = False, core=None):
        import tallyform
        self._table = table
        self._core = tallyform if core is None else core
        self._present = present
        self._thread: threading.Thread | None = None
        self._stop = threading.Event()
        self._last_percent = -1
        self.result = None
        self.call: Call | None = None
        self.error: BaseException | None = None
        self.status = "idle"
        self.elapsed = 0.0

        analyses = [(label, key) for key, label in ANALYSES.items()
                    if key != "contributions" or self.has_contributions]
        self.analysis = widgets.ToggleButtons(options=analyses, value="compare",
                                              style={"button_width": "auto"})
        self.analysis.add_class("tf-analysis")
        self.group = widgets.Dropdown(options=group_options(table), description="Group",
                                      value=default_group(table) if group is None else group,
                                      style=LABEL_STYLE)
        self.group.add_class("tf-group")
        self.shape_measure = widgets.Dropdown(
            options=[(MEASURES[m].label, m) for m in _CHOICES["shape_measure"]],
            value="chi_square", description="Shape measure", style=LABEL_STYLE)
        self.shape_measure.add_class("tf-shape-measure")
        self.contribution_measure = widgets.Dropdown(
            options=[(MEASURES[m].label, m) for m in (*SPLIT_MEASURES, *PAIR_MEASURES)],
            value="hellinger", description="Measure", style=LABEL_STYLE)
        self.contribution_measure.add_class("tf-contribution-measure")
        self.size_method = widgets.Dropdown(
            options=[(_SIZE_METHOD_LABELS.get(m, m), m) for m in _CHOICES["size_method"]],
            value="welch", description="Size test", style=LABEL_STYLE)
        self.size_method.add_class("tf-size-method")
        self.adjust = widgets.Dropdown(
            options=[(_ADJUST_LABELS.get(a, str(a)), a) for a in _CHOICES["pairwise_adjust"]],
            value="holm", description="Adjust p", style=LABEL_STYLE)
        self.adjust.add_class("tf-adjust")
        self.blocks = widgets.Dropdown(options=group_options(table), value="",
                                       description="Blocks", style=LABEL_STYLE)
        self.blocks.add_class("tf-blocks")
        self.pair_a = widgets.Dropdown(options=[], description="Group A", style=LABEL_STYLE)
        self.pair_b = widgets.Dropdown(options=[], description="Group B", style=LABEL_STYLE)
        self.pair_a.add_class("tf-pair-a")
        self.pair_b.add_class("tf-pair-b")
        self.n_permutations = widgets.BoundedIntText(value=999, min=1, max=999_999,
                                                     description="Permutations",
                                                     continuous_update=False,
                                                     style=LABEL_STYLE)
        self.n_permutations.add_class("tf-permutations")
        self.seed = widgets.BoundedIntText(value=1, min=0, max=2**31 - 1, description="Seed",
                                           continuous_update=False, style=LABEL_STYLE)
        self.seed.add_class("tf-seed")

        self.run_button = widgets.Button(description="Run", button_style="primary",
                                         icon="play")
        self.run_button.add_class("tf-run-button")
        self.cancel_button = widgets.Button(description="Cancel", icon="stop", disabled=True)
        self.cancel_button.add_class("tf-cancel-button")
        self.progress = widgets.IntProgress(value=0, min=0, max=100, description="Progress")
        self.progress.add_class("tf-progress")
        self.state = widgets.HTML()
        self.state.add_class("tf-run-state")
        self.results = widgets.HTML()
        self.results.add_class("tf-test-results")
        self.plot = new_figure_widget("tf-test-plot")
        self.plot2 = new_figure_widget("tf-test-plot2")
        self._plot_boxes = (widgets.Box([self.plot]), widgets.Box([self.plot2]))
        self.messages = MessageArea()

        self.controls = [self.analysis, self.group, self.shape_measure,
                         self.contribution_measure, self.size_method, self.adjust, self.blocks,
                         self.pair_a, self.pair_b, self.n_permutations, self.seed,
                         self.run_button, self.cancel_button]
        self._options = widgets.VBox([
            self.analysis,
            widgets.HBox([self.group, self.blocks]),
            widgets.HBox([self.shape_measure, self.contribution_measure]),
            widgets.HBox([self.size_method, self.adjust, self.pair_a, self.pair_b]),
            widgets.HBox([self.n_permutations, self.seed]),
            widgets.HBox([self.run_button, self.cancel_button, self.progress, self.state])])
        super().__init__([self._options, self.messages, self.results,
                          widgets.HBox(list(self._plot_boxes),
                                       layout=widgets.Layout(flex_flow="row wrap"))])
        self.add_class("tf-panel-tests")

        self.run_button.on_click(lambda _: self.run())
        self.cancel_button.on_click(lambda _: self.cancel())
        self.analysis.observe(self._analysis_changed, names="value")
        self.group.observe(self._group_changed, names="value")
        for w in (self.group, self.shape_measure, self.contribution_measure, self.size_method,
                  self.adjust, self.blocks, self.pair_a, self.pair_b, self.n_permutations,
                  self.seed):
            w.observe(lambda change: self._bump(), names="value")
        self._group_changed()
        self._analysis_changed()
        self._hide_plots()

    # ------------------------------------------------------------------ options
    @property
    def has_contributions(self) -> bool:
        return hasattr(self._core, "taxon_contributions")

    def _analysis_changed(self, change=None) -> None:
        a = self.analysis.value
        vis = {self.size_method: a == "compare", self.adjust: a == "pairwise",
               self.shape_measure: a != "contributions",
               self.contribution_measure: a == "contributions",
               self.pair_a: a == "contributions", self.pair_b: a == "contributions",
               self.blocks: a != "contributions", self.n_permutations: a != "contributions"}
        for w, on in vis.items():
            w.layout.display = None if on and not self._present else "none"
        self._bump()

    def _group_changed(self, change=None) -> None:
        """Offer the levels of the chosen group for the contributions pair."""
        from ..core.design import factor_levels
        levels: list = []
        if self.group.value:
            try:
                levels = [str(x) for x in factor_levels(self._table.group(self.group.value))]
            except Exception:           # an unusable column: the run will say why
                levels = []
        self.pair_a.options = levels
        self.pair_b.options = levels
        if len(levels) >= 2:
            self.pair_a.value, self.pair_b.value = levels[0], levels[-1]

    def _bump(self) -> None:
        self.revision += 1

    # ------------------------------------------------------------------ controls -> call
    def build_call(self) -> Call:
        """The one core call the current settings ask for (nothing is run)."""
        tab = Ref(TABLE, self._table)
        group = self.group.value or None
        seed = int(self.seed.value)
        blocks = self.blocks.value or None
        a = self.analysis.value
        if a == "compare":
            return Call("compare_groups", (tab, group), given(
                shape_measure=self.shape_measure.value, size_method=self.size_method.value,
                blocks=blocks, n_permutations=int(self.n_permutations.value), rng=seed))
        if a == "pairwise":
            d = Call("dissimilarity", (tab, self.shape_measure.value))
            return Call("pairwise_permanova", (d, tab, group), {
                "adjust": self.adjust.value,           # None (no adjustment) is explicit
                **given(blocks=blocks, n_permutations=int(self.n_permutations.value),
                        rng=seed)})
        return Call("taxon_contributions", (tab, group, self.pair_a.value, self.pair_b.value),
                    given(measure=self.contribution_measure.value, rng=seed))

    def spec_values(self) -> dict:
        """This panel's choices under their :class:`tallyform.AnalysisSpec` names."""
        a, b = self.pair_a.value, self.pair_b.value
        return {"group": self.group.value or None, "blocks": self.blocks.value or None,
                "shape_measure": self.shape_measure.value,
                "size_method": self.size_method.value,
                "n_permutations": int(self.n_permutations.value),
                "seed": int(self.seed.value), "pairwise_adjust": self.adjust.value,
                "contrast": (a, b) if a and b and a != b else None,
                "contribution_measure": self.contribution_measure.value}

    def apply_spec(self, spec) -> None:
        """Set the controls from a spec (the group is set by the dashboard)."""
        self.blocks.value = spec.blocks or ""
        self.shape_measure.value = spec.shape_measure
        self.size_method.value = spec.size_method
        self.n_permutations.value = max(1, int(spec.n_permutations))
        self.seed.value = 0 if spec.seed is None else int(spec.seed)
        self.adjust.value = spec.pairwise_adjust
        if spec.contribution_measure in [v for _, v in self.contribution_measure.options]:
            self.contribution_measure.value = spec.contribution_measure
        if spec.contrast and set(spec.contrast) <= set(self.pair_a.options):
            self.pair_a.value, self.pair_b.value = spec.contrast

    # ------------------------------------------------------------------ running
    @property
    def running(self) -> bool:
        return self._thread is not None and self._thread.is_alive()

    def run(self, *, block: bool = False) -> None:
        """Start the current call in a background thread (``block=True`` waits for it)."""
        if self.running:
            return
        if not self.group.value:
            self.status, self.result = "error", None
            self.error = DesignError("choose a group (a column of the sample information) "
                                     "whose levels the tests compare.")
            self.messages.show_error(self.error)
            return
        call = self.build_call()
        self.call, self.result, self.error = call, None, None
        self._stop = threading.Event()
        self._last_percent = -1
        self.status = "running"
        self.messages.clear()
        self.results.value = ""
        self._hide_plots()
        self.progress.value = 0
        self.progress.bar_style = ""
        self.state.value = "running..."
        self.run_button.disabled = True
        self.cancel_button.disabled = False
        self._thread = threading.Thread(target=self._work, args=(call, self._stop),
                                        name="tallyform-tests", daemon=True)
        self._thread.start()
        if block:
            self.wait()

    def cancel(self) -> None:
        """Ask the running call to stop (it raises Cancelled at its next check)."""
        if self.running:
            self._stop.set()
            self.state.value = "stopping..."

    def wait(self, timeout: float | None = None) -> bool:
        """Wait for the run to end; True when it has."""
        if self._thread is not None:
            self._thread.join(timeout)
        return not self.running

    def _work(self, call: Call, stop: threading.Event) -> None:
        t0 = time.perf_counter()
        extra = {}
        try:
            fn = getattr(self._core, call.func)
            params = inspect.signature(fn).parameters
        except (AttributeError, TypeError, ValueError):
            params = {}
        if "progress" in params:
            extra["progress"] = self._on_progress
        if "cancel" in params:
            extra["cancel"] = stop.is_set
        try:
            if call.func == "taxon_contributions" and not self.has_contributions:
                raise AttributeError("taxon contributions are not available in this version "
                                     "of tallyform.")
            result = call.run(self._core, **extra)
            figs = self._figures(result)
        except Cancelled as err:
            self._finish(None, err, "cancelled", t0)
        except Exception as err:         # shown as text in the panel, never a traceback
            self._finish(None, err, "error", t0)
        else:
            self._finish(result, None, "done", t0, figs)

    def _on_progress(self, done: int, total: int) -> None:
        if total <= 0:
            return
        percent = min(100, (100 * int(done)) // int(total))
        if percent != self._last_percent:       # one message per percent, not per batch
            self._last_percent = percent
            self.progress.value = percent

    def _figures(self, result) -> list:
        """Figures of the result (pure render functions)."""
        p = plots()
        kind = type(result).__name__
        if kind == "ComparisonResult":
            return [result.shape.figure(present=self._present),
                    result.dispersion.figure(kind="distances", present=self._present)]
        if kind == "PairwiseResult":
            return []
        if hasattr(result, "figure"):              # taxon contributions
            return [result.figure(kind="shape"), result.figure(kind="size")]
        return []

    def _finish(self, result, err, status, t0, figs=()) -> None:
        self.elapsed = time.perf_counter() - t0
        self.result, self.error, self.status = result, err, status
        if err is not None:
            self.messages.show_error(err)
            self.state.value = "cancelled" if status == "cancelled" else "stopped by an error"
            self.progress.bar_style = "warning" if status == "cancelled" else "danger"
        else:
            self.results.value = _result_html(result)
            for fig, target, box in zip(figs, (self.plot, self.plot2), self._plot_boxes):
                copy_figure(target, fig)
                box.layout.display = None
            self.progress.value = 100
            self.progress.bar_style = "success"
            self.state.value = f"done in {self.elapsed:.1f} s"
        self.run_button.disabled = False
        self.cancel_button.disabled = True
        self.revision += 1

    def _hide_plots(self) -> None:
        for target, box in zip((self.plot, self.plot2), self._plot_boxes):
            with target.batch_update():
                target.data = ()
            box.layout.display = "none"

    # ------------------------------------------------------------------ presentation
    def set_present(self, on: bool = True) -> None:
        self._present = on
        for w in self.controls:
            w.layout.display = "none" if on else None
        if not on:
            self._analysis_changed()


def _result_html(result) -> str:
    """The result's own display (table, notes) plus the reading when there is one."""
    body = result._repr_html_() if hasattr(result, "_repr_html_") else html.escape(str(result))
    return f"<div class='tf-result'>{body}</div>"

