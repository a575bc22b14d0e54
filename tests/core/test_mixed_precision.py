"""Single-precision permutations with a float64 re-check: the p-values are the float64
engine's, and the error bound of the forms holds. All data are synthetic."""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy.spatial.distance import pdist, squareform

import tallyform.core.single_precision as sp
from tallyform.core.dissimilarity import Dissimilarity
from tallyform.core.inference import permanova
from tallyform.core.permutation import (Permutations, nested_bases, permuted_f,
                                        prepare_response, pvalue_from_null, tie_threshold)
from tallyform.core.single_precision import (SinglePass, form_error_constant,
                                             precision_tally)


def counts(n, p, groups, effect, rng, *, model="lognormal"):
    """Synthetic counts, groups shifting the mean profile by ``effect`` (0: null true), with
    two models of between-sample variation (log-normal, gamma-Poisson)."""
    base = rng.gamma(0.6, 1.0, size=p)
    shift = np.exp(effect * rng.standard_normal((groups.max() + 1, p)))
    mu = base * shift[groups] * 20
    if model == "lognormal":
        mu = mu * rng.lognormal(0.0, 0.5, size=(groups.size, p))
    else:
        mu = rng.gamma(2.0, mu / 2.0)
    x = rng.poisson(mu).astype(float)
    x[:, 0] += 1                                                 # no empty sample
    return x


def dummies(codes):
    codes = np.asarray(codes)
    return np.column_stack([(codes == k).astype(float) for k in np.unique(codes)[1:]])


def both_ways(d, X_full, X_reduced=None, X_later=None, *, n_perm=199, seed=0, blocks=None,
              exact="auto", residuals="reduced", permuted_model=None):
    """(p single, p float64, null single, null float64, tally, observed) of one term, the
    two runs on the same permutations. ``permuted_model``: columns of the reduced model
    whose residuals are permuted, when not ``X_reduced`` (a sequential table: the later
    terms too, so the tested term meets that model's fitted part)."""
    resp = prepare_response(d, path="distances")
    n = resp.n
    qb, qt, qw = nested_bases(X_reduced, X_full, X_later)
    qa = np.hstack([qb, qt, qw])
    qz = qb if permuted_model is None else nested_bases(None, permuted_model)[1]
    df_res = n - 1 - qa.shape[1]
    parts = [np.asarray(X).reshape(n, -1) for X in (X_reduced, X_full, X_later)
             if X is not None]
    perms = Permutations(n, n_perm, np.random.default_rng(seed), blocks=blocks,
                         design=np.hstack(parts), exact=exact)
    qr_ = qz if residuals == "reduced" else qa
    out = []
    with precision_tally() as tally:
        for single in (True, False):
            obs, null, _, _ = permuted_f(resp, qa, qb.shape[1], qt.shape[1], qr_, perms,
                                         df_res=df_res, add_fitted=residuals == "reduced",
                                         single_precision=single)
            out.append((pvalue_from_null(obs, null, exact=perms.exact), null))
    return out[0][0], out[1][0], out[0][1], out[1][1], tally, obs


def bray(x):
    return Dissimilarity(pdist(x, "braycurtis"), [f"s{i}" for i in range(len(x))],
                         measure="bray_curtis")


# ---------------------------------------------------------------------------- p-values
@pytest.mark.parametrize("sizes,effect,model", [
    ((80, 80, 80), 0.0, "lognormal"),            # balanced, null true
    ((80, 80, 80), 0.15, "gamma"),               # balanced, null false
    ((30, 90, 140), 0.0, "gamma"),               # unbalanced, null true
    ((30, 90, 140), 0.1, "lognormal"),           # unbalanced, null false
    ((20, 25), 0.0, "lognormal"),                # below the threshold: float64 both ways
])
@pytest.mark.parametrize("seed", [0, 1])
def test_one_factor_pvalue_is_the_float64_one(sizes, effect, model, seed):
    # reference: the float64 engine on the same permutations (single_precision=False)
    rng = np.random.default_rng(100 + seed)
    codes = np.repeat(np.arange(len(sizes)), sizes)
    d = bray(counts(codes.size, 30, codes, effect, rng, model=model))
    p1, p2, null1, null2, tally, _ = both_ways(d, dummies(codes), n_perm=299, seed=seed)
    assert p1 == p2
    assert tally.single == (299 if codes.size >= sp.MIN_SAMPLES else 0)
    # the values differ by at most the bound on each sum (loosely: 1e-2 relative here)
    assert null1 == pytest.approx(null2, rel=1e-2)


@pytest.mark.parametrize("balanced", [True, False])
def test_two_factors_and_blocks_pvalues_are_the_float64_ones(balanced):
    # reference: the float64 engine; balanced factors are orthogonal, unbalanced ones are
    # not: the first term of a sequential table then meets the fitted part of the second
    # (cross terms); blocks restrict the permutations
    rng = np.random.default_rng(7)
    n = 240
    a = np.repeat(np.arange(2), n // 2)
    b = np.tile(np.repeat(np.arange(3), 40), 2) if balanced else rng.integers(0, 3, n)
    x = counts(n, 25, a * 3 + b, 0.08, rng, model="gamma")
    d = bray(x)
    blocks = np.tile(np.arange(4), n // 4)
    A, B = dummies(a), dummies(b)
    for X_red, X_full, X_later, z in [(None, A, B, B), (None, A, B, None),
                                      (A, np.hstack([A, B]), None, None)]:
        for bl in (None, blocks):
            p1, p2, _, _, tally, _ = both_ways(d, X_full, X_red, X_later, n_perm=199,
                                               blocks=bl, seed=3, permuted_model=z)
            assert p1 == p2
            assert tally.single == 199          # cross terms (unbalanced) included
    p1, p2, _, _, tally, _ = both_ways(d, B, A, residuals="full")
    assert p1 == p2 and tally.single == 199          # full-model residuals: no cross terms


def test_non_euclidean_measure_pvalue():
    # a dissimilarity with large negative eigenvalues (a random symmetric matrix of
    # positive entries, not a distance of points): the bound does not need G >= 0
    rng = np.random.default_rng(11)
    n = 260
    m = rng.random((n, n)) ** 3
    m = (m + m.T) / 2
    np.fill_diagonal(m, 0)
    d = Dissimilarity(squareform(m, checks=False), [f"s{i}" for i in range(n)],
                      measure="kulczynski")
    g = prepare_response(d, path="distances").gower
    assert np.linalg.eigvalsh(g).min() < -0.1 * np.linalg.eigvalsh(g).max()
    codes = rng.integers(0, 4, n)
    for effect in (0.0, 0.05):
        if effect:
            m2 = m + effect * (codes[:, None] != codes[None, :])
            np.fill_diagonal(m2, 0)
            d = Dissimilarity(squareform(m2, checks=False), d.labels, measure="kulczynski")
        p1, p2, _, _, tally, _ = both_ways(d, dummies(codes), n_perm=499, seed=5)
        assert p1 == p2 and tally.single == 499


@pytest.mark.parametrize("force", [False, True])
def test_exact_enumeration_with_ties(monkeypatch, force):
    # exact enumeration where permuted statistics equal the observed one: identical samples
    # make different relabellings give the same pseudo-F (in the mathematics; in floating
    # point up to the last digits), and the identity is among the relabellings
    rng = np.random.default_rng(4)
    if force:                                        # small n, the single pass forced on
        monkeypatch.setattr(sp, "MIN_SAMPLES", 2)
    n = 9 if force else 210
    x = counts(n, 12, np.zeros(n, dtype=int), 0.0, rng)
    x[1] = x[0]
    x[2] = x[0]                                      # three identical samples
    codes = np.zeros(n, dtype=int)
    codes[0] = 1                                     # one of them alone in its group
    if force:
        codes[3:5] = 2
    p1, p2, null1, null2, tally, obs = both_ways(bray(x), dummies(codes), n_perm=999)
    assert tally.single > 0
    assert p1 == p2
    # exact: every distinct relabelling (multinomial count, common practice)
    n_rel = n if not force else math.factorial(9) // (math.factorial(6) * 2)
    assert null1.size == n_rel
    # the identity and the two swaps among identical samples equal the observed statistic
    # (up to the last digits): they straddle the tie threshold and are re-checked
    ties = np.isclose(null2, obs, rtol=1e-9)
    assert ties.sum() >= 3
    assert null1[ties] == pytest.approx(null2[ties], rel=1e-13, abs=0)
    assert p1 == np.count_nonzero(null2 >= tie_threshold(obs)) / n_rel


# ---------------------------------------------------------------------------- the bound
@pytest.mark.parametrize("block", [256, 97])
def test_bound_holds_on_adversarial_inputs(monkeypatch, block):
    # identity: |t32 - t64| <= delta (Higham 2002, ch. 3) for every permuted form, with a
    # large dynamic range in G (points on scales from 1e-4 to 1e4) and rows of one sign
    # (no cancellation, so rounding errors pile up), n = 2000; blocks of the default size
    # and of a size that leaves a partial last block
    monkeypatch.setattr(sp, "BLOCK", block)
    rng = np.random.default_rng(2)
    n = 2000
    pts = rng.standard_normal((n, 3)) * np.logspace(-4, 4, n)[:, None]
    g = -0.5 * squareform(pdist(pts, "sqeuclidean"))
    c = np.eye(n) - 1.0 / n
    g = c @ g @ c
    q = np.vstack([np.full(n, 1 / math.sqrt(n)) * (1 + 1e-3 * rng.random(n)),
                   nested_bases(None, rng.random((n, 2)))[1].T])
    q /= np.linalg.norm(q, axis=1, keepdims=True)
    # a second matrix: positive entries of one size plus tiny ones (no cancellation)
    g2 = 1.0 / 3.0 + 1e-9 * rng.random((n, n))
    g2 = (g2 + g2.T) / 2
    for gm in (g, g2):
        one = SinglePass(gm, q)
        idx = np.vstack([np.arange(n), [rng.permutation(n) for _ in range(60)]])
        t32 = one.forms(idx)
        u = np.take(q, idx, axis=1).reshape(-1, n)
        t64 = np.einsum("ij,ij->i", u, u @ gm).reshape(t32.shape)
        err = np.abs(t32 - t64)
        assert err.max() > 0                         # the single pass is not float64
        assert err.max() <= one.delta
    # the constant is about (m + 4) eps (the leading terms of the derivation)
    m = block
    c_n = form_error_constant(5000, m) / 1.01
    assert (m + 4) * 2.0 ** -24 <= c_n <= (m + 6) * 2.0 ** -24


def test_rechecked_permutations_equal_float64(monkeypatch):
    # a null-true data set: the observed pseudo-F sits in the middle of the null, so some
    # permutations fall within the uncertain band and are recomputed in float64
    rng = np.random.default_rng(9)
    n = 300
    codes = np.repeat(np.arange(3), 100)
    d = bray(counts(n, 30, codes, 0.0, rng))
    masks = []
    settle = SinglePass.settle

    def spy(self, *args, **kwargs):
        f, todo = settle(self, *args, **kwargs)
        masks.append(todo.copy())
        return f, todo
    monkeypatch.setattr(SinglePass, "settle", spy)
    p1, p2, null1, null2, tally, _ = both_ways(d, dummies(codes), n_perm=999, seed=1)
    todo = np.concatenate(masks)
    assert p1 == p2
    assert todo.sum() == tally.rechecked > 0
    # float64 values (a product of fewer rows may round its last digits differently, as
    # does any change of batch size of the float64 engine)
    assert null1[todo] == pytest.approx(null2[todo], rel=1e-13, abs=0)
    assert not np.array_equal(null1[~todo], null2[~todo])     # the others: single precision
    assert 0 < tally.rechecked / tally.single < 0.2


# ---------------------------------------------------------------------------- who uses it
def test_permanova_uses_it_and_choice_tests_do_not():
    rng = np.random.default_rng(5)
    n = 240
    codes = np.repeat(np.arange(3), 80)
    x = counts(n, 20, codes, 0.05, rng)
    d = bray(x)
    info = pd.DataFrame({"g": np.array(["a", "b", "c"])[codes]}, index=d.labels)
    with precision_tally() as tally:
        res = permanova(d, info, "g", n_permutations=199, rng=2)
    assert tally.single == 199
    # the default of the engine is float64 (the min-P tests rank null values)
    resp = prepare_response(d, path="distances")
    qt = nested_bases(None, dummies(codes))[1]
    perms = Permutations(n, 199, np.random.default_rng(0))
    with precision_tally() as tally:
        permuted_f(resp, qt, 0, 2, np.empty((n, 0)), perms, df_res=n - 3)
    assert tally.permutations == 199 and tally.single == 0
    assert 0 < res.pvalue["g"] <= 1


def test_cross_term_sums_within_their_bounds():
    # identity: with the reduced model's fitted part added back (Freedman & Lane 1983; a
    # tested factor strongly confounded with the reduced one), the single-precision
    # numerator and denominator lie within sum_bounds of the same sums in float64
    from tallyform.core.permutation import _cross_sums, _fitted_part, _sums
    rng = np.random.default_rng(12)
    n = 400
    a = rng.integers(0, 3, n)
    b = np.where(rng.random(n) < 0.7, a, rng.integers(0, 3, n))     # confounded with a
    x = counts(n, 30, a * 3 + b, 0.2, rng, model="gamma")
    resp = prepare_response(bray(x), path="distances")
    # the first term of a sequential table: numerator on a alone, residuals of b permuted
    qb, qt, qw = nested_bases(None, dummies(a), dummies(b))
    qz = nested_bases(None, dummies(b))[1]
    qa = np.hstack([qb, qt, qw])
    k, nb, nt = qa.shape[1], qb.shape[1], qt.shape[1]
    r = resp.residual(qz)
    fit = _fitted_part(resp, r, qa, nb, nt, qz, df_res=n - 1 - k, add_fitted=True)
    assert fit.cross and np.abs(fit.c).max() > 0
    fast = SinglePass(r.gower, np.vstack([qa.T, fit.qt_res]))
    trace_r = r.total()
    d_num, d_den = fast.sum_bounds(k=k, nt=nt, trace_r=trace_r, fit=fit)
    idx = np.vstack([np.arange(n), [rng.permutation(n) for _ in range(200)]])
    tr = fast.forms(idx)
    ut = np.take(fit.qt_res, idx, axis=1)
    xc = np.einsum("jbn,nj->b", ut, fit.c)
    num, den = _cross_sums(tr[k:], xc, _sums(tr[:k], nb, nt, trace_r)[1], fit)
    rows = np.vstack([qa.T, fit.qt_res])
    u = np.take(rows, idx, axis=1)                                  # (k + nt, B, n)
    t64 = np.einsum("jbn,jbn->jb", u, u @ r.gower)
    num64, den64 = _cross_sums(t64[k:], xc, _sums(t64[:k], nb, nt, trace_r)[1], fit)
    assert 0 < np.abs(num - num64).max() <= d_num
    assert 0 < np.abs(den - den64).max() <= d_den
    # and the p-value of this design is the float64 one
    p1, p2, _, _, tally, _ = both_ways(bray(x), dummies(a), None, dummies(b), n_perm=499,
                                       seed=8, permuted_model=dummies(b))
    assert p1 == p2 and tally.single == 499


def test_few_permutations_stay_float64():
    # below MIN_PERMUTATIONS the setup would cost more than it saves: float64 values
    rng = np.random.default_rng(6)
    codes = np.repeat(np.arange(2), 120)
    d = bray(counts(240, 20, codes, 0.0, rng))
    p1, p2, null1, null2, tally, _ = both_ways(d, dummies(codes), n_perm=19)
    assert tally.single == 0 and p1 == p2
    assert null1 == pytest.approx(null2, rel=1e-12)


def test_batches_split_over_threads_give_the_same_forms():
    # identity: each row's arithmetic does not depend on the other rows, so splitting a
    # batch over Python threads changes no value
    from concurrent.futures import ThreadPoolExecutor
    rng = np.random.default_rng(13)
    n = 300
    g = -0.5 * squareform(pdist(rng.random((n, 4)), "sqeuclidean"))
    q = nested_bases(None, rng.random((n, 2)))[1].T
    one = SinglePass(g, q)
    idx = np.array([rng.permutation(n) for _ in range(500)])
    serial = one.forms(idx)
    with ThreadPoolExecutor(3) as pool:
        one._pool, one._workers = pool, 3
        split = one.forms(idx)
    one._pool = None
    assert np.array_equal(serial, split)
    with one.threads():                              # however many threads BLAS has here
        assert np.array_equal(one.forms(idx), serial)
