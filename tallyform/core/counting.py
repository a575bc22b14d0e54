"""Shape and spread tests that a pure difference in size cannot fool.

:func:`shape_test` asks whether groups differ in composition (the location of their
profiles), :func:`spread_test` whether they differ in how variable their compositions are.
Both keep their level when the groups differ only in their totals, at any ratio of totals,
for any measure, without a model of the between-sample variation: every sample is rarefied
to a common number of individuals first (Sanders 1968; Hurlbert 1971), which makes the
samples exchangeable under the null "same law of composition in every group", and the
statistic is recomputed for every relabelling (:mod:`tallyform.core.counting_stats`), so the
permutation test is exact. ``adjust='none'`` runs the same statistics on the counts as they
are (what an unadjusted analysis does; shown as a reference).

Why. A profile drawn from N individuals carries counting noise of variance about q(1 - q) / N
per taxon, so a group of small samples looks more spread out than a group of large samples
of the same communities (Warton, Wright & Wang 2012), and a transform that is not linear in
the proportions (Hellinger's square root, log-ratios after zero replacement) also moves the
group centroids (Jensen's inequality). Measured on size-only data sets (docs/calibration.md,
10 + 10 or 6 + 14 samples, four laws of biology): the unadjusted spread test rejects 34-100 %
at 4- to 10-fold ratios of totals (chi-square and Hellinger), the unadjusted Hellinger shape
test up to 83 %, the unadjusted chi-square shape test up to 13.5 %; the rarefied tests
3.9-6.8 % in the single-draw cells (Rueger's combination of 5 draws: 1.8-2.0 %). Five cells
that fell outside [3 %, 7 %] at 400 replicates (spread: chi-square 7.5 % at 4-fold totals
and 7.75 % at 6 + 14 samples, Hellinger 7.25 % on Dirichlet-multinomial 5 + 12; shape:
Hellinger 2.75 % twice) were Monte Carlo error, as exactness implies: at 1000 replicates
5.1 %, 6.4 %, 6.0 %, 4.0 % and 5.2 %.

Stability and power (benchmarks/counting.py). One draw decides: with 4-fold totals, nine
draws of the same data set disagree about p <= 0.05 in 15-52 % of data sets where power is
moderate. Rueger's combination of K draws removes that dependence but costs power (shape,
5 of 40 taxa doubled at 4-fold totals: 0.375 with one draw, 0.285 with 5, 0.235 with 9), so
it is an option (``n_draws``), not the default. Removing the counting noise left at the
common depth (chi-square spread) costs no validity and adds 0.5-7 points of power. The
Welch-type shape statistic is the default although PERMANOVA's pseudo-F had 1-4 points more
power for shifted taxa: with equal centroids and unequal spreads in unbalanced groups (6 vs
14 samples) the pseudo-F fired in 62 % of data sets, the Welch-type statistic in 6 %.

What was tried and left out (measured, see benchmarks/counting.py): tests keeping every
individual - a Welch-type statistic on the full profiles, and the noise-corrected spread
statistic with a studentised permutation or a Welch t reference - reject up to 11 %
(shape) and 9-13 % (spread) of size-only data sets in designs with 6-14 samples per group
(log-normal, Dirichlet-multinomial and gamma-Poisson biology, unbalanced groups; 200 data
sets each), so they are not offered, although they had 0-11 points more power. Chi-square column masses
pooled over samples of unequal totals are set by the large samples and inflate even the
balanced shape test (13.5 % at 500 vs 5000 individuals, Dirichlet-multinomial); after
rarefaction all samples weigh alike.
"""
from __future__ import annotations

from typing import Callable

import numpy as np

from .counting_design import Design, design, draw, embed
from .counting_results import CountingTestResult, make_result
from .counting_stats import batch_size, location_statistic, spread_statistic
from .errors import Cancelled, DesignError, InputError, Location
from .inference import check_n_permutations, check_option
from .permutation import Permutations, pvalue_from_null
from .random import as_rng
from .rarefaction import combine_draws
from .table import as_table
from .progress import reports_progress
from .validation import check_fraction

__all__ = ["shape_test", "spread_test", "CountingTestResult", "rarefied_pvalues", "embed",
           "ADJUSTMENTS", "SHAPE_STATISTICS"]

#: How counting noise is handled: one rarefaction per draw, or not at all (reference).
ADJUSTMENTS = ("rarefaction", "none")
#: Statistics of the shape test.
SHAPE_STATISTICS = ("welch", "pseudo_f")


# ---------------------------------------------------------------------------- the run
def _check_common(adjust, n_draws, n_permutations, alpha):
    check_option("adjust", adjust, ADJUSTMENTS)
    if isinstance(n_draws, bool) or not isinstance(n_draws, (int, np.integer)) or n_draws < 1:
        raise InputError(f"`n_draws` must be a whole number >= 1; got {n_draws!r}.")
    if adjust == "none" and n_draws != 1:
        raise InputError("`n_draws` counts rarefaction draws; with adjust='none' there is "
                         "one data set only (n_draws=1).")
    n_permutations = check_n_permutations(n_permutations)
    if n_permutations < 19:
        raise InputError(f"`n_permutations` must be at least 19 for a p-value that can reach "
                         f"0.05; got {n_permutations}.")
    alpha = check_fraction("alpha", alpha)
    return int(n_draws), n_permutations


def _run(aspect, table, group, *, measure, transform, adjust, depth, n_draws, statistic,
         noise_correction, n_permutations, units, blocks, alpha, rng, progress, cancel,
         params):
    from .measures import get_measure
    from .transforms import get_transform
    n_draws, n_permutations = _check_common(adjust, n_draws, n_permutations, alpha)
    measure = get_measure(measure).name
    tname = get_transform(transform).name
    tab = as_table(table)
    des = design(tab, group, aspect=aspect, adjust=adjust, depth=depth, units=units,
                  blocks=blocks)
    ng = np.bincount(des.codes, minlength=len(des.levels))
    if ng.min() < 2:
        small = [lv for lv, k in zip(des.levels, ng) if k < 2]
        raise DesignError(f"level(s) {small} of {des.group_name!r} hold a single unit of "
                          f"{des.unit_name!r}; the {aspect} test needs at least 2 per group.",
                          location=Location(column=repr(des.group_name)),
                          hint="Merge or drop those levels, or pass units=False.")
    noise = noise_correction and aspect == "spread" and adjust == "rarefaction"
    run = _permute(aspect, des, tab.taxon_labels, measure=measure, transform=transform,
                   params=params, n_draws=n_draws, statistic=statistic, noise=noise,
                   n_permutations=n_permutations, rng=rng, progress=progress, cancel=cancel)
    pvals, pvalue, (observed, null, emb, mnotes), perms = run
    return make_result(aspect, des, tab, des.group_name, measure, tname, adjust, n_draws, statistic,
                   noise_correction, alpha, pvals, pvalue, observed, null, emb, ng, perms,
                   mnotes)


def _permute(aspect, des: Design, taxa, *, measure, transform, params, n_draws, statistic,
             noise, n_permutations, rng, progress=None, cancel=None):
    """Every draw's p-value, their combination, the reported draw and the permutations."""
    ng = np.bincount(des.codes, minlength=len(des.levels))
    streams = as_rng(rng).spawn(n_draws + 1)
    onehot = (des.codes[:, None] == np.arange(ng.size)[None, :]).astype(float)
    perms = Permutations(des.codes.size, n_permutations, streams[0], blocks=des.blocks,
                         block_name=des.block_name, design=onehot)
    total = n_draws * perms.total
    pvals, draws = np.empty(n_draws), []
    labels = [str(x) for x in des.labels]
    for k in range(n_draws):
        y = draw(des, streams[k + 1])
        emb, mnotes = embed(y, labels, taxa, measure, transform, params, noise=noise)
        stat = _statistic(aspect, emb, ng, statistic)
        observed = float(stat(des.codes[None, :])[0])
        null = np.empty(perms.total)
        done = 0
        for idx in perms.batches(batch_size(emb.n, emb.features.shape[1], ng.size)):
            if cancel is not None and cancel():
                raise Cancelled(f"the {aspect} test was cancelled after "
                                f"{k * perms.total + done} of {total} permutations; no "
                                "result was kept.")
            null[done:done + idx.shape[0]] = stat(des.codes[idx])
            done += idx.shape[0]
            if progress is not None:
                progress(k * perms.total + done, total)
        pvals[k] = pvalue_from_null(observed, null, exact=perms.exact)
        draws.append((observed, null, emb, mnotes))
    pvalue, which = combine_draws(pvals)
    return pvals, pvalue, draws[max(which, 0)], perms


def rarefied_pvalues(counts, groups, *, measure="chi_square", transform=None,
                     n_permutations: int = 199, rng=None, **measure_options) -> tuple:
    """(shape p-value, spread p-value) of the default tests, for checked arrays.

    For simulation loops (the audit): ``counts`` are whole-number counts (n x p) whose
    samples are independent, ``groups`` a label per sample with at least 2 samples per
    level. Each test gets its own rarefaction to the smallest total, as
    :func:`shape_test` and :func:`spread_test` would (without their checks and wording).
    """
    x = np.rint(np.asarray(counts, dtype=np.float64)).astype(np.int64)
    levels, codes = np.unique(np.asarray(groups).astype(str), return_inverse=True)
    labels = [f"s{i}" for i in range(x.shape[0])]
    des = Design(x, codes.astype(np.intp), list(levels), labels, x.sum(axis=1).astype(float),
                  None, None, None, None, "group", int(x.sum(axis=1).min()), (), ())
    taxa = [f"t{j}" for j in range(x.shape[1])]
    streams = as_rng(rng).spawn(2)
    out = []
    for aspect, stream in zip(("shape", "spread"), streams):
        run = _permute(aspect, des, taxa, measure=measure, transform=transform,
                       params=measure_options, n_draws=1, statistic="welch",
                       noise=aspect == "spread", n_permutations=n_permutations, rng=stream)
        out.append(float(run[1]))
    return tuple(out)


def _statistic(aspect, emb, ng, statistic):
    norms = emb.norms()
    if aspect == "shape":
        return lambda lab: location_statistic(emb, lab, ng, statistic=statistic, norms=norms)
    return lambda lab: spread_statistic(emb, lab, ng, norms=norms)


# ---------------------------------------------------------------------------- public
_DOC_COMMON = """
    Parameters
    ----------
    table : CommunityTable, DataFrame or array
        Whole-number counts (individuals) with sample information.
    group : str
        A factor column of the sample table.
    measure : str, default 'chi_square'
        Any measure of :data:`tallyform.MEASURES` ('chi_square', 'hellinger', 'aitchison',
        'bray_curtis'...); after rarefaction every sample has the same total, so even a
        measure that is not size-free compares compositions only.
    transform : optional
        Transformation applied to the (rarefied) counts before the measure.
    adjust : {'rarefaction', 'none'}, default 'rarefaction'
        'rarefaction': every sample is rarefied to ``depth`` individuals first (exact);
        'none': the counts as they are (a reference; not protected against counting noise).
    depth : int, optional
        Individuals kept per sample; default the smallest sample total. Samples with fewer
        individuals are left out and listed in ``left_out``.
    n_draws : int, default 1
        Independent rarefactions; with more than one, their p-values are combined by
        Rueger's (1978) rule, so the answer no longer rests on one draw (at some cost in
        power).
    n_permutations : int, default 999
        Relabellings (all distinct ones when there are fewer).
    units : None, False, str or list of str
        Sampling units (:func:`tallyform.core.units.resolve_units`): None detects a column
        within which ``group`` is constant; whole units are then compared (their rarefied
        samples pooled). False treats samples as independent.
    blocks : str or Series, optional
        Permute only within these blocks.
    alpha : float, default 0.05
        Level used in the reading.
    rng : None, int or numpy.random.Generator
        Seeds the rarefactions and the permutations: the same seed gives the same answer.
    progress : callable(done, total), optional
    cancel : callable() -> bool, optional
        True stops the run with :class:`tallyform.errors.Cancelled`.
    **measure_options
        Options of the measure (e.g. ``zeros='pseudocount'`` for Aitchison).

    Returns
    -------
    CountingTestResult

    Raises
    ------
    InputError
        Fractional counts with adjust='rarefaction', a bad option value.
    DesignError
        Unknown group column, a level with fewer than 2 samples (or units), a group that
        varies within sampling units.
"""


@reports_progress("Shape test", knob="n_permutations")
def shape_test(table, group, *, measure="chi_square", transform=None,
               adjust: str = "rarefaction", depth: int | None = None, n_draws: int = 1,
               statistic: str = "welch", n_permutations: int = 999, units=None, blocks=None,
               alpha: float = 0.05, rng=None,
               progress: Callable[[int, int], None] | None = None,
               cancel: Callable[[], bool] | None = None,
               **measure_options) -> CountingTestResult:
    """Do the groups differ in composition? A test that differences in size cannot fool.

    Every sample is rarefied to a common number of individuals, then the group centroids on
    ``measure`` are compared by permutation, every statistic recomputed for each
    relabelling. Under the null (the same law of composition in every group, whatever the
    groups' totals) the rarefied samples are exchangeable, so the test is exact.
    {common}
    statistic : {{'welch', 'pseudo_f'}}, default 'welch'
        'welch': the Welch-type statistic, each group weighted by the precision of its own
        centroid (robust to unequal spreads); 'pseudo_f': PERMANOVA's pseudo-F.

    Notes
    -----
    See :mod:`tallyform.core.counting` and :mod:`tallyform.core.counting_stats` for the
    formulas and what was measured (benchmarks/counting.py; the calibration table in
    docs/calibration.md).

    References
    ----------
    Sanders, H. L. (1968). Am. Nat. 102, 243-282. Hurlbert, S. H. (1971). Ecology 52,
    577-586. Anderson, M. J. (2001). Austral Ecol. 26, 32-46. Welch, B. L. (1951).
    Biometrika 38, 330-336. Rueger, B. (1978). Metrika 25, 171-178. Warton, D. I., Wright, S.
    T. & Wang, Y. (2012). Methods Ecol. Evol. 3, 89-101.

    Examples
    --------
    >>> import tallyform as tly
    >>> tab = tly.demo("mesocosm")                      # synthetic
    >>> res = shape_test(tab, "treatment", n_permutations=99, rng=1)
    >>> res.aspect, res.depth == int(tab.totals.min())
    ('shape', True)
    """
    check_option("statistic", statistic, SHAPE_STATISTICS)
    return _run("shape", table, group, measure=measure, transform=transform, adjust=adjust,
                depth=depth, n_draws=n_draws, statistic=statistic, noise_correction=False,
                n_permutations=n_permutations, units=units, blocks=blocks, alpha=alpha,
                rng=rng, progress=progress, cancel=cancel, params=measure_options)


@reports_progress("Spread test", knob="n_permutations")
def spread_test(table, group, *, measure="chi_square", transform=None,
                adjust: str = "rarefaction", depth: int | None = None, n_draws: int = 1,
                noise_correction: bool = True, n_permutations: int = 999, units=None,
                blocks=None, alpha: float = 0.05, rng=None,
                progress: Callable[[int, int], None] | None = None,
                cancel: Callable[[], bool] | None = None,
                **measure_options) -> CountingTestResult:
    """Do the groups differ in spread? A dispersion test that differences in size cannot fool.

    Every sample is rarefied to a common number of individuals; distances of samples to
    their group centroid (Anderson 2006), rescaled by n_g / (n_g - 1), are compared by an
    ANOVA F whose permutation distribution recomputes the centroids for each relabelling
    (exact under "the same law of composition in every group"). For measures linear in
    the profiles (chi-square, Euclidean on profiles) the counting noise that remains at the
    common depth is removed from every squared distance (unbiased multinomial estimate),
    which leaves the biological spread and adds power.
    {common}
    noise_correction : bool, default True
        Remove the estimated counting noise where a closed form exists (chi-square,
        Euclidean on profiles); the test is exact either way.

    References
    ----------
    Anderson, M. J. (2006). Biometrics 62, 245-253. Sanders, H. L. (1968). Am. Nat. 102,
    243-282. Hurlbert, S. H. (1971). Ecology 52, 577-586. Rueger, B. (1978). Metrika 25,
    171-178. Warton, D. I., Wright, S. T. & Wang, Y. (2012). Methods Ecol. Evol. 3, 89-101.

    Examples
    --------
    >>> import tallyform as tly
    >>> tab = tly.demo("mesocosm")                      # synthetic
    >>> res = spread_test(tab, "treatment", n_permutations=99, rng=1)
    >>> list(res.summary.columns)[-1]
    'mean_distance'
    """
    if not isinstance(noise_correction, (bool, np.bool_)):
        raise InputError(f"`noise_correction` must be True or False; got {noise_correction!r}.")
    return _run("spread", table, group, measure=measure, transform=transform, adjust=adjust,
                depth=depth, n_draws=n_draws, statistic=None, noise_correction=noise_correction,
                n_permutations=n_permutations, units=units, blocks=blocks, alpha=alpha,
                rng=rng, progress=progress, cancel=cancel, params=measure_options)


if shape_test.__doc__:                                  # None under python -OO
    shape_test.__doc__ = shape_test.__doc__.format(common=_DOC_COMMON.rstrip())
    spread_test.__doc__ = spread_test.__doc__.format(common=_DOC_COMMON.rstrip())
