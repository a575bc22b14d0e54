"""Negative-binomial (NB2) regression of sample totals on one factor, numerically stable,
with a dispersion per group and a small-sample reference for the likelihood ratio.

The model: y_i ~ NB2 with mean mu_i = e_i lambda_g(i) (e the sampling effort, 1 without) and
variance mu + alpha mu^2, alpha = 1 / theta (Hilbe 2011). Its log-likelihood is usually
written with log-gamma functions, lgamma(y + theta) - lgamma(theta) - lgamma(y + 1) + ...,
whose terms reach 10^16 for totals of 10^15 and cancel to a few units: in float64 that
difference keeps no correct digit, and a general-purpose optimiser then stops anywhere. Here
the same log-likelihood is evaluated as

    log f(y) = -log B(theta, y + 1) - log(y + theta) - theta log1p(mu / theta)
               - y log1p(theta / mu)

(B the beta function, whose logarithm ``scipy.special.betaln`` evaluates accurately for large
arguments), every term of moderate size. For a one-way design the likelihood is maximised
exactly in two nested steps: for a given theta each group's rate solves its own score equation
(the group mean when there is no effort: the fitted mean of a factor level is its sample mean,
McCullagh & Nelder 1989), and theta maximises the profile likelihood (a grid over log theta,
then Brent's method). Wald intervals use the expected information of the log rates,
sum_i mu_i / (1 + alpha mu_i), which the rates share with nothing else (they are orthogonal to
alpha in NB2).

The size test (:func:`nb2_group_test`) gives every group its own dispersion (fitted by
:func:`fit_nb2_groups`): with one shared dispersion, groups that differ in variability make
the likelihood-ratio test of equal means reject far too often. The likelihood ratio is
referred to F with Welch's (1951) degrees of freedom, or to a parametric bootstrap of itself
(many data sets fitted at once by :func:`lr_rows`). A fit check on mid-quantile residuals
(Dunn & Smyth 1996) says when the totals are more skewed than the model allows.

References
----------
Dunn, P. K. & Smyth, G. K. (1996). Randomized quantile residuals. J. Comput. Graph. Stat. 5,
236-244.
D'Agostino, R. B. (1970). Transformation to normality of the null distribution of g1.
Biometrika 57, 679-681.
Welch, B. L. (1951). On the comparison of several mean values: an alternative approach.
Biometrika 38, 330-336.
Hilbe, J. M. (2011). Negative Binomial Regression, 2nd ed. Cambridge University Press.
McCullagh, P. & Nelder, J. A. (1989). Generalized Linear Models, 2nd ed. Chapman & Hall.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize, special, stats

__all__ = ["nb2_loglik", "fit_nb2_oneway", "NB2Fit", "fit_nb2_groups", "NB2GroupFit",
           "nb2_group_test", "NB2Test", "quantile_residuals", "skew_check", "lr_rows"]

#: Search range of log(theta) = -log(alpha): alpha from about 1e-15 (Poisson) to 1e11.
_LOG_THETA = (-25.0, 35.0)


def nb2_loglik(y, mu, theta: float) -> float:
    """Sum of NB2 log-probabilities of counts ``y`` with means ``mu`` and size ``theta``.

    >>> from scipy import stats
    >>> y, mu, theta = np.array([0.0, 3, 10]), np.array([2.0, 2, 8]), 1.5
    >>> ref = stats.nbinom.logpmf(y, theta, theta / (theta + mu)).sum()  # scipy's NB
    >>> bool(abs(nb2_loglik(y, mu, theta) - ref) < 1e-12)
    True
    """
    y = np.asarray(y, dtype=np.float64)
    mu = np.asarray(mu, dtype=np.float64)
    with np.errstate(divide="ignore"):
        per = (-special.betaln(theta, y + 1.0) - np.log(y + theta)
               - theta * np.log1p(mu / theta))
        per = per - np.where(y > 0, y * np.log1p(theta / np.where(mu > 0, mu, 1.0)), 0.0)
    return float(per.sum())


def _group_rate(y: np.ndarray, e: np.ndarray | None, theta: float) -> float:
    """The rate lambda solving sum_i e_i (y_i - e_i lambda) / (e_i (1 + e_i lambda / theta))
    = 0, i.e. sum_i (y_i - e_i lambda) / (1 + e_i lambda / theta) = 0 (decreasing in lambda)."""
    if e is None:
        return float(y.mean())
    r = y / e
    lo, hi = float(r.min()), float(r.max())
    if hi <= lo * (1 + 1e-15):
        return hi

    def score(lam):
        return float(np.sum((y - e * lam) / (1.0 + e * lam / theta)))
    return float(optimize.brentq(score, lo, hi, xtol=1e-14 * hi, rtol=1e-15, maxiter=200))


@dataclass(frozen=True)
class NB2Fit:
    """A fitted one-way NB2 model: log-likelihood, size theta, group rates, information."""

    llf: float
    theta: float
    rates: np.ndarray
    information: np.ndarray       # expected information of each group's log rate
    at_bound: bool                # theta at the upper end: no over-dispersion (Poisson)

    @property
    def alpha(self) -> float:
        return 1.0 / self.theta


def fit_nb2_oneway(y, codes, k: int, effort=None) -> NB2Fit:
    """Maximum-likelihood NB2 fit with one rate per group (``codes`` in 0..k-1)."""
    y = np.asarray(y, dtype=np.float64)
    codes = np.asarray(codes)
    e = None if effort is None else np.asarray(effort, dtype=np.float64)
    groups = [np.flatnonzero(codes == j) for j in range(k)]

    def rates_at(theta):
        return np.array([_group_rate(y[g], None if e is None else e[g], theta)
                         for g in groups])

    def means(rates):
        mu = rates[codes]
        return mu if e is None else mu * e

    def negll(log_theta):
        theta = float(np.exp(log_theta))
        return -nb2_loglik(y, means(rates_at(theta)), theta)

    grid = np.linspace(*_LOG_THETA, 61)
    values = np.array([negll(t) for t in grid])
    best = int(np.argmin(values))
    lo, hi = grid[max(best - 1, 0)], grid[min(best + 1, grid.size - 1)]
    res = optimize.minimize_scalar(negll, bounds=(lo, hi), method="bounded",
                                   options={"xatol": 1e-10})
    log_theta = float(res.x) if res.fun <= values[best] else float(grid[best])
    theta = float(np.exp(log_theta))
    rates = rates_at(theta)
    mu = means(rates)
    info = np.array([np.sum(mu[g] / (1.0 + mu[g] / theta)) for g in groups])
    return NB2Fit(llf=nb2_loglik(y, mu, theta), theta=theta, rates=rates, information=info,
                  at_bound=log_theta > _LOG_THETA[1] - 1.0)


# ---------------------------------------------------------------------------- one dispersion per group
def _theta_given_mu(y: np.ndarray, mu: np.ndarray) -> tuple[float, bool]:
    """The NB2 size theta maximising the likelihood of ``y`` at fixed means ``mu``: a grid
    over log theta evaluated at once, then Brent's method beside the best grid point.
    Returns (theta, at_upper_bound)."""
    grid = np.linspace(*_LOG_THETA, 61)
    th = np.exp(grid)[:, None]
    yy, mm = y[None, :], np.where(mu > 0, mu, 1.0)[None, :]
    with np.errstate(divide="ignore", invalid="ignore"):
        per = (-special.betaln(th, yy + 1.0) - np.log(yy + th) - th * np.log1p(mu[None, :] / th)
               - np.where(yy > 0, yy * np.log1p(th / mm), 0.0))
    values = per.sum(axis=1)
    best = int(np.nanargmax(values))
    lo, hi = grid[max(best - 1, 0)], grid[min(best + 1, grid.size - 1)]
    res = optimize.minimize_scalar(lambda t: -nb2_loglik(y, mu, float(np.exp(t))),
                                   bounds=(lo, hi), method="bounded",
                                   options={"xatol": 1e-9})
    t = float(res.x) if -res.fun >= values[best] else float(grid[best])
    return float(np.exp(t)), t > _LOG_THETA[1] - 1.0


def _common_rate(y, e, theta_i) -> float:
    """The rate lambda solving sum_i (y_i - e_i lambda) / (1 + e_i lambda / theta_i) = 0."""
    r = y / e
    lo, hi = float(r.min()), float(r.max())
    if hi <= lo * (1 + 1e-15):
        return hi

    def score(lam):
        return float(np.sum((y - e * lam) / (1.0 + e * lam / theta_i)))
    return float(optimize.brentq(score, lo, hi, xtol=1e-14 * hi, rtol=1e-15, maxiter=200))


@dataclass(frozen=True)
class NB2GroupFit:
    """An NB2 fit with one size theta_g per group and either one rate per group or one
    rate shared by all groups (``common``)."""

    llf: float
    thetas: np.ndarray            # per group
    rates: np.ndarray             # per group (all equal when common)
    information: np.ndarray       # expected information of each group's log rate
    at_bound: np.ndarray          # per group: no over-dispersion left (Poisson)
    common: bool

    @property
    def alphas(self) -> np.ndarray:
        return 1.0 / self.thetas


def fit_nb2_groups(y, codes, k: int, effort=None, *, common: bool = False) -> NB2GroupFit:
    """Maximum-likelihood NB2 fit with a size theta per group (``codes`` in 0..k-1).

    ``common=False``: each group has its own rate (the groups are fitted separately);
    ``common=True``: one rate for all (the null model of equal rates). The rates and the
    sizes are orthogonal parameters in NB2, so alternating between them (each step an exact
    one-dimensional maximisation) converges in a few rounds.
    """
    y = np.asarray(y, dtype=np.float64)
    codes = np.asarray(codes)
    e = np.ones_like(y) if effort is None else np.asarray(effort, dtype=np.float64)
    groups = [np.flatnonzero(codes == j) for j in range(k)]
    thetas = np.full(k, 1.0)
    if common:
        rates = np.full(k, float(y.sum() / e.sum()))
    else:
        rates = np.array([float(y[g].sum() / e[g].sum()) for g in groups])
    bound = np.zeros(k, dtype=bool)
    llf_old = -np.inf
    for _ in range(100):
        mu = rates[codes] * e
        for j, g in enumerate(groups):
            thetas[j], bound[j] = _theta_given_mu(y[g], mu[g])
        theta_i = thetas[codes]
        if common:
            rates[:] = _common_rate(y, e, theta_i)
        elif effort is not None:
            rates = np.array([_common_rate(y[g], e[g], theta_i[g]) for g in groups])
        mu = rates[codes] * e
        llf = sum(nb2_loglik(y[g], mu[g], thetas[j]) for j, g in enumerate(groups))
        if effort is None and not common:
            break                   # rates are the group means whatever theta is
        if abs(llf - llf_old) <= 1e-11 * max(1.0, abs(llf)):
            break
        llf_old = llf
    info = np.array([np.sum(mu[g] / (1.0 + mu[g] / thetas[j])) for j, g in enumerate(groups)])
    return NB2GroupFit(llf=float(llf), thetas=thetas.copy(), rates=rates.copy(),
                       information=info, at_bound=bound.copy(), common=common)


# ---------------------------------------------------------------------------- many data sets at once
def _loglik_rows(y: np.ndarray, mu: np.ndarray, theta: np.ndarray) -> np.ndarray:
    """Row sums of NB2 log-probabilities (the stable form of :func:`nb2_loglik`); arrays of
    shape (B, m), ``theta`` broadcastable."""
    theta = np.broadcast_to(theta, y.shape)
    with np.errstate(divide="ignore", invalid="ignore"):
        per = (-special.betaln(theta, y + 1.0) - np.log(y + theta)
               - theta * np.log1p(mu / theta)
               - np.where(y > 0, y * np.log1p(theta / np.where(mu > 0, mu, 1.0)), 0.0))
    return per.sum(axis=1)


def _theta_score(y, mu, t, slope: bool = False):
    """The theta score at log theta ``t`` (one value per row), and with ``slope`` its
    derivative in log theta."""
    th = np.exp(t)[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        sc = (special.digamma(y + th) - special.digamma(th) - np.log1p(mu / th)
              + (mu - y) / (th + mu)).sum(axis=1)
        if not slope:
            return sc
        d = (special.polygamma(1, y + th) - special.polygamma(1, th)
             + mu / (th * (th + mu)) - (mu - y) / (th + mu) ** 2).sum(axis=1)
    return sc, d * th[:, 0]


#: Above this log theta the digamma differences of the score lose their sign to rounding;
#: a maximum beyond it is found on the (stable) likelihood itself.
_SCORE_TOP = 12.0


def _theta_high(y: np.ndarray, mu: np.ndarray, iters: int = 60) -> np.ndarray:
    """Log theta in [_SCORE_TOP, upper end] maximising each row's likelihood (golden-section
    search on the stable log-likelihood; nearly Poisson rows)."""
    g = (np.sqrt(5.0) - 1.0) / 2.0
    a = np.full(y.shape[0], _SCORE_TOP)
    b = np.full(y.shape[0], _LOG_THETA[1])

    def f(t):
        return _loglik_rows(y, mu, np.exp(t)[:, None])
    c, d = b - g * (b - a), a + g * (b - a)
    fc, fd = f(c), f(d)
    for _ in range(iters):
        left = fc > fd
        b = np.where(left, d, b)
        a = np.where(left, a, c)
        c, d = np.where(left, b - g * (b - a), d), np.where(left, c, a + g * (b - a))
        fn = f(np.where(left, c, d))
        fc, fd = np.where(left, fn, fd), np.where(left, fc, fn)
    return (a + b) / 2


def _theta_rows(y: np.ndarray, mu: np.ndarray, start: np.ndarray | None = None,
                tol: float = 1e-10) -> np.ndarray:
    """Row-wise log size (log theta) maximising the likelihood at fixed means, for B data
    sets at once.

    The theta score, sum_i [psi(y_i + theta) - psi(theta) - log1p(mu_i / theta)
    + (mu_i - y_i) / (theta + mu_i)], falls through 0 at the maximum; it tends to
    sum_i ((y_i - mu_i)^2 - y_i) / (2 theta^2) as theta grows, so a row whose sum is not
    positive has no over-dispersion and gets the upper end of the range (Poisson); a row
    whose score is still positive at theta = e^12 is maximised on the stable likelihood
    (:func:`_theta_high`). Others: Newton steps on log theta kept inside a bracket of the
    root in [-25, 12] (where the digamma differences are accurate), bisecting whenever a
    step would leave it; converged rows drop out."""
    B = y.shape[0]
    out = np.full(B, _LOG_THETA[1])
    poisson = np.sum((y - mu) ** 2 - y, axis=1) <= 0
    live = np.flatnonzero(~poisson)
    if live.size:
        high = _theta_score(y[live], mu[live], np.full(live.size, _SCORE_TOP)) > 0
        if high.any():
            out[live[high]] = _theta_high(y[live[high]], mu[live[high]])
        live = live[~high]
    if not live.size:
        return out
    yl, ml = y[live], mu[live]
    lo = np.full(live.size, _LOG_THETA[0])
    hi = np.full(live.size, _SCORE_TOP)
    x = np.zeros(live.size) if start is None else np.clip(start[live], lo + 1e-3, hi - 1e-3)
    act = np.arange(live.size)
    for _ in range(200):
        sc, d = _theta_score(yl[act], ml[act], x[act], slope=True)
        up = sc > 0
        lo[act] = np.where(up, x[act], lo[act])
        hi[act] = np.where(up, hi[act], x[act])
        with np.errstate(divide="ignore", invalid="ignore"):
            new = x[act] + np.where(d < 0, -sc / d, np.nan)
        bad = ~np.isfinite(new) | (new <= lo[act]) | (new >= hi[act])
        new = np.where(bad, (lo[act] + hi[act]) / 2, new)
        done = (np.abs(new - x[act]) <= tol) | (hi[act] - lo[act] <= tol)
        x[act] = new
        act = act[~done]
        if not act.size:
            break
    out[live] = x
    return out


def _rate_rows(y, e, theta, start, iters: int = 100, tol: float = 1e-13) -> np.ndarray:
    """Row-wise rate lambda solving sum_i (y_i - e_i lambda) / (1 + e_i lambda / theta_i) = 0
    by its fixed point lambda = sum w y / sum w e, w = 1 / (1 + e lambda / theta)."""
    lam = start.copy()
    for _ in range(iters):
        w = 1.0 / (1.0 + e * lam[:, None] / theta)
        new = (w * y).sum(axis=1) / (w * e).sum(axis=1)
        done = np.max(np.abs(new - lam) / np.maximum(new, 1e-300)) <= tol
        lam = new
        if done:
            break
    return lam


def lr_rows(Y, codes, k: int, effort=None, rounds: int = 20) -> np.ndarray:
    """The likelihood ratio of :func:`nb2_group_test` for each row of ``Y`` (B data sets of
    the same design), fitted with the orthogonal alternation of :func:`fit_nb2_groups`
    (a fixed number of rounds: the rates and sizes are orthogonal, so a few suffice)."""
    Y = np.asarray(Y, dtype=np.float64)
    B, n = Y.shape
    e = np.ones(n) if effort is None else np.asarray(effort, dtype=np.float64)
    groups = [np.flatnonzero(np.asarray(codes) == j) for j in range(k)]
    E = np.broadcast_to(e, Y.shape)
    llf_full = np.zeros(B)
    for g in groups:
        y, eg = Y[:, g], E[:, g]
        lam = y.sum(axis=1) / eg.sum(axis=1)
        t = None
        for _ in range(1 if effort is None else rounds):
            t = _theta_rows(y, lam[:, None] * eg, t)
            if effort is None:
                break
            new = _rate_rows(y, eg, np.exp(t)[:, None], lam)
            moved = np.max(np.abs(new - lam) / np.maximum(new, 1e-300))
            lam = new
            if moved <= 1e-10:
                break
        llf_full += _loglik_rows(y, lam[:, None] * eg, np.exp(t)[:, None])
    lam = Y.sum(axis=1) / E.sum(axis=1)
    logt = np.zeros((B, k))
    theta = np.ones((B, n))
    for r in range(rounds):
        for j, g in enumerate(groups):
            logt[:, j] = _theta_rows(Y[:, g], lam[:, None] * E[:, g],
                                     None if r == 0 else logt[:, j])
            theta[:, g] = np.exp(logt[:, j])[:, None]
        new = _rate_rows(Y, E, theta, lam)
        moved = np.max(np.abs(new - lam) / np.maximum(new, 1e-300))
        lam = new
        if moved <= 1e-10:
            break
    llf_null = _loglik_rows(Y, lam[:, None] * E, theta)
    return np.maximum(2.0 * (llf_full - llf_null), 0.0)


# ---------------------------------------------------------------------------- the test
def quantile_residuals(y, mu, theta) -> np.ndarray:
    """Mid-quantile residuals of counts under NB2(mu, theta): Phi^-1 of the average of
    F(y - 1) and F(y) (Dunn & Smyth 1996 without the randomisation, so the same data give
    the same residuals; at counts of hundreds the two hardly differ)."""
    y = np.asarray(y, dtype=np.float64)
    mu = np.asarray(mu, dtype=np.float64)
    theta = np.broadcast_to(np.asarray(theta, dtype=np.float64), y.shape)
    p = theta / (theta + mu)
    hi = stats.nbinom.cdf(y, theta, p)
    lo = np.where(y > 0, stats.nbinom.cdf(y - 1, theta, p), 0.0)
    u = np.clip((hi + lo) / 2, 1e-300, 1 - 1e-16)
    return stats.norm.ppf(u)


def skew_check(resid: np.ndarray, *, alpha: float = 0.01) -> tuple[bool, float]:
    """(fired, p): one-sided test that the residuals are more right-skewed than normal
    residuals would be (sample skewness against its normal-theory law, scipy's skewtest,
    D'Agostino 1970), at ``alpha``. Needs 8 residuals or more (else never fires)."""
    r = np.asarray(resid, dtype=np.float64)
    if r.size < 8 or np.ptp(r) == 0:
        return False, float("nan")
    res = stats.skewtest(r, alternative="greater")
    return bool(res.pvalue <= alpha), float(res.pvalue)


@dataclass(frozen=True)
class NB2Test:
    """Answer of :func:`nb2_group_test`."""

    statistic: float            # likelihood ratio
    pvalue: float
    df: tuple
    reference: str
    rows: list                  # (ratio, low, high) per group
    full: NB2GroupFit
    null: NB2GroupFit
    skewed: bool
    skew_pvalue: float
    n_boot: int | None


def _welch_df(v: np.ndarray, f: np.ndarray) -> float:
    w = 1.0 / v
    k = v.size
    lam = float(np.sum((1 - w / w.sum()) ** 2 / f))
    return (k ** 2 - 1) / (3 * lam) if lam > 0 else np.inf


def _lr(y, codes, k, effort):
    full = fit_nb2_groups(y, codes, k, effort)
    null = fit_nb2_groups(y, codes, k, effort, common=True)
    return max(2.0 * (full.llf - null.llf), 0.0), full, null


def nb2_group_test(y, codes, k: int, effort=None, *, level: float = 0.95,
                   reference: str = "bootstrap", n_boot: int = 999, rng=None,
                   progress=None, cancel=None) -> NB2Test:
    """Likelihood-ratio test of equal rates with a dispersion per group, and Wald intervals
    of the rate ratios to group 0.

    reference 'F': LR / q against F(q, nu), nu Welch's (1951) denominator degrees of freedom
    with weights the information of each group's log rate and n_g - 1 degrees of freedom per
    group (the dispersion of a group is estimated from its own n_g totals; the analogue of
    Welch's test for NB2 rates). reference 'bootstrap': the LR's null distribution from
    ``n_boot`` data sets drawn from the fitted null model (common rate, the groups' own
    dispersions), p = (1 + #{LR* >= LR}) / (1 + n_boot). The intervals use t quantiles with
    the Welch-Satterthwaite degrees of freedom of each contrast (normal quantiles for the
    bootstrap are not used: the same intervals are printed either way).
    """
    from .errors import Cancelled
    y = np.asarray(y, dtype=np.float64)
    codes = np.asarray(codes)
    lr, full, null = _lr(y, codes, k, effort)
    n_g = np.bincount(codes, minlength=k).astype(float)
    v = 1.0 / full.information
    q = k - 1
    nu = _welch_df(v, n_g - 1.0)
    n_done = None
    if reference == "F":
        p = float(stats.f.sf(lr / q, q, nu))
        ref = f"F({q}, {nu:.3g}) reference for LR/{q}, Welch degrees of freedom"
        df = (q, float(nu))
    elif reference == "bootstrap":
        gen = np.random.default_rng(rng)
        e = np.ones_like(y) if effort is None else np.asarray(effort, dtype=np.float64)
        mu0 = null.rates[codes] * e
        th0 = np.minimum(null.thetas[codes], 1e12)
        hits, done, chunk = 0, 0, 25
        while done < n_boot:
            if cancel is not None and cancel():
                raise Cancelled("negative-binomial bootstrap stopped")
            m = min(chunk, n_boot - done)
            Yb = gen.negative_binomial(th0, th0 / (th0 + mu0), size=(m, y.size))
            lb = lr_rows(Yb.astype(np.float64), codes, k, effort)
            hits += int(np.sum(lb >= lr * (1 - 1e-9) - 1e-12))
            done += m
            if progress is not None:
                progress(done, n_boot)
        p = (1 + hits) / (1 + n_boot)
        n_done = n_boot
        ref = f"parametric bootstrap of the LR ({n_boot} draws from the fitted null model)"
        df = (q,)
    else:
        raise ValueError(f"unknown reference {reference!r}")
    rows = [(1.0, np.nan, np.nan)]
    for j in range(1, k):
        b = float(np.log(full.rates[j] / full.rates[0]))
        var = v[j] + v[0]
        dfj = var ** 2 / (v[j] ** 2 / (n_g[j] - 1) + v[0] ** 2 / (n_g[0] - 1))
        t = float(stats.t.ppf(0.5 + level / 2, dfj))
        se = float(np.sqrt(var))
        rows.append((float(np.exp(b)), float(np.exp(b - t * se)), float(np.exp(b + t * se))))
    e = np.ones_like(y) if effort is None else np.asarray(effort, dtype=np.float64)
    z = quantile_residuals(y, full.rates[codes] * e, np.minimum(full.thetas[codes], 1e12))
    skewed, skew_p = skew_check(z, alpha=0.05)
    return NB2Test(statistic=lr, pvalue=p, df=df, reference=ref, rows=rows, full=full,
                   null=null, skewed=skewed, skew_pvalue=skew_p, n_boot=n_done)
