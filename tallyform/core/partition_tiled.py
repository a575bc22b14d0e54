"""The size and shape partition of a tiled dissimilarity, from tile products.

The partition needs, of the Gower matrix G of the measure under study (Gower 1966), only
tr(G) and the quadratic forms q' G q of the k shape coordinates and the size column
(McArdle & Anderson 2001; see :mod:`tallyform.core.partition_math`). On a
:class:`~tallyform.core.tiled.TiledDissimilarity` these are products of the tiles with a few
vectors, reduced on the workers (:class:`~tallyform.core.tiled.TiledGower`); the shape
coordinates come from the size-free shape measure's feature matrix (chi-square, Hellinger,
Aitchison: O(n p), in memory). The n x n matrix is never gathered.

The delete-d jackknife replicates of the intervals (:mod:`tallyform.core.partition_resample`)
keep a subset K of the samples. With A = D^2 and C_K the centring on K, the Gower matrix of
the kept samples is G_K = -1/2 C_K A_KK C_K, so for a vector q on K (centred on K and set to
0 outside it) q' G_K q = -1/2 q' A q and tr(G_K) = 1_K' A 1_K / (2 |K|): every replicate's
forms are quadratic forms of A with zero-padded vectors, and the forms of many replicates go
to the tiles in one pass. The shares equal those of the in-memory replicates to rounding.
"""
from __future__ import annotations

import numpy as np

from .errors import Cancelled, InputError

__all__ = ["TiledVariation", "TiledPartitionArrays", "refuse_tiled_partition"]

#: Bytes of vectors sent to the tiles in one pass (the columns are batched below this).
PASS_BYTES = 64_000_000


def _column_batches(n: int, c: int) -> list:
    width = max(1, min(c, PASS_BYTES // (8 * max(n, 1))))
    return [slice(i, min(i + width, c)) for i in range(0, c, width)]


class TiledVariation:
    """:class:`tallyform.core.partition_math.Variation` for a tiled dissimilarity: tr(G), G q
    and Q' G Q from tile products (the spectrum is not available)."""

    def __init__(self, d):
        self.n = d.n
        self._d = d
        self.op = d.operator()
        self.total = float(d.total_ss())
        self.fc = None
        if not self.total > 0:
            raise InputError(f"all {self.n} samples are identical under {d.measure!r}: there is "
                             "no variation to partition.")

    def apply(self, q: np.ndarray) -> np.ndarray:
        """G q for a block of columns (n x k), in passes of at most PASS_BYTES of vectors."""
        q = np.asarray(q, dtype=np.float64)
        out = np.empty_like(q)
        for cols in _column_batches(self.n, q.shape[1]):
            out[:, cols] = self.op @ q[:, cols]
        return out

    def cross(self, q: np.ndarray) -> np.ndarray:
        return q.T @ self.apply(q)

    def explained(self, q: np.ndarray) -> float:
        if q.shape[1] == 0:
            return 0.0
        return float(self.op.quad(q).sum())

    def eigenvalues(self):
        """None: the whole spectrum needs the whole matrix."""
        return None


def negative_share_note(d) -> tuple[float, str | None]:
    """(negative share, note) of a tiled measure: 0 for a Euclidean measure, else NaN."""
    if d.properties.get("euclidean"):
        return 0.0, None
    return float("nan"), (f"the share of negative eigenvalues of {d.measure!r} is not "
                          "computed on tiles (it needs the whole spectrum); the fractions "
                          "come from traces and are exact.")


def refuse_tiled_partition(*, n_permutations: int, shape: str, measure: str) -> None:
    """The InputError of the options a tiled partition cannot run, naming what can."""
    if n_permutations:
        raise InputError(
            "n_permutations > 0 with chunks=: the Monte Carlo test partitions simulated "
            "tables as large as the data, each with its own n x n matrix, which tiles built "
            "once cannot serve.",
            hint="With chunks= use n_permutations=0: the partition and its n_boot intervals "
                 "run on the tiles. Test group differences with permanova on "
                 "dissimilarity(..., chunks=N), or run the Monte Carlo test without chunks= "
                 "on a subset of the samples that fits in memory.")
    if shape == "same_measure":
        raise InputError(
            f"shape='same_measure' with chunks=: the shape coordinates would be the principal "
            f"coordinates of {measure!r} itself, which need the whole n x n matrix.",
            hint="Use shape='chi_square' (the default), 'hellinger' or 'aitchison': their "
                 "coordinates come from a feature matrix, without an n x n matrix.")


class TiledPartitionArrays:
    """What the leave-out replicates of a tiled partition need: the tiled dissimilarity, the
    size column and the shape measure's features (:class:`PartitionArrays` otherwise)."""

    def __init__(self, d, z, shape_d):
        from .partition_engine import PartitionArrays
        if not shape_d.has_features:
            raise InputError(f"the shape measure {shape_d.measure!r} has no feature matrix.")
        self.d = d
        self.n = d.n
        self.shape = PartitionArrays(d_features=np.zeros((d.n, 0)), z=z,
                                     s_features=np.asarray(shape_d.features, float))
        self.z = self.shape.z

    def _vectors(self, idx, shape_dims):
        """(columns on K, how to read their forms) of one replicate, or None if it fails."""
        from .partition_engine import rule_dims
        m = idx.size
        u, ev = self.shape._shape(idx)
        if ev.size == 0:
            return None, 0
        k = rule_dims(ev, m, self.shape.target) if shape_dims is None \
            else min(int(shape_dims), ev.size)
        cols = [np.ones(m), *u[:, :k].T]
        zp = nzp = None
        if self.z is not None:
            z = self.z[idx] - self.z[idx].mean()
            nz = np.linalg.norm(z)
            if nz > 1e-12 * max(1.0, np.abs(self.z).max()) * np.sqrt(m):
                z = z / nz
                cols.append(z)
                zp = z - u[:, :k] @ (u[:, :k].T @ z)
                nzp = float(zp @ zp)
                if nzp > 1e-10:          # else size lies in the span of the shape axes
                    cols.append(zp)
        return (np.column_stack(cols), k, nzp), k

    def replicate_shares(self, kept_sets, shape_dims, *, progress=None, cancel=None,
                         done_before: int = 0, total: int | None = None) -> np.ndarray:
        """(B, 4) shares on every kept set, as :func:`partition_resample.replicate_shares`;
        the quadratic forms of many replicates in one pass over the tiles."""
        from .partition_engine import shares_from_traces
        B = len(kept_sets)
        total = total or B
        out = np.full((B, 4), np.nan)
        width = max(1, PASS_BYTES // (8 * self.n))
        b = 0
        while b < B:
            if cancel is not None and cancel():
                raise Cancelled("the resampling was cancelled; no result was kept.")
            batch, used = [], 0
            while b < B and (not batch or used < width):
                idx = np.asarray(kept_sets[b])
                if np.unique(idx).size != idx.size:
                    raise InputError("tiled replicates need distinct samples.")
                vec, k = self._vectors(idx, shape_dims)
                batch.append((b, idx, vec, k))
                used += 0 if vec is None else vec[0].shape[1]
                b += 1
            W = np.zeros((self.n, used))
            at = 0
            for _, idx, vec, _ in batch:
                if vec is not None:
                    c = vec[0].shape[1]
                    W[idx, at:at + c] = vec[0]
                    at += c
            forms = self.d.sq_quad(W) if used else np.zeros(0)
            at = 0
            for r, idx, vec, k in batch:
                if vec is None:
                    continue
                cols, _, nzp = vec
                c = cols.shape[1]
                f = forms[at:at + c]
                at += c
                m = idx.size
                tot = f[0] / (2.0 * m)                  # tr(G_K) = 1' A_KK 1 / (2 m)
                if not tot > 0:
                    continue
                q = -0.5 * f[1:] / tot                  # q' G_K q / tr(G_K)
                r2_t = float(q[:k].sum())
                m_s, r2_s, r2_st = 0, 0.0, r2_t
                if c > 1 + k:
                    r2_s = float(q[k])
                    if c > 2 + k:
                        m_s = 1
                        r2_st = r2_t + float(q[k + 1]) / nzp
                out[r] = shares_from_traces(r2_s, r2_t, r2_st, m, m_s, k)
            if progress is not None:
                progress(done_before + b, total)
        return out
