"""What the permutation engine works on: the response (a centred Gower matrix or centred
features) and orthonormal bases of nested design matrices.

:func:`prepare_response` turns a Dissimilarity (or a matrix) into a :class:`Response`: the
feature path when the measure has a Euclidean embedding with fewer columns than samples (no
n x n matrix), else the Gower matrix G = -1/2 C D^2 C (Gower 1966). :func:`nested_bases`
gives orthonormal bases of the reduced model, the tested columns and any later columns, so
that every sum of squares is a quadratic form in G (McArdle & Anderson 2001).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg

from .errors import InputError
from .memory import check_memory

__all__ = ["Response", "prepare_response", "nested_bases"]


# ---------------------------------------------------------------------------- bases
def _orthonormal_complement(cols: np.ndarray, against: np.ndarray) -> np.ndarray:
    """Orthonormal basis of the part of ``cols`` orthogonal to ``against`` (orthonormal).

    ``cols`` have unit norm (or are zero); a column whose remainder is below 1e-9 is
    aliased with earlier ones and adds nothing.
    """
    n = cols.shape[0]
    if cols.shape[1] == 0:
        return np.empty((n, 0))
    m = cols.copy()
    for _ in range(2):                               # Gram-Schmidt twice, for stability
        if against.shape[1]:
            m -= against @ (against.T @ m)
    q, r, _ = scipy.linalg.qr(m, mode="economic", pivoting=True)
    k = int(np.sum(np.abs(np.diag(r)) > 1e-9))
    q = q[:, :k]
    if against.shape[1] and k:
        q -= against @ (against.T @ q)
        q, _ = np.linalg.qr(q)
    return q


def nested_bases(X_reduced, X_full, X_later=None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Orthonormal, centred bases (Qz, Qt, Qw) of reduced, tested and later columns.

    Every column is centred (the intercept is always part of the reduced model) and scaled
    to unit length, then ``Qz`` spans the reduced model, ``Qt`` what ``X_full`` adds to it
    (df_t columns) and ``Qw`` what ``X_later`` adds to both. All columns are orthogonal to 1
    and to each other; constant columns and aliased columns add nothing.
    """
    def unit(X, n=None):
        if X is None:
            return np.empty((n, 0))
        X = np.asarray(X, dtype=np.float64)
        if X.ndim == 1:
            X = X[:, None]
        scale = np.abs(X).max(axis=0) if X.size else np.zeros(X.shape[1])
        X = X - X.mean(axis=0)
        norms = np.sqrt((X ** 2).sum(axis=0))
        keep = norms > 1e-12 * np.maximum(scale, 1e-300) * np.sqrt(X.shape[0])
        return X[:, keep] / norms[keep]

    Xf = unit(X_full)
    n = Xf.shape[0]
    Xz = unit(X_reduced, n)
    Xw = unit(X_later, n)
    for name, X in (("X_reduced", Xz), ("X_later", Xw)):
        if X.shape[0] != n:
            raise InputError(f"`{name}` has {X.shape[0]} rows; `X_full` has {n}.")
    empty = np.empty((n, 0))
    qz = _orthonormal_complement(Xz, empty)
    qt = _orthonormal_complement(Xf, qz)
    qw = _orthonormal_complement(Xw, np.hstack([qz, qt]))
    return qz, qt, qw


# ---------------------------------------------------------------------------- response
@dataclass(frozen=True, eq=False)
class Response:
    """What the engine needs of the data: a centred Gower matrix or centred features.

    Exactly one of ``gower`` (n x n, G = -1/2 C D^2 C) and ``features`` (n x q, column
    centred, G = F F') is set.
    """

    n: int
    gower: np.ndarray | None = None
    features: np.ndarray | None = None

    @property
    def path(self) -> str:
        return "features" if self.features is not None else "distances"

    def total(self) -> float:
        """tr(G), the total sum of squares."""
        if self.features is not None:
            return float(np.einsum("ij,ij->", self.features, self.features))
        return float(np.trace(self.gower))

    def quad(self, Q: np.ndarray) -> np.ndarray:
        """q' G q for every column q of Q."""
        if Q.shape[1] == 0:
            return np.zeros(0)
        if self.features is not None:
            v = Q.T @ self.features
            return np.einsum("ij,ij->i", v, v)
        return np.einsum("ij,ij->j", Q, self.gower @ Q)

    def residual(self, Q: np.ndarray) -> "Response":
        """The response with the span of Q (orthonormal, centred) removed: (I - H) G (I - H)."""
        if Q.shape[1] == 0:
            return self
        if self.features is not None:
            f = self.features - Q @ (Q.T @ self.features)
            return Response(self.n, features=f)
        n = self.n
        check_memory(2 * n * n * 8, f"the {n} x {n} matrix of reduced-model residuals",
                     alternatives="Use a measure with a feature matrix (the feature path "
                                  "needs no n x n matrix).")
        gq = self.gower @ Q                              # G Q
        r = self.gower - gq @ Q.T
        r -= Q @ gq.T
        r += Q @ ((Q.T @ gq) @ Q.T)
        r = (r + r.T) / 2
        return Response(n, gower=r)

    def _unit_feature_means(self, codes):
        """(codes as ints, number of units m, unit sizes, unit means of the features or
        None on the distance path)."""
        codes = np.asarray(codes, dtype=np.intp)
        m = int(codes.max()) + 1
        size = np.bincount(codes, minlength=m).astype(float)
        if self.features is None:
            return codes, m, size, None
        sums = np.zeros((m, self.features.shape[1]))
        np.add.at(sums, codes, self.features)
        return codes, m, size, sums / size[:, None]

    def centred_within(self, codes: np.ndarray) -> "Response":
        """The response with every unit's mean removed: (I - H_U) G (I - H_U), where H_U
        averages the samples of each unit (``codes``: unit of every sample, 0..m-1)."""
        codes, m, size, means = self._unit_feature_means(codes)
        if means is not None:
            return Response(self.n, features=self.features - means[codes])
        n = self.n
        check_memory(2 * n * n * 8, f"the {n} x {n} matrix of within-unit deviations",
                     alternatives="Use a measure with a feature matrix (the feature path "
                                  "needs no n x n matrix).")
        rows = np.zeros((m, n))
        np.add.at(rows, codes, self.gower)
        g = self.gower - (rows / size[:, None])[codes]
        cols = np.zeros((m, n))
        np.add.at(cols, codes, g.T)
        g -= (cols / size[:, None])[codes].T
        return Response(n, gower=(g + g.T) / 2)

    def unit_means(self, codes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Coordinates of the unit means and their signs: (Y (m x r), s (r,)) with
        Y diag(s) Y' = the Gram (or Gower) matrix of the unit means, r <= m.

        On the distance path the Gower matrix of the unit centroids is eigen-decomposed and
        axes with negative eigenvalues get the sign -1 (Gower 1966)."""
        codes, m, size, y = self._unit_feature_means(codes)
        if y is not None:
            if y.shape[1] <= m:
                return y, np.ones(y.shape[1])
            gram = y @ y.T
        else:
            rows = np.zeros((m, self.n))
            np.add.at(rows, codes, self.gower)
            both = np.zeros((m, m))
            np.add.at(both, codes, rows.T)
            gram = both / np.outer(size, size)
        gram = (gram + gram.T) / 2
        vals, vecs = np.linalg.eigh(gram)
        tol = 1e-12 * max(float(np.abs(vals).max()), 1e-300)
        keep = np.abs(vals) > tol
        return vecs[:, keep] * np.sqrt(np.abs(vals[keep])), np.sign(vals[keep])


def prepare_response(data, *, path: str = "auto") -> Response:
    """A :class:`Response` from a Dissimilarity, a feature matrix or a vector.

    ``path='auto'`` uses a Dissimilarity's features when it has them and they have fewer
    columns than there are samples (then each permutation costs O(n q) instead of O(n^2));
    'distances' forces the Gower matrix, 'features' the feature matrix.
    """
    from .dissimilarity import Dissimilarity
    from .tiled import TiledDissimilarity
    if isinstance(data, Response):
        return data
    if isinstance(data, TiledDissimilarity):            # tiles on Dask: tiled_tests.py
        from .tiled_tests import tiled_response
        return tiled_response(data, path)
    if path not in ("auto", "distances", "features"):
        raise InputError(f"`path` must be 'auto', 'distances' or 'features'; got {path!r}.")
    if isinstance(data, Dissimilarity):
        f = data.features
        use_f = f is not None and (path == "features" or (path == "auto" and f.shape[1] < data.n))
        if path == "features" and f is None:
            raise InputError(f"the {data.measure!r} dissimilarity carries no feature matrix; "
                             "use path='distances'.")
        if use_f:
            return Response(data.n, features=f - f.mean(axis=0))
        return Response(data.n, gower=np.asarray(data.gower(), dtype=np.float64))
    y = np.asarray(data, dtype=np.float64)
    if y.ndim == 1:
        y = y[:, None]
    if y.ndim != 2 or not np.isfinite(y).all():
        raise InputError("the response must be a Dissimilarity or a finite 1-D or 2-D array.")
    return Response(y.shape[0], features=y - y.mean(axis=0))
