"""Tests of size (total abundance) between groups (the size / shape / spread comparison is in
:mod:`tallyform.core.comparison`).

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
from .abundance import require_absolute
from .table import CommunityTable, as_table

__all__ = ["size_test", "SizeTestResult", "size_measure", "group_factor", "SIZE_METHODS"]

SIZE_METHODS = ("anova", "welch", "kruskal", "permutation", "negbin")
_METHODS = SIZE_METHODS


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
def group_factor(tab: CommunityTable, group) -> pd.Series:
    """The group column as a categorical Series (levels in factor order), checked: at least
    2 levels, not one level per sample, at least 2 samples per level."""
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
    load_notes = require_absolute(tab, "a size test", counts=(method == "negbin"))
    g = group_factor(tab, group)
    levels = list(g.cat.categories)
    codes = g.cat.codes.to_numpy()
    e, e_name = _effort(tab, effort)
    totals = tab.totals.to_numpy(dtype=float)
    size = totals if e is None else totals / e
    measure = "total" + (f" per {e_name}" if e_name else "")
    notes: list[str] = list(load_notes)
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
