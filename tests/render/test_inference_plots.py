"""Totals by group, permutation null distributions, dispersion, audit."""
from __future__ import annotations

import numpy as np
import pytest

import tallyform as tly
from tallyform.core.errors import DesignError, InputError
from tallyform.render import plots
from tallyform.render.style import OKABE_ITO


@pytest.fixture(scope="module")
def perm(meso, bray):
    return tly.permanova(bray, meso.samples, terms=["treatment", "week"], n_permutations=99,
                         rng=1)


@pytest.fixture(scope="module")
def spread(meso, bray):
    return tly.dispersion_test(bray, meso.samples["treatment"], n_permutations=99, rng=1)


def test_totals_box_per_group_with_points(meso):
    fig = plots.totals_figure(meso, "treatment")
    # the order of the file, as the totals table beside it lists the groups
    assert [t.name for t in fig.data] == ["control", "nutrient_low", "nutrient_high"]
    assert [t.name for t in fig.data] == [str(x) for x in meso.totals_by("treatment").index]
    assert [t.marker.color for t in fig.data] == OKABE_ITO[:3]
    assert all(t.type == "box" and t.boxpoints == "all" for t in fig.data)
    assert fig.layout.yaxis.type == "log"
    assert "sample total" in fig.layout.yaxis.title.text
    totals = meso.totals
    for t in fig.data:
        labels = [h.split("</b>")[0][3:] for h in t.hovertext]
        np.testing.assert_allclose(t.y, totals[labels].to_numpy())
        assert all(meso.samples.loc[lb, "treatment"] == t.name for lb in labels)


def test_totals_per_effort_and_linear(meso):
    moths = tly.demo("moths")
    fig = plots.totals_figure(moths, "habitat", per_effort=True, log=False)
    assert fig.layout.yaxis.type == "linear"
    assert "per trap_nights" in fig.layout.yaxis.title.text
    per = moths.totals / moths.effort
    for t in fig.data:
        labels = [h.split("</b>")[0][3:] for h in t.hovertext]
        np.testing.assert_allclose(t.y, per[labels].to_numpy())
    with pytest.raises(DesignError, match="effort"):
        plots.totals_figure(meso, "treatment", per_effort=True)
    with pytest.raises(DesignError, match="not in the sample table"):
        plots.totals_figure(meso, "nonsense")


def test_null_distribution_of_a_permanova_term(perm):
    fig = perm.figure(term="week")
    hist, obs = fig.data
    np.testing.assert_array_equal(hist.x, perm.null_distribution["week"])
    assert obs.meta["statistic"] == perm.statistic["week"]
    assert obs.meta["pvalue"] == perm.pvalue["week"]
    assert f"p = {perm.pvalue['week']:.3g}" in fig.layout.title.text
    assert fig.layout.xaxis.title.text == "pseudo-F"
    assert "permutations" in fig.layout.yaxis.title.text
    assert fig.layout.shapes[0].x0 == perm.statistic["week"]
    assert "'treatment'" in perm.figure().layout.title.text        # default: first term
    with pytest.raises(InputError, match="term"):
        perm.figure(term="depth")


def test_null_distribution_of_engine_and_dispersion(meso, bray, spread):
    from tallyform.core.design import model_matrix
    from tallyform.core.permutation import permutation_f_test
    X = model_matrix(meso.samples, ["treatment"]).X
    test = permutation_f_test(bray, X, X[:, :1], n_permutations=49, rng=1)
    fig = test.figure()
    np.testing.assert_array_equal(fig.data[0].x, test.null_distribution)
    assert fig.data[1].meta["pvalue"] == test.pvalue
    with pytest.raises(InputError, match="one test"):
        plots.null_distribution_figure(test, term="x")
    fig = spread.figure(kind="null")
    assert fig.data[1].meta["statistic"] == spread.statistic
    with pytest.raises(InputError, match="PermanovaResult"):
        plots.null_distribution_figure(meso)


def test_dispersion_distances_and_means(meso, spread):
    fig = spread.figure()
    boxes = [t for t in fig.data if t.type == "box"]
    means = [t for t in fig.data if (t.meta or {}).get("role") == "group mean"][0]
    assert [t.name for t in boxes] == ["control", "nutrient_low", "nutrient_high"]
    for t in boxes:
        labels = [h.split("</b>")[0][3:] for h in t.hovertext]
        np.testing.assert_allclose(t.y, spread.distances[labels].to_numpy())
    np.testing.assert_allclose(
        means.y, spread.group_means.loc[list(means.x), "mean_distance"].to_numpy())
    assert f"p = {spread.pvalue:.3g}" in fig.layout.title.text
    assert "distance to group mean" in fig.layout.yaxis.title.text


def test_audit_rates_intervals_and_alpha(meso):
    a = tly.audit(meso, "treatment", n_sim=8, n_permutations=19, rng=3)
    fig = a.figure()
    m, r = fig.data
    assert m.y[0] == a.rate and r.y[0] == a.reference_rate
    assert m.y[0] + m.error_y.array[0] == pytest.approx(a.ci[1])
    assert m.y[0] - m.error_y.arrayminus[0] == pytest.approx(a.ci[0])
    assert r.y[0] + r.error_y.array[0] == pytest.approx(a.reference_ci[1])
    assert fig.layout.shapes[0].y0 == a.alpha
    assert fig.layout.yaxis.range[0] < 0 and fig.layout.yaxis.range[1] > 1


def test_totals_figure_says_what_relative_totals_are():
    from tallyform.core.scenarios import demo_dir
    c, s = demo_dir() / "soil_counts.csv", demo_dir() / "soil_samples.csv"
    depths = plots.totals_figure(tly.read_counts(c, s, abundance="relative"), "land_use")
    assert depths.layout.title.text.startswith("Sequencing depths by land_use")
    assert "sum of all counts" not in depths.layout.title.text
    assert "reads" in depths.layout.yaxis.title.text
    loads = plots.totals_figure(tly.demo("soil"), "land_use")
    assert loads.layout.title.text.startswith("Sample loads (size) by land_use")
    assert "qpcr_copies_per_g" in loads.layout.title.text
    # the drawn values are the loads (tab.totals), not the reads
    soil = tly.demo("soil")
    got = np.sort(np.concatenate([t.y for t in loads.data]))
    np.testing.assert_allclose(got, np.sort(soil.totals.to_numpy()))
