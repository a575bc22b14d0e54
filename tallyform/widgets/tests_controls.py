"""The Tests panel's widgets: option controls, run controls and result areas.

Built here, laid out and wired by :class:`tallyform.widgets.tests_panel.TestsPanel`;
nothing is computed.
"""
from __future__ import annotations

import html

import ipywidgets as widgets

from ..core.measures import MEASURES
from ..core.spec import SPEC_CHOICES
from ..core.taxon_terms import PAIR_MEASURES, SPLIT_MEASURES
from .choices_tried import ChoicesTried
from .common import LABEL_STYLE, MessageArea, new_figure_widget
from .shape_panel import default_group, group_options

__all__ = ["BLOCKS_HELP", "build_options", "build_outputs", "options_box"]

_SIZE_METHOD_LABELS = {"welch": "Welch ANOVA (default)", "anova": "ANOVA",
                       "kruskal": "Kruskal-Wallis", "permutation": "permutation F",
                       "negbin": "negative binomial"}
BLOCKS_HELP = ("Blocks only restrict the permutations of the shape and spread tests to "
               "within blocks, and enter the size test's model as a factor; they are not "
               "sampling units (choose those under Units).")
_ADJUST_LABELS = {"holm": "Holm", "bh": "Benjamini-Hochberg", None: "none"}


def _dropdown(css: str, **kw) -> widgets.Dropdown:
    """A labelled dropdown with its CSS class."""
    w = widgets.Dropdown(style=LABEL_STYLE, **kw)
    w.add_class(css)
    return w


def build_options(panel, table, analyses: list, group: str | None) -> None:
    """Create the option widgets (analysis, group, measures, blocks, units, ...) on ``panel``."""
    panel.analysis = widgets.ToggleButtons(options=analyses, value="compare",
                                           style={"button_width": "auto"})
    panel.analysis.add_class("tf-analysis")
    panel.group = _dropdown("tf-group", options=group_options(table), description="Group",
                            value=default_group(table) if group is None else group)
    panel.shape_measure = _dropdown(
        "tf-shape-measure",
        options=[(MEASURES[m].label, m) for m in SPEC_CHOICES["shape_measure"]],
        value="chi_square", description="Shape measure")
    panel.contribution_measure = _dropdown(
        "tf-contribution-measure",
        options=[(MEASURES[m].label, m) for m in (*SPLIT_MEASURES, *PAIR_MEASURES)],
        value="hellinger", description="Measure")
    panel.size_method = _dropdown(
        "tf-size-method",
        options=[(_SIZE_METHOD_LABELS.get(m, m), m) for m in SPEC_CHOICES["size_method"]],
        value="welch", description="Size test")
    panel.adjust = _dropdown(
        "tf-adjust",
        options=[(_ADJUST_LABELS.get(a, str(a)), a) for a in SPEC_CHOICES["pairwise_adjust"]],
        value="holm", description="Adjust p")
    panel.blocks = _dropdown("tf-blocks", options=group_options(table), value="",
                             description="Blocks")
    panel.blocks_help = widgets.HTML(f"<small>{html.escape(BLOCKS_HELP)}</small>")
    panel.blocks_help.add_class("tf-blocks-help")
    panel.blocks_help.tooltip = BLOCKS_HELP
    panel.units = _dropdown("tf-units", options=[("none: samples independent", False)],
                            value=False, description="Units",
                            layout=widgets.Layout(width="460px"))
    panel.pair_a = _dropdown("tf-pair-a", options=[], description="Group A")
    panel.pair_b = _dropdown("tf-pair-b", options=[], description="Group B")
    panel.n_permutations = widgets.BoundedIntText(value=999, min=1, max=999_999,
                                                  description="Permutations",
                                                  continuous_update=False,
                                                  style=LABEL_STYLE)
    panel.n_permutations.add_class("tf-permutations")
    panel.seed = widgets.BoundedIntText(value=1, min=0, max=2**31 - 1, description="Seed",
                                        continuous_update=False, style=LABEL_STYLE)
    panel.seed.add_class("tf-seed")


def build_outputs(panel, table) -> None:
    """Create the run controls, result areas, plots and choices record on ``panel``."""
    panel.run_button = widgets.Button(description="Run", button_style="primary", icon="play")
    panel.run_button.add_class("tf-run-button")
    panel.cancel_button = widgets.Button(description="Cancel", icon="stop", disabled=True)
    panel.cancel_button.add_class("tf-cancel-button")
    panel.progress = widgets.IntProgress(value=0, min=0, max=100, description="Progress")
    panel.progress.add_class("tf-progress")
    panel.state = widgets.HTML()
    panel.state.add_class("tf-run-state")
    panel.results = widgets.HTML()
    panel.results.add_class("tf-test-results")
    panel.strata = widgets.HTML()
    panel.strata.add_class("tf-strata")
    panel.plot = new_figure_widget("tf-test-plot")
    panel.plot2 = new_figure_widget("tf-test-plot2")
    panel.plot3 = new_figure_widget("tf-test-plot3")
    panel._plots = (panel.plot, panel.plot2, panel.plot3)
    panel._plot_boxes = tuple(widgets.Box([p]) for p in panel._plots)
    panel.messages = MessageArea()
    panel.choices = ChoicesTried(table, core=panel._core,
                                 group=lambda: panel.group.value or None,
                                 menu=SPEC_CHOICES["shape_measure"], changed=panel._bump)


def options_box(panel) -> widgets.VBox:
    """The option and run controls, laid out in rows."""
    return widgets.VBox([
        panel.analysis,
        widgets.HBox([panel.group, panel.units]),
        widgets.HBox([panel.blocks, panel.blocks_help]),
        widgets.HBox([panel.shape_measure, panel.contribution_measure]),
        widgets.HBox([panel.size_method, panel.adjust, panel.pair_a, panel.pair_b]),
        widgets.HBox([panel.n_permutations, panel.seed]),
        widgets.HBox([panel.run_button, panel.cancel_button, panel.progress, panel.state])])
