"""The Welch-type test's figure: the generic null-distribution plot, named for its statistic."""
from __future__ import annotations

import numpy as np

import tallyform as tly


def test_welch_figure_shows_its_null_and_statistic(meso, bray):
    res = tly.welch_permanova(bray, meso.samples, "treatment", units=False,
                              n_permutations=49, rng=1)
    fig = res.figure()
    hist, obs = fig.data
    np.testing.assert_array_equal(hist.x, res.null_distribution)
    assert obs.meta["statistic"] == res.statistic and obs.meta["pvalue"] == res.pvalue
    assert fig.layout.xaxis.title.text == "Welch statistic"
    assert hist.name == "permuted Welch statistic"
    assert obs.name.startswith("observed Welch statistic")
    title = fig.layout.title.text
    assert "Welch-type test on bray_curtis: 'treatment'" in title
    assert f"p = {res.pvalue:.3g}" in title
    assert "pseudo-F" not in str(fig.to_dict())
