"""The Dissimilarity container: order, Gower centring, memory guard."""
from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.distance import pdist, squareform

from tallyform.core.dissimilarity import Dissimilarity, _pair_of, condensed_index
from tallyform.core.memory import set_memory_limit
from tallyform.errors import InputError, TooLargeError


def test_square_matches_scipy_squareform(rng):
    x = rng.random((7, 3))
    c = pdist(x)
    d = Dissimilarity(c, measure="euclidean")
    np.testing.assert_array_equal(d.square(), squareform(c))  # reference: scipy squareform


def test_gower_from_distances_equals_gower_from_features(rng):
    # identity (Gower 1966): -1/2 C D^2 C = centred F F' when D is Euclidean on F
    x = rng.random((9, 4))
    a = Dissimilarity(pdist(x), measure="euclidean").gower()
    b = Dissimilarity.from_features(x).gower()
    np.testing.assert_allclose(a, b, atol=1e-12)
    assert np.trace(a) == pytest.approx(Dissimilarity(pdist(x), measure="e").total_ss())


def test_condensed_index_round_trip():
    n = 11
    for k in range(n * (n - 1) // 2):
        i, j = _pair_of(n, k)
        assert condensed_index(n, np.array(i), np.array(j)) == k


def test_subset_keeps_pairs(rng):
    x = rng.random((6, 2))
    d = Dissimilarity(pdist(x), list("abcdef"), measure="euclidean")
    s = d.subset(["f", "b", "c"])
    np.testing.assert_allclose(s.square(), squareform(pdist(x[[5, 1, 2]])))


def test_bad_values_named():
    with pytest.raises(InputError, match="between 'a' and 'c' is nan"):
        Dissimilarity([1.0, np.nan, 2.0], list("abc"), measure="custom")
    with pytest.raises(InputError, match="not symmetric"):
        Dissimilarity.from_square([[0, 1], [2, 0]])


def test_memory_guard_names_size_and_alternatives():
    d = Dissimilarity.from_features(np.zeros((3000, 2)))
    set_memory_limit("1MB")
    try:
        with pytest.raises(TooLargeError, match="a 3000 x 3000 distance matrix would need 72.0 MB.*float32"):
            d.square()
    finally:
        set_memory_limit(None)
