"""Welch-type test on a dissimilarity: reference values, identities, schemes, units, errors.

All data are synthetic.
"""
from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from scipy.spatial.distance import pdist

import tallyform as tly
from tallyform.core.dissimilarity import Dissimilarity
from tallyform.core.errors import Cancelled, DesignError, InputError
from tallyform.core.inference import pairwise_permanova
from tallyform.core.welch import WelchResult, welch_permanova, welch_statistic


def labels_for(n):
    return [f"s{i:02d}" for i in range(n)]


def distance_path(x, labels):
    """Euclidean distances without a feature matrix (forces the Gower / n x n path)."""
    x = np.asarray(x, dtype=float).reshape(len(labels), -1)
    return Dissimilarity(pdist(x), labels, measure="euclidean")


def feature_path(x, labels):
    return Dissimilarity.from_features(np.asarray(x, float).reshape(len(labels), -1), labels)


def welch_from_coordinates(x, groups):
    """W_d computed directly from explicit coordinates (Welch 1951 in matrix form): group
    means, total variances tr(S_j) with divisor n_j - 1, weights n_j / tr(S_j)."""
    x = np.asarray(x, float).reshape(len(groups), -1)
    levels = sorted(set(groups))
    g = np.asarray(groups)
    n = np.array([np.sum(g == lv) for lv in levels], float)
    means = np.array([x[g == lv].mean(axis=0) for lv in levels])
    s2 = np.array([np.var(x[g == lv], axis=0, ddof=1).sum() for lv in levels])
    w = n / s2
    centre = (w[:, None] * means).sum(axis=0) / w.sum()
    k = len(levels)
    num = (w * ((means - centre) ** 2).sum(axis=1)).sum() / (k - 1)
    h = ((1 - w / w.sum()) ** 2 / (n - 1)).sum()
    return num / (1 + 2 * (k - 2) / (k ** 2 - 1) * h), s2, w


@pytest.fixture
def three_groups():
    """Three unbalanced groups with unequal spreads, 4 variables (synthetic)."""
    rng = np.random.default_rng(11)
    sizes, sds = (7, 12, 9), (3.0, 1.0, 0.5)
    x = np.vstack([sd * rng.standard_normal((m, 4)) + [0.3 * j, 0, 0, 0]
                   for j, (m, sd) in enumerate(zip(sizes, sds))])
    g = np.repeat(["a", "b", "c"], sizes)
    labels = labels_for(len(g))
    return x, g, labels, pd.DataFrame({"g": g}, index=labels)


# ---------------------------------------------------------------------------- references
@pytest.mark.parametrize("path", [distance_path, feature_path])
def test_two_groups_one_variable_equals_welch_t_squared(path):
    # reference: scipy.stats.ttest_ind(equal_var=False), Welch's t
    rng = np.random.default_rng(3)
    y = np.concatenate([4.0 * rng.standard_normal(6) + 1.0, rng.standard_normal(15)])
    g = np.repeat(["impacted", "control"], [6, 15])
    labels = labels_for(y.size)
    res = welch_permanova(path(y, labels), pd.DataFrame({"g": g}, index=labels), "g",
                          n_permutations=99, rng=1)
    t = stats.ttest_ind(y[g == "impacted"], y[g == "control"], equal_var=False)
    assert res.statistic == pytest.approx(t.statistic ** 2, rel=1e-10)
    # Welch-Satterthwaite degrees of freedom (scipy's Welch t uses the same)
    assert res.df[0] == 1
    assert res.df[1] == pytest.approx(t.df, rel=1e-10)


@pytest.mark.parametrize("path", [distance_path, feature_path])
def test_k_groups_one_variable_equals_welch_anova(path):
    # reference: statsmodels.stats.oneway.anova_oneway(use_var="unequal"), Welch's (1951) F
    from statsmodels.stats.oneway import anova_oneway
    rng = np.random.default_rng(5)
    sizes, sds = [5, 9, 14, 8], [2.5, 1.0, 0.4, 1.5]
    y = np.concatenate([sd * rng.standard_normal(m) + 0.2 * j
                        for j, (m, sd) in enumerate(zip(sizes, sds))])
    g = np.repeat(["a", "b", "c", "d"], sizes)
    labels = labels_for(y.size)
    res = welch_permanova(path(y, labels), pd.DataFrame({"g": g}, index=labels), "g",
                          n_permutations=99, rng=1)
    ref = anova_oneway(y, g, use_var="unequal", welch_correction=True)
    assert res.statistic == pytest.approx(float(ref.statistic), rel=1e-10)
    assert res.df[0] == 3
    assert res.df[1] == pytest.approx(float(ref.df_denom), rel=1e-10)
    # the spreads are the group variances (numpy, ddof=1)
    np.testing.assert_allclose(res.groups["spread"], [np.var(y[g == k], ddof=1)
                                                      for k in "abcd"], rtol=1e-10)


@pytest.mark.parametrize("path", [distance_path, feature_path])
def test_distance_formulas_equal_explicit_coordinates(three_groups, path):
    # identity: the statistic from squared distances alone equals the one computed from
    # the coordinates (group means and covariance traces) the distances came from
    x, g, labels, info = three_groups
    res = welch_permanova(path(x, labels), info, "g", n_permutations=99, rng=1)
    ref, s2, w = welch_from_coordinates(x, list(g))
    assert res.statistic == pytest.approx(ref, rel=1e-10)
    np.testing.assert_allclose(res.groups["spread"], s2, rtol=1e-10)
    np.testing.assert_allclose(res.groups["weight"], w, rtol=1e-10)
    np.testing.assert_allclose(res.groups["share"], w / w.sum(), rtol=1e-10)
    assert res.groups["n"].tolist() == [7, 12, 9]


def test_non_euclidean_statistic_from_squared_distances():
    # identity: for any dissimilarity, s_j^2 = sum_{i<l in j} d_il^2 / (n_j (n_j - 1)) and
    # ||c_j - c_l||^2 = mean cross d^2 - within_j / n_j^2 - within_l / n_l^2 with within the
    # sums over pairs (Alekseyenko 2016); written out plainly here from the square matrix
    rng = np.random.default_rng(9)
    x = rng.poisson(3.0, size=(17, 8)).astype(float) + 0.1
    x[:6] *= rng.uniform(0.2, 3.0, size=(6, 1))
    d = tly.dissimilarity(x, "bray_curtis")
    D2 = d.square() ** 2
    g = np.repeat([0, 1, 2], [6, 5, 6])
    n = np.bincount(g).astype(float)
    within = np.array([np.triu(D2[np.ix_(g == j, g == j)], 1).sum() for j in range(3)])
    s2 = within / (n * (n - 1))
    w = n / s2
    num = 0.0
    for j, lv in itertools.combinations(range(3), 2):
        cross = D2[np.ix_(g == j, g == lv)].mean()
        num += w[j] * w[lv] * (cross - within[j] / n[j] ** 2 - within[lv] / n[lv] ** 2)
    h = ((1 - w / w.sum()) ** 2 / (n - 1)).sum()
    ref = num / w.sum() / 2 / (1 + 2 / 8 * h)
    assert welch_statistic(d, g) == pytest.approx(ref, rel=1e-9)
    info = pd.DataFrame({"g": np.array(["x", "y", "z"])[g]}, index=d.labels)
    res = welch_permanova(d, info, "g", n_permutations=19, rng=1)
    assert res.statistic == pytest.approx(ref, rel=1e-9)
    np.testing.assert_allclose(res.groups["spread"], s2, rtol=1e-9)


def test_exact_pvalue_equals_brute_force_enumeration():
    # reference: every split of 9 samples into groups of 4 and 5 enumerated with itertools;
    # raw statistics: the p-value is the share of splits with W at least the observed one
    rng = np.random.default_rng(2)
    x = np.vstack([3 * rng.standard_normal((4, 2)) + 1.5, rng.standard_normal((5, 2))])
    g = np.repeat([0, 1], [4, 5])
    labels = labels_for(9)
    info = pd.DataFrame({"g": np.array(["a", "b"])[g]}, index=labels)
    res = welch_permanova(distance_path(x, labels), info, "g", n_permutations=999, rng=1,
                          small_sample=False)
    stats_all = []
    for first in itertools.combinations(range(9), 4):
        codes = np.ones(9, dtype=int)
        codes[list(first)] = 0
        stats_all.append(welch_from_coordinates(x, list(codes))[0])
    stats_all = np.array(stats_all)
    obs = welch_from_coordinates(x, list(g))[0]
    assert res.exact and res.n_permutations == 126 and not res.small_sample
    assert res.pvalue == pytest.approx(np.mean(stats_all >= obs * (1 - 1e-9)), abs=1e-12)
    assert sorted(res.null_distribution) == pytest.approx(sorted(stats_all), rel=1e-9)


def test_one_variable_prepivoting_ranks_welch_pvalues():
    # reference: in one dimension the small-sample form ranks the splits by Welch's own
    # p-value, scipy.stats.ttest_ind(equal_var=False).pvalue, over all 210 splits (6 / 4)
    rng = np.random.default_rng(12)
    y = np.concatenate([3.0 * rng.standard_normal(4) + 1.0, rng.standard_normal(6)])
    g = np.repeat([0, 1], [4, 6])
    labels = labels_for(10)
    info = pd.DataFrame({"g": np.array(["a", "b"])[g]}, index=labels)
    res = welch_permanova(distance_path(y, labels), info, "g", n_permutations=999, rng=1)
    assert res.exact and res.n_permutations == 210 and res.dimensions == pytest.approx(1.0)
    welch_p = []
    for first in itertools.combinations(range(10), 4):
        inside = np.zeros(10, dtype=bool)
        inside[list(first)] = True
        welch_p.append(stats.ttest_ind(y[inside], y[~inside], equal_var=False).pvalue)
    welch_p = np.array(welch_p)
    observed = stats.ttest_ind(y[g == 0], y[g == 1], equal_var=False).pvalue
    assert res.pvalue == pytest.approx(np.mean(welch_p <= observed * (1 + 1e-9)), abs=1e-12)


def test_k_groups_prepivoting_uses_welch_anova_reference():
    # reference: statsmodels anova_oneway(use_var="unequal").pvalue is the tail of
    # F(k - 1, nu); the displayed null maps each relabelling to the observed nu, so the
    # relabelling with the same Welch p-value as the observed one sits at the observed W
    from statsmodels.stats.oneway import anova_oneway
    rng = np.random.default_rng(6)
    sizes = [4, 6, 7]
    y = np.concatenate([sd * rng.standard_normal(m) for m, sd in zip(sizes, (3, 1, .5))])
    g = np.repeat(["a", "b", "c"], sizes)
    labels = labels_for(y.size)
    info = pd.DataFrame({"g": g}, index=labels)
    res = welch_permanova(distance_path(y, labels), info, "g", n_permutations=40, rng=3)
    from tallyform.core.permutation import Permutations
    onehot = (g[:, None] == np.array(["a", "b", "c"])[None, :]).astype(float)
    idx = np.vstack(list(Permutations(y.size, 40, np.random.default_rng(3),
                                      design=onehot).batches(40)))
    ref_p = np.array([anova_oneway(y, g[row], use_var="unequal").pvalue for row in idx])
    nu = float(anova_oneway(y, g, use_var="unequal").df_denom)
    np.testing.assert_allclose(res.null_distribution, stats.f.isf(ref_p, 2, nu), rtol=1e-6)
    obs_p = float(anova_oneway(y, g, use_var="unequal").pvalue)
    assert res.pvalue == pytest.approx((1 + np.sum(ref_p <= obs_p * (1 + 1e-9))) / 41)


def _u_moments(x):
    """(tr Sigma)^2 and tr Sigma^2 as U-statistics over all ordered 4-tuples of distinct
    samples: (1/4) ||x1 - x2||^2 ||x3 - x4||^2 and (1/4) ((x1 - x2)'(x3 - x4))^2 have these
    expectations for any distribution with four moments (identity)."""
    idx = np.array(list(itertools.permutations(range(x.shape[0]), 4)))
    u = x[idx[:, 0]] - x[idx[:, 1]]
    v = x[idx[:, 2]] - x[idx[:, 3]]
    return (np.mean(np.sum(u * u, axis=1) * np.sum(v * v, axis=1)) / 4,
            np.mean(np.sum(u * v, axis=1) ** 2) / 4)


def test_effective_dimensions_from_coordinates(three_groups):
    # identity: f = tr(V)^2 / tr(V^2), V = sum_j Sigma_j / n_j (Box 1954 moment match);
    # the plug-in uses numpy's covariances S_j, the default replaces each group's own
    # (tr S_j)^2 and tr S_j^2 by the U-statistics over all 4-tuples of its samples
    # (brute force here); distances alone and features give the same
    from tallyform.core.permutation import prepare_response
    from tallyform.core.welch_kernel import effective_dims
    x, g, labels, info = three_groups
    groups = [x[g == lv] for lv in "abc"]
    covs = [np.cov(xg, rowvar=False) for xg in groups]
    n = np.array([len(xg) for xg in groups], float)
    V = sum(c / k for c, k in zip(covs, n))
    plug = np.trace(V) ** 2 / np.trace(V @ V)
    u = np.array([_u_moments(xg) for xg in groups])
    num = sum(np.trace(covs[j]) * np.trace(covs[l]) / (n[j] * n[l])
              for j in range(3) for l in range(3) if j != l) + np.sum(u[:, 0] / n ** 2)
    den = sum(np.trace(covs[j] @ covs[l]) / (n[j] * n[l])
              for j in range(3) for l in range(3) if j != l) + np.sum(u[:, 1] / n ** 2)
    assert num / den > plug                  # the plug-in is biased low with few samples
    codes = np.unique(g, return_inverse=True)[1]
    for path in (distance_path, feature_path):
        res = welch_permanova(path(x, labels), info, "g", n_permutations=9, rng=1)
        assert res.dimensions == pytest.approx(num / den, rel=1e-9)
        resp = prepare_response(path(x, labels))
        assert effective_dims(resp, codes, n, corrected=False) == pytest.approx(plug, rel=1e-9)


def test_residual_blocks_agree_on_every_path(three_groups, monkeypatch):
    # identity: group covariances, residual Gram rows from features, and the doubly
    # centred Gower matrix give the same t, Q and P
    from tallyform.core import welch_kernel
    from tallyform.core.permutation import prepare_response
    x, g, labels, info = three_groups
    codes = np.unique(g, return_inverse=True)[1]
    sizes = np.bincount(codes).astype(float)
    ref = welch_kernel.residual_blocks(prepare_response(feature_path(x, labels)), codes, sizes)
    monkeypatch.setattr(welch_kernel, "_COV_FLOATS", 1)
    for path in (feature_path, distance_path):
        got = welch_kernel.residual_blocks(prepare_response(path(x, labels)), codes, sizes)
        for a, b in zip(got, ref):
            np.testing.assert_allclose(a, b, rtol=1e-9)


def test_effective_dimension_moments_are_unbiased():
    # the corrected estimates of (tr V)^2 and tr V^2 average to their true values for
    # skewed, heavy-tailed scatter (independent gamma coordinates, shape 0.5: variance
    # shape * scale^2), the plug-in ones do not (Monte Carlo, 4000 draws of groups of 4
    # and 12 in 6 dimensions; the bound is 4 Monte Carlo standard errors)
    from tallyform.core.permutation import Response
    from tallyform.core.welch_kernel import noise_moments, residual_blocks
    rng = np.random.default_rng(5)
    sizes = np.array([4.0, 12.0])
    codes = np.repeat([0, 1], [4, 12])
    scales = [np.array([3.0, 2.0, 2.0, 1.0, 0.5, 0.5]),
              np.array([1.0, 1.0, 0.5, 0.5, 0.2, 0.2])]
    V = sum(np.diag(0.5 * s ** 2) / k for s, k in zip(scales, sizes))
    truth = np.array([np.trace(V) ** 2, np.trace(V @ V)])
    est = {True: [], False: []}
    for _ in range(4000):
        x = np.vstack([rng.gamma(0.5, s, (int(k), 6)) for s, k in zip(scales, sizes)])
        blocks = residual_blocks(Response(16, features=x - x.mean(axis=0)), codes, sizes)
        for corrected, values in est.items():
            values.append(noise_moments(*blocks, sizes, corrected=corrected))
    good, plug = np.mean(est[True], axis=0), np.mean(est[False], axis=0)
    se = np.std(est[True], axis=0) / np.sqrt(4000)
    assert np.all(np.abs(good - truth) < 4 * se)
    assert plug[1] > truth[1] + 10 * se[1]       # tr V^2 overstated: f biased low
    assert good[0] / good[1] > plug[0] / plug[1]


def test_label_symmetry_in_smallest_p_note():
    # two groups of 4: 70 splits, and swapping the labels gives the same statistic, so the
    # smallest attainable p-value is 2 / 70 (common practice: count the relabellings)
    x = np.array([0.0, 1.0, 2.0, 3.0, 10.0, 11.0, 12.0, 13.0]) + np.array(
        [0.0, 0.1, 0.3, 0.0, 0.2, 0.0, 0.4, 0.1])
    labels = labels_for(8)
    res = welch_permanova(distance_path(x, labels),
                          pd.DataFrame({"g": list("aaaabbbb")}, index=labels), "g", rng=1)
    assert res.exact and res.n_permutations == 70
    assert res.pvalue == pytest.approx(2 / 70)
    assert any("0.0286" in n and "swap labels" in n for n in res.notes)


# ---------------------------------------------------------------------------- schemes
def test_same_seed_same_answer_and_paths_agree(three_groups):
    x, g, labels, info = three_groups
    a = welch_permanova(feature_path(x, labels), info, "g", n_permutations=199, rng=4)
    b = welch_permanova(feature_path(x, labels), info, "g", n_permutations=199, rng=4)
    c = welch_permanova(distance_path(x, labels), info, "g", n_permutations=199, rng=4)
    assert a.pvalue == b.pvalue == c.pvalue
    np.testing.assert_allclose(a.null_distribution, c.null_distribution, rtol=1e-9)
    assert not a.exact and a.n_permutations == 199
    assert isinstance(a, WelchResult) and not a.null_distribution.flags.writeable


def test_null_distribution_matches_relabelled_statistics(three_groups):
    # identity: each permuted statistic is the statistic of the relabelled groups; the
    # engine's permutations are replayed and recomputed one at a time from coordinates
    from tallyform.core.permutation import Permutations
    x, g, labels, info = three_groups
    res = welch_permanova(feature_path(x, labels), info, "g", n_permutations=30, rng=8,
                          small_sample=False)
    onehot = (g[:, None] == np.array(["a", "b", "c"])[None, :]).astype(float)
    perms = Permutations(len(g), 30, np.random.default_rng(8), design=onehot)
    idx = np.vstack(list(perms.batches(30)))
    again = [welch_from_coordinates(x, list(g[row]))[0] for row in idx]
    np.testing.assert_allclose(res.null_distribution, again, rtol=1e-9)
    assert res.pvalue == pytest.approx((1 + np.sum(np.array(again) >= res.statistic)) / 31)


def test_blocks_keep_relabellings_within_blocks():
    # 2 blocks of 4 samples, 2 of each group per block: C(4,2)^2 = 36 distinct relabellings
    rng = np.random.default_rng(1)
    x = rng.standard_normal((8, 3))
    labels = labels_for(8)
    info = pd.DataFrame({"g": list("aabbaabb"), "block": list("xxxxyyyy")}, index=labels)
    res = welch_permanova(feature_path(x, labels), info, "g", blocks="block", units=False,
                          n_permutations=999, rng=1)
    assert res.exact and res.n_permutations == 36
    assert "within blocks of 'block'" in res.scheme


def test_blocks_compare_groups_within_blocks():
    # identity: with blocks, the statistic is that of the coordinates with every block's
    # mean removed (relabelling within blocks leaves those means unchanged)
    rng = np.random.default_rng(13)
    block = np.repeat([0, 1, 2], [7, 8, 9])
    g = np.array(list("aabbbbb" + "aaabbbbb" + "aaabbbbbb"))
    x = 5.0 * rng.standard_normal((3, 4))[block] + rng.standard_normal((24, 4)) * np.where(
        g == "a", 3.0, 1.0)[:, None]
    labels = labels_for(24)
    info = pd.DataFrame({"g": g, "block": [f"b{b}" for b in block]}, index=labels)
    centred = x - np.array([x[block == b].mean(axis=0) for b in range(3)])[block]
    for path in (distance_path, feature_path):
        res = welch_permanova(path(x, labels), info, "g", blocks="block", units=False,
                              n_permutations=49, rng=2)
        assert res.statistic == pytest.approx(welch_from_coordinates(centred, list(g))[0],
                                              rel=1e-9)
        assert any("block centroids were removed" in n for n in res.notes)


def test_progress_and_cancel(three_groups):
    x, g, labels, info = three_groups
    seen = []
    welch_permanova(feature_path(x, labels), info, "g", n_permutations=99, rng=1,
                    progress=lambda done, total: seen.append((done, total)))
    assert seen and seen[-1] == (99, 99)
    with pytest.raises(Cancelled):
        welch_permanova(feature_path(x, labels), info, "g", n_permutations=99, rng=1,
                        cancel=lambda: True)


# ---------------------------------------------------------------------------- units
@pytest.fixture
def tanks():
    """8 tanks (3 impacted, 5 control) visited 2-4 times; tank effects (synthetic)."""
    rng = np.random.default_rng(21)
    visits = [3, 2, 4, 3, 3, 2, 4, 3]
    tank = np.repeat([f"T{i}" for i in range(8)], visits)
    effect = rng.standard_normal((8, 3)) * np.array([3, 3, 3, 1, 1, 1, 1, 1])[:, None]
    codes = np.repeat(np.arange(8), visits)
    x = effect[codes] + 0.3 * rng.standard_normal((codes.size, 3))
    labels = labels_for(codes.size)
    info = pd.DataFrame({"treatment": np.where(codes < 3, "impacted", "control"),
                         "tank": tank}, index=labels)
    return x, codes, info


@pytest.mark.parametrize("path", [distance_path, feature_path])
def test_units_analyse_unit_centroids(tanks, path):
    # identity: with units, the test equals the same test on the unit centroids
    x, codes, info = tanks
    res = welch_permanova(path(x, info.index.tolist()), info, "treatment", units="tank",
                          n_permutations=99, rng=3)
    means = np.array([x[codes == u].mean(axis=0) for u in range(8)])
    ulabels = [f"T{i}" for i in range(8)]
    uinfo = pd.DataFrame({"treatment": ["impacted"] * 3 + ["control"] * 5}, index=ulabels)
    ref = welch_permanova(feature_path(means, ulabels), uinfo, "treatment", units=False,
                          n_permutations=99, rng=3)
    assert res.statistic == pytest.approx(ref.statistic, rel=1e-9)
    assert res.pvalue == ref.pvalue and res.exact and res.n_permutations == 56
    assert res.units == "tank" and res.groups["n"].tolist() == [3, 5]   # file order
    assert "whole units of 'tank'" in res.scheme
    assert any("centroids of the units" in n and "unbalanced" in n for n in res.notes)
    # the statistic from coordinates of the unit means (Welch 1951)
    assert res.statistic == pytest.approx(
        welch_from_coordinates(means, ["i"] * 3 + ["c"] * 5)[0], rel=1e-9)


def test_units_detected_and_opt_out(tanks):
    x, codes, info = tanks
    d = feature_path(x, info.index.tolist())
    found = welch_permanova(d, info, "treatment", n_permutations=99, rng=3)
    assert found.units == "tank"
    assert any("Sampling units detected" in n for n in found.notes)
    alone = welch_permanova(d, info, "treatment", units=False, n_permutations=99, rng=3)
    assert alone.units is None and alone.groups["n"].sum() == codes.size


def test_units_errors(tanks):
    x, codes, info = tanks
    d = feature_path(x, info.index.tolist())
    varying = info.assign(visit=[f"v{i % 2}" for i in range(len(info))])
    with pytest.raises(DesignError, match="varies within the units of 'tank'"):
        welch_permanova(d, varying, "visit", units="tank")
    one = info.assign(treatment=np.where(codes < 1, "impacted", "control"))
    with pytest.raises(DesignError, match="single unit"):
        welch_permanova(d, one, "treatment", units="tank")


# ---------------------------------------------------------------------------- errors
@pytest.fixture
def small():
    labels = labels_for(6)
    x = np.array([1.0, 2.0, 4.0, 7.0, 8.0, 11.0])
    info = pd.DataFrame({"g": list("aaabbb"), "one": ["z"] * 6,
                         "lonely": list("aaaaab")}, index=labels)
    return distance_path(x, labels), info


def test_design_errors_name_the_column(small):
    d, info = small
    with pytest.raises(DesignError, match="'nope' is not in the sample table"):
        welch_permanova(d, info, "nope")
    with pytest.raises(DesignError, match="single level"):
        welch_permanova(d, info, "one")
    with pytest.raises(DesignError, match=r"\['b'\].*single sample"):
        welch_permanova(d, info, "lonely", units=False)
    gaps = info.assign(g=["a", None, "a", "b", "b", "b"])
    with pytest.raises(DesignError, match=r"missing values for sample\(s\) \['s01'\]"):
        welch_permanova(d, gaps, "g")
    with pytest.raises(InputError, match="n_permutations"):
        welch_permanova(d, info, "g", n_permutations=-1)


def test_group_without_spread_is_refused():
    labels = labels_for(6)
    x = np.array([1.0, 1.0, 1.0, 3.0, 4.0, 6.0])
    info = pd.DataFrame({"g": list("aaabbb")}, index=labels)
    with pytest.raises(DesignError, match=r"\['a'\].*no spread"):
        welch_permanova(distance_path(x, labels), info, "g", units=False)


def test_group_as_series_and_inputs_unchanged(three_groups):
    x, g, labels, info = three_groups
    before = info.copy()
    series = pd.Series(g[::-1], index=labels[::-1], name="site")       # matched by label
    res = welch_permanova(feature_path(x, labels), info, series, n_permutations=99, rng=1)
    ref = welch_permanova(feature_path(x, labels), info, "g", n_permutations=99, rng=1)
    assert res.statistic == pytest.approx(ref.statistic, rel=1e-12)
    assert res.group == "site"
    pd.testing.assert_frame_equal(info, before)


def test_small_group_note(three_groups):
    x, g, labels, info = three_groups
    tiny = info.assign(g=np.where(np.arange(len(g)) < 4, "a", "b"))
    res = welch_permanova(feature_path(x, labels), tiny, "g", n_permutations=99, rng=1)
    assert any("fewer than 6 samples" in n and "of data sets" in n for n in res.notes)
    raw = welch_permanova(feature_path(x, labels), tiny, "g", n_permutations=99, rng=1,
                          small_sample=False)
    assert any("fewer than 10 samples" in n and "small_sample=False" in n for n in raw.notes)
    big = welch_permanova(feature_path(x, labels), info, "g", n_permutations=99, rng=1)
    assert not any("fewer than" in n for n in big.notes)


def test_spread_note_names_the_spread_small_group(three_groups):
    # group 'a' (7 samples, sd 3) against 'c' (9 samples, sd 0.5): a spread ratio far above
    # 9 with the spread group the smaller one; the ratio printed is s_a^2 / s_c^2, the
    # total variances (numpy, ddof=1) of the two groups
    x, g, labels, info = three_groups
    res = welch_permanova(feature_path(x, labels), info, "g", n_permutations=19, rng=1)
    ratio = np.var(x[g == "a"], axis=0, ddof=1).sum() / np.var(x[g == "c"], axis=0,
                                                                ddof=1).sum()
    note = [n for n in res.notes if "times as spread" in n]
    assert len(note) == 1 and f"{ratio:.0f} times" in note[0]
    assert "Group 'a'" in note[0] and "group 'c'" in note[0] and "conservative" in note[0]
    # equal spreads: no note
    rng = np.random.default_rng(2)
    y = rng.standard_normal((20, 3))
    lab = labels_for(20)
    even = pd.DataFrame({"g": np.repeat(["a", "b"], [6, 14])}, index=lab)
    res = welch_permanova(feature_path(y, lab), even, "g", n_permutations=19, rng=1)
    assert not any("times as spread" in n for n in res.notes)


def test_frames_and_title(three_groups):
    x, g, labels, info = three_groups
    res = welch_permanova(feature_path(x, labels), info, "g", n_permutations=99, rng=1)
    frame = res.to_frame()
    assert list(frame.columns) == ["n", "spread", "weight", "share"]
    assert frame.index.name == "g" and frame["share"].sum() == pytest.approx(1.0)
    one = res.summary()
    assert one.loc["g", "pvalue"] == res.pvalue
    assert "W_d" in str(res) and "99 random permutations" in str(res)
    assert tly.welch_permanova is welch_permanova


# ---------------------------------------------------------------------------- pairwise
def test_pairwise_welch_statistic():
    # reference: scipy.stats.ttest_ind(equal_var=False) on each pair (one variable), and
    # statsmodels multipletests(method="holm") for the adjustment
    from statsmodels.stats.multitest import multipletests
    rng = np.random.default_rng(4)
    sizes, sds = [6, 10, 8], [3.0, 1.0, 0.5]
    y = np.concatenate([sd * rng.standard_normal(m) for m, sd in zip(sizes, sds)])
    g = np.repeat(["x", "y", "z"], sizes)
    labels = labels_for(y.size)
    info = pd.DataFrame({"g": g}, index=labels)
    res = pairwise_permanova(distance_path(y, labels), info, "g", statistic="welch",
                             n_permutations=99, rng=1)
    assert res.statistic_name == "welch_t2" and "Welch" in str(res)
    for (a, b), row in zip([("x", "y"), ("x", "z"), ("y", "z")], res.table.itertuples()):
        t = stats.ttest_ind(y[g == a], y[g == b], equal_var=False).statistic
        assert row.welch_t2 == pytest.approx(t ** 2, rel=1e-10)
        assert row.spread_a == pytest.approx(np.var(y[g == a], ddof=1), rel=1e-10)
    ref = multipletests(res.pvalue.to_numpy(), method="holm")[1]
    np.testing.assert_allclose(res.pvalue_adjusted, ref)
    assert "pseudo_f" not in res.table.columns
    plain = pairwise_permanova(distance_path(y, labels), info, "g", n_permutations=99, rng=1)
    assert plain.statistic_name == "pseudo_f" and "pseudo_f" in plain.table.columns
    with pytest.raises(InputError, match="statistic"):
        pairwise_permanova(distance_path(y, labels), info, "g", statistic="t")


def test_pairwise_welch_with_units_compares_unit_centroids():
    # each pair's Welch-type statistic equals welch_permanova on that pair's samples with
    # the same units (the unit centroids are compared, whole units relabelled)
    import tallyform as tly
    tab = tly.demo("mesocosm")
    d = tly.dissimilarity(tab, "hellinger")
    res = tly.pairwise_permanova(d, tab, "treatment", statistic="welch", n_permutations=199,
                                 rng=1)
    assert res.statistic_name == "welch_t2"
    assert set(res.table["stratum"]) == {"between 'tank'"}
    assert (res.table["n_units"] == 10).all()
    keep = tab.samples["treatment"].isin(["control", "nutrient_low"]).to_numpy()
    sub = d.subset(keep)
    one = tly.welch_permanova(sub, tab.samples.loc[keep], "treatment", units="tank",
                              n_permutations=19, rng=1)
    assert res.table.loc["control vs nutrient_low", "welch_t2"] == pytest.approx(
        one.statistic, rel=1e-12)
    # 5 + 5 tanks: 252 labellings, two of each split (labels swapped) give the same value
    exact = tly.pairwise_permanova(d, tab, "treatment", statistic="welch",
                                   n_permutations=5000, rng=1)
    assert exact.table["exact"].all()
    np.testing.assert_allclose(exact.table["min_pvalue"], 2 / 252)
