"""Tests panel, design-aware: the units chooser, the strata table, the size-method labels and
the blocks help line. Every number is checked against the direct core call with the same
options and seed (the code the panel shows)."""
from __future__ import annotations

import html
import math

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.core.units import resolve_units
from tallyform.widgets import TestsPanel
from tallyform.widgets.tests_panel import BLOCKS_HELP, strata_frame
from tallyform.widgets.units_choice import NO_UNITS_LABEL, unit_choices


@pytest.fixture
def six_tanks():
    """Synthetic: 2 treatments x 3 tanks, each tank sampled twice (12 samples)."""
    rng = np.random.default_rng(2)
    info = pd.DataFrame({"treatment": np.repeat(["a", "b"], 6),
                         "tank": np.repeat([f"t{i}" for i in range(6)], 2),
                         "visit": np.tile(["v1", "v2"], 6)},
                        index=[f"s{i:02d}" for i in range(12)])
    counts = pd.DataFrame(rng.poisson(8, size=(12, 6)) + 1.0, index=info.index,
                          columns=[f"x{j}" for j in range(6)])
    return tly.CommunityTable(counts, info)


def test_units_offer_the_detection_first_with_its_counts(mesocosm):
    panel = TestsPanel(mesocosm, group="treatment")
    plan = resolve_units(mesocosm.samples, ["treatment"])        # what the core detects
    lv = plan.levels[0]
    label, value = panel.units.options[0]
    assert value == lv.name == "tank" and panel.units.value == "tank"
    assert label == f"tank: {lv.m} units, {lv.sizes[0]} samples each (detected)"
    assert label == "tank: 15 units, 4 samples each (detected)"
    assert panel.units.options[1] == (NO_UNITS_LABEL, False)
    others = [v for _, v in panel.units.options[2:]]
    assert others == ["week", "day", "tank_block"]               # every other column
    # a column in which the group varies is offered as such
    assert dict((v, lb) for lb, v in panel.units.options)["week"].endswith(
        "'treatment' compared within units")


def test_units_follow_the_group_until_the_user_picks(mesocosm):
    panel = TestsPanel(mesocosm, group="treatment")
    panel.group.value = "week"                  # varies within tanks: nothing detected
    assert panel.units.value is False
    assert "(detected)" not in " ".join(lb for lb, _ in panel.units.options)
    panel.group.value = "treatment"
    assert panel.units.value == "tank"          # followed the detection back
    panel.units.value = False                   # the user's own choice...
    panel.group.value = "week"
    panel.group.value = "treatment"
    assert panel.units.value is False           # ...is kept
    assert "units=False" in panel.build_call().code()


def test_blocks_are_never_detected_as_units(mesocosm):
    choices = unit_choices(mesocosm, "treatment", blocks="tank_block")
    assert choices.detected == "tank"
    plan = resolve_units(mesocosm.samples, ["treatment"], blocks="tank_block")
    assert plan.levels[0].name == choices.detected


def test_independent_samples_run_equals_the_direct_call(mesocosm):
    panel = TestsPanel(mesocosm, group="treatment")
    panel.units.value = False
    panel.n_permutations.value = 99
    panel.seed.value = 3
    panel.run(block=True)
    assert panel.status == "done", panel.messages.text
    assert "units=False" in panel.call.code()
    direct = tly.compare_groups(mesocosm, "treatment", units=False, n_permutations=99, rng=3)
    pd.testing.assert_series_equal(panel.result.pvalue, direct.pvalue)
    assert panel.result.n_replicates == 60 == direct.n_replicates
    frame = strata_frame(panel.result)
    assert frame.loc["treatment", "stratum"] == direct.permanova.table.loc["treatment", "stratum"]


def test_strata_table_after_a_run(mesocosm):
    panel = TestsPanel(mesocosm, group="treatment")
    panel.n_permutations.value = 99
    panel.run(block=True)
    assert panel.status == "done", panel.messages.text
    direct = tly.compare_groups(mesocosm, "treatment", units="tank", n_permutations=99, rng=1)
    frame = strata_frame(panel.result)
    assert list(frame.columns) == ["stratum", "tested against", "df", "p",
                                   "smallest possible p"]
    row, table = frame.loc["treatment"], direct.permanova.table
    assert row["stratum"] == table.loc["treatment", "stratum"] == "between 'tank'"
    assert row["tested against"] == "Residual (between 'tank')"
    # 3 treatments over 15 tanks: 2 and 15 - 3 = 12 df between tanks (split-plot strata)
    assert row["df"] == "2, 12"
    assert row["p"] == direct.pvalue["shape"]
    shown = html.unescape(panel.strata.value)
    assert "Error strata" in shown and "Residual (between 'tank')" in shown
    assert f"{direct.pvalue['shape']:.4g}" in shown


def test_strata_table_gives_the_smallest_possible_p(six_tanks):
    panel = TestsPanel(six_tanks, group="treatment")
    assert panel.units.value == "tank"
    panel.n_permutations.value = 199
    panel.run(block=True)
    assert panel.status == "done", panel.messages.text
    frame = strata_frame(panel.result)
    # 6 tanks in two groups of 3: C(6, 3) = 20 relabellings of whole tanks, and swapping
    # the two equal groups gives the same statistic, so p >= 2 / 20 (mathematical identity)
    assert math.comb(6, 3) == 20
    assert frame.loc["treatment", "smallest possible p"] == pytest.approx(2 / 20)
    assert frame.loc["treatment", "df"] == "1, 4"          # 6 tanks - 2 groups
    assert "0.1" in panel.strata.value


def test_nested_units_and_contributions_units(mesocosm):
    panel = TestsPanel(mesocosm, group="treatment")
    panel.set_units(["tank_block", "tank"])                 # nested, coarsest first
    assert panel.units.value == ("tank_block", "tank")
    assert 'units=("tank_block", "tank")' in panel.build_call().code()
    panel.n_permutations.value = 49
    panel.run(block=True)
    assert panel.status == "done", panel.messages.text
    direct = tly.compare_groups(mesocosm, "treatment", units=["tank_block", "tank"],
                                n_permutations=49, rng=1)
    pd.testing.assert_series_equal(panel.result.pvalue, direct.pvalue)
    panel.analysis.value = "contributions"                  # one column: the coarsest
    assert 'units="tank_block"' in panel.build_call().code()
    panel.set_units(None)                                   # back to the detection
    assert panel.units.value == "tank"


def test_size_methods_welch_first_and_blocks_help(mesocosm):
    panel = TestsPanel(mesocosm, group="treatment")
    assert panel.size_method.options[0] == ("Welch ANOVA (default)", "welch")
    assert panel.size_method.value == "welch"
    assert html.unescape(panel.blocks_help.value).count(BLOCKS_HELP) == 1
    assert "restrict the permutations" in BLOCKS_HELP and "size test's model" in BLOCKS_HELP
    assert panel.blocks_help.layout.display is None
    panel.analysis.value = "contributions"                  # no blocks there
    assert panel.blocks_help.layout.display == "none"


def test_blocks_enter_the_call(mesocosm):
    panel = TestsPanel(mesocosm, group="treatment")
    panel.blocks.value = "tank_block"
    assert panel.units.value == "tank"
    panel.n_permutations.value = 49
    panel.run(block=True)
    assert panel.status == "done", panel.messages.text
    direct = tly.compare_groups(mesocosm, "treatment", units="tank", blocks="tank_block",
                                n_permutations=49, rng=1)
    pd.testing.assert_series_equal(panel.result.pvalue, direct.pvalue)
    assert 'blocks="tank_block"' in panel.call.code()
