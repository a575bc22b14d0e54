"""Permuted quadratic forms in single precision, with a rigorous error bound, for the
permutation engine (:func:`tallyform.core.permutation.permuted_f`).

Why. On the distance path nearly all the time of a permutation test is one matrix product
per batch, U G (U the permuted basis rows, G the n x n residual Gower matrix). A float32
product runs at twice the speed of a float64 one. The p-value only needs to know, for each
permutation, on which side of the tie threshold its pseudo-F falls; single precision settles
that for nearly every permutation, and the few it cannot settle are recomputed in float64.
The p-value is therefore the float64 engine's p-value. (The re-checked permutations go
through a float64 product of fewer rows, which may round their last digits differently, as
any change of the engine's batch size does: a statistic within a few units in the last
place of the tie threshold could fall on its other side. The tie rule of
:func:`~tallyform.core.permutation.pvalue_from_null`, 1e-9 relative, exists for that.)

How. G is symmetric, so u' G u = sum_B u_B' G_BB u_B + 2 sum_{B < C} u_B' G_BC u_C over
blocks of m = 256 samples: each block row is one float32 product u_B G_B,[B..n) and its
row-wise dot products with u are accumulated in float64. Only the blocks on and right of the
diagonal are multiplied (about half the work of U G), and every float32 inner product has
m terms, not n, which keeps the bound small.

The bound. Let u be one permuted basis row (||u||^2 <= s, measured once per call: a
permutation does not change a norm), G the residual Gower matrix, a = |u|'|G||u|, eps =
2^-24 (float32 unit roundoff), e = 2^-53 (float64), and gamma_j(x) = j x / (1 - j x). Single
precision uses u^ = fl32(u) (|u^ - u| <= eps |u| elementwise) and G^ = fl32(fl64(S)) with
S = (G + G')/2: u'Su = u'Gu, |G^ - S| <= eps' |S| with eps' = eps + e (1 + eps), and
|u|'|S||u| <= |u|'(|G| + |G'|)/2 |u| = a.
With the classical bound for an inner product in any summation order, |fl(x'y) - x'y| <=
gamma_j |x|'|y| for j terms (Higham 2002, Accuracy and Stability of Numerical Algorithms,
2nd ed., ch. 3, eq. 3.5):

  * rounding u:      (2 eps + eps^2) a
  * rounding G:      eps' (1 + eps)^2 a
  * the float32 products (inner products of at most m terms):
                     gamma_m(eps) (1 + eps') (1 + eps)^2 a
    (the blocks right of the diagonal count twice and stand for the blocks left of it, so
    the sum of |u^_B|'|G^_BC||u^_C| over the blocks used, with those weights, is |u^|'|G^||u^|)
  * the float64 sums (products of two float32 numbers are exact in float64; each term goes
    through at most L = n + n/m + 3 additions): gamma_L(e) (1 + gamma_m(eps)) (1 + eps)^3 a.

The float64 engine's own value t64 = fl64(u' fl64(u G)) is within gamma_n(e) (2 + gamma_n(e))
a of u'Gu. Hence |t32 - t64| <= c a with c the sum of all those terms (about (m + 4) eps), and
a <= ||(|G|)||_2 s <= R s, R = max(||G||_1, ||G||_inf) (the largest absolute column and row
sums; the spectral norm of a matrix is at most the geometric mean of those two norms). We
use delta = 1.01 c R s: the factor 1.01, plus one more eps for underflow (gradual, or flushed
to zero: at most about n 2^-126 in all, far below eps R s once R >= 2^-60), absorbs the
rounding of the bound itself and of the interval ends. Entries of G beyond 2^100 or a norm R
below 2^-60 (where underflow would no longer be negligible) keep the float64 engine.

From forms to the decision. The numerator sums nt forms and the denominator subtracts all k
forms from the exact trace, so num64 lies within nt delta + r_num and den64 within k delta +
r_den of the single-precision sums, r_* bounding the float64 rounding of those few additions
(in both computations). A permutation is settled in single precision only when

  * the denominator interval lies above the tolerance of ``clean_ss`` and the numerator
    interval lies wholly above it or wholly below minus it (so no sum is set to 0 and the
    ratio is finite), and
  * the pseudo-F interval [F_lo, F_hi], from the four corners of the (num, den) box through
    the same float64 expression as the engine, lies wholly on one side of the tie threshold.

With the reduced model's fitted part added back (a tested term not orthogonal to the
reduced model, Freedman & Lane 1983), num = c2 sum_j p_j + sum(const) + 2 sqrt(c2) x with
p_j the forms of the projected tested columns (each within delta: their norms are at most
1 and enter s) and x a float64 linear term computed the same way by both (its rounding
counts twice in the bound, since the products may differ in size); den is scaled by c2
(:meth:`SinglePass.sum_bounds`).

Rounding to nearest is monotone and F is monotone in each sum once the signs are fixed, so
the float64 engine's pseudo-F lies in [F_lo, F_hi] and falls on the same side of the
threshold as the single-precision one. Every other permutation is recomputed in float64.
The permuted statistics returned for settled permutations are the single-precision ones
(within delta in each sum); only figures draw them.
"""
from __future__ import annotations

import contextlib
import contextvars
import os
from dataclasses import dataclass

import numpy as np

EPS32 = 2.0 ** -24
EPS64 = 2.0 ** -53
#: Below this many samples the float64 engine is used. Measured (one core, 9999
#: permutations, one factor): the single pass takes 0.46-0.59 of the float64 time at every n
#: from 30 to 500, but below 200 samples a whole test takes a few hundredths of a second,
#: and there the permuted statistics stay float64 to the last digit (small studies are
#: where people read them one by one).
MIN_SAMPLES = 200
#: Fewer permutations than this run in float64: the setup (three passes over G) then costs
#: more than it saves (measured, n = 300-2000, one core: 19 permutations 1.2-1.3x the
#: float64 time, 99 about even, 199 0.7-0.8x, 499 0.4-0.7x).
MIN_PERMUTATIONS = 100
#: Above this many samples (or past the memory limit of :mod:`tallyform.core.memory`) the
#: float32 copy of G (4 n^2 bytes beside its 8 n^2) is not made: the float64 engine runs.
MAX_SAMPLES = 20_000
#: Samples per block of G (float32 inner products have this many terms), and rows of the
#: permuted basis handled per product: few large products (many small multi-threaded ones
#: were up to 4x slower, measured, when the machine's cores were busy with other work).
BLOCK = 256
_ROWS = 8192
_MAX_ENTRY = 2.0 ** 100
_MIN_NORM = 2.0 ** -60


def _gamma(m: int, u: float) -> float:
    return m * u / (1.0 - m * u)


def form_error_constant(n: int, m: int) -> float:
    """c such that |t32 - t64| <= c |u|'|G||u| for one quadratic form of length n computed
    in blocks of m (see the module notes), with the 1.01 safety factor."""
    m = min(m, n)
    e, e64 = EPS32, EPS64
    e_g = e + e64 * (1 + e)                     # G symmetrised in float64, then rounded
    g32 = _gamma(m, e)
    g64 = _gamma(n + n // m + 3, e64)
    single = ((2 * e + e * e) + e_g * (1 + e) ** 2 + g32 * (1 + e_g) * (1 + e) ** 2
              + g64 * (1 + g32) * (1 + e) ** 3 + e)             # the last eps: underflow
    gn = _gamma(n, e64)
    double = gn * (2 + gn)
    return 1.01 * (single + double)


def abs_norm(g: np.ndarray, rows: int = 512) -> float:
    """max(||G||_1, ||G||_inf), by blocks of rows (no n x n temporary), summed in float64
    and raised by the bound on the rounding of those sums."""
    n = g.shape[0]
    col = np.zeros(g.shape[1])
    row_max = 0.0
    for s in range(0, n, rows):
        a = np.abs(g[s:s + rows], dtype=np.float64)
        row_max = max(row_max, float(a.sum(axis=1).max()))
        col += a.sum(axis=0)
    return max(row_max, float(col.max())) * (1 + 2 * _gamma(n, EPS64))


def symmetric_float32(g: np.ndarray, rows: int = 512) -> np.ndarray:
    """fl32((G + G') / 2), by blocks of rows."""
    n = g.shape[0]
    out = np.empty((n, n), dtype=np.float32)
    for s in range(0, n, rows):
        out[s:s + rows] = (np.asarray(g[s:s + rows], dtype=np.float64)
                           + g[:, s:s + rows].T) * 0.5
    return out


# ---------------------------------------------------------------------------- tally
@dataclass
class PrecisionTally:
    """Permutations seen by the engine while the tally was open: settled in single
    precision, and re-checked in float64 (see :func:`precision_tally`)."""

    permutations: int = 0
    single: int = 0
    rechecked: int = 0

    @property
    def rechecked_share(self) -> float:
        return self.rechecked / self.single if self.single else float("nan")


_TALLY: contextvars.ContextVar = contextvars.ContextVar("tallyform_precision_tally",
                                                        default=None)


@contextlib.contextmanager
def precision_tally():
    """Count, for every engine call inside the block, the permutations computed in single
    precision and those re-checked in float64 (a diagnostic for benchmarks and tests)."""
    tally = PrecisionTally()
    token = _TALLY.set(tally)
    try:
        yield tally
    finally:
        _TALLY.reset(token)


def record(permutations: int, single: int, rechecked: int) -> None:
    tally = _TALLY.get()
    if tally is not None:
        tally.permutations += permutations
        tally.single += single
        tally.rechecked += rechecked


# ---------------------------------------------------------------------------- the pass
class SinglePass:
    """Float32 copies of G and of the basis rows, and the bound delta of one form."""

    def __init__(self, gower: np.ndarray, q_all: np.ndarray):
        n = gower.shape[0]
        self.n = n
        self.g32 = symmetric_float32(gower)
        self.q32 = np.ascontiguousarray(q_all, dtype=np.float32)
        self.edges = list(range(0, n, BLOCK)) + [n]     # the bound below uses this BLOCK
        self._pool, self._workers = None, 1
        norm = abs_norm(gower)
        s = float(np.einsum("ij,ij->i", q_all, q_all).max()) * (1 + 4 * (n + 1) * EPS64)
        self.s = s
        self.form_max = 2.0 * norm * s                  # |t32|, |t64| <= (1 + c) R s
        self.delta = form_error_constant(n, BLOCK) * norm * s

    @staticmethod
    def usable(gower, n: int, permutations: int) -> bool:
        from .memory import memory_limit
        if not isinstance(gower, np.ndarray) or not MIN_SAMPLES <= n <= MAX_SAMPLES:
            return False
        if permutations < MIN_PERMUTATIONS:
            return False
        if 4.0 * n * n > memory_limit():                # the float32 copy would not fit
            return False
        big = max(abs(float(gower.max())), abs(float(gower.min())))   # no n x n temporary
        return bool(np.isfinite(big) and big <= _MAX_ENTRY)

    @contextlib.contextmanager
    def threads(self):
        """Within this block, :meth:`forms` splits each batch over as many Python threads
        as BLAS had threads, each running BLAS on one thread (measured, n = 1000, 2 cores:
        0.19-0.20 s instead of 0.28-0.38 s for 9999 permutations; threaded BLAS on the
        block products scaled poorly and left the row sums on one core). The limit is
        process-wide while it lasts (:mod:`tallyform.core.blas_threads`). Without
        threadpoolctl (it comes with scikit-learn) the batches run as they are."""
        from .blas_threads import blas_threads, one_blas_thread
        workers = min(blas_threads(), os.cpu_count() or 1)
        if workers <= 1:
            yield
            return
        from concurrent.futures import ThreadPoolExecutor
        with one_blas_thread(), \
                ThreadPoolExecutor(workers, thread_name_prefix="tallyform-forms") as pool:
            self._pool, self._workers = pool, workers
            try:
                yield
            finally:
                self._pool = None

    def forms(self, idx: np.ndarray) -> np.ndarray:
        """The k x B single-precision forms u' G u of a batch (float64 values)."""
        k, b = self.q32.shape[0], idx.shape[0]
        out = np.empty((k, b))
        if self._pool is None or b < 64:
            self._forms_into(idx, out)
            return out
        cuts = np.linspace(0, b, 4 * self._workers + 1).astype(int)
        jobs = [self._pool.submit(self._forms_into, idx[a:c], out[:, a:c])
                for a, c in zip(cuts[:-1], cuts[1:]) if c > a]
        for job in jobs:
            job.result()
        return out

    def _forms_into(self, idx: np.ndarray, out: np.ndarray) -> None:
        """Forms of the permutations ``idx`` (B x n) into ``out`` (k x B). The arithmetic of
        one row does not depend on the others, so any split gives the same values."""
        from ._numba_forms import add_block_row
        k, b = self.q32.shape[0], idx.shape[0]
        u = np.take(self.q32, idx, axis=1).reshape(k * b, self.n)
        acc = np.zeros(k * b)
        for r0 in range(0, k * b, _ROWS):
            ur, o = u[r0:r0 + _ROWS], acc[r0:r0 + _ROWS]
            for s0, s1 in zip(self.edges[:-1], self.edges[1:]):
                v = ur[:, s0:s1] @ self.g32[s0:s1, s0:]
                add_block_row(ur, v, s0, s1 - s0, o)
        out[:] = acc.reshape(k, b)

    def sum_bounds(self, *, k: int, nt: int, trace_r: float, fit) -> tuple[float, float]:
        """Bounds on |num32 - num64| and |den32 - den64| for the engine's sums (see the
        module notes); ``fit`` describes the reduced model's fitted part (cross terms)."""
        def g(m):
            return _gamma(m, EPS64)
        delta, fmax = self.delta, self.form_max
        d_den = k * delta + 2 * g(k + 3) * (abs(trace_r) + k * fmax)
        if not fit.cross:
            return nt * delta + 2 * g(nt + 1) * nt * fmax, d_den
        # num = c2 sum(plain) + sum(const) + 2 sqrt(c2) xc, den = c2 den: the nt plain forms
        # carry delta each; xc is computed in float64 by both (in batches of other sizes:
        # its rounding, |xc| <= sqrt(s) sum ||c_j||, counts twice); the few float64
        # operations that combine them round relative to the largest magnitude involved
        c2, root = fit.c2, float(np.sqrt(fit.c2))
        xc_max = float(np.sqrt(self.s) * np.linalg.norm(fit.c, axis=0).sum())
        mag = c2 * nt * fmax + abs(float(fit.const.sum())) + 2 * root * xc_max
        d_num = (c2 * nt * delta + 2 * root * 2 * g(nt * self.n) * xc_max
                 + 2 * g(nt + 6) * mag)
        d_den = c2 * d_den + 2 * g(2) * c2 * (abs(trace_r) + k * fmax)
        return 1.01 * d_num, 1.01 * d_den

    def settle(self, num: np.ndarray, den: np.ndarray, d_num: float, d_den: float, ratio, *,
               tol: float, threshold: float) -> tuple[np.ndarray, np.ndarray]:
        """Pseudo-F of each permutation from its single-precision sums, and the mask of
        those that must be recomputed in float64.

        ``ratio(num, den) -> F`` is the engine's own float64 expression (the monotonicity
        argument needs the very same arithmetic); ``d_num``, ``d_den`` bound the distance
        of the sums from the float64 engine's (:meth:`sum_bounds`).
        """
        if max(d_num, d_den) >= _MAX_ENTRY or self.form_max < _MIN_NORM:
            return ratio(num, den), np.ones(num.shape, dtype=bool)
        n_lo, n_hi, d_lo, d_hi = num - d_num, num + d_num, den - d_den, den + d_den
        ok = (d_lo > tol) & ((n_lo > tol) | (n_hi < -tol))
        corners = np.stack([ratio(n_lo, d_lo), ratio(n_lo, d_hi), ratio(n_hi, d_lo),
                            ratio(n_hi, d_hi)])
        f_lo, f_hi = corners.min(axis=0), corners.max(axis=0)
        settled = ok & np.isfinite(f_lo) & np.isfinite(f_hi) & (
            (f_lo >= threshold) | (f_hi < threshold))
        return ratio(num, den), ~settled
