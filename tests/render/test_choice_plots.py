"""The choice-adjusted figure: every choice's own and adjusted p-value, as the result has them."""
from __future__ import annotations

import numpy as np
import pytest

import tallyform as tly
from tallyform.core.errors import InputError
from tallyform.render import choice_plots, plots


@pytest.fixture(scope="module")
def adjusted(meso):
    return tly.choice_adjusted(meso, "treatment",
                               ["hellinger", {"measure": "bray_curtis", "transform": "sqrt"},
                                {"measure": "chi_square", "transform": "log1p"}],
                               aspect="spread", n_permutations=49, rng=1, progress=False)


def test_points_are_the_results_p_values(adjusted):
    fig = adjusted.figure()
    assert fig is not None and plots.choice_adjusted_figure is choice_plots.choice_adjusted_figure
    lines, raw, adj = fig.data
    order = adjusted.frame.sort_values(["pvalue", "pvalue_adjusted"], kind="stable").index
    assert list(raw.y) == list(order) == list(adj.y)
    np.testing.assert_array_equal(raw.x, adjusted.pvalue[order].to_numpy())
    np.testing.assert_array_equal(adj.x, adjusted.pvalue_adjusted[order].to_numpy())
    assert raw.meta["role"] == "raw" and adj.meta["role"] == "adjusted"
    assert adj.name == f"adjusted for {adjusted.n_choices} choices"
    assert fig.layout.xaxis.type == "log" and fig.layout.xaxis.title.text.startswith("p-value")
    assert "Westfall & Young 1993" in fig.layout.title.text
    assert any(s.x0 == 0.05 for s in fig.layout.shapes)            # the alpha line
    # every raw point is joined to its adjusted point
    assert [x for x in lines.x if x is not None] == \
        [v for pair in zip(raw.x, adj.x) for v in pair]


def test_present_mode_and_wrong_result(adjusted, meso):
    big = choice_plots.choice_adjusted_figure(adjusted, present=True)
    assert big.layout.font.size > adjusted.figure().layout.font.size
    with pytest.raises(InputError, match="ChoiceAdjustedResult"):
        choice_plots.choice_adjusted_figure(tly.dissimilarity(meso, "hellinger"))


def test_examples_are_doctests():
    import doctest
    result = doctest.testmod(choice_plots, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0 and result.attempted > 0
