"""The Tests panel remembers the choices tried and shows the p-value adjusted for them
(state, not pixels); the reference is the public call tly.choice_adjusted."""
from __future__ import annotations

import html

import pandas as pd

import tallyform as tly
from tallyform.core.display import p_words
from tallyform.widgets import TestsPanel
from tallyform.widgets.choices_tried import CHOICES_HELP
from tallyform.widgets.help import controls_without_help




def _panel(table, seed=4):
    panel = TestsPanel(table, group="site")
    panel.units.value = False
    panel.blocks.value = ""
    panel.n_permutations.value = 199
    panel.seed.value = seed
    return panel


def _shown(panel) -> str:
    return html.unescape(panel.choices.view.value)


def test_two_choices_shown_give_the_adjusted_p_of_the_api(null_table):
    panel = _panel(null_table)
    panel.run(block=True)
    assert panel.status == "done", panel.messages.text
    assert panel.choices.n_choices() == 1
    assert panel.choices.result is None and _shown(panel) == ""      # N = 1: nothing extra
    panel.run(block=True)                                 # the same choice again: still one
    assert panel.choices.n_choices() == 1 and _shown(panel) == ""
    panel.shape_measure.value = "hellinger"
    panel.run(block=True)
    assert panel.choices.status == "done", panel.choices.error
    j = panel.choices.result
    direct = tly.choice_adjusted(null_table, "site", [{"measure": "chi_square"},
                                                      {"measure": "hellinger"}],
                                 units=False, n_permutations=199, rng=4)
    pd.testing.assert_series_equal(j.pvalue_adjusted, direct.pvalue_adjusted)
    pd.testing.assert_series_equal(j.pvalue, direct.pvalue)
    text = _shown(panel)
    assert "2 choices" in text
    assert (f"hellinger: adjusted for the 2 choices tried, "
            f"{p_words(direct.pvalue_adjusted['hellinger'])} (own "
            f"{p_words(direct.pvalue['hellinger'])}") in text
    assert "after looking at p-values" in text and "adjusted for both" in text
    # beside it, the p-value adjusted for every measure the panel offers (what covers a
    # search until one is small), the same call with the other two measures added
    every = tly.choice_adjusted(null_table, "site", [{"measure": m} for m in (
        "chi_square", "hellinger", "aitchison", "chord")], units=False, n_permutations=199,
        rng=4)
    pd.testing.assert_series_equal(panel.choices.result_menu.pvalue_adjusted,
                                   every.pvalue_adjusted)
    assert (f"Adjusted for all 4 measures this panel offers, "
            f"{p_words(every.pvalue_adjusted['hellinger'])}") in text
    # a larger family on the same relabellings never lowers an adjusted p (min-P identity)
    assert every.pvalue_adjusted["hellinger"] >= direct.pvalue_adjusted["hellinger"]
    assert "does not cover going on to try further choices" in text
    # the same core call, shown as code by the Report panel
    assert panel.choices.call.code() == (
        'tly.choice_adjusted(tab, "site", [{\'measure\': \'chi_square\', \'transform\': '
        '\'none\'}, {\'measure\': \'hellinger\', \'transform\': \'none\'}], aspect="shape", '
        'units=False, n_permutations=199, rng=4)')


def test_pairwise_runs_count_and_the_clear_control_resets(null_table):
    panel = _panel(null_table, seed=2)
    panel.run(block=True)
    panel.analysis.value = "pairwise"
    panel.shape_measure.value = "aitchison"
    panel.run(block=True)
    assert panel.choices.n_choices() == 2 and panel.choices.result is not None
    panel.analysis.value = "contributions"        # no p-value of the shape measure
    panel.run(block=True)
    assert panel.choices.n_choices() == 2
    revision = panel.revision
    panel.choices.clear_button.click()           # "Start over: a new question"
    assert panel.choices.n_choices() == 0
    assert panel.choices.result is None and panel.choices.call is None
    assert "forgotten" in _shown(panel) and panel.revision > revision
    assert panel.spec_values()["choices_tried"] is None
    panel.analysis.value = "compare"
    panel.run(block=True)
    assert panel.choices.n_choices() == 1 and _shown(panel) == ""


def test_a_choice_from_the_scan_says_so(null_table):
    panel = _panel(null_table)
    panel.choices.origin.value = "scan"
    panel.shape_measure.value = "hellinger"
    panel.run(block=True)
    text = _shown(panel)
    assert "'hellinger' was chosen in the scan" in text and "needs no adjustment" in text
    assert panel.choices.entries() == ({"measure": "hellinger", "transform": "none",
                                        "origin": "scan"},)
    # the help explains the difference, in two sentences
    assert CHOICES_HELP.count(". ") + CHOICES_HELP.endswith(".") == 2
    assert html.unescape(panel.choices.help.value).count("scan or the audit") == 1
    assert controls_without_help(panel.controls) == []


def test_the_spec_carries_the_choices_and_restores_them(null_table):
    dash = tly.explore(null_table, group="site")
    t = dash.tests
    t.units.value = False
    t.n_permutations.value = 99
    t.run(block=True)
    t.shape_measure.value = "hellinger"
    t.run(block=True)
    spec = dash.spec
    assert spec.choices_tried == ({"measure": "chi_square", "transform": "none"},
                                  {"measure": "hellinger", "transform": "none"})
    again = tly.AnalysisSpec.from_json(spec.to_json())
    assert again == spec
    other = tly.explore(null_table, spec=again.to_json())
    assert other.tests.choices.entries() == spec.choices_tried
    # the reproduce-this code holds the adjusted call
    from tallyform.widgets.report_panel import reproduce_code
    assert t.choices.call.code() in reproduce_code(dash)
    # the report written from the spec gives the same adjusted p-value
    res = tly.run(spec.replace(audit_n_sim=5, audit_n_permutations=19, n_boot=0,
                               scan_measures=("hellinger",), scan_transforms=("none",)),
                  null_table)
    pd.testing.assert_series_equal(res.choice_adjusted.pvalue_adjusted,
                                   t.choices.result.pvalue_adjusted)
