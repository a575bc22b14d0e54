"""The Gower-centred matrix G = -1/2 C D^2 C (Gower 1966) from the one-pass kernels:
equal to the centring-matrix product written out (mathematical identity), exactly
symmetric, and the same numbers from the numba loops and the numpy fallback. Data are
synthetic."""
from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.distance import pdist, squareform

import tallyform as tly
from tallyform.core import kernels


@pytest.fixture(params=[True, False], ids=["numba", "numpy"])
def path(request):
    kernels.use_numba(request.param)
    yield request.param
    kernels.use_numba(None)


@pytest.mark.parametrize("n", [2, 3, 63, 64, 65, 200])
@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_squared_square_is_scipy_squareform_squared(path, n, dtype):
    rng = np.random.default_rng(n)
    c = pdist(rng.normal(size=(n, 4))).astype(dtype)          # reference: scipy
    got = kernels.squared_square(c, n)
    ref = squareform(c.astype(np.float64)) ** 2
    assert got.dtype == np.float64
    np.testing.assert_array_equal(got, ref)


@pytest.mark.parametrize("n", [3, 65, 300])
def test_gower_is_the_centring_product_and_exactly_symmetric(path, n):
    rng = np.random.default_rng(7)
    x = rng.poisson(3.0, size=(n, 12)) + 1.0
    d = tly.dissimilarity(x, "bray_curtis")
    g = d.gower()
    sq = squareform(pdist(x, "braycurtis")) ** 2                # reference: scipy
    cm = np.eye(n) - np.ones((n, n)) / n                        # identity: -1/2 C D^2 C
    ref = -0.5 * cm @ sq @ cm
    np.testing.assert_allclose(g, ref, rtol=0, atol=1e-13 * np.abs(ref).max())
    assert np.array_equal(g, g.T)                               # to the bit
    np.testing.assert_allclose(g.sum(axis=0), 0.0, atol=1e-12 * n)
    assert np.trace(g) == pytest.approx(d.total_ss(), rel=1e-12)


def test_numba_and_numpy_paths_give_the_same_gower_to_the_bit():
    rng = np.random.default_rng(3)
    x = rng.gamma(1.0, 2.0, size=(150, 20))
    c = pdist(x, "canberra")
    out = {}
    for flag in (True, False):
        kernels.use_numba(flag)
        try:
            out[flag] = kernels.gower_centre(kernels.squared_square(c, 150))
        finally:
            kernels.use_numba(None)
    assert np.array_equal(out[True], out[False])
