"""Eigen-structure engines shared by the ordinations, permutation tests and partitions.

- Symmetric eigen-decompositions: all axes (LAPACK) or the leading ones (ARPACK, with a
  fixed start vector so that the same input gives the same answer).
- Euclidean corrections of a dissimilarity: Lingoes (1971) and Cailliez (1983).
- The fitted/residual split of a centred response (feature path, by SVD) or of a Gower
  matrix (by eigen-decomposition) on an orthonormal basis of constraints
  (:func:`split_features`, :func:`split_gower`, :func:`constraint_bases`); db-RDA, RDA,
  CCA and the size/shape partition are all built on these.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg

from .design import orthonormal_basis
from .dissimilarity import Dissimilarity
from .errors import DesignError, InputError
from .memory import check_memory

__all__ = ["ZERO_RTOL", "CORRECTIONS", "flip_signs", "eigh_desc", "leading_eigen",
           "gower_operator",
           "smallest_eigenvalue", "correction_constant", "corrected_gower", "EigenSplit",
           "split_features", "split_gower", "residualized_gower", "constraint_bases"]

CORRECTIONS = (None, "lingoes", "cailliez")
#: eigenvalues within this fraction of the largest one are treated as zero
ZERO_RTOL = 1e-10
#: above this many samples the Cailliez constant comes from ARPACK, not a dense solver
_CAILLIEZ_DENSE_MAX = 600


def flip_signs(vectors: np.ndarray, *others: np.ndarray):
    """Make each column's largest-magnitude entry positive (deterministic axis signs).

    The same sign flip is applied to the matching columns of ``others``.
    """
    if vectors.size == 0:
        return (vectors, *others)
    idx = np.argmax(np.abs(vectors), axis=0)
    signs = np.sign(vectors[idx, np.arange(vectors.shape[1])])
    signs[signs == 0] = 1.0
    return (vectors * signs, *(o * signs[: o.shape[1]] for o in others))


def eigh_desc(G: np.ndarray, what: str) -> tuple[np.ndarray, np.ndarray]:
    """All eigenvalues (decreasing) and eigenvectors of a symmetric matrix."""
    n = G.shape[0]
    check_memory(3 * n * n * 8, f"the eigen-decomposition of a {n} x {n} matrix ({what})",
                 alternatives="Ask for the leading axes only with dims=..., or use a measure "
                              "with a feature matrix.")
    w, v = scipy.linalg.eigh(G, check_finite=False)
    return w[::-1].copy(), v[:, ::-1].copy()


def _start_vector(n: int) -> np.ndarray:
    """A fixed ARPACK start vector (same answer on every run), orthogonal to 1."""
    v = np.random.default_rng(20240607).standard_normal(n)
    return v - v.mean()


def _operator(G: np.ndarray, shift: float = 0.0):
    """G + shift * C as a LinearOperator (C the centring matrix)."""
    from scipy.sparse.linalg import LinearOperator
    n = G.shape[0]

    def mv(x):
        x = np.asarray(x)
        y = G @ x
        if shift:
            y += shift * (x - x.mean(axis=0))
        return y
    return LinearOperator((n, n), matvec=mv, matmat=mv, dtype=np.float64)


def gower_operator(d: Dissimilarity):
    """G = -1/2 C D^2 C as a LinearOperator that holds only D^2 (one n x n array).

    G x = -1/2 C (D^2 (C x)): the Gower matrix itself is never formed, which saves its
    centring passes when only a few leading axes are wanted.
    """
    from scipy.sparse.linalg import LinearOperator
    A = d.squared()
    n = A.shape[0]

    def mv(x):
        x = np.asarray(x, dtype=np.float64)
        z = A @ (x - x.mean(axis=0))
        z -= z.mean(axis=0)
        z *= -0.5
        return z
    return LinearOperator((n, n), matvec=mv, matmat=mv, dtype=np.float64)


def leading_eigen(G, k: int, shift: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """The k largest eigenvalues (decreasing) and eigenvectors of G + shift * C (ARPACK).

    ``G`` is a symmetric array, or a LinearOperator (then ``shift`` must be 0 and
    ``k < n - 1``).
    """
    from scipy.sparse.linalg import eigsh
    n = G.shape[0]
    if not isinstance(G, np.ndarray):
        if shift or k >= n - 1:
            raise ValueError("an operator needs shift=0 and k < n - 1")  # internal misuse
        op = G
    elif k >= n - 1:
        w, v = eigh_desc(G + shift * (np.eye(n) - 1.0 / n), "all axes")
        return w[:k], v[:, :k]
    # a wider Krylov space than ARPACK's default (2k + 1) needs fewer restarts, and every
    # restart re-reads the whole n x n matrix (memory-bound)
    else:
        op = _operator(G, shift)
    ncv = min(n - 1, max(2 * k + 1, k + 30))
    w, v = eigsh(op, k=k, which="LA", v0=_start_vector(n), ncv=ncv)
    order = np.argsort(w)[::-1]
    return w[order], v[:, order]


def _extreme_eigenvalue(G: np.ndarray, which: str, tol: float = 1e-10) -> float:
    """The smallest (``'SA'``) or largest (``'LA'``) eigenvalue of a symmetric matrix."""
    n = G.shape[0]
    if n <= 300 and isinstance(G, np.ndarray):
        i = 0 if which == "SA" else n - 1
        return float(scipy.linalg.eigh(G, eigvals_only=True, subset_by_index=[i, i],
                                       check_finite=False)[0])
    from scipy.sparse.linalg import eigsh
    op = _operator(G) if isinstance(G, np.ndarray) else G
    w = eigsh(op, k=1, which=which, v0=_start_vector(n), return_eigenvectors=False,
              tol=tol, ncv=min(n - 1, 30))
    return float(w[0])


def smallest_eigenvalue(G: np.ndarray, tol: float = 1e-10) -> float:
    """The smallest (most negative) eigenvalue of a symmetric matrix (ARPACK past n = 300)."""
    return _extreme_eigenvalue(G, "SA", tol)


def _cailliez_constant(d: Dissimilarity, G: np.ndarray, *, dense_max: int) -> float:
    """Largest real eigenvalue of [[0, 2 G], [-I, -4 B2]], B2 = -1/2 C D C (Cailliez 1983)."""
    n = d.n
    check_memory(3 * n * n * 8, f"the Cailliez correction for {n} samples")
    B2 = -0.5 * d.square(dtype=np.float64)
    B2 -= B2.mean(axis=0, keepdims=True)
    B2 -= B2.mean(axis=1, keepdims=True)
    if n <= dense_max:
        M = np.block([[np.zeros((n, n)), 2.0 * G], [-np.eye(n), -4.0 * B2]])
        ev = scipy.linalg.eigvals(M, check_finite=False)
        return float(np.max(ev.real))
    from scipy.sparse.linalg import LinearOperator, eigs

    def mv(z):
        z = np.asarray(z).ravel()
        x, y = z[:n], z[n:]
        return np.concatenate([2.0 * (G @ y), -x - 4.0 * (B2 @ y)])
    op = LinearOperator((2 * n, 2 * n), matvec=mv, dtype=np.float64)
    ev = eigs(op, k=3, which="LR", v0=np.concatenate([_start_vector(n), _start_vector(n)]),
              return_eigenvectors=False, maxiter=20 * n)
    return float(np.max(ev.real))


def correction_constant(d: Dissimilarity, correction: str, G: np.ndarray | None = None,
                        *, smallest: float | None = None,
                        _dense_max: int = _CAILLIEZ_DENSE_MAX) -> float:
    """The constant c of a Lingoes (1971) or Cailliez (1983) correction; 0 if D is Euclidean.

    Lingoes: c = |most negative eigenvalue of G|, d' = sqrt(d^2 + 2c). Cailliez: c is the
    largest real eigenvalue of the 2n x 2n matrix [[0, 2 G], [-I, -4 B2]] with
    B2 = -1/2 C D C, and d' = d + c. Both apply off the diagonal only.
    """
    if correction not in ("lingoes", "cailliez"):
        raise InputError(f"`correction` must be one of ['lingoes', 'cailliez']; got {correction!r}.")
    G = d.gower() if G is None else G
    lmin = smallest_eigenvalue(G) if smallest is None else smallest
    scale = max(abs(_extreme_eigenvalue(G, "LA")), abs(lmin), 1e-300)
    if lmin >= -ZERO_RTOL * scale:
        return 0.0
    if correction == "lingoes":
        return -lmin
    return _cailliez_constant(d, G, dense_max=_dense_max)


def corrected_gower(d: Dissimilarity, correction: str | None, *,
                    _dense_max: int = _CAILLIEZ_DENSE_MAX) -> tuple[np.ndarray, float]:
    """G of the (corrected) dissimilarities and the constant used (0 without correction)."""
    G = d.gower()
    if correction is None:
        return G, 0.0
    c = correction_constant(d, correction, G, _dense_max=_dense_max)
    if c == 0.0:
        return G, 0.0
    return _apply_correction(d, G, correction, c), c


def _apply_correction(d: Dissimilarity, G: np.ndarray, correction: str, c: float) -> np.ndarray:
    n = d.n
    if correction == "lingoes":
        # -1/2 C (D^2 + 2c (11' - I)) C = G + c C
        out = G + c * (np.eye(n) - 1.0 / n)
    else:
        fixed = Dissimilarity(np.asarray(d.condensed, dtype=np.float64) + c, d.labels,
                              measure=d.measure)
        out = np.array(fixed.gower())
    out = (out + out.T) / 2
    out.setflags(write=False)
    return out



# ---------------------------------------------------------------------------- fitted / residual
@dataclass(frozen=True, eq=False)
class EigenSplit:
    """Eigen-structure of the fitted and residual parts of a centred response.

    Attributes
    ----------
    fitted_values, residual_values : ndarray
        Eigenvalues (sums of squares), decreasing; values with magnitude at most
        ``ZERO_RTOL`` times the largest are dropped. May be negative on the Gower path.
    fitted_vectors, residual_vectors : ndarray, shape (n, r)
        Orthonormal sample vectors (left singular vectors / eigenvectors).
    fitted_loadings, residual_loadings : ndarray, shape (p, r) or None
        Right singular vectors (feature path only).
    total, fitted_trace, residual_trace : float
        tr(G) (or ||Y||^2) and its two parts; fitted + residual = total.
    """

    fitted_values: np.ndarray
    fitted_vectors: np.ndarray
    residual_values: np.ndarray
    residual_vectors: np.ndarray
    total: float
    fitted_trace: float
    residual_trace: float
    fitted_loadings: np.ndarray | None = None
    residual_loadings: np.ndarray | None = None


def _keep(values: np.ndarray, scale: float) -> np.ndarray:
    return np.abs(values) > ZERO_RTOL * scale


def split_features(Y: np.ndarray, Q: np.ndarray, *, residual: bool = True) -> EigenSplit:
    """Fitted/residual SVDs of a centred response Y (n x p) on constraints with basis Q.

    Q Q' Y = (Q W) S U' from the SVD of the small matrix Q' Y = W S U'; the residual
    Y - Q Q' Y is decomposed by a thin SVD. Eigenvalues are squared singular values.
    """
    Y = np.asarray(Y, dtype=float)
    B = Q.T @ Y
    total = float(np.sum(Y * Y))
    scale = max(total, 1e-300)
    if B.size:
        w, s, ut = scipy.linalg.svd(B, full_matrices=False, check_finite=False)
        fv, fz, fu = s ** 2, Q @ w, ut.T
    else:
        fv, fz, fu = np.empty(0), np.empty((Y.shape[0], 0)), np.empty((Y.shape[1], 0))
    keep = _keep(fv, scale)
    fv, fz, fu = fv[keep], fz[:, keep], fu[:, keep]
    fitted_trace = float(np.sum(B * B))
    if residual:
        R = Y - Q @ B
        u, s, vt = scipy.linalg.svd(R, full_matrices=False, check_finite=False)
        rv, rz, ru = s ** 2, u, vt.T
        keep = _keep(rv, scale)
        rv, rz, ru = rv[keep], rz[:, keep], ru[:, keep]
    else:
        rv, rz, ru = np.empty(0), np.empty((Y.shape[0], 0)), np.empty((Y.shape[1], 0))
    return EigenSplit(fv, fz, rv, rz, total, fitted_trace, total - fitted_trace, fu, ru)


def split_gower(G: np.ndarray, Q: np.ndarray, *, residual_dims: int | None = None) -> EigenSplit:
    """Fitted/residual eigen-structure of a Gower matrix G on constraints with basis Q.

    Fitted part H G H = Q A Q' with A = Q' G Q (m x m): its eigenvectors are Q W for
    A = W L W'. Residual part (I - H) G (I - H), eigen-decomposed fully, or only its
    ``residual_dims`` leading axes (``0`` skips it).
    """
    n = G.shape[0]
    GQ = G @ Q
    A = Q.T @ GQ
    A = (A + A.T) / 2
    total = float(np.trace(G))
    scale = max(abs(total), 1e-300)
    if A.size:
        w, W = scipy.linalg.eigh(A, check_finite=False)
        fv, fz = w[::-1], Q @ W[:, ::-1]
    else:
        fv, fz = np.empty(0), np.empty((n, 0))
    keep = _keep(fv, scale)
    fv, fz = fv[keep], fz[:, keep]
    fitted_trace = float(np.trace(A))
    if residual_dims == 0:
        rv, rz = np.empty(0), np.empty((n, 0))
    else:
        check_memory(4 * n * n * 8, f"the residual part of a {n} x {n} Gower matrix",
                     alternatives="Ask for fewer residual axes with residual_dims=..., or use "
                                  "a measure with a feature matrix.")
        R = residualized_gower(G, Q)
        if residual_dims is None:
            rv, rz = eigh_desc(R, "residual part")
        else:
            rv, rz = leading_eigen(R, min(int(residual_dims), n - 1))
        keep = _keep(rv, scale)
        rv, rz = rv[keep], rz[:, keep]
    return EigenSplit(fv, fz, rv, rz, total, fitted_trace, total - fitted_trace)


def residualized_gower(G: np.ndarray, Q: np.ndarray) -> np.ndarray:
    """(I - Q Q') G (I - Q Q') in O(n^2 m) operations (G symmetric, Q orthonormal)."""
    GQ = G @ Q
    A = Q.T @ GQ
    out = G - Q @ GQ.T - GQ @ Q.T + Q @ A @ Q.T
    return (out + out.T) / 2


def constraint_bases(X_terms: np.ndarray, X_conditions: np.ndarray | None = None,
                     weights: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Orthonormal bases (Q_z, Q_x) of conditions (with intercept) and of the terms.

    Q_z spans [1, conditions]; Q_x spans the terms after removing what Q_z explains, so
    Q_x' Q_z = 0 and the hat matrix of the terms given the conditions is Q_x Q_x'. With
    ``weights`` (row masses, CCA) every row is multiplied by sqrt(weight) first.
    """
    n = X_terms.shape[0]
    sw = np.ones(n) if weights is None else np.sqrt(weights)
    Z = np.ones((n, 1)) if X_conditions is None else np.column_stack([np.ones(n), X_conditions])
    Qz = orthonormal_basis(Z * sw[:, None])
    Xw = X_terms * sw[:, None]
    Xr = Xw - Qz @ (Qz.T @ Xw)
    norms = np.linalg.norm(Xw, axis=0)
    alive = np.linalg.norm(Xr, axis=0) > 1e-10 * np.maximum(norms, 1e-300)
    Qx = orthonormal_basis(Xr[:, alive]) if alive.any() else np.empty((n, 0))
    if Qz.shape[1] + Qx.shape[1] >= n:
        raise DesignError(f"the terms and conditions use {Qz.shape[1] + Qx.shape[1]} degrees of "
                          f"freedom with {n} samples, leaving none for the residual.",
                          hint="Use fewer terms or levels, or more samples.")
    return Qz, Qx
