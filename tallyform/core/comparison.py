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

from .random import as_rng
from .errors import InputError
from .inference import check_n_permutations, check_option
from .results import ResultMixin
from .size_tests import SIZE_METHODS, SizeTestResult, group_factor, size_test
from .table import as_table
from .units import resolve_units

__all__ = ["compare_groups", "ComparisonResult", "reading_text"]

_METHODS = SIZE_METHODS


@dataclass(frozen=True, eq=False)
class ComparisonResult(ResultMixin):
    """Size, shape and spread compared between groups, with a plain reading.

    Attributes
    ----------
    size : SizeTestResult or None
        Test of log totals (per effort) on the units the groups were applied to; None for
        relative data without loads (``size_skipped`` says why).
    shape : PermanovaResult
        PERMANOVA with a size-free measure.
    welch : WelchResult
        The Welch-type location test with the same measure: do the centroids differ when
        each group may have its own spread?
    dispersion : DispersionResult
        Dispersion test with the same measure.
    reading : str
        One paragraph saying what the tests together do and do not show.
    statistic, pvalue : Series
        Indexed ``size``, ``shape``, ``welch``, ``spread`` (size NaN when skipped).
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
    welch: object = None
    units: str = "samples"
    n_replicates: int = 0
    size_skipped: str | None = None

    def to_frame(self) -> pd.DataFrame:
        size_name = ("size: not tested" if self.size is None
                     else f"size: {self.size.method} on {self.size.measure}")
        tests = [size_name,
                 f"shape: PERMANOVA on {self.measure}",
                 f"shape, unequal spreads allowed: Welch-type test on {self.measure}",
                 f"spread: dispersion test on {self.measure}"]
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

    def _repr_html_(self) -> str:
        import html
        frame = self.to_frame().to_html(float_format="{:.4g}".format)
        return (f"<div><p><b>{html.escape(self._title())}</b></p>{frame}"
                f"<p>{html.escape(self.reading)}</p>{self._notes_html()}</div>")


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
                 welch_p: float | None = None, alpha: float = 0.05, size_free: bool = True,
                 n_samples: int | None = None, coarse: bool = False,
                 units_sentence: str = "", replicates: str = "samples",
                 min_pvalue: float | None = None, size_skipped: str | None = None) -> str:
    """The plain-language paragraph of :func:`compare_groups` (never stronger than the tests).

    A significant PERMANOVA with unequal spreads is read through the Welch-type test, which
    allows each group its own spread: "the centroids differ even allowing for unequal
    spread", or "PERMANOVA's result may reflect the difference in spread" (Anderson 2006;
    Warton et al. 2012; Hamidi et al. 2019). A test that detects nothing is never read as
    showing equality.
    """
    out = [units_sentence] if units_sentence else []
    out.append(_size_sentence(size, group, alpha, size_skipped))
    sh, sp = shape_p <= alpha, spread_p <= alpha
    we = welch_p is not None and np.isfinite(welch_p) and welch_p <= alpha
    name = _MEASURE_NAMES.get(measure, measure.replace("_", "-"))
    if size_free:
        noun, how = "composition", f"PERMANOVA on {name} distances between relative abundances"
        shift = "a shift in composition"
    else:
        noun, how = f"overall {name} dissimilarity", f"PERMANOVA on {name}"
        shift = "a shift of the group centroids"
    wtxt = "" if welch_p is None else f"; Welch-type test, {_p(welch_p)}"
    if sh and not sp:
        out.append(f"The groups differ in {noun} ({how}, {_p(shape_p)}{wtxt}), and no "
                   f"difference in spread was detected (dispersion test, {_p(spread_p)}), so "
                   f"{shift} is the simplest reading; the dispersion test has little power "
                   "with few replicates per group.")
    elif sp and (sh or we):
        if welch_p is None:
            out.append(f"The groups differ in {noun} or in spread, or both ({how}, "
                       f"{_p(shape_p)}; dispersion test, {_p(spread_p)}).")
        elif we:
            out.append(f"The spread within groups differs (dispersion test, {_p(spread_p)}), "
                       f"and the centroids differ even allowing each group its own spread "
                       f"(Welch-type test, {_p(welch_p)}; {how}, {_p(shape_p)}): {shift} "
                       "together with a difference in variability.")
        else:
            out.append(f"The spread within groups differs (dispersion test, {_p(spread_p)}); "
                       f"{how} gives {_p(shape_p)}, but the Welch-type test, which allows "
                       f"each group its own spread, does not detect a shift ({_p(welch_p)}), "
                       "so PERMANOVA's result may reflect the difference in spread rather "
                       f"than in {noun}.")
    elif sp:
        out.append(f"No shift in {noun} was detected ({how}, {_p(shape_p)}{wtxt}), but the "
                   f"spread within groups differs (dispersion test, {_p(spread_p)}).")
    elif we and not sh:
        out.append(f"The Welch-type test detects a shift in {noun} ({_p(welch_p)}) that "
                   f"PERMANOVA does not ({_p(shape_p)}); no difference in spread was detected "
                   f"(dispersion test, {_p(spread_p)}). Read it with care: the two tests "
                   "weigh the groups differently when their sizes differ.")
    else:
        out.append(f"No difference in {noun} or in its spread was detected ({how}, "
                   f"{_p(shape_p)}{wtxt}; dispersion test, {_p(spread_p)}); this is not "
                   "evidence that the groups are the same.")
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


def compare_groups(table, group, *, units=None, shape_measure="chi_square", transform=None,
                   size_method: str = "welch", effort=None, centre: str = "mean",
                   blocks=None, n_permutations: int = 999, rng=None, alpha: float = 0.05,
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
        shape and spread by permuting whole units). None detects them (a column within
        which the groups are constant, with at least two units per group and repeated
        samples) and says so; False treats samples as independent (and notes it when they
        repeat units).
    shape_measure : str or Dissimilarity, default 'chi_square'
        A size-free measure for the shape tests ('chi_square', 'hellinger', 'aitchison'...),
        or a ready Dissimilarity of these samples.
    transform : optional
        Transformation applied before ``shape_measure`` (when it is a name).
    size_method : {'welch', 'anova', 'kruskal', 'permutation', 'negbin'}, default 'welch'
        See :func:`size_test`; Welch's ANOVA of log totals holds its level when groups
        differ in the variability of their totals.
    effort : None, False, str or array_like
        As in :func:`size_test`.
    centre : {'mean', 'median'}
        Group centre of the dispersion test.
    blocks : str, optional
        Blocking column: permutations stay within blocks (and the size test models them).
    n_permutations : int, default 999
    rng : None, int or numpy.random.Generator
        Split into independent streams for the four tests.
    alpha : float, default 0.05
        Level used for "detected" in the reading (the p-values are reported as they are).
    progress, cancel : callables, optional

    Returns
    -------
    ComparisonResult

    Notes
    -----
    Size: :func:`size_test` on log totals (per effort). Shape: PERMANOVA (Anderson 2001) on a
    size-free dissimilarity, with the Welch-type test (Alekseyenko 2016; Hamidi et al.
    2019), which allows each group its own spread. Spread: the dispersion test (Anderson
    2006) on the same dissimilarity. When spreads differ, the reading says whether the
    centroids differ even allowing for it. Relative data (sequencing reads) without loads
    are compared in shape and spread only.

    References
    ----------
    Anderson, M. J. (2006). Biometrics 62, 245-253. Hamidi, B., Wallace, K., Vasu, C. &
    Alekseyenko, A. V. (2019). Microbiome 7, 51. Hurlbert, S. H. (1984). Ecol. Monogr. 54,
    187-211. Warton, D. I., Wright, S. T. & Wang, Y. (2012). Methods Ecol. Evol. 3, 89-101.
    """
    from .dispersion import dispersion_test
    from .dissimilarity import Dissimilarity, dissimilarity
    from .inference import permanova
    from .welch import welch_permanova
    if not 0 < alpha < 1:
        raise InputError(f"`alpha` must be between 0 and 1; got {alpha!r}.")
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
    if isinstance(shape_measure, Dissimilarity):
        d = shape_measure
        if list(d.labels) != list(tab.sample_labels):
            raise InputError("the dissimilarity given as `shape_measure` is not over the "
                             "table's samples (labels differ).")
    else:
        d = dissimilarity(tab, shape_measure, transform=transform)
    size_free = bool(d.properties.get("size_free", False))
    streams = as_rng(rng).spawn(4)
    stage = [0]
    n_stages = 4

    def staged(done, total):
        if progress is not None:
            progress(stage[0] * total + done, n_stages * total)

    size, skipped = None, None
    if tab.abundance == "relative" and tab.load is None:
        skipped = ("the totals are sequencing depths (abundance='relative'), which the "
                   "laboratory sets; give loads (load= or spike_in=) to test size.")
    else:
        size = size_test(tab, name if isinstance(group, str) else g, method=size_method,
                         effort=effort, units=unit_arg, blocks=blocks, rng=streams[0],
                         n_permutations=n_permutations, cancel=cancel,
                         progress=staged if size_method in ("permutation", "negbin") else None)
    stage[0] = 1
    shape = permanova(d, frame, [name], units=unit_arg, blocks=blocks,
                      n_permutations=n_permutations, rng=streams[1], progress=staged,
                      cancel=cancel)
    stage[0] = 2
    welch = welch_permanova(d, frame, name, units=unit_arg, blocks=blocks,
                            n_permutations=n_permutations, rng=streams[2], progress=staged,
                            cancel=cancel)
    stage[0] = 3
    spread = dispersion_test(d, name, samples=frame, units=unit_arg, blocks=blocks,
                             n_permutations=n_permutations, rng=streams[3], centre=centre,
                             progress=staged, cancel=cancel)
    shape_p = float(shape.pvalue[name])
    lv = plan.level_of(name)
    n_rep = lv.m if lv is not None else tab.n_samples
    replicates = "samples" if lv is None else "units"
    floors = [x for x in (shape.min_pvalue[name] if shape.min_pvalue is not None else None,
                          spread.min_pvalue, welch.min_pvalue)
              if x is not None and np.isfinite(x)]
    coarse = any(n.startswith("Only") for n in shape.notes + spread.notes)
    reading = reading_text(size, shape_p, spread.pvalue, group=name, measure=d.measure,
                           welch_p=float(welch.pvalue), alpha=alpha, size_free=size_free,
                           n_samples=n_rep, coarse=coarse,
                           units_sentence=_units_sentence(plan, name), replicates=replicates,
                           min_pvalue=min(floors) if floors else None, size_skipped=skipped)
    parts = ((size.notes if size is not None else ()) + plan.notes + shape.notes
             + welch.notes + spread.notes + d.notes)
    # the reading weighs PERMANOVA against the spread and Welch-type tests itself
    notes = tuple(dict.fromkeys(n for n in parts
                                if not n.startswith("PERMANOVA also responds")
                                and (not n.startswith("Sampling units detected")
                                     or n in plan.notes)))
    idx = pd.Index(["size", "shape", "welch", "spread"], name="aspect")
    size_stat = np.nan if size is None else size.statistic
    size_p = np.nan if size is None else size.pvalue
    return ComparisonResult(
        size=size, shape=shape, dispersion=spread, welch=welch, reading=reading,
        statistic=pd.Series([size_stat, float(shape.statistic[name]), float(welch.statistic),
                             spread.statistic], index=idx, name="statistic"),
        pvalue=pd.Series([size_p, shape_p, float(welch.pvalue), spread.pvalue], index=idx,
                         name="pvalue"),
        group=name, measure=d.measure, alpha=alpha, notes=notes,
        units="samples" if lv is None else lv.describe(), n_replicates=int(n_rep),
        size_skipped=skipped)
