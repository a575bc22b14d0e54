"""The statistics of the shape and spread tests, for a whole batch of relabellings at once.

Samples are rows of a feature matrix F (n x q) with a signature s (+1 on real axes, -1 on
the imaginary principal axes of a non-Euclidean measure, Gower 1966), so that every squared
distance is ||f_i - f_j||_s^2 = sum_k s_k (f_ik - f_jk)^2. For a batch of B relabellings
(rows of group codes), the group centroids are one (B G) x n by n x q product, and every
statistic below follows from them without an n x n matrix. Every statistic is recomputed
from scratch for each relabelling (centroids included), so after rarefaction, when the
samples are exchangeable under the null, the permutation test is exact.

Shape (location):
- ``welch``: W = sum_g w_g ||c_g - c_w||^2 / (G - 1), w_g = n_g / tr(S_g), c_w the
  w-weighted mean of the centroids c_g and tr(S_g) = SS_g / (n_g - 1) the total variance of
  group g. Each group is weighed by the precision of its own centroid, as in Welch's (1951)
  analysis of variance (here with the trace of each group's covariance matrix in place of
  its variance), so groups with unequal spreads do not make it significant on their own.
- ``pseudo_f``: PERMANOVA's pseudo-F (Anderson 2001).

Spread: distances of samples to their group centroid (Anderson 2006), rescaled by
n_g / (n_g - 1) so that groups of different sizes have the same expectation
(E ||f_i - c_g||^2 = (n_g - 1) / n_g tr(Sigma)), and, for measures linear in the profiles, with
each sample's counting noise removed: if f_i = f~_i + e_i with E e_i = 0 and
E ||e_i||^2 = v_i, then E ||f_i - c_g||^2 = ||f~_i - c~_g||^2 + (1 - 2 / n_g) v_i
+ (1 / n_g^2) sum_{l in g} v_l, so subtracting the estimated noise (see
:func:`tallyform.core.rarefaction.multinomial_noise`) leaves the biological spread. The
statistic is the one-way ANOVA F of the distances z_i = sqrt(max(u_i, 0)).

References
----------
Anderson, M. J. (2001). Austral Ecology 26, 32-46. Anderson, M. J. (2006). Biometrics 62,
245-253. Gower, J. C. (1966). Biometrika 53, 325-338. Welch, B. L. (1951). On the
comparison of several mean values: an alternative approach. Biometrika 38, 330-336.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Embedding", "location_statistic", "spread_statistic", "spread_squared",
           "spread_distances", "batch_size"]

#: Bytes of the per-batch working arrays (centroids, cross products).
_BATCH_BYTES = 32 * 2**20


@dataclass(frozen=True, eq=False)
class Embedding:
    """Samples as points: features, their signature, and their counting noise (or None)."""

    features: np.ndarray
    sign: np.ndarray | None = None
    noise: np.ndarray | None = None

    @property
    def n(self) -> int:
        return self.features.shape[0]

    def signed(self, a: np.ndarray) -> np.ndarray:
        return a if self.sign is None else a * self.sign

    def norms(self) -> np.ndarray:
        """||f_i||_s^2 for every sample."""
        f = self.features
        return np.einsum("ij,ij->i", f, self.signed(f))


def batch_size(n: int, q: int, n_groups: int) -> int:
    """Relabellings per batch for about 32 MB of working arrays."""
    per = 8 * n_groups * (n + q + 2 * n)
    return int(max(8, min(4096, _BATCH_BYTES // max(per, 1))))


def _indicators(labels: np.ndarray, n_groups: int) -> np.ndarray:
    """(B, G, n) 0/1 membership of every sample in every group, per relabelling."""
    b, n = labels.shape
    m = np.zeros((b, n_groups, n))
    m[np.arange(b)[:, None], labels, np.arange(n)[None, :]] = 1.0
    return m


def _centroids(emb: Embedding, m: np.ndarray, ng: np.ndarray) -> np.ndarray:
    b, g, n = m.shape
    c = (m.reshape(b * g, n) @ emb.features).reshape(b, g, -1)
    return c / ng[None, :, None]


def _f_ratio(ssb, ssw, df_b, df_w):
    """(ssb / df_b) / (ssw / df_w); a perfect fit gives +inf (or NaN if ssb is 0 too)."""
    scale = np.maximum(np.abs(ssb) + np.abs(ssw), 1e-300)
    ssw = np.where(np.abs(ssw) <= 1e-12 * scale, 0.0, ssw)
    with np.errstate(divide="ignore", invalid="ignore"):
        f = (ssb / df_b) / (ssw / df_w)
    return np.where(ssw > 0, f, np.where(ssb > 1e-12 * scale, np.inf, np.nan))


def location_statistic(emb: Embedding, labels: np.ndarray, ng: np.ndarray, *,
                       statistic: str = "welch", norms: np.ndarray | None = None) -> np.ndarray:
    """The shape statistic for every row of ``labels`` (B x n group codes)."""
    labels = np.atleast_2d(labels)
    n_groups, n = ng.size, labels.shape[1]
    r = emb.norms() if norms is None else norms
    m = _indicators(labels, n_groups)
    c = _centroids(emb, m, ng)
    cn = np.einsum("bgq,bgq->bg", c, emb.signed(c))              # ||c_g||_s^2
    if statistic == "pseudo_f":
        fbar = emb.features.mean(axis=0)
        fb2 = float(fbar @ emb.signed(fbar))
        sst = r.sum() - n * fb2
        ssb = (ng * cn).sum(axis=1) - n * fb2
        return _f_ratio(ssb, sst - ssb, n_groups - 1, n - n_groups)
    ssw = m @ r - ng * cn                                         # (B, G)
    tr = ssw / (ng - 1)
    floor = 1e-12 * max(float(np.abs(r).max(initial=0.0)), 1e-300)
    w = ng / np.maximum(tr, floor)
    cw = np.einsum("bg,bgq->bq", w, c) / w.sum(axis=1)[:, None]
    d2 = (cn - 2 * np.einsum("bgq,bq->bg", emb.signed(c), cw)
          + np.einsum("bq,bq->b", cw, emb.signed(cw))[:, None])
    return (w * d2).sum(axis=1) / (n_groups - 1)


def spread_squared(emb: Embedding, labels: np.ndarray, ng: np.ndarray, *,
                   norms: np.ndarray | None = None) -> np.ndarray:
    """u = n_g / (n_g - 1) (z^2 - noise terms), B x n: squared distances of samples to their
    group centroid, rescaled, with the counting noise removed when ``emb.noise`` is set."""
    labels = np.atleast_2d(labels)
    b, n = labels.shape
    n_groups = ng.size
    r = emb.norms() if norms is None else norms
    m = _indicators(labels, n_groups)
    c = _centroids(emb, m, ng)
    cn = np.einsum("bgq,bgq->bg", c, emb.signed(c))
    cross = (emb.features @ emb.signed(c).reshape(b * n_groups, -1).T).reshape(n, b, n_groups)
    own = np.take_along_axis(cross.transpose(1, 0, 2), labels[:, :, None], axis=2)[:, :, 0]
    z2 = r[None, :] - 2.0 * own + np.take_along_axis(cn, labels, axis=1)
    nl = ng[labels].astype(np.float64)
    if emb.noise is not None:
        v = emb.noise
        vg = m @ v                                                # (B, G) noise per group
        z2 = z2 - (1.0 - 2.0 / nl) * v[None, :] - np.take_along_axis(vg, labels, 1) / nl ** 2
    return nl / (nl - 1.0) * z2


def spread_distances(emb: Embedding, labels: np.ndarray, ng: np.ndarray, *,
                     norms: np.ndarray | None = None) -> np.ndarray:
    """z = sqrt(max(u, 0)) (B x n), u from :func:`spread_squared`: a sample whose noise
    estimate exceeds its squared distance sits at its centroid as closely as we can tell."""
    return np.sqrt(np.clip(spread_squared(emb, labels, ng, norms=norms), 0.0, None))


def spread_statistic(emb: Embedding, labels: np.ndarray, ng: np.ndarray, *,
                     norms: np.ndarray | None = None) -> np.ndarray:
    """One-way ANOVA F of the distances to the group centroids, for every row of labels."""
    labels = np.atleast_2d(labels)
    n_groups, n = ng.size, labels.shape[1]
    z = spread_distances(emb, labels, ng, norms=norms)
    m = _indicators(labels, n_groups)
    gm = np.einsum("bgn,bn->bg", m, z) / ng
    tm = z.mean(axis=1)
    ssb = (ng * (gm - tm[:, None]) ** 2).sum(axis=1)
    sst = ((z - tm[:, None]) ** 2).sum(axis=1)
    return _f_ratio(ssb, sst - ssb, n_groups - 1, n - n_groups)
