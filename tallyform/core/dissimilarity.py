"""The Dissimilarity object: condensed distances + labels + provenance (+ feature matrix).

Condensed order is scipy's (``scipy.spatial.distance.squareform``): pairs (0,1), (0,2), ...,
(0,n-1), (1,2), ... For measures that are Euclidean distances between rows of some feature
matrix F (Euclidean, Hellinger, chord, chi-square, Aitchison), ``features`` holds F; the
condensed vector is then computed only when asked for, so analyses that can work in O(n p)
(ordination by SVD, PERMANOVA by projections) never form an n x n matrix.
"""
from __future__ import annotations

from typing import Mapping

import numpy as np
import pandas as pd

from .errors import InputError
from .cache import shared_cache
from .memory import check_memory

__all__ = ["Dissimilarity", "condensed_index", "dissimilarity", "feature_matrix"]


def condensed_index(n: int, i: np.ndarray, j: np.ndarray) -> np.ndarray:
    """Position of pair (i, j), i != j, in a condensed vector of n items."""
    i, j = np.minimum(i, j), np.maximum(i, j)
    return n * i - i * (i + 1) // 2 + (j - i - 1)


def subset_positions(labels, which) -> np.ndarray:
    """Positions of ``which`` (sample labels, or a boolean mask) among ``labels``; an
    InputError names unknown labels."""
    arr = np.asarray(which)
    if arr.dtype == bool:
        return np.flatnonzero(arr)
    pos = {x: i for i, x in enumerate(labels)}
    missing = [str(x) for x in arr if str(x) not in pos]
    if missing:
        raise InputError(f"unknown sample label(s): {missing[:8]}.")
    return np.array([pos[str(x)] for x in arr], dtype=int)


class Dissimilarity:
    """Dissimilarities between samples, with what produced them.

    Parameters
    ----------
    condensed : array_like, shape (n*(n-1)/2,), optional
        Condensed distances in scipy order. May be omitted when ``features`` is given.
    labels : sequence of str
        Sample labels, length n.
    measure : str
        Name of the measure (a key of the measure registry, or ``"custom"``).
    transform : str, optional
        Name of the transformation applied to the counts before the measure.
    params : mapping, optional
        Every other choice (pseudocount, exponent, weights...), kept for provenance.
    features : ndarray, shape (n, q), optional
        A matrix whose row-to-row Euclidean distances are these dissimilarities.
    properties : mapping, optional
        ``metric``, ``euclidean``, ``size_free`` flags of the measure.
    notes : tuple of str
        Things the user should know (zero replacement used, taxa removed...).
    dtype : numpy dtype, default float64
        float32 halves memory for very large n.

    Examples
    --------
    >>> d = Dissimilarity([3.0, 4.0, 5.0], ["a", "b", "c"], measure="custom")
    >>> d.square()
    array([[0., 3., 4.],
           [3., 0., 5.],
           [4., 5., 0.]])
    """

    def __init__(self, condensed=None, labels=None, *, measure: str, transform: str | None = None,
                 params: Mapping | None = None, features=None,
                 properties: Mapping | None = None, notes: tuple = (), dtype=np.float64,
                 _owned: bool = False):
        # _owned: ``condensed`` was just computed by tallyform and is referenced nowhere
        # else, so it is kept as it is instead of copied (a copy of 10^8 distances is 0.8 GB)
        self._dtype = np.dtype(dtype)
        if features is not None:
            features = _numbers(features, np.float64, "`features`")
            if features.ndim != 2:
                raise InputError("`features` must be a 2-D array (samples x features).")
            if not np.isfinite(features).all():
                raise InputError("`features` contains non-finite values.")
            features.setflags(write=False)
        if condensed is None and features is None:
            raise InputError("give condensed distances or a feature matrix.")
        n = features.shape[0] if features is not None else None
        if condensed is not None:
            if _owned and isinstance(condensed, np.ndarray) and condensed.dtype == self._dtype:
                condensed = condensed.ravel()
            else:
                condensed = _numbers(condensed, self._dtype, "the condensed distances").ravel()
            m = condensed.size
            nn = int(round((1 + np.sqrt(1 + 8 * m)) / 2))
            if nn * (nn - 1) // 2 != m:
                raise InputError(f"a condensed vector of length {m} does not correspond to "
                                 "any number of samples.")
            if n is not None and nn != n:
                raise InputError(f"{nn} samples in the distances but {n} feature rows.")
            n = nn
            k = first_invalid(condensed)
            if k >= 0:
                i, j = _pair_of(n, k)
                lab = list(labels) if labels is not None else [f"s{x + 1}" for x in range(n)]
                raise InputError(f"dissimilarity between {lab[i]!r} and {lab[j]!r} is "
                                 f"{float(condensed[k])!r}; dissimilarities must be finite and >= 0.")
            condensed.setflags(write=False)
        if labels is None:
            labels = [f"s{i + 1}" for i in range(n)]
        labels = pd.Index([str(x) for x in labels], dtype=object, name="sample")
        if len(labels) != n:
            raise InputError(f"{len(labels)} labels for {n} samples.")
        if labels.has_duplicates:
            raise InputError(f"sample labels repeat: {sorted(set(labels[labels.duplicated()]))}.")
        if n < 2:
            raise InputError("a dissimilarity needs at least 2 samples.")
        self._condensed = condensed
        self._features = features
        self.labels = labels
        self.measure = str(measure)
        self.transform = None if transform is None else str(transform)
        self.params = dict(params or {})
        self.properties = dict(properties or {})
        self.notes = tuple(notes)
        self._cache: dict = {}

    # ------------------------------------------------------------------ constructors
    @classmethod
    def from_square(cls, matrix, labels=None, *, measure: str = "custom", **kw):
        """From a symmetric matrix with a zero diagonal (checked to 1e-10 relative)."""
        if isinstance(matrix, pd.DataFrame):
            labels = list(matrix.index) if labels is None else labels
            matrix = matrix.to_numpy()
        try:
            a = np.asarray(matrix, dtype=np.float64)
        except (TypeError, ValueError):
            raise InputError("a dissimilarity matrix must hold numbers only.",
                             hint="Convert the matrix to numbers first.") from None
        if a.ndim != 2 or a.shape[0] != a.shape[1]:
            raise InputError(f"a dissimilarity matrix must be square; got shape {a.shape}.")
        scale = max(float(np.nanmax(np.abs(a))) if a.size else 0.0, 1e-300)
        if not np.allclose(a, a.T, rtol=0, atol=1e-10 * scale, equal_nan=True):
            i, j = np.unravel_index(np.nanargmax(np.abs(a - a.T)), a.shape)
            raise InputError(f"the matrix is not symmetric: [{i}, {j}] = {a[i, j]!r} but "
                             f"[{j}, {i}] = {a[j, i]!r}.")
        if np.any(np.abs(np.diag(a)) > 1e-10 * scale):
            i = int(np.argmax(np.abs(np.diag(a))))
            raise InputError(f"the diagonal must be 0; entry [{i}, {i}] is {a[i, i]!r}.")
        iu = np.triu_indices(a.shape[0], 1)
        return cls(a[iu], labels, measure=measure, **kw)

    @classmethod
    def from_features(cls, features, labels=None, *, measure: str = "euclidean", **kw):
        """Euclidean distances between the rows of ``features`` (computed lazily)."""
        return cls(None, labels, measure=measure, features=features, **kw)

    # ------------------------------------------------------------------ views
    @property
    def n(self) -> int:
        return len(self.labels)

    def __len__(self) -> int:
        return self.n

    @property
    def dtype(self):
        return self._dtype

    @property
    def features(self) -> np.ndarray | None:
        """Feature matrix whose Euclidean distances are these dissimilarities, or None."""
        return self._features

    @property
    def has_features(self) -> bool:
        return self._features is not None

    @property
    def condensed(self) -> np.ndarray:
        """Condensed distances (read-only), computed from the features on first use."""
        if self._condensed is None:
            n = self.n
            check_memory(n * (n - 1) / 2 * self._dtype.itemsize,
                         f"the condensed distances of {n} samples",
                         alternatives="Work from the feature matrix (ordination with dims=..., "
                                      "PERMANOVA) or use dtype='float32'.")
            from .kernels import euclidean_condensed
            c = np.asarray(euclidean_condensed(self._features, dtype=self._dtype),
                           dtype=self._dtype)
            c.setflags(write=False)
            self._condensed = c
        return self._condensed

    def square(self, dtype=None) -> np.ndarray:
        """The full symmetric n x n matrix (a new array).

        Filled from the condensed vector block of rows by block of rows, so no converted
        copy of the condensed vector is made (float32 distances into a float64 matrix).
        """
        dt = np.dtype(dtype or self._dtype)
        n = self.n
        check_memory(n ** 2 * dt.itemsize, f"a {n} x {n} distance matrix",
                     alternatives="Use the condensed vector, or dtype='float32'.")
        from .kernels import fill_square
        return fill_square(self.condensed, np.empty((n, n), dtype=dt))

    def squared(self) -> np.ndarray:
        """The full n x n matrix of squared dissimilarities D^2, float64 (a new array)."""
        n = self.n
        check_memory(n ** 2 * 8, f"a {n} x {n} matrix of squared distances",
                     alternatives="Use the condensed vector, or a tiled dissimilarity "
                                  "(chunks=).")
        from .kernels import squared_square
        return squared_square(self.condensed, n)

    def gower(self) -> np.ndarray:
        """Gower-centred matrix G = -1/2 C D^2 C (Gower 1966), float64, cached, read-only.

        Its trace is the total sum of squares; eigenvalues of G are the PCoA eigenvalues.
        """
        if "gower" not in self._cache:
            n = self.n
            check_memory(2 * n * n * 8, f"the {n} x {n} Gower-centred matrix",
                         alternatives="For measures with a feature matrix, use the feature "
                                      "path (it needs no n x n matrix).")
            if self._features is not None:
                f = self._features - self._features.mean(axis=0)
                g = f @ f.T
                g = (g + g.T) / 2
            else:                  # one pass over D^2 (kernels.gower_centre), symmetric
                from .kernels import gower_centre
                g = gower_centre(self.squared())
            g.setflags(write=False)
            self._cache["gower"] = g
        return self._cache["gower"]

    @property
    def has_gower(self) -> bool:
        """True when the Gower-centred matrix is already computed (held in the cache)."""
        return "gower" in self._cache

    def spectrum(self, *, compute: bool = True) -> np.ndarray | None:
        """All eigenvalues of G, largest first (negatives included), cached.

        From the SVD of the centred features when there are features (no negatives), else
        from G. With ``compute=False`` returns the cached spectrum or None, so that callers
        that only need it for a note can use it when it is already known.
        """
        if "eigenvalues" not in self._cache:
            if not compute:
                return None
            if self._features is not None:
                f = self._features - self._features.mean(axis=0)
                s = np.linalg.svd(f, compute_uv=False)
                ev = np.zeros(self.n)
                ev[: s.size] = s * s
            else:
                ev = np.linalg.eigvalsh(self.gower())[::-1].copy()
            ev.setflags(write=False)
            self._cache["eigenvalues"] = ev
        return self._cache["eigenvalues"]

    def total_ss(self) -> float:
        """Total sum of squares: sum of squared distances / n = trace(G)."""
        if self._features is not None:
            f = self._features - self._features.mean(axis=0)
            return float(np.sum(f * f))
        c = self.condensed
        total = 0.0
        for k in range(0, c.size, 1 << 20):    # in float64, chunk by chunk (no full copy)
            part = np.asarray(c[k:k + (1 << 20)], dtype=np.float64)
            total += float(np.dot(part, part))
        return total / self.n

    def subset(self, which) -> "Dissimilarity":
        """Dissimilarities among some samples (labels or a boolean mask), same provenance."""
        idx = subset_positions(self.labels, which)
        kw = dict(measure=self.measure, transform=self.transform, params=self.params,
                  properties=self.properties, notes=self.notes, dtype=self._dtype)
        if self._features is not None:
            return Dissimilarity(None, self.labels[idx], features=self._features[idx], **kw)
        ii, jj = np.triu_indices(len(idx), 1)
        c = self.condensed[condensed_index(self.n, idx[ii], idx[jj])]
        return Dissimilarity(c, self.labels[idx], **kw)

    def to_frame(self) -> pd.DataFrame:
        """The square matrix as a labelled DataFrame."""
        return pd.DataFrame(self.square(), index=self.labels.copy(), columns=self.labels.copy())

    @property
    def provenance(self) -> dict:
        """Everything needed to recompute these dissimilarities."""
        return {"measure": self.measure, "transform": self.transform, **self.params,
                "n_samples": self.n, "dtype": str(self._dtype)}

    def __repr__(self) -> str:
        tr = f", transform={self.transform!r}" if self.transform else ""
        feat = f", features {self._features.shape[1]}" if self._features is not None else ""
        return f"Dissimilarity({self.measure!r}{tr}, {self.n} samples{feat})"

    def _repr_html_(self) -> str:
        head = f"<p><b>{self!r}</b></p>".replace("<D", "&lt;D")
        if self.n <= 12:
            return head + self.to_frame().to_html(float_format="{:.4g}".format)
        c = self.condensed
        return head + (f"<p>min {c.min():.4g}, median {np.median(c):.4g}, "
                       f"max {c.max():.4g}</p>")


def _numbers(values, dtype, what: str) -> np.ndarray:
    """A new array of numbers, or an InputError (never numpy's conversion message)."""
    try:
        return np.array(values, dtype=dtype, copy=True)
    except (TypeError, ValueError):
        raise InputError(f"{what} must be numbers.",
                         hint="Convert them to numbers first.") from None


def first_invalid(values: np.ndarray, *, chunk: int = 1 << 20) -> int:
    """Position of the first value that is not finite or is negative, or -1.

    Checked in chunks, so that no boolean array of the full length is formed.
    """
    flat = values.ravel()
    for s in range(0, flat.size, chunk):
        part = flat[s:s + chunk]
        ok = np.isfinite(part)
        ok &= part >= 0
        if not ok.all():
            return s + int(np.argmin(ok))
    return -1


def _pair_of(n: int, k: int) -> tuple[int, int]:
    """Inverse of :func:`condensed_index` for one position."""
    i = int(n - 2 - np.floor(np.sqrt(-8 * k + 4 * n * (n - 1) - 7) / 2 - 0.5))
    j = int(k + i + 1 - n * (n - 1) // 2 + (n - i) * ((n - i) - 1) // 2)
    return i, j


# ====================================================================== computing from data
_DTYPES = {"float64": np.float64, "float32": np.float32}


def resolve_dtype(dtype) -> np.dtype:
    try:
        dt = np.dtype(dtype)
    except TypeError:
        dt = None
    if dt is None or dt.name not in _DTYPES:
        raise InputError(f"`dtype` must be 'float64' or 'float32'; got {dtype!r}.")
    return dt


def prepare_measure(data, measure, transform, params: dict, dtype):
    """Validate everything, then transform: (table, measure record, transform, x, context)."""
    from .measures import MeasureContext, get_measure
    from .table import CommunityTable
    from .transforms import listing, get_transform

    rec = get_measure(measure)
    unknown = sorted(set(params) - set(rec.options))
    if unknown:
        allowed = sorted(rec.options) or "none"
        raise InputError(f"measure {rec.name!r} has no option(s) {unknown}; its options are: "
                         f"{allowed}.")
    tr = get_transform(transform)
    tab = data if isinstance(data, CommunityTable) else CommunityTable(data, empty="keep")
    labels = tab.sample_labels
    x = tr.apply(tab.values, labels=labels)
    if rec.nonnegative and np.any(x < 0):
        raise InputError(f"the {rec.label} measure needs values >= 0, but the transformation "
                         f"{tr.name!r} gives negative values.",
                         hint="Use a measure defined for any real values (euclidean, "
                              "manhattan, canberra, gower) after this transformation.")
    empty = np.flatnonzero(~(x != 0).any(axis=1))
    notes: list[str] = []
    if empty.size:
        names = [str(labels[i]) for i in empty]
        if rec.empty_samples == "error":
            raise InputError(
                f"the {rec.label} measure is undefined for samples with nothing in them; "
                f"{len(names)} sample(s) are all 0 after the transformation {tr.name!r}: "
                f"{listing(names)}.",
                hint="Remove them (CommunityTable(..., empty='drop')) or use a measure "
                     "defined for empty samples: euclidean, manhattan, canberra, gower.")
        notes.append(f"{len(names)} sample(s) are all 0 ({listing(names)}); {rec.label} is "
                     "defined for them, but they have no composition to compare.")
    if tr.name.startswith("clr(pseudocount") and np.any(tab.values == 0):
        notes.append("clr with a fixed pseudocount: the pseudocount is a larger share of a "
                     "small sample than of a large one, so sample size leaks into the values.")
    ctx = MeasureContext(labels, tab.taxon_labels, dict(params), dtype)
    ctx.notes.extend(notes)
    return tab, rec, tr, x, ctx


def measure_properties(rec, tr, ctx) -> dict:
    size_free = bool(rec.size_free or tr.removes_size)
    exact = ctx.properties.get("size_free_exact", rec.size_free_exact)
    exact = bool((rec.size_free and exact) or (tr.removes_size and tr.exact))
    return {"metric": rec.metric, "euclidean": rec.euclidean, "size_free": size_free,
            "size_free_exact": exact and size_free}


def dissimilarity(data, measure, *, transform=None, dtype="float64", chunks=None,
                  **params) -> Dissimilarity:
    """Dissimilarities between all pairs of samples, after an optional transformation.

    Parameters
    ----------
    data : CommunityTable, DataFrame or array_like, shape (n_samples, n_taxa)
        Abundances (a DataFrame or array is read as a table that keeps empty samples and
        taxa, so that the measure can say whether it is defined for them).
    measure : str or Measure
        A key of :data:`tallyform.MEASURES`: ``'euclidean'``, ``'manhattan'``,
        ``'bray_curtis'``, ``'chi_square'``, ``'hellinger'``, ``'chord'``, ``'aitchison'``,
        ``'jaccard'``, ``'quantitative_jaccard'``, ``'sorensen'``, ``'kulczynski'``,
        ``'canberra'``, ``'morisita_horn'``, ``'jensen_shannon'``, ``'gower'``.
    transform : None, str or Transform, default None
        Applied to the abundances before the measure (see :func:`get_transform`), e.g.
        ``'sqrt'``, ``'fourth_root'``, ``tly.Power(0.3)``, ``'profile'``.
    dtype : {'float64', 'float32'}, default 'float64'
        Storage type of the condensed distances (float32 halves memory).
    chunks : int, optional
        Tile the n x n matrix into chunks x chunks tiles computed and kept on the workers of
        the active ``dask.distributed`` client (local threads without one), never gathered:
        returns a :class:`tallyform.core.tiled.TiledDissimilarity` for measures without a
        feature matrix. ``data`` may then also be a Dask array or Dask DataFrame of counts
        (transformed block by block: row-wise transformations only). Needs
        ``pip install "tallyform[dask]"``.
    **params
        Options of the measure: ``aitchison``: ``zeros`` ('multiplicative', 'pseudocount',
        'error'), ``pseudocount``, ``delta``; ``chi_square``: ``column_masses`` (one positive
        weight per taxon; default the column masses of the table).

    Returns
    -------
    Dissimilarity
        Condensed distances in scipy order with labels, ``measure``, ``transform``
        (canonical name), ``params`` (every option used), ``properties`` (``metric``,
        ``euclidean``, ``size_free``, ``size_free_exact``) and ``notes``. For Euclidean,
        Hellinger, chord, chi-square and Aitchison it also carries ``features``; its
        distances are then computed on first use.

    Raises
    ------
    InputError
        Unknown measure, transform or option; negative values where the measure needs
        values >= 0; a sample that is empty (all 0) for a measure undefined on it; zeros
        under ``zeros='error'``; a taxon with total 0 for chi-square. Each names the samples
        or taxa concerned.
    TooLargeError
        The condensed vector would exceed the memory limit.

    Notes
    -----
    Euclidean-family distances are computed from the features in the Gram form on BLAS,
    others by compiled loops (numba, cached; numpy when numba is missing). See
    :data:`tallyform.MEASURES` for each formula, the double-zero behaviour and references.
    The chi-square distance here is between profiles, sqrt(sum_j (a_xj - a_yj)^2 / c_j);
    some texts multiply it by sqrt(N), N the grand total, which rescales all distances.
    Gower's range-standardised measure leaves out taxa whose range is 0 (the same value in
    every sample: |x - y| / range is 0 / 0 there) and says so in ``notes``. Jensen-Shannon is
    Euclidean-embeddable (Fuglede & Topsoe 2004) but has no finite feature matrix, so its
    ``features`` is None. Measures undefined for an empty sample raise InputError; Euclidean,
    Manhattan, Canberra and Gower are defined for it and add a note.

    References
    ----------
    Legendre, P. & Legendre, L. (2012). Numerical Ecology, 3rd ed., ch. 7. Elsevier.

    Examples
    --------
    >>> d = dissimilarity([[1, 2, 3, 4, 5], [2, 4, 6, 8, 10]], "bray_curtis")
    >>> round(float(d.condensed[0]), 6)
    0.333333
    >>> float(dissimilarity([[1, 2, 3, 4, 5], [2, 4, 6, 8, 10]], "hellinger").condensed[0])
    0.0
    """
    if chunks is not None:
        from .tiled_build import tiled_dissimilarity
        return tiled_dissimilarity(data, measure, transform=transform, dtype=dtype,
                                   chunks=chunks, **params)
    dt = resolve_dtype(dtype)
    key = _cache_key(data, measure, transform, params, dt)
    if key is not None:
        hit = shared_cache.get(key)
        if hit is not None:
            return hit
    tab, rec, tr, x, ctx = prepare_measure(data, measure, transform, params, dt)
    n = x.shape[0]
    kw = dict(measure=rec.name, transform=tr.name, dtype=dt)
    if rec.features is not None:
        feats = rec.features(x, ctx)
        cond = None
    else:
        check_memory(n * (n - 1) / 2 * dt.itemsize,
                     f"the condensed {rec.label} dissimilarities of {n} samples",
                     alternatives="Use dtype='float32', a measure with a feature matrix "
                                  "(hellinger, chi_square, chord, aitchison, euclidean), or a "
                                  "subset of the samples.")
        cond = rec.pairwise(x, ctx)
        feats = None
        bad = first_invalid(cond)
        if bad >= 0:                        # never let a NaN leave: name the pair
            i, j = _pair_of(n, bad)
            raise InputError(f"the {rec.label} dissimilarity between {tab.sample_labels[i]!r} "
                             f"and {tab.sample_labels[j]!r} is undefined for these data.")
    opts = {k: ctx.params.get(k, v) for k, v in rec.options.items()}
    opts.update(ctx.record)
    out = Dissimilarity(cond, tab.sample_labels, features=feats, params=opts,
                        properties=measure_properties(rec, tr, ctx), notes=tuple(ctx.notes),
                        _owned=True, **kw)
    if key is not None:
        size = (n * (n - 1) / 2 * dt.itemsize + 8.0 * n * n      # distances + G when asked
                + (0 if feats is None else feats.nbytes))
        shared_cache.put(key, out, size)
    return out


def _cache_key(data, measure, transform, params, dt):
    """Key for the shared cache, or None when the input cannot be fingerprinted cheaply."""
    import hashlib

    from .table import CommunityTable
    from .transforms import get_transform
    if not isinstance(data, CommunityTable):
        return None

    def freeze(v):
        if isinstance(v, (np.ndarray, list, tuple, pd.Series)):
            a = np.ascontiguousarray(np.asarray(v, dtype=float))
            return "array:" + hashlib.sha256(a.tobytes()).hexdigest()
        return repr(v)
    try:
        tr = get_transform(transform).name
        frozen = tuple(sorted((k, freeze(v)) for k, v in params.items()))
    except Exception:           # an invalid option: let prepare_measure raise the proper error
        return None
    return ("dissimilarity", data.fingerprint, str(getattr(measure, "name", measure)), tr,
            dt.str, frozen)


def feature_matrix(data, measure, *, transform=None, **params) -> np.ndarray | None:
    """The n x q matrix whose row-to-row Euclidean distances are the measure, or None.

    Defined for the Euclidean-family measures (Euclidean, Hellinger, chord, chi-square,
    Aitchison); O(n p) time and memory, no distances formed. Options and errors as in
    :func:`dissimilarity`.

    Examples
    --------
    >>> feature_matrix([[1, 3], [4, 0]], "hellinger").round(4)
    array([[0.5  , 0.866],
           [1.   , 0.   ]])
    >>> feature_matrix([[1, 3], [4, 0]], "bray_curtis") is None
    True
    """
    _, rec, _, x, ctx = prepare_measure(data, measure, transform, params, np.dtype(np.float64))
    if rec.features is None:
        return None
    f = np.array(rec.features(x, ctx), dtype=np.float64, copy=True)
    return f
