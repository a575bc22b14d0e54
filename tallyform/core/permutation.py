"""The permutation engine: pseudo-F tests of linear models on a dissimilarity, batched.

One general test serves PERMANOVA terms, the dispersion test, the permutation size test and
the partial tests of the size and shape partition:

    F = [tr((H_F - H_Z) G) / df_t] / [tr((I - H_A) G) / df_res]

with G the Gower-centred matrix of the dissimilarities (or F F' for a feature matrix F whose
Euclidean distances they are), H_Z the hat matrix of the reduced model Z (covariables, with
the intercept), H_F that of the full model F = [Z, tested columns], and H_A that of every
column in the model, including later terms that are not tested here (A = [F, later]).
Under the null the residuals of the reduced model, R = (I - H_Z) G (I - H_Z), are permuted
(Freedman & Lane 1983; Anderson & Legendre 1999; Anderson & ter Braak 2003):

    F* = [tr((H_F - H_Z) P R P') / df_t] / [tr((I - H_A) P R P') / df_res].

Speed. Every trace above is a sum of quadratic forms q' (P R P') q over orthonormal basis
columns q, and q' P R P' q = (P'q)' R (P'q): permuting the rows of the few basis columns is
the same as permuting the residuals. A batch of B permutations is therefore one matrix
product of the (k B) x n block of permuted basis columns with R (k = rank of the model minus
the intercept, which R annihilates), and BLAS does the work. With a feature matrix E of the
residuals (R = E E', E n x q) the product is (k B) x n by n x q and no n x n matrix is ever
formed. Memory is O(n^2 + n B) on the distance path, O(n q + n B) on the feature path.

Schemes. Free permutation of all samples; permutation within blocks (strata), never moving a
sample across blocks; and exact enumeration of every distinct relabelling when their number
is at most the number of permutations asked for (relabellings that give the same permuted
design are counted once).

P-values. Random permutations: p = (1 + #{F* >= F}) / (1 + P), which counts the observed
arrangement as one of the permutations and is never 0 (Phipson & Smyth 2010). Exact
enumeration: p = #{F* >= F} / N over the N distinct relabellings, the identity included. A
permuted statistic within a relative 1e-9 of the observed one counts as a tie (as >= F):
mathematically equal statistics reached by different floating-point paths differ in their
last digits, and must not be counted as smaller.

References
----------
Anderson, M. J. (2001). A new method for non-parametric multivariate analysis of variance.
Austral Ecology 26, 32-46.
Anderson, M. J. & Legendre, P. (1999). An empirical comparison of permutation methods for
tests of partial regression coefficients in a linear model. J. Stat. Comput. Simul. 62,
271-303.
Anderson, M. J. & ter Braak, C. J. F. (2003). Permutation tests for multi-factorial analysis
of variance. J. Stat. Comput. Simul. 73, 85-113.
Freedman, D. & Lane, D. (1983). A nonstochastic interpretation of reported significance
levels. J. Bus. Econ. Stat. 1, 292-298.
McArdle, B. H. & Anderson, M. J. (2001). Fitting multivariate models to community data: a
comment on distance-based redundancy analysis. Ecology 82, 290-297.
Phipson, B. & Smyth, G. K. (2010). Permutation p-values should never be zero. Stat. Appl.
Genet. Mol. Biol. 9, 39.
ter Braak, C. J. F. (1992). Permutation versus bootstrap significance tests in multiple
regression and ANOVA. In Bootstrapping and Related Techniques, 79-86. Springer.
"""
from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from typing import Callable, Iterator

import numpy as np
import pandas as pd

import scipy.linalg

from .random import as_rng
from .errors import Cancelled, DesignError, InputError, Location
from .memory import check_memory
from .results import ResultMixin, readonly

__all__ = ["Permutations", "PermutationTest", "permutation_f_test", "prepare_response",
           "nested_bases", "count_relabellings", "TIE_RTOL", "FEW_PERMUTATIONS"]

#: Relative tolerance under which a permuted statistic counts as equal to the observed one.
TIE_RTOL = 1e-9
#: Below this many distinct relabellings a result carries a note (p-values are coarse).
FEW_PERMUTATIONS = 100
#: Bytes of permuted basis columns handled per batch (the working set of one BLAS call).
_BATCH_BYTES = 48 * 2**20


# ---------------------------------------------------------------------------- schemes
def _as_codes(values) -> np.ndarray:
    """Integer codes 0..k-1 of arbitrary labels (order of first appearance irrelevant)."""
    _, codes = np.unique(np.asarray(values).astype(str), return_inverse=True)
    return codes.ravel().astype(np.intp)


def _row_types(design: np.ndarray | None, n: int) -> np.ndarray:
    """Codes of identical design rows: relabellings that swap equal rows change nothing."""
    if design is None or design.size == 0:
        return np.arange(n, dtype=np.intp)
    d = np.ascontiguousarray(np.asarray(design, dtype=np.float64).reshape(n, -1))
    _, codes = np.unique(d, axis=0, return_inverse=True)
    return codes.ravel().astype(np.intp)


def count_relabellings(types: np.ndarray, blocks: np.ndarray | None = None, *,
                       cap: int | None = None) -> int | None:
    """Number of distinct arrangements of row ``types`` within ``blocks``.

    The product over blocks of the multinomial coefficients n_b! / prod_t m_bt!. With ``cap``,
    returns None as soon as the count is known to exceed it (avoids huge integers).
    """
    types = np.asarray(types)
    blocks = np.zeros(types.size, dtype=np.intp) if blocks is None else np.asarray(blocks)
    log_total = 0.0
    per_block = []
    for b in np.unique(blocks):
        m = np.unique(types[blocks == b], return_counts=True)[1]
        log_total += math.lgamma(m.sum() + 1) - sum(math.lgamma(c + 1) for c in m)
        per_block.append(m)
    if cap is not None and log_total > math.log(cap) + 1.0:
        return None
    total = 1
    for m in per_block:
        rest = int(m.sum())
        for c in m:
            total *= math.comb(rest, int(c))
            rest -= int(c)
    if cap is not None and total > cap:
        return None
    return total


def _multiset_arrangements(seq) -> Iterator[tuple]:
    """Every distinct ordering of a multiset, in lexicographic order (Knuth's algorithm L)."""
    a = sorted(seq)
    m = len(a)
    while True:
        yield tuple(a)
        j = m - 2
        while j >= 0 and a[j] >= a[j + 1]:
            j -= 1
        if j < 0:
            return
        k = m - 1
        while a[j] >= a[k]:
            k -= 1
        a[j], a[k] = a[k], a[j]
        a[j + 1:] = reversed(a[j + 1:])


class Permutations:
    """The relabellings a test uses: random (free or within blocks) or all distinct ones.

    Each permutation is an index array ``idx`` of length n: the permuted design is
    ``X[idx]`` (row i of the permuted design is row ``idx[i]`` of the original), held
    against the fixed residuals; ``blocks[idx] == blocks`` always holds.

    Parameters
    ----------
    n : int
    n_permutations : int
        Permutations asked for. When the number of distinct relabellings is at most this,
        all of them are enumerated instead (``exact``).
    rng : None, int or numpy.random.Generator
        One draw from it seeds the permutations; :meth:`batches` replays the same
        permutations on every call.
    blocks : array_like, optional
        Block (stratum) label of every sample; samples are only permuted within blocks.
    block_name : str, optional
        Name of the blocking column, for the description and error messages.
    design : ndarray, optional
        Design rows (n x m); rows that are equal are interchangeable, which defines which
        relabellings are distinct. Default: every sample distinct.
    exact : {'auto', True, False}
        'auto' enumerates when it is possible within ``n_permutations``; False never does.

    Raises
    ------
    DesignError
        The blocks allow no relabelling other than the identity.
    """

    def __init__(self, n: int, n_permutations: int, rng: np.random.Generator, *,
                 blocks=None, block_name: str | None = None, design=None, exact="auto"):
        self.n = int(n)
        self.requested = int(n_permutations)
        if self.requested < 0:
            raise InputError(f"`n_permutations` must be >= 0; got {n_permutations}.")
        self.block_name = block_name
        # a snapshot of the stream: every call of batches() replays the same permutations,
        # so several tests (the terms of one table) can share them
        # (the caller's generator is advanced once, so a second test drawn from it differs)
        child = np.random.default_rng(np.random.default_rng(rng).integers(2**63, size=4))
        self._bit_generator = type(child.bit_generator)
        self._state = child.bit_generator.state
        self.blocks = None if blocks is None else _as_codes(blocks)
        if self.blocks is not None and self.blocks.size != self.n:
            raise DesignError(f"{self.blocks.size} block labels for {self.n} samples.")
        self.types = _row_types(design, self.n)
        cap = max(self.requested, FEW_PERMUTATIONS)
        self.n_distinct = count_relabellings(self.types, self.blocks, cap=cap)
        if self.n_distinct == 1:
            where = (f"within the blocks of {block_name!r}" if block_name
                     else "among the samples")
            raise DesignError(
                f"no relabelling {where} changes the design, so there is nothing to permute.",
                location=Location(column=repr(block_name)) if block_name else None,
                hint="The tested term may be constant within every block; test it at the "
                     "block level, or drop the blocks.")
        if exact == "auto":
            self.exact = self.n_distinct is not None and self.n_distinct <= self.requested
        else:
            self.exact = bool(exact) and self.n_distinct is not None
        self.total = self.n_distinct if self.exact else self.requested
        if self.blocks is not None:
            order = np.argsort(self.blocks, kind="stable")
            self._block_sorted = order
            self._block_keys = self.blocks.astype(np.float64)

    # ----------------------------------------------------------------- description
    @property
    def few(self) -> bool:
        """True when fewer than 100 distinct relabellings exist."""
        return self.n_distinct is not None and self.n_distinct < FEW_PERMUTATIONS

    def describe(self) -> str:
        where = (f"within blocks of {self.block_name!r}" if self.blocks is not None
                 and self.block_name else "within blocks" if self.blocks is not None
                 else "free")
        if self.exact:
            return f"exact: all {self.n_distinct} distinct relabellings ({where})"
        return f"{self.requested} random permutations ({where})"

    def note(self) -> str | None:
        if not self.few:
            return None
        return (f"Only {self.n_distinct} distinct relabellings of the samples exist"
                + (f" within blocks of {self.block_name!r}" if self.blocks is not None
                   and self.block_name else "")
                + f", so the smallest attainable p-value is {1 / self.n_distinct:.3g}; "
                  "p-values are coarse and a non-significant result says little.")

    # ----------------------------------------------------------------- generation
    def batches(self, size: int) -> Iterator[np.ndarray]:
        """Yield (B, n) index arrays, B <= size, ``total`` rows in all.

        The random stream is consumed row by row, so the permutations do not depend on
        ``size``.
        """
        size = max(1, int(size))
        bg = self._bit_generator()
        bg.state = self._state
        rng = np.random.Generator(bg)
        if self.exact:
            it = self._enumerate()
            while True:
                chunk = list(itertools.islice(it, size))
                if not chunk:
                    return
                yield np.array(chunk, dtype=np.intp)
        done = 0
        while done < self.total:
            b = min(size, self.total - done)
            yield self._random(rng, b)
            done += b

    def _random(self, rng: np.random.Generator, b: int) -> np.ndarray:
        n = self.n
        if self.blocks is None:
            idx = np.tile(np.arange(n, dtype=np.intp), (b, 1))
            rng.permuted(idx, axis=1, out=idx)
            return idx
        # random keys within each block's integer band: sorting them shuffles every block
        keys = rng.random((b, n))
        keys += self._block_keys
        order = np.argsort(keys, axis=1)
        idx = np.empty((b, n), dtype=np.intp)
        idx[:, self._block_sorted] = order
        return idx

    def _enumerate(self) -> Iterator[np.ndarray]:
        """Every distinct relabelling once (the identity among them)."""
        n = self.n
        blocks = np.zeros(n, dtype=np.intp) if self.blocks is None else self.blocks
        per_block = []
        for b in np.unique(blocks):
            pos = np.flatnonzero(blocks == b)
            t = self.types[pos]
            arrangements = np.array(list(_multiset_arrangements(t.tolist())), dtype=np.intp)
            local = np.empty_like(arrangements)
            for ty in np.unique(t):
                rows = pos[t == ty]                 # samples of this type, in order
                mask = arrangements == ty
                rank = np.cumsum(mask, axis=1) - 1
                local[mask] = rows[rank[mask]]
            per_block.append((pos, local))
        for combo in itertools.product(*[range(len(loc)) for _, loc in per_block]):
            idx = np.empty(n, dtype=np.intp)
            for (pos, local), c in zip(per_block, combo):
                idx[pos] = local[c]
            yield idx


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


def prepare_response(data, *, path: str = "auto") -> Response:
    """A :class:`Response` from a Dissimilarity, a feature matrix or a vector.

    ``path='auto'`` uses a Dissimilarity's features when it has them and they have fewer
    columns than there are samples (then each permutation costs O(n q) instead of O(n^2));
    'distances' forces the Gower matrix, 'features' the feature matrix.
    """
    from .dissimilarity import Dissimilarity
    if isinstance(data, Response):
        return data
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


# ---------------------------------------------------------------------------- results
@dataclass(frozen=True, eq=False)
class PermutationTest(ResultMixin):
    """One pseudo-F permutation test (the engine's answer).

    Attributes
    ----------
    statistic : float
        Observed pseudo-F.
    pvalue : float
    null_distribution : ndarray
        Permuted statistics (for exact enumeration: all of them, the identity included).
    n_permutations : int
        Number of permuted statistics computed.
    exact : bool
        True when every distinct relabelling was enumerated.
    n_distinct : int or None
        Number of distinct relabellings (None when larger than could matter).
    scheme : str
        Plain description of the permutation scheme.
    df : tuple (df_t, df_res)
    ss : tuple (ss_t, ss_res)
    path : {'distances', 'features'}
    notes : tuple of str
    """

    statistic: float
    pvalue: float
    null_distribution: np.ndarray = field(repr=False)
    n_permutations: int
    exact: bool
    n_distinct: int | None
    scheme: str
    df: tuple
    ss: tuple
    path: str
    notes: tuple = ()

    def __post_init__(self):
        object.__setattr__(self, "null_distribution", readonly(self.null_distribution))

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame({"df": [self.df[0]], "ss": [self.ss[0]],
                             "pseudo_f": [self.statistic], "pvalue": [self.pvalue],
                             "n_permutations": [self.n_permutations], "exact": [self.exact]},
                            index=["tested"])

    def _title(self) -> str:
        return f"Permutation F test ({self.scheme})"

    def figure(self, **kwargs):
        """The permutation distribution with the observed pseudo-F and p-value
        (:func:`tallyform.render.plots.null_distribution_figure`)."""
        from ..render.inference_plots import null_distribution_figure  # lazy: plotly
        return null_distribution_figure(self, **kwargs)


#: Sums of squares below this share of the total are rounding noise, and are set to 0.
SS_RTOL = 1e-12


def _clean(ss, total):
    """Sums of squares within rounding error of 0 (relative to ``total``) become 0."""
    tol = SS_RTOL * abs(float(total))
    if np.ndim(ss) == 0:
        return 0.0 if abs(ss) <= tol else float(ss)
    ss = np.asarray(ss, dtype=np.float64)
    return np.where(np.abs(ss) <= tol, 0.0, ss)


def _pseudo_f(ss_t, ss_res, df_t, df_res):
    """(ss_t / df_t) / (ss_res / df_res), with a perfect fit (no residual) giving +inf when
    the term explains something and NaN when it explains nothing either."""
    ss_t = np.asarray(ss_t, dtype=np.float64)
    ss_res = np.asarray(ss_res, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        f = (ss_t / df_t) / (ss_res / df_res)
    f = np.where(ss_res > 0, f, np.where(ss_t > 0, np.inf, np.nan))
    return float(f) if f.ndim == 0 else f


def pvalue_from_null(observed: float, null: np.ndarray, *, exact: bool) -> float:
    """Add-one p-value for random permutations, plain proportion for exact enumeration.

    An infinite observed statistic (a perfect fit) ties with every infinite permuted one;
    NaN permuted statistics never count as at least the observed one.
    """
    if np.isnan(observed) or null.size == 0:
        return float("nan")
    if np.isinf(observed):
        hits = int(np.count_nonzero(null == observed))
    else:
        hits = int(np.count_nonzero(null >= observed - TIE_RTOL * abs(observed)))
    if exact:
        return hits / null.size
    return (1 + hits) / (1 + null.size)


def _batch_size(n: int, k: int, q: int | None) -> int:
    width = n + (q if q is not None else n)
    return max(16, int(_BATCH_BYTES // (8 * max(k, 1) * width)))


def permutation_f_test(data, X_full, X_reduced=None, *, X_later=None, blocks=None,
                       block_name: str | None = None, n_permutations: int = 999, rng=None,
                       residuals: str = "reduced", exact="auto", path: str = "auto",
                       permutations: Permutations | None = None,
                       progress: Callable[[int, int], None] | None = None,
                       cancel: Callable[[], bool] | None = None,
                       batch_size: int | None = None) -> PermutationTest:
    """Pseudo-F of the columns ``X_full`` adds to ``X_reduced``, tested by permutation.

    Parameters
    ----------
    data : Dissimilarity, ndarray (n,) or (n, q), or Response
        The response: a dissimilarity (its Gower matrix, or its feature matrix when it has
        one) or a matrix whose Euclidean distances are the dissimilarities.
    X_full : ndarray, shape (n, m)
        The model whose fit is tested, containing the reduced model's columns (or not:
        only the part of its span orthogonal to ``X_reduced`` counts).
    X_reduced : ndarray, shape (n, k), optional
        Covariables already in the model. An intercept is always included; constant
        columns add nothing.
    X_later : ndarray, optional
        Further columns fitted in the residual but not tested (later terms of a sequential
        table, higher-order terms of a marginal one).
    blocks, block_name : optional
        Block label per sample: permute only within blocks.
    n_permutations : int
    rng : None, int or numpy.random.Generator
    residuals : {'reduced', 'full'}
        Permute residuals of the reduced model (Freedman & Lane 1983, the default) or of the
        full model (ter Braak 1992).
    exact : {'auto', False}
        Enumerate all distinct relabellings when there are at most ``n_permutations``.
    path : {'auto', 'distances', 'features'}
    permutations : Permutations, optional
        A prepared scheme (to run several tests on the same relabellings).
    progress : callable(done, total), optional
    cancel : callable() -> bool, optional
        Checked before every batch; True stops the run with :class:`Cancelled`.
    batch_size : int, optional
        Permutations per matrix product (default: about 48 MB of permuted columns).

    Returns
    -------
    PermutationTest

    Raises
    ------
    DesignError
        The tested columns add nothing to the reduced model, no residual degrees of freedom
        remain, or the blocks allow no relabelling.
    Cancelled
        ``cancel()`` returned True.

    Notes
    -----
    With orthonormal centred bases Qz, Qt, Qw of the reduced, tested and later columns,
    k = their total number of columns, and permuted rows U = Q[idx]:
    F* = [tr(Ut' R Ut) / df_t] / [(tr R - tr(Uz' R Uz) - tr(Ut' R Ut) - tr(Uw' R Uw)) / df_res],
    df_t = rank of Qt, df_res = n - 1 - k. A batch is one (k B) x n by n x n (or n x q)
    product.
    """
    if residuals not in ("reduced", "full"):
        raise InputError(f"`residuals` must be 'reduced' or 'full'; got {residuals!r}.")
    resp = prepare_response(data, path=path)
    n = resp.n
    X_full = np.asarray(X_full, dtype=np.float64)
    if X_full.ndim == 1:
        X_full = X_full[:, None]
    if X_full.shape[0] != n:
        raise InputError(f"the design has {X_full.shape[0]} rows for {n} samples.")
    qz, qt, qw = nested_bases(X_reduced, X_full, X_later)
    df_t = qt.shape[1]
    k = qz.shape[1] + df_t + qw.shape[1]
    df_res = n - 1 - k
    if df_t == 0:
        raise DesignError("the tested columns add nothing to the model they are tested "
                          "against (they are aliased with it).")
    if df_res <= 0:
        raise DesignError(f"the model uses {k + 1} degrees of freedom with {n} samples, "
                          "leaving none for the residual.",
                          hint="Use fewer terms or levels, or more samples.")
    # observed: tr((H_F - H_Z) G) and tr((I - H_A) G)
    total = resp.total()
    ss_t = float(resp.quad(qt).sum())
    ss_res = total - float(resp.quad(qz).sum()) - ss_t - float(resp.quad(qw).sum())
    ss_t, ss_res = (_clean(v, total) for v in (ss_t, ss_res))
    observed = _pseudo_f(ss_t, ss_res, df_t, df_res)

    if permutations is None:
        rng = as_rng(rng)
        design = np.hstack([np.asarray(X_reduced if X_reduced is not None else
                                       np.empty((n, 0)), dtype=float).reshape(n, -1),
                            X_full,
                            np.asarray(X_later if X_later is not None else np.empty((n, 0)),
                                       dtype=float).reshape(n, -1)])
        permutations = Permutations(n, n_permutations, rng, blocks=blocks,
                                    block_name=block_name, design=design, exact=exact)
    perms = permutations
    # the residuals that get permuted
    if residuals == "reduced":
        r = resp.residual(qz)
        how = "residuals of the reduced model" if qz.shape[1] else "samples"
    else:
        r = resp.residual(np.hstack([qz, qt, qw]))
        how = "residuals of the full model"
    trace_r = r.total()
    q_all = np.ascontiguousarray(np.hstack([qz, qt, qw]).T)        # k x n
    nz, nt = qz.shape[1], df_t
    q = None if r.features is None else r.features.shape[1]
    size = batch_size or _batch_size(n, k, q)
    null = np.empty(perms.total)
    done = 0
    for idx in perms.batches(size):
        if cancel is not None and cancel():
            raise Cancelled(f"stopped after {done} of {perms.total} permutations; "
                            "no result was produced.")
        b = idx.shape[0]
        u = np.take(q_all, idx, axis=1).reshape(k * b, n)          # rows: (column, perm)
        if r.features is not None:
            v = u @ r.features
            tr = np.einsum("ij,ij->i", v, v)
        else:
            v = u @ r.gower
            tr = np.einsum("ij,ij->i", u, v)
        tr = tr.reshape(k, b)
        num = tr[nz:nz + nt].sum(axis=0)
        den = trace_r - tr[:nz].sum(axis=0) - num - tr[nz + nt:].sum(axis=0)
        null[done:done + b] = _pseudo_f(_clean(num, trace_r), _clean(den, trace_r),
                                        df_t, df_res)
        done += b
        if progress is not None:
            progress(done, perms.total)
    pvalue = pvalue_from_null(observed, null, exact=perms.exact)
    scheme = f"{perms.describe()}; permuting {how}"
    notes = tuple(x for x in [perms.note()] if x)
    return PermutationTest(statistic=float(observed), pvalue=float(pvalue),
                           null_distribution=null, n_permutations=int(perms.total),
                           exact=bool(perms.exact), n_distinct=perms.n_distinct,
                           scheme=scheme, df=(int(df_t), int(df_res)),
                           ss=(float(ss_t), float(ss_res)), path=resp.path, notes=notes)
