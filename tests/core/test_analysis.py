"""tly.run: every result of a spec, equal to the step-by-step public calls."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.errors import Cancelled

FAST = dict(n_permutations=99, audit_n_sim=10, audit_n_permutations=49,
            scan_measures=("bray_curtis", "hellinger"), scan_transforms=("none", "sqrt"))


@pytest.fixture(scope="module")
def mesocosm_run():
    spec = tly.AnalysisSpec(group="treatment", terms=("treatment", "week"),
                            blocks="tank_block", transform="sqrt", seed=5, **FAST)
    tab = tly.demo("mesocosm")
    return spec, tab, tly.run(spec, tab)


def test_run_matches_reproduce_code(mesocosm_run):
    # the "reproduce this" code (spec.code()) gives the same numbers as run()
    spec, tab, res = mesocosm_run
    assert res.skipped == {}
    scope = {"tab": tab}
    exec(spec.code(), scope)                      # our own generated code, not user input
    pd.testing.assert_series_equal(scope["s"].fractions, res.size_shape.fractions)
    pd.testing.assert_frame_equal(scope["p"].to_frame(), res.permanova.to_frame())
    assert scope["c"].shape.to_frame().equals(res.comparison.shape.to_frame())
    np.testing.assert_array_equal(scope["a"].pvalues, res.audit.pvalues)
    np.testing.assert_allclose(np.abs(scope["o"].scores.to_numpy()),
                               np.abs(res.ordination.scores.to_numpy()))


def test_tables_cover_every_result(mesocosm_run):
    _, _, res = mesocosm_run
    names = set(res.tables())
    for want in ("summary", "totals_by_group", "size_shape", "scan", "ordination_scores",
                 "ellipses", "size_test", "shape_test", "dispersion_test", "permanova",
                 "pairwise", "taxa_shape", "taxa_size", "audit"):
        assert want in names


def test_steps_that_cannot_run_are_reported_not_hidden():
    tab = tly.demo("mesocosm")
    g = tab.samples["treatment"]
    one = tab.subset(list(g.index[g != "nutrient_high"]) + [g.index[g == "nutrient_high"][0]])
    res = tly.run(tly.AnalysisSpec(group="treatment", **FAST), one)
    assert "audit" in res.skipped and "single sample" in res.skipped["audit"]
    assert res.size_shape is not None
    no_group = tly.run(tly.AnalysisSpec(**FAST), tab)
    assert no_group.skipped["comparison"] == "no group column in the spec"


def test_cancel_and_progress():
    seen = []
    with pytest.raises(Cancelled):
        tly.run(tly.AnalysisSpec(group="treatment", **FAST), tly.demo("mesocosm"),
                progress=lambda d, t: seen.append(d / t), cancel=lambda: len(seen) > 3)
    assert 0 < seen[-1] < 1
