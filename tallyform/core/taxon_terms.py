"""Per-taxon terms behind :func:`tallyform.core.contributions.taxon_contributions`.

The shape side's exact split (feature centroids, with the sampling noise of each term) and
average over between-group pairs, the size side's ratios of mean abundance, and the
delete-one-unit jackknife they share. Every quantity is computed once on all the units and
once with each unit left out (a unit is a sample unless ``units`` groups them); the
leave-one-out values are updates of sums, so the jackknife costs a few passes over the data.

Intervals are jackknife-t intervals (Quenouille 1956; Tukey 1958; Efron & Tibshirani 1993,
ch. 11): theta_hat +- t_df * se_J with the two-sample jackknife variance
se_J^2 = sum_g (m_g - 1) / m_g * sum_{u in g} (theta_(-u) - mean_g)^2 (Arvesen 1969) and
Welch-Satterthwaite degrees of freedom from the two groups' parts (Satterthwaite 1946;
Welch 1947).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from .errors import Cancelled, InputError
from .memory import check_memory
from .table import CommunityTable, listing

__all__ = ["SPLIT_MEASURES", "PAIR_MEASURES", "Groups", "ShapeTerms", "SizeRatios",
           "centroid_noise", "jackknife_interval", "Ticker", "split_terms", "pair_terms",
           "size_ratios"]

SPLIT_MEASURES = ("hellinger", "chi_square", "chord", "aitchison", "euclidean")
# measures that are, for one pair, a sum over taxa: (on presence?, denominator of the pair)
PAIR_MEASURES = {
    "bray_curtis": (False, "sum"),
    "sorensen": (True, "sum"),
    "quantitative_jaccard": (False, "max"),
    "jaccard": (True, "max"),
    "manhattan": (False, None),
    "canberra": (False, "taxon"),
}
#: fewest units per group for a jackknife interval of a noise-corrected term (the noise of
#: a group with one unit left out needs two units)
MIN_UNITS = 3


@dataclass(frozen=True)
class Groups:
    """Rows of the two groups in the sub-table and the unit (0..m-1) of each row."""

    ia: np.ndarray
    ib: np.ndarray
    codes_a: np.ndarray
    codes_b: np.ndarray

    @property
    def ma(self) -> int:
        return int(self.codes_a.max()) + 1

    @property
    def mb(self) -> int:
        return int(self.codes_b.max()) + 1


@dataclass(frozen=True)
class ShapeTerms:
    """One term per taxon, its noise-corrected value and their leave-one-unit-out values.

    ``net`` is the term minus its sampling noise (unbiased for the population term of an
    exact split; the term itself for an average over pairs, which is already unbiased).
    ``jack_a`` / ``jack_b`` (units x taxa) hold ``net`` with one unit of a / b left out
    (None without a jackknife).
    """

    terms: np.ndarray
    net: np.ndarray
    noise: np.ndarray | None
    jack_a: np.ndarray | None
    jack_b: np.ndarray | None
    feature_a: np.ndarray
    feature_b: np.ndarray
    diff: np.ndarray
    params: dict
    notes: tuple
    size_free: bool


@dataclass(frozen=True)
class SizeRatios:
    """log2 ratios of mean abundance (b / a) per taxon and of the totals, with their
    leave-one-unit-out values (``jack_*``: units x taxa, ``jack_ref_*``: units)."""

    mean_a: np.ndarray
    mean_b: np.ndarray
    log2_ratio: np.ndarray
    ref: float
    tot_a: float
    tot_b: float
    jack_a: np.ndarray | None = None
    jack_b: np.ndarray | None = None
    jack_ref_a: np.ndarray | None = None
    jack_ref_b: np.ndarray | None = None


class Ticker:
    """Progress and cancellation over the steps of the computation."""

    def __init__(self, total: int, progress, cancel):
        self.done, self.total, self.progress, self.cancel = 0, total, progress, cancel

    def check(self):
        if self.cancel is not None and self.cancel():
            raise Cancelled(f"taxon contributions stopped after {self.done} of {self.total} "
                            "steps.")

    def step(self, k: int = 1):
        self.done += k
        if self.progress is not None:
            self.progress(self.done, self.total)


# ============================================================================== noise
def _unit_sums(F: np.ndarray, codes: np.ndarray):
    m = int(codes.max()) + 1
    S = np.zeros((m, F.shape[1]))
    np.add.at(S, codes, F)
    nu = np.bincount(codes, minlength=m).astype(np.float64)
    return S, nu


def centroid_noise(F: np.ndarray, codes: np.ndarray) -> np.ndarray:
    """Sampling variance of a group centroid, per column, from m independent units.

    Linearised variance of the ratio mean sum_u S_u / sum_u n_u (S_u the column sums of unit
    u, n_u its samples): m / (m - 1) * sum_u (S_u - n_u fbar)^2 / N^2, N = sum_u n_u. With
    one sample per unit it is the usual s^2 / n (divisor n - 1 in s^2).
    """
    m = int(codes.max()) + 1
    if m < 2:
        return np.full(F.shape[1], np.nan)
    S, nu = _unit_sums(F, codes)
    fbar = F.mean(axis=0)
    dev = S - nu[:, None] * fbar
    return m / (m - 1) * np.sum(dev * dev, axis=0) / F.shape[0] ** 2


def _centroids_without_each_unit(F: np.ndarray, codes: np.ndarray):
    """Centroid and noise of the group with each unit left out (units x columns each).

    With S_u, n_u the unit sums and sizes, leaving out u gives S' = S - S_u, N' = N - n_u,
    fbar' = S' / N' and sum_{v != u} (S_v - n_v fbar')^2 = Q' - 2 fbar' R' + fbar'^2 M' with
    Q = sum S_v^2, R = sum n_v S_v, M = sum n_v^2 less unit u's part.
    """
    S, nu = _unit_sums(F, codes)
    m = len(nu)
    St, N = S.sum(axis=0), nu.sum()
    Q, R, M = (S * S).sum(axis=0), (nu[:, None] * S).sum(axis=0), float(nu @ nu)
    Np = (N - nu)[:, None]
    fbar = (St[None, :] - S) / Np
    Qp = Q[None, :] - S * S
    Rp = R[None, :] - nu[:, None] * S
    Mp = (M - nu * nu)[:, None]
    ss = np.maximum(Qp - 2 * fbar * Rp + fbar * fbar * Mp, 0.0)
    noise = (m - 1) / (m - 2) * ss / (Np * Np) if m > 2 else np.full_like(fbar, np.nan)
    return fbar, noise


# ============================================================================== intervals
def jackknife_interval(theta, jack_a, jack_b, level: float):
    """Jackknife-t interval of a two-group statistic, elementwise over the last axis.

    ``theta``: estimate(s) on all units; ``jack_a`` (m_a x k) / ``jack_b`` (m_b x k): the
    estimate with each unit of a / b left out. Returns (low, high, se, df). Non-finite
    leave-one-out values give NaN bounds.
    """
    theta = np.asarray(theta, dtype=np.float64)
    parts = []
    for J in (jack_a, jack_b):
        m = J.shape[0]
        with np.errstate(invalid="ignore"):
            dev = J - J.mean(axis=0)
            parts.append((m - 1) / m * np.sum(dev * dev, axis=0))
    va, vb = parts
    v = va + vb
    ma, mb = jack_a.shape[0], jack_b.shape[0]
    with np.errstate(invalid="ignore", divide="ignore"):
        df = v * v / (va * va / (ma - 1) + vb * vb / (mb - 1))
    df = np.where(np.isfinite(df) & (df > 0), df, ma + mb - 2)
    df = np.clip(df, 1.0, ma + mb - 2)
    t = stats.t.ppf(0.5 + level / 2, df)
    se = np.sqrt(v)
    return theta - t * se, theta + t * se, se, df


# ============================================================================== shape: split
def split_terms(sub: CommunityTable, g: Groups, measure, transform, params, *,
                jackknife: bool, ticker: Ticker) -> ShapeTerms:
    """Exact split of ||fbar_a - fbar_b||^2 over the columns of the feature matrix.

    ``net_j = (fbar_bj - fbar_aj)^2 - noise_aj - noise_bj`` is unbiased for the population
    term (mu_bj - mu_aj)^2 when units are independent (each noise is the centroid's
    sampling variance, :func:`centroid_noise`).
    """
    from .dissimilarity import dissimilarity
    d = dissimilarity(sub, measure, transform=transform, **params)
    F = np.asarray(d.features, dtype=np.float64)
    if F.shape[1] != sub.n_taxa:   # every registered feature map keeps one column per taxon
        raise InputError(f"the {measure} features do not have one column per taxon.")
    Fa, Fb = F[g.ia], F[g.ib]
    ca, cb = Fa.mean(axis=0), Fb.mean(axis=0)
    diff = cb - ca
    terms = diff * diff
    noise = centroid_noise(Fa, g.codes_a) + centroid_noise(Fb, g.codes_b)
    net = terms - noise
    ticker.check()
    jack_a = jack_b = None
    if jackknife:
        fa, na_ = _centroids_without_each_unit(Fa, g.codes_a)
        fb, nb_ = _centroids_without_each_unit(Fb, g.codes_b)
        noise_a, noise_b = centroid_noise(Fa, g.codes_a), centroid_noise(Fb, g.codes_b)
        jack_a = (cb[None, :] - fa) ** 2 - na_ - noise_b[None, :]
        jack_b = (fb - ca[None, :]) ** 2 - nb_ - noise_a[None, :]
    ticker.step()
    return ShapeTerms(terms=terms, net=net, noise=noise, jack_a=jack_a, jack_b=jack_b,
                      feature_a=ca, feature_b=cb, diff=diff, params=dict(d.params),
                      notes=tuple(d.notes),
                      size_free=bool(d.properties.get("size_free", False)))


# ============================================================================== shape: average
def _pair_matrix(sub: CommunityTable, g: Groups, rec, transform):
    from .transforms import get_transform
    tr = get_transform(transform)
    x = tr.apply(sub.values, labels=sub.sample_labels)
    if rec.nonnegative and np.any(x < 0):
        raise InputError(f"the {rec.label} measure needs values >= 0, but the transformation "
                         f"{tr.name!r} gives negative values.")
    presence, den = PAIR_MEASURES[rec.name]
    if presence:
        x = (x > 0).astype(np.float64)
    empty = ~(x != 0).any(axis=1)
    if rec.empty_samples == "error" and empty.any():
        names = [str(sub.sample_labels[i]) for i in np.flatnonzero(empty)]
        raise InputError(f"the {rec.label} measure is undefined for samples with nothing in "
                         f"them; {len(names)} sample(s) of the two groups are all 0 after "
                         f"the transformation {tr.name!r}: {listing(names)}.",
                         hint="Remove them or choose another measure.")
    xa, xb = x[g.ia], x[g.ib]
    na, nb, p = len(g.ia), len(g.ib), x.shape[1]
    check_memory(na * nb * p * 8.0 * 2, f"the per-taxon terms of {na} x {nb} between-group "
                 f"pairs and {p} taxa",
                 alternatives="Use a measure with an exact split (hellinger, chi_square, "
                              "aitchison), or fewer taxa.")
    T = np.abs(xa[:, None, :] - xb[None, :, :])           # na x nb x p
    if den == "sum":
        T /= (xa.sum(axis=1)[:, None] + xb.sum(axis=1)[None, :])[:, :, None]
    elif den == "max":
        T /= np.maximum(xa[:, None, :], xb[None, :, :]).sum(axis=2)[:, :, None]
    elif den == "taxon":
        s = np.abs(xa)[:, None, :] + np.abs(xb)[None, :, :]
        np.divide(T, s, out=T, where=s > 0)
        T[s == 0] = 0.0
    return T, xa, xb


def pair_terms(sub: CommunityTable, g: Groups, rec, transform, *, jackknife: bool,
               ticker: Ticker) -> ShapeTerms:
    """Per-taxon terms of each between-group pair, averaged over the n_a n_b pairs.

    The average is a two-sample U-statistic of degree (1, 1): unbiased for the population
    mean between-group dissimilarity, so ``net`` is the term itself and there is no noise.
    """
    T, xa, xb = _pair_matrix(sub, g, rec, transform)
    na, nb = T.shape[0], T.shape[1]
    terms = T.mean(axis=(0, 1))
    ticker.check()
    jack_a = jack_b = None
    if jackknife:
        rows, cols = T.sum(axis=1), T.sum(axis=0)          # na x p, nb x p
        tot = rows.sum(axis=0)
        Ra, nua = _unit_sums(rows, g.codes_a)
        Rb, nub = _unit_sums(cols, g.codes_b)
        jack_a = (tot[None, :] - Ra) / ((na - nua)[:, None] * nb)
        jack_b = (tot[None, :] - Rb) / ((nb - nub)[:, None] * na)
    ticker.step()
    return ShapeTerms(terms=terms, net=terms.copy(), noise=None, jack_a=jack_a,
                      jack_b=jack_b, feature_a=xa.mean(axis=0), feature_b=xb.mean(axis=0),
                      diff=xb.mean(axis=0) - xa.mean(axis=0), params={}, notes=(),
                      size_free=bool(rec.size_free))


# ============================================================================== size side
def size_ratios(x, e, g: Groups, pseudocount: float, *, jackknife: bool,
                ticker: Ticker) -> SizeRatios:
    """Per-taxon log2 ratios of mean abundance (per unit effort), b over a.

    rate_gj = sum_{i in g} (x_ij + pseudo_i) / sum_{i in g} e_i; the leave-one-unit-out
    values drop the unit's counts and effort (the pseudocounts stay those of the full data).
    """
    r = x.sum(axis=1)
    rbar = r.mean()
    pseudo = pseudocount * r / rbar                    # per sample, proportional to its total
    xp = x + pseudo[:, None]
    ia, ib = g.ia, g.ib
    Ea, Eb = e[ia].sum(), e[ib].sum()
    mean_a, mean_b = x[ia].sum(axis=0) / Ea, x[ib].sum(axis=0) / Eb
    tot_a, tot_b = r[ia].sum() / Ea, r[ib].sum() / Eb
    Xa, Xb = xp[ia].sum(axis=0), xp[ib].sum(axis=0)
    with np.errstate(divide="ignore"):
        ratio = np.log2(Xb / Eb) - np.log2(Xa / Ea)
    ref = float(np.log2(tot_b / tot_a))
    out = dict(mean_a=mean_a, mean_b=mean_b, log2_ratio=ratio, ref=ref, tot_a=tot_a,
               tot_b=tot_b)
    ticker.check()
    if jackknife:
        Sa, _ = _unit_sums(np.column_stack([xp[ia], r[ia], e[ia]]), g.codes_a)
        Sb, _ = _unit_sums(np.column_stack([xp[ib], r[ib], e[ib]]), g.codes_b)
        Ta = np.concatenate([Xa, [r[ia].sum(), Ea]])
        Tb = np.concatenate([Xb, [r[ib].sum(), Eb]])
        with np.errstate(divide="ignore", invalid="ignore"):
            la = Ta[None, :] - Sa                      # group a without each unit
            lb = Tb[None, :] - Sb
            ja = np.log2(Xb / Eb)[None, :] - np.log2(la[:, :-2] / la[:, -1:])
            jb = np.log2(lb[:, :-2] / lb[:, -1:]) - np.log2(Xa / Ea)[None, :]
            jra = np.log2(tot_b) - np.log2(la[:, -2] / la[:, -1])
            jrb = np.log2(lb[:, -2] / lb[:, -1]) - np.log2(tot_a)
        out.update(jack_a=ja, jack_b=jb, jack_ref_a=jra, jack_ref_b=jrb)
    ticker.step()
    return SizeRatios(**out)
