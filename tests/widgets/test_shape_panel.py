"""Size & shape panel, driven headless: set control values, check results and figures."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.render import plots
from tallyform.widgets import ShapePanel
from tallyform.widgets.shape_panel import POWER


def trace_json(fig):
    """Trace properties as plain lists (the widget adds a uid per trace: left out)."""
    def plain(v):
        if isinstance(v, dict):
            return {k: plain(x) for k, x in v.items() if k != "uid"}
        if isinstance(v, (list, tuple, np.ndarray)):
            return [plain(x) for x in v]
        return v
    return [plain(t.to_plotly_json()) for t in fig.data]


def test_partition_matches_direct_call(mesocosm):
    panel = ShapePanel(mesocosm, group="treatment")
    before = trace_json(panel.partition_plot)
    with panel.hold():                         # several controls, one update
        panel.exponent.value = 0.5
        panel.measure.value = "hellinger"
        panel.shape.value = "hellinger"
        panel.shape_dims.value = 3
    direct = tly.size_shape(mesocosm, "hellinger", transform="sqrt", shape="hellinger",
                            shape_dims=3)
    pd.testing.assert_series_equal(panel.result.fractions, direct.fractions)
    assert panel.result.transform == "sqrt" and panel.result.shape_dims == 3
    shown = trace_json(panel.partition_plot)
    assert shown != before                      # the figure changed...
    assert shown == trace_json(plots.partition_bars(direct))   # ...to the direct call's
    # the shares drawn, and the percentages printed on them, are the direct call's
    drawn = {t.meta["fraction"]: (t.x[0], t.text[0]) for t in panel.partition_plot.data}
    for f, share in direct.fractions.items():
        assert drawn[f][0] == share
        assert drawn[f][1] == f"{100 * share:.1f} %"


def test_slider_moves_figures_and_ordination(mesocosm):
    panel = ShapePanel(mesocosm)
    first = panel.result.fractions.copy()
    scores = panel.ordination.scores.copy()
    panel.exponent.value = 0.25
    assert panel.result.transform == "fourth_root"
    assert not np.allclose(first, panel.result.fractions)
    direct = tly.pcoa(tly.dissimilarity(mesocosm, "bray_curtis", transform="fourth_root"),
                      dims=2)
    pd.testing.assert_frame_equal(panel.ordination.scores, direct.scores)
    assert not panel.ordination.scores.equals(scores)
    assert panel.error is None and panel.messages.value == ""


def test_named_transform_then_slider(mesocosm):
    panel = ShapePanel(mesocosm)
    panel.transform.value = "log1p"
    assert panel.result.transform == "log1p"
    panel.exponent.value = 0.35                # the slider takes over again
    assert panel.transform.value == POWER
    assert panel.result.transform == "power(0.35)"
    direct = tly.size_shape(mesocosm, "bray_curtis", transform=tly.Power(0.35))
    pd.testing.assert_series_equal(panel.result.fractions, direct.fractions)


class _Foreground:
    """Counts the handler's own calls; the background interval runs (``size_shape`` with
    ``n_boot``, tested in test_intervals.py) may start at any moment on a busy machine."""

    def __init__(self, recorder):
        self._core = recorder()
        self.counts = self._core.counts

    def __getattr__(self, name):
        counted = getattr(self._core, name)
        if name != "size_shape":
            return counted

        def call(*args, **kwargs):
            return (tly.size_shape(*args, **kwargs) if kwargs.get("n_boot")
                    else counted(*args, **kwargs))
        call.__signature__ = counted.__signature__
        return call

    def reset(self):
        self._core.reset()


def test_only_changed_calls_rerun(mesocosm, recorder):
    core = _Foreground(recorder)
    panel = ShapePanel(mesocosm, group="treatment", core=core)
    assert core.counts == {"size_shape": 1, "pcoa": 1, "dissimilarity": 1}
    core.reset()
    panel.shape.value = "hellinger"            # partition only
    assert core.counts == {"size_shape": 1}
    core.reset()
    panel.group.value = "week"                 # colours and ellipses only
    assert core.counts == {}
    assert panel.calls["ellipses"].code() == 'o.ellipses(tab.group("week"), kind="confidence")'
    core.reset()
    panel.exponent.value = 0.5                 # both
    assert core.counts == {"size_shape": 1, "pcoa": 1, "dissimilarity": 1}


def test_calls_are_the_code_shown(mesocosm):
    panel = ShapePanel(mesocosm)
    panel.exponent.value = 0.5
    assert panel.calls["partition"].code() == (
        'tly.size_shape(tab, "bray_curtis", transform="sqrt", size="log_total", '
        'shape="chi_square")')
    assert panel.calls["ordination"].code() == (
        'tly.pcoa(tly.dissimilarity(tab, "bray_curtis", transform="sqrt"), dims=2)')


def test_core_error_is_a_readable_message(small_table, clean):
    panel = ShapePanel(small_table, group="site")
    panel.shape_dims.value = 12                # more than the 7 shape coordinates of 8 taxa
    assert panel.result is None
    assert isinstance(panel.error, tly.InputError)
    assert "`shape_dims` must be between 1 and" in panel.messages.text
    assert clean(panel.messages.value)
    assert len(panel.partition_plot.data) == 0          # no stale bars beside the message
    panel.shape_dims.value = 0                 # back to a valid choice: all well again
    assert panel.error is None and panel.messages.value == ""
    assert len(panel.partition_plot.data) == 4


def test_design_error_from_group(small_table, clean):
    panel = ShapePanel(small_table, group="site")
    panel.group.value = "gappy"                # a column with missing values
    assert isinstance(panel.error, tly.DesignError)
    assert "missing values" in panel.messages.text and clean(panel.messages.value)
    assert panel.result is not None            # the partition does not use the group


def test_unexpected_error_is_one_line(mesocosm, recorder, clean):
    def broken(*args, **kwargs):
        raise RuntimeError("kernel went\nsideways")
    panel = ShapePanel(mesocosm, core=recorder(size_shape=broken))
    assert panel.messages.text == "Unexpected RuntimeError: kernel went sideways"
    assert clean(panel.messages.value)
    assert panel.ordination is not None        # the other half still works


def test_presentation_hides_all_but_the_slider(mesocosm):
    panel = ShapePanel(mesocosm, present=True)
    assert all(w.layout.display == "none" for w in panel.controls)
    assert panel.exponent.layout.display != "none"
    big = panel.partition_plot.layout.font.size
    panel.set_present(False)
    assert all(w.layout.display != "none" for w in panel.controls)
    assert panel.partition_plot.layout.font.size < big


@pytest.mark.parametrize("effort", [False, True])
def test_size_options_follow_effort(mesocosm, moths, effort):
    panel = ShapePanel(moths if effort else mesocosm)
    values = [v for _, v in panel.size.options]
    assert ("log_total_per_effort" in values) is effort
