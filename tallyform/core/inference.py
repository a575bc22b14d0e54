"""PERMANOVA on a dissimilarity (pairwise PERMANOVA is in :mod:`tallyform.core.pairwise`,
the dispersion test in :mod:`tallyform.core.dispersion`), plus the input checks they share.

PERMANOVA uses the permutation engine (:mod:`tallyform.core.permutation`, schemes in
:mod:`tallyform.core.schemes`), the error strata of :mod:`tallyform.core.strata` (sampling
units from :mod:`tallyform.core.units`) and the one design coder
(:func:`tallyform.core.design.model_matrix`).
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from .display import p_words
from .design import as_samples, model_matrix
from .dissimilarity import Dissimilarity
from .random import as_rng
from .errors import DesignError, InputError, Location
from .permutation import prepare_response
from .results import ResultMixin, readonly
from .progress import reports_progress

__all__ = ["permanova", "pairwise_permanova", "adjust_pvalues", "PermanovaResult",
           "PairwiseResult", "check_option", "check_n_permutations", "align_samples",
           "align_labels", "block_labels"]

SS_TYPES = ("sequential", "marginal")
ADJUST_METHODS = ("holm", "bh", None)


# ---------------------------------------------------------------------------- checks
from .validation import check_n_permutations, check_option  # noqa: E402  (re-exported)


def check_dissimilarity(d, name: str = "d") -> Dissimilarity:
    if not isinstance(d, Dissimilarity):
        raise InputError(f"`{name}` must be a Dissimilarity (from tallyform.dissimilarity or "
                         f"Dissimilarity.from_square); got {type(d).__name__}.")
    return d


def align_samples(samples, labels: pd.Index) -> tuple[pd.DataFrame, tuple]:
    """The sample table in the order of ``labels`` (matched by label), and notes.

    Raises DesignError listing the labels the table lacks; rows of the table that are not
    among ``labels`` are ignored, and a note says how many.
    """
    frame = as_samples(samples)
    index = pd.Index([str(x) for x in frame.index])
    if index.has_duplicates:
        dup = sorted(set(index[index.duplicated()]))[:8]
        raise DesignError(f"the sample table lists sample label(s) twice: {dup}.")
    frame = frame.set_axis(index, axis=0)
    missing = [x for x in labels if x not in index]
    if missing:
        raise DesignError(
            f"{len(missing)} sample(s) of the dissimilarity are not in the sample table: "
            f"{missing[:8]}{' ...' if len(missing) > 8 else ''}.",
            hint="Sample labels are matched exactly (case and spaces count); give the "
                 "sample table of the same samples.")
    extra = len(index) - len(labels)
    notes = ((f"{extra} sample(s) of the sample table are not in the dissimilarity and were "
              "left out."),) if extra else ()
    return frame.loc[list(labels)], notes


def align_labels(values, labels: pd.Index, name: str) -> pd.Series:
    """One value per sample of ``labels``: a Series matched by label, or a sequence in order."""
    if isinstance(values, pd.Series):
        s = values.copy()
        s.index = [str(x) for x in s.index]
        missing = [x for x in labels if x not in s.index]
        if missing:
            raise DesignError(f"`{name}` has no value for sample(s) {missing[:8]}.",
                              location=Location(column=repr(values.name or name)))
        out = s.loc[list(labels)]
        out.index = labels
        out.name = values.name if values.name is not None else name
        return out
    arr = np.asarray(values, dtype=object).ravel()
    if arr.size != len(labels):
        raise DesignError(f"`{name}` has {arr.size} values for {len(labels)} samples.")
    return pd.Series(arr, index=labels, name=name)


def block_labels(frame: pd.DataFrame, blocks) -> tuple[np.ndarray | None, str | None]:
    """Block label per sample (from a column name, a Series or a sequence), checked."""
    if blocks is None:
        return None, None
    if isinstance(blocks, str):
        if blocks not in frame.columns:
            raise DesignError(f"blocks column {blocks!r} is not in the sample table; columns "
                              f"are {list(map(str, frame.columns))}.",
                              location=Location(column=repr(blocks)),
                              hint="Check the spelling (case counts).")
        s, name = frame[blocks], blocks
    else:
        s = align_labels(blocks, frame.index, "blocks")
        name = str(s.name)
    if s.isna().any():
        bad = list(s.index[s.isna()])[:8]
        raise DesignError(f"blocks column {name!r} has missing values for sample(s) {bad}.",
                          location=Location(column=repr(name)))
    codes = s.astype(str).to_numpy()
    _, counts = np.unique(codes, return_counts=True)
    if (counts == 1).all():
        raise DesignError(f"every block of {name!r} holds a single sample, so no sample can "
                          "be permuted within its block.", location=Location(column=repr(name)),
                          hint="Use a coarser blocking column, or no blocks.")
    return codes, name


def _sub_progress(progress, offset: int, grand_total: int):
    if progress is None:
        return None
    return lambda done, total: progress(offset + done, grand_total)


# ---------------------------------------------------------------------------- PERMANOVA
_COLUMNS = ["df", "ss", "ms", "pseudo_f", "r2", "pvalue", "stratum", "tested_against",
            "df_denominator"]


@dataclass(frozen=True, eq=False)
class PermanovaResult(ResultMixin):
    """A PERMANOVA table with its permutation evidence.

    Attributes
    ----------
    table : DataFrame
        Rows: every term, the residual row of every stratum (``Residual`` when samples are
        independent; ``Residual (between 'tank')``, ``Residual (within 'tank')`` with units),
        ``Total``. Columns ``df, ss, ms, pseudo_f, r2, pvalue`` and, for every term, the
        ``stratum`` it is tested in, the row it is ``tested_against`` (its denominator) and
        that row's degrees of freedom ``df_denominator``.
    statistic, pvalue : Series
        Pseudo-F and p-value of every term (indexed by term, in the order given).
    null_distribution : dict term -> ndarray
        The permuted pseudo-F values of each term (read-only). Past a few hundred samples
        on the distance path most are single-precision values (within a proven bound; the
        p-value is the float64 one): draw them, do not rank them against each other.
    scheme : str
        How samples (or whole units) were relabelled.
    n_permutations : int
        Permutations evaluated per term (the largest over the terms when their schemes
        differ; with ``exact``, the number of distinct relabellings, identity included).
    exact : bool
        True when every term's test enumerated all distinct relabellings.
    ss_type : {'sequential', 'marginal'}
    terms : tuple of str
    measure : str
    n_samples : int
    notes : tuple of str
    schemes : DataFrame
        Per term: ``stratum``, ``permutations`` (the scheme), ``reduced_model`` (the model
        whose residuals were permuted), ``n_permutations``, ``exact``, ``n_distinct``
        (distinct relabellings, when few enough to count) and ``min_pvalue`` (the smallest
        p-value the exact test can give).
    min_pvalue : Series
        The smallest attainable p-value of every term (NaN when too small to matter).
    units : dict
        The sampling units used (``units``, ``detected``, ``strata``), or ``random``.
    reading : str
        The result in plain words.
    """

    table: pd.DataFrame
    statistic: pd.Series
    pvalue: pd.Series
    null_distribution: dict = field(repr=False)
    scheme: str
    n_permutations: int
    exact: bool
    ss_type: str
    terms: tuple
    measure: str
    n_samples: int
    notes: tuple = ()
    schemes: pd.DataFrame | None = field(default=None, repr=False)
    min_pvalue: pd.Series | None = field(default=None, repr=False)
    units: dict = field(default_factory=dict, repr=False)
    reading: str = ""

    def __post_init__(self):
        object.__setattr__(self, "null_distribution",
                           {k: readonly(v) for k, v in self.null_distribution.items()})

    def tables(self) -> dict:
        out = {"permanova": self.to_frame()}
        if self.schemes is not None:
            out["permanova_schemes"] = self.schemes
        return out

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    def _title(self) -> str:
        perms = "exact" if self.exact else f"{self.n_permutations} permutations"
        return (f"PERMANOVA on {self.measure} ({self.n_samples} samples, {self.ss_type} sums "
                f"of squares, {perms}; {self.scheme})")

    def __str__(self) -> str:
        return super().__str__() + ("\n" + self.reading if self.reading else "")


def resolve_plan(frame: pd.DataFrame, terms: list, units, block_name):
    from .units import resolve_units
    if isinstance(units, pd.Series):
        units = align_labels(units, frame.index, "units")
        units = units.rename(units.name if units.name is not None else "units")
    return resolve_units(frame, terms, units, blocks=block_name)


@reports_progress("PERMANOVA", knob="n_permutations")
def permanova(d, samples, terms, *, units=None, blocks=None, random=None,
              cyclic: str | None = None, n_permutations: int = 999, rng=None,
              ss: str = "sequential", progress: Callable[[int, int], None] | None = None,
              cancel: Callable[[], bool] | None = None) -> PermanovaResult:
    """Permutational multivariate analysis of variance on a dissimilarity (PERMANOVA), with
    every term tested at the level of the sampling unit it was applied to.

    Parameters
    ----------
    d : Dissimilarity
    samples : DataFrame or CommunityTable
        Sample information, matched to ``d.labels`` by label.
    terms : str or list of str
        Factors, numeric covariates and interactions (``"a:b"``), in the order of the
        sequential table.
    units : None, False, str, list of str or Series, default None
        The sampling units (tanks, sites, plots) whose samples are not independent:
        a column name, nested columns coarsest first (``["site", "plot"]``) or the unit of
        every sample. None looks for a column within which a tested factor is constant (and
        says so in the notes); False treats every sample as an independent replicate (noting
        it when samples repeat units). See Notes.
    blocks : str, Series or sequence, optional
        Blocking column (or labels): samples, or whole units, are permuted only within
        blocks (blocks must then group whole units). The blocks are not added to the model;
        list them in ``terms`` too to remove their effect.
    random : str or list of str, optional
        Factors whose levels are a random sample (sites, years) crossed with fixed factors,
        in a balanced design of factors: each term is tested against the term its expected
        mean square calls for (Cornfield & Tukey 1956), e.g. a fixed ``treatment`` crossed
        with a random ``site`` against ``treatment:site``. Unbalanced designs, covariates
        and terms that would need a quasi-F ratio are refused.
    cyclic : str, optional
        A column ordering the visits of each unit (a date, a week): terms that vary within
        units are then tested by cyclic shifts of the visits within every unit, which keep
        their order, instead of free permutation within units.
    n_permutations : int, default 999
        When the number of distinct relabellings is at most this, all of them are used
        instead (exact test; the result says so).
    rng : None, int or numpy.random.Generator
    ss : {'sequential', 'marginal'}, default 'sequential'
        Sequential: each term after the terms listed before it (within its stratum).
        Marginal: each term after every other term that does not contain it ("type II").
    progress : callable(done, total), optional
    cancel : callable() -> bool, optional
        True stops the run with :class:`tallyform.errors.Cancelled`; nothing is returned.

    Returns
    -------
    PermanovaResult
        ``.table`` with ``df, ss, ms, pseudo_f, r2, pvalue, stratum, tested_against,
        df_denominator`` per term, the residual row of every stratum and ``Total``.

    Raises
    ------
    DesignError
        Unknown column, one-level factor, missing values, a level per sample, no residual
        degrees of freedom, blocks of one sample each, sample labels that do not match; with
        units: a unit with no label, a factor constant within some units but varying within
        others, a factor level with a single unit, blocks that split a unit; with
        ``random``: an unsupported design.

    Notes
    -----
    Sums of squares: with G = -1/2 C D^2 C (Gower 1966) and H_t the hat matrix of the
    intercept and the terms up to t: SS_t = tr((H_t - H_{t-1}) G), SS_res = tr((I - H) G),
    pseudo-F_t = (SS_t / df_t) / (SS_res / df_res), R^2_t = SS_t / tr(G) (Anderson 2001;
    McArdle & Anderson 2001).

    Term order. Every term, the first included, is tested by permuting the residuals of the
    reduced model that keeps every other term not containing it, with that model's fitted
    part added back (Freedman & Lane 1983; Anderson & ter Braak 2003): Y* = Yhat_Z + P e_Z,
    on which the same (sequential or marginal) statistic is computed. A strong effect of
    another factor is therefore not scrambled into the permuted statistics, and in a
    balanced design a term's p-value does not depend on its place in ``terms``.

    Sampling units (error strata; Nelder 1965; Snedecor & Cochran 1989, ch. 16). A term that
    is constant within units (a treatment given to whole tanks) is tested between units: its
    F is taken against the variation among units within the between-unit terms,
    tr((H_u - H_B) G) on #units - rank(B) df, and its p-value comes from permuting whole
    units (within their parent unit and within blocks), each unit keeping all of its
    samples. A term that varies within units (the week of a visit) is tested within units
    against tr((I - H_u - H_W) G), permuting samples within their unit. Nested units
    (``["site", "plot"]``) give one stratum per level. With one variable and Euclidean
    distances the F ratios are those of the classical split-plot and repeated-measures
    tables. When the smallest attainable p-value (the number of relabellings that give the
    observed statistic divided by the number of relabellings, label swaps of equal-sized
    groups included) is above 0.05, the notes and the reading say so.

    Unbalanced units (missing visits). Between-unit tests use the unit means weighted by
    their estimated precision 1 / (s2_u + s2_e / n_u), with the variance of unit effects
    s2_u and of samples within units s2_e estimated by the method of moments from the unit
    structure alone (Searle, Casella & McCulloch 1992): the weights lie between the sample
    counts (classical sums of squares, best without unit effects) and equal weights (an
    analysis of unit means, best when unit effects dominate); with balanced units they are
    the sample counts. Whole-unit relabelling is an exact randomisation test when the tested
    factor was assigned to the units at random, whatever the unit sizes, as long as it is the
    only term of its stratum; with other terms in the stratum, and for observational units,
    it is approximate (calibrated by simulation: benchmarks/calibration_cells/units.py).
    Within-unit terms use comparisons within units only (units as fixed blocks); their test
    is exact for exchangeable visits when they are the only within-unit term.

    PERMANOVA responds to differences in spread as well as in location: read it next to
    :func:`dispersion_test` (Anderson 2006).

    References
    ----------
    Anderson, M. J. (2001). A new method for non-parametric multivariate analysis of
    variance. Austral Ecology 26, 32-46.
    Anderson, M. J. & ter Braak, C. J. F. (2003). Permutation tests for multi-factorial
    analysis of variance. J. Stat. Comput. Simul. 73, 85-113.
    Cornfield, J. & Tukey, J. W. (1956). Average values of mean squares in factorials.
    Ann. Math. Stat. 27, 907-949.
    Freedman, D. & Lane, D. (1983). J. Bus. Econ. Stat. 1, 292-298.
    McArdle, B. H. & Anderson, M. J. (2001). Ecology 82, 290-297.
    Nelder, J. A. (1965). Proc. R. Soc. Lond. A 283, 147-178.
    Snedecor, G. W. & Cochran, W. G. (1989). Statistical Methods, 8th ed. Iowa State Univ.
    Press.
    Searle, S. R., Casella, G. & McCulloch, C. E. (1992). Variance Components. Wiley.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from scipy.spatial.distance import pdist
    >>> from tallyform.core.dissimilarity import Dissimilarity
    >>> x = np.array([[1.0], [2.0], [3.0], [7.0], [8.0], [9.0]])    # synthetic
    >>> d = Dissimilarity(pdist(x), ["a", "b", "c", "d", "e", "f"], measure="euclidean")
    >>> info = pd.DataFrame({"site": list("xxxyyy")}, index=list("abcdef"))
    >>> res = permanova(d, info, ["site"], rng=1)
    >>> round(float(res.table.loc["site", "pseudo_f"]), 2), res.exact, res.n_permutations
    (54.0, True, 20)
    >>> float(res.pvalue["site"]), float(res.min_pvalue["site"])
    (0.1, 0.1)
    """
    d = check_dissimilarity(d)
    check_option("ss", ss, SS_TYPES)
    n_permutations = check_n_permutations(n_permutations)
    frame, notes = align_samples(samples, d.labels)
    mm = model_matrix(frame, terms)
    block_codes, block_name = block_labels(frame, blocks)
    terms = list(mm.terms)
    resp = prepare_response(d)
    common = dict(ss=ss, block_codes=block_codes, block_name=block_name,
                  n_permutations=n_permutations, rng=as_rng(rng), progress=progress,
                  cancel=cancel)
    tests, rows, plan, provenance, more = _run_tests(resp, frame, mm, terms, units, random,
                                                     cyclic, common)
    notes += more
    total = resp.total()
    table = _table(tests, rows, terms, total, d.n, grouped=plan is not None)
    tested = [t for t in terms if np.isfinite(tests[t].pvalue)]
    notes += tuple(_closing_notes(table, tested, mm, ss, terms, resp.path, total))
    notes += _order_notes(tests, tested, ss)
    schemes = _schemes_frame(tests, terms)
    totals = [tests[t].n_permutations for t in tested]
    return PermanovaResult(
        table=table, statistic=table.loc[terms, "pseudo_f"].rename("pseudo_f"),
        pvalue=table.loc[terms, "pvalue"].rename("pvalue"),
        null_distribution={t: tests[t].null for t in tested},
        scheme=_scheme_text(tests, tested, plan),
        n_permutations=int(max(totals)) if totals else 0,
        exact=bool(tested) and all(tests[t].exact for t in tested), ss_type=ss,
        terms=tuple(terms), measure=d.measure, n_samples=d.n,
        notes=tuple(dict.fromkeys(notes)),
        schemes=schemes, min_pvalue=schemes["min_pvalue"].rename("min_pvalue"),
        units=provenance, reading=_reading(tests, tested, plan))


def _run_tests(resp, frame, mm, terms, units, random, cyclic, common):
    """Test every term, with random factors or by sampling-unit strata; returns the pieces."""
    if random is not None:
        from .ems import random_tests
        if units not in (None, False):
            raise DesignError("`random` and `units` cannot be combined: with random factors "
                              "the denominators come from expected mean squares.",
                              hint="Drop `units`, or declare the units' factor random "
                                   "instead.")
        tests, rows, more, provenance = random_tests(resp, frame, mm, random, **common)
        return tests, rows, None, provenance, tuple(more)
    from .strata import design_tests
    plan = resolve_plan(frame, terms, units, common["block_name"])
    notes = tuple(plan.notes)
    tests, rows, more = design_tests(resp, frame, mm, plan, cyclic=cyclic, **common)
    if not plan.independent:
        notes += tuple(_unit_notes(plan))
    return tests, rows, plan, plan.provenance(), notes + tuple(more)


def _order_notes(tests: dict, tested: list, ss: str) -> tuple:
    """The note on sequential tests whose result depends on the order of the terms."""
    tangled = [t for t in tested if tests[t].order_dependent]
    if not (tangled and ss == "sequential"):
        return ()
    return (f"Unbalanced design: the sequential test of {', '.join(map(repr, tangled))} "
            "depends on the order of the terms (a term is not adjusted for correlated "
            "terms listed after it, whose fitted values its permutations keep; "
            "Freedman & Lane 1983). Such a test holds its level approximately "
            "(measured by simulation) but answers a question about the unadjusted "
            "means, and can miss an effect they hide; ss='marginal' tests every term "
            "adjusted for the others, whatever the order.",)


def _schemes_frame(tests: dict, terms: list) -> pd.DataFrame:
    """One row per term: its stratum, permutation scheme, reduced model and exactness."""
    return pd.DataFrame(
        {"stratum": [tests[t].stratum for t in terms],
         "permutations": [tests[t].scheme for t in terms],
         "reduced_model": [tests[t].reduced for t in terms],
         "n_permutations": [tests[t].n_permutations for t in terms],
         "exact": [tests[t].exact for t in terms],
         "n_distinct": pd.array([tests[t].n_distinct for t in terms], dtype="Int64"),
         "min_pvalue": [np.nan if tests[t].min_pvalue is None else tests[t].min_pvalue
                        for t in terms]}, index=pd.Index(terms, name="term"))


def _table(tests: dict, rows: list, terms: list, total: float, n: int, *,
           grouped: bool = True) -> pd.DataFrame:
    """Terms grouped by stratum, each stratum followed by its residual row, then Total
    (``grouped=False``: the terms in their order, then the residual rows)."""
    if grouped:
        order = []
        for r in rows:
            order += [t for t in terms if tests[t].stratum == r.stratum]
            order.append(r)
        order += [t for t in terms if t not in order]
    else:
        order = list(terms) + list(rows)
    out = {}
    for item in order:
        if isinstance(item, str):
            t = tests[item]
            out[item] = dict(df=t.df, ss=t.ss, ms=t.ss / t.df if t.df else np.nan,
                             pseudo_f=t.pseudo_f, r2=t.ss / total if total else np.nan,
                             pvalue=t.pvalue, stratum=t.stratum,
                             tested_against=t.tested_against, df_denominator=t.df_denominator)
        else:
            out[item.label] = dict(df=item.df, ss=item.ss,
                                   ms=item.ss / item.df if item.df else np.nan,
                                   pseudo_f=np.nan, r2=item.ss / total if total else np.nan,
                                   pvalue=np.nan, stratum=item.stratum, tested_against="",
                                   df_denominator=None)
    out["Total"] = dict(df=n - 1, ss=total, ms=np.nan, pseudo_f=np.nan, r2=1.0,
                        pvalue=np.nan, stratum="", tested_against="", df_denominator=None)
    table = pd.DataFrame.from_dict(out, orient="index")[_COLUMNS]
    table["df"] = table["df"].astype(int)
    table["df_denominator"] = pd.array(table["df_denominator"].tolist(), dtype="Int64")
    table.index.name = "term"
    return table


def _unit_notes(plan) -> list:
    out = []
    for lv in plan.levels:
        if not lv.balanced:
            s = lv.sizes
            out.append(
                f"Units of {lv.name!r} hold {s.min()}-{s.max()} samples (unbalanced): "
                "between-unit tests weight each unit mean by its estimated precision "
                "1 / (s2_u + s2_e / n_u) (variance components from the units alone), so "
                "their sums of squares are not the sample-level ones. Whole-unit "
                "relabelling is exact when a factor was assigned to units at random and is "
                "the only term of its stratum; otherwise it is approximate (calibrated by "
                "simulation). Within-unit terms use comparisons within units only.")
    return out


def _closing_notes(table, tested, mm, ss, terms, path, total) -> list:
    from .strata import term_sets
    out = []
    if ss == "marginal" and any(term_sets(terms, t, ss)[1] for t in terms):
        out.append("Marginal sums of squares: a term that is part of an interaction is "
                   "tested without adjusting for that interaction; if the interaction "
                   "matters, read the main effect with care.")
    hit = [t for t in tested if mm.kinds.get(t) != "numeric" and table.loc[t, "pvalue"] <= 0.05]
    if hit:
        out.append("PERMANOVA also responds to differences in spread (dispersion) between "
                   "groups, not only to shifts of their centroids; read the spread "
                   f"(dispersion) test before reading {hit[0]!r} as a difference in location.")
    if path == "distances" and total <= 0:
        out.append("The total sum of squares is not positive; the dissimilarities are "
                   "degenerate.")
    return out


def _scheme_text(tests: dict, tested: list, plan) -> str:
    schemes = list(dict.fromkeys(tests[t].scheme for t in tested))
    fl = ("; every term by permuting residuals of the model without it (Freedman & Lane "
          "1983)") if len(tested) > 1 else ""
    if len(schemes) <= 1:
        return (schemes[0] if schemes else "no test") + fl
    parts = [f"{tests[t].stratum}: {tests[t].scheme}" for t in tested]
    return "; ".join(dict.fromkeys(parts)) + fl


def _reading(tests: dict, tested: list, plan, alpha: float = 0.05) -> str:
    out = []
    for t in tested:
        r = tests[t]
        where = ("" if r.stratum == "samples" else f" {r.stratum}" if r.stratum.endswith("cells")
                 else " " + r.stratum.replace("between ", "between units of ", 1)
                 .replace("within ", "within units of ", 1))
        out.append(f"{t!r}: pseudo-F = {r.pseudo_f:.3g} on {r.df} and {r.df_denominator} df"
                   f"{', tested' + where if where else ''} against {r.tested_against}, "
                   f"{p_words(r.pvalue)}.")
        if r.min_pvalue is not None and r.min_pvalue > alpha:
            out.append(f"The smallest possible p-value for {t!r} is {r.min_pvalue:.2g}, "
                       f"above {alpha:g}: this design cannot show an effect of {t!r} at "
                       "that level, whatever the data.")
    return " ".join(out)


from .pairwise import PairwiseResult, adjust_pvalues, pairwise_permanova  # noqa: E402,F401
