"""Tests of size (total abundance) between groups (the size / shape / spread comparison is in
:mod:`tallyform.core.comparison`).

Size is the log of a sample's total (per unit of sampling effort when there is one):
abundance effects are multiplicative, so groups are compared by ratios of geometric means.
The default test is Welch's (1951) ANOVA of log size, which holds its level when groups
differ in variability; samples that repeat a sampling unit are tested at the level of the
units (:mod:`tallyform.core.units`); the linear models are in
:mod:`tallyform.core.size_models`, the negative-binomial model in :mod:`tallyform.core.negbin`.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd
from scipy import stats

from .design import factor_levels
from .errors import DesignError, InputError, Location
from .inference import check_n_permutations, check_option
from .permutation import permutation_f_test
from .results import ResultMixin
from .size_models import mixed_model_test, pooled_f, pooled_f_level, welch_james
from .table import CommunityTable, as_table
from .units import aggregate_by_unit, resolve_units, unit_blocks

__all__ = ["size_test", "SizeTestResult", "size_measure", "group_factor", "SIZE_METHODS"]

#: Methods a user can ask for; the first is the default.
SIZE_METHODS = ("welch", "anova", "kruskal", "permutation", "negbin")
_METHODS = SIZE_METHODS


# ---------------------------------------------------------------------------- result
@dataclass(frozen=True, eq=False)
class SizeTestResult(ResultMixin):
    """A test of total abundance between groups.

    Attributes
    ----------
    method : {'welch', 'anova', 'kruskal', 'permutation', 'negbin', 'mixed'}
        'mixed' when a factor that varies within sampling units was tested by the linear
        mixed model (asked for as 'welch' or 'anova').
    statistic : float
        F (welch, anova, permutation, mixed), H (kruskal) or the likelihood ratio (negbin).
    pvalue : float
    df : tuple
        (numerator, denominator) of the F reference, (df,) for chi-square ones.
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
    reference : str
        The distribution the p-value was read from, in words.
    units : str or None
        The sampling units the test counted (e.g. "15 units of 'tank', 4 samples each"), or
        None when every sample was its own replicate.
    variance_ratio : float
        Largest over smallest group variance of log size (NaN when undefined).
    too_skewed : bool or None
        negbin only: True when the fit check (skewness of the quantile residuals, Dunn &
        Smyth 1996) finds the totals more skewed than the negative-binomial model allows.
    n_boot : int or None
        Bootstrap draws of the negbin reference, when the bootstrap was used.
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
    reference: str = ""
    units: str | None = None
    variance_ratio: float = float("nan")
    too_skewed: bool | None = None
    n_boot: int | None = None

    def to_frame(self) -> pd.DataFrame:
        return self.summary.copy()

    def _title(self) -> str:
        name = {"anova": "ANOVA", "welch": "Welch ANOVA",
                "kruskal": "Kruskal-Wallis, a test of distributions",
                "permutation": "permutation F test", "mixed": "linear mixed model",
                "negbin": "negative-binomial regression"}[self.method]
        sym = {"kruskal": "H", "negbin": "LR"}.get(self.method, "F")
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
                             hint="Use method='negbin', or drop them.")
        v = np.log(v)
    label = ("log " if log else "") + "total" + (f" per {name}" if name else "")
    return pd.Series(v, index=tab.sample_labels.copy(), name=label)


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
            hint="Use method='welch' (log totals) or 'kruskal' for such values; for counts "
                 "rescaled by effort, give the raw counts and pass the effort with "
                 "effort=...")


# ---------------------------------------------------------------------------- notes
KRUSKAL_NOTE = ("Kruskal-Wallis compares whole distributions of the totals (their ranks), "
                "not their size: when the spread of the totals differs between groups it "
                "rejects with equal geometric means, so it is not a valid test of a size "
                "difference then; use method='welch' for size.")


def _ratio_rows(contrasts, level):
    rows = [(1.0, np.nan, np.nan)]
    for est, se, df in contrasts:
        q = float(stats.t.ppf(0.5 + level / 2, df))
        rows.append((float(np.exp(est)), float(np.exp(est - q * se)),
                     float(np.exp(est + q * se))))
    return rows


def _variance_ratio(y, codes, k) -> tuple[float, np.ndarray, np.ndarray]:
    n_g = np.array([np.sum(codes == j) for j in range(k)])
    v = np.array([np.var(y[codes == j], ddof=1) if n_g[j] > 1 else np.nan
                  for j in range(k)])
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = float(np.nanmax(v) / np.nanmin(v)) if np.isfinite(v).any() else np.nan
    return ratio, n_g, v


def _anova_note(y, codes, k, levels, ratio, n_g, v, alpha=0.05) -> str | None:
    """Say when the group variances differ enough for the pooled F test to miss its level
    (its level for normal data with these variances and group sizes, by simulation)."""
    if not np.isfinite(ratio) or ratio <= 1.0 or (v <= 0).any():
        return None
    true_level = pooled_f_level(n_g, v, alpha=alpha)
    if 0.6 * alpha <= true_level <= 1.4 * alpha:
        return None
    sizes = ", ".join(f"{lv!r}: n = {n}, variance {x:.3g}" for lv, n, x in zip(levels, n_g, v))
    way = "rejects a true null" if true_level > alpha else "rejects a true null only"
    return (f"The groups' variances of log size differ (largest / smallest = {ratio:.3g}; "
            f"{sizes}). With variances and group sizes like these, plain ANOVA {way} about "
            f"{true_level:.0%} of the time at alpha = {alpha:g} instead of {alpha:.0%} "
            "(normal data, Box 1954): use method='welch', which allows a variance per group.")


# ---------------------------------------------------------------------------- the data tested
@dataclass(frozen=True)
class _Data:
    """What is tested: one row per replicate (sample, or unit when aggregated)."""

    totals: np.ndarray
    effort: np.ndarray | None            # None: no effort (per sample, 1)
    codes: np.ndarray
    blocks: np.ndarray | None
    unit_codes: np.ndarray | None        # within-unit analysis: the unit of every sample
    outer_codes: np.ndarray | None       # coarser units enclosing the tested replicates
    units: str | None
    per: str | None                      # "nights", "sample" or None
    labels: tuple = ()                   # of the replicates (samples or units)

    @property
    def size(self) -> np.ndarray:
        return self.totals if self.effort is None else self.totals / self.effort


def _tested_data(tab, g, e, e_name, block_codes, block_name, units, notes) -> _Data:
    """Resolve the sampling units and aggregate when the factor is applied to whole units."""
    gname = str(g.name)
    codes = g.cat.codes.to_numpy()
    totals = tab.totals.to_numpy(dtype=float)
    frame = tab.samples.copy()
    frame[gname] = g.astype(str).to_numpy()
    plan = resolve_units(frame, [gname], units, blocks=block_name)
    notes.extend(plan.notes)
    if plan.independent:
        return _Data(totals, e, codes, block_codes, None, None, None, e_name,
                     tuple(tab.sample_labels))
    lv = plan.level_of(gname)
    if lv is None:                                   # varies within the finest units
        finest = plan.levels[-1]
        outer = None if finest.parent is None else finest.parent[finest.codes]
        notes.append(f"{gname!r} varies within units ({finest.describe()}): tested by a "
                     "linear mixed model of log size with a random intercept per "
                     f"{finest.name!r}" + ("" if outer is None else
                                           f" and per {plan.levels[-2].name!r}") + ".")
        return _Data(totals, e, codes, block_codes, finest.codes, outer,
                     finest.describe(), e_name, tuple(tab.sample_labels))
    # constant within the units of lv: one replicate per unit
    eff = np.ones_like(totals) if e is None else e
    u_tot = aggregate_by_unit(totals, lv)
    u_eff = aggregate_by_unit(eff, lv)
    u_codes = np.empty(lv.m, dtype=int)
    u_codes[lv.codes] = codes
    u_blocks = unit_blocks(lv, block_codes, block_name)
    outer = lv.parent
    per = e_name or "sample"
    notes.append(f"Tested on unit totals, not samples: {lv.describe()}; counts and "
                 f"{'effort' if e is not None else 'the number of samples'} summed per unit, "
                 f"so the size of a unit is its total per {per}.")
    return _Data(u_tot, u_eff, u_codes, u_blocks, None, outer, lv.describe(), per,
                 tuple(lv.labels))


# ---------------------------------------------------------------------------- methods
@dataclass
class _Out:
    statistic: float
    pvalue: float
    df: tuple
    rows: list
    effect: str
    reference: str
    method: str
    n_permutations: int | None = None
    too_skewed: bool | None = None
    n_boot: int | None = None


def _log_size(d: _Data, method: str) -> np.ndarray:
    s = d.size
    if (s <= 0).any():
        who = [d.labels[i] for i in np.flatnonzero(s <= 0)[:8]]
        kind = "unit" if d.units and d.unit_codes is None else "sample"
        raise InputError(f"{kind}(s) {who} have a total of 0, whose log is undefined.",
                         hint=f"method={method!r} works on log totals; use method='negbin' "
                              "(counts), or drop those samples.")
    return np.log(s)


def _linear(d: _Data, k, levels, method, level, notes) -> _Out:
    y = _log_size(d, method)
    if d.unit_codes is not None or d.outer_codes is not None:
        units = d.unit_codes if d.unit_codes is not None else d.outer_codes
        outer = d.outer_codes if d.unit_codes is not None else None
        t = mixed_model_test(y, d.codes, k, units, block_codes=d.blocks, outer_codes=outer)
        notes.append("The mixed model has one residual variance for all groups (statsmodels "
                     "MixedLM allows no variance per group), so unequal variability between "
                     "groups is not allowed for; its Wald F uses the between-within "
                     f"denominator degrees of freedom ({t.df[1]}).")
        return _Out(t.statistic, t.pvalue, t.df, _ratio_rows(t.contrasts, level),
                    f"ratio of geometric means to {levels[0]!r}, with {level:.0%} t "
                    "intervals from the mixed model", f"F{t.df} (between-within df)",
                    "mixed")
    if method == "welch":
        t = welch_james(y, d.codes, k, d.blocks)
        ref = (f"F({t.df[0]}, {t.df[1]:.4g}), Welch degrees of freedom" if d.blocks is None
               else f"F({t.df[0]}, {t.df[1]:.4g}), Welch-James (Johansen 1980) degrees of "
                    "freedom")
        effect = (f"ratio of geometric means to {levels[0]!r}, with {level:.0%} Welch t "
                  "intervals")
    else:
        t = pooled_f(y, d.codes, k, d.blocks)
        ref = f"F({t.df[0]}, {t.df[1]})"
        effect = (f"ratio of geometric means to {levels[0]!r}, with {level:.0%} pooled t "
                  "intervals")
    if d.blocks is not None:
        notes.append("Blocks entered the model as a nuisance factor (additive block effects "
                     "on log size): groups are compared within blocks"
                     + (", each group with its own variance." if method == "welch" else "."))
    return _Out(t.statistic, t.pvalue, t.df, _ratio_rows(t.contrasts, level), effect, ref,
                method)


def _permutation(d: _Data, k, levels, n_permutations, rng, block_name, progress, cancel,
                 notes) -> _Out:
    y = _log_size(d, "permutation")
    n = y.size
    G = np.column_stack([(d.codes == j).astype(float) for j in range(1, k)])
    nuisance, strata, sname = [], d.blocks, block_name
    if d.blocks is not None:
        b = pd.factorize(np.asarray(d.blocks))[0]
        nuisance += [(b == j).astype(float) for j in range(1, int(b.max()) + 1)]
    if d.unit_codes is not None:
        u = d.unit_codes
        nuisance += [(u == j).astype(float) for j in range(1, int(u.max()) + 1)]
        strata, sname = u.astype(str), "units"
        if d.blocks is not None:
            strata = np.char.add(np.char.add(u.astype(str), "|"), np.asarray(d.blocks, str))
    Z = np.column_stack([np.ones(n)] + nuisance)
    test = permutation_f_test(y, np.column_stack([Z, G]), Z, blocks=strata, block_name=sname,
                              n_permutations=check_n_permutations(n_permutations), rng=rng,
                              progress=progress, cancel=cancel)
    notes.extend(test.notes)
    notes.append(f"Permutation scheme: {test.scheme}.")
    if d.unit_codes is not None:
        notes.append("The factor varies within units: samples were permuted within their "
                     "unit, with unit effects removed first.")
    elif d.blocks is not None:
        notes.append("Blocks entered the F statistic as a nuisance factor and restrict the "
                     "permutations.")
    rows = [(r, np.nan, np.nan) for r in _geo_ratios(y, d.codes, k)]
    return _Out(test.statistic, test.pvalue, test.df, rows,
                f"ratio of geometric means to {levels[0]!r} (no interval)",
                f"permutation distribution ({test.n_permutations} permutations)",
                "permutation", n_permutations=test.n_permutations)


def _geo_ratios(y, codes, k):
    m = np.array([y[codes == j].mean() for j in range(k)])
    return list(np.exp(m - m[0]))


def _kruskal(d: _Data, k, levels, notes) -> _Out:
    s = d.size
    res = stats.kruskal(*[s[d.codes == j] for j in range(k)])
    with np.errstate(divide="ignore"):
        rows = [(r, np.nan, np.nan) for r in _geo_ratios(np.log(s), d.codes, k)] \
            if (s > 0).all() else [(np.nan, np.nan, np.nan)] * k
    notes.append(KRUSKAL_NOTE)
    if d.blocks is not None:
        notes.append("Kruskal-Wallis does not use blocks: they were ignored.")
    return _Out(float(res.statistic), float(res.pvalue), (k - 1,), rows,
                f"ratio of geometric means to {levels[0]!r} (descriptive; no interval)",
                f"chi-square({k - 1}) for H", "kruskal")


def _negbin(d: _Data, k, levels, level, reference, n_boot, rng, progress, cancel,
            notes, gname) -> _Out:
    from .negbin import nb2_group_test
    empty = [lv for j, lv in enumerate(levels) if d.totals[d.codes == j].sum() == 0]
    if empty:
        raise DesignError(f"level(s) {empty} of {gname!r} have a total of 0 in every "
                          "sample, so their expected total is 0 and no ratio exists.",
                          location=Location(column=repr(gname)),
                          hint="Use method='kruskal', or drop those samples.")
    t = nb2_group_test(d.totals, d.codes, k, d.effort, level=level, reference=reference,
                       n_boot=n_boot, rng=rng, progress=progress, cancel=cancel)
    alphas = ", ".join(f"{lv!r} {a:.3g}" for lv, a in zip(levels, t.full.alphas))
    notes.append(f"Negative-binomial dispersion (NB2 alpha) estimated per group: {alphas}.")
    if t.full.at_bound.any():
        poisson = [lv for lv, b in zip(levels, t.full.at_bound) if b]
        notes.append(f"The totals of {poisson} show no over-dispersion: their model reduces "
                     "to a Poisson model (alpha near 0).")
    if t.skewed:
        notes.append("Fit check: the totals are more skewed than the negative-binomial model "
                     f"allows (quantile residuals, one-sided skewness test p = "
                     f"{t.skew_pvalue:.2g}). Tests of arithmetic mean totals do not hold "
                     "their level on such data: use method='welch', the test of geometric "
                     "means (log totals).")
    if d.blocks is not None:
        notes.append("The negative-binomial model has no block term: blocks were ignored.")
    per = f" per {d.per}" if d.per else ""
    return _Out(t.statistic, t.pvalue, t.df, t.rows,
                f"ratio of expected totals{per} to {levels[0]!r}, with {level:.0%} Wald "
                "intervals (a dispersion per group)", t.reference, "negbin",
                too_skewed=t.skewed, n_boot=t.n_boot)


# ---------------------------------------------------------------------------- public
def size_test(table, group, *, method: str = "welch", effort=None, units=None, blocks=None,
              level: float = 0.95, n_permutations: int = 999, nb_reference: str = "F",
              n_boot: int = 999, rng=None,
              progress: Callable[[int, int], None] | None = None,
              cancel: Callable[[], bool] | None = None) -> SizeTestResult:
    """Do groups differ in total abundance (size)?

    Parameters
    ----------
    table : CommunityTable, DataFrame or array
    group : str or Series
        A factor column of the sample table (or the labels themselves).
    method : {'welch', 'anova', 'kruskal', 'permutation', 'negbin'}, default 'welch'
        'welch': Welch's (1951) ANOVA of log size (two groups: Welch's t test), each group
        with its own variance; the test of a ratio of geometric means that holds its level
        when groups differ in variability. 'anova': the same with one pooled variance (its
        notes say when the groups' variances differ enough to matter). 'permutation': the
        ANOVA F by permutation. 'kruskal': Kruskal & Wallis (1952) on the ranks of the
        totals, a test of whole distributions, not of size. 'negbin': a negative-binomial
        (NB2) model of the totals (log effort as offset) with a dispersion per group,
        likelihood-ratio test with a small-sample reference (``nb_reference``), and a fit
        check that says when the totals are more skewed than the model allows.
    effort : None, False, str or array_like
        None: per unit of the table's effort when it has one; False: raw totals; a column
        name or one positive value per sample.
    units : None, False, str, list of str or Series
        Sampling units (tanks, sites...; see :func:`tallyform.core.units.resolve_units`).
        None detects them, False treats samples as independent. A factor constant within
        units is tested on unit totals (counts and effort summed per unit; the number of
        samples is the effort when there is none), with every method. A factor that varies
        within units is tested by a linear mixed model of log size with a random intercept
        per unit (methods 'welch' and 'anova'), or by permuting samples within units
        ('permutation').
    blocks : str or array_like, optional
        Blocking factor: a nuisance term of the model (randomized-block ANOVA for 'anova',
        the Welch-James test for 'welch', a fixed term of the mixed model), and a restriction
        of the permutations for 'permutation'. Kruskal-Wallis and the negative-binomial model
        do not use blocks, and say so.
    level : float, default 0.95
        Confidence level of the ratio intervals.
    n_permutations : int, default 999
        For ``method='permutation'``.
    nb_reference : {'F', 'bootstrap'}, default 'F'
        Reference distribution of the negative-binomial likelihood ratio: F with Welch's
        degrees of freedom, or a parametric bootstrap of ``n_boot`` draws.
    n_boot : int, default 999
    rng : None, int or numpy.random.Generator
        For the permutations and the bootstrap.
    progress, cancel : callables, optional
        ``progress(done, total)``; ``cancel() -> True`` stops with :class:`Cancelled`.

    Returns
    -------
    SizeTestResult
        ``summary`` per group: n (units when units were counted), geometric and arithmetic
        mean of the size measure, and the ratio to the first group with an interval where
        the method gives one (t intervals of the difference in mean log size, with Welch
        degrees of freedom for welch; intervals of the negative-binomial rate ratios).

    Raises
    ------
    DesignError
        Unknown column, one level, a level with a single sample, a level with a single unit,
        groups confounded with blocks, a method that cannot test a factor within units.
    InputError
        Zero totals for a log-based method, a count that is not a whole number for negbin
        (naming its sample, taxon and, when read from a file, line and column), bad effort.

    References
    ----------
    Welch, B. L. (1951). Biometrika 38, 330-336. Johansen, S. (1980). Biometrika 67, 85-92.
    Kruskal, W. H. & Wallis, W. A. (1952). J. Am. Stat. Assoc. 47, 583-621. Hilbe, J. M.
    (2011). Negative Binomial Regression, 2nd ed. Cambridge University Press. Dunn, P. K. &
    Smyth, G. K. (1996). Randomized quantile residuals. J. Comput. Graph. Stat. 5, 236-244.
    Hurlbert, S. H. (1984). Ecol. Monogr. 54, 187-211.

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
    check_option("nb_reference", nb_reference, ("F", "bootstrap"))
    if not 0 < level < 1:
        raise InputError(f"`level` must be between 0 and 1; got {level!r}.")
    tab = as_table(table)
    g = group_factor(tab, group)
    levels = list(g.cat.categories)
    k = len(levels)
    gname = str(g.name)
    e, e_name = _effort(tab, effort)
    notes: list[str] = []
    if e_name and effort is None:
        notes.append(f"The table's sampling effort {e_name!r} was used ("
                     + ("log effort as an offset" if method == "negbin" else
                        "totals divided by it") + "); pass effort=False to compare raw totals.")
    if method == "negbin":
        _check_whole_counts(tab)
    from .inference import block_labels
    block_codes, block_name = block_labels(tab.samples, blocks)
    d = _tested_data(tab, g, e, e_name, block_codes, block_name, units, notes)
    if d.unit_codes is not None and method in ("kruskal", "negbin"):
        raise DesignError(f"{gname!r} varies within sampling units, and method={method!r} "
                          "has no model of units.", location=Location(column=repr(gname)),
                          hint="Use method='welch' (a mixed model of log size) or "
                               "'permutation' (within units), or units=False to treat the "
                               "samples as independent.")
    if d.outer_codes is not None and d.unit_codes is None and method not in ("welch", "anova"):
        raise DesignError(f"{gname!r} is applied to units nested in coarser units, which "
                          f"only the mixed model handles; method={method!r} does not.",
                          hint="Use method='welch' or 'anova'.")
    if method in ("welch", "anova"):
        out = _linear(d, k, levels, method, level, notes)
    elif method == "permutation":
        out = _permutation(d, k, levels, n_permutations, rng, block_name, progress, cancel,
                           notes)
    elif method == "kruskal":
        out = _kruskal(d, k, levels, notes)
    else:
        out = _negbin(d, k, levels, level, nb_reference, n_boot, rng, progress, cancel,
                      notes, gname)
    size = d.size
    positive = bool((size > 0).all())
    ratio = np.nan
    if positive:
        ratio, n_g, v = _variance_ratio(np.log(size), d.codes, k)
        if out.method == "anova" and d.blocks is None:
            note = _anova_note(np.log(size), d.codes, k, levels, ratio, n_g, v)
            if note:
                notes.append(note)
    with np.errstate(divide="ignore"):
        geo = [float(np.exp(np.log(size[d.codes == j]).mean()))
               if (size[d.codes == j] > 0).all() else np.nan for j in range(k)]
    summary = pd.DataFrame({
        "n": [int(np.sum(d.codes == j)) for j in range(k)],
        "geometric_mean": geo,
        "mean": [float(size[d.codes == j].mean()) for j in range(k)],
        "ratio": [r[0] for r in out.rows], "ci_low": [r[1] for r in out.rows],
        "ci_high": [r[2] for r in out.rows]}, index=pd.Index(levels, name=g.name))
    if d.units is not None and d.unit_codes is None:
        summary.insert(1, "n_samples", [int(np.sum(g.cat.codes.to_numpy() == j))
                                        for j in range(k)])
    measure = "total" + (f" per {d.per}" if d.per else "")
    if out.method not in ("kruskal", "negbin"):
        measure = "log " + measure
    return SizeTestResult(method=out.method, statistic=float(out.statistic),
                          pvalue=float(out.pvalue), df=tuple(out.df), summary=summary,
                          measure=measure, effect=out.effect, group=gname, level=level,
                          n_permutations=out.n_permutations, notes=tuple(notes),
                          reference=out.reference, units=d.units,
                          variance_ratio=float(ratio), too_skewed=out.too_skewed,
                          n_boot=out.n_boot)
