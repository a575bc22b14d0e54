"""One line of plain-language help for every control of the dashboard (shown as a tooltip).

Keyed by the control's CSS class, so a test (and the browser test) can check that every
control carries its help. Words only: nothing here computes.
"""
from __future__ import annotations

import html

__all__ = ["HELP", "add_help", "exponent_words", "controls_without_help", "TRANSFORM_WORDS",
           "transform_words"]

TRANSFORM_WORDS = {"none": "none (counts as they are)", "sqrt": "square root",
                   "fourth_root": "fourth root", "log1p": "log(1 + x)",
                   "presence": "presence/absence", "profile": "relative abundances",
                   "hellinger": "Hellinger (root of relative abundances)",
                   "chord": "chord (rows to unit length)", "wisconsin": "Wisconsin double",
                   "clr": "centred log-ratio"}


def transform_words(name: str) -> str:
    """A transform's name in words for a dropdown (the name itself when unknown)."""
    return TRANSFORM_WORDS.get(name, name)

HELP = {
    # Data
    "tf-group": "The column of the sample information whose groups are compared "
                "(e.g. treatment).",
    "tf-per-effort": "Divide every total by the sampling effort (e.g. trap nights) before "
                     "comparing groups.",
    # Size & shape
    "tf-exponent-slider": "Power applied to every count before the measure: 1 = counts as "
                          "they are, 0.5 = square root, 0.25 = fourth root, 0 = presence/"
                          "absence. Lower values give rare taxa more weight.",
    "tf-transform": "How counts are changed before the measure: the exponent slider, or a "
                    "named transformation (log(1 + x), profiles, Hellinger, ...).",
    "tf-measure": "How unlike two samples are (the dissimilarity). Some respond to total "
                  "abundance (size), some only to composition (shape).",
    "tf-size": "What 'size' means in the partition: each sample's total abundance, on a log "
               "scale by default.",
    "tf-shape-basis": "How composition is described in the partition: the samples' "
                      "relative abundances compared by this distance.",
    "tf-shape-dims": "How many composition axes the partition uses; 'auto' takes the fewest "
                     "that hold 75 % of the variation in composition.",
    "tf-ellipses": "What the ellipse around each group shows: where the group's centre "
                   "probably is, where a new sample would fall, or the spread of samples.",
    "tf-intervals": "95 % intervals of each share, from resampling the samples (or whole "
                    "units); computed in the background once the controls rest.",
    "tf-interval-units": "Leave out whole sampling units (tanks, sites) together when "
                         "resampling, so that samples of one unit are not counted as "
                         "independent.",
    "tf-interval-seed": "Fixes the random draws: the same seed gives the same intervals.",
    "tf-compare-a": "The first setting of the side-by-side comparison.",
    "tf-compare-b": "The second setting of the side-by-side comparison.",
    # Tests
    "tf-analysis": "Which question: do groups differ in size, composition and spread; which "
                   "pairs of groups differ; which taxa make the difference.",
    "tf-units": "The sampling units (tanks, sites, plots): samples of one unit are not "
                "independent, so the tests count units. 'none' treats every sample as a "
                "replicate.",
    "tf-shape-measure": "The distance used by the composition and spread tests (between "
                        "relative abundances, so totals do not enter).",
    "tf-contribution-measure": "The distance whose difference between the two groups is "
                               "split into one part per taxon.",
    "tf-size-method": "The test of total abundance. Welch's ANOVA (default) allows groups "
                      "with unequal variances.",
    "tf-adjust": "Correction of the pairwise p-values for testing many pairs (Holm keeps the "
                 "chance of any false alarm at 5 %).",
    "tf-blocks": "Blocks of the design (e.g. a row of tanks given one of each treatment): "
                 "permutations stay within blocks. They do not change what is a replicate.",
    "tf-pair-a": "First group of the pair whose taxa are compared.",
    "tf-pair-b": "Second group of the pair whose taxa are compared.",
    "tf-permutations": "How many random relabellings give the p-value; more give a steadier "
                       "p-value (999 is usual).",
    "tf-seed": "Fixes the random relabellings: the same seed gives the same p-values.",
    "tf-run-button": "Start the tests (they run in the background; the notebook stays "
                     "usable).",
    "tf-cancel-button": "Stop the running tests; nothing is changed.",
    "tf-choice-origin": "Where the shape measure of the next run was chosen: in the scan or "
                        "the audit (its p-value needs no adjustment), or here after seeing "
                        "other p-values (the adjusted p-value is the one to quote).",
    "tf-clear-choices": "Forget the measures tried for this group, for a new question asked "
                        "before seeing its p-values; the count starts again at the next run.",
    # Report
    "tf-export-folder": "Where the report and the files are written (created if missing).",
    "tf-export-static": "Also write PNG and SVG pictures of the figures (needs Chromium).",
    "tf-report-button": "Write report.html (the same report as tly.report), with the tables, "
                        "the settings and the code, for the current choices.",
    "tf-export-button": "Write the figures on screen (HTML), their tables (CSV, XLSX), the "
                        "settings and the code.",
}

_NAMED_EXPONENTS = {1.0: "counts as they are", 0.5: "square root", 0.25: "fourth root",
                    0.0: "presence/absence"}


def exponent_words(a: float) -> str:
    """What an exponent means in words: ``'0.50 = square root'``."""
    a = round(float(a), 4)
    name = _NAMED_EXPONENTS.get(a)
    return f"{a:.2f} = {name}" if name else f"{a:.2f}: between " + (
        "square root and counts" if a > 0.5 else "fourth and square root" if a > 0.25
        else "presence and fourth root")


def add_help(widget, css_class: str | None = None):
    """Give ``widget`` its help line (by its CSS class) as a tooltip; returns the widget."""
    key = css_class or next((c for c in widget._dom_classes if c in HELP), None)
    if key is None:
        return widget
    widget.tooltip = HELP[key]
    # a described control shows its tooltip on its label only when set after display
    # (ipywidgets 8): the label carries the help itself, so it is there from the start
    label = getattr(widget, "description", "")
    if label and hasattr(widget, "description_allow_html") and "<" not in label:
        widget.description_allow_html = True
        widget.description = (f"<span title=\"{html.escape(HELP[key])}\">"
                              f"{html.escape(label)}</span>")
    return widget


def controls_without_help(controls) -> list[str]:
    """The CSS classes (or widget types) of controls that carry no help text."""
    out = []
    for w in controls:
        if not getattr(w, "tooltip", None):
            out.append(next(iter(w._dom_classes), type(w).__name__))
    return out
