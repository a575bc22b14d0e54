"""Tests of size (total abundance) between groups, and the size / shape / spread comparison.

Size is the log of a sample's total (per unit of sampling effort when there is one):
abundance effects are multiplicative, so groups are compared by ratios of geometric means.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd
from scipy import stats

from .design import factor_levels
from .random import as_rng
from .errors import DesignError, InputError, Location
from .inference import check_n_permutations, check_option
from .permutation import permutation_f_test
from .results import ResultMixin
from .table import CommunityTable, as_table

__all__ = ["size_test", "SizeTestResult", "size_measure", "compare_groups", "ComparisonResult",
           "reading_text"]

_METHODS = ("anova", "welch", "kruskal", "permutation", "negbin")


# ---------------------------------------------------------------------------- result
@dataclass(frozen=True, eq=False)
class SizeTestResult(ResultMixin):
    """A test of total abundance between groups.

    Attributes
    ----------
    method : {'anova', 'welch', 'kruskal', 'permutation', 'negbin'}
    statistic : float
        F (anova, welch, permutation), H (kruskal) or the likelihood-ratio chi-square
        (negbin).
    pvalue : float
    df : tuple
        (numerator, denominator) for F statistics, (df,) for chi-square ones.
    summary : DataFrame
        Per group: ``n``, ``geometric_mean`` and ``mean`` of the size measure, and the
        effect against the first (reference) group: ``ratio`` with ``ci_low``,
        ``ci_high`` where the method gives an interval.
    measure : str
        What was compared, e.g. ``"log total per trap_nights"``.
    effect : str
        What ``ratio`` means.
    group : str
    level : float
        Confidence level of the intervals.
    notes : tuple of str
    """

    method: str
    statistic: float
    pvalue: float
    df: tuple
    summary: pd.DataFrame
    measure: str
    effect: str
    group: str
    level: float = 0.95
    n_permutations: int | None = None
    notes: tuple = ()

    def to_frame(self) -> pd.DataFrame:
        return self.summary.copy()

    def _title(self) -> str:
        name = {"anova": "ANOVA", "welch": "Welch ANOVA", "kruskal": "Kruskal-Wallis",
                "permutation": "permutation F test",
                "negbin": "negative-binomial regression"}[self.method]
        sym = {"kruskal": "H", "negbin": "LR chi2"}.get(self.method, "F")
        df = ", ".join(f"{x:.4g}" for x in self.df)
        return (f"Size test ({name}) of {self.measure} between levels of {self.group!r}: "
                f"{sym} = {self.statistic:.4g} (df {df}), p = {self.pvalue:.4g}; "
                f"{self.effect}")


# ---------------------------------------------------------------------------- inputs
def _group(tab: CommunityTable, group) -> pd.Series:
    g = tab.group(group)
    levels = [str(x) for x in factor_levels(tab.samples[group] if isinstance(group, str)
                                            else g)]
    if len(levels) < 2:
        raise DesignError(f"column {g.name!r} has a single level ({levels[0]!r}); a size test "
                          "compares at least 2 groups.", location=Location(column=repr(g.name)),
                          hint="Pick a column that splits the samples into groups.")
    if len(levels) == tab.n_samples:
        raise DesignError(f"column {g.name!r} gives every sample its own level ({len(levels)} "
                          f"levels for {tab.n_samples} samples), so there is no group to "
                          "compare.", location=Location(column=repr(g.name)),
                          hint="Is this an identifier column? Use a grouping column instead.")
    counts = g.value_counts()
    small = [lv for lv in levels if counts.get(lv, 0) < 2]
    if small:
        raise DesignError(f"level(s) {small} of {g.name!r} hold a single sample; a size test "
                          "needs at least 2 samples per group.",
                          location=Location(column=repr(g.name)),
                          hint="Merge or drop those levels first.")
    return pd.Series(pd.Categorical(g.to_numpy(), categories=levels), index=g.index,
                     name=g.name)


def _effort(tab: CommunityTable, effort) -> tuple[np.ndarray | None, str | None]:
    if effort is False:
        return None, None
    if effort is None:
        e = tab.effort
        return (None, None) if e is None else (e.to_numpy(dtype=float), str(e.name))
    if isinstance(effort, str):
        if effort not in tab.samples.columns:
            raise DesignError(f"effort column {effort!r} is not in the sample table.",
                              location=Location(column=repr(effort)))
        values, name = pd.to_numeric(tab.samples[effort], errors="coerce"), effort
    elif isinstance(effort, pd.Series):
        s = effort.copy()
        s.index = [str(x) for x in s.index]
        missing = [x for x in tab.sample_labels if x not in s.index]
        if missing:
            raise DesignError(f"`effort` has no value for sample(s) {missing[:8]}.")
        values, name = pd.to_numeric(s.loc[list(tab.sample_labels)], errors="coerce"), \
            str(effort.name or "effort")
    else:
        values, name = pd.Series(np.asarray(effort, dtype=float).ravel()), "effort"
        if values.size != tab.n_samples:
            raise DesignError(f"`effort` has {values.size} values for {tab.n_samples} samples.")
    v = np.asarray(values, dtype=float)
    bad = ~np.isfinite(v) | (v <= 0)
    if bad.any():
        who = list(tab.sample_labels[bad])[:8]
        raise InputError(f"effort {name!r} must be a positive number for every sample; not so "
                         f"for {who}.", location=Location(column=repr(name)))
    return v, name


def size_measure(table, *, effort=None, log: bool = True) -> pd.Series:
    """Each sample's size: log(total), or log(total / effort) (METHODS.md 1).

    ``effort=None`` uses the table's effort when it has one; ``False`` ignores it; a column
    name or one positive value per sample sets it.
    """
    tab = as_table(table)
    e, name = _effort(tab, effort)
    t = tab.totals.to_numpy(dtype=float)
    v = t if e is None else t / e
    if log:
        if (v <= 0).any():
            who = list(tab.sample_labels[v <= 0])[:8]
            raise InputError(f"sample(s) {who} have a total of 0, whose log is undefined.",
                             hint="Use method='kruskal' or method='negbin', or drop them.")
        v = np.log(v)
    label = ("log " if log else "") + "total" + (f" per {name}" if name else "")
    return pd.Series(v, index=tab.sample_labels.copy(), name=label)


# ---------------------------------------------------------------------------- methods
def _t_ratio_ci(y, codes, levels, level, *, welch: bool):
    """Ratio of geometric means to the reference group, with a t interval."""
    ref = y[codes == 0]
    k = len(levels)
    n = y.size
    resid = np.concatenate([y[codes == j] - y[codes == j].mean() for j in range(k)])
    mse = (resid ** 2).sum() / (n - k)
    rows = []
    for j in range(k):
        yj = y[codes == j]
        diff = yj.mean() - ref.mean()
        if j == 0:
            rows.append((1.0, np.nan, np.nan))
            continue
        if welch:
            a, b = yj.var(ddof=1) / yj.size, ref.var(ddof=1) / ref.size
            se = np.sqrt(a + b)
            df = (a + b) ** 2 / (a ** 2 / (yj.size - 1) + b ** 2 / (ref.size - 1))
        else:
            se = np.sqrt(mse * (1 / yj.size + 1 / ref.size))
            df = n - k
        q = stats.t.ppf(0.5 + level / 2, df)
        rows.append((np.exp(diff), np.exp(diff - q * se), np.exp(diff + q * se)))
    return rows


def _welch_df(y, codes, k) -> float:
    """Denominator df of Welch's (1951) heteroscedastic one-way ANOVA."""
    n = np.array([np.sum(codes == j) for j in range(k)], dtype=float)
    s2 = np.array([y[codes == j].var(ddof=1) for j in range(k)])
    w = n / s2
    lam = np.sum((1 - w / w.sum()) ** 2 / (n - 1))
    return float((k ** 2 - 1) / (3 * lam))


def _check_whole_counts(tab: CommunityTable) -> None:
    """The negative-binomial model is a model of counts: refuse anything else, naming the
    first value that is not a whole number (its file, line and column when read from one)."""
    v = tab.values
    frac = v != np.floor(v)
    if frac.any():
        i, j = np.argwhere(frac)[0]
        raise InputError(
            f"the negative-binomial model needs whole-number counts, but {int(frac.sum())} "
            f"value(s) are not whole numbers, e.g. {float(v[i, j]):g} (biomass, cover or "
            "rescaled counts?).",
            location=tab.origin.cell(tab.sample_labels[i], tab.taxon_labels[j]),
            hint="Use method='anova' or 'welch' (log totals) or 'kruskal' for such "
                 "values; for counts rescaled by effort, give the raw counts and pass the "
                 "effort with effort=...")


def size_test(table, group, *, method: str = "anova", effort=None, level: float = 0.95,
              n_permutations: int = 999, rng=None, blocks=None,
              progress: Callable[[int, int], None] | None = None,
              cancel: Callable[[], bool] | None = None) -> SizeTestResult:
    """Do groups differ in total abundance (size)?

    Parameters
    ----------
    table : CommunityTable, DataFrame or array
    group : str or Series
        A factor column of the sample table (or the labels themselves).
    method : {'anova', 'welch', 'kruskal', 'permutation', 'negbin'}, default 'anova'
        One-way ANOVA, Welch's (1951) ANOVA for unequal variances, or a permutation F test
        on log totals; Kruskal & Wallis (1952) on the ranks of the totals; or a
        negative-binomial (NB2) regression of the totals with log effort as offset, tested
        by a likelihood ratio (fitted in a numerically stable form that stays exact for
        totals of 10^15, see :mod:`tallyform.core.negbin`).
    effort : None, False, str or array_like
        None: per unit of the table's effort when it has one; False: raw totals; a column
        name or one positive value per sample.
    level : float, default 0.95
        Confidence level of the ratio intervals.
    n_permutations, rng, blocks, progress, cancel
        For ``method='permutation'`` (blocks: a column name or labels).

    Returns
    -------
    SizeTestResult
        ``summary`` per group: n, geometric and arithmetic mean of the totals (per effort),
        and the ratio to the first group with an interval where the method gives one:
        t intervals of the difference in mean log size (pooled for anova, Welch for
        welch), Wald intervals of the negative-binomial coefficients (a ratio of expected
        totals there); none for kruskal and permutation.

    Raises
    ------
    DesignError
        Unknown column, one level, a level with a single sample.
    InputError
        Zero totals for a log-based method, a count that is not a whole number for negbin
        (naming its sample, taxon and, when read from a file, line and column), bad effort.

    References
    ----------
    Welch, B. L. (1951). Biometrika 38, 330-336. Kruskal, W. H. & Wallis, W. A. (1952).
    J. Am. Stat. Assoc. 47, 583-621. Hilbe, J. M. (2011). Negative Binomial Regression,
    2nd ed. Cambridge University Press.

    Examples
    --------
    >>> import pandas as pd
    >>> counts = pd.DataFrame({"t1": [10, 12, 9, 40, 44, 38], "t2": [5, 4, 6, 20, 18, 22]},
    ...                       index=list("abcdef"))                      # synthetic
    >>> info = pd.DataFrame({"plot": list("xxxyyy")}, index=list("abcdef"))
    >>> res = size_test(CommunityTable(counts, info), "plot")
    >>> res.summary["ratio"].round(2).tolist()
    [1.0, 3.96]
    >>> bool(res.pvalue < 0.001)
    True
    """
    check_option("method", method, _METHODS)
    if not 0 < level < 1:
        raise InputError(f"`level` must be between 0 and 1; got {level!r}.")
    tab = as_table(table)
    g = _group(tab, group)
    levels = list(g.cat.categories)
    codes = g.cat.codes.to_numpy()
    e, e_name = _effort(tab, effort)
    totals = tab.totals.to_numpy(dtype=float)
    size = totals if e is None else totals / e
    measure = "total" + (f" per {e_name}" if e_name else "")
    notes: list[str] = []
    if e_name and effort is None:
        notes.append(f"The table's sampling effort {e_name!r} was used ("
                     + ("log effort as an offset" if method == "negbin" else
                        "totals divided by it") + "); pass effort=False to compare raw totals.")
    positive = (size > 0).all()
    if method in ("anova", "welch", "permutation") and not positive:
        who = list(tab.sample_labels[size <= 0])[:8]
        raise InputError(f"sample(s) {who} have a total of 0, whose log is undefined.",
                         hint="Use method='kruskal' or method='negbin', or drop them.")
    k = len(levels)
    y = np.log(size) if positive else None
    n_perm = None
    if method in ("anova", "welch"):
        res = stats.f_oneway(*[y[codes == j] for j in range(k)], equal_var=(method == "anova"))
        stat, p = float(res.statistic), float(res.pvalue)
        df = (k - 1, y.size - k) if method == "anova" else (k - 1, _welch_df(y, codes, k))
        rows = _t_ratio_ci(y, codes, levels, level, welch=(method == "welch"))
        effect = (f"ratio of geometric means to {levels[0]!r}, with {level:.0%} "
                  f"{'pooled' if method == 'anova' else 'Welch'} t intervals")
        measure = "log " + measure
    elif method == "kruskal":
        res = stats.kruskal(*[size[codes == j] for j in range(k)])
        stat, p, df = float(res.statistic), float(res.pvalue), (k - 1,)
        rows = _t_ratio_ci(y, codes, levels, level, welch=False) if positive else \
            [(np.nan, np.nan, np.nan)] * k
        rows = [(r[0], np.nan, np.nan) for r in rows]
        effect = f"ratio of geometric means to {levels[0]!r} (descriptive; no interval)"
    elif method == "permutation":
        from .inference import block_labels
        n_perm = check_n_permutations(n_permutations)
        frame = tab.samples
        block_codes, block_name = block_labels(frame, blocks)
        X = np.column_stack([np.ones(y.size)] + [(codes == j).astype(float)
                                                 for j in range(1, k)])
        test = permutation_f_test(y, X, None, blocks=block_codes, block_name=block_name,
                                  n_permutations=n_perm, rng=rng, progress=progress,
                                  cancel=cancel)
        stat, p, df = test.statistic, test.pvalue, test.df
        n_perm = test.n_permutations
        notes.extend(test.notes)
        notes.append(f"Permutation scheme: {test.scheme}.")
        rows = [(r[0], np.nan, np.nan) for r in
                _t_ratio_ci(y, codes, levels, level, welch=False)]
        effect = f"ratio of geometric means to {levels[0]!r} (no interval)"
        measure = "log " + measure
    else:
        _check_whole_counts(tab)
        from .negbin import nb2_oneway_test
        empty = [lv for j, lv in enumerate(levels) if totals[codes == j].sum() == 0]
        if empty:
            raise DesignError(f"level(s) {empty} of {g.name!r} have a total of 0 in every "
                              "sample, so their expected total is 0 and no ratio exists.",
                              location=Location(column=repr(g.name)),
                              hint="Use method='kruskal', or drop those samples.")
        stat, p, df, rows, nb_notes = nb2_oneway_test(totals, codes, len(levels), e, level)
        notes.extend(nb_notes)
        effect = (f"ratio of expected totals{' per ' + e_name if e_name else ''} to "
                  f"{levels[0]!r}, with {level:.0%} Wald intervals")
    with np.errstate(divide="ignore"):
        geo = [float(np.exp(np.log(size[codes == j]).mean())) if (size[codes == j] > 0).all()
               else np.nan for j in range(k)]
    summary = pd.DataFrame({
        "n": [int(np.sum(codes == j)) for j in range(k)],
        "geometric_mean": geo,
        "mean": [float(size[codes == j].mean()) for j in range(k)],
        "ratio": [r[0] for r in rows], "ci_low": [r[1] for r in rows],
        "ci_high": [r[2] for r in rows]}, index=pd.Index(levels, name=g.name))
    return SizeTestResult(method=method, statistic=float(stat), pvalue=float(p),
                          df=tuple(df), summary=summary, measure=measure, effect=effect,
                          group=str(g.name), level=level, n_permutations=n_perm,
                          notes=tuple(notes))


# ---------------------------------------------------------------------------- comparison
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
    g = _group(tab, group)
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
