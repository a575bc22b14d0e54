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

Sequential statistics (Freedman & Lane 1983 with the reduced model's fitted part added
back). The numerator of a sequential table conditions on the terms listed *before* the tested
one (basis Qb), while the residuals that are permuted are those of a reduced model Z that
keeps every other term not containing it (also later ones). The permuted data are then
Y* = Yhat_Z + (I - H_Z) P e_Z: the permuted residuals are projected back onto the residual
space of Z (as the observed ones lie in it; Huh & Jhun 2001 permute within that space), and
the same sequential statistic is computed on Y*. The permuted residuals are also rescaled
by c = sqrt(d / (d - k_Z)) (d the dimension of the stratum, k_Z the rank of Z): the observed
residuals fill only d - k_Z of the d dimensions their permutations spread over, and without
the factor the permuted denominators are too small beside the fixed fitted part (the
variance correction of residuals in resampling; Davison & Hinkley 1997, ch. 6). With
q~ = (I - H_Z) q,

    q' G* q = q' H_Z G H_Z q + 2 c q' H_Z G (I - H_Z) P' q~ + c^2 (P'q~)' R (P'q~)

for every basis column q of the tested term; the first two parts need only one fixed vector
per column, so the cost is that of the plain form. Without the projection, a tested term
that is correlated with Z (unbalanced designs, the term listed before Z's terms) would meet
permuted residuals with more variance than the observed ones have along it, and its test
would be conservative (p-values near 1 under the null, no power; measured). The denominator,
(I - H_A) Y*, sees neither Yhat_Z nor the projection (Z lies within the full model A). In a
balanced design the tested term is orthogonal to Z, q~ = q, the cross terms vanish and c
cancels from the ratio: a term's p-value then does not depend on where it stands in the list.
See :func:`permuted_f`.

Schemes live in :mod:`tallyform.core.schemes` (free, within blocks, whole units, within
units, cyclic shifts; exact enumeration when the distinct relabellings are few enough).

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
Davison, A. C. & Hinkley, D. V. (1997). Bootstrap Methods and their Application, ch. 6.
Cambridge University Press.
Huh, M.-H. & Jhun, M. (2001). Random permutation testing in multiple linear regression.
Commun. Stat. Theory Methods 30, 2023-2032.
McArdle, B. H. & Anderson, M. J. (2001). Fitting multivariate models to community data: a
comment on distance-based redundancy analysis. Ecology 82, 290-297.
Phipson, B. & Smyth, G. K. (2010). Permutation p-values should never be zero. Stat. Appl.
Genet. Mol. Biol. 9, 39.
ter Braak, C. J. F. (1992). Permutation versus bootstrap significance tests in multiple
regression and ANOVA. In Bootstrapping and Related Techniques, 79-86. Springer.
"""
from __future__ import annotations

import contextlib
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd


from .random import as_rng
from .errors import Cancelled, DesignError, InputError
from .response import Response, nested_bases, prepare_response  # noqa: F401 (the engine's)
from .results import ResultMixin, readonly
from .single_precision import SinglePass, record
from .schemes import (FEW_PERMUTATIONS, CyclicShifts, Permutations, UnitPermutations,
                      count_relabellings, label_symmetries, span_symmetries, within_units)

__all__ = ["Permutations", "UnitPermutations", "CyclicShifts", "within_units",
           "PermutationTest", "permutation_f_test", "prepare_response", "nested_bases",
           "count_relabellings", "label_symmetries", "span_symmetries", "permuted_f",
           "TIE_RTOL", "FEW_PERMUTATIONS", "tie_threshold"]

#: Relative tolerance under which a permuted statistic counts as equal to the observed one.
TIE_RTOL = 1e-9
#: Bytes of permuted basis columns handled per batch (the working set of one BLAS call).
_BATCH_BYTES = 48 * 2**20
#: Multiply-adds per batch: about a quarter of a second of one core, so that an interruption
#: or a cancel is honoured within a second however large the table.
_BATCH_WORK = 4e9


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
        Past a few hundred samples on the distance path most are computed in single
        precision (within a proven bound; those near the observed statistic in float64):
        the p-value is the float64 one, the values are for figures.
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
    min_pvalue : float or None
        Smallest p-value the exact test can give (distinct statistic values / relabellings).
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
    min_pvalue: float | None = None

    def __post_init__(self):
        object.__setattr__(self, "null_distribution", readonly(self.null_distribution))

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame({"df": [self.df[0]], "ss": [self.ss[0]],
                             "pseudo_f": [self.statistic], "pvalue": [self.pvalue],
                             "n_permutations": [self.n_permutations], "exact": [self.exact]},
                            index=["tested"])

    @property
    def reading(self) -> str:
        from .display import p_words
        return (f"Permutation F test ({self.scheme}): pseudo-F = {self.statistic:.3g}, "
                f"{p_words(self.pvalue)}.")

    def _title(self) -> str:
        return f"Permutation F test ({self.scheme})"

#: Sums of squares below this share of the total are rounding noise, and are set to 0.
SS_RTOL = 1e-12


def clean_ss(ss, total):
    """Sums of squares within rounding error of 0 (relative to ``total``) become 0."""
    tol = SS_RTOL * abs(float(total))
    if np.ndim(ss) == 0:
        return 0.0 if abs(ss) <= tol else float(ss)
    ss = np.asarray(ss, dtype=np.float64)
    return np.where(np.abs(ss) <= tol, 0.0, ss)


def pseudo_f_ratio(ss_t, ss_res, df_t, df_res):
    """(ss_t / df_t) / (ss_res / df_res), with a perfect fit (no residual) giving +inf when
    the term explains something and NaN when it explains nothing either."""
    ss_t = np.asarray(ss_t, dtype=np.float64)
    ss_res = np.asarray(ss_res, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        f = (ss_t / df_t) / (ss_res / df_res)
    f = np.where(ss_res > 0, f, np.where(ss_t > 0, np.inf, np.nan))
    return float(f) if f.ndim == 0 else f


def tie_threshold(observed: float) -> float:
    """Permuted statistics at or above this value count as at least the observed one."""
    return observed - TIE_RTOL * abs(observed)


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
        hits = int(np.count_nonzero(null >= tie_threshold(observed)))
    if exact:
        return hits / null.size
    return (1 + hits) / (1 + null.size)


def default_batch_size(n: int, k: int, q: int | None) -> int:
    width = n + (q if q is not None else n)
    by_memory = max(16, int(_BATCH_BYTES // (8 * max(k, 1) * width)))
    by_work = max(1, int(_BATCH_WORK // (max(k, 1) * n * (q if q is not None else n))))
    return min(by_memory, by_work)


def permuted_f(resp: Response, qa: np.ndarray, nb: int, nt: int, qz: np.ndarray, perms, *,
               df_res: int, add_fitted: bool = True, batch_size: int | None = None,
               progress: Callable[[int, int], None] | None = None,
               cancel: Callable[[], bool] | None = None, offset: int = 0,
               grand_total: int | None = None, single_precision: bool = False) -> tuple:
    """Observed pseudo-F of one term and its permutation distribution (the engine's core).

    Parameters
    ----------
    resp : Response
        The data of the stratum, orthogonal to its base space (the intercept, or the unit
        indicators for a within-unit stratum).
    qa : ndarray (n, k)
        Orthonormal basis of the whole model of the stratum, in nested order: ``nb``
        columns of the terms the numerator conditions on, ``nt`` of the tested term, then
        the later terms.
    qz : ndarray (n, kz)
        Orthonormal basis of the reduced model whose residuals are permuted (within the
        span of ``qa``).
    perms : scheme with ``batches(size)`` yielding (B, n) sample index arrays and ``total``.
    df_res : int
        Denominator degrees of freedom.
    add_fitted : bool
        Add the reduced model's fitted part back to the permuted residuals (Freedman & Lane
        1983); False permutes the residuals alone (ter Braak 1992, full-model residuals).
    single_precision : bool
        For callers that only count the permuted statistics at or above the observed one
        (:func:`pvalue_from_null`): on the in-memory distance path with n between
        ``MIN_SAMPLES`` and ``MAX_SAMPLES`` of :mod:`tallyform.core.single_precision` and at
        least ``MIN_PERMUTATIONS`` permutations, the quadratic forms are computed in float32
        with a rigorous error bound, and every permutation whose side of the tie threshold
        the bound cannot certify is recomputed in float64: the count, hence the p-value, is
        the float64 engine's. The other
        permuted statistics returned are then the single-precision ones (each form within
        its bound, about 260 x 2^-24 times the largest absolute row sum of G): fine for a
        figure, not for ranking them against each other.

    Returns
    -------
    (observed, null, ss_t, ss_res)
    """
    n = resp.n
    k = qa.shape[1]
    total = resp.total()
    quad = resp.quad(qa)
    ss_t = clean_ss(float(quad[nb:nb + nt].sum()), total)
    ss_res = clean_ss(total - float(quad.sum()), total)
    observed = pseudo_f_ratio(ss_t, ss_res, nt, df_res)
    r = resp.residual(qz)
    f64, fit = _float64_batch(resp, r, qa, nb, nt, qz, df_res=df_res, add_fitted=add_fitted)
    fast = None
    if (single_precision and r.features is None and np.isfinite(observed)
            and SinglePass.usable(r.gower, n, perms.total)):
        rows = [qa.T, fit.qt_res] if fit.cross else [qa.T]
        fast = SinglePass(r.gower, np.vstack(rows))
        trace_r = r.total()
        d_num, d_den = fast.sum_bounds(k=k, nt=nt, trace_r=trace_r, fit=fit)
        threshold = tie_threshold(observed)
        tol = SS_RTOL * abs(float(fit.scale))

        def ratio(num, den):
            return pseudo_f_ratio(num, den, nt, df_res)
    q = None if r.features is None else r.features.shape[1]
    size = batch_size or default_batch_size(n, k, q)
    null = np.empty(perms.total)
    done = rechecked = 0
    grand = grand_total if grand_total is not None else perms.total
    with fast.threads() if fast is not None else contextlib.nullcontext():
        for idx in perms.batches(size):
            if cancel is not None and cancel():
                raise Cancelled(f"stopped after {offset + done} of {grand} permutations; "
                                "no result was produced.")
            b = idx.shape[0]
            if fast is None:
                null[done:done + b] = f64(idx)
            else:
                tr = fast.forms(idx)
                num, den = _sums(tr[:k], nb, nt, trace_r)
                if fit.cross:                # the same float64 arithmetic as _float64_batch
                    ut = np.take(fit.qt_res, idx, axis=1)
                    xc = np.einsum("jbn,nj->b", ut, fit.c)
                    num, den = _cross_sums(tr[k:], xc, den, fit)
                f, todo = fast.settle(num, den, d_num, d_den, ratio, tol=tol,
                                      threshold=threshold)
                if todo.any():
                    f[todo] = f64(idx[todo])
                    rechecked += int(np.count_nonzero(todo))
                null[done:done + b] = f
            done += b
            if progress is not None:
                progress(offset + done, grand)
    record(done, done if fast is not None else 0, rechecked)
    return observed, null, ss_t, ss_res


def _sums(tr: np.ndarray, nb: int, nt: int, trace_r: float) -> tuple:
    """Numerator and denominator sums of a batch from its k x B forms u' R u."""
    num = tr[nb:nb + nt].sum(axis=0)
    den = trace_r - tr[:nb].sum(axis=0) - num - tr[nb + nt:].sum(axis=0)
    return num, den


def _cross_sums(plain: np.ndarray, xc: np.ndarray, den: np.ndarray, fit) -> tuple:
    """Numerator and denominator with the reduced model's fitted part added back: ``plain``
    the nt x B forms of the projected tested columns, ``xc`` their cross terms."""
    num = fit.c2 * plain.sum(axis=0) + fit.const.sum() + 2.0 * np.sqrt(fit.c2) * xc
    return num, fit.c2 * den


@dataclass(frozen=True)
class _Fitted:
    """The reduced model's fitted part as the tested columns see it (``cross``), and the
    scale of ``clean_ss``. With ``cross`` False the other fields are unused."""

    cross: bool
    scale: float
    qt_res: np.ndarray | None = None          # (I - H_Z) q, nt x n
    c: np.ndarray | None = None               # (I - H_Z) G H_Z q, n x nt (distance path)
    a: np.ndarray | None = None               # q' H_Z F, nt x f (feature path)
    const: np.ndarray | None = None           # q' H_Z G H_Z q, nt
    c2: float = 1.0                           # variance correction of the residuals


def _fitted_part(resp: Response, r: Response, qa, nb: int, nt: int, qz, *,
                 df_res: int, add_fitted: bool) -> _Fitted:
    k = qa.shape[1]
    trace_r = r.total()
    # the reduced model's fitted part, seen by the tested columns: a constant and one fixed
    # vector per column (zero when the tested term is orthogonal to the reduced model)
    qt = qa[:, nb:nb + nt]
    tz = qz.T @ qt if qz.shape[1] else np.zeros((0, nt))
    if not (add_fitted and tz.size and float(np.abs(tz).max()) > 1e-12):
        return _Fitted(False, trace_r)
    a = c = None
    if resp.features is not None:
        a = tz.T @ (qz.T @ resp.features)                       # q' H_Z F, nt x f
        const = np.einsum("ij,ij->i", a, a)
    else:
        gqz = resp.gower @ qz
        gz = qz.T @ gqz
        c = (gqz - qz @ gz) @ tz                                # (I - H_Z) G H_Z q, n x nt
        const = np.einsum("ij,ik,kj->j", tz, gz, tz)
    # the permuted residuals are projected back onto the residual space of Z, so the
    # tested columns meet them through (I - H_Z) q, and rescaled to the variance of the
    # errors they stand for (see the module notes)
    qt_res = np.ascontiguousarray((qt - qz @ tz).T)             # nt x n
    dim = df_res + k
    return _Fitted(True, max(trace_r, resp.total()), qt_res, c, a, const,
                   dim / (dim - qz.shape[1]))


def _float64_batch(resp: Response, r: Response, qa, nb: int, nt: int, qz, *, df_res: int,
                   add_fitted: bool) -> tuple:
    """The float64 engine for one term: (function idx -> permuted pseudo-F, _Fitted)."""
    n = resp.n
    k = qa.shape[1]
    trace_r = r.total()
    fit = _fitted_part(resp, r, qa, nb, nt, qz, df_res=df_res, add_fitted=add_fitted)
    q_all = np.ascontiguousarray(qa.T)                          # k x n

    def batch(idx):
        b = idx.shape[0]
        u = np.take(q_all, idx, axis=1).reshape(k * b, n)          # rows: (column, perm)
        if r.features is not None:
            v = u @ r.features
            tr = np.einsum("ij,ij->i", v, v)
        elif isinstance(r.gower, np.ndarray):
            v = u @ r.gower
            tr = np.einsum("ij,ij->i", u, v)
        else:                                   # tiles: u' R u reduced on the workers
            tr = r.gower.quad_rows(u)
        num, den = _sums(tr.reshape(k, b), nb, nt, trace_r)
        if fit.cross:
            ut = np.take(fit.qt_res, idx, axis=1).reshape(nt * b, n)
            if r.features is not None:
                vt = ut @ r.features
                plain = np.einsum("ij,ij->i", vt, vt).reshape(nt, b)
                xc = np.einsum("jbf,jf->b", vt.reshape(nt, b, -1), fit.a)
            elif isinstance(r.gower, np.ndarray):
                vt = ut @ r.gower
                plain = np.einsum("ij,ij->i", ut, vt).reshape(nt, b)
                xc = np.einsum("jbn,nj->b", ut.reshape(nt, b, n), fit.c)
            else:
                plain = r.gower.quad_rows(ut).reshape(nt, b)
                xc = np.einsum("jbn,nj->b", ut.reshape(nt, b, n), fit.c)
            num, den = _cross_sums(plain, xc, den, fit)
        scale = fit.scale
        return pseudo_f_ratio(clean_ss(num, scale), clean_ss(den, scale), nt, df_res)
    return batch, fit


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
    if permutations is None:
        rng = as_rng(rng)
        parts = [np.asarray(X, dtype=float).reshape(n, -1) for X in (X_reduced, X_full, X_later)
                 if X is not None]
        design = np.hstack(parts)
        sym = span_symmetries([X_reduced, np.hstack(parts[:2]) if X_reduced is not None
                               else X_full, design], blocks)
        permutations = Permutations(n, n_permutations, rng, blocks=blocks,
                                    block_name=block_name, design=design, exact=exact,
                                    symmetries=sym)
    perms = permutations
    qa = np.hstack([qz, qt, qw])
    if residuals == "reduced":
        qr_, add = qz, True
        how = "residuals of the reduced model" if qz.shape[1] else "samples"
    else:
        qr_, add = qa, False
        how = "residuals of the full model"
    observed, null, ss_t, ss_res = permuted_f(
        resp, qa, qz.shape[1], df_t, qr_, perms, df_res=df_res, add_fitted=add,
        batch_size=batch_size, progress=progress, cancel=cancel, single_precision=True)
    pvalue = pvalue_from_null(observed, null, exact=perms.exact)
    scheme = f"{perms.describe()}; permuting {how}"
    notes = tuple(x for x in [perms.note()] if x)
    return PermutationTest(statistic=float(observed), pvalue=float(pvalue),
                           null_distribution=null, n_permutations=int(perms.total),
                           exact=bool(perms.exact), n_distinct=perms.n_distinct,
                           scheme=scheme, df=(int(df_t), int(df_res)),
                           ss=(float(ss_t), float(ss_res)), path=resp.path, notes=notes,
                           min_pvalue=perms.min_pvalue)
