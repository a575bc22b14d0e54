"""Homogeneity of multivariate dispersions (Anderson 2006): distances to group centres.

Always read next to PERMANOVA, which responds to differences in spread as well as in
location.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from .design import factor_levels
from .dissimilarity import Dissimilarity
from .errors import DesignError, InputError, Location
from .inference import (align_labels, block_labels, check_dissimilarity,
                        check_n_permutations, check_option)
from .memory import check_memory
from .permutation import permutation_f_test
from .results import ResultMixin, readonly

__all__ = ["dispersion_test", "DispersionResult", "centroid_distances_squared", "pcoa_axes"]

_CENTRES = ("mean", "median")


@dataclass(frozen=True, eq=False)
class DispersionResult(ResultMixin):
    """Homogeneity of multivariate dispersions (Anderson 2006).

    Attributes
    ----------
    statistic : float
        ANOVA F of the distances to group centres.
    pvalue : float
        Permutation p-value.
    distances : Series
        Distance of every sample to its group's centre.
    group_means : DataFrame
        Per group: ``n`` and ``mean_distance``.
    df : tuple (groups - 1, n - groups)
    centre : {'mean', 'median'}
    null_distribution : ndarray
    n_permutations : int
    exact : bool
    scheme : str
    measure : str
    groups : Series or None
        Group label of every sample (indexed like ``distances``), for figures.
    notes : tuple of str
    """

    statistic: float
    pvalue: float
    distances: pd.Series
    group_means: pd.DataFrame
    df: tuple
    centre: str
    null_distribution: np.ndarray = field(repr=False)
    n_permutations: int
    exact: bool
    scheme: str
    measure: str
    notes: tuple = ()
    groups: pd.Series | None = None

    def __post_init__(self):
        object.__setattr__(self, "null_distribution", readonly(self.null_distribution))

    def to_frame(self) -> pd.DataFrame:
        return self.group_means.copy()

    def figure(self, *, kind: str = "distances", **kwargs):
        """A plotly figure: ``kind='distances'`` distances to the group centres by group,
        ``'null'`` the permutation distribution of F with the observed value."""
        check_option("kind", kind, ("distances", "null"))
        if kind == "null":
            from ..render.inference_plots import null_distribution_figure  # lazy: plotly
            return null_distribution_figure(self, **kwargs)
        from ..render.inference_plots import dispersion_figure
        return dispersion_figure(self, **kwargs)

    def _title(self) -> str:
        return (f"Dispersion test on {self.measure}: distances to group {self.centre}s, "
                f"F = {self.statistic:.4g} on {self.df[0]} and {self.df[1]} df, "
                f"p = {self.pvalue:.4g} ({self.scheme})")


def _spatial_median(x: np.ndarray, *, tol: float = 1e-10, max_iter: int = 1000) -> np.ndarray:
    """Point minimising the sum of Euclidean distances to the rows of x (Weiszfeld 1937).

    Iterates m <- sum(x_i / d_i) / sum(1 / d_i), started at the coordinate-wise median; a
    point that coincides with the iterate is handled by the modification of Vardi & Zhang
    (2000).
    """
    if x.shape[1] == 0:
        return np.zeros(0)
    m = np.median(x, axis=0)
    scale = max(float(np.abs(x).max()), 1e-300)
    for _ in range(max_iter):
        diff = x - m
        dist = np.sqrt((diff ** 2).sum(axis=1))
        at = dist <= 1e-12 * scale
        w = 1.0 / np.where(at, 1.0, dist)
        w[at] = 0.0
        if w.sum() == 0:
            return m
        t = (w[:, None] * x).sum(axis=0) / w.sum()
        k = int(at.sum())
        if k:
            r = np.sqrt((((w[:, None] * (x - m)).sum(axis=0)) ** 2).sum())
            gamma = min(1.0, k / r) if r > 0 else 1.0
            t = (1 - gamma) * t + gamma * m
        if np.sqrt(((t - m) ** 2).sum()) <= tol * scale:
            return t
        m = t
    return m


def pcoa_axes(gower: np.ndarray, *, rtol: float = 1e-10) -> tuple[np.ndarray, np.ndarray]:
    """Principal coordinates split into real axes (positive eigenvalues) and imaginary ones.

    Returns (X_pos, X_neg): u_k sqrt(l_k) for l_k > 0 and u_k sqrt(|l_k|) for l_k < 0 (Gower
    1966), eigenvalues smaller than ``rtol`` times the largest treated as 0. Squared
    distances are reproduced as ||x+_i - x+_j||^2 - ||x-_i - x-_j||^2.
    """
    vals, vecs = np.linalg.eigh(gower)
    tol = rtol * max(float(np.abs(vals).max()), 1e-300)
    pos, neg = vals > tol, vals < -tol
    return vecs[:, pos] * np.sqrt(vals[pos]), vecs[:, neg] * np.sqrt(-vals[neg])


def centroid_distances_squared(d: Dissimilarity, codes: np.ndarray, centre: str = "mean",
                               *, use: str = "auto") -> np.ndarray:
    """z_i^2: squared distance of each sample to its group centre in PCoA space.

    ``use='eigen-free'`` (mean only): z_i^2 = (1/n_g) sum_l d_il^2 - (1/(2 n_g^2))
    sum_{l,m} d_lm^2 over the samples of i's group. ``use='eigen'``: from the principal
    coordinates, real axes minus imaginary ones (Anderson 2006). ``'auto'`` uses a feature
    matrix when the dissimilarity has one, else the eigen-free form for means and the
    eigen-decomposition for medians.
    """
    n = d.n
    z2 = np.empty(n)
    groups = [np.flatnonzero(codes == g) for g in np.unique(codes)]
    if use == "auto":
        use = "features" if d.has_features else ("eigen-free" if centre == "mean" else "eigen")
    if use == "features":
        parts = [(d.features, 1.0)]
    elif use == "eigen":
        xp, xn = pcoa_axes(np.asarray(d.gower()))
        parts = [(xp, 1.0), (xn, -1.0)]
    elif use == "eigen-free":
        if centre != "mean":
            raise InputError("the eigen-free form gives distances to centroids (means) only.")
        check_memory(n * n * 8, f"a {n} x {n} matrix of squared distances")
        d2 = d.square(dtype=np.float64) ** 2
        for idx in groups:
            block = d2[np.ix_(idx, idx)]
            z2[idx] = block.mean(axis=1) - block.sum() / (2.0 * idx.size ** 2)
        return z2
    else:
        raise InputError(f"unknown `use` {use!r}.")
    z2[:] = 0.0
    for x, sign in parts:
        for idx in groups:
            xg = x[idx]
            c = xg.mean(axis=0) if centre == "mean" else _spatial_median(xg)
            z2[idx] += sign * ((xg - c) ** 2).sum(axis=1)
    return z2


def dispersion_test(d, groups, *, n_permutations: int = 999, rng=None, centre: str = "mean",
                    blocks=None, progress: Callable[[int, int], None] | None = None,
                    cancel: Callable[[], bool] | None = None) -> DispersionResult:
    """Test whether groups differ in multivariate spread (Anderson 2006).

    Parameters
    ----------
    d : Dissimilarity
    groups : Series or sequence
        Group of every sample: a Series matched to ``d.labels`` by label (e.g.
        ``table.samples["treatment"]``), or a sequence in the order of ``d.labels``.
    n_permutations : int, default 999
    rng : None, int or numpy.random.Generator
    centre : {'mean', 'median'}, default 'mean'
        Group centroid, or spatial median (Weiszfeld 1937) computed separately on the real
        and on the imaginary principal axes.
    blocks : Series or sequence, optional
        Permute only within these blocks.
    progress, cancel : callables, optional

    Returns
    -------
    DispersionResult

    Raises
    ------
    DesignError
        Fewer than 2 groups, a group with fewer than 2 samples, missing group labels.

    Notes
    -----
    Distances z_i to the group centre are taken in the principal coordinate space of d,
    where axes of negative eigenvalues enter with a minus sign: z_i^2 = (real part) -
    (imaginary part). For centroids this needs no eigen-decomposition:
    z_i^2 = (1/n_g) sum_l d_il^2 - (1/(2 n_g^2)) sum_{l,m} d_lm^2.
    z_i^2 can be negative when d is far from Euclidean; such samples are given z_i = 0
    (they sit at their centre as closely as the geometry allows) and a note counts them.
    The statistic is the one-way ANOVA F of the z_i; its p-value comes from permuting the
    residuals z_i - mean of the group (ter Braak 1992). With Euclidean distances on one
    variable, z_i = |y_i - mean_g| and F is Levene's (1960) statistic.

    References
    ----------
    Anderson, M. J. (2006). Distance-based tests for homogeneity of multivariate
    dispersions. Biometrics 62, 245-253.
    ter Braak, C. J. F. (1992). Permutation versus bootstrap significance tests in multiple
    regression and ANOVA. In Bootstrapping and Related Techniques, 79-86.
    Weiszfeld, E. (1937). Tohoku Math. J. 43, 355-386; Vardi, Y. & Zhang, C.-H. (2000).
    PNAS 97, 1423-1426.

    Examples
    --------
    >>> import numpy as np
    >>> from scipy.spatial.distance import pdist
    >>> from tallyform.core.dissimilarity import Dissimilarity
    >>> y = np.array([1.0, 2.0, 3.0, 4.0, 0.0, 8.0])                # synthetic
    >>> d = Dissimilarity(pdist(y[:, None]), list("abcdef"), measure="euclidean")
    >>> res = dispersion_test(d, ["x", "x", "x", "y", "y", "y"], rng=1)
    >>> res.group_means["mean_distance"].round(3).tolist()
    [0.667, 2.667]
    """
    d = check_dissimilarity(d)
    check_option("centre", centre, _CENTRES)
    n_permutations = check_n_permutations(n_permutations)
    g = align_labels(groups, d.labels, "groups")
    name = str(g.name)
    if g.isna().any():
        bad = list(g.index[g.isna()])[:8]
        raise DesignError(f"groups {name!r} have missing values for sample(s) {bad}.",
                          location=Location(column=repr(name)))
    labels = g.astype(str)
    levels = [str(x) for x in factor_levels(labels)]
    if len(levels) < 2:
        raise DesignError(f"groups {name!r} have a single level ({levels[0]!r}); the "
                          "dispersion test compares at least 2 groups.",
                          location=Location(column=repr(name)))
    counts = labels.value_counts()
    small = [lv for lv in levels if counts[lv] < 2]
    if small:
        raise DesignError(f"group(s) {small} of {name!r} hold a single sample, whose distance "
                          "to its own centre is always 0; the dispersion test needs at least "
                          "2 samples per group.", location=Location(column=repr(name)),
                          hint="Merge or drop those groups first.")
    frame = pd.DataFrame({"__group__": labels.to_numpy()}, index=d.labels)
    block_codes, block_name = (None, None) if blocks is None else block_labels(
        frame, align_labels(blocks, d.labels, "blocks"))
    codes = np.array([levels.index(x) for x in labels.to_numpy()])
    z2 = centroid_distances_squared(d, codes, centre)
    notes: tuple = ()
    scale = max(float(np.abs(z2).max()), 1e-300)
    negative = z2 < -1e-10 * scale
    if negative.any():
        notes += (f"{int(negative.sum())} sample(s) have a negative squared distance to their "
                  f"group {centre} (the dissimilarity is not Euclidean: imaginary axes "
                  "outweigh real ones for them); their distance was set to 0.",)
    z = np.sqrt(np.clip(z2, 0.0, None))
    X = np.column_stack([np.ones(d.n)] + [(codes == k).astype(float)
                                          for k in range(1, len(levels))])
    test = permutation_f_test(z, X, None, blocks=block_codes, block_name=block_name,
                              n_permutations=n_permutations, rng=rng, residuals="full",
                              progress=progress, cancel=cancel)
    notes += test.notes
    if d.properties.get("euclidean") is False and not d.has_features:
        notes += ("The measure is not Euclidean; distances to centres are taken in its "
                  "principal-coordinate space with imaginary axes subtracted.",)
    dist = pd.Series(z, index=d.labels.copy(), name="distance_to_" + centre)
    means = pd.DataFrame({"n": [int(counts[lv]) for lv in levels],
                          "mean_distance": [float(z[codes == k].mean())
                                            for k in range(len(levels))]},
                         index=pd.Index(levels, name=name))
    return DispersionResult(statistic=test.statistic, pvalue=test.pvalue, distances=dist,
                            group_means=means, df=test.df, centre=centre,
                            null_distribution=test.null_distribution,
                            n_permutations=test.n_permutations, exact=test.exact,
                            scheme=test.scheme, measure=d.measure, notes=notes,
                            groups=pd.Series(labels.to_numpy(), index=d.labels.copy(),
                                             name=name))
