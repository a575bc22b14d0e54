"""Size & shape panel: the share intervals in the background (debounced, cancellable) and the
ellipse choices worded by the core."""
from __future__ import annotations

import threading

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.core.ellipses import describe
from tallyform.errors import Cancelled
from tallyform.widgets import ShapePanel


def interval_traces(fig):
    return {t.meta["fraction"]: t for t in fig.data
            if isinstance(t.meta, dict) and t.meta.get("kind") == "interval"}


def test_bars_at_once_intervals_after(mesocosm):
    panel = ShapePanel(mesocosm, group="treatment")
    panel.units.value = "tank"
    panel.exponent.value = 0.5
    # at once: the bars alone, and the panel says the intervals are on their way
    assert len(panel.partition_plot.data) == 4 and not interval_traces(panel.partition_plot)
    assert "intervals: computing" in panel.interval_state.value
    assert panel.intervals_result is None
    assert panel.wait_intervals(60)
    assert "leaving out whole units of &#x27;tank&#x27;" in panel.interval_state.value
    direct = tly.size_shape(mesocosm, "bray_curtis", transform="sqrt", n_boot=199,
                            units="tank", rng=1)
    assert panel.calls["intervals"].code() == (
        'tly.size_shape(tab, "bray_curtis", transform="sqrt", size="log_total", '
        'shape="chi_square", n_boot=199, units="tank", rng=1)')
    pd.testing.assert_frame_equal(panel.intervals_result.fractions_ci, direct.fractions_ci)
    pd.testing.assert_series_equal(panel.intervals_result.fractions, panel.result.fractions)
    # drawn as the side panel: each share's whiskers reach the interval's ends
    drawn = interval_traces(panel.partition_plot)
    assert set(drawn) == set(direct.fractions.index)
    for f, t in drawn.items():
        share = direct.fractions[f]
        lo, hi = direct.fractions_ci.loc[f, ["low", "high"]]
        assert t.x[0] == pytest.approx(share)
        assert t.x[0] + t.error_x.array[0] == pytest.approx(max(hi, share))
        assert t.x[0] - t.error_x.arrayminus[0] == pytest.approx(min(lo, share))
    assert any("95 % intervals" in n for n in panel.notes.items)


def test_group_change_keeps_the_intervals(mesocosm, recorder):
    core = recorder()
    panel = ShapePanel(mesocosm, group="treatment", core=core)
    assert panel.wait_intervals(60) and panel.intervals_result is not None
    core.reset()
    panel.group.value = "week"                    # the partition does not use the group
    assert core.counts == {}
    assert interval_traces(panel.partition_plot) and not panel.intervals_pending


def test_settling_runs_only_the_last_setting(mesocosm, recorder):
    boot_calls = []

    def counted(*args, **kwargs):
        if kwargs.get("n_boot"):
            boot_calls.append(kwargs.get("transform"))
        return tly.size_shape(*args, **kwargs)
    panel = ShapePanel(mesocosm, core=recorder(size_shape=counted))
    panel._runner.delay = 2.0                     # a patient user: nothing starts mid-drag
    panel.wait_intervals(0)                       # (the first settle is still pending)
    for a in (0.9, 0.8, 0.7, 0.6, 0.45):           # a drag: five quick changes
        panel.exponent.value = a
        assert "intervals: computing" in panel.interval_state.value
    assert panel.wait_intervals(60)
    assert boot_calls == ["power(0.45)"]          # the settled value only, once
    assert panel.intervals_result.transform == "power(0.45)"


def test_moving_again_cancels_a_running_interval(mesocosm, recorder):
    started, seen = threading.Event(), []

    def slow(*args, progress=None, cancel=None, **kwargs):
        if not kwargs.get("n_boot"):
            return tly.size_shape(*args, **kwargs)
        if kwargs.get("transform") == "sqrt":     # the first settle: runs until cancelled
            started.set()
            for _ in range(2000):
                if cancel():
                    seen.append("cancelled")
                    raise Cancelled("stopped")
                threading.Event().wait(0.005)
            raise AssertionError("never cancelled")
        return tly.size_shape(*args, progress=progress, cancel=cancel, **kwargs)
    panel = ShapePanel(mesocosm, core=recorder(size_shape=slow))
    panel._runner.delay = 0.0
    panel.cancel_intervals()
    panel.exponent.value = 0.5
    assert started.wait(30)
    panel.exponent.value = 0.25                  # moves again while the first one runs
    assert panel.wait_intervals(60)
    assert seen == ["cancelled"]
    assert panel.intervals_result.transform == "fourth_root"
    direct = tly.size_shape(mesocosm, "bray_curtis", transform="fourth_root", n_boot=199,
                            rng=1)
    pd.testing.assert_frame_equal(panel.intervals_result.fractions_ci, direct.fractions_ci)


def test_intervals_off_and_errors_are_said(small_table, clean):
    panel = ShapePanel(small_table, group="site")
    panel.intervals.value = 0
    assert "intervals" not in panel.calls and panel.interval_state.value == ""
    assert not panel.intervals_pending
    panel.intervals.value = 199
    panel.units.value = "block"                   # 2 blocks: too few units to leave out
    assert panel.wait_intervals(60)
    assert "no intervals" in panel.interval_state.value
    assert clean(panel.interval_state.value)
    try:                                          # what the core says about the same call
        tly.size_shape(small_table, "bray_curtis", n_boot=199, units="block", rng=1)
    except tly.DesignError as err:
        assert str(err)[:40] in panel.interval_state.value.replace("&#x27;", "'")
    else:
        pytest.fail("the core accepted 2 units")
    assert len(panel.partition_plot.data) == 4 and panel.error is None   # bars stay


def test_ellipse_kinds_are_worded_by_the_core(mesocosm):
    panel = ShapePanel(mesocosm, group="treatment")
    labels = dict((v, lb) for lb, v in panel.ellipses.options)
    for kind in ("confidence", "prediction", "data"):
        assert labels[kind] == describe(kind, 0.95)
    assert "spread of the group's samples" in labels["data"]
    panel.ellipses.value = "data"
    assert panel.calls["ellipses"].code() == 'o.ellipses(tab.group("treatment"), kind="data")'
    assert panel.ellipse_set.kind == "data" and labels["data"] == panel.ellipse_set.covers
    legend = [t for t in panel.ordination_plot.data
              if isinstance(t.meta, dict) and t.meta.get("role") == "ellipse legend"]
    assert legend and legend[0].meta["covers"] == panel.ellipse_set.covers
    panel.ellipses.value = None
    assert "ellipses" not in panel.calls and panel.ellipse_set is None
    assert panel.spec_values()["ellipse"] is None


def test_confidence_ellipses_on_pcoa_are_not_withheld(mesocosm):
    # the panel's ordination is unconstrained (PCoA): nothing chose its axes, so the
    # confidence ellipses are drawn (the withholding applies to constrained axes only)
    panel = ShapePanel(mesocosm, group="treatment")
    assert panel.ellipse_set.withheld == ""
    assert len(panel.ellipse_set.table) == 3
    o = tly.pcoa(tly.dissimilarity(mesocosm, "bray_curtis"), dims=2)
    e = o.ellipses(mesocosm.group("treatment"), kind="confidence")
    np.testing.assert_allclose(panel.ellipse_set.table["semi_major"], e.table["semi_major"])
