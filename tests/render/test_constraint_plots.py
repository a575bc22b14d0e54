"""The figure of a constraint test: the permutation distribution of one row's pseudo-F
(synthetic data)."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from tallyform.core.constrained import cca
from tallyform.core.constraint_tests import constraint_test
from tallyform.errors import InputError


@pytest.fixture
def test_result():
    rng = np.random.default_rng(3)
    info = pd.DataFrame({"trt": list("abc") * 5, "temp": rng.normal(size=15)},
                        index=[f"s{i}" for i in range(15)])
    x = pd.DataFrame(rng.poisson(6, (15, 7)) + 1.0, index=info.index)
    return constraint_test(cca(x, info, terms=["trt", "temp"]), "each_term",
                           n_permutations=99, rng=1)


def test_figure_shows_the_row_and_its_null(test_result):
    ct = test_result
    fig = ct.figure(row="temp")
    hist, observed = fig.data
    np.testing.assert_allclose(hist.x, ct.null_distribution["temp"])
    assert observed.meta["statistic"] == pytest.approx(ct.table.loc["temp", "pseudo_f"])
    assert observed.meta["pvalue"] == pytest.approx(ct.table.loc["temp", "pvalue"])
    assert fig.layout.title.text.startswith("CCA: temp")
    assert ct.figure().data[1].meta["statistic"] == pytest.approx(
        ct.table.loc["trt", "pseudo_f"])                       # default: the first row
    with pytest.raises(InputError, match="`row` must be one of"):
        ct.figure(row="residual")


def test_ordination_title_shows_chance_level_adjusted_share_and_p():
    from tallyform.render.plots import ordination_figure
    rng = np.random.default_rng(4)
    info = pd.DataFrame({"trt": list("abc") * 6, "temp": rng.normal(size=18)},
                        index=[f"s{i}" for i in range(18)])            # synthetic
    x = pd.DataFrame(rng.poisson(6, (18, 9)) + 1.0, index=info.index)
    o = cca(x, info, terms=["trt", "temp"])
    title = ordination_figure(o).layout.title.text
    assert o.constrained_summary() in title and "chance level" in title
    assert "not tested" in title
    # the chance level is m / (n - 1) for m constraint degrees of freedom (3 here, n = 18)
    assert f"chance level {100 * 3 / 17:.1f} %" in title
    tested = o.with_test(constraint_test(o, n_permutations=99, rng=1))
    title = ordination_figure(tested).layout.title.text
    assert "overall p = " in title and "99 permutations" in title
    assert tested.constrained_summary() in title
