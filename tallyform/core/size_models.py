"""Linear models of log size behind :func:`tallyform.core.size_tests.size_test`.

- :func:`welch_james`: the test of group effects when every group has its own variance
  (Welch 1951 for one factor; the general linear hypothesis form of Johansen 1980, so that a
  block factor can enter as a nuisance term). Without blocks it is Welch's ANOVA exactly
  (two groups: Welch's t test, F = t^2).
- :func:`block_hotelling`: complete blocks with one sample of every group: Hotelling's (1931)
  T^2 on the within-block differences to the first group, exact whatever the groups'
  variances and covariances (two groups: the paired t test).
- :func:`pooled_f`: the classical F test of group effects after blocks (one pooled variance;
  randomized-block ANOVA with blocks, one-way ANOVA without).
- :func:`pooled_f_level`: the true level of the pooled F test for normal data with given
  group sizes and variances, by an exact-law simulation of the group means and sums of
  squares; used to say when unequal variances matter for plain ANOVA.
- :func:`mixed_model_test`: log size with a random intercept per sampling unit (statsmodels
  MixedLM, REML), Wald F of the group effects against F(q, between-within df).

References
----------
Welch, B. L. (1951). On the comparison of several mean values: an alternative approach.
Biometrika 38, 330-336.
Hotelling, H. (1931). The generalization of Student's ratio. Ann. Math. Statist. 2,
360-378.
Johansen, S. (1980). The Welch-James approximation to the distribution of the residual sum
of squares in a weighted linear regression. Biometrika 67, 85-92.
Box, G. E. P. (1954). Some theorems on quadratic forms applied in the study of analysis of
variance problems, I. Ann. Math. Statist. 25, 290-302.
Laird, N. M. & Ware, J. H. (1982). Random-effects models for longitudinal data. Biometrics
38, 963-974.
Schluchter, M. D. & Elashoff, J. D. (1990). Small-sample adjustments to tests with
unbalanced repeated measures assuming several covariance structures. J. Stat. Comput.
Simul. 37, 69-87 (the between-within degrees of freedom).
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from .errors import DesignError

__all__ = ["LinearTest", "welch_james", "pooled_f", "pooled_f_level", "mixed_model_test",
           "group_design", "one_per_block", "block_hotelling"]


@dataclass(frozen=True)
class LinearTest:
    """F test of the group effects in a linear model of log size.

    ``contrasts``: per group but the first, (estimate, standard error, df) of the difference
    in mean log size to the first group, for t intervals.
    """

    statistic: float
    pvalue: float
    df: tuple
    contrasts: tuple
    extra: dict


def group_design(codes: np.ndarray, k: int, block_codes: np.ndarray | None = None):
    """Design [intercept, block indicators (all but the first), group indicators (all but
    the first)] and the column positions of the group indicators."""
    n = codes.size
    cols = [np.ones(n)]
    if block_codes is not None:
        b = pd.factorize(np.asarray(block_codes))[0]
        cols += [(b == j).astype(float) for j in range(1, int(b.max()) + 1)]
    first = len(cols)
    cols += [(codes == j).astype(float) for j in range(1, k)]
    X = np.column_stack(cols)
    return X, np.arange(first, first + k - 1)


def _check_rank(X: np.ndarray, where: str) -> None:
    if np.linalg.matrix_rank(X) < X.shape[1]:
        raise DesignError(f"the groups and the blocks are confounded ({where}): some group "
                          "effect cannot be separated from the block effects.",
                          hint="Check that every group occurs in blocks shared with other "
                               "groups, or drop blocks.")


def welch_james(y, codes, k: int, block_codes=None) -> LinearTest:
    """Welch-James test of equal group means of ``y``, each group with its own variance.

    Weighted least squares with weights 1 / s_g^2, where s_g^2 is group g's residual mean
    square in the ordinary least-squares fit (residual sum of squares over f_g, the group's
    share sum_i (1 - h_ii) of the residual degrees of freedom). Johansen's (1980)
    statistic T / c with T the Wald statistic of the q group effects,
    A = sum_g [tr((M P_g)^2) + tr(M P_g)^2] / (2 f_g), M = V L' (L V L')^-1 L,
    P_g = V X_g' X_g / s_g^2, c = q + 2A - 6A / (q + 2), referred to F(q, q (q + 2) / (3A)).
    Without blocks, f_g = n_g - 1 and this is Welch's (1951) heteroscedastic ANOVA.
    """
    y = np.asarray(y, dtype=np.float64)
    X, gcols = group_design(codes, k, block_codes)
    _check_rank(X, "Welch test")
    n, p = X.shape
    if n - p <= 0:
        raise DesignError("no residual degrees of freedom are left after the blocks and the "
                          "groups.")
    XtX_inv = np.linalg.pinv(X.T @ X)
    beta0 = XtX_inv @ X.T @ y
    resid = y - X @ beta0
    h = np.einsum("ij,jk,ik->i", X, XtX_inv, X)
    f = np.array([np.sum(1.0 - h[codes == j]) for j in range(k)])
    ss = np.array([np.sum(resid[codes == j] ** 2) for j in range(k)])
    if (f <= 1e-9).any():
        bad = int(np.flatnonzero(f <= 1e-9)[0])
        raise DesignError(f"group {bad + 1} has no residual degrees of freedom after the "
                          "blocks, so its variance cannot be estimated.",
                          hint="Use method='anova' (one pooled variance), or drop blocks.")
    s2 = ss / f
    scale = max(float(np.max(s2)), 1e-300)
    if (s2 <= 1e-14 * scale).any():
        bad = int(np.flatnonzero(s2 <= 1e-14 * scale)[0])
        raise DesignError(f"the log sizes of group {bad + 1} do not vary (after blocks), so "
                          "its variance is 0 and the Welch weights are undefined.",
                          hint="Check the data; method='kruskal' ranks the totals instead.")
    w = 1.0 / s2[codes]
    XtWX = X.T @ (X * w[:, None])
    V = np.linalg.inv(XtWX)
    beta = V @ (X.T @ (w * y))
    L = np.zeros((k - 1, p))
    L[np.arange(k - 1), gcols] = 1.0
    Lb = L @ beta
    LVL = L @ V @ L.T
    T = float(Lb @ np.linalg.solve(LVL, Lb))
    M = V @ L.T @ np.linalg.solve(LVL, L)
    q = k - 1
    A = 0.0
    P = []
    for j in range(k):
        Xg = X[codes == j]
        Pg = V @ (Xg.T @ Xg) / s2[j]
        P.append(Pg)
        MP = M @ Pg
        A += (np.trace(MP @ MP) + np.trace(MP) ** 2) / (2.0 * f[j])
    c = q + 2 * A - 6 * A / (q + 2)
    stat = T / c
    df2 = q * (q + 2) / (3 * A)
    pvalue = float(stats.f.sf(stat, q, df2))
    contrasts = []
    for i, col in enumerate(gcols):
        ell = np.zeros(p)
        ell[col] = 1.0
        var = float(ell @ V @ ell)
        m1 = np.outer(V @ ell, ell) / var
        a1 = sum(np.trace(m1 @ P[j]) ** 2 / f[j] for j in range(k))
        contrasts.append((float(beta[col]), float(np.sqrt(var)), float(1.0 / a1)))
    return LinearTest(float(stat), pvalue, (q, float(df2)), tuple(contrasts),
                      {"group_variances": s2, "group_df": f})


def one_per_block(codes, k: int, block_codes) -> bool:
    """True when every block holds exactly one sample of every group."""
    b = pd.factorize(np.asarray(block_codes))[0]
    table = np.zeros((int(b.max()) + 1, k), dtype=int)
    np.add.at(table, (b, np.asarray(codes)), 1)
    return bool((table == 1).all())


def block_hotelling(y, codes, k: int, block_codes) -> LinearTest:
    """Hotelling's T^2 test that the within-block differences to group 0 have mean 0, for
    complete blocks with one sample per group: F = (b - q) T^2 / (q (b - 1)) on (q, b - q)
    degrees of freedom, q = k - 1, b blocks; intervals are paired t intervals (b - 1 df).
    Block effects cancel in the differences, and no assumption on the variances is made."""
    y = np.asarray(y, dtype=np.float64)
    b = pd.factorize(np.asarray(block_codes))[0]
    nb = int(b.max()) + 1
    Y = np.empty((nb, k))
    Y[b, np.asarray(codes)] = y
    D = Y[:, 1:] - Y[:, :1]
    q = k - 1
    if nb - q <= 0:
        raise DesignError(f"{nb} blocks cannot carry a test of {k} groups compared within "
                          "blocks (Hotelling's T^2 needs more blocks than groups - 1).",
                          hint="Use method='anova' (one pooled variance), or drop blocks.")
    mean = D.mean(axis=0)
    S = np.atleast_2d(np.cov(D, rowvar=False))
    if np.linalg.matrix_rank(S) < q:
        raise DesignError("the within-block differences between groups do not vary, so the "
                          "test of groups within blocks is undefined.",
                          hint="Check the data; method='kruskal' ranks the totals instead.")
    T2 = float(nb * mean @ np.linalg.solve(S, mean))
    stat = (nb - q) * T2 / (q * (nb - 1))
    pvalue = float(stats.f.sf(stat, q, nb - q))
    contrasts = tuple((float(mean[j]), float(np.sqrt(S[j, j] / nb)), float(nb - 1))
                      for j in range(q))
    return LinearTest(stat, pvalue, (q, nb - q), contrasts, {"T2": T2})


def pooled_f(y, codes, k: int, block_codes=None) -> LinearTest:
    """Classical F of the group effects after blocks (one pooled residual variance)."""
    y = np.asarray(y, dtype=np.float64)
    X, gcols = group_design(codes, k, block_codes)
    _check_rank(X, "ANOVA")
    n, p = X.shape
    df_res = n - p
    if df_res <= 0:
        raise DesignError("no residual degrees of freedom are left after the blocks and the "
                          "groups.")
    XtX_inv = np.linalg.inv(X.T @ X)
    beta = XtX_inv @ X.T @ y
    rss = float(np.sum((y - X @ beta) ** 2))
    Xr = np.delete(X, gcols, axis=1)
    br = np.linalg.lstsq(Xr, y, rcond=None)[0]
    rss_r = float(np.sum((y - Xr @ br) ** 2))
    q = k - 1
    mse = rss / df_res
    stat = ((rss_r - rss) / q) / mse if mse > 0 else np.inf
    pvalue = float(stats.f.sf(stat, q, df_res))
    contrasts = tuple((float(beta[c]), float(np.sqrt(mse * XtX_inv[c, c])), float(df_res))
                      for c in gcols)
    return LinearTest(float(stat), pvalue, (q, df_res), contrasts, {"mse": mse})


def pooled_f_level(n_g, var_g, *, alpha: float = 0.05, n_sim: int = 20000) -> float:
    """Rejection rate of the one-way pooled F test at ``alpha`` when group g holds n_g normal
    values of variance var_g and the means are equal.

    Exact-law simulation (fixed seed, so the same inputs give the same answer): group means
    are N(0, var_g / n_g) and within sums of squares var_g chi^2(n_g - 1), independent; the
    F ratio is formed from them as the ANOVA forms it. Box (1954) gives the same quantity by
    an approximation.
    """
    n_g = np.asarray(n_g, dtype=float)
    var_g = np.asarray(var_g, dtype=float)
    k, N = n_g.size, n_g.sum()
    rng = np.random.default_rng(20261203)
    means = rng.standard_normal((n_sim, k)) * np.sqrt(var_g / n_g)
    within = rng.chisquare(np.maximum(n_g - 1, 1e-9), size=(n_sim, k)) * var_g
    grand = means @ n_g / N
    ssb = ((means - grand[:, None]) ** 2) @ n_g
    F = (ssb / (k - 1)) / (within.sum(axis=1) / (N - k))
    return float(np.mean(F >= stats.f.isf(alpha, k - 1, N - k)))


def mixed_model_test(y, codes, k: int, unit_codes, *, block_codes=None,
                     outer_codes=None) -> LinearTest:
    """Log size with a random intercept per unit (REML, statsmodels MixedLM); Wald F of the
    group effects, referred to F(q, n - rank[unit indicators, fixed design]) (the
    between-within degrees of freedom, exact for a balanced design where the factor varies
    within units).

    ``outer_codes`` (optional): coarser units enclosing the units; they get a random
    intercept of their own (variance component nested above the units).
    """
    from statsmodels.regression.mixed_linear_model import MixedLM
    y = np.asarray(y, dtype=np.float64)
    X, gcols = group_design(codes, k, block_codes)
    _check_rank(X, "mixed model")
    units = np.asarray(unit_codes)
    U = np.zeros((y.size, int(units.max()) + 1))
    U[np.arange(y.size), units] = 1.0
    df_res = int(y.size - np.linalg.matrix_rank(np.column_stack([U, X])))
    if df_res <= 0:
        raise DesignError("no within-unit degrees of freedom are left for the mixed model.",
                          hint="The factor needs replication within units.")
    if outer_codes is None:
        model = MixedLM(y, X, groups=units)
    else:
        from statsmodels.regression.mixed_linear_model import VCSpec
        outer = np.asarray(outer_codes)
        mats, names = [], []
        for o in range(int(outer.max()) + 1):
            inside = outer == o
            present = np.unique(units[inside])
            mats.append((U[inside][:, present]))
            names.append([str(u) for u in present])
        vc = VCSpec(["units"], [names], [mats])
        model = MixedLM(y, X, groups=outer, exog_vc=vc)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fit = None
        for method in (["lbfgs"], ["bfgs"], ["powell", "lbfgs"]):
            try:
                fit = model.fit(reml=True, method=method)
            except (np.linalg.LinAlgError, ValueError):
                continue
            if np.all(np.isfinite(fit.fe_params)) and np.all(np.isfinite(fit.bse_fe)):
                break
    if fit is None:
        raise DesignError("the mixed model of log size could not be fitted.",
                          hint="Too few units or samples; try units=False with care, or "
                               "aggregate the samples of each unit.")
    beta = np.asarray(fit.fe_params)
    V = np.asarray(fit.cov_params())[: X.shape[1], : X.shape[1]]
    L = np.zeros((k - 1, X.shape[1]))
    L[np.arange(k - 1), gcols] = 1.0
    Lb = L @ beta
    q = k - 1
    stat = float(Lb @ np.linalg.solve(L @ V @ L.T, Lb)) / q
    pvalue = float(stats.f.sf(stat, q, df_res))
    contrasts = tuple((float(beta[c]), float(np.sqrt(V[c, c])), float(df_res)) for c in gcols)
    re_var = float(np.asarray(fit.cov_re)[0, 0]) if fit.cov_re.size else 0.0
    return LinearTest(stat, pvalue, (q, df_res), contrasts,
                      {"unit_variance": re_var, "residual_variance": float(fit.scale),
                       "converged": bool(getattr(fit, "converged", True))})
