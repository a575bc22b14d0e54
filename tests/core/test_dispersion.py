"""Dispersion test: Levene identities, eigen-free distances, negative squared distances."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from scipy.spatial.distance import pdist

from tallyform.core.dissimilarity import Dissimilarity
from tallyform.core.errors import DesignError, InputError
from tallyform.core.dispersion import (centroid_distances_squared, dispersion_test, pcoa_axes,
                                      _spatial_median)


def one_variable(y, labels=None):
    labels = labels or [f"s{i:02d}" for i in range(len(y))]
    return Dissimilarity(pdist(np.asarray(y, float)[:, None]), labels, measure="euclidean")


def test_f_equals_levene_with_mean_centre():
    # identity: with Euclidean D on one variable, z_i = |y_i - mean of i's group|, and the
    # ANOVA F of these absolute deviations is Levene's statistic with center="mean"
    # (reference: scipy.stats.levene(center="mean"))
    rng = np.random.default_rng(11)
    y = np.concatenate([rng.normal(0, 1, 8), rng.normal(0, 2.5, 10), rng.normal(1, 1, 7)])
    g = np.repeat(["a", "b", "c"], [8, 10, 7])
    res = dispersion_test(one_variable(y), g, n_permutations=199, rng=1,
                          group_size_correction=False)
    ref = stats.levene(y[g == "a"], y[g == "b"], y[g == "c"], center="mean")
    assert res.statistic == pytest.approx(ref.statistic, rel=1e-10)
    assert res.df == (2, 22)
    dev = np.abs(y - pd.Series(y).groupby(g).transform("mean").to_numpy())
    assert res.distances.to_numpy() == pytest.approx(dev)
    assert any("not corrected for group size" in n for n in res.notes)
    # with the default correction every deviation is multiplied by sqrt(n_g / (n_g - 1));
    # reference: scipy.stats.f_oneway of the corrected absolute deviations
    corrected = dispersion_test(one_variable(y), g, n_permutations=99, rng=1)
    size = pd.Series(g).map(pd.Series(g).value_counts()).to_numpy()
    scaled = dev * np.sqrt(size / (size - 1))
    assert corrected.distances.to_numpy() == pytest.approx(scaled)
    assert corrected.statistic == pytest.approx(
        stats.f_oneway(*[scaled[g == k] for k in "abc"]).statistic, rel=1e-10)
    assert any("sqrt(n_g / (n_g - 1))" in n for n in corrected.notes)


def test_median_centre_equals_brown_forsythe_for_odd_groups():
    # identity: in one dimension the spatial median of an odd-sized group is its median,
    # so F equals scipy.stats.levene(center="median") (Brown & Forsythe 1974)
    rng = np.random.default_rng(12)
    y = np.concatenate([rng.normal(0, 1, 7), rng.normal(0, 3, 9)])
    g = np.repeat(["a", "b"], [7, 9])
    res = dispersion_test(one_variable(y), g, centre="median", n_permutations=99, rng=1,
                          group_size_correction=False)
    ref = stats.levene(y[g == "a"], y[g == "b"], center="median")
    assert res.statistic == pytest.approx(ref.statistic, rel=1e-8)


def test_spatial_median_of_a_symmetric_cloud():
    # common practice: the spatial median of points symmetric about c is c; in 1-D, odd n,
    # it is the ordinary median
    pts = np.array([[1.0, 1.0], [3.0, 1.0], [1.0, 3.0], [3.0, 3.0], [2.0, 2.0]])
    assert _spatial_median(pts) == pytest.approx([2.0, 2.0], abs=1e-9)
    x = np.array([[0.0], [1.0], [10.0], [11.0], [50.0]])
    assert _spatial_median(x) == pytest.approx([10.0], abs=1e-6)


def test_eigen_free_form_equals_principal_coordinates():
    # identity (Anderson 2006; docs/methods.md, section 6): distances to centroids in PCoA space with the
    # imaginary axes subtracted equal z_i^2 = (1/n_g) sum_l d_il^2 - 1/(2 n_g^2) sum d_lm^2.
    # Bray-Curtis is not Euclidean, so negative eigenvalues take part.
    rng = np.random.default_rng(13)
    x = rng.poisson(rng.gamma(0.6, 6.0, size=(24, 15))) + (rng.random((24, 15)) < 0.1)
    d = Dissimilarity(pdist(x, "braycurtis"), measure="bray_curtis")
    xp, xn = pcoa_axes(np.asarray(d.gower()))
    assert xn.shape[1] > 0                                      # truly non-Euclidean
    codes = np.repeat([0, 1, 2], 8)
    eig = centroid_distances_squared(d, codes, "mean", use="eigen")
    free = centroid_distances_squared(d, codes, "mean", use="eigen-free")
    assert eig == pytest.approx(free, rel=1e-8, abs=1e-12)


def test_features_path_equals_distance_path():
    rng = np.random.default_rng(14)
    f = rng.normal(size=(18, 4))
    g = np.repeat(["a", "b", "c"], 6)
    a = dispersion_test(Dissimilarity.from_features(f, measure="euclidean"), g, rng=3,
                        n_permutations=199)
    b = dispersion_test(Dissimilarity(pdist(f), measure="euclidean"), g, rng=3,
                        n_permutations=199)
    assert a.statistic == pytest.approx(b.statistic, rel=1e-9)
    assert a.distances.to_numpy() == pytest.approx(b.distances.to_numpy(), rel=1e-9)
    assert a.pvalue == b.pvalue
    am = dispersion_test(Dissimilarity.from_features(f, measure="euclidean"), g,
                         centre="median", rng=3, n_permutations=9)
    bm = dispersion_test(Dissimilarity(pdist(f), measure="euclidean"), g, centre="median",
                         rng=3, n_permutations=9)
    assert am.distances.to_numpy() == pytest.approx(bm.distances.to_numpy(), rel=1e-6)


def test_negative_squared_distance_rule():
    # a group of three with d12 = d13 = 1, d23 = 3 breaks the triangle inequality:
    # z_1^2 = 2/3 - (2 + 9)/9 < 0 by the eigen-free form; the rule sets z_1 = 0 and says so
    square = np.array([[0, 1, 1, 5, 5, 5],
                       [1, 0, 3, 5, 5, 5],
                       [1, 3, 0, 5, 5, 5],
                       [5, 5, 5, 0, 1, 1],
                       [5, 5, 5, 1, 0, 1],
                       [5, 5, 5, 1, 1, 0]], dtype=float)
    d = Dissimilarity.from_square(square, list("abcdef"), measure="custom")
    g = list("xxxyyy")
    z2 = centroid_distances_squared(d, np.repeat([0, 1], 3), "mean")
    assert z2[0] == pytest.approx(2 / 3 - 11 / 9)
    res = dispersion_test(d, g, rng=1, group_size_correction=False)
    assert res.distances["a"] == 0.0
    assert res.distances["b"] == pytest.approx(np.sqrt(z2[1]))
    assert any("negative squared distance" in n for n in res.notes)


def test_groups_as_series_matched_by_label_and_result_fields():
    rng = np.random.default_rng(15)
    y = rng.normal(size=12)
    labels = [f"s{i:02d}" for i in range(12)]
    d = one_variable(y, labels)
    g = pd.Series(np.repeat(["lo", "hi"], 6), index=labels, name="treatment")
    a = dispersion_test(d, g, rng=2, n_permutations=99)
    b = dispersion_test(d, g.iloc[::-1], rng=2, n_permutations=99)
    assert a.statistic == b.statistic and a.pvalue == b.pvalue
    assert list(a.group_means.index) == ["lo", "hi"]          # the order of the table
    assert a.group_means.index.name == "treatment"
    assert a.to_frame()["n"].tolist() == [6, 6]
    assert a.null_distribution.size == 99 and not a.exact
    assert "Dispersion test" in str(a)


def test_same_seed_same_pvalue():
    rng = np.random.default_rng(16)
    y = rng.normal(size=30) * np.repeat([1.0, 1.5, 2.0], 10)
    g = np.repeat(["a", "b", "c"], 10)
    d = one_variable(y)
    assert dispersion_test(d, g, rng=4).pvalue == dispersion_test(d, g, rng=4).pvalue
    assert not np.array_equal(dispersion_test(d, g, rng=4).null_distribution,
                              dispersion_test(d, g, rng=5).null_distribution)


@pytest.mark.slow
def test_pvalues_uniform_under_equal_spread():
    # under equal spreads the permutation p-values are close to uniform (KS, generous
    # alpha); permutation of residuals is approximate here (ter Braak 1992), hence the
    # lenient threshold
    rng = np.random.default_rng(17)
    g = np.repeat(["a", "b"], 10)
    p = [dispersion_test(Dissimilarity.from_features(rng.normal(size=(20, 3)),
                                                     measure="euclidean"),
                         g, n_permutations=99, rng=rng).pvalue for _ in range(150)]
    assert stats.kstest(p, "uniform").pvalue > 1e-3


def test_errors():
    d = one_variable(np.arange(7.0))
    with pytest.raises(DesignError, match="single sample"):
        dispersion_test(d, list("aaabbbc"))
    with pytest.raises(DesignError, match="single level"):
        dispersion_test(d, list("aaaaaaa"))
    with pytest.raises(DesignError, match="7 samples"):
        dispersion_test(d, list("aaabbb"))
    with pytest.raises(InputError, match="centre"):
        dispersion_test(d, list("aaabbbb"), centre="centroid")


@pytest.mark.parametrize("features", [True, False])
def test_null_recomputes_centroids_for_every_relabelling(features):
    # the procedure written out: residuals about the group centroids stay in place, the
    # group labels are relabelled, centroids and corrected distances are computed again
    # with numpy and F by scipy.stats.f_oneway, for the same relabellings
    from tallyform.core.schemes import Permutations, label_symmetries
    rng = np.random.default_rng(21)
    x = rng.normal(size=(14, 3)) * np.repeat([1.0, 1.8], 7)[:, None]
    g = np.repeat([0, 1], [5, 9])
    d = (Dissimilarity.from_features(x, measure="euclidean") if features
         else Dissimilarity(pdist(x), measure="euclidean"))
    res = dispersion_test(d, g, n_permutations=60, rng=3)
    perms = Permutations(14, 60, np.random.default_rng(3), design=g[:, None],
                         symmetries=label_symmetries([("factor", g)]))
    rho = x - np.vstack([x[g == k].mean(axis=0) for k in (0, 1)])[g]

    def f_of(labels):
        z = np.empty(14)
        for k, m in ((0, 5), (1, 9)):
            r = rho[labels == k]
            z[labels == k] = np.sqrt(((r - r.mean(axis=0)) ** 2).sum(axis=1) * m / (m - 1))
        return stats.f_oneway(z[labels == 0], z[labels == 1]).statistic

    expected = [f_of(g[idx]) for idx in np.vstack(list(perms.batches(60)))]
    assert res.statistic == pytest.approx(f_of(g), rel=1e-9)
    assert res.null_distribution == pytest.approx(np.array(expected), rel=1e-9)
    assert "centroids and distances recomputed" in res.scheme
