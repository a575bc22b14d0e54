"""Size, shape and spread compared between groups, side by side, with a plain reading.

Size: :func:`tallyform.core.size_tests.size_test` on log totals (per effort). Shape: PERMANOVA
on a size-free dissimilarity. Spread: the dispersion test on the same dissimilarity.
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

__all__ = ["compare_groups", "ComparisonResult", "reading_text"]

_METHODS = SIZE_METHODS


@dataclass(frozen=True, eq=False)
class ComparisonResult(ResultMixin):
    """Size, shape and spread compared between groups, with a plain reading.

    Attributes
    ----------
    size : SizeTestResult
        Test of log totals (per effort).
    shape : PermanovaResult
        PERMANOVA with a size-free measure.
    dispersion : DispersionResult
        Dispersion test with the same measure.
    reading : str
        One paragraph saying what the three tests together do and do not show.
    statistic, pvalue : Series
        Indexed ``size``, ``shape``, ``spread``.
    group : str
    measure : str
        The shape measure.
    alpha : float
        The level at which "detected" is used in the reading.
    notes : tuple of str
    """

    size: SizeTestResult
    shape: object
    dispersion: object
    reading: str
    statistic: pd.Series
    pvalue: pd.Series
    group: str
    measure: str
    alpha: float = 0.05
    notes: tuple = ()

    def to_frame(self) -> pd.DataFrame:
        tests = [f"size: {self.size.method} on {self.size.measure}",
                 f"shape: PERMANOVA on {self.measure}",
                 f"spread: dispersion test on {self.measure}"]
        return pd.DataFrame({"test": tests, "statistic": self.statistic.to_numpy(),
                             "pvalue": self.pvalue.to_numpy(),
                             "detected": self.pvalue.to_numpy() <= self.alpha},
                            index=pd.Index(["size", "shape", "spread"], name="aspect"))

    def _title(self) -> str:
        return f"Size, shape and spread between levels of {self.group!r}"

    def __str__(self) -> str:
        return super().__str__() + "\n\n" + self.reading

    def _repr_html_(self) -> str:
        import html
        return super()._repr_html_().replace(
            "</div>", f"<p>{html.escape(self.reading)}</p></div>", 1)


_MEASURE_NAMES = {"bray_curtis": "Bray-Curtis", "chi_square": "chi-square",
                  "hellinger": "Hellinger", "aitchison": "Aitchison",
                  "jensen_shannon": "Jensen-Shannon", "morisita_horn": "Morisita-Horn",
                  "kulczynski": "Kulczynski", "sorensen": "Sorensen", "jaccard": "Jaccard",
                  "canberra": "Canberra", "euclidean": "Euclidean"}


def _p(p: float) -> str:
    return "p < 0.001" if p < 0.001 else f"p = {p:.3g}"


def reading_text(size: SizeTestResult, shape_p: float, spread_p: float, *, group: str,
                 measure: str, alpha: float = 0.05, size_free: bool = True,
                 n_samples: int | None = None, coarse: bool = False) -> str:
    """The plain-language paragraph of :func:`compare_groups` (never stronger than the tests).

    A significant shape test with unequal spreads is read as "differ in composition or in
    spread", since PERMANOVA responds to both (Anderson 2006; Warton et al. 2012); a test
    that detects nothing is never read as showing equality.
    """
    out = []
    sz, sh, sp = size.pvalue <= alpha, shape_p <= alpha, spread_p <= alpha
    if sz:
        ratios = size.summary["ratio"].iloc[1:]
        far = ratios.index[int(np.argmax(np.abs(np.log(ratios.to_numpy()))))]
        ref = size.summary.index[0]
        kind = "expected total" if size.method == "negbin" else "geometric mean total"
        out.append(f"Total abundance differs between the levels of {group!r} "
                   f"({size.method}, {_p(size.pvalue)}); for example, {far!r} has "
                   f"{ratios[far]:.2g} times the {kind} of {ref!r}.")
    else:
        out.append(f"No difference in total abundance between the levels of {group!r} was "
                   f"detected ({size.method}, {_p(size.pvalue)}); this does not show that "
                   "the totals are equal.")
    name = _MEASURE_NAMES.get(measure, measure.replace("_", "-"))
    if size_free:
        noun = "composition"
        how = f"PERMANOVA on {name} distances between relative abundances"
        shift = "a shift in composition"
    else:
        noun = f"overall {name} dissimilarity"
        how = f"PERMANOVA on {name}"
        shift = "a shift of the group centroids"
    if sh and not sp:
        out.append(f"The groups differ in {noun} ({how}, {_p(shape_p)}), and no difference "
                   f"in spread was detected (dispersion test, {_p(spread_p)}), so {shift} is "
                   "the simplest reading; the dispersion test has little power with few "
                   "samples per group.")
    elif sh and sp:
        out.append(f"The groups differ in {noun} or in spread, or both ({how}, "
                   f"{_p(shape_p)}; dispersion test, {_p(spread_p)}): with unequal spreads, "
                   "PERMANOVA cannot tell a shift between groups from a difference in "
                   "variability within them.")
    elif sp:
        out.append(f"No shift in {'composition' if size_free else noun} was detected "
                   f"({how}, {_p(shape_p)}), but the spread within groups differs "
                   f"(dispersion test, {_p(spread_p)}).")
    else:
        out.append(f"No difference in {noun} or in its spread was detected ({how}, "
                   f"{_p(shape_p)}; dispersion test, {_p(spread_p)}); this is not evidence "
                   "that the groups are the same.")
    if not size_free:
        out.append(f"The {name} measure is not size-free, so its test also responds to "
                   "differences in totals; use a size-free measure (chi-square, Hellinger, "
                   "Aitchison) to test composition alone.")
    if coarse:
        out.append("Few distinct permutations exist, so the permutation p-values are coarse.")
    out.append(f"Each test is read at alpha = {alpha:g}, without adjustment across the "
               "three" + (f" ({n_samples} samples)." if n_samples else "."))
    return " ".join(out)


def compare_groups(table, group, *, shape_measure="chi_square", transform=None,
                   size_method: str = "anova", effort=None, centre: str = "mean",
                   blocks=None, n_permutations: int = 999, rng=None, alpha: float = 0.05,
                   progress: Callable[[int, int], None] | None = None,
                   cancel: Callable[[], bool] | None = None) -> ComparisonResult:
    """Compare groups in size (totals), shape (composition) and spread, side by side.

    Parameters
    ----------
    table : CommunityTable, DataFrame or array
    group : str
        A factor column of the sample table.
    shape_measure : str or Dissimilarity, default 'chi_square'
        A size-free measure for the shape test ('chi_square', 'hellinger', 'aitchison'...),
        or a ready Dissimilarity of these samples.
    transform : optional
        Transformation applied before ``shape_measure`` (when it is a name).
    size_method : {'anova', 'welch', 'kruskal', 'permutation', 'negbin'}, default 'anova'
    effort : None, False, str or array_like
        As in :func:`size_test`.
    centre : {'mean', 'median'}
        Group centre of the dispersion test.
    blocks : str, optional
        Blocking column: permutations stay within blocks.
    n_permutations : int, default 999
    rng : None, int or numpy.random.Generator
        Split into independent streams for the three tests.
    alpha : float, default 0.05
        Level used for "detected" in the reading (the p-values are reported as they are).
    progress, cancel : callables, optional

    Returns
    -------
    ComparisonResult

    Notes
    -----
    Size: :func:`size_test` on log totals (per effort). Shape: PERMANOVA (Anderson 2001) on
    a size-free dissimilarity. Spread: the dispersion test (Anderson 2006) on the same
    dissimilarity. A shape difference together with a spread difference is reported as
    "composition or spread", because PERMANOVA responds to both.

    References
    ----------
    Anderson, M. J. (2006). Biometrics 62, 245-253. Warton, D. I., Wright, S. T. & Wang, Y.
    (2012). Distance-based multivariate analyses confound location and dispersion effects.
    Methods Ecol. Evol. 3, 89-101.
    """
    from .dispersion import dispersion_test
    from .dissimilarity import Dissimilarity
    from .inference import permanova
    if not 0 < alpha < 1:
        raise InputError(f"`alpha` must be between 0 and 1; got {alpha!r}.")
    check_option("size_method", size_method, _METHODS)
    n_permutations = check_n_permutations(n_permutations)
    tab = as_table(table)
    g = group_factor(tab, group)
    if isinstance(shape_measure, Dissimilarity):
        d = shape_measure
        if list(d.labels) != list(tab.sample_labels):
            raise InputError("the dissimilarity given as `shape_measure` is not over the "
                             "table's samples (labels differ).")
    else:
        from .dissimilarity import dissimilarity
        d = dissimilarity(tab, shape_measure, transform=transform)
    size_free = bool(d.properties.get("size_free", False))
    streams = as_rng(rng).spawn(3)
    stage = [0]
    n_stages = 3

    def staged(done, total):
        if progress is not None:
            progress(stage[0] * total + done, n_stages * total)

    size = size_test(tab, group, method=size_method, effort=effort, rng=streams[0],
                     n_permutations=n_permutations, blocks=blocks,
                     cancel=cancel, progress=staged if size_method == "permutation" else None)
    stage[0] = 1
    frame = tab.samples.copy()
    frame[g.name] = g
    shape = permanova(d, frame, [str(g.name)], blocks=blocks, n_permutations=n_permutations,
                      rng=streams[1], progress=staged, cancel=cancel)
    stage[0] = 2
    block_series = None if blocks is None else (
        tab.samples[blocks] if isinstance(blocks, str) else blocks)
    spread = dispersion_test(d, g, n_permutations=n_permutations, rng=streams[2],
                             centre=centre, blocks=block_series, progress=staged,
                             cancel=cancel)
    name = str(g.name)
    shape_p = float(shape.pvalue[name])
    coarse = any(n.startswith("Only") for n in shape.notes + spread.notes)
    reading = reading_text(size, shape_p, spread.pvalue, group=name, measure=d.measure,
                           alpha=alpha, size_free=size_free, n_samples=tab.n_samples,
                           coarse=coarse)
    notes = tuple(dict.fromkeys(size.notes + shape.notes + spread.notes + d.notes))
    idx = pd.Index(["size", "shape", "spread"], name="aspect")
    return ComparisonResult(
        size=size, shape=shape, dispersion=spread, reading=reading,
        statistic=pd.Series([size.statistic, float(shape.statistic[name]), spread.statistic],
                            index=idx, name="statistic"),
        pvalue=pd.Series([size.pvalue, shape_p, spread.pvalue], index=idx, name="pvalue"),
        group=name, measure=d.measure, alpha=alpha, notes=notes)
