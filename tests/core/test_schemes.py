"""Permutation schemes: whole units, within units, cyclic shifts, label symmetries."""
from __future__ import annotations

import math

import numpy as np
import pytest

from tallyform.core.errors import DesignError
from tallyform.core.permutation import Response, nested_bases, permuted_f
from tallyform.core.schemes import (CyclicShifts, Permutations, UnitPermutations,
                                    label_symmetries, span_symmetries, within_units)
from tallyform.core.unit_engine import unit_f


def indicators(codes):
    codes = np.asarray(codes)
    return np.column_stack([(codes == k).astype(float) for k in np.unique(codes)[1:]])


# ---------------------------------------------------------------------------- units
def test_whole_units_keep_their_samples_together_and_stay_in_blocks():
    codes = np.repeat(np.arange(8), 3)                         # 8 units of 3 samples
    unit_block = np.repeat([0, 1], 4)
    perms = UnitPermutations(codes, 300, 4, unit_name="tank", blocks=unit_block,
                             block_name="bench", design=np.tile([0, 1], 4)[:, None])
    assert perms.balanced and perms.m == 8
    for idx in perms.batches(64):
        assert (unit_block[idx] == unit_block[None, :]).all()   # never across blocks
    for idx in perms.sample_batches(64):
        # every unit's positions receive the samples of one unit, in their order
        moved = codes[idx].reshape(idx.shape[0], 8, 3)
        assert (moved == moved[:, :, :1]).all()
        assert (np.sort(idx, axis=1) == np.arange(24)).all()
    assert "whole units of 'tank' within blocks of 'bench'" in perms.describe()


def test_unit_relabellings_enumerated_with_label_symmetry():
    # 6 units in two groups of 3: C(6, 3) = 20 relabellings, 10 distinct values of a
    # statistic that does not care which group is called which (docs/methods.md, section 12), so p >= 0.1
    codes = np.repeat(np.arange(6), 4)
    groups = np.repeat(["a", "b"], 3)
    sym = label_symmetries([("factor", groups)])
    perms = UnitPermutations(codes, 999, 1, unit_name="tank",
                             design=indicators(groups), symmetries=sym)
    assert perms.exact and perms.total == 20 and sym == 2
    assert perms.min_pvalue == pytest.approx(0.1)
    note = perms.note(term="treatment", replication="3 units of 'tank' per level")
    assert "smallest possible p-value for 'treatment' is 0.1" in note
    assert "cannot reach p <= 0.05" in note and "3 units of 'tank' per level" in note
    seen = {tuple(groups[i]) for b in perms.batches(7) for i in b}
    assert len(seen) == 20


def test_unbalanced_units_refuse_sample_index_arrays():
    perms = UnitPermutations(np.array([0, 0, 1, 1, 1, 2, 3, 3]), 10, 0, unit_name="site",
                             design=np.array([[0], [0], [1], [1]]))
    with pytest.raises(DesignError, match="different numbers of samples"):
        next(perms.sample_batches(4))


def test_within_units_never_cross_units():
    codes = np.repeat(np.arange(5), [3, 4, 2, 4, 3])
    perms = within_units(codes, 200, 3, unit_name="tank",
                         design=np.arange(codes.size)[:, None] % 4)
    for idx in perms.batches(50):
        assert (codes[idx] == codes[None, :]).all()
    assert "within units of 'tank'" in perms.describe()


def test_cyclic_shifts_rotate_each_unit_in_visit_order():
    codes = np.repeat([0, 1, 2], [4, 3, 4])
    order = np.array([3, 1, 2, 4, 2, 3, 1, 10, 20, 30, 40])  # visit order within each unit
    perms = CyclicShifts(codes, order, 1000, 2, unit_name="tank", order_name="day")
    assert perms.exact and perms.total == 4 * 3 * 4
    rows = np.vstack(list(perms.batches(10)))
    assert len({tuple(r) for r in rows}) == 48
    for idx in rows:
        for u in range(3):
            pos = np.flatnonzero(codes == u)
            pos = pos[np.argsort(order[pos])]
            k = (np.flatnonzero(pos == idx[pos[0]])[0])        # the shift of this unit
            assert (idx[pos] == np.roll(pos, -k)).all()         # a rotation, order kept
    assert "cyclic shifts of the visits (in 'day' order)" in perms.describe()


# ---------------------------------------------------------------------------- symmetries
@pytest.mark.parametrize("levels,blocks", [
    (list("aaaabbbb"), None),
    (list("aabbcc"), None),
    (list("aabbbb"), None),
    (list("abab") + list("abab"), [0] * 4 + [1] * 4),
    (list("aabb") + list("aaab"), [0] * 4 + [1] * 4),
])
def test_label_symmetries_count_coinciding_statistics(levels, blocks):
    # identity: the number of distinct pseudo-F values over all relabellings (generic data,
    # found by enumerating them) times the symmetries equals the number of relabellings
    rng = np.random.default_rng(3)
    y = rng.normal(size=(len(levels), 3))
    X = np.column_stack([np.ones(len(levels)), indicators(levels)])
    sym = label_symmetries([("factor", levels)], blocks)
    perms = Permutations(len(levels), 10_000, 0, blocks=blocks, design=X, symmetries=sym)
    assert perms.exact
    qz = np.empty((len(levels), 0))
    qa = nested_bases(None, X)[1]
    _, null, *_ = permuted_f(Response(len(levels), features=y - y.mean(0)), qa, 0,
                             qa.shape[1], qz, perms, df_res=len(levels) - 1 - qa.shape[1])
    distinct = np.unique(np.round(null, 9)).size
    assert distinct * sym == perms.n_distinct
    assert span_symmetries([X], blocks) == sym                 # the brute-force form agrees


def test_label_symmetries_of_crossed_factors_and_covariates():
    a = np.repeat(["x", "y", "z"], 4)
    b = np.tile(["p", "q"], 6)
    assert label_symmetries([("factor", a), ("factor", b)]) == 6 * 2
    # a covariate mirrors onto itself only when its values are symmetric
    assert label_symmetries([("numeric", [1, 2, 3, 1, 2, 3])]) == 2
    assert label_symmetries([("numeric", [1, 2, 4, 1, 2, 4])]) == 1
    # a 'diagonal' design needs both factors relabelled together
    assert label_symmetries([("factor", list("abcabc")), ("factor", list("xyzxyz"))]) == 6


# ---------------------------------------------------------------------------- unit engine
def _unit_data(rng, sizes, q=3):
    codes = np.repeat(np.arange(len(sizes)), sizes)
    f = rng.normal(size=(codes.size, q)) + np.repeat(rng.normal(size=(len(sizes), q)),
                                                      sizes, axis=0)
    resp = Response(codes.size, features=f - f.mean(axis=0))
    y, signs = resp.unit_means(codes)
    return codes, resp, y, signs


def test_balanced_unit_engine_equals_sample_engine_on_mapped_permutations():
    # identity: with equal unit sizes a whole-unit relabelling is a permutation of samples
    # (matched by position in the unit), so the unit-level engine must reproduce the
    # sample-level engine run on the between-unit part of the data, term order and
    # Freedman & Lane cross terms included
    rng = np.random.default_rng(3)
    m, s = 12, 3
    codes, resp, y, signs = _unit_data(rng, [s] * m)
    a, b = indicators(np.repeat(["p", "q", "r"], 4)), indicators(np.tile(["x", "y"], 6))
    one, none = np.ones((m, 1)), np.empty((m, 0))
    perms = UnitPermutations(codes, 200, 5, unit_name="u", design=np.hstack([a, b]))
    obs, null, *_ = unit_f(y, signs, np.full(m, float(s)), one, none, b, a,
                           np.hstack([one, a]), perms)
    between = np.repeat(y, s, axis=0)
    rs = Response(m * s, features=between - between.mean(axis=0))
    a_s, b_s = np.repeat(a, s, axis=0), np.repeat(b, s, axis=0)
    qb, qt, qw = nested_bases(None, b_s, a_s)
    qz = nested_bases(None, a_s)[1]

    class Mapped:
        total, exact = perms.total, False

        def batches(self, size):
            return perms.sample_batches(size)

    obs2, null2, *_ = permuted_f(rs, np.hstack([qb, qt, qw]), 0, qt.shape[1], qz, Mapped(),
                                 df_res=m - 1 - qt.shape[1] - qw.shape[1])
    assert obs == pytest.approx(obs2, rel=1e-12)
    assert null == pytest.approx(null2, rel=1e-9)


def test_unbalanced_unit_engine_equals_weighted_refits():
    # the procedure written out with statsmodels WLS (weights = samples per unit): without
    # other terms, each relabelling gives unit u the design row of unit idx[u]; with a
    # reduced model Z, the permuted data are Yhat_Z + e_Z[idx^-1] carrying the weights of
    # their units (Freedman & Lane 1983), projected back onto Z's residual space under
    # those weights and rescaled by sqrt((m - 1) / (m - rank Z))
    import statsmodels.api as sm
    rng = np.random.default_rng(4)
    sizes = np.array([2, 3, 4, 1, 2, 3, 4, 2, 3, 2, 4, 3])
    m = sizes.size
    codes, resp, y, signs = _unit_data(rng, sizes)
    a, x = indicators(np.repeat(["p", "q", "r"], 4)), rng.normal(size=(m, 1))
    one, none, w = np.ones((m, 1)), np.empty((m, 0)), sizes.astype(float)

    def f_stat(yy, ww, X0, X1, df_res):
        rss = [sum(sm.WLS(yy[:, j], X, weights=ww).fit().ssr for j in range(yy.shape[1]))
               for X in (X0, X1)]
        return ((rss[0] - rss[1]) / (X1.shape[1] - X0.shape[1])) / (rss[1] / df_res)

    perms = UnitPermutations(codes, 60, 7, unit_name="u", design=a)
    obs, null, *_ = unit_f(y, signs, w, one, none, a, none, one, perms)
    expected = [f_stat(y, w, one, np.hstack([one, a[idx]]), m - 3)
                for idx in np.vstack(list(perms.batches(60)))]
    assert obs == pytest.approx(f_stat(y, w, one, np.hstack([one, a]), m - 3), rel=1e-10)
    assert null == pytest.approx(np.array(expected), rel=1e-9)
    # with a covariate in the reduced model
    perms = UnitPermutations(codes, 60, 8, unit_name="u", design=np.hstack([a, x]))
    obs, null, *_ = unit_f(y, signs, w, one, x, a, none, np.hstack([one, x]), perms)
    Z = np.hstack([one, x])
    fit = sm.WLS(y, Z, weights=w).fit()
    fitted, e = Z @ fit.params, y - Z @ fit.params
    expected = []
    c = np.sqrt((m - 1) / (m - 2))       # residuals rescaled: d = m - 1, one column in Z
    for idx in np.vstack(list(perms.batches(60))):
        inv = np.argsort(idx)
        pe = e[inv]
        pe = pe - Z @ sm.WLS(pe, Z, weights=w[inv]).fit().params
        expected.append(f_stat(fitted + c * pe, w[inv], Z, np.hstack([Z, a]), m - 4))
    assert null == pytest.approx(np.array(expected), rel=1e-8)


def test_unit_relabelling_is_the_exact_randomisation_test():
    # reference: scipy.stats.permutation_test over every split of the 6 unit means into
    # two groups of 3 (balanced units: the weighted F is the one-way F of the unit means)
    from scipy import stats
    rng = np.random.default_rng(5)
    codes, resp, y, signs = _unit_data(rng, [4] * 6, q=1)
    g = np.repeat([0, 1], 3)
    perms = UnitPermutations(codes, 999, 1, unit_name="u", design=g[:, None],
                             symmetries=2)
    obs, null, *_ = unit_f(y, signs, np.full(6, 4.0), np.ones((6, 1)), np.empty((6, 0)),
                           g[:, None].astype(float), np.empty((6, 0)), np.ones((6, 1)), perms)
    from tallyform.core.permutation import pvalue_from_null
    ref = stats.permutation_test((y[g == 0, 0], y[g == 1, 0]),
                                 lambda a, b: stats.f_oneway(a, b).statistic,
                                 permutation_type="independent", n_resamples=np.inf,
                                 alternative="greater")
    assert obs == pytest.approx(ref.statistic, rel=1e-10)
    assert pvalue_from_null(obs, null, exact=True) == pytest.approx(ref.pvalue, rel=1e-12)
    assert math.comb(6, 3) == perms.total
