"""Size and shape: how much of a dissimilarity's variation is total abundance, how much composition.

The variation of the chosen dissimilarity (its Gower-centred matrix G, Gower 1966) is
partitioned by distance-based redundancy analysis (db-RDA; Legendre & Anderson 1999, McArdle &
Anderson 2001) between two predictor sets (METHODS.md sections 1 and 5):

* size S: one column, the log of each sample's total (or the total, or log total per effort);
* shape T: the leading k principal coordinates of a size-free dissimilarity among the
  profiles (chi-square by default; Hellinger, Aitchison, or the measure under study applied to
  rows rescaled to a common total).

With R^2(Z) = tr(H_Z G) / tr(G) and Ezekiel's (1930) adjusted R^2, the fractions of Borcard et
al. (1992) and Peres-Neto et al. (2006) are::

    size only  [a] = R2a(S+T) - R2a(T)        shape only [c] = R2a(S+T) - R2a(S)
    shared     [b] = R2a(S) + R2a(T) - R2a(S+T)   (may be negative: shown, never clipped)
    residual   [d] = 1 - R2a(S+T)

The traces hold for non-Euclidean D as well (McArdle & Anderson 2001); the share of negative
eigenvalues of G is reported beside the fractions.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .dissimilarity import Dissimilarity
from .random import as_rng
from .errors import DesignError, InputError
from .results import ResultMixin
from .abundance import require_absolute
from .table import CommunityTable, as_table

__all__ = ["size_shape", "SizeShapeResult", "SIZE_OPTIONS", "SHAPE_OPTIONS", "FRACTIONS",
           "size_predictor", "shape_coordinates", "Variation", "fractions_from_r2"]

SIZE_OPTIONS = ("log_total", "total", "log_total_per_effort")
SHAPE_OPTIONS = ("chi_square", "hellinger", "aitchison", "same_measure")
FRACTIONS = ("size_only", "shared", "shape_only", "residual")
SHAPE_INERTIA_TARGET = 0.75


def _check_option(name: str, value, allowed) -> None:
    if value not in allowed:
        raise InputError(f"`{name}` must be one of {list(allowed)}; got {value!r}.")


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
    _check_option("size", size, SIZE_OPTIONS)
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


def _shape_dissimilarity(table, shape, measure, transform) -> Dissimilarity:
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
    n = shape_d.n
    if shape_d.has_features:
        f = np.asarray(shape_d.features, dtype=float)
        fc = f - f.mean(axis=0)
        u, s, _ = np.linalg.svd(fc, full_matrices=False)
        ev = s * s
        neg = 0.0
    else:
        g = shape_d.gower()
        ev_all, vec = np.linalg.eigh(g)
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
                     f"the shape inertia (reaching {100 * target:.0f} % would take {k})")
    return k, (f"{k} shape dimension(s): the fewest holding at least {100 * target:.0f} % of "
               f"the shape inertia ({100 * share[k - 1]:.1f} %)")


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


def _centred_unit(z: np.ndarray) -> np.ndarray | None:
    zc = z - z.mean()
    nrm = np.linalg.norm(zc)
    if nrm <= 1e-12 * max(1.0, np.abs(z).max()) * np.sqrt(z.size):
        return None
    return zc / nrm


def _partition_by_dims(var: Variation, z: np.ndarray | None, u: np.ndarray, n: int
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


# ---------------------------------------------------------------------------- result
@dataclass(frozen=True, eq=False)
class SizeShapeResult(ResultMixin):
    """The size and shape partition of one (transform, measure) choice.

    Attributes
    ----------
    fractions : Series
        Adjusted shares ``size_only``, ``shared``, ``shape_only``, ``residual`` (sum to 1).
    fractions_unadjusted : Series
        The same from unadjusted R^2.
    r2 : DataFrame
        R^2, adjusted R^2 and degrees of freedom of size, shape and both together.
    shape_dims : int
        Number of shape coordinates used; ``shape_dims_reason`` says why.
    negative_share : float
        Share of the negative eigenvalues of G (0 for Euclidean-embeddable measures).
    tests : DataFrame or None
        Permutation tests of the two testable fractions (size only, shape only).
    """

    measure: str
    transform: str | None
    size: str
    shape: str
    n: int
    fractions: pd.Series
    fractions_unadjusted: pd.Series
    r2: pd.DataFrame
    shape_dims: int
    shape_dims_reason: str
    shape_inertia_share: float
    negative_share: float
    shape_negative_share: float
    tests: pd.DataFrame | None = None
    notes: tuple = ()
    provenance: dict = field(default_factory=dict)
    _dims: pd.DataFrame = field(default=None, repr=False)

    def by_dims(self) -> pd.DataFrame:
        """Fractions for k = 1 .. kmax shape dimensions (adjusted, then unadjusted columns)."""
        return self._dims.copy()

    def figure(self, *, kind: str = "bars", **kwargs):
        """A plotly figure: ``kind='bars'`` the partition bar, ``'dims'`` fractions by k.

        Keyword arguments go to :func:`tallyform.render.plots.partition_bars` or
        :func:`~tallyform.render.plots.dims_figure` (e.g. ``present=True``).
        """
        _check_option("kind", kind, ("bars", "dims"))
        if kind == "dims":
            from ..render.partition_plots import dims_figure  # lazy: plotly is outer ring
            return dims_figure(self, **kwargs)
        from ..render.partition_plots import partition_bars
        return partition_bars(self, **kwargs)

    def to_frame(self) -> pd.DataFrame:
        out = pd.DataFrame({"share": self.fractions,
                            "share_unadjusted": self.fractions_unadjusted})
        if self.tests is not None:
            out = out.join(self.tests[["statistic", "pvalue"]], how="left")
        out.index.name = "fraction"
        return out

    def _title(self) -> str:
        tr = f"{self.transform} + " if self.transform and self.transform != "none" else ""
        return (f"Size and shape of {tr}{self.measure} (n = {self.n}; size: {self.size}; "
                f"shape: {self.shape_dims} {self.shape} dimension(s))")


# ---------------------------------------------------------------------------- public
def size_shape(table, measure: str = "bray_curtis", *, transform=None,
               size: str = "log_total", shape: str = "chi_square", shape_dims: int | None = None,
               n_permutations: int = 0, rng=None, progress=None,
               cancel=None) -> SizeShapeResult:
    """Partition the variation of a dissimilarity into size, shared, shape and residual.

    Parameters
    ----------
    table : CommunityTable, DataFrame or array, shape (n_samples, n_taxa)
    measure : str
        The dissimilarity under study (a key of ``tallyform.MEASURES``).
    transform : str or Transform, optional
        Applied to the counts before ``measure``.
    size : {'log_total', 'total', 'log_total_per_effort'}
        The size predictor.
    shape : {'chi_square', 'hellinger', 'aitchison', 'same_measure'}
        Size-free dissimilarity whose principal coordinates are the shape predictors;
        ``'same_measure'`` applies ``measure`` (and ``transform``) to rows rescaled to the mean
        total.
    shape_dims : int, optional
        Number of shape coordinates; default the fewest holding 75 % of the shape inertia,
        capped at floor((n - 2) / 3).
    n_permutations : int, default 0
        Permutations for the tests of the size-only and shape-only fractions (0: no tests).
    rng : None, int or numpy.random.Generator
    progress, cancel : callables, optional
        ``progress(done, total)`` and ``cancel() -> bool`` for the permutation tests.

    Returns
    -------
    SizeShapeResult

    Notes
    -----
    R^2 of predictors Z is tr(H G) / tr(G), H the hat matrix of [1, Z] (McArdle & Anderson
    2001); adjusted R^2 after Ezekiel (1930); fractions after Borcard et al. (1992) and
    Peres-Neto et al. (2006). The shared fraction can be negative (suppression); it is
    reported as computed.

    References
    ----------
    Borcard D, Legendre P, Drapeau P (1992) Ecology 73:1045-1055.
    Ezekiel M (1930) Methods of correlation analysis. Wiley.
    Gower JC (1966) Biometrika 53:325-338.
    Legendre P, Anderson MJ (1999) Ecological Monographs 69:1-24.
    McArdle BH, Anderson MJ (2001) Ecology 82:290-297.
    Peres-Neto PR, Legendre P, Dray S, Borcard D (2006) Ecology 87:2614-2625.
    """
    from .dissimilarity import dissimilarity
    _check_option("size", size, SIZE_OPTIONS)
    _check_option("shape", shape, SHAPE_OPTIONS)
    table = as_table(table)
    n = table.n_samples
    if n < 5:
        raise DesignError(f"the partition needs at least 5 samples; the table has {n}.")
    d = dissimilarity(table, measure, transform=transform)
    return _size_shape_from(table, d, measure=measure, transform=transform, size=size,
                            shape=shape, shape_dims=shape_dims,
                            n_permutations=n_permutations, rng=rng, progress=progress,
                            cancel=cancel)


def _cached_shape(table, shape, measure, transform, local=None):
    """Shape coordinates, from a per-call dict, the shared cache, or computed."""
    from .cache import shared_cache
    from .transforms import get_transform
    key = ("shape", table.fingerprint, shape)
    if shape == "same_measure":
        key += (str(measure), get_transform(transform).name)
    if local is not None and key in local:
        return local[key]
    hit = shared_cache.get(key)
    if hit is None:
        sd = _shape_dissimilarity(table, shape, measure, transform)
        u, ev, neg = shape_coordinates(sd)
        u.setflags(write=False)
        ev.setflags(write=False)
        hit = shared_cache.put(key, (u, ev, neg, sd.measure), u.nbytes + ev.nbytes)
    if local is not None:
        local[key] = hit
    return hit


def _size_shape_from(table, d, *, measure, transform, size, shape, shape_dims,
                     n_permutations, rng, progress, cancel, shape_cache=None):
    n = table.n_samples
    z_raw, size_label = size_predictor(table, size)
    z = _centred_unit(z_raw)
    u, ev, shape_neg, shape_measure = _cached_shape(table, shape, measure, transform,
                                                    shape_cache)
    var = Variation(d)
    notes = list(d.notes)
    shape_total = float(ev.sum())
    cap = max(1, (n - 2) // 3)
    if shape_dims is None:
        k, reason = default_dims(ev, n, total=shape_total)
    else:
        k = int(shape_dims)
        limit = min(ev.size, n - 3)
        if not 1 <= k <= limit:
            raise InputError(f"`shape_dims` must be between 1 and {limit} for these data "
                             f"({ev.size} shape coordinate(s), {n} samples); got {shape_dims}.")
        reason = (f"{k} shape dimension(s), as requested; they hold "
                  f"{100 * ev[:k].sum() / shape_total:.1f} % of the shape inertia")
        if k > cap:
            notes.append(f"{k} shape dimensions exceed floor((n - 2) / 3) = {cap}: adjusted "
                         "R^2 values become unstable with so many predictors.")
    kmax = min(ev.size, max(cap, k))
    dims = _partition_by_dims(var, z, u[:, :kmax], n)
    row = dims.loc[k]
    if z is None:
        notes.append("every sample has the same size, so the size fraction is 0 by definition.")
    elif row["m_size"] == 0:
        notes.append("the size predictor lies in the span of the shape coordinates: size only "
                     "is 0 and all size-related variation is counted as shared.")
    eig = var.eigenvalues()
    neg = negative_share(eig)
    if neg > 0.001:
        notes.append(f"negative eigenvalues hold {100 * neg:.1f} % of the variation of "
                     f"{measure!r} (it is not Euclidean): the fractions are computed from "
                     "traces, which stay exact, but a PCoA of this measure cannot show all of it.")
    if row["shared"] < -0.01:
        notes.append(f"the shared fraction is negative ({100 * row['shared']:.1f} %): size and "
                     "shape act as suppressors of each other here; it is shown, not clipped.")
    frac = pd.Series({f: float(row[f]) for f in FRACTIONS}, name="share")
    frac_raw = pd.Series({f: float(row[f"{f}_unadjusted"]) for f in FRACTIONS},
                         name="share_unadjusted")
    m_s = int(row["m_size"])
    r2 = pd.DataFrame({
        "r2": [row["r2_size"], row["r2_shape"], row["r2_both"]],
        "adj_r2": [adjusted_r2(row["r2_size"], n, m_s), adjusted_r2(row["r2_shape"], n, k),
                   adjusted_r2(row["r2_both"], n, m_s + k)],
        "df": [m_s, k, m_s + k]}, index=pd.Index(["size", "shape", "size + shape"],
                                                  name="predictors"))
    tests = None
    if n_permutations:
        tests = _fraction_tests(d, z, u[:, :k], n_permutations=n_permutations, rng=rng,
                                progress=progress, cancel=cancel)
        notes.extend(tests.attrs.get("notes", ()))
    tr_name = None if d.transform in (None, "none") else d.transform
    prov = {"measure": measure, "transform": tr_name, "size": size, "size_label": size_label,
            "shape": shape, "shape_measure": shape_measure, "shape_dims": k,
            "n_permutations": n_permutations, "n_samples": n, "table": table.fingerprint}
    return SizeShapeResult(
        measure=measure, transform=tr_name, size=size, shape=shape, n=n, fractions=frac,
        fractions_unadjusted=frac_raw, r2=r2, shape_dims=k, shape_dims_reason=reason,
        shape_inertia_share=float(ev[:k].sum() / shape_total), negative_share=neg,
        shape_negative_share=shape_neg, tests=tests, notes=tuple(notes), provenance=prov,
        _dims=dims)


def _fraction_tests(d, z, u, *, n_permutations, rng, progress, cancel) -> pd.DataFrame:
    """Partial db-RDA permutation tests of [a] (size | shape) and [c] (shape | size)."""
    from .permutation import permutation_f_test
    rng = as_rng(rng)
    n = d.n
    one = np.ones((n, 1))
    zs = np.empty((n, 0)) if z is None else z[:, None]
    full = np.hstack([one, zs, u])
    rows, notes = {}, []
    plan = [("size_only", np.hstack([one, u])), ("shape_only", np.hstack([one, zs]))]
    for step, (name, reduced) in enumerate(plan):
        if name == "size_only" and z is None:
            rows[name] = {"statistic": np.nan, "pvalue": np.nan, "df": 0,
                          "n_permutations": 0}
            continue
        sub_progress = None
        if progress is not None:
            def sub_progress(done, total, _s=step):
                progress(_s * total + done, 2 * total)
        res = permutation_f_test(d, full, reduced, n_permutations=n_permutations, rng=rng,
                                 progress=sub_progress, cancel=cancel)
        rows[name] = {"statistic": res.statistic, "pvalue": res.pvalue, "df": res.df[0],
                      "n_permutations": res.n_permutations}
        notes.extend(getattr(res, "notes", ()))
    out = pd.DataFrame.from_dict(rows, orient="index")
    out.index.name = "fraction"
    out.attrs["notes"] = tuple(dict.fromkeys(notes))
    return out
