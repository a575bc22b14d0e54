"""The partition as arrays: recomputed cheaply on resampled or simulated samples.

:class:`PartitionArrays` holds what one size and shape partition needs, prepared once from a
table: the dissimilarity under study (its feature matrix, or its squared distances), the size
column and the size-free shape dissimilarity (features or squared distances). A *resample*
(a list of sample positions, repeats allowed) is then partitioned by indexing those arrays:
the distances are never recomputed, the shape coordinates (and, unless fixed, their number)
are re-derived from the indexed shape dissimilarity, exactly as :func:`tallyform.size_shape`
derives them from the whole table.

:func:`arrays_from_counts` builds the same arrays for a simulated table (the Monte Carlo
tests), through the measure and transform registries without the validation of a user table.
"""
from __future__ import annotations

import numpy as np

from .partition_math import SHAPE_INERTIA_TARGET
from .interrupt import eigh as interruptible_eigh

__all__ = ["PartitionArrays", "arrays_from_counts", "shares_from_traces", "small_blas"]

_TOL = 1e-10
SMALL = 600     # below this many samples, one BLAS thread is faster for the loops here


def small_blas(n: int):
    """Context that runs BLAS on one thread for loops over many small matrices.

    Threaded BLAS on matrices of a few dozen rows spends its time waking threads (measured:
    a loop of 300 partitions of 60 samples took 6.3 s on 2 threads, 0.5 s on one); see
    :mod:`tallyform.core.blas_threads`.
    """
    from contextlib import nullcontext

    from .blas_threads import one_blas_thread
    return nullcontext() if n > SMALL else one_blas_thread()


def shares_from_traces(r2_s, r2_t, r2_st, n, m_s, m_t) -> np.ndarray:
    """Adjusted fractions [a, b, c, d] (Ezekiel 1930; Borcard et al. 1992) from raw R^2."""
    def adj(r2, m):
        if m == 0:
            return 0.0
        if n - m - 1 <= 0:
            return np.nan
        return 1.0 - (1.0 - r2) * (n - 1) / (n - m - 1)
    a_s, a_t, a_st = adj(r2_s, m_s), adj(r2_t, m_t), adj(r2_st, m_s + m_t)
    return np.array([a_st - a_t, a_s + a_t - a_st, a_st - a_s, 1.0 - a_st])


def _double_centre(sq: np.ndarray) -> np.ndarray:
    """G = -1/2 C A C for A = squared distances (Gower 1966)."""
    g = sq * -0.5
    g -= g.mean(axis=0, keepdims=True)
    g -= g.mean(axis=1, keepdims=True)
    return g


def _leading_axes(features: np.ndarray | None, g: np.ndarray | None):
    """Orthonormal principal-coordinate vectors and positive eigenvalues, largest first."""
    if features is not None:
        fc = features - features.mean(axis=0)
        m, q = fc.shape
        if q < m:       # eigen-decompose the small cross-product, then map back
            ev, v = np.linalg.eigh(fc.T @ fc)
            ev, v = ev[::-1], v[:, ::-1]
            keep = ev > _TOL * max(ev[0], 1e-300)
            ev, v = ev[keep], v[:, keep]
            u = (fc @ v) / np.sqrt(ev)
            return u, ev
        g = fc @ fc.T
    ev, vec = interruptible_eigh(g)
    ev, vec = ev[::-1], vec[:, ::-1]
    keep = ev > _TOL * max(ev[0], 1e-300)
    return vec[:, keep], ev[keep]


def rule_dims(ev: np.ndarray, n: int, target: float) -> int:
    """The default number of shape dimensions (see partition_math.default_dims)."""
    share = np.cumsum(ev) / ev.sum()
    k = int(np.searchsorted(share, target - 1e-12) + 1)
    return max(1, min(k, ev.size, max(1, (n - 2) // 3)))


class PartitionArrays:
    """The arrays of one (measure, transform, size, shape) choice on one table.

    Parameters
    ----------
    d_features, d_sq : ndarray or None
        Feature matrix (n x q) of the dissimilarity under study, or its squared distances
        (n x n); exactly one is given.
    z : ndarray (n,) or None
        The size column (None when every sample has the same size).
    s_features, s_sq : ndarray or None
        The same for the size-free shape dissimilarity.
    shape_dims : int or None
        Fixed number of shape coordinates, or None for the default rule (re-derived on
        every resample).
    """

    def __init__(self, *, d_features=None, d_sq=None, z=None, s_features=None, s_sq=None,
                 shape_dims=None, target=SHAPE_INERTIA_TARGET):
        self.d_features = None if d_features is None else np.asarray(d_features, float)
        self.d_sq = None if d_sq is None else np.asarray(d_sq, float)
        self.z = None if z is None else np.asarray(z, float)
        self.s_features = None if s_features is None else np.asarray(s_features, float)
        self.s_sq = None if s_sq is None else np.asarray(s_sq, float)
        self.shape_dims = shape_dims
        self.target = target
        src = self.d_features if self.d_features is not None else self.d_sq
        self.n = src.shape[0]

    @classmethod
    def from_dissimilarities(cls, d, z, shape_d, *, shape_dims=None):
        """From Dissimilarity objects (features when they have them, else D squared)."""
        kw = {}
        if d.has_features:
            kw["d_features"] = np.asarray(d.features, float)
        else:
            kw["d_sq"] = d.squared()
        if shape_d.has_features:
            kw["s_features"] = np.asarray(shape_d.features, float)
        else:
            kw["s_sq"] = shape_d.squared()
        return cls(z=z, shape_dims=shape_dims, **kw)

    def _shape(self, idx):
        if self.s_features is not None:
            return _leading_axes(self.s_features[idx], None)
        return _leading_axes(None, _double_centre(self.s_sq[np.ix_(idx, idx)]))

    def shares(self, idx=None, *, shape_dims=None) -> tuple[np.ndarray, int]:
        """Adjusted fractions (size only, shared, shape only, residual) and k on a resample.

        ``idx`` lists sample positions (repeats allowed; None: every sample once).
        ``shape_dims`` overrides the object's rule for this call.
        """
        if idx is None:
            idx = np.arange(self.n)
        idx = np.asarray(idx)
        m = idx.size
        u, ev = self._shape(idx)
        if ev.size == 0:
            return np.full(4, np.nan), 0
        k = shape_dims if shape_dims is not None else self.shape_dims
        k = rule_dims(ev, m, self.target) if k is None else min(int(k), ev.size)
        u = u[:, :k]
        if self.d_features is not None:
            fc = self.d_features[idx]
            fc = fc - fc.mean(axis=0)
            total = float(np.sum(fc * fc))

            def quad(q):
                b = fc.T @ q
                return float(np.sum(b * b))
        else:
            g = _double_centre(self.d_sq[np.ix_(idx, idx)])
            total = float(np.trace(g))

            def quad(q):
                return float(np.sum((g @ q) * q))
        if not total > 0:
            return np.full(4, np.nan), k
        r2_t = quad(u) / total
        m_s, r2_s, r2_st = 0, 0.0, r2_t
        if self.z is not None:
            z = self.z[idx] - self.z[idx].mean()
            nz = np.linalg.norm(z)
            if nz > 1e-12 * max(1.0, np.abs(self.z).max()) * np.sqrt(m):
                z = z / nz
                r2_s = quad(z[:, None]) / total
                zp = z - u @ (u.T @ z)
                nzp = float(zp @ zp)
                if nzp > 1e-10:          # else size lies in the span of the shape axes
                    m_s = 1
                    r2_st = r2_t + quad(zp[:, None]) / nzp / total
        return shares_from_traces(r2_s, r2_t, r2_st, m, m_s, k), k


def arrays_from_counts(x, *, measure, transform, shape, z, shape_dims=None, labels=None,
                       taxa=None, params=None) -> PartitionArrays:
    """PartitionArrays of a simulated count table ``x`` (samples x taxa, no empty sample).

    Taxa absent from the whole simulated table are dropped first (a taxon seen nowhere is
    not part of the data; the chi-square distance is undefined for it).
    """
    from .measures import MeasureContext, get_measure
    from .transforms import get_transform
    x = np.asarray(x, float)
    present = x.sum(axis=0) > 0
    if not present.all():
        x = x[:, present]
    n, p = x.shape
    labels = labels if labels is not None else [f"s{i}" for i in range(n)]
    taxa = [f"t{j}" for j in range(p)]

    def compute(values, meas, tr, prm):
        rec = get_measure(meas)
        t = get_transform(tr)
        xt = t.apply(values, labels=labels)
        ctx = MeasureContext(labels, taxa, dict(prm or {}), np.dtype(np.float64))
        if rec.features is not None:
            return np.asarray(rec.features(xt, ctx), float), None
        from scipy.spatial.distance import squareform
        c = np.asarray(rec.pairwise(xt, ctx), float)
        sq = squareform(c, checks=False)
        return None, sq * sq

    d_f, d_sq = compute(x, measure, transform, params)
    if shape == "same_measure":
        t = x.sum(axis=1, keepdims=True)
        s_f, s_sq = compute(x / t * t.mean(), measure, transform, params)
    else:
        s_f, s_sq = compute(x, shape, None, None)
    return PartitionArrays(d_features=d_f, d_sq=d_sq, z=z, s_features=s_f, s_sq=s_sq,
                           shape_dims=shape_dims)

