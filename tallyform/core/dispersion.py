"""Homogeneity of multivariate dispersions (Anderson 2006): distances to group centres.

Always read next to PERMANOVA, which responds to differences in spread as well as in
location.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from .display import p_words
from .design import factor_levels
from .dissimilarity import Dissimilarity
from .errors import DesignError, InputError, Location
from .inference import (align_labels, align_samples, block_labels, check_dissimilarity,
                        check_n_permutations, check_option)
from .memory import check_memory
from .permutation import permutation_f_test, prepare_response, pvalue_from_null
from .random import as_rng
from .results import ResultMixin, readonly
from .progress import reports_progress
from .interrupt import eigh as interruptible_eigh

__all__ = ["dispersion_test", "DispersionResult", "centroid_distances_squared", "pcoa_axes"]

CENTRES = ("mean", "median")


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
    level : str
        ``'samples'``, or ``'units of <name>'`` when the distances are those of unit
        centroids (groups applied to whole units).
    reading : str
        The result in plain words.
    min_pvalue : float or None
        Smallest p-value the exact test can give (None when the relabellings are too many
        to matter).
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
    level: str = "samples"
    reading: str = ""
    min_pvalue: float | None = None

    def __post_init__(self):
        object.__setattr__(self, "null_distribution", readonly(self.null_distribution))

    def to_frame(self) -> pd.DataFrame:
        return self.group_means.copy()

    def __str__(self) -> str:
        return super().__str__() + ("\n" + self.reading if self.reading else "")

    def _title(self) -> str:
        return (f"Dispersion test on {self.measure}: distances to group {self.centre}s, "
                f"F = {self.statistic:.4g} on {self.df[0]} and {self.df[1]} df, "
                f"{p_words(self.pvalue)} ({self.scheme})")


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
    vals, vecs = interruptible_eigh(gower)
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
    if hasattr(d, "centroid_distances_squared"):    # tiles on Dask: one pass of products
        if centre != "mean":
            raise InputError("distances to spatial medians need the principal coordinates "
                             "of the whole matrix, which a tiled dissimilarity never gathers.",
                             hint="Use centre='mean'.")
        return d.centroid_distances_squared(codes)
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
        d2 = d.squared()
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


def _signed_z2(y: np.ndarray, signs: np.ndarray, codes: np.ndarray, centre: str) -> np.ndarray:
    """Squared distance of every row to its group's centre, real axes minus imaginary ones
    (the centre found separately on each, as for samples)."""
    z2 = np.zeros(y.shape[0])
    for sign in (1.0, -1.0):
        x = y[:, signs == sign]
        if x.shape[1] == 0:
            continue
        for g in np.unique(codes):
            idx = np.flatnonzero(codes == g)
            xg = x[idx]
            c = xg.mean(axis=0) if centre == "mean" else _spatial_median(xg)
            z2[idx] += sign * ((xg - c) ** 2).sum(axis=1)
    return z2


@dataclass(frozen=True)
class _Test:
    statistic: float
    pvalue: float
    null_distribution: np.ndarray
    n_permutations: int
    exact: bool
    df: tuple
    min_pvalue: float | None
    scheme: str


def residual_null(space: tuple, codes: np.ndarray, perms, *, correction: bool,
                   progress=None, cancel=None) -> tuple:
    """Observed F of the distances to group centroids and its permutation distribution,
    the multivariate residuals permuted and every centroid and distance recomputed.

    ``space`` is ("coords", X, signs): residual coordinates (rows minus their group
    centroid; signs -1 on imaginary axes), or ("gram", K): their Gram matrix
    K = (I - H_g) G (I - H_g). A relabelling puts group label codes[idx[i]] at position i,
    the residuals staying in place; the group centroids of the residuals, the distances to
    them (times sqrt(n_g / (n_g - 1))) and the one-way F are computed again.
    """
    from .errors import Cancelled
    n = codes.size
    G = int(codes.max()) + 1
    size = np.bincount(codes, minlength=G).astype(np.float64)
    factor = np.sqrt(size / (size - 1)) if correction else np.ones(G)
    if space[0] == "coords":
        X, signs = space[1], space[2]
        norms = (X * X) @ signs
        width = X.shape[1]
    else:
        K = space[1]
        norms = K.diagonal().copy()
        width = n
    batch = max(1, int(48 * 2**20 // (8 * n * (G + 1) * 4 + 8 * G * width)))

    def stats(labels):                                          # labels: (B, n)
        b = labels.shape[0]
        onehot = np.zeros((b, n, G))
        np.put_along_axis(onehot, labels[:, :, None], 1.0, axis=2)
        avg = onehot / size[None, None, :]
        if space[0] == "coords":
            cent = np.transpose(avg, (0, 2, 1)) @ X                     # B x G x r
            cross = (X * signs) @ np.transpose(cent, (0, 2, 1))          # B x n x G
            cnorm = np.einsum("bgr,r,bgr->bg", cent, signs, cent)
        else:
            cross = np.transpose((K @ avg.transpose(1, 0, 2).reshape(n, b * G))
                                 .reshape(n, b, G), (1, 0, 2))          # B x n x G
            cnorm = np.einsum("bng,bng->bg", avg, cross)
        own = np.take_along_axis(cross, labels[:, :, None], axis=2)[:, :, 0]
        z2 = norms[None, :] - 2 * own + np.take_along_axis(cnorm, labels, axis=1)
        z = np.sqrt(np.clip(z2, 0.0, None)) * factor[labels]
        sums = np.einsum("bn,bng->bg", z, onehot)
        between = (sums ** 2 / size).sum(axis=1)
        ssw = (z * z).sum(axis=1) - between
        ssb = between - z.sum(axis=1) ** 2 / n
        with np.errstate(divide="ignore", invalid="ignore"):
            f = (ssb / (G - 1)) / (ssw / (n - G))
        return np.where(ssw > 1e-12 * np.maximum(ssb, 1e-300), f,
                        np.where(ssb > 0, np.inf, np.nan))

    observed = float(stats(codes[None, :])[0])
    null = np.empty(perms.total)
    done = 0
    for idx in perms.batches(batch):
        if cancel is not None and cancel():
            raise Cancelled(f"stopped after {done} of {perms.total} permutations; "
                            "no result was produced.")
        null[done:done + idx.shape[0]] = stats(codes[idx])
        done += idx.shape[0]
        if progress is not None:
            progress(done, perms.total)
    return observed, null, (G - 1, n - G)


def _group_frame(d: Dissimilarity, groups, samples) -> tuple[pd.DataFrame, str, tuple]:
    """The sample table (when given) with the group column, in the order of ``d.labels``."""
    notes: tuple = ()
    if samples is not None:
        frame, notes = align_samples(samples, d.labels)
        frame = frame.copy()
    else:
        frame = pd.DataFrame(index=d.labels.copy())
    if isinstance(groups, str):
        if groups not in frame.columns:
            raise DesignError(f"groups column {groups!r} is not in the sample table"
                              + ("" if samples is not None else " (no `samples` were given)")
                              + ".", location=Location(column=repr(groups)),
                              hint="Pass the sample table as `samples=`, or the group of "
                                   "every sample as a Series.")
        return frame, groups, notes
    g = align_labels(groups, d.labels, "groups")
    name = str(g.name)
    frame[name] = g.to_numpy()
    return frame, name, notes


@reports_progress("Dispersion test", knob="n_permutations")
def dispersion_test(d, groups, *, samples=None, units=None, blocks=None,
                    n_permutations: int = 999, rng=None, centre: str = "mean",
                    group_size_correction: bool = True,
                    progress: Callable[[int, int], None] | None = None,
                    cancel: Callable[[], bool] | None = None) -> DispersionResult:
    """Test whether groups differ in multivariate spread (Anderson 2006).

    Parameters
    ----------
    d : Dissimilarity
    groups : str, Series or sequence
        Group of every sample: a column of ``samples``, a Series matched to ``d.labels`` by
        label (e.g. ``table.samples["treatment"]``), or a sequence in the order of
        ``d.labels``.
    samples : DataFrame or CommunityTable, optional
        Sample information (for ``groups``, ``units`` or ``blocks`` given as column names,
        and for detecting the units).
    units : None, False, str, list of str or Series, default None
        Sampling units, as in :func:`tallyform.core.inference.permanova`. None detects them
        from ``samples`` when it is given (and says so); False treats samples as
        independent. Groups applied to whole units are compared through the spread of the
        unit centroids, permuting whole units; groups that vary within units are compared
        through the samples, permuting within units.
    blocks : str, Series or sequence, optional
        Permute only within these blocks (which must group whole units when units are used).
    n_permutations : int, default 999
    rng : None, int or numpy.random.Generator
    centre : {'mean', 'median'}, default 'mean'
        Group centroid, or spatial median (Weiszfeld 1937) computed separately on the real
        and on the imaginary principal axes.
    group_size_correction : bool, default True
        Multiply every distance by sqrt(n_g / (n_g - 1)), n_g the group's number of samples
        (units): distances to a group's own centroid shrink with its size,
        E||x_i - xbar_g||^2 = (n_g - 1) / n_g tr(Sigma), so without it a small group looks
        less spread than a large one with the same spread.
    progress, cancel : callables, optional

    Returns
    -------
    DispersionResult

    Raises
    ------
    DesignError
        Fewer than 2 groups, a group with fewer than 2 samples (units), missing group
        labels; with units, as in :func:`permanova`.

    Notes
    -----
    Distances z_i to the group centre are taken in the principal coordinate space of d,
    where axes of negative eigenvalues enter with a minus sign: z_i^2 = (real part) -
    (imaginary part). For centroids this needs no eigen-decomposition:
    z_i^2 = (1/n_g) sum_l d_il^2 - (1/(2 n_g^2)) sum_{l,m} d_lm^2.
    z_i^2 can be negative when d is far from Euclidean; such samples are given z_i = 0
    (they sit at their centre as closely as the geometry allows) and a note counts them.
    The statistic is the one-way ANOVA F of the z_i. With Euclidean distances on one
    variable and no correction, z_i = |y_i - mean_g| and F is Levene's (1960) statistic.

    P-value. For centroids, the residual vectors of the samples (units) about their group
    centroid are permuted among them and, for every relabelling, the group centroids, the
    distances and F are computed again (their Gram matrix (I - H_g) G (I - H_g) on the
    distance path, their coordinates on the feature path). This null distribution carries
    the shrinkage of a small group's distances and the extra variation of its centroid;
    permuting the residuals of the distances themselves (ter Braak 1992) does not, and was
    liberal: 20 % false alarms for groups of 8 and 30 samples in 40 dimensions, 8-9 % for
    groups of 4-6 units (benchmarks/calibration_cells/dispersion.py). For spatial medians,
    whose recomputation would be iterative, the residuals of the distances are permuted
    and the result says so.

    With units and groups applied to whole units, the z are the distances of the unit
    centroids (every unit weighted equally) to their group's centre of unit centroids,
    n_g counts units, and whole units are permuted: the spread compared is that of the
    units, which is the variation PERMANOVA's between-unit test of the same groups sees.

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
    >>> res = dispersion_test(d, ["x", "x", "x", "y", "y", "y"], rng=1,
    ...                       group_size_correction=False)
    >>> res.group_means["mean_distance"].round(3).tolist()
    [0.667, 2.667]
    """
    from .units import resolve_units
    d = check_dissimilarity(d)
    check_option("centre", centre, CENTRES)
    n_permutations = check_n_permutations(n_permutations)
    frame, name, notes = _group_frame(d, groups, samples)
    labels, levels = _checked_groups(frame, name)
    block_codes, block_name = _dispersion_blocks(d, frame, blocks)
    codes = np.array([levels.index(x) for x in labels.to_numpy()])
    plan = None
    if samples is not None or units not in (None, False):
        if isinstance(units, pd.Series):
            units = align_labels(units, d.labels, "units")
        plan = resolve_units(frame, [name], units, blocks=block_name)
        notes += plan.notes
    level = None if plan is None or plan.independent else plan.level_of(name)
    rng = as_rng(rng)
    if level is not None:
        setup = _unit_setup(d, plan, level, codes, labels, levels, name, block_codes,
                            block_name, centre, n_permutations, rng)
    else:
        setup = _sample_setup(d, plan, codes, labels, name, block_codes, block_name, centre,
                              n_permutations, rng)
    z2, gcodes, index, glabels, perms, what, where, space = setup
    return _finish(d, z2, gcodes, levels, index, glabels, perms, centre=centre,
                   correction=group_size_correction, what=what, where=where, notes=notes,
                   space=space, progress=progress, cancel=cancel)


def _checked_groups(frame: pd.DataFrame, name: str) -> tuple:
    """The groups as text and their levels; refuses missing values, one level, lone samples."""
    g = frame[name]
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
    return labels, levels


def _dispersion_blocks(d: Dissimilarity, frame: pd.DataFrame, blocks) -> tuple:
    """Block codes and name from a column name, labels aligned to ``d``, or None."""
    if blocks is None:
        return None, None
    if isinstance(blocks, str):
        return block_labels(frame, blocks)
    return block_labels(frame, align_labels(blocks, d.labels, "blocks"))


def _unit_setup(d, plan, level, codes, labels, levels, name, block_codes, block_name, centre,
                n_permutations, rng) -> tuple:
    """Distances and relabellings of whole units, for groups constant within units."""
    from .schemes import Permutations, combine_codes, label_symmetries
    from .units import unit_blocks
    k = plan.levels.index(level)
    first = np.unique(level.codes, return_index=True)[1]
    ucodes = codes[first]
    parent = level.parent if k > 0 else None
    ub = unit_blocks(level, block_codes, block_name) if block_codes is not None else None
    pblocks = combine_codes(parent, ub)
    y, signs = prepare_response(d).unit_means(level.codes)
    z2 = _signed_z2(y, signs, ucodes, centre)
    space = ("coords", y - np.vstack([y[ucodes == g].mean(axis=0)
                                     for g in range(len(levels))])[ucodes], signs)
    index = pd.Index(list(level.labels), name=level.name)
    glabels = pd.Series(labels.to_numpy()[first], index=index, name=name)
    sym = label_symmetries([("factor", ucodes)], pblocks)
    perms = Permutations(level.m, n_permutations, rng, blocks=pblocks,
                         block_name=None if pblocks is None else
                         " x ".join(([plan.levels[k - 1].name] if k else [])
                                    + ([block_name] if ub is not None else [])),
                         design=ucodes[:, None], symmetries=sym,
                         what=f"the {level.m} units of {level.name!r}")
    return (z2, ucodes, index, glabels, perms, f"units of {level.name!r}", level.name,
            space)


def _sample_setup(d, plan, codes, labels, name, block_codes, block_name, centre,
                  n_permutations, rng) -> tuple:
    """Distances and relabellings of samples (within units when groups vary within them)."""
    from .schemes import Permutations, combine_codes, label_symmetries
    z2 = centroid_distances_squared(d, codes, centre)
    space = sample_space(d, codes) if centre == "mean" else None
    index = d.labels.copy()
    glabels = pd.Series(labels.to_numpy(), index=d.labels.copy(), name=name)
    strata = block_codes
    sname = block_name
    if plan is not None and not plan.independent:      # groups vary within units
        strata = combine_codes(plan.levels[-1].codes, block_codes)
        sname = plan.levels[-1].name + (f" x {block_name}" if block_name else "")
    sym = label_symmetries([("factor", codes)], strata)
    perms = Permutations(d.n, n_permutations, rng, blocks=strata, block_name=sname,
                         design=codes[:, None], symmetries=sym)
    return z2, codes, index, glabels, perms, "samples", None, space


def sample_space(d: Dissimilarity, codes: np.ndarray) -> tuple:
    """Residuals of the samples about their group centroid: coordinates on the feature
    path, their Gram matrix on the distance path."""
    resp = prepare_response(d)
    if resp.features is not None:
        return ("coords", resp.centred_within(codes).features, np.ones(resp.features.shape[1]))
    return ("gram", resp.centred_within(codes).gower)


def _finish(d, z2, gcodes, levels, index, glabels, perms, *, centre, correction, what, where,
            notes, space, progress, cancel) -> DispersionResult:
    scale = max(float(np.abs(z2).max()), 1e-300)
    negative = z2 < -1e-10 * scale
    if negative.any():
        notes += (f"{int(negative.sum())} {'unit' if where else 'sample'}(s) have a negative "
                  f"squared distance to their group {centre} (the dissimilarity is not "
                  "Euclidean: imaginary axes outweigh real ones for them); their distance "
                  "was set to 0.",)
    size = np.bincount(gcodes, minlength=len(levels)).astype(float)
    z = np.sqrt(np.clip(z2, 0.0, None))
    if correction:
        z = z * np.sqrt(size / (size - 1))[gcodes]
    X = np.column_stack([np.ones(z.size)] + [(gcodes == k).astype(float)
                                             for k in range(1, len(levels))])
    if centre == "mean":
        stat, null, df = residual_null(space, gcodes, perms, correction=correction,
                                        progress=progress, cancel=cancel)
        test = _Test(stat, pvalue_from_null(stat, null, exact=perms.exact), null,
                     int(perms.total), bool(perms.exact), df, perms.min_pvalue,
                     f"{perms.describe()}; permuting residuals about the group centroids, "
                     "centroids and distances recomputed")
    else:
        test = permutation_f_test(z, X, None, permutations=perms, residuals="full",
                                  progress=progress, cancel=cancel)
        notes += ("With spatial medians the p-value permutes the residuals of the distances "
                  "(ter Braak 1992), which is liberal for small groups (a few units or "
                  "samples per group); centre='mean' recomputes the centres for every "
                  "permutation.",)
    name = str(glabels.name)
    floor = perms.note(term=name)
    if floor:
        notes += (floor,)
    if correction:
        notes += ("Distances were multiplied by sqrt(n_g / (n_g - 1)) (n_g: the group's "
                  f"{'units' if where else 'samples'}), so that groups of different sizes "
                  "with the same spread have the same expected squared distance"
                  + (" (exact for centroids; for spatial medians a close approximation, "
                     "checked by simulation)" if centre == "median" else "") + ".",)
    else:
        notes += ("Distances to group centres were not corrected for group size: small "
                  "groups look less spread than large ones with the same spread.",)
    if d.properties.get("euclidean") is False and not d.has_features:
        notes += ("The measure is not Euclidean; distances to centres are taken in its "
                  "principal-coordinate space with imaginary axes subtracted.",)
    if where:
        notes += (f"Groups were applied to whole units of {where!r}: the distances are those "
                  f"of the unit centroids to their group's centre, and whole units were "
                  "permuted.",)
    means = pd.DataFrame({"n": [int(size[k]) for k in range(len(levels))],
                          "mean_distance": [float(z[gcodes == k].mean())
                                            for k in range(len(levels))]},
                         index=pd.Index(levels, name=name))
    level = "samples" if not where else f"units of {where!r}"
    reading = (f"Mean distance to the group {centre} ({level}): "
               + ", ".join(f"{lv} {means.loc[lv, 'mean_distance']:.3g}" for lv in levels)
               + f"; F = {test.statistic:.3g} on {test.df[0]} and {test.df[1]} df, "
                 f"{p_words(test.pvalue)}.")
    if test.min_pvalue is not None and test.min_pvalue > 0.05:
        reading += (f" The smallest possible p-value here is {test.min_pvalue:.2g}, so this "
                    "design cannot show a difference in spread at the 0.05 level.")
    return DispersionResult(statistic=test.statistic, pvalue=test.pvalue,
                            distances=pd.Series(z, index=index, name="distance_to_" + centre),
                            group_means=means, df=test.df, centre=centre,
                            null_distribution=test.null_distribution,
                            n_permutations=test.n_permutations, exact=test.exact,
                            scheme=test.scheme, measure=d.measure, notes=notes,
                            groups=glabels, level=level, reading=reading,
                            min_pvalue=test.min_pvalue)
