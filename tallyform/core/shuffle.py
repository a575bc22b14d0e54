"""Random relabellings, fast and the same on every machine.

Every relabelling is a Fisher-Yates shuffle (Durstenfeld 1964) driven by its own 64-bit seed
through the SplitMix64 generator (Steele, Lea & Flood 2014), with Lemire's (2019) unbiased
multiply-and-reject rule for each bounded draw. The seeds come from the caller's
``numpy.random.Generator``, one per relabelling, so a relabelling depends only on its seed:
batches of any size, any number of threads, the compiled loop or its numpy twin give the
same relabellings bit for bit. (Integer arithmetic only: nothing depends on the platform's
floating point.)

Shuffles happen within *segments*: ``order`` lists the positions grouped by segment (a
block, or all samples), ``bounds`` the start of each segment in ``order``; positions only
ever move within their segment.

References
----------
Durstenfeld, R. (1964). Algorithm 235: Random permutation. Comm. ACM 7, 420.
Lemire, D. (2019). Fast random integer generation in an interval. ACM Trans. Model.
Comput. Simul. 29, 3:1-3:12.
Steele, G. L., Lea, D. & Flood, C. H. (2014). Fast splittable pseudorandom number
generators. OOPSLA 2014, 453-472.
"""
from __future__ import annotations

import numpy as np

__all__ = ["shuffled_rows", "draw_seeds"]

_GAMMA = np.uint64(0x9E3779B97F4A7C15)
_M1 = np.uint64(0xBF58476D1CE4E5B9)
_M2 = np.uint64(0x94D049BB133111EB)
_LOW = np.uint64(0xFFFFFFFF)
_S30, _S27, _S31, _S32 = (np.uint64(k) for k in (30, 27, 31, 32))


def draw_seeds(rng: np.random.Generator, b: int) -> np.ndarray:
    """``b`` 64-bit seeds from ``rng`` (one per relabelling)."""
    return rng.integers(0, 2**64 - 1, size=b, dtype=np.uint64, endpoint=True)


def _numpy_rows(seeds, order, bounds, n):
    """The numpy twin of the compiled loop: the same arithmetic, vectorised over rows."""
    b = seeds.size
    out = np.tile(np.arange(n, dtype=np.intp), (b, 1))
    state = seeds.copy()
    rows = np.arange(b)

    def next32(mask):
        with np.errstate(over="ignore"):
            state[mask] += _GAMMA
            z = state[mask]
            z = (z ^ (z >> _S30)) * _M1
            z = (z ^ (z >> _S27)) * _M2
            z = z ^ (z >> _S31)
        return z >> _S32

    for s in range(len(bounds) - 1):
        seg = order[bounds[s]:bounds[s + 1]]
        for i in range(seg.size - 1, 0, -1):
            r = np.uint64(i + 1)
            threshold = np.uint64((2**32 - (i + 1)) % (i + 1))
            every = np.ones(b, dtype=bool)
            with np.errstate(over="ignore"):
                m = next32(every) * r
            low = m & _LOW
            redo = low < threshold
            while redo.any():
                with np.errstate(over="ignore"):
                    m[redo] = next32(redo) * r
                low = m & _LOW
                redo = low < threshold
            j = (m >> _S32).astype(np.intp)
            a, c = seg[i], seg[j]
            tmp = out[rows, a].copy()
            out[rows, a] = out[rows, c]
            out[rows, c] = tmp
    return out


def shuffled_rows(seeds: np.ndarray, order: np.ndarray, bounds: np.ndarray,
                  n: int) -> np.ndarray:
    """(B, n) index arrays: row r is the identity with the positions of every segment
    shuffled by seed r (see the module notes)."""
    seeds = np.ascontiguousarray(seeds, dtype=np.uint64)
    order = np.ascontiguousarray(order, dtype=np.intp)
    bounds = np.ascontiguousarray(bounds, dtype=np.intp)
    from .kernels import numba_ready
    nbk = numba_ready(float(seeds.size) * n * 8)
    if nbk is not None:
        from ._numba_shuffle import shuffle_segments
        out = np.empty((seeds.size, n), dtype=np.intp)
        return shuffle_segments(seeds, order, bounds, out)
    return _numpy_rows(seeds, order, bounds, n)
