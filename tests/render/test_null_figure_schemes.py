"""Null-distribution figures of design-aware tests: each PERMANOVA term with its own scheme
and permutation count; the Welch-type test drawn directly."""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.render import plots


@pytest.fixture(scope="module")
def split_plot():
    """Synthetic split plot: 2 treatments x 3 tanks, each tank sampled in 4 weeks."""
    rng = np.random.default_rng(11)
    tanks = np.repeat([f"t{i}" for i in range(6)], 4)
    info = pd.DataFrame({"treatment": np.repeat(["a", "b"], 12), "tank": tanks,
                         "week": np.tile(["w1", "w2", "w3", "w4"], 6)},
                        index=[f"s{i:02d}" for i in range(24)])
    counts = pd.DataFrame(rng.poisson(7, size=(24, 8)) + 1.0, index=info.index,
                          columns=[f"x{j}" for j in range(8)])
    tab = tly.CommunityTable(counts, info)
    d = tly.dissimilarity(tab, "hellinger")
    return tab, d, tly.permanova(d, tab, ["treatment", "week"], units="tank",
                                 n_permutations=99, rng=4)


def test_each_term_shows_its_own_scheme(split_plot):
    _, _, res = split_plot
    between, within = res.schemes.loc["treatment"], res.schemes.loc["week"]
    # whole tanks: C(6, 3) = 20 relabellings, fewer than 99, so that term is exact
    # (mathematical identity); the within-tank term is not
    assert math.comb(6, 3) == int(between["n_permutations"]) and bool(between["exact"])
    assert not bool(within["exact"]) and int(within["n_permutations"]) == 99
    fig_b = plots.null_distribution_figure(res, term="treatment")
    fig_w = plots.null_distribution_figure(res, term="week")
    title_b, title_w = fig_b.layout.title.text, fig_w.layout.title.text
    assert "all distinct relabellings (exact)" in title_b and "99 permutations" not in title_b
    assert "from 99 permutations" in title_w
    assert str(between["permutations"])[:40] in title_b
    assert str(within["permutations"])[:40] in title_w
    assert f"tested against {res.table.loc['treatment', 'tested_against']}" in title_b
    assert f"tested against {res.table.loc['week', 'tested_against']}" in title_w
    np.testing.assert_array_equal(fig_w.data[0].x, res.null_distribution["week"])
    assert "Freedman & Lane" in title_w                 # a term after the first


def test_welch_result_is_drawn_directly(split_plot):
    tab, d, _ = split_plot
    w = tly.welch_permanova(d, tab, "treatment", units="tank", n_permutations=99, rng=2)
    fig = plots.null_distribution_figure(w)
    hist, obs = fig.data
    np.testing.assert_array_equal(hist.x, w.null_distribution)
    assert obs.meta["statistic"] == w.statistic and obs.meta["pvalue"] == w.pvalue
    # the null holds every relabelling at the observed degrees of freedom, so the p-value
    # is the share of it at or above the observed value (the docstring's identity; exact
    # enumeration here, identity included)
    assert w.exact
    assert w.pvalue == pytest.approx(np.mean(w.null_distribution >= w.statistic - 1e-9))
    title = fig.layout.title.text
    assert "Welch-type test on hellinger: 'treatment' (centroids of 'tank' units)" in title
    assert "T_w<sup>2</sup>" in title                   # two groups
    assert "pseudo-F" not in str(fig.to_dict())
    assert fig.to_dict() == w.figure().to_dict()       # the result's figure() is this
    with pytest.raises(tly.InputError, match="one test"):
        plots.null_distribution_figure(w, term="treatment")
