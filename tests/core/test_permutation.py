"""The permutation engine: schemes, exact enumeration, p-values, batching, callbacks."""
from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy import stats
from scipy.spatial.distance import pdist, squareform

from tallyform.core.dissimilarity import Dissimilarity
from tallyform.core.errors import Cancelled, DesignError
from tallyform.core.permutation import (Permutations, count_relabellings, nested_bases,
                                        permutation_f_test, pvalue_from_null)


def indicators(codes):
    codes = np.asarray(codes)
    return np.column_stack([np.ones(codes.size)]
                           + [(codes == k).astype(float) for k in np.unique(codes)[1:]])


def pseudo_f_direct(d2, codes):
    """Pseudo-F from squared distances, written out (Anderson 2001, eq. in terms of d^2)."""
    n = codes.size
    levels = np.unique(codes)
    ss_t = d2.sum() / (2 * n)
    ss_w = sum(d2[np.ix_(codes == g, codes == g)].sum() / (2 * (codes == g).sum())
               for g in levels)
    a = levels.size
    return ((ss_t - ss_w) / (a - 1)) / (ss_w / (n - a))


@pytest.fixture
def bray():
    rng = np.random.default_rng(3)
    x = rng.poisson(rng.gamma(1.0, 4.0, size=(9, 12)))
    x[:, 0] += 1
    return Dissimilarity(pdist(x, "braycurtis"), [f"s{i}" for i in range(9)],
                         measure="bray_curtis")


# ---------------------------------------------------------------------------- exact
@pytest.mark.parametrize("sizes", [(3, 3, 3), (2, 3, 4)])
def test_exact_pvalue_equals_scipy_permutation_test(bray, sizes):
    # reference: scipy.stats.permutation_test, permutation_type="independent", exhaustive
    # (n_resamples=inf), on the same pseudo-F statistic written out from squared distances
    codes = np.repeat(np.arange(3), sizes)
    d2 = bray.square() ** 2
    ours = permutation_f_test(bray, indicators(codes), n_permutations=9999, rng=0)
    assert ours.exact
    assert ours.n_permutations == math.factorial(9) // math.prod(math.factorial(s)
                                                                 for s in sizes)

    def stat(*groups):
        order = np.concatenate(groups).astype(int)
        return pseudo_f_direct(d2[np.ix_(order, order)], codes)

    ref = stats.permutation_test(tuple(np.flatnonzero(codes == k) for k in range(3)), stat,
                                 permutation_type="independent", n_resamples=np.inf,
                                 alternative="greater", vectorized=False)
    assert ours.statistic == pytest.approx(ref.statistic, rel=1e-10)
    assert ours.pvalue == pytest.approx(ref.pvalue, rel=1e-12)
    assert np.sort(ours.null_distribution) == pytest.approx(np.sort(ref.null_distribution),
                                                            rel=1e-9)


def test_count_relabellings_matches_brute_force():
    # identity: distinct arrangements of a multiset, counted by listing every permutation
    types = np.array([0, 0, 1, 1, 1, 2, 0])
    blocks = np.array([0, 0, 0, 1, 1, 1, 1])
    brute = set()
    pos0, pos1 = np.flatnonzero(blocks == 0), np.flatnonzero(blocks == 1)
    for p0 in itertools.permutations(pos0):
        for p1 in itertools.permutations(pos1):
            idx = np.arange(7)
            idx[pos0], idx[pos1] = p0, p1
            brute.add(tuple(types[idx]))
    assert count_relabellings(types, blocks) == len(brute)
    perms = Permutations(7, 10_000, 1, blocks=blocks, design=types[:, None])
    assert perms.exact and perms.total == len(brute)
    got = [tuple(types[i]) for b in perms.batches(5) for i in b]
    assert len(got) == len(set(got)) == len(brute)          # each one exactly once
    assert set(got) == brute
    assert tuple(types) in set(got)                           # the identity is among them


def test_exact_only_when_few_enough():
    codes = np.repeat([0, 1], 5)                               # 252 relabellings
    assert Permutations(10, 251, 0, design=codes[:, None]).exact is False
    p = Permutations(10, 252, 0, design=codes[:, None])
    assert p.exact and p.total == 252 and "exact" in p.describe()
    assert p.note() is None
    few = Permutations(6, 999, 0, design=np.repeat([0, 1], 3)[:, None])
    assert few.total == 20 and "Only 20 distinct" in few.note()


# ---------------------------------------------------------------------------- blocks
def test_blocks_never_cross():
    blocks = np.array(list("aabbbbcccddddde"))
    perms = Permutations(blocks.size, 500, 7, blocks=blocks, block_name="tank")
    seen_moves = 0
    for idx in perms.batches(64):
        assert (blocks[idx] == blocks[None, :]).all()          # never across blocks
        assert (np.sort(idx, axis=1) == np.arange(blocks.size)).all()   # true permutations
        seen_moves += int((idx != np.arange(blocks.size)).any(axis=1).sum())
    assert seen_moves > 400                                     # and they do move samples
    assert "within blocks of 'tank'" in perms.describe()


def test_blocks_shuffle_uniformly_within_a_block():
    # common practice: each position of a block receives each of its samples equally often
    blocks = np.array([0, 0, 0, 1, 1, 1])
    perms = Permutations(6, 6000, 11, blocks=blocks)
    idx = np.vstack(list(perms.batches(1000)))
    table = np.array([[np.mean(idx[:, pos] == s) for s in range(3)] for pos in range(3)])
    assert np.allclose(table, 1 / 3, atol=0.03)


def test_blocks_that_allow_nothing_raise():
    codes = np.array([0, 0, 1, 1])
    with pytest.raises(DesignError, match="'site'"):
        Permutations(4, 99, 0, blocks=["x", "x", "y", "y"], block_name="site",
                     design=codes[:, None])


# ---------------------------------------------------------------------------- nulls
@pytest.mark.slow
def test_pvalues_uniform_under_the_null():
    # under a true null, permutation p-values are uniform (Kolmogorov-Smirnov, generous alpha)
    rng = np.random.default_rng(2024)
    codes = np.repeat([0, 1, 2], [5, 4, 5])
    X = indicators(codes)
    p = [permutation_f_test(rng.normal(size=(14, 4)), X, n_permutations=199, rng=rng).pvalue
         for _ in range(300)]
    assert stats.kstest(p, "uniform").pvalue > 1e-3


@pytest.mark.slow
def test_pvalues_uniform_for_a_term_after_a_covariate():
    # Freedman & Lane (1983) residual permutation: a null factor tested after a covariate
    # that has a strong effect still gives uniform p-values (KS test, generous alpha)
    rng = np.random.default_rng(99)
    codes = np.repeat([0, 1], 8)
    p = []
    for _ in range(300):
        x = rng.normal(size=16)
        y = np.column_stack([3 * x, -2 * x]) + rng.normal(size=(16, 2))
        Xz = np.column_stack([np.ones(16), x])
        Xf = np.column_stack([Xz, codes])
        p.append(permutation_f_test(y, Xf, Xz, n_permutations=199, rng=rng).pvalue)
    assert stats.kstest(p, "uniform").pvalue > 1e-3


def test_freedman_lane_trace_form_equals_explicit_refits():
    # the trace formula against the procedure written out (Freedman & Lane 1983): permute
    # the reduced model's residuals, add back its fitted values, refit both models by
    # least squares (numpy.linalg.lstsq) and form F from the residual sums of squares
    rng = np.random.default_rng(5)
    n = 12
    x = rng.normal(size=n)
    codes = np.repeat([0, 1, 2], 4)
    later = rng.normal(size=n)
    y = rng.normal(size=(n, 3)) + x[:, None]
    Xz = np.column_stack([np.ones(n), x])
    Xf = np.column_stack([Xz, indicators(codes)[:, 1:]])
    Xa = np.column_stack([Xf, later])
    res = permutation_f_test(y, Xf, Xz, X_later=later, n_permutations=50, rng=8)

    def rss(X, yy):
        beta = np.linalg.lstsq(X, yy, rcond=None)[0]
        return float(((yy - X @ beta) ** 2).sum())

    fitted_z = Xz @ np.linalg.lstsq(Xz, y, rcond=None)[0]
    e = y - fitted_z
    perms = Permutations(n, 50, 8, design=np.hstack([Xz, Xf, Xa[:, -1:]]))
    expected = []
    for idx in np.vstack(list(perms.batches(50))):
        inv = np.argsort(idx)              # design rows idx against fixed residuals ==
        ystar = fitted_z + e[inv]          # residuals permuted by the inverse
        num = (rss(Xz, ystar) - rss(Xf, ystar)) / 2
        den = rss(Xa, ystar) / (n - 5)
        expected.append(num / den)
    assert res.null_distribution == pytest.approx(np.array(expected), rel=1e-9)
    num0 = (rss(Xz, y) - rss(Xf, y)) / 2
    assert res.statistic == pytest.approx(num0 / (rss(Xa, y) / (n - 5)), rel=1e-10)


# ---------------------------------------------------------------------------- streams
def test_same_seed_same_answer_different_seeds_differ():
    rng = np.random.default_rng(0)
    y = rng.normal(size=(30, 3))
    X = indicators(np.repeat([0, 1, 2], 10))
    a = permutation_f_test(y, X, n_permutations=999, rng=42)
    b = permutation_f_test(y, X, n_permutations=999, rng=42)
    c = permutation_f_test(y, X, n_permutations=999, rng=43)
    assert a.pvalue == b.pvalue
    assert np.array_equal(a.null_distribution, b.null_distribution)
    assert not np.array_equal(a.null_distribution, c.null_distribution)
    assert a.pvalue != c.pvalue
    g = np.random.default_rng(5)                 # a Generator is advanced between calls
    assert not np.array_equal(permutation_f_test(y, X, rng=g).null_distribution,
                              permutation_f_test(y, X, rng=g).null_distribution)


@pytest.mark.parametrize("blocks", [None, np.repeat(["a", "b", "c"], 10)])
def test_batch_size_does_not_change_results(blocks):
    rng = np.random.default_rng(1)
    y = rng.normal(size=(30, 2))
    X = indicators(np.tile([0, 1, 2], 10))
    a = permutation_f_test(y, X, n_permutations=300, rng=3, blocks=blocks, batch_size=7)
    b = permutation_f_test(y, X, n_permutations=300, rng=3, blocks=blocks)
    assert a.null_distribution == pytest.approx(b.null_distribution, rel=1e-12)


def test_feature_path_equals_distance_path():
    rng = np.random.default_rng(4)
    f = rng.normal(size=(25, 6))
    x = rng.normal(size=25)
    codes = np.tile([0, 1, 2, 3, 4], 5)
    Xz = np.column_stack([np.ones(25), x])
    Xf = np.column_stack([Xz, indicators(codes)[:, 1:]])
    with_f = Dissimilarity.from_features(f, measure="euclidean")
    plain = Dissimilarity(pdist(f), measure="euclidean")
    a = permutation_f_test(with_f, Xf, Xz, n_permutations=200, rng=9)
    b = permutation_f_test(plain, Xf, Xz, n_permutations=200, rng=9)
    assert a.path == "features" and b.path == "distances"
    assert a.statistic == pytest.approx(b.statistic, rel=1e-10)
    assert a.null_distribution == pytest.approx(b.null_distribution, rel=1e-8)
    assert a.pvalue == b.pvalue


# ---------------------------------------------------------------------------- details
def test_pvalue_conventions():
    null = np.array([1.0, 2.0, 3.0, 5.0 * (1 - 1e-12)])
    # Phipson & Smyth (2010): (1 + #{F* >= F}) / (1 + P); a tie within 1e-9 counts
    assert pvalue_from_null(5.0, null, exact=False) == pytest.approx(2 / 5)
    assert pvalue_from_null(5.0, null, exact=True) == pytest.approx(1 / 4)
    assert pvalue_from_null(9.0, null, exact=False) == pytest.approx(1 / 5)


def test_aliased_columns_add_nothing():
    codes = np.repeat([0, 1, 2], 4)
    X = indicators(codes)
    qz, qt, qw = nested_bases(X, np.column_stack([X, X[:, 1] + 2 * X[:, 2]]))
    assert qz.shape[1] == 2 and qt.shape[1] == 0
    with pytest.raises(DesignError, match="aliased"):
        permutation_f_test(np.arange(12.0), X, X)
    qz, qt, qw = nested_bases(None, X, np.ones(12) * 3.0)       # constants add nothing
    assert (qz.shape[1], qt.shape[1], qw.shape[1]) == (0, 2, 0)
    q = np.hstack([qz, qt, qw])
    assert np.allclose(q.T @ q, np.eye(q.shape[1])) and np.allclose(q.sum(axis=0), 0)


def test_cancel_stops_and_progress_reports():
    y = np.random.default_rng(0).normal(size=(20, 2))
    X = indicators(np.repeat([0, 1], 10))
    seen = []
    permutation_f_test(y, X, n_permutations=100, rng=1, batch_size=16,
                       progress=lambda done, total: seen.append((done, total)))
    assert seen[-1] == (100, 100) and [s[0] for s in seen] == sorted(s[0] for s in seen)
    calls = []

    def cancel():
        calls.append(1)
        return len(calls) > 2

    with pytest.raises(Cancelled, match="no result"):
        permutation_f_test(y, X, n_permutations=100, rng=1, batch_size=16, cancel=cancel)


def test_null_distribution_is_read_only():
    y = np.random.default_rng(0).normal(size=(12, 2))
    res = permutation_f_test(y, indicators(np.repeat([0, 1], 6)), rng=1)
    with pytest.raises(ValueError):
        res.null_distribution[0] = 1.0


def test_gower_matrix_matches_squared_distances():
    # identity used by the engine: tr(G) = sum_{i<j} d_ij^2 / n (Gower 1966)
    rng = np.random.default_rng(2)
    d = Dissimilarity(pdist(rng.random((10, 4)), "braycurtis"), measure="bray_curtis")
    assert np.trace(d.gower()) == pytest.approx((squareform(d.condensed) ** 2).sum() / 20)


def test_perfect_fit_ties_and_rounding_noise():
    # regression (found by the property tests): Hellinger profiles identical within groups,
    # so the residual sum of squares is rounding noise; the observed pseudo-F is +inf, it
    # ties with every permutation that also fits perfectly, and scaling the distances by a
    # constant changes nothing
    import pandas as pd
    import tallyform as tly
    from tallyform.core.dissimilarity import Dissimilarity
    x = np.array([[1.0, 0.0], [8.19544318e-04, 0.0], [0.0, 1e-12],
                  [1.0, 0.0], [1e-12, 0.0], [0.0, 1e-12]])
    labels = [f"s{i}" for i in range(6)]
    d = tly.dissimilarity(x, "hellinger")
    d = Dissimilarity(d.condensed, labels, measure="hellinger")
    info = pd.DataFrame({"g": ["a", "a", "b", "a", "a", "b"]}, index=labels)
    base = tly.permanova(d, info, ["g"], n_permutations=5000, rng=1)
    assert base.exact and np.isinf(base.table.loc["g", "pseudo_f"])
    # exact: the 15 relabellings that keep {s2, s5} together in one group fit perfectly
    assert base.pvalue["g"] == pytest.approx(1 / 15)
    for c in (1e-6, 1e6):
        other = tly.permanova(Dissimilarity(d.condensed * c, labels, measure="hellinger"),
                              info, ["g"], n_permutations=5000, rng=1)
        assert other.pvalue["g"] == base.pvalue["g"]
        np.testing.assert_allclose(other.table["ss"], base.table["ss"] * c * c, rtol=1e-9)
