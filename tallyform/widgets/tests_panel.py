"""The Tests panel: size, shape and spread; pairwise PERMANOVA; taxon contributions.

Each run is one core call, run in a background thread with ``progress`` and ``cancel``
callbacks so the notebook stays responsive:

* ``tly.compare_groups(tab, group, units=..., shape_measure=..., ...)`` (size test,
  PERMANOVA, the Welch-type test, dispersion test and a plain reading);
* ``tly.pairwise_permanova(tly.dissimilarity(tab, shape_measure), tab, group, units=...)``;
* ``tly.taxon_contributions(tab, group, a, b, measure=..., units=..., rng=...)`` when the
  core has it.

Every call gets the sampling units of the units chooser (default: the column the core
detects for the group, named with its counts), so the code shown reruns the same tests.
The options are those of :class:`tallyform.AnalysisSpec` (shape measure, size method,
blocks, permutations, seed, pairwise adjustment, contrast, contribution measure; the units
when the spec holds them), so ``tly.run(spec, tab)`` gives the same numbers.

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
from ..core.spec import AnalysisSpec
from ..core.display import format_p
from .common import TABLE, TABLE_STYLE, Call, Ref, copy_figure, given
from .help import add_help
from .tests_controls import BLOCKS_HELP, build_options, build_outputs, options_box
from .units_choice import unit_choices

__all__ = ["TestsPanel", "ANALYSES"]

ANALYSES = {"compare": "size, shape and spread", "pairwise": "pairwise PERMANOVA",
            "contributions": "taxon contributions"}


def spec_has(key: str) -> bool:
    """Does this version's AnalysisSpec hold ``key``? (Keys are read defensively.)"""
    from dataclasses import fields
    return key in {f.name for f in fields(AnalysisSpec)}


class TestsPanel(widgets.VBox):
    """Permutation tests run in the background, with a progress bar and a cancel button.

    Attributes
    ----------
    analysis, group, units, shape_measure, contribution_measure, size_method, adjust,
    blocks, pair_a, pair_b, n_permutations, seed : widgets
        ``units`` offers the column the core detects for the group (first, with its
        counts), "none" (samples independent) and every other column; its value (a column
        name, a tuple of nested columns, or False) is passed as ``units=``.
    run_button, cancel_button : Button
    progress : IntProgress
    results : HTML
        The result's table, notes and reading.
    strata : HTML
        After a PERMANOVA-based run: term, stratum, tested against, df, p and the smallest
        possible p of every term (:func:`strata_frame`).
    plot, plot2, plot3 : plotly FigureWidget
    result : ComparisonResult, PairwiseResult, TaxonContributions or None
        The last completed run (None while running, after an error or a cancel).
    choices : ChoicesTried
        Every shape measure whose p-value a run showed, per group, and (from two on) the
        p-value adjusted for them all (``choices.result``, a ChoiceAdjustedResult);
        ``choices.clear_button`` starts over.
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
        self._shows_measure = None
        self.result = None
        self.call: Call | None = None
        self.error: BaseException | None = None
        self.status = "idle"
        self.elapsed = 0.0

        self._units_auto = True          # follow the detection until the user picks
        self._units_busy = False
        self._units_extra = None         # nested units given by a spec
        self._blocks_auto = True         # follow the suggested blocks until the user picks
        self._blocks_busy = False
        self.suggested_blocks = None
        self._detected_units = False
        analyses = [(label, key) for key, label in ANALYSES.items()
                    if key != "contributions" or self.has_contributions]
        build_options(self, table, analyses, group)
        build_outputs(self, table)

        self.controls = [self.analysis, self.group, self.units, self.shape_measure,
                         self.contribution_measure, self.size_method, self.adjust, self.blocks,
                         self.blocks_help, self.pair_a, self.pair_b, self.n_permutations,
                         self.seed, self.run_button, self.cancel_button]
        for w in self.controls:
            add_help(w)
        self.controls += self.choices.controls
        self._options = options_box(self)
        super().__init__([self._options, self.messages, self.results, self.choices,
                          self.strata,
                          widgets.HBox(list(self._plot_boxes),
                                       layout=widgets.Layout(flex_flow="row wrap"))])
        self.add_class("tf-panel-tests")

        self.run_button.on_click(lambda _: self.run())
        self.cancel_button.on_click(lambda _: self.cancel())
        self.analysis.observe(self._analysis_changed, names="value")
        self.group.observe(self._group_changed, names="value")
        self.blocks.observe(self._blocks_picked, names="value")
        self.units.observe(self._units_picked, names="value")
        for w in (self.group, self.units, self.shape_measure, self.contribution_measure,
                  self.size_method, self.adjust, self.blocks, self.pair_a, self.pair_b,
                  self.n_permutations, self.seed):
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
               self.blocks: a != "contributions", self.blocks_help: a != "contributions",
               self.n_permutations: a != "contributions"}
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
        self._refresh_units()
        self._suggest_blocks()

    # ------------------------------------------------------------------ blocks
    def _suggest_blocks(self) -> None:
        """Default blocks: the core's suggestion for the group and its units (as the quick
        start uses them), followed until the user picks blocks of their own."""
        from ..core.units import suggest_blocks
        units = self.units_value()
        try:
            found = suggest_blocks(self._table.samples, self.group.value or None,
                                   units if units else None)
        except Exception:                 # an unusable column: no suggestion
            found = None
        self.suggested_blocks = found
        if self._blocks_auto:
            self._blocks_busy = True
            try:
                self.blocks.value = found or ""
            finally:
                self._blocks_busy = False
            self._refresh_units()
        self._say_blocks()

    def _blocks_picked(self, change=None) -> None:
        if not self._blocks_busy:
            self._blocks_auto = (self.blocks.value or None) == self.suggested_blocks
            self._refresh_units()
        self._say_blocks()

    def _say_blocks(self) -> None:
        chosen = self.blocks.value or None
        if chosen and chosen == self.suggested_blocks:
            lead = (f"Blocks: {chosen!r} found by the design (every block holds every group "
                    "and whole units), as the quick start uses it. ")
        elif self.suggested_blocks and not chosen:
            lead = (f"No blocks (the design suggests {self.suggested_blocks!r}; with blocks "
                    "the p-values match the quick start's). ")
        else:
            lead = ""
        self.blocks_help.value = f"<small>{html.escape(lead + BLOCKS_HELP)}</small>"

    # ------------------------------------------------------------------ units
    def _refresh_units(self, change=None) -> None:
        """Offer the units for the current group and blocks (the core's detection first);
        follow the detection until the user picks a choice of their own."""
        choices = unit_choices(self._table, self.group.value or None,
                               self.blocks.value or None, extra=self._units_extra)
        values = [v for _, v in choices.options]
        keep = self.units.value
        self._units_busy = True
        try:
            self.units.options = choices.options
            if self._units_auto or not _holds(values, keep):
                self._units_auto = True
                self.units.value = choices.default
            else:
                self.units.value = keep
        finally:
            self._units_busy = False
        self._detected_units = choices.default

    def _units_picked(self, change) -> None:
        if not self._units_busy:      # the user's own choice (the detected one: follow it)
            self._units_auto = _same(change.new, self._detected_units)
            self._suggest_blocks()

    def units_value(self):
        """The ``units=`` of the calls: a column name, a tuple of columns, or False."""
        return self.units.value

    def _bump(self) -> None:
        self.revision += 1

    # ------------------------------------------------------------------ controls -> call
    def build_call(self) -> Call:
        """The one core call the current settings ask for (nothing is run)."""
        tab = Ref(TABLE, self._table)
        group = self.group.value or None
        seed = int(self.seed.value)
        blocks = self.blocks.value or None
        units = self.units_value()
        a = self.analysis.value
        if a == "compare":
            return Call("compare_groups", (tab, group), given(
                units=units, shape_measure=self.shape_measure.value,
                size_method=self.size_method.value, blocks=blocks,
                n_permutations=int(self.n_permutations.value), rng=seed))
        if a == "pairwise":
            d = Call("dissimilarity", (tab, self.shape_measure.value))
            return Call("pairwise_permanova", (d, tab, group), {
                "adjust": self.adjust.value,           # None (no adjustment) is explicit
                **given(units=units, blocks=blocks,
                        n_permutations=int(self.n_permutations.value), rng=seed)})
        # the contributions take one column of units (their jackknife leaves out units)
        unit_col = units if isinstance(units, str) else (
            units[0] if isinstance(units, tuple) and units else None)
        return Call("taxon_contributions", (tab, group, self.pair_a.value, self.pair_b.value),
                    given(measure=self.contribution_measure.value, units=unit_col, rng=seed))

    def spec_values(self) -> dict:
        """This panel's choices under their :class:`tallyform.AnalysisSpec` names."""
        a, b = self.pair_a.value, self.pair_b.value
        return {"group": self.group.value or None, "blocks": self.blocks.value or None,
                "shape_measure": self.shape_measure.value,
                "size_method": self.size_method.value,
                "n_permutations": int(self.n_permutations.value),
                "seed": int(self.seed.value), "pairwise_adjust": self.adjust.value,
                "contrast": (a, b) if a and b and a != b else None,
                "contribution_measure": self.contribution_measure.value,
                **({"units": self.units_value()} if spec_has("units") else {}),
                **({"choices_tried": self.choices.entries() or None}
                   if spec_has("choices_tried") else {})}

    def apply_spec(self, spec) -> None:
        """Set the controls from a spec (the group is set by the dashboard)."""
        self._blocks_auto = False            # the spec's blocks, even none
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
        if spec_has("units"):
            self.set_units(getattr(spec, "units"))
        if getattr(spec, "choices_tried", None) and spec.group:
            self.choices.load(spec.group, spec.choices_tried)

    def set_units(self, units) -> None:
        """Choose the units: None follows the detection; False, a column or a list of
        nested columns is taken as given."""
        if units is None:
            self._units_auto = True
            self._refresh_units()
            return
        value = tuple(units) if isinstance(units, (list, tuple)) else units
        if isinstance(value, tuple) and len(value) == 1:
            value = value[0]
        if isinstance(value, tuple):
            self._units_extra = value
            self._refresh_units()
        self.units.value = value          # a TraitError names a column the table lacks
        self._units_auto = _same(value, self._detected_units)

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
        self._shows_measure = None if self.analysis.value == "contributions" else dict(
            group=self.group.value, measure=self.shape_measure.value,
            units=self.units_value(), blocks=self.blocks.value or None,
            n_permutations=int(self.n_permutations.value), seed=int(self.seed.value))
        self._stop = threading.Event()
        self._last_percent = -1
        self.status = "running"
        self.messages.clear()
        self.results.value = ""
        self.strata.value = ""
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
        """Wait for the run to end, and the adjusted p-value it asked for; True when
        both have."""
        if self._thread is not None:
            self._thread.join(timeout)
        return not self.running and self.choices.wait(timeout)

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
        kind = type(result).__name__
        if kind == "ComparisonResult":
            figs = [result.shape.figure(present=self._present),
                    result.dispersion.figure(kind="distances", present=self._present)]
            if result.permanova is not None:           # the reference, drawn third
                figs.append(result.permanova.figure(present=self._present))
            return figs
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
            self.strata.value = _strata_html(result)
            if self._shows_measure is not None:      # a p-value of this shape measure
                self.choices.shown(**self._shows_measure)
            for fig, target, box in zip(figs, self._plots, self._plot_boxes):
                copy_figure(target, fig)
                box.layout.display = None
            self.progress.value = 100
            self.progress.bar_style = "success"
            self.state.value = f"done in {self.elapsed:.1f} s"
        self.run_button.disabled = False
        self.cancel_button.disabled = True
        self.revision += 1

    def _hide_plots(self) -> None:
        for target, box in zip(self._plots, self._plot_boxes):
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



def _holds(values: list, value) -> bool:
    return any(_same(v, value) for v in values)


def _same(a, b) -> bool:
    """Equal option values (False is not the column named 0, a tuple is not a list)."""
    return type(a) is type(b) and a == b


def strata_frame(result):
    """Where each term of a PERMANOVA was tested: ``stratum``, ``tested against`` (its
    denominator), ``df`` (term and denominator), ``p`` and the ``smallest possible p``
    (NaN when the relabellings are too many for it to matter). Columns are selected from
    ``result.table`` and ``result.schemes`` (nothing is computed).

    ``result`` is a PermanovaResult or a ComparisonResult (its reference PERMANOVA); None
    otherwise.
    """
    import pandas as pd
    perm = getattr(result, "permanova", None) if type(result).__name__ == "ComparisonResult" \
        else result
    if type(perm).__name__ != "PermanovaResult":
        return None
    terms = list(perm.terms)
    table = perm.table.loc[terms]
    out = pd.DataFrame(index=pd.Index(terms, name="term"))
    out["stratum"] = table.get("stratum", pd.Series("samples", index=terms))
    out["tested against"] = table.get("tested_against", pd.Series("Residual", index=terms))
    den = table.get("df_denominator")
    out["df"] = [f"{int(a)}, {int(b)}" if b is not None and not pd.isna(b) else str(int(a))
                 for a, b in zip(table["df"], den if den is not None else [None] * len(terms))]
    out["p"] = table["pvalue"].to_numpy(dtype=float)
    floor = (perm.schemes["min_pvalue"].reindex(terms) if perm.schemes is not None
             else pd.Series(float("nan"), index=terms))
    out["smallest possible p"] = floor.to_numpy(dtype=float)
    return out


def _strata_html(result) -> str:
    frame = strata_frame(result)
    if frame is None:
        return ""
    perm = result.shape if type(result).__name__ == "ComparisonResult" else result
    shown = frame.copy()
    shown["p"] = [format_p(v) for v in frame["p"]]
    shown["smallest possible p"] = [f"{v:.3g}" if v == v else "\u2014"
                                    for v in frame["smallest possible p"]]
    note = ("&mdash;: many distinct relabellings, so only the number of permutations limits "
            "p" if (shown["smallest possible p"] == "\u2014").any() else "")
    return (f"<div class='tf-strata-box'><b>Error strata</b>: where each term was tested "
            f"({html.escape(perm.scheme)})<br>"
            f"{TABLE_STYLE}{shown.to_html(border=0, classes='tf-table tf-strata-table')}"
            f"<small>{note}</small></div>")
