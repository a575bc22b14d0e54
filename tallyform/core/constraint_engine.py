"""The permutation engine of the constrained-ordination tests (CCA, RDA, db-RDA).

A constrained ordination splits a response into the part its constraints fit and the rest.
Every test of :func:`tallyform.core.constraint_tests.constraint_test` is one pseudo-F of
tested columns T given reduced columns R (conditions, earlier terms, earlier axes), with later
columns L in the model but not tested:

    F = [S(T) / df_num] / [(tr E - S(R) - S(T) - S(L)) / df_res],

where E is the response, S(.) the inertia a block of columns fits (the sum over its
orthonormal basis columns q of q' E E' q) and df_res = rows - 1 - rank([R, T, L]). The
numerator is the whole fitted inertia S(T) (overall and per-term tests), or its first
eigenvalue with df_num = 1 (per-axis tests; Legendre, Oksanen & ter Braak 2011).

Weights. Rows (samples, or units) may carry weights w: CCA weights every sample by its mass
r_i (ter Braak 1986). Everything happens in the weighted metric: the response rows are
multiplied by sqrt(w_i) (CCA's matrix S already is), the design columns too, and the weighted
intercept sqrt(w) is removed from both. Unweighted methods have w = 1.

Permutations. The reduced-model residual E = (I - H_R) Y is held fixed, with its weights, and
the rows of the whole design [R, T, L] are permuted (Freedman & Lane 1983): for unit weights
this is the same as permuting the residual rows against a fixed design, so the permuted bases
are just the rows of the observed ones, Q[idx]. With weights, the weight of a sample travels
with its residual (its counts and its total are one observation), so the permuted design is
re-weighted and its basis recomputed for every permutation (a batched QR). Without
conditions this is the randomisation test of the constraints against the whole table, exact
whenever the samples (counts with their totals) are exchangeable under the null.

A block of B permutations is evaluated at once: Q (B x rows x k) by E (rows x q), or by the
Gower-form matrix E E' (rows x rows) when only dissimilarities exist (db-RDA of a measure
without a feature matrix). Memory per block is bounded by ``_BATCH_BYTES``.

References
----------
Freedman, D. & Lane, D. (1983). A nonstochastic interpretation of reported significance
levels. J. Bus. Econ. Stat. 1, 292-298.
Legendre, P., Oksanen, J. & ter Braak, C. J. F. (2011). Testing the significance of canonical
axes in redundancy analysis. Methods Ecol. Evol. 2, 269-277.
ter Braak, C. J. F. (1986). Canonical correspondence analysis: a new eigenvector technique
for multivariate direct gradient analysis. Ecology 67, 1167-1179.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd
import scipy.linalg

from .errors import Cancelled, DesignError
from .memory import check_memory
from .permutation import TIE_RTOL, Permutations

__all__ = ["ConstraintData", "Rows", "FTest", "f_test", "fitted_axes", "indicator_columns",
           "weighted_unit_rows"]

#: Bytes of permuted bases and projections handled per block of permutations.
_BATCH_BYTES = 32 * 2**20
#: Sums of squares below this share of the total are rounding noise, and are set to 0.
_SS_RTOL = 1e-12


# ---------------------------------------------------------------------------- data
@dataclass(frozen=True, eq=False)
class ConstraintData:
    """What a constrained ordination keeps so that its constraints can be tested.

    Attributes
    ----------
    method : {'CCA', 'RDA', 'db-RDA'}
    labels : Index
        Sample labels, in row order.
    frame : DataFrame
        The sample information, aligned to ``labels`` (for units and blocks).
    terms, conditions : tuple of str
    X : ndarray (n, m)
        Coded term columns, without intercept; ``term_columns[t]`` indexes them.
    Z : ndarray (n, k) or None
        Coded condition columns, without intercept.
    features : ndarray (n, q) or None
        The whole response in the weighted metric (rows times sqrt(weight)), orthogonal to
        sqrt(weight): centred (transformed) abundances for RDA, centred features for db-RDA,
        D_r^{-1/2}(P - r c')D_c^{-1/2} for CCA.
    gower : ndarray (n, n) or None
        G = -1/2 C D^2 C (after any correction) when the dissimilarity has no features.
    weights : ndarray (n,) or None
        Row masses r (CCA); None: every sample weighs 1.
    axis_prefix : str
        ``'CCA'``, ``'RDA'`` or ``'db-RDA'`` (names of the constrained axes).
    totals : ndarray (n,) or None
        Sample totals of the table (CCA, RDA; db-RDA when its sample information was the
        table itself); None when only dissimilarities were given.
    transform : str or None
        RDA: the transformation of the abundances (None: raw abundances); db-RDA: the
        transformation before the measure.
    """

    method: str
    labels: pd.Index
    frame: pd.DataFrame = field(repr=False)
    terms: tuple
    conditions: tuple
    X: np.ndarray = field(repr=False)
    term_columns: dict = field(repr=False)
    Z: np.ndarray | None = field(default=None, repr=False)
    features: np.ndarray | None = field(default=None, repr=False)
    gower: np.ndarray | None = field(default=None, repr=False)
    weights: np.ndarray | None = field(default=None, repr=False)
    axis_prefix: str = ""
    totals: np.ndarray | None = field(default=None, repr=False)
    transform: str | None = None

    @property
    def n(self) -> int:
        return len(self.labels)

    def rows(self) -> "Rows":
        """The samples as rows of the engine, with every design column by name."""
        cols = {f"term:{t}": self.X[:, idx] for t, idx in self.term_columns.items()}
        if self.Z is not None:
            cols["conditions"] = self.Z
        return Rows(self.n, self.features, self.gower, self.weights, cols)

    def term_matrix(self, terms) -> np.ndarray:
        idx = [c for t in self.terms if t in terms for c in self.term_columns[t]]
        return self.X[:, idx]


@dataclass(frozen=True, eq=False)
class Rows:
    """Rows (samples or units) in the weighted metric, with raw design columns by name."""

    n: int
    features: np.ndarray | None
    gower: np.ndarray | None
    weights: np.ndarray | None
    columns: dict = field(repr=False)

    @property
    def sw(self) -> np.ndarray:
        return np.ones(self.n) if self.weights is None else np.sqrt(self.weights)

    def total(self) -> float:
        if self.features is not None:
            return float(np.einsum("ij,ij->", self.features, self.features))
        return float(np.trace(self.gower))

    def residual(self, Q: np.ndarray) -> "Rows":
        """The response with the span of Q (orthonormal, weighted) removed."""
        if Q.shape[1] == 0:
            return self
        if self.features is not None:
            f = self.features - Q @ (Q.T @ self.features)
            return Rows(self.n, f, None, self.weights, self.columns)
        g = self.gower
        check_memory(2 * self.n * self.n * 8, f"the {self.n} x {self.n} matrix of "
                     "reduced-model residuals",
                     alternatives="Use a measure with a feature matrix (the feature path "
                                  "needs no n x n matrix).")
        gq = g @ Q
        r = g - gq @ Q.T - Q @ gq.T + Q @ ((Q.T @ gq) @ Q.T)
        return Rows(self.n, None, (r + r.T) / 2, self.weights, self.columns)

    def design(self, names) -> np.ndarray:
        """Raw design columns of the given names, side by side (n x k, k may be 0)."""
        parts = [self.columns[k] for k in names if k in self.columns]
        return np.hstack(parts) if parts else np.empty((self.n, 0))


def indicator_columns(codes: np.ndarray) -> np.ndarray:
    """One 0/1 column per code (the intercept makes one of them redundant; bases drop it)."""
    codes = np.asarray(codes)
    m = int(codes.max()) + 1 if codes.size else 0
    out = np.zeros((codes.size, m))
    out[np.arange(codes.size), codes] = 1.0
    return out


def weighted_unit_rows(rows: Rows, codes: np.ndarray) -> Rows:
    """The rows aggregated to units: weighted unit means, each unit weighing its samples.

    Unit u gets weight w_u = sum of its samples' weights, raw design row = the w-weighted mean
    of its samples' rows, and response row (weighted metric) sum_i sqrt(w_i) E_i / sqrt(w_u).
    For columns constant within units the fitted inertia is then the same as with the samples
    (the hat matrix of such columns only sees these weighted unit means); the residual is the
    between-unit one, the error stratum of terms applied to whole units.
    """
    codes = np.asarray(codes, dtype=np.intp)
    m = int(codes.max()) + 1
    w = np.ones(rows.n) if rows.weights is None else rows.weights
    wu = np.bincount(codes, weights=w, minlength=m)
    M = np.zeros((rows.n, m))
    M[np.arange(rows.n), codes] = np.sqrt(w) / np.sqrt(wu[codes])
    feats = gower = None
    if rows.features is not None:
        feats = M.T @ rows.features
    else:
        gower = M.T @ rows.gower @ M
        gower = (gower + gower.T) / 2
    A = np.zeros((m, rows.n))
    A[codes, np.arange(rows.n)] = w / wu[codes]
    cols = {k: A @ v for k, v in rows.columns.items()}
    return Rows(m, feats, gower, wu, cols)


# ---------------------------------------------------------------------------- bases
def _weighted_centred(D: np.ndarray, sw: np.ndarray) -> np.ndarray:
    """sqrt(w) * D with the weighted intercept direction removed (last axis: columns)."""
    u = sw / np.linalg.norm(sw)
    A = sw[:, None] * D if D.ndim == 2 else sw[None, :, None] * D
    for _ in range(2):
        if A.ndim == 2:
            A = A - np.outer(u, u @ A)
        else:
            A = A - u[None, :, None] * np.einsum("n,bnk->bk", u, A)[:, None, :]
    return A


def _select(blocks: list, sw: np.ndarray) -> list:
    """Column indices of each block that are independent of the earlier blocks.

    Row weights and row permutations keep the rank of every leading group of columns, so a
    selection made once holds for every permuted and re-weighted design.
    """
    n = sw.size
    basis = np.empty((n, 0))
    out = []
    for D in blocks:
        if D.shape[1] == 0:
            out.append(np.array([], dtype=np.intp))
            continue
        A = _weighted_centred(D, sw)
        norms = np.linalg.norm(A, axis=0)
        scale = np.linalg.norm(sw[:, None] * D, axis=0)
        live = np.flatnonzero(norms > 1e-10 * np.maximum(scale, 1e-300))
        if live.size == 0:
            out.append(np.array([], dtype=np.intp))
            continue
        A = A[:, live] / norms[live]
        for _ in range(2):
            if basis.shape[1]:
                A = A - basis @ (basis.T @ A)
        q, r, piv = scipy.linalg.qr(A, mode="economic", pivoting=True)
        k = int(np.sum(np.abs(np.diag(r)) > 1e-9))
        out.append(np.sort(live[piv[:k]]))
        basis = np.hstack([basis, q[:, :k]])
    return out


def _standardise(D: np.ndarray) -> np.ndarray:
    """Columns centred and scaled to unit norm (a better-conditioned QR; same spans)."""
    if D.shape[1] == 0:
        return D
    D = D - D.mean(axis=0)
    return D / np.maximum(np.linalg.norm(D, axis=0), 1e-300)


def _bases(D: np.ndarray, sw: np.ndarray) -> np.ndarray:
    """Orthonormal bases (B x n x k) of weighted, intercept-free designs (B x n x k).

    Columns are full rank by construction (:func:`_select`), so the QR needs no pivoting
    and its leading columns span the leading design columns.
    """
    A = _weighted_centred(D, sw)
    q, _ = np.linalg.qr(A)
    return q


def _permuted_bases(Dt: np.ndarray, idx: np.ndarray, sw: np.ndarray) -> np.ndarray:
    """Orthonormal bases of the permuted, re-weighted designs, as k x B x n.

    ``Dt`` is the design transposed (k x n, full column rank), ``idx`` the B permutations.
    Classical Gram-Schmidt applied twice (numerically as good as Householder QR for the few,
    well-conditioned columns of a design), vectorised over the permutations.
    """
    A = np.take(Dt, idx, axis=1) * sw                    # k x B x n
    u = sw / np.linalg.norm(sw)
    k = A.shape[0]
    for j in range(k):
        v = A[j]
        for _ in range(2):
            v -= np.outer(v @ u, u)
            if j:
                c = np.einsum("kbn,bn->kb", A[:j], v)
                v -= np.einsum("kb,kbn->bn", c, A[:j])
        v /= np.linalg.norm(v, axis=1, keepdims=True)
    return A


# ---------------------------------------------------------------------------- statistics
def _clean(ss, total):
    tol = _SS_RTOL * abs(float(total))
    ss = np.asarray(ss, dtype=np.float64)
    return np.where(np.abs(ss) <= tol, 0.0, ss)


def _pseudo_f(num, ss_res, df_num, df_res):
    """(num / df_num) / (ss_res / df_res); a perfect fit gives +inf (or NaN for 0 / 0)."""
    num = np.asarray(num, dtype=np.float64)
    ss_res = np.asarray(ss_res, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        f = (num / df_num) / (ss_res / df_res)
    return np.where(ss_res > 0, f, np.where(num > 0, np.inf, np.nan))


def permutation_pvalue(observed: float, null: np.ndarray, *, exact: bool) -> float:
    """Add-one p-value (random permutations), or the plain share (exact enumeration).

    A permuted value within a relative ``TIE_RTOL`` of the observed one counts as a tie.
    """
    if np.isnan(observed) or null.size == 0:
        return float("nan")
    if np.isinf(observed):
        hits = int(np.count_nonzero(null == observed))
    else:
        hits = int(np.count_nonzero(null >= observed - TIE_RTOL * abs(observed)))
    return hits / null.size if exact else (1 + hits) / (1 + null.size)


def _block_stats(U: np.ndarray, resp: Rows, kr: int, kt: int, first: bool):
    """Per permutation: (S(R), S(T), S(L), numerator) for bases U (k x B x n, contiguous:
    basis column, permutation, row), so that one BLAS product serves the whole block."""
    k, B, n = U.shape
    flat = U.reshape(k * B, n)
    if resp.features is not None:
        V = (flat @ resp.features).reshape(k, B, -1)
        sq = np.einsum("kbq,kbq->kb", V, V)
    else:
        GU = (flat @ resp.gower).reshape(k, B, n)
        sq = np.einsum("kbn,kbn->kb", U, GU)
    s_r = sq[:kr].sum(axis=0)
    s_t = sq[kr:kr + kt].sum(axis=0)
    s_l = sq[kr + kt:].sum(axis=0)
    if not first:
        return s_r, s_t, s_l, s_t
    if resp.features is not None:
        Vt = V[kr:kr + kt]
        M = np.einsum("kbq,jbq->bkj", Vt, Vt)
    else:
        M = np.einsum("kbn,jbn->bkj", U[kr:kr + kt], GU[kr:kr + kt])
    M = (M + np.swapaxes(M, 1, 2)) / 2
    return s_r, s_t, s_l, np.linalg.eigvalsh(M)[:, -1]


@dataclass(frozen=True, eq=False)
class FTest:
    """One engine test: observed statistic, null values and the parts of the statistic."""

    statistic: float
    pvalue: float
    null: np.ndarray
    null_fitted: np.ndarray
    df_num: int
    df_res: int
    fitted: float
    residual: float
    reduced: float
    total: float


def f_test(rows: Rows, reduced: np.ndarray, tested: np.ndarray, later: np.ndarray | None,
           perms: Permutations | None, *, first: bool = False,
           progress: Callable[[int], None] | None = None,
           cancel: Callable[[], bool] | None = None) -> FTest:
    """Pseudo-F of ``tested`` given ``reduced`` (raw columns; the intercept is implicit).

    ``first=True`` takes the largest eigenvalue of the fitted part as the numerator
    (df_num = 1), the statistic of a per-axis test. ``perms=None`` computes the observed
    values only. ``progress(done)`` is called after every block.
    """
    later = np.empty((rows.n, 0)) if later is None else later
    sw = rows.sw
    sel = _select([reduced, tested, later], sw)
    kr, kt, kl = (len(s) for s in sel)
    if kt == 0:
        raise DesignError("the tested columns add nothing to the model they are tested "
                          "against (they are aliased with it).")
    df_res = rows.n - 1 - kr - kt - kl
    if df_res <= 0:
        raise DesignError(f"the model uses {kr + kt + kl + 1} degrees of freedom with "
                          f"{rows.n} rows, leaving none for the residual.",
                          hint="Use fewer terms or levels, or more samples (or units).")
    D = _standardise(np.hstack([reduced[:, sel[0]], tested[:, sel[1]], later[:, sel[2]]]))
    Q0 = _bases(D[None], sw)[0]
    resp = rows.residual(Q0[:, :kr])
    total_e = resp.total()
    df_num = 1 if first else kt

    def stats(Q):
        s_r, s_t, s_l, num = _block_stats(Q, resp, kr, kt, first)
        res = _clean(total_e - s_r - s_t - s_l, total_e)
        num = _clean(num, total_e)
        return _pseudo_f(num, res, df_num, df_res), num, res

    Qt0 = np.ascontiguousarray(Q0.T)                   # k x n
    Dt = np.ascontiguousarray(D.T)
    f0, num0, res0 = (float(v[0]) for v in stats(Qt0[:, None, :]))
    total = rows.total()
    reduced_ss = total - total_e
    if perms is None:
        return FTest(f0, float("nan"), np.empty(0), np.empty(0), df_num, df_res, num0, res0,
                     reduced_ss, total)
    k = D.shape[1]
    q = resp.features.shape[1] if resp.features is not None else rows.n
    size = max(8, int(_BATCH_BYTES // (8 * max(k, 1) * (rows.n + q))))
    null = np.empty(perms.total)
    null_fit = np.empty(perms.total)
    done = 0
    for idx in perms.batches(size):
        if cancel is not None and cancel():
            raise Cancelled(f"stopped after {done} of {perms.total} permutations; no result "
                            "was produced.")
        if rows.weights is None:
            U = np.take(Qt0, idx, axis=1)                 # k x B x n: rows permuted
        else:
            U = _permuted_bases(Dt, idx, sw)
        f, num, _ = stats(U)
        b = idx.shape[0]
        null[done:done + b] = f
        null_fit[done:done + b] = num
        done += b
        if progress is not None:
            progress(b)
    p = permutation_pvalue(f0, null, exact=perms.exact)
    return FTest(f0, p, null, null_fit, df_num, df_res, num0, res0, reduced_ss, total)


def fitted_axes(rows: Rows, reduced: np.ndarray, tested: np.ndarray):
    """Eigenvalues (decreasing, positive) and raw-scale sample vectors of the constrained
    axes of ``tested`` given ``reduced``; the vectors serve as covariables of axis tests."""
    sw = rows.sw
    sel = _select([reduced, tested], sw)
    kr = len(sel[0])
    D = _standardise(np.hstack([reduced[:, sel[0]], tested[:, sel[1]]]))
    Q0 = _bases(D[None], sw)[0]
    resp = rows.residual(Q0[:, :kr])
    Qt = Q0[:, kr:]
    if resp.features is not None:
        w, s, _ = scipy.linalg.svd(Qt.T @ resp.features, full_matrices=False)
        vals, vecs = s ** 2, Qt @ w
    else:
        A = Qt.T @ resp.gower @ Qt
        ev, W = np.linalg.eigh((A + A.T) / 2)
        vals, vecs = ev[::-1], Qt @ W[:, ::-1]
    keep = vals > 1e-10 * max(abs(resp.total()), 1e-300)
    return vals[keep], vecs[:, keep] / sw[:, None]
