"""memory.empty_large: past LARGE_BYTES an array on its own mapping (no transparent huge
pages), below it a plain numpy array; either way writable, C-ordered, of the asked shape
and type, and usable like any array (pickled, viewed, kept after the first reference
goes). The kernels that fill dissimilarities use it."""
from __future__ import annotations

import gc
import mmap
import pickle

import numpy as np
import pytest

from tallyform.core import kernels, memory
from tallyform.core.memory import LARGE_BYTES, empty_large


def _root(a):
    """The object that owns the memory of ``a`` (through views and memoryviews)."""
    while True:
        if isinstance(a, np.ndarray) and a.base is not None:
            a = a.base
        elif isinstance(a, memoryview):
            a = a.obj
        else:
            return a


@pytest.mark.parametrize("shape,dtype", [((3, 4), np.float64), (10, np.float32),
                                         ((LARGE_BYTES // 8 + 5,), np.float64),
                                         ((1500, 1500), np.float64),
                                         ((LARGE_BYTES // 4 + 1,), np.float32)])
def test_shape_type_and_writable(shape, dtype):
    a = empty_large(shape, dtype)
    assert a.shape == tuple(np.atleast_1d(shape)) and a.dtype == np.dtype(dtype)
    assert a.flags.c_contiguous and a.flags.writeable
    a[...] = 1.5
    assert float(a.sum()) == 1.5 * a.size
    big = a.nbytes >= LARGE_BYTES and hasattr(mmap, "MADV_NOHUGEPAGE")
    assert isinstance(_root(a), mmap.mmap) == big


def test_views_keep_the_mapping_alive_and_pickles_copy():
    a = empty_large((1200, 1200))
    a[:] = np.arange(1200.0)[None, :]
    v = a[::7, 3:]
    del a
    gc.collect()
    assert v[0, 0] == 3.0 and v[-1, -1] == 1199.0      # the mapping outlived `a`
    b = pickle.loads(pickle.dumps(v))
    np.testing.assert_array_equal(b, v)
    b[0, 0] = -1.0                                       # a copy, not the mapping
    assert v[0, 0] == 3.0


def test_kernels_fill_large_outputs_with_the_same_numbers():
    rng = np.random.default_rng(1)
    x = rng.poisson(3.0, size=(1100, 12)).astype(float) + 1.0
    from scipy.spatial.distance import pdist       # reference: scipy
    c = kernels.abs_condensed(x, mode=kernels.RATIO, t=x.sum(axis=1))
    assert c.nbytes >= LARGE_BYTES // 2
    np.testing.assert_allclose(c, pdist(x, "braycurtis"), rtol=1e-12)
    n = 1100
    sq = kernels.squared_square(c, n)
    from scipy.spatial.distance import squareform
    np.testing.assert_array_equal(sq, squareform(c) ** 2)


def test_small_threshold_is_respected(monkeypatch):
    monkeypatch.setattr(memory, "LARGE_BYTES", 1 << 40)
    a = memory.empty_large((1500, 1500))
    assert a.base is None                                 # plain numpy array
