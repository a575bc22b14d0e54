"""The sparse kernels (work proportional to the taxa two samples share) give the numbers of
scipy.spatial.distance.pdist and of the dense kernels, on numpy and scipy.sparse input."""
from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from scipy.spatial.distance import pdist

import tallyform as tly
from tallyform.core import kernels

pytest.importorskip("numba")


@pytest.fixture
def forced(monkeypatch):
    """numba on for every size; the sparse path for any density (or none with 0)."""
    kernels.use_numba(True)
    yield lambda density: monkeypatch.setattr(kernels, "SPARSE_DENSITY", density)
    kernels.use_numba(None)


def _sparse_counts(rng, n=120, p=60, density=0.08):
    x = rng.poisson(rng.gamma(0.7, 6.0, (n, p))).astype(float) * (rng.random((n, p)) < density)
    x[x.sum(axis=1) == 0, 0] = 3.0
    x[7] = x[6]                                  # identical samples
    x[9] = x[8]
    k = np.flatnonzero(x[9])[0]
    x[9, k] *= 1 + 1e-9                          # near-identical: cancellation is tested
    x[11] = 0.0
    x[11, -1] = 5.0                              # shares nothing with most samples
    return x


@pytest.mark.parametrize("ours, theirs", [("bray_curtis", "braycurtis"),
                                          ("manhattan", "cityblock"),
                                          ("canberra", "canberra")])
def test_sparse_path_agrees_with_scipy(forced, rng, ours, theirs):
    # reference: scipy.spatial.distance.pdist with the same metric
    forced(0.2)
    x = _sparse_counts(rng)
    assert kernels._sparse_parts(x) is not None
    got = np.asarray(tly.dissimilarity(x, ours).condensed)
    np.testing.assert_allclose(got, pdist(x, theirs), rtol=1e-12, atol=0)


@pytest.mark.parametrize("measure", ["quantitative_jaccard", "kulczynski", "jaccard",
                                     "sorensen", "gower"])
def test_sparse_path_agrees_with_dense_path(forced, rng, measure):
    x = _sparse_counts(rng)
    forced(0.0)
    dense = np.asarray(tly.dissimilarity(x, measure).condensed)
    tly.core.cache.clear_cache()
    forced(1.0)
    sparse = np.asarray(tly.dissimilarity(x, measure).condensed)
    np.testing.assert_allclose(sparse, dense, rtol=1e-12, atol=1e-15)


def test_scipy_sparse_input_and_float32(forced, rng):
    forced(0.2)
    x = _sparse_counts(rng)
    t = x.sum(axis=1)
    for m in (sp.csr_matrix(x), sp.csc_matrix(x), sp.coo_matrix(x)):
        got = kernels.abs_condensed(m, mode=kernels.RATIO, t=t)
        np.testing.assert_allclose(got, pdist(x, "braycurtis"), rtol=1e-12, atol=0)
    f32 = kernels.abs_condensed(x, mode=kernels.RATIO, t=t, dtype=np.float32)
    assert f32.dtype == np.float32
    np.testing.assert_allclose(f32, pdist(x, "braycurtis"), rtol=1e-6)


def test_dense_or_negative_tables_keep_the_dense_path(forced, rng):
    forced(0.2)
    x = _sparse_counts(rng)
    assert kernels._sparse_parts(np.abs(rng.standard_normal((50, 20))) + 1) is None  # dense
    neg = x.copy()
    neg[0, 0] = -1.0
    assert kernels._sparse_parts(neg) is None                # the min identity needs x >= 0
    np.testing.assert_allclose(kernels.abs_condensed(neg), pdist(neg, "cityblock"),
                               rtol=1e-12)


def test_precision_on_near_identical_samples(forced):
    # a pair that differs in one taxon by 1 part in 10^12 of totals of 10^6: the identity
    # t_i + t_j - 2 sum(min) would lose every digit; the direct recomputation keeps them
    forced(1.0)
    x = np.zeros((5, 40))
    x[:, :4] = [[1e6, 2.0, 0.0, 3.0]] * 5
    x[1, 0] += 1e-6
    x[2:, 10:14] = np.arange(1, 13).reshape(3, 4)
    got = kernels.abs_condensed(x, mode=kernels.RATIO, t=x.sum(axis=1))
    np.testing.assert_allclose(got, pdist(x, "braycurtis"), rtol=1e-12, atol=0)
