"""numba version of :mod:`tallyform.core.shuffle` (the same arithmetic). One thread: the
shuffles are memory-bound and a second thread gained nothing when measured."""
from __future__ import annotations

import numba as nb
import numpy as np

_GAMMA = np.uint64(0x9E3779B97F4A7C15)
_M1 = np.uint64(0xBF58476D1CE4E5B9)
_M2 = np.uint64(0x94D049BB133111EB)
_LOW = np.uint64(0xFFFFFFFF)


@nb.njit(inline="always")
def _next32(state):
    state = state + _GAMMA
    z = state
    z = (z ^ (z >> np.uint64(30))) * _M1
    z = (z ^ (z >> np.uint64(27))) * _M2
    z = z ^ (z >> np.uint64(31))
    return state, z >> np.uint64(32)


@nb.njit(cache=True)
def shuffle_segments(seeds, order, bounds, out):
    b, n = out.shape
    nseg = bounds.size - 1
    for r in range(b):
        row = out[r]
        for k in range(n):
            row[k] = k
        state = seeds[r]
        for s in range(nseg):
            start = bounds[s]
            size = bounds[s + 1] - start
            for i in range(size - 1, 0, -1):
                rng_ = np.uint64(i + 1)
                state, x = _next32(state)
                m = x * rng_
                if (m & _LOW) < rng_:            # only then can the draw be biased
                    threshold = np.uint64((4294967296 - (i + 1)) % (i + 1))
                    while (m & _LOW) < threshold:
                        state, x = _next32(state)
                        m = x * rng_
                j = np.int64(m >> np.uint64(32))
                a = order[start + i]
                c = order[start + j]
                t = row[a]
                row[a] = row[c]
                row[c] = t
    return out
