"""Random relabellings: the same on every machine (compiled loop = numpy twin), uniform, and
confined to their blocks."""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from tallyform.core import kernels
from tallyform.core.schemes import Permutations
from tallyform.core.shuffle import draw_seeds, shuffled_rows


def _both(seeds, order, bounds, n):
    out = []
    for flag in (True, False):
        kernels.use_numba(flag)
        try:
            out.append(shuffled_rows(seeds, order, bounds, n))
        finally:
            kernels.use_numba(None)
    return out


def test_compiled_and_numpy_paths_agree_bit_for_bit():
    pytest.importorskip("numba")
    rng = np.random.default_rng(11)
    seeds = draw_seeds(rng, 300)
    blocks = np.repeat([0, 1, 2, 3], [1, 9, 30, 7])
    order = np.argsort(blocks, kind="stable")
    bounds = np.r_[0, np.cumsum(np.bincount(blocks))]
    a, b = _both(seeds, order, bounds, blocks.size)
    np.testing.assert_array_equal(a, b)
    assert (blocks[a] == blocks).all()                      # nothing leaves its block
    assert (np.sort(a, axis=1) == np.arange(blocks.size)).all()


def test_every_arrangement_equally_likely():
    # 5 items: 120 arrangements; chi-square goodness of fit over 60 000 draws
    # (scipy.stats.chisquare; a uniform shuffle gives a p-value that is itself uniform)
    rng = np.random.default_rng(5)
    p = shuffled_rows(draw_seeds(rng, 60_000), np.arange(5), np.array([0, 5]), 5)
    codes = (p * 5 ** np.arange(4, -1, -1)).sum(axis=1)
    counts = np.unique(codes, return_counts=True)[1]
    assert counts.size == math.factorial(5)
    assert stats.chisquare(counts).pvalue > 1e-3


def test_relabellings_do_not_depend_on_batch_size():
    a = Permutations(40, 250, 7)
    b = Permutations(40, 250, 7)
    first = np.vstack(list(a.batches(250)))
    second = np.vstack(list(b.batches(17)))
    np.testing.assert_array_equal(first, second)
    assert not np.array_equal(first[0], first[1])


def test_blocks_scheme_keeps_samples_in_their_block():
    blocks = np.repeat(["x", "y", "z"], [4, 6, 5])
    perms = Permutations(blocks.size, 500, 3, blocks=blocks, block_name="site")
    idx = np.vstack(list(perms.batches(64)))
    assert (blocks[idx] == blocks).all()
    # within block y every sample reaches every position (uniform over 6! arrangements)
    y = np.flatnonzero(blocks == "y")
    assert set(idx[:, y[0]]) == set(y)
