"""A location test on a dissimilarity that survives unequal spread: the Welch-type statistic.

PERMANOVA's pseudo-F pools the within-group spread, so with unbalanced groups it mixes a
difference in spread with a difference in location: a small group that is more variable
than a large one makes it reject although the centroids are equal. The Welch-type statistic
weighs each group by its own spread instead (Welch 1951, carried over to distances by
Alekseyenko 2016 for two groups and Hamidi et al. 2019 for k groups):

    s_j^2 = (1 / (n_j (n_j - 1))) sum_{i < l in j} d_il^2      (spread of group j)
    w_j   = n_j / s_j^2,  W = sum_j w_j
    D_jl  = ||c_j - c_l||^2                                      (centroids, from d^2 only)
    A     = (1 / (k - 1)) (1 / W) sum_{j < l} w_j w_l D_jl
    h_j   = (1 - w_j / W)^2 / (n_j - 1)
    W_d   = A / (1 + 2 (k - 2) / (k^2 - 1) sum_j h_j)

With one variable and Euclidean distances s_j^2 is the sample variance, W_d is Welch's (1951)
heteroscedastic ANOVA F, and for two groups Welch's t^2 (Alekseyenko's T_w^2). Everything
comes from the sums of squared distances within and between groups; no eigen-decomposition.
In the Gower form (G = -1/2 C D^2 C, or G = F F' for centred features F), with the group
indicator matrix E: B = E' G E, t_j = sum_{i in j} G_ii, the within-group sum of squares is
t_j - B_jj / n_j and D_jl = B_jj / n_j^2 + B_ll / n_l^2 - 2 B_jl / (n_j n_l). Since G 1 = 0,
k - 1 indicator columns determine B, so a batch of permutations costs one (k - 1) B x n by
n x n product (n x q on the feature path), as a one-factor PERMANOVA does.

The p-value comes from permuting the group labels (freely, within blocks, or all distinct
relabellings when they are few). Under unequal spreads the labels are not exchangeable, so
this is not an exact test; with a studentised statistic it is asymptotically valid (Janssen
1997; Chung & Romano 2013) when the groups' covariances are proportional (spread differs,
shape of the scatter does not) or the groups are equal-sized. With few samples in a widely
spread group the raw permutation distribution is too light-tailed; by default each
relabelling's statistic is therefore referred to Welch's F with its own degrees of freedom
(prepivoting, Beran 1988; see :func:`welch_permanova`), widened to the effective number of
dimensions of the centroid noise, f (Box 1954), whose moments are estimated by U-statistics
(Himeno & Yamada 2014; :func:`tallyform.core.welch_kernel.effective_dims`): with the
sample covariances plugged in, f came out 3.6 for a true 29 on Dirichlet-multinomial
counts, and the test rejected 2.2-2.7 % of null data sets at 5 %. How well it holds is
measured in benchmarks/calibration_cells/welch.py and stated in the result's notes.

References
----------
Alekseyenko, A. V. (2016). Multivariate Welch t-test on distances. Bioinformatics 32,
3552-3558.
Beran, R. (1988). Prepivoting test statistics: a bootstrap view of asymptotic refinements.
J. Amer. Statist. Assoc. 83, 687-697.
Box, G. E. P. (1954). Some theorems on quadratic forms applied in the study of analysis of
variance problems, I. Ann. Math. Statist. 25, 290-302.
Chung, E. & Romano, J. P. (2013). Exact and asymptotically robust permutation tests. Ann.
Statist. 41, 484-507.
Hamidi, B., Wallace, K., Vasu, C. & Alekseyenko, A. V. (2019). W_d*-test: robust
distance-based multivariate analysis of variance. Microbiome 7, 51.
Himeno, T. & Yamada, T. (2014). Estimations for some functions of covariance matrix in high
dimension under non-normality and its applications. J. Multivariate Anal. 130, 27-44.
Janssen, A. (1997). Studentized permutation tests for non-i.i.d. hypotheses and the
generalized Behrens-Fisher problem. Statist. Probab. Lett. 36, 9-21.
Welch, B. L. (1951). On the comparison of several mean values: an alternative approach.
Biometrika 38, 330-336.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from .display import p_words
from .design import factor_levels
from .errors import DesignError, Location
from .inference import (align_labels, align_samples, block_labels, check_dissimilarity,
                        check_n_permutations)
from .permutation import FEW_PERMUTATIONS, Permutations, prepare_response, pvalue_from_null
from .random import as_rng
from .results import ResultMixin, readonly
from .units import resolve_units, unit_blocks
from .welch_kernel import (calibrate, effective_dims, equivalent, remove_blocks,
                           run_permutations, unit_response, welch_statistic)
from .progress import reports_progress

__all__ = ["welch_permanova", "WelchResult", "welch_statistic"]

#: Below this many samples (units) in a group the result says how the test behaved there
#: (measured: benchmarks/calibration_cells/welch.py, docs/calibration.md).
SMALL_GROUP = 6
SMALL_NOTE = ("in simulations with 4-5 samples in a group whose spread (sd) is 4 times that "
              "of a group 3 times larger, and no difference in centroids, 4.2-6.1 % of "
              "data sets gave p <= 0.05 at alpha 0.05 (power is low there).")
#: A group at least this many times as spread (s_j^2) as a larger group gets SPREAD_NOTE.
SPREAD_RATIO = 9.0
SPREAD_NOTE = ("in simulations with equal centroids and a group 4 times as spread (sd) as one "
               "3 times larger, 4.2-6.2 % of data sets gave p <= 0.05 at alpha 0.05 with "
               "normal or skewed variables, but only 2.6-2.9 % with sparse, heavy-tailed "
               "profiles (Dirichlet-multinomial counts, chi-square distance; 6-10 samples "
               "in the spread group). There the Welch-type test is conservative, its raw "
               "permutation form too (3.5-4.6 %), and it loses power.")
RAW_SMALL_GROUP = 10
RAW_NOTE = ("in simulations with a group of 4-6 samples 4 times as spread (sd) as a group "
            "3 times larger and no difference in centroids, 6.6-9.0 % of data sets gave "
            "p <= 0.05 at alpha 0.05; the default small_sample=True gave 3.1-5.2 % there.")


# ---------------------------------------------------------------------------- result
@dataclass(frozen=True, eq=False)
class WelchResult(ResultMixin):
    """A Welch-type test of equal group centroids on a dissimilarity.

    Attributes
    ----------
    statistic : float
        W_d (Hamidi et al. 2019); for two groups T_w^2 (Alekseyenko 2016). With one
        variable and Euclidean distances, Welch's (1951) F (t^2 for two groups).
    pvalue : float
        Permutation p-value.
    null_distribution : ndarray
        The permuted statistics (read-only).
    groups : DataFrame
        Per group: ``n`` (samples, or units with ``units``), ``spread`` (s_j^2, the mean
        squared distance to the group centroid times n_j / (n_j - 1)), ``weight``
        (w_j = n_j / s_j^2) and ``share`` (w_j / W).
    df : tuple (k - 1, nu)
        Welch's degrees of freedom, nu = (k^2 - 1) / (3 sum_j h_j). They give the F
        reference of the one-variable test; the p-value here comes from permutations.
    scheme : str
        How labels were relabelled (free / within blocks, random / exact; samples or units).
    n_permutations : int
    exact : bool
    group : str
    measure : str
    n_samples : int
    units : str or None
        The unit column whose centroids were analysed, or None.
    small_sample : bool
        True when relabellings were ranked through Welch's F reference (prepivoting).
    dimensions : float
        f = tr(V)^2 / tr(V^2), the effective number of dimensions of the centroid noise
        (Box 1954), its moments estimated by U-statistics within each group (Himeno &
        Yamada 2014); 1 for one variable.
    notes : tuple of str
    min_pvalue : float or None
        Smallest p-value the exact test can give (label symmetries counted); None when
        the relabellings are too many to matter.
    """

    statistic: float
    pvalue: float
    null_distribution: np.ndarray = field(repr=False)
    groups: pd.DataFrame
    df: tuple
    scheme: str
    n_permutations: int
    exact: bool
    group: str
    measure: str
    n_samples: int
    units: str | None = None
    small_sample: bool = True
    dimensions: float = float("nan")
    notes: tuple = ()
    min_pvalue: float | None = None

    def __post_init__(self):
        object.__setattr__(self, "null_distribution", readonly(self.null_distribution))

    def to_frame(self) -> pd.DataFrame:
        return self.groups.copy()

    def summary(self) -> pd.DataFrame:
        """One row: statistic, df, effective dimensions, p-value, permutations."""
        return pd.DataFrame({"statistic": [self.statistic], "df_groups": [self.df[0]],
                             "df_welch": [self.df[1]], "dimensions": [self.dimensions],
                             "pvalue": [self.pvalue],
                             "n_permutations": [self.n_permutations],
                             "exact": [self.exact]}, index=pd.Index([self.group], name="term"))

    @property
    def reading(self) -> str:
        """One plain sentence: what the test found, at the 5 % level."""
        what = "T_w^2" if len(self.groups) == 2 else "W_d"
        found = ("Evidence that the group centroids differ" if self.pvalue <= 0.05 else
                 "No evidence at the 5 % level that the group centroids differ")
        return (f"{found} between the {len(self.groups)} groups of {self.group!r} on "
                f"{self.measure} (Welch-type {what} = {self.statistic:.3g}, "
                f"{p_words(self.pvalue)}); unequal spread alone does not make this test "
                "reject, as it does PERMANOVA with unbalanced groups.")

    def _title(self) -> str:
        what = "T_w^2" if len(self.groups) == 2 else "W_d"
        on = f"{len(self.groups)} groups of {self.group!r}" + (
            f", centroids of {self.units!r} units" if self.units else "")
        return (f"Welch-type test of equal centroids on {self.measure} ({on}): {what} = "
                f"{self.statistic:.4g}, {p_words(self.pvalue)} ({self.scheme})")

    def as_permutation_test(self):
        """The same test as the engine's :class:`PermutationTest` (for generic displays)."""
        from .permutation import PermutationTest
        return PermutationTest(statistic=self.statistic, pvalue=self.pvalue,
                               null_distribution=self.null_distribution,
                               n_permutations=self.n_permutations, exact=self.exact,
                               n_distinct=None, scheme=self.scheme, df=self.df,
                               ss=(math.nan, math.nan), path="distances", notes=self.notes)

# ---------------------------------------------------------------------------- the test
def _symmetry(codes: np.ndarray, k: int, blocks: np.ndarray | None) -> int:
    """Number of relabellings of the groups among themselves that every permutation of
    the scheme reaches with the same statistic: groups whose counts agree in every block
    can swap labels, and W_d is symmetric in the groups."""
    b = np.zeros(codes.size, dtype=np.intp) if blocks is None else \
        np.unique(np.asarray(blocks).astype(str), return_inverse=True)[1].ravel()
    counts = np.zeros((int(b.max()) + 1, k), dtype=np.int64)
    np.add.at(counts, (b, codes), 1)
    _, classes = np.unique(counts.T, axis=0, return_counts=True)
    return int(np.prod([math.factorial(int(c)) for c in classes]))


def _group_codes(frame: pd.DataFrame, group, labels: pd.Index):
    """(column name, level list, integer code per sample), checked."""
    if isinstance(group, str):
        if group not in frame.columns:
            raise DesignError(f"column {group!r} is not in the sample table; columns are "
                              f"{list(map(str, frame.columns))}.",
                              location=Location(column=repr(group)),
                              hint="Check the spelling (case counts).")
        col = frame[group]
        name = group
    else:
        col = align_labels(group, labels, "group")
        name = str(col.name)
    if col.isna().any():
        bad = [str(x) for x in col.index[col.isna()]][:8]
        raise DesignError(f"{name!r} has missing values for sample(s) {bad}.",
                          location=Location(column=repr(name)),
                          hint="Drop those samples or give them a level.")
    levels = [str(x) for x in factor_levels(col)]
    codes = col.astype(str).map({lv: j for j, lv in enumerate(levels)}).to_numpy()
    if len(levels) < 2:
        raise DesignError(f"{name!r} has a single level ({levels[0]!r}); the test compares "
                          "at least 2 groups.", location=Location(column=repr(name)))
    return name, levels, codes.astype(np.intp), col


def _check_sizes(name: str, levels: list, codes: np.ndarray, what: str) -> None:
    counts = np.bincount(codes, minlength=len(levels))
    small = [levels[j] for j in range(len(levels)) if counts[j] < 2]
    if small:
        raise DesignError(f"group(s) {small} of {name!r} hold a single {what}; the Welch-type "
                          f"test estimates each group's own spread and needs at least 2 "
                          f"{what}s per group.", location=Location(column=repr(name)),
                          hint="Merge or drop those groups first.")


def _symmetry_note(perms: Permutations, sym: int, what: str) -> str | None:
    nd = perms.n_distinct
    if nd is None or nd / sym >= FEW_PERMUTATIONS:
        return None
    text = (f"Only {nd} distinct relabellings of the {what} exist"
            + (f" within blocks of {perms.block_name!r}" if perms.blocks is not None
               and perms.block_name else ""))
    if sym > 1:
        text += (f"; the statistic is the same when equal-sized groups swap labels ({sym} "
                 f"relabellings give each value), so the smallest attainable p-value is "
                 f"{sym / nd:.3g}")
    else:
        text += f", so the smallest attainable p-value is {1 / nd:.3g}"
    return text + "; p-values are coarse and a non-significant result says little."


def _units_plan(frame, name, units, blocks, block_codes, block_name):
    """(UnitLevel or None, unit block codes or None, notes) for the group column."""
    plan = resolve_units(frame, [name], units, blocks=blocks if isinstance(blocks, str)
                         else None)
    notes = tuple(plan.notes)
    if plan.independent:
        return None, None, notes
    level = plan.level_of(name)
    if level is None:
        lv = plan.levels[-1]
        raise DesignError(f"{name!r} varies within the units of {lv.name!r}; the Welch-type "
                          "test compares groups of whole units, so the groups must be "
                          "constant within every unit.", location=Location(column=repr(name)),
                          hint="Pass units=False to treat the samples as independent "
                               "replicates, or name the units the groups were applied to.")
    return level, unit_blocks(level, block_codes, block_name), notes


@dataclass(frozen=True, eq=False)
class _Plan:
    """What is compared: the response (samples or unit centroids, blocks removed), the
    group code of each of its rows, the relabelling blocks and the notes so far."""

    resp: object
    codes: np.ndarray
    levels: list
    name: str
    what: str
    level: object
    blocks: np.ndarray | None
    block_name: str | None
    notes: tuple


def _prepare(d, samples, group, units, blocks) -> _Plan:
    frame, notes = align_samples(samples, d.labels)
    name, levels, codes, col = _group_codes(frame, group, d.labels)
    if not isinstance(group, str):
        frame = frame.copy()
        frame[name] = col.to_numpy()
    block_codes, block_name = block_labels(frame, blocks)
    level, ublocks, unit_notes = _units_plan(frame, name, units, blocks, block_codes,
                                             block_name)
    notes += unit_notes
    resp = prepare_response(d)
    if level is None:
        use_codes, use_blocks, what = codes, block_codes, "sample"
    else:
        use_codes = np.empty(level.m, dtype=np.intp)
        use_codes[level.codes] = codes
        use_blocks, what = ublocks, "unit"
        resp = unit_response(resp, level)
        notes += (f"Tested at the level of {level.name!r} ({level.describe()}): the "
                  f"centroids of the units were compared and whole units relabelled"
                  + ("" if level.balanced else "; units with more samples have less "
                     "variable centroids, and each group's spread averages over its units")
                  + ".",)
    _check_sizes(name, levels, use_codes, what)
    if use_blocks is not None:
        resp = remove_blocks(resp, use_blocks)
        notes += (f"Groups were compared within blocks of {block_name or 'blocks'!r}: block "
                  "centroids were removed first, so spreads and centroids are within "
                  "blocks.",)
    return _Plan(resp, use_codes, levels, name, what, level, use_blocks, block_name, notes)


def _spread_note(plan: _Plan, sizes, spread) -> tuple:
    """The note on a small group far more spread than a larger one (SPREAD_NOTE)."""
    for j in np.argsort(-spread, kind="stable"):
        larger = [lv for lv in range(sizes.size)
                  if sizes[lv] > sizes[j] and spread[j] >= SPREAD_RATIO * spread[lv]]
        if larger:
            lv = larger[int(np.argmin(spread[larger]))]
            return (f"Group {plan.levels[j]!r} is {spread[j] / spread[lv]:.0f} times as spread "
                    f"(s_j^2) as group {plan.levels[lv]!r}, which holds more {plan.what}s: "
                    f"{SPREAD_NOTE}",)
    return ()


def _result_notes(plan: _Plan, perms, sizes, stat, null, small_sample, d, spread) -> tuple:
    notes: tuple = ()
    limit = SMALL_GROUP if small_sample else RAW_SMALL_GROUP
    small = [plan.levels[j] for j in range(sizes.size) if sizes[j] < limit]
    if small and small_sample:
        notes += (f"Group(s) {small} hold fewer than {limit} {plan.what}s: {SMALL_NOTE}",)
    elif small:
        notes += (f"Group(s) {small} hold fewer than {limit} {plan.what}s and the raw "
                  f"statistics were ranked (small_sample=False): {RAW_NOTE}",)
    notes += _spread_note(plan, sizes, np.asarray(spread, dtype=float))
    coarse = _symmetry_note(perms, _symmetry(plan.codes, sizes.size, plan.blocks),
                            f"{plan.what}s")
    notes += ((coarse,) if coarse else ())
    if np.isinf(null).any():
        notes += (f"{int(np.isinf(null).sum())} relabelling(s) left a group without spread; "
                  "their statistic counts as infinite (at least the observed one).",)
    if d.properties.get("euclidean") is False and not d.has_features:
        notes += ("The measure is not Euclidean: centroid distances are taken in its "
                  "principal-coordinate space with imaginary axes subtracted"
                  + (" (the statistic is negative here)." if stat < 0 else "."),)
    return notes


@reports_progress("Welch-type PERMANOVA", knob="n_permutations")
def welch_permanova(d, samples, group, *, n_permutations: int = 999, rng=None, units=None,
                    blocks=None, small_sample: bool = True,
                    progress: Callable[[int, int], None] | None = None,
                    cancel: Callable[[], bool] | None = None) -> WelchResult:
    """Do the groups' centroids differ, allowing each group its own spread? (Welch-type)

    Parameters
    ----------
    d : Dissimilarity
    samples : DataFrame or CommunityTable
        Sample information, matched to ``d.labels`` by label.
    group : str, or Series / sequence
        The factor: a column of ``samples``, or the level of every sample.
    n_permutations : int, default 999
        When the number of distinct relabellings is at most this, all of them are used
        (exact enumeration; the result says so).
    rng : None, int or numpy.random.Generator
    units : None, False, str or list of str
        Sampling units (:func:`tallyform.core.units.resolve_units`): None detects a column
        within which the groups are constant, False treats samples as independent. With
        units, the centroids of the units are compared (their Gower matrix) and whole units
        are relabelled; the groups must be constant within units.
    blocks : str, Series or sequence, optional
        Relabel only within blocks (with units, blocks must hold whole units). Block
        centroids are removed first, so the groups are compared within blocks.
    small_sample : bool, default True
        Compare every relabelling's statistic through its tail probability under Welch's F
        reference with that relabelling's own degrees of freedom, widened to the data's
        effective number of dimensions (prepivoting; see Notes). False ranks the raw
        statistics, as the published test does; it is liberal with few samples in a
        group that is more spread than the others.
    progress : callable(done, total), optional
    cancel : callable() -> bool, optional
        True stops the run with :class:`tallyform.errors.Cancelled`.

    Returns
    -------
    WelchResult

    Raises
    ------
    DesignError
        Unknown column, missing levels, one group, a group with fewer than 2 samples (or
        units), a group without spread, groups that vary within units, blocks that split
        units or hold one sample each, sample labels that do not match.

    Notes
    -----
    W_d = [sum_j w_j ||c_j - c_w||^2 / (k - 1)] / [1 + 2 (k - 2) / (k^2 - 1) sum_j h_j],
    w_j = n_j / s_j^2, c_w the weighted mean of the centroids, h_j = (1 - w_j/W)^2 /
    (n_j - 1), everything from squared distances (module notes). For two groups it is
    T_w^2 = ||c_1 - c_2||^2 / (s_1^2 / n_1 + s_2^2 / n_2) (Alekseyenko 2016). With one
    variable and Euclidean distances it equals Welch's (1951) F. For a measure that is not
    Euclidean, squared centroid distances are taken in its principal-coordinate space with
    imaginary axes subtracted and can be negative, so can the statistic.

    Relabelling is not exact when spreads differ; with a studentised statistic it is
    asymptotically valid (Janssen 1997; Chung & Romano 2013). With few samples in a widely
    spread group the permutation distribution of W_d is too light-tailed: the true
    statistic carries the uncertainty of that group's spread (Welch's nu is small), while
    relabelled groups mix samples and have larger nu. ``small_sample=True`` therefore
    ranks relabellings by P(F > W*) with F ~ F((k - 1) f, nu* f), nu* the relabelling's
    Welch degrees of freedom and f = tr(V)^2 / tr(V^2) the effective number of dimensions
    of the centroid noise V = sum_j Sigma_j / n_j (Box 1954; each group's own (tr Sigma_j)^2
    and tr Sigma_j^2 estimated by U-statistics, unbiased for any distribution with four
    moments, Himeno & Yamada 2014), i.e. the permutation test of a prepivoted statistic
    (Beran 1988). In one dimension that is Welch's own F reference.
    It changes nothing asymptotically and keeps the test exact when the groups are
    exchangeable. ``null_distribution`` then holds each relabelling's statistic mapped to
    the observed nu (the W with the same tail probability), so the share of it at least
    the observed W is the p-value. p = (1 + #{W* >= W}) / (1 + P), or the exact proportion
    over every distinct relabelling. See the calibration table for rates.

    References
    ----------
    Alekseyenko, A. V. (2016). Bioinformatics 32, 3552-3558.
    Beran, R. (1988). Prepivoting test statistics: a bootstrap view of asymptotic
    refinements. J. Amer. Statist. Assoc. 83, 687-697.
    Box, G. E. P. (1954). Some theorems on quadratic forms applied in the study of analysis
    of variance problems, I. Ann. Math. Statist. 25, 290-302.
    Hamidi, B., Wallace, K., Vasu, C. & Alekseyenko, A. V. (2019). Microbiome 7, 51.
    Himeno, T. & Yamada, T. (2014). J. Multivariate Anal. 130, 27-44.
    Welch, B. L. (1951). Biometrika 38, 330-336.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from scipy import stats
    >>> from scipy.spatial.distance import pdist
    >>> from tallyform.core.dissimilarity import Dissimilarity
    >>> y = np.array([1.0, 2.0, 4.0, 3.0, 9.0, 12.0, 6.0, 11.0])          # synthetic
    >>> d = Dissimilarity(pdist(y[:, None]), list("abcdefgh"), measure="euclidean")
    >>> info = pd.DataFrame({"site": list("xxxxyyyy")}, index=list("abcdefgh"))
    >>> res = welch_permanova(d, info, "site", rng=1)
    >>> t = stats.ttest_ind(y[4:], y[:4], equal_var=False).statistic
    >>> bool(np.isclose(res.statistic, t ** 2)), res.exact, res.n_permutations
    (True, True, 70)
    >>> round(res.pvalue, 4)          # 2 of 70 splits: swapping x and y gives the same value
    0.0286
    """
    d = check_dissimilarity(d)
    if getattr(d, "n_tiles", None) is not None:            # tiles on Dask
        d.refuse("welch_permanova (its per-group spreads use the diagonal blocks of the "
                 "matrix)")
    n_permutations = check_n_permutations(n_permutations)
    plan = _prepare(d, samples, group, units, blocks)
    k = len(plan.levels)
    perms = _group_permutations(plan, n_permutations, rng)
    stat, spread, weight, sizes, nu, null, null_nu = run_permutations(
        plan.resp, plan.codes, perms, progress, cancel)
    _check_spread(plan, spread)
    dims = effective_dims(plan.resp, plan.codes, sizes)
    pvalue, null = _welch_pvalue(stat, nu, null, null_nu, dims, k, perms.exact, small_sample)
    notes = plan.notes + _result_notes(plan, perms, sizes, stat, null, small_sample, d,
                                       spread)
    table = _groups_table(plan, sizes, spread, weight)
    return WelchResult(statistic=stat, pvalue=float(pvalue), null_distribution=null,
                       groups=table, df=(k - 1, nu),
                       scheme=_welch_scheme(plan, perms, small_sample),
                       n_permutations=int(perms.total), exact=bool(perms.exact),
                       group=plan.name, measure=d.measure, n_samples=d.n,
                       units=None if plan.level is None else plan.level.name,
                       small_sample=bool(small_sample), dimensions=float(dims), notes=notes,
                       min_pvalue=perms.min_pvalue)


def _group_permutations(plan: _Plan, n_permutations: int, rng) -> Permutations:
    """Relabellings of the samples (or units) among the groups, within blocks."""
    k = len(plan.levels)
    onehot = (plan.codes[None, :] == np.arange(k)[:, None]).astype(float).T
    return Permutations(plan.resp.n, n_permutations, as_rng(rng), blocks=plan.blocks,
                        block_name=plan.block_name, design=onehot)


def _groups_table(plan: _Plan, sizes, spread, weight) -> pd.DataFrame:
    """Per group: size, spread, Welch weight and its share."""
    return pd.DataFrame({"n": sizes.astype(int), "spread": spread, "weight": weight,
                         "share": weight / weight.sum()},
                        index=pd.Index(plan.levels, name=plan.name))


def _check_spread(plan: _Plan, spread) -> None:
    """Refuse groups without spread: their Welch weight would be infinite."""
    flat = [plan.levels[j] for j in range(len(plan.levels)) if not spread[j] > 0]
    if flat:
        raise DesignError(f"group(s) {flat} of {plan.name!r} have no spread (all their "
                          f"{plan.what}s sit at the same point), so their Welch weight is "
                          "infinite.", location=Location(column=repr(plan.name)),
                          hint="A location test needs variation within each group; "
                               "check the measure (e.g. presence-absence on identical "
                               "samples) or merge groups.")


def _welch_pvalue(stat, nu, null, null_nu, dims, k, exact, small_sample) -> tuple:
    """The p-value and the null on the statistic's scale, prepivoted when small_sample."""
    if not small_sample:
        return pvalue_from_null(stat, null, exact=exact), null
    level_null = calibrate(null, null_nu, dims, k)
    pvalue = pvalue_from_null(float(calibrate(stat, nu, dims, k)), level_null, exact=exact)
    return pvalue, equivalent(level_null, nu, dims, k)


def _welch_scheme(plan: _Plan, perms, small_sample) -> str:
    """The plain description of the relabellings."""
    scheme = perms.describe() + ("" if plan.level is None else
                                 f"; whole units of {plan.level.name!r}")
    if small_sample:
        scheme += ("; each relabelling referred to Welch's F with its own degrees of freedom "
                   "(prepivoting)")
    return scheme
