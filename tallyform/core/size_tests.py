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

from .abundance import require_absolute
from .display import p_words
from .design import factor_levels
from .errors import DesignError, InputError, Location
from .inference import check_option
from .results import ResultMixin
from .size_methods import anova_note, collect_replicates, run_method, variance_ratio
from .table import CommunityTable, as_table
from .progress import reports_progress
from .validation import check_fraction, check_whole

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

    @property
    def method_name(self) -> str:
        """The test's name in words ("Welch ANOVA")."""
        return {"anova": "ANOVA", "welch": "Welch ANOVA", "kruskal": "Kruskal-Wallis",
                "permutation": "permutation F test", "mixed": "linear mixed model",
                "negbin": "negative-binomial regression"}.get(self.method, self.method)

    @property
    def reading(self) -> str:
        """One plain sentence: whether the totals differ, and by how much at most."""
        found = ("Evidence that the size (total abundance) differs" if self.pvalue <= 0.05
                 else "No evidence at the 5 % level that the size (total abundance) differs")
        name = self.method_name
        text = f"{found} among the groups of {self.group!r} ({name}, {p_words(self.pvalue)})."
        s = self.summary
        if isinstance(s, pd.DataFrame) and "ratio" in s.columns and s["ratio"].notna().any():
            r = s["ratio"].astype(float)
            far = (np.log(r).abs()).idxmax()
            text += (f" The ratio farthest from the reference is {far!r}: "
                     f"{float(r[far]):.3g} times.")
        return text

    def _title(self) -> str:
        name = {"anova": "ANOVA", "welch": "Welch ANOVA",
                "kruskal": "Kruskal-Wallis, a test of distributions",
                "permutation": "permutation F test", "mixed": "linear mixed model",
                "negbin": "negative-binomial regression"}[self.method]
        sym = {"kruskal": "H", "negbin": "LR"}.get(self.method, "F")
        df = ", ".join(f"{x:.4g}" for x in self.df)
        ref = f" ({self.reference})" if self.method == "negbin" and self.reference else ""
        unit = f"; units: {self.units}" if self.units else ""
        return (f"Size test ({name}) of {self.measure} between levels of {self.group!r}: "
                f"{sym} = {self.statistic:.4g} (df {df}), {p_words(self.pvalue)}{ref}; "
                f"{self.effect}{unit}")


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
    """Each sample's size: log(total), or log(total / effort) (docs/methods.md, section 1).

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


# ---------------------------------------------------------------------------- public
def _summary(d, rows, levels, g) -> pd.DataFrame:
    """Per group: replicates, geometric and arithmetic mean size, ratio with interval."""
    size, k = d.size, len(levels)
    with np.errstate(divide="ignore"):
        geo = [float(np.exp(np.log(size[d.codes == j]).mean()))
               if (size[d.codes == j] > 0).all() else np.nan for j in range(k)]
    summary = pd.DataFrame({
        "n": [int(np.sum(d.codes == j)) for j in range(k)],
        "geometric_mean": geo,
        "mean": [float(size[d.codes == j].mean()) for j in range(k)],
        "ratio": [r[0] for r in rows], "ci_low": [r[1] for r in rows],
        "ci_high": [r[2] for r in rows]}, index=pd.Index(levels, name=g.name))
    if d.units is not None and d.unit_codes is None:
        summary.insert(1, "n_samples", [int(np.sum(g.cat.codes.to_numpy() == j))
                                        for j in range(k)])
    return summary


def _size_inputs(table, group, method: str, effort):
    """The table, the group factor, the effort and the first notes (after the input checks)."""
    tab = as_table(table)
    load_notes = require_absolute(tab, "a size test", counts=(method == "negbin"))
    g = group_factor(tab, group)
    e, e_name = _effort(tab, effort)
    notes: list[str] = list(load_notes)
    if e_name and effort is None:
        notes.append(f"The table's sampling effort {e_name!r} was used ("
                     + ("log effort as an offset" if method == "negbin" else
                        "totals divided by it") + "); pass effort=False to compare raw totals.")
    if method == "negbin":
        _check_whole_counts(tab)
    return tab, g, e, e_name, notes


def _spread_ratio(d, method: str, k: int, levels, notes: list) -> float:
    """Largest over smallest group variance of log size; the one-variance ANOVA's note."""
    size = d.size
    positive = bool((size > 0).all())
    ratio = np.nan
    if positive:
        ratio, n_g, v = variance_ratio(np.log(size), d.codes, k)
        if method == "anova" and d.blocks is None:
            note = anova_note(np.log(size), d.codes, k, levels, ratio, n_g, v)
            if note:
                notes.append(note)
    return ratio


def _size_knob(args: dict):
    """The repetitions that set the run time of :func:`size_test`: permutations or draws."""
    if args.get("method") == "permutation":
        return "n_permutations"
    if args.get("method") == "negbin" and args.get("nb_reference") == "bootstrap":
        return "n_boot"
    return None


@reports_progress("Size test", knob=_size_knob)
def size_test(table, group, *, method: str = "welch", effort=None, units=None, blocks=None,
              level: float = 0.95, n_permutations: int = 999,
              nb_reference: str = "bootstrap", n_boot: int = 999, rng=None,
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
    nb_reference : {'bootstrap', 'F'}, default 'bootstrap'
        Reference distribution of the negative-binomial likelihood ratio: a parametric
        bootstrap of ``n_boot`` draws from the fitted null model (holds its level from 5
        totals per group), or F with Welch's degrees of freedom (instant, but conservative
        when a small group is the over-dispersed one).
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
    n_boot = check_whole("n_boot", n_boot, 19)
    level = check_fraction("level", level)
    tab, g, e, e_name, notes = _size_inputs(table, group, method, effort)
    levels = list(g.cat.categories)
    k = len(levels)
    gname = str(g.name)
    from .inference import block_labels
    block_codes, block_name = block_labels(tab.samples, blocks)
    d = collect_replicates(tab, g, e, e_name, block_codes, block_name, units, notes)
    out = run_method(d, method, k, levels, level=level, n_permutations=n_permutations,
                     nb_reference=nb_reference, n_boot=n_boot, rng=rng,
                     block_name=block_name, progress=progress, cancel=cancel, notes=notes,
                     gname=gname)
    ratio = _spread_ratio(d, out.method, k, levels, notes)
    summary = _summary(d, out.rows, levels, g)
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
