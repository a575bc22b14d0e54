"""The arithmetic of the size and shape partition: traces of G, predictors, fractions.

Shared by :func:`tallyform.size_shape` (one partition), its Monte Carlo tests
(:mod:`tallyform.core.partition_null`), its resampling intervals
(:mod:`tallyform.core.partition_resample`) and :func:`tallyform.compare_choices`.

R^2 of predictors Z is tr(H G) / tr(G), H the hat matrix of [1, Z] (McArdle & Anderson
2001); adjusted R^2 after Ezekiel (1930); fractions after Borcard et al. (1992) and
Peres-Neto et al. (2006); see docs/methods.md, section 5.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from .dissimilarity import Dissimilarity
from .abundance import require_absolute
from .errors import DesignError, InputError
from .table import CommunityTable
from .interrupt import eigh as interruptible_eigh

__all__ = ["Variation", "negative_share", "size_predictor", "shape_coordinates",
           "default_dims", "adjusted_r2", "fractions_from_r2", "SIZE_OPTIONS",
           "SHAPE_OPTIONS", "FRACTIONS", "SHAPE_INERTIA_TARGET"]

SIZE_OPTIONS = ("log_total", "total", "log_total_per_effort")
SHAPE_OPTIONS = ("chi_square", "hellinger", "aitchison", "same_measure")
FRACTIONS = ("size_only", "shared", "shape_only", "residual")
SHAPE_INERTIA_TARGET = 0.75


from .validation import check_option as check_option  # noqa: E402


# ---------------------------------------------------------------------------- variation of D
class Variation:
    """Traces tr(Q' G Q) of one dissimilarity, from centred features (O(n p)) or from G.

    ``Q`` is an orthonormal basis of *centred* predictors, so that ``Q Q'`` plus ``11'/n``
    is the hat matrix of [1, Z]; since G 1 = 0 the intercept contributes nothing.
    """

    def __init__(self, d: Dissimilarity):
        self.n = d.n
        self._d = d
        if d.has_features:
            f = np.asarray(d.features, dtype=np.float64)
            self.fc = f - f.mean(axis=0)
            self.g = None
            self.total = float(np.sum(self.fc * self.fc))
        else:
            self.fc = None
            self.g = d.gower()
            self.total = float(np.trace(self.g))
        if not self.total > 0:
            raise InputError(f"all {self.n} samples are identical under {d.measure!r}: there is "
                             "no variation to partition.")

    def apply(self, q: np.ndarray) -> np.ndarray:
        """G q for a block of columns (n x k)."""
        if self.fc is not None:
            return self.fc @ (self.fc.T @ q)
        return self.g @ q

    def cross(self, q: np.ndarray) -> np.ndarray:
        """Q' G Q (k x k)."""
        if self.fc is not None:
            b = self.fc.T @ q
            return b.T @ b
        return q.T @ (self.g @ q)

    def explained(self, q: np.ndarray) -> float:
        """tr(Q' G Q): the variation in the span of Q (orthonormal columns)."""
        if q.shape[1] == 0:
            return 0.0
        if self.fc is not None:
            b = self.fc.T @ q
            return float(np.sum(b * b))
        return float(np.sum((self.g @ q) * q))

    def eigenvalues(self) -> np.ndarray:
        """All eigenvalues of G, largest first (cached on the Dissimilarity)."""
        return self._d.spectrum()


def negative_share(eigenvalues: np.ndarray) -> float:
    """|sum of negative eigenvalues| / tr(G), as in :func:`tallyform.pcoa` (0 if Euclidean)."""
    ev = np.asarray(eigenvalues, dtype=float)
    scale = np.abs(ev).max() if ev.size else 0.0
    total = ev.sum()
    if scale == 0 or total <= 0:
        return 0.0
    return float(max(0.0, -ev[ev < -1e-10 * scale].sum() / total))


# ---------------------------------------------------------------------------- predictors
def size_predictor(table: CommunityTable, size: str = "log_total") -> tuple[np.ndarray, str]:
    """The size column and a description of it."""
    require_absolute(table, "the size fraction of a size and shape partition")
    check_option("size", size, SIZE_OPTIONS)
    totals = table.totals.to_numpy()
    if (totals <= 0).any():
        bad = list(table.sample_labels[totals <= 0])[:8]
        raise InputError(f"sample(s) {bad} have a total of 0; size is undefined for them.",
                         hint="Drop empty samples (empty='drop') before partitioning.")
    if size == "total":
        return totals.astype(float), "total abundance"
    if size == "log_total":
        return np.log(totals), "log total abundance"
    if table.effort is None:
        raise DesignError("size='log_total_per_effort' needs a sampling-effort column; load the "
                          "table with effort='column name'.",
                          hint="Or use size='log_total'.")
    return np.log(totals / table.effort.to_numpy()), f"log total per {table.effort_name}"


def shape_dissimilarity(table, shape, measure, transform) -> Dissimilarity:
    from .dissimilarity import dissimilarity
    if shape != "same_measure":
        return dissimilarity(table, shape)
    v = table.values
    t = v.sum(axis=1, keepdims=True)
    equalised = v / t * t.mean()
    frame = pd.DataFrame(equalised, index=table.sample_labels, columns=table.taxon_labels)
    return dissimilarity(frame, measure, transform=transform)


def shape_coordinates(shape_d: Dissimilarity, *, max_dims: int | None = None
                      ) -> tuple[np.ndarray, np.ndarray, float]:
    """Orthonormal principal-coordinate vectors U (n x K) and their eigenvalues.

    From the SVD of the centred feature matrix when the shape measure has one (no n x n
    matrix), else from the eigen-decomposition of its G (positive eigenvalues only). Returns
    (U, eigenvalues, negative share of the shape G).
    """
    if shape_d.has_features:
        f = np.asarray(shape_d.features, dtype=float)
        fc = f - f.mean(axis=0)
        u, s, _ = np.linalg.svd(fc, full_matrices=False)
        ev = s * s
        neg = 0.0
    else:
        g = shape_d.gower()
        ev_all, vec = interruptible_eigh(g)
        ev_all, vec = ev_all[::-1], vec[:, ::-1]
        neg = negative_share(ev_all)
        u, ev = vec, ev_all
    tol = 1e-10 * (ev.max() if ev.size and ev.max() > 0 else 1.0)
    keep = ev > tol
    u, ev = u[:, keep], ev[keep]
    if max_dims is not None:
        u, ev = u[:, :max_dims], ev[:max_dims]
    if ev.size == 0:
        raise InputError(f"the profiles do not vary under {shape_d.measure!r}: every sample "
                         "has the same composition, so there is no shape to use.")
    return u, ev, neg


def shape_dims_limit(n: int, n_axes: int | None = None) -> int:
    """The most shape coordinates a partition of ``n`` samples may be given: n - 3 (one
    degree of freedom left for size and two for the residual), and no more than the shape
    dissimilarity has axes."""
    limit = n - 3
    return limit if n_axes is None else min(limit, n_axes)


def default_dims(eigenvalues: np.ndarray, n: int, *, total: float | None = None,
                 target: float = SHAPE_INERTIA_TARGET) -> tuple[int, str]:
    """Smallest k whose coordinates hold ``target`` of the shape inertia, capped."""
    ev = np.asarray(eigenvalues, float)
    total = float(ev.sum()) if total is None else total
    share = np.cumsum(ev) / total
    cap = max(1, (n - 2) // 3)
    k = int(np.searchsorted(share, target - 1e-12) + 1)
    k = min(k, ev.size)
    if k > cap:
        return cap, (f"{cap} shape dimensions: capped at floor((n - 2) / 3) = {cap} so that "
                     f"adjusted R^2 stays estimable; they hold {100 * share[cap - 1]:.1f} % of "
                     f"the variation in composition, the shape inertia (reaching "
                     f"{100 * target:.0f} % would take {k})")
    return k, (f"{k} shape dimension(s): the fewest holding at least {100 * target:.0f} % of "
               f"the variation in composition (shape inertia: {100 * share[k - 1]:.1f} %)")


# ---------------------------------------------------------------------------- fractions
def adjusted_r2(r2: float, n: int, m: int) -> float:
    """Ezekiel's (1930) adjusted R^2; m predictors (beyond the intercept)."""
    if m == 0:
        return 0.0
    if n - m - 1 <= 0:
        return float("nan")
    return 1.0 - (1.0 - r2) * (n - 1) / (n - m - 1)


def fractions_from_r2(r2_s: float, r2_t: float, r2_st: float, *, n: int, m_s: int,
                      m_t: int, adjusted: bool = True) -> dict:
    """Fractions [a] size only, [b] shared, [c] shape only, [d] residual (sum to 1)."""
    if adjusted:
        r2_s, r2_t = adjusted_r2(r2_s, n, m_s), adjusted_r2(r2_t, n, m_t)
        r2_st = adjusted_r2(r2_st, n, m_s + m_t)
    return {"size_only": r2_st - r2_t, "shared": r2_s + r2_t - r2_st,
            "shape_only": r2_st - r2_s, "residual": 1.0 - r2_st}


def centred_unit(z: np.ndarray) -> np.ndarray | None:
    zc = z - z.mean()
    nrm = np.linalg.norm(zc)
    if nrm <= 1e-12 * max(1.0, np.abs(z).max()) * np.sqrt(z.size):
        return None
    return zc / nrm


def partition_by_dims(var: Variation, z: np.ndarray | None, u: np.ndarray, n: int
                       ) -> pd.DataFrame:
    """Fractions for k = 1..K shape coordinates, in O(n K^2) after one pass over G.

    With orthonormal U (orthogonal to 1), tr(U_k' G U_k) is a running sum of u_j' G u_j, and
    the size column orthogonalised against U_k, z_k = z - U_k c_k (c = U'z), gives
    z_k' G z_k = z'Gz - 2 c_k . w_k + c_k' W_kk c_k with W = U'GU, w = U'Gz.
    """
    K = u.shape[1]
    W = var.cross(u)
    diag_cum = np.cumsum(np.diag(W))
    total = var.total
    rows = []
    if z is not None:
        gz = var.apply(z[:, None])[:, 0]
        zgz = float(z @ gz)
        w = u.T @ gz
        c = u.T @ z
        quad = 0.0       # c_k' W_kk c_k, grown one coordinate at a time
        cross = 0.0      # c_k . w_k
        norm2 = 1.0      # ||z_k||^2 (z has unit norm)
    r2_s = zgz / total if z is not None else 0.0
    for k in range(1, K + 1):
        j = k - 1
        r2_t = diag_cum[j] / total
        if z is not None:
            quad += 2.0 * c[j] * float(W[j, :j] @ c[:j]) + c[j] ** 2 * W[j, j]
            cross += c[j] * w[j]
            norm2 -= c[j] ** 2
            if norm2 > 1e-10:
                r2_st = r2_t + (zgz - 2.0 * cross + quad) / norm2 / total
                m_s = 1
            else:        # size lies in the span of the shape coordinates
                r2_st, m_s = r2_t, 0
        else:
            r2_st, m_s = r2_t, 0
        adj = fractions_from_r2(r2_s, r2_t, r2_st, n=n, m_s=m_s if z is not None else 0,
                                m_t=k)
        raw = fractions_from_r2(r2_s, r2_t, r2_st, n=n, m_s=m_s, m_t=k, adjusted=False)
        rows.append({"shape_dims": k, **adj,
                     **{f"{key}_unadjusted": val for key, val in raw.items()},
                     "r2_size": r2_s, "r2_shape": r2_t, "r2_both": r2_st,
                     "m_size": m_s if z is not None else 0})
    return pd.DataFrame(rows).set_index("shape_dims")
