"""Size, shape and spread compared between groups, side by side, with a plain reading.

Size: :func:`tallyform.core.size_tests.size_test` (Welch's ANOVA of log totals by default) on
the units the groups were applied to. Shape: PERMANOVA on a size-free dissimilarity, with its
Welch-type companion (:func:`tallyform.core.welch.welch_permanova`), which allows each group
its own spread. Spread: the dispersion test on the same dissimilarity. Every test uses the
same sampling units (:func:`tallyform.core.units.resolve_units`).
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd

from .errors import InputError
from .inference import check_n_permutations, check_option
from .random import as_rng
from .results import ResultMixin
from .size_tests import SIZE_METHODS, SizeTestResult, group_factor, size_test
from .table import as_table
from .units import resolve_units
from .progress import reports_progress
from .validation import check_fraction

__all__ = ["compare_groups", "ComparisonResult", "reading_text", "SHAPE_MEASURES"]

_METHODS = SIZE_METHODS
#: size-free measures offered for the shape and spread tests (any measure name or a
#: Dissimilarity is accepted by compare_groups; these are the ones that ignore totals)
SHAPE_MEASURES = ("chi_square", "hellinger", "aitchison", "chord")


@dataclass(frozen=True, eq=False)
class ComparisonResult(ResultMixin):
    """Size, shape and spread compared between groups, with a plain reading.

    Attributes
    ----------
    size : SizeTestResult or None
        Test of log totals (per effort) on the units the groups were applied to; None for
        relative data without loads (``size_skipped`` says why).
    shape : CountingTestResult or WelchResult
        The location test of composition read in ``reading``: the Welch-type statistic
        (each group weighted by its own spread) after every sample is rarefied to a common
        depth (:func:`tallyform.core.counting.shape_test`), so neither unequal spreads nor
        unequal totals make it significant; for non-count data (biomass, cover, a ready
        Dissimilarity) :func:`welch_permanova` on the data as they are.
    dispersion : CountingTestResult or DispersionResult
        The spread test, rarefied likewise with the counting noise left at the common depth
        removed (:func:`tallyform.core.counting.spread_test`), or the dispersion test.
    permanova : PermanovaResult
        PERMANOVA of the same measure on all individuals, for reference (it responds to
        unequal spread and, when totals differ, to counting noise).
    reading : str
        One paragraph saying what the tests together do and do not show.
    statistic, pvalue : Series
        Indexed ``size``, ``shape``, ``spread``, ``permanova`` (size NaN when skipped).
    group : str
    measure : str
        The shape measure.
    alpha : float
        The level at which "detected" is used in the reading.
    units : str
        The replicates the tests counted, in words (e.g. "15 units of 'tank', 4 samples
        each"), or "samples".
    n_replicates : int
        The number of independent replicates (units, or samples).
    depth : int or None
        The common number of individuals every sample was rarefied to (None: no rarefaction).
    size_skipped : str or None
        Why size was not tested.
    notes : tuple of str
    """

    size: SizeTestResult | None
    shape: object
    dispersion: object
    reading: str
    statistic: pd.Series
    pvalue: pd.Series
    group: str
    measure: str
    alpha: float = 0.05
    notes: tuple = ()
    permanova: object = None
    units: str = "samples"
    n_replicates: int = 0
    depth: int | None = None
    size_skipped: str | None = None

    @property
    def welch(self):
        """The Welch-type location test (the shape test itself)."""
        return self.shape

    def tables(self) -> dict:
        out = {"comparison": self.to_frame()}
        if self.size is not None:
            out["size_test"] = self.size.to_frame()
        out["shape_test"] = self.shape.to_frame()
        if self.permanova is not None:
            out["shape_permanova"] = self.permanova.to_frame()
        out["dispersion_test"] = self.dispersion.to_frame()
        return out

    def to_frame(self) -> pd.DataFrame:
        size_name = ("size: not tested" if self.size is None
                     else f"size: {self.size.method} on {self.size.measure}")
        rare = (f", after rarefaction to {self.depth} individuals" if self.depth is not None
                else "")
        tests = [size_name,
                 f"shape: Welch-type test on {self.measure}{rare}",
                 f"spread: dispersion test on {self.measure}{rare}",
                 f"reference: PERMANOVA on {self.measure}, all individuals"]
        p = self.pvalue.to_numpy(dtype=float)
        detected = np.where(np.isfinite(p), p <= self.alpha, False)
        return pd.DataFrame({"test": tests, "statistic": self.statistic.to_numpy(),
                             "pvalue": p, "detected": detected},
                            index=pd.Index(list(self.pvalue.index), name="aspect"))

    def _title(self) -> str:
        return (f"Size, shape and spread between levels of {self.group!r} "
                f"({self.n_replicates} {'samples' if self.units == 'samples' else 'units'})")

    def __str__(self) -> str:
        return super().__str__() + "\n\n" + self.reading



_MEASURE_NAMES = {"bray_curtis": "Bray-Curtis", "chi_square": "chi-square",
                  "hellinger": "Hellinger", "aitchison": "Aitchison",
                  "jensen_shannon": "Jensen-Shannon", "morisita_horn": "Morisita-Horn",
                  "kulczynski": "Kulczynski", "sorensen": "Sorensen", "jaccard": "Jaccard",
                  "canberra": "Canberra", "euclidean": "Euclidean"}


def _p(p: float) -> str:
    return "p < 0.001" if p < 0.001 else f"p = {p:.2g}" if p < 0.01 else f"p = {p:.3g}"


def _units_sentence(plan, group: str) -> str:
    if plan.independent:
        return ""
    lv = plan.level_of(group)
    how = " (detected; pass units=False to treat samples as independent)" if plan.detected \
        else ""
    if lv is None:
        inner = plan.levels[-1]
        return (f"{group!r} varies within units of {inner.name!r} ({inner.describe()}), so "
                f"it was compared within them{how}.")
    return (f"Tested at the level of {lv.name!r}: {lv.describe()}; {group!r} is constant "
            f"within each {lv.name!r}, so the replicates are the units, not the samples{how}.")


def _size_sentence(size, group: str, alpha: float, skipped: str | None) -> str:
    if size is None:
        return f"Size was not tested: {skipped}"
    if size.pvalue <= alpha:
        ratios = size.summary["ratio"].iloc[1:]
        far = ratios.index[int(np.argmax(np.abs(np.log(ratios.to_numpy()))))]
        ref = size.summary.index[0]
        kind = "expected total" if size.method == "negbin" else "geometric mean total"
        return (f"Total abundance differs between the levels of {group!r} "
                f"({size.method}, {_p(size.pvalue)}); for example, {far!r} has "
                f"{ratios[far]:.2g} times the {kind} of {ref!r}.")
    return (f"No difference in total abundance between the levels of {group!r} was detected "
            f"({size.method}, {_p(size.pvalue)}); this does not show that the totals are "
            "equal.")


def reading_text(size, shape_p: float, spread_p: float, *, group: str, measure: str,
                 welch: bool = False, permanova_p: float | None = None, alpha: float = 0.05,
                 size_free: bool = True, n_samples: int | None = None, coarse: bool = False,
                 units_sentence: str = "", replicates: str = "samples",
                 min_pvalue: float | None = None, size_skipped: str | None = None,
                 depth: int | None = None, size_ratio: float | None = None) -> str:
    """The plain-language paragraph of :func:`compare_groups` (never stronger than the tests).

    With ``welch=True`` the shape p-value is that of a location test that allows each group
    its own spread (Welch-type; Alekseyenko 2016, Hamidi et al. 2019), so a shape difference
    together with a spread difference is read as "composition differs, and so does spread".
    Otherwise (a PERMANOVA p-value), it is read as "composition or spread" (Anderson 2006;
    Warton et al. 2012). A test that detects nothing is never read as showing equality.
    """
    out = [units_sentence] if units_sentence else []
    out.append(_size_sentence(size, group, alpha, size_skipped))
    if depth is not None:
        why = (f", so the {size_ratio:.1f}-fold difference in totals between groups cannot by "
               "itself make them significant" if size_ratio and size_ratio > 1.5 else
               ", so differences in totals cannot by themselves make them significant")
        out.append(f"Every sample was rarefied to {depth} individuals before the shape and "
                   f"spread tests{why}.")
    sh, sp = shape_p <= alpha, spread_p <= alpha
    name = _MEASURE_NAMES.get(measure, measure.replace("_", "-"))
    if size_free:
        noun, shift = "composition", "a shift in composition"
        how = (f"Welch-type test on {name} distances between relative abundances" if welch
               else f"PERMANOVA on {name} distances between relative abundances")
    else:
        noun, shift = f"overall {name} dissimilarity", "a shift of the group centroids"
        how = f"Welch-type test on {name}" if welch else f"PERMANOVA on {name}"
    if sh and not sp:
        out.append(f"The groups differ in {noun} ({how}, {_p(shape_p)}), and no difference "
                   f"in spread was detected (dispersion test, {_p(spread_p)}), so {shift} is "
                   "the simplest reading; the dispersion test has little power with few "
                   "replicates per group.")
    elif sh and sp and welch:
        out.append(f"The groups differ in {noun} even allowing each group its own spread "
                   f"({how}, {_p(shape_p)}), and the spread within groups differs too "
                   f"(dispersion test, {_p(spread_p)}).")
    elif sh and sp:
        out.append(f"The groups differ in {noun} or in spread, or both ({how}, "
                   f"{_p(shape_p)}; dispersion test, {_p(spread_p)}): with unequal spreads, "
                   "PERMANOVA cannot tell a shift between groups from a difference in "
                   "variability within them.")
    elif sp:
        out.append(f"No shift in {noun} was detected ({how}, {_p(shape_p)}), but the spread "
                   f"within groups differs (dispersion test, {_p(spread_p)}).")
    else:
        out.append(f"No difference in {noun} or in its spread was detected ({how}, "
                   f"{_p(shape_p)}; dispersion test, {_p(spread_p)}); this is not evidence "
                   "that the groups are the same.")
    if permanova_p is not None and np.isfinite(permanova_p) and (permanova_p <= alpha) != sh:
        why = ("unequal spread" + (" and to the counting noise of unequal totals"
                                   if depth is not None else ""))
        out.append(f"PERMANOVA on all individuals says otherwise ({_p(permanova_p)}): it "
                   f"also responds to {why}, which the test above does not.")
    if not size_free:
        out.append(f"The {name} measure is not size-free, so its test also responds to "
                   "differences in totals; use a size-free measure (chi-square, Hellinger, "
                   "Aitchison) to test composition alone.")
    if min_pvalue is not None and np.isfinite(min_pvalue) and min_pvalue > alpha:
        out.append(f"With these {replicates} the smallest possible p-value of the shape and "
                   f"spread tests is {min_pvalue:.2g}, above {alpha:g}: they cannot detect a "
                   "difference at that level, whatever the data.")
    elif coarse:
        out.append("Few distinct permutations exist, so the permutation p-values are coarse.")
    count = f" ({n_samples} {replicates})" if n_samples else ""
    out.append(f"Each test is read at alpha = {alpha:g}, without adjustment across the "
               f"tests{count}.")
    return " ".join(out)


def _rarefiable(tab, shape_measure) -> bool:
    """Whole counts (or reads) and a measure given by name: the counting-noise-proof tests
    apply."""
    from .dissimilarity import Dissimilarity
    if isinstance(shape_measure, Dissimilarity):
        return False
    reads = tab.reads
    x = tab.values if reads is None else reads.to_numpy(dtype=float)
    return bool(np.all(x == np.round(x)))


@reports_progress("Group comparison", knob="n_permutations")
def compare_groups(table, group, *, units=None, shape_measure="chi_square", transform=None,
                   size_method: str = "welch", effort=None, centre: str = "mean",
                   blocks=None, depth: int | None = None, n_permutations: int = 999,
                   rng=None, alpha: float = 0.05,
                   progress: Callable[[int, int], None] | None = None,
                   cancel: Callable[[], bool] | None = None) -> ComparisonResult:
    """Compare groups in size (totals), shape (composition) and spread, side by side.

    Parameters
    ----------
    table : CommunityTable, DataFrame or array
    group : str
        A factor column of the sample table.
    units : None, False, str or list of str
        The sampling units the groups were applied to (tank, site, plot; nested levels
        coarsest first): every test then counts units, not samples (size on unit totals,
        shape and spread by relabelling whole units). None detects them (a column within
        which the groups are constant, with at least two units per group and repeated
        samples) and says so; False treats samples as independent (and notes it when they
        repeat units).
    shape_measure : str or Dissimilarity, default 'chi_square'
        A size-free measure for the shape and spread tests ('chi_square', 'hellinger',
        'aitchison'...), or a ready Dissimilarity of these samples (then no rarefaction).
    transform : optional
        Transformation applied before ``shape_measure`` (when it is a name).
    size_method : {'welch', 'anova', 'kruskal', 'permutation', 'negbin'}, default 'welch'
        See :func:`size_test`; Welch's ANOVA of log totals holds its level when groups
        differ in the variability of their totals.
    effort : None, False, str or array_like
        As in :func:`size_test`.
    centre : {'mean', 'median'}
        Group centre of the dispersion test (median: data that are not counts only).
    blocks : str, optional
        Blocking column: relabelling stays within blocks (and the size test models them).
    depth : int, optional
        Rarefaction depth of the shape and spread tests (default: the smallest total);
        samples with fewer individuals are left out, and a note says which.
    n_permutations : int, default 999
    rng : None, int or numpy.random.Generator
        Split into independent streams for the tests (the shape and spread tests share one
        rarefaction and one set of relabellings).
    alpha : float, default 0.05
        Level used for "detected" in the reading (the p-values are reported as they are).
    progress, cancel : callables, optional

    Returns
    -------
    ComparisonResult

    Notes
    -----
    Size: :func:`size_test` on log totals (per effort). Shape and spread (counts): every
    sample is rarefied to a common number of individuals (Sanders 1968; Hurlbert 1971), so
    samples of the same communities are exchangeable whatever their totals, then the group
    centroids are compared with a Welch-type statistic that allows each group its own spread
    (Alekseyenko 2016; Hamidi et al. 2019) and the spreads with the dispersion test (Anderson
    2006) with the counting noise left at that depth removed (:mod:`tallyform.core.counting`);
    both hold their level when groups differ only in totals or only in spread. Data that are
    not counts (biomass, cover) or a ready Dissimilarity: the Welch-type test and the
    dispersion test on the data as they are (a note says they are not protected from
    counting noise). PERMANOVA on all individuals is given for reference. Relative data
    (sequencing reads) without loads are compared in shape and spread only.

    References
    ----------
    Anderson, M. J. (2006). Biometrics 62, 245-253. Hamidi, B., Wallace, K., Vasu, C. &
    Alekseyenko, A. V. (2019). Microbiome 7, 51. Hurlbert, S. H. (1984). Ecol. Monogr. 54,
    187-211. Sanders, H. L. (1968). Am. Nat. 102, 243-282. Warton, D. I., Wright, S. T. &
    Wang, Y. (2012). Methods Ecol. Evol. 3, 89-101.
    """
    alpha = check_fraction("alpha", alpha)
    check_option("size_method", size_method, _METHODS)
    n_permutations = check_n_permutations(n_permutations)
    tab = as_table(table)
    g = group_factor(tab, group)
    name = str(g.name)
    frame = tab.samples.copy()
    frame[name] = g
    plan = resolve_units(frame, [name], units,
                         blocks=blocks if isinstance(blocks, str) else None)
    unit_arg = [lv.name for lv in plan.levels] or False
    d = _shape_dissimilarity(tab, shape_measure, transform)
    counts = _rarefiable(tab, shape_measure)
    if not counts and (depth is not None):
        raise InputError("`depth` is a rarefaction depth; these data are not whole counts "
                         "(or the measure is a ready Dissimilarity), so nothing is rarefied.")
    streams = as_rng(rng).spawn(3)
    stage, staged = _stager(progress, 4)
    common = dict(units=unit_arg, blocks=blocks, n_permutations=n_permutations, cancel=cancel)
    size, skipped = _size_part(tab, name if isinstance(group, str) else g, size_method,
                               effort, streams[0], staged, common)
    stage[0] = 1
    shape, spread, extra = _shape_spread(tab, d, frame, name, counts, streams[1], stage,
                                         staged, common, shape_measure=shape_measure,
                                         transform=transform, depth=depth, alpha=alpha,
                                         centre=centre)
    stage[0] = 3
    from .inference import permanova
    ref = permanova(d, frame, [name], rng=streams[2], progress=staged, **common)
    return _comparison_result(tab, d, plan, name, size, skipped, shape, spread, extra, ref,
                              counts=counts, alpha=alpha)


def _shape_dissimilarity(tab, shape_measure, transform):
    """The dissimilarity of the shape tests: the one given, or one computed from the table."""
    from .dissimilarity import Dissimilarity, dissimilarity
    if isinstance(shape_measure, Dissimilarity):
        if list(shape_measure.labels) != list(tab.sample_labels):
            raise InputError("the dissimilarity given as `shape_measure` is not over the "
                             "table's samples (labels differ).")
        return shape_measure
    return dissimilarity(tab, shape_measure, transform=transform)


def _stager(progress, n_stages: int):
    """A mutable stage counter and a progress callback that reports across the stages."""
    stage = [0]

    def staged(done, total):
        if progress is not None:
            progress(stage[0] * total + done, n_stages * total)
    return stage, staged


def _size_part(tab, group, size_method, effort, rng, staged, common):
    """The size test, or None with the reason when totals are sequencing depths."""
    if tab.abundance == "relative" and tab.load is None:
        return None, ("the totals are sequencing depths (abundance='relative'), which the "
                      "laboratory sets; give loads (load= or spike_in=) to test size.")
    size = size_test(tab, group, method=size_method, effort=effort, rng=rng,
                     progress=staged if size_method in ("permutation", "negbin") else None,
                     **common)
    return size, None


def _shape_spread(tab, d, frame, name, counts, rng, stage, staged, common, *, shape_measure,
                  transform, depth, alpha, centre):
    """The shape and spread tests: on counts when they are counts, else on the data as is."""
    if counts:
        from .counting import shape_test, spread_test
        kw = dict(measure=shape_measure, transform=transform, depth=depth, alpha=alpha,
                  **common)
        # one seed for both: the same rarefied draw and the same relabellings
        seed = int(rng.integers(2**63))
        shape = shape_test(tab, name, rng=seed, progress=staged, **kw)
        stage[0] = 2
        spread = spread_test(tab, name, rng=seed, progress=staged, **kw)
        return shape, spread, ()
    from .dispersion import dispersion_test
    from .welch import welch_permanova
    shape = welch_permanova(d, frame, name, rng=rng, progress=staged, **common)
    stage[0] = 2
    spread = dispersion_test(d, name, samples=frame, rng=rng, centre=centre, progress=staged,
                             **common)
    extra = ("The data are not whole counts (or the measure was given as a ready "
             "dissimilarity), so the shape and spread tests ran on the data as they are: "
             "when totals differ between groups, part of a difference in spread (and, "
             "for measures not linear in the proportions, in composition) can be "
             "counting noise.",)
    return shape, spread, extra


def _comparison_result(tab, d, plan, name, size, skipped, shape, spread, extra, ref, *,
                       counts, alpha) -> ComparisonResult:
    """Assemble the reading, the notes and the side-by-side result."""
    lv = plan.level_of(name)
    n_rep = lv.m if lv is not None else tab.n_samples
    replicates = "samples" if lv is None else "units"
    floors = [x for x in (getattr(shape, "min_pvalue", None),
                          getattr(spread, "min_pvalue", None))
              if x is not None and np.isfinite(x)]
    coarse = any(n.startswith("Only") for n in ref.notes + tuple(spread.notes))
    rare_depth = getattr(shape, "depth", None) if counts else None
    reading = reading_text(size, float(shape.pvalue), float(spread.pvalue), group=name,
                           measure=d.measure, welch=True,
                           permanova_p=float(ref.pvalue[name]), alpha=alpha,
                           size_free=bool(d.properties.get("size_free", False)),
                           n_samples=n_rep, coarse=coarse,
                           units_sentence=_units_sentence(plan, name), replicates=replicates,
                           min_pvalue=min(floors) if floors else None, size_skipped=skipped,
                           depth=rare_depth, size_ratio=getattr(shape, "size_ratio", None))
    parts = ((size.notes if size is not None else ()) + plan.notes + tuple(shape.notes)
             + tuple(spread.notes) + extra + ref.notes + d.notes)
    # the reading weighs the tests against each other itself
    notes = tuple(dict.fromkeys(n for n in parts
                                if not n.startswith("PERMANOVA also responds")
                                and (not n.startswith("Sampling units detected")
                                     or n in plan.notes)))
    idx = pd.Index(["size", "shape", "spread", "permanova"], name="aspect")
    size_stat = np.nan if size is None else size.statistic
    size_p = np.nan if size is None else size.pvalue
    return ComparisonResult(
        size=size, shape=shape, dispersion=spread, permanova=ref, reading=reading,
        statistic=pd.Series([size_stat, float(shape.statistic), float(spread.statistic),
                             float(ref.statistic[name])], index=idx, name="statistic"),
        pvalue=pd.Series([size_p, float(shape.pvalue), float(spread.pvalue),
                          float(ref.pvalue[name])], index=idx, name="pvalue"),
        group=name, measure=d.measure, alpha=alpha, notes=notes,
        units="samples" if lv is None else lv.describe(), n_replicates=int(n_rep),
        depth=rare_depth, size_skipped=skipped)
