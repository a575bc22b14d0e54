"""Property tests (hypothesis) over random synthetic tables: many zeros, tiny and huge values.

* every registered measure after every registered transformation: either a finite,
  non-negative, order-free dissimilarity with a zero diagonal, or an InputError (never
  another exception);
* every transformation: finite, same shape, input untouched, and the size-removing ones
  blind to the scale of a sample;
* PCoA: the eigenvalues add up to trace(G), the total sum of squares (Gower 1966);
* the size and shape partition: the four fractions add up to 1 (Borcard et al. 1992);
* PERMANOVA: sums of squares and pseudo-F do not depend on the order in which samples are
  listed (and neither does the p-value under exact enumeration), and pseudo-F, R^2 and the
  p-value do not change when every dissimilarity is multiplied by the same constant, while
  the sums of squares scale by its square (Anderson 2001).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

import tallyform as tly
from tallyform.core.dissimilarity import Dissimilarity
from tallyform.errors import InputError

MEASURES = list(tly.MEASURES)
TRANSFORMS = list(tly.TRANSFORMS) + ["power(0.3)", "clr(pseudocount=0.5)"]
SETTINGS = dict(deadline=None, suppress_health_check=[HealthCheck.too_slow])

# a cell is 0 half the time; otherwise a tiny amount (biomass in grams), a count, or a huge
# count (reads, individuals of plankton)
_CELL = st.one_of(st.just(0.0), st.just(0.0), st.just(0.0),
                  st.floats(1e-12, 1e-3), st.integers(1, 60).map(float),
                  st.floats(1e6, 1e15))


@st.composite
def tables(draw, min_n=3, max_n=8, max_p=7):
    n = draw(st.integers(min_n, max_n))
    p = draw(st.integers(2, max_p))
    x = draw(arrays(np.float64, (n, p), elements=_CELL))
    # every sample and every taxon holds something (empty ones are a reader's business)
    for i in np.flatnonzero(x.sum(axis=1) == 0):
        x[i, draw(st.integers(0, p - 1))] = draw(st.integers(1, 60).map(float))
    for j in np.flatnonzero(x.sum(axis=0) == 0):
        x[draw(st.integers(0, n - 1)), j] = draw(st.integers(1, 60).map(float))
    return x


def _try(x, m, t):
    """The condensed distances, or None when the combination is refused with InputError."""
    try:
        return tly.dissimilarity(x, m, transform=t).condensed
    except InputError:
        return None


@settings(max_examples=12, **SETTINGS)
@given(tables(), st.randoms(use_true_random=False))
def test_every_measure_after_every_transform(x, rnd):
    n = len(x)
    perm = list(range(n))
    rnd.shuffle(perm)
    twin = np.vstack([x, x[:1]])                       # a copy of sample 0
    k_twin = n - 1                                      # condensed index of pair (0, n)
    for t in TRANSFORMS:
        for m in MEASURES:
            d = _try(x, m, t)
            if d is None:
                continue
            where = f"{m} after {t}"
            assert np.all(np.isfinite(d)) and np.all(d >= 0), where
            scale = max(float(d.max()), 1e-300)
            D = tly.Dissimilarity(d, measure=m).square()
            # order-free (so symmetric in its arguments): relabelling permutes the matrix
            dp = _try(x[perm], m, t)
            assert dp is not None, where
            Dp = tly.Dissimilarity(dp, measure=m).square()
            np.testing.assert_allclose(Dp, D[np.ix_(perm, perm)], rtol=1e-9,
                                       atol=1e-12 * scale, err_msg=where)
            # zero diagonal: a sample is at distance 0 from an exact copy of itself
            dt = _try(twin, m, t)
            if dt is not None:     # (a copy can change column-wise facts, never this pair)
                assert dt[k_twin] <= 1e-12 * max(float(dt.max()), 1e-300), where


@settings(max_examples=25, **SETTINGS)
@given(tables(), st.floats(1e-6, 1e6), st.integers(0, 7))
def test_transforms(x, c, row):
    y = x.copy()
    y[row % len(x)] *= c
    for name in TRANSFORMS:
        tr = tly.get_transform(name)
        before = x.copy()
        try:
            out = tr.apply(x)
        except InputError:
            continue
        assert np.array_equal(x, before), name                  # input untouched
        assert out.shape == x.shape and np.all(np.isfinite(out)), name
        if tr.removes_size and tr.exact:
            # scaling one sample leaves its transformed row unchanged
            np.testing.assert_allclose(tr.apply(y), out, rtol=1e-9, atol=1e-12, err_msg=name)


@settings(max_examples=15, **SETTINGS)
@given(tables(min_n=4, max_n=10))
def test_pcoa_eigenvalues_add_up_to_the_trace(x):
    for m in MEASURES:
        try:
            d = tly.dissimilarity(x, m)
        except InputError:
            continue
        o = tly.pcoa(d)
        total = float(np.trace(d.gower()))
        assert total == pytest.approx(d.total_ss(), rel=1e-9, abs=1e-300)
        ev = o.eigenvalues.to_numpy()
        assert float(ev.sum()) == pytest.approx(total, rel=1e-9,
                                                abs=1e-12 * float(np.abs(ev).sum())), m
        assert o.explained.sum() == pytest.approx(1.0, abs=1e-9) or total == 0, m


@settings(max_examples=10, **SETTINGS)
@given(tables(min_n=7, max_n=12, max_p=6), st.sampled_from(["bray_curtis", "hellinger",
                                                            "euclidean", "jaccard"]),
       st.sampled_from(["chi_square", "hellinger", "aitchison"]))
def test_partition_fractions_add_up_to_one(x, measure, shape):
    try:
        s = tly.size_shape(x, measure, shape=shape)
    except InputError:
        return
    assert np.all(np.isfinite(s.fractions.to_numpy()))
    assert s.fractions.sum() == pytest.approx(1.0, abs=1e-10)
    assert s.fractions_unadjusted.sum() == pytest.approx(1.0, abs=1e-10)
    if tly.MEASURES[measure].euclidean:     # traces of projections of a PSD matrix
        r2 = s.r2["r2"].to_numpy()
        assert np.all(r2 >= -1e-9) and np.all(r2 <= 1 + 1e-9)


def _design(draw, n):
    """A two- or three-level factor with at least 2 samples per level, in random order."""
    k = draw(st.integers(2, 3))
    base = [i % k for i in range(n)]
    order = draw(st.permutations(range(n)))
    return np.array([f"g{base[i]}" for i in order])


@settings(max_examples=15, **SETTINGS)
@given(st.data())
def test_permanova_relabelling_and_scale(data):
    x = data.draw(tables(min_n=6, max_n=9, max_p=5))
    n = len(x)
    m = data.draw(st.sampled_from(["bray_curtis", "hellinger", "canberra", "chi_square"]))
    try:
        d = tly.dissimilarity(x, m)
    except InputError:
        return
    labels = [f"s{i}" for i in range(n)]
    d = Dissimilarity(d.condensed, labels, measure=m)
    info = pd.DataFrame({"g": _design(data.draw, n)}, index=labels)
    c = data.draw(st.sampled_from([1e-6, 0.5, 3.0, 1e6]))
    order = np.array(data.draw(st.permutations(range(n))))
    # exact enumeration (n <= 9 with 2-3 levels: at most 1680 distinct relabellings)
    base = tly.permanova(d, info, ["g"], n_permutations=5000, rng=1)
    assert base.exact
    # the same samples listed in another order, in the distances and the sample table
    D = d.square()
    moved = Dissimilarity.from_square(D[np.ix_(order, order)], [labels[i] for i in order],
                                      measure=m)
    relab = tly.permanova(moved, info.iloc[order], ["g"], n_permutations=5000, rng=1)
    # sums of squares are differences of sums over pairs, so their rounding error is
    # relative to the total sum of squares; when the term's own SS is within ~1e-6 of the
    # total's rounding, the order of the relabellings' statistics is decided by rounding and
    # p-values are not comparable (numerically degenerate draws)
    total = float(base.table.loc["Total", "ss"])
    resolvable = float(base.table.loc["g", "ss"]) > 1e-6 * total
    cols = ["df", "ss", "r2"]
    pd.testing.assert_frame_equal(relab.table[cols], base.table[cols], rtol=1e-9,
                                  atol=1e-9 * total)
    if resolvable:
        np.testing.assert_allclose(relab.table["pseudo_f"], base.table["pseudo_f"],
                                   rtol=1e-9, equal_nan=True)
        assert relab.pvalue["g"] == pytest.approx(base.pvalue["g"], abs=1e-12)
    # every dissimilarity times c: SS times c^2, pseudo-F, R^2 and p unchanged; with random
    # permutations too, since the same seed draws the same relabellings
    for n_perm in (5000, 199):
        a = tly.permanova(d, info, ["g"], n_permutations=n_perm, rng=7)
        b = tly.permanova(Dissimilarity(d.condensed * c, labels, measure=m), info, ["g"],
                          n_permutations=n_perm, rng=7)
        np.testing.assert_allclose(b.table["ss"], a.table["ss"] * c * c, rtol=1e-9,
                                   atol=1e-9 * total * c * c)
        if resolvable:
            np.testing.assert_allclose(b.table[["pseudo_f", "r2"]].to_numpy(dtype=float),
                                       a.table[["pseudo_f", "r2"]].to_numpy(dtype=float),
                                       rtol=1e-9, equal_nan=True)
            assert b.pvalue["g"] == a.pvalue["g"]
