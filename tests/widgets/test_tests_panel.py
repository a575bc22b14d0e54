"""Tests panel: background runs, progress, cancel from another thread, readable errors."""
from __future__ import annotations

import html
import threading

import numpy as np
import pandas as pd

import tallyform as tly
from tallyform.errors import Cancelled
from tallyform.widgets import TestsPanel


def test_compare_run_matches_direct_call(mesocosm):
    panel = TestsPanel(mesocosm, group="treatment")
    assert panel.units.value == "tank"              # the core's detection, made explicit
    # the blocks the quick start uses (notebook 01: blocks="tank_block"), suggested
    assert panel.blocks.value == "tank_block" and "quick start" in panel.blocks_help.value
    panel.n_permutations.value = 199
    panel.seed.value = 5
    panel.run()
    assert panel.wait(timeout=60)
    assert panel.status == "done", panel.messages.text
    assert panel.call.code() == (
        'tly.compare_groups(tab, "treatment", units="tank", shape_measure="chi_square", '
        'size_method="welch", blocks="tank_block", n_permutations=199, rng=5)')
    direct = tly.compare_groups(mesocosm, "treatment", units="tank", blocks="tank_block",
                                shape_measure="chi_square", n_permutations=199, rng=5)
    pd.testing.assert_series_equal(panel.result.pvalue, direct.pvalue)
    pd.testing.assert_series_equal(panel.result.statistic, direct.statistic)
    assert list(panel.result.pvalue.index) == ["size", "shape", "spread", "permanova"]
    # the same tests as the detection would run (only the words about detection differ)
    detected = tly.compare_groups(mesocosm, "treatment", blocks="tank_block",
                                  n_permutations=199, rng=5)
    pd.testing.assert_series_equal(panel.result.pvalue, detected.pvalue)
    assert panel.progress.value == 100
    assert not panel.run_button.disabled and panel.cancel_button.disabled
    assert direct.reading in html.unescape(panel.results.value)
    assert all(len(p.data) > 0 for p in (panel.plot, panel.plot2, panel.plot3))
    # each figure is the core's own figure of that test (widgets draw, never compute)
    for widget, fig in ((panel.plot, direct.shape.figure()),
                        (panel.plot2, direct.dispersion.figure(kind="distances")),
                        (panel.plot3, direct.permanova.figure())):
        assert len(widget.data) == len(fig.data)
        for got, want in zip(widget.data, fig.data):
            for axis in ("x", "y"):
                a, b = getattr(got, axis, None), getattr(want, axis, None)
                if b is not None:
                    np.testing.assert_array_equal(np.asarray(a), np.asarray(b))


def test_pairwise_run(mesocosm):
    panel = TestsPanel(mesocosm, group="treatment")
    panel.analysis.value = "pairwise"
    panel.shape_measure.value = "hellinger"
    panel.adjust.value = None
    panel.n_permutations.value = 99
    panel.run(block=True)
    assert panel.status == "done", panel.messages.text
    assert panel.call.code() == (
        'tly.pairwise_permanova(tly.dissimilarity(tab, "hellinger"), tab, "treatment", '
        'adjust=None, units="tank", blocks="tank_block", n_permutations=99, rng=1)')
    direct = tly.pairwise_permanova(tly.dissimilarity(mesocosm, "hellinger"), mesocosm,
                                    "treatment", adjust=None, units="tank",
                                    blocks="tank_block", n_permutations=99, rng=1)
    pd.testing.assert_frame_equal(panel.result.table, direct.table)
    assert set(panel.result.table["stratum"]) == {"between 'tank'"}


def test_cancel_from_another_thread_leaves_panel_usable(mesocosm, recorder, clean):
    started = threading.Event()
    release = threading.Event()

    def slow(*args, progress=None, cancel=None, **kwargs):
        # stands in for a long permutation run: reports progress, checks cancel
        for done in range(10_000):
            progress(done, 10_000)
            started.set()
            if cancel():
                raise Cancelled("stopped")
            release.wait(0.01)
        raise AssertionError("never cancelled")

    panel = TestsPanel(mesocosm, group="treatment", core=recorder(compare_groups=slow))
    panel.run()
    assert started.wait(10)
    assert panel.running and panel.run_button.disabled and not panel.cancel_button.disabled
    stopper = threading.Thread(target=panel.cancel)
    stopper.start()
    stopper.join()
    assert panel.wait(timeout=10)
    assert panel.status == "cancelled" and panel.result is None
    assert "Cancelled" in panel.messages.text and clean(panel.messages.value)
    assert not panel.run_button.disabled and panel.cancel_button.disabled
    # usable afterwards: the real core, a short run
    panel._core = tly
    panel.n_permutations.value = 99
    panel.run(block=True)
    assert panel.status == "done" and panel.messages.value == ""


def test_real_run_cancels(mesocosm):
    seen = threading.Event()
    panel = TestsPanel(mesocosm, group="treatment")
    panel.n_permutations.value = 500_000
    panel.progress.observe(lambda change: seen.set(), names="value")
    panel.run()
    assert seen.wait(30)                        # the bar moved: the run is under way
    panel.cancel()
    assert panel.wait(timeout=30)
    assert panel.status == "cancelled"
    assert panel.progress.value < 100


def test_design_error_is_readable(small_table, clean):
    panel = TestsPanel(small_table, group="gappy")
    panel.run(block=True)
    assert panel.status == "error"
    assert isinstance(panel.error, tly.DesignError)
    assert "missing values" in panel.messages.text and clean(panel.messages.value)
    assert not panel.run_button.disabled


def test_no_group_says_so(small_table):
    panel = TestsPanel(small_table, group="")
    panel.run()
    assert not panel.running and panel.status == "error"
    assert "choose a group" in panel.messages.text


def test_presentation_hides_controls(mesocosm):
    panel = TestsPanel(mesocosm)
    panel.set_present(True)
    assert all(w.layout.display == "none" for w in panel.controls)
    panel.set_present(False)
    assert panel.run_button.layout.display != "none"
    assert panel.size_method.layout.display != "none"       # shown for 'compare'
    assert panel.adjust.layout.display == "none"            # only for 'pairwise'


def test_contributions_run(mesocosm):
    panel = TestsPanel(mesocosm, group="treatment")
    panel.analysis.value = "contributions"
    panel.pair_a.value, panel.pair_b.value = "control", "nutrient_high"
    panel.contribution_measure.value = "chi_square"
    panel.run(block=True)
    assert panel.status == "done", panel.messages.text
    assert panel.call.code() == ('tly.taxon_contributions(tab, "treatment", "control", '
                                 '"nutrient_high", measure="chi_square", units="tank", rng=1)')
    direct = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                     measure="chi_square", units="tank", rng=1)
    pd.testing.assert_frame_equal(panel.result.to_frame(), direct.to_frame())
    panel.units.value = False                  # samples independent: no units= at all
    assert "units" not in panel.build_call().code()
    assert len(panel.plot.data) > 0 and len(panel.plot2.data) > 0
