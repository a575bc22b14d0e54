"""Size & shape panel past SPECTRUM_LIVE_MAX samples: the live calls skip the O(n^3)
eigenvalues (spectrum=False) and the settled background run measures them, intervals or
not; the notes then say what the direct core calls say. Data are synthetic."""
from __future__ import annotations

import numpy as np
import pandas as pd

import tallyform as tly
from tallyform.widgets import ShapePanel
from tallyform.widgets.shape_panel import SPECTRUM_LIVE_MAX


def _big_table(seed=4):
    n, p = SPECTRUM_LIVE_MAX + 40, 25
    rng = np.random.default_rng(seed)
    lam = rng.gamma(0.8, 5.0, size=(1, p)) * rng.lognormal(0, 0.7, size=(n, 1))
    x = rng.poisson(lam) + np.eye(n, p, dtype=int)
    info = pd.DataFrame({"grp": rng.choice(["a", "b"], n)}, index=[f"s{i}" for i in range(n)])
    return tly.CommunityTable(pd.DataFrame(x, index=info.index,
                                           columns=[f"t{j}" for j in range(p)]), info)


def test_live_calls_skip_the_spectrum_and_the_settled_run_measures_it():
    tab = _big_table()
    panel = ShapePanel(tab, group="grp")
    panel.intervals.value = 0
    assert "spectrum=False" in panel.calls["partition"].code()
    assert "all_dims=False" in panel.calls["partition"].code()
    assert "spectrum=False" in panel.calls["ordination"].code()
    assert "settled" in panel.calls and "spectrum" not in panel.calls["settled"].code()
    assert "all_dims" not in panel.calls["settled"].code()
    assert panel.wait_intervals(120)
    direct = tly.size_shape(tab, "bray_curtis", progress=False)
    assert direct.negative_share > 0.001
    assert panel.intervals_result is not None
    assert panel.intervals_result.negative_share == direct.negative_share
    pd.testing.assert_series_equal(panel.result.fractions, direct.fractions)
    # the live table by number of dimensions stops at the k used; the settled one is whole
    k = direct.shape_dims
    assert panel.result.by_dims().index.max() == k
    pd.testing.assert_frame_equal(panel.intervals_result.by_dims(), direct.by_dims())
    notes = panel.notes.items
    assert any("negative eigenvalues hold" in n for n in notes)
    assert not any("spectrum=False" in n for n in notes)          # the live notes replaced
    o = panel.settled_ordination
    assert o is not None and not any("spectrum=False" in n for n in o.notes)
    np.testing.assert_allclose(o.scores.to_numpy(), panel.ordination.scores.to_numpy())
    assert panel.interval_state.value == ""                     # no intervals to name


def test_with_intervals_the_interval_run_measures_it(tmp_path):
    tab = _big_table(seed=8)
    panel = ShapePanel(tab, group="grp")
    panel.intervals.value = 199
    assert "settled" not in panel.calls
    assert panel.wait_intervals(300)
    direct = tly.size_shape(tab, "bray_curtis", progress=False)
    assert panel.intervals_result.negative_share == direct.negative_share
    assert not any("spectrum=False" in n for n in panel.notes.items)


def test_reproduce_code_gives_the_settled_calls():
    from tallyform.widgets.report_panel import reproduce_code
    dash = tly.explore(_big_table(seed=11))
    dash.shape.intervals.value = 0
    code = reproduce_code(dash)
    assert "spectrum=False" not in code               # what the screen shows once at rest
    assert "s = tly.size_shape(tab, " in code and "o = tly.pcoa(" in code
