"""Permutation tests of the constraints of CCA, RDA and db-RDA, and their adjusted share.

A constrained ordination always finds a constrained share above zero: m random constraint
columns fit, on average, m / (n - 1) of the total inertia of n samples. The tests here say
whether the constraints fit more than that:

- ``scope='all'``: every term together (given the conditions of a partial analysis);
- ``scope='each_term'``: each term given the conditions and the terms before it
  (``ss='sequential'``) or every other term not containing it (``ss='marginal'``);
- ``scope='each_axis'``: the constrained axes in turn, axis j given the conditions and the
  linear-combination scores of axes 1..j-1, with the first eigenvalue of that partial analysis
  as statistic (the "marginal" axis test of Legendre, Oksanen & ter Braak 2011).

Pseudo-F = (fitted inertia / df) / (residual inertia / df_res); the residuals of the reduced
model are permuted (Freedman & Lane 1983), which for the first term without conditions is
plain permutation of the samples. CCA works in its weighted (chi-square) metric, and a
permuted sample keeps its weight (its counts and its total are one observation; see
:mod:`tallyform.core.constraint_engine`).

Sampling units. Terms constant within units (a treatment applied to tanks) are tested between
units: the data are reduced to weighted unit means (every unit weighing its samples, or its
mass in CCA), so the fitted inertia of such terms is unchanged while the residual is that of
the units, and whole units are permuted (within blocks). Terms varying within units are
tested within them: the units enter the reduced model and samples are permuted within units.

References
----------
Freedman, D. & Lane, D. (1983). J. Bus. Econ. Stat. 1, 292-298.
Legendre, P., Oksanen, J. & ter Braak, C. J. F. (2011). Testing the significance of canonical
axes in redundancy analysis. Methods Ecol. Evol. 2, 269-277.
Peres-Neto, P. R., Legendre, P., Dray, S. & Borcard, D. (2006). Variation partitioning of
species data matrices: estimation and comparison of fractions. Ecology 87, 2614-2625.
ter Braak, C. J. F. (1986). Ecology 67, 1167-1179.
Ezekiel, M. (1930). Methods of Correlation Analysis. Wiley.
Hurlbert, S. H. (1971). Ecology 52, 577-586.
Hurlbert, S. H. (1984). Ecological Monographs 54, 187-211.
Sanders, H. L. (1968). American Naturalist 102, 243-282.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from .display import p_words
from .constraint_engine import (ConstraintData, Rows, f_test, fitted_axes, indicator_columns,
                                weighted_unit_rows)
from .constraint_shares import adjusted_from_plan, share_plan
from .constraint_totals import totals_notes
from .errors import DesignError, InputError
from .inference import block_labels, check_n_permutations
from .ordination import Ordination, check_option
from .permutation import Permutations, PermutationTest
from .random import as_rng
from .results import ResultMixin, readonly
from .units import resolve_units, unit_blocks
from .progress import reports_progress

__all__ = ["constraint_test", "ConstraintTest", "SCOPES"]

SCOPES = ("all", "each_term", "each_axis")
_SS_TYPES = ("sequential", "marginal")


# ---------------------------------------------------------------------------- result
@dataclass(frozen=True, eq=False)
class ConstraintTest(ResultMixin):
    """Permutation tests of the constraints of a constrained ordination.

    Attributes
    ----------
    scope : {'all', 'each_term', 'each_axis'}
    method : {'CCA', 'RDA', 'db-RDA'}
    table : DataFrame
        One row per test (``'all terms'``, each term, or each constrained axis), then
        ``conditions`` (partial analyses), ``residual`` (one per stratum with sampling units)
        and ``total``; columns ``df, inertia, share, pseudo_f, pvalue`` (and ``stratum`` when
        units are used). ``inertia`` is a sum of squares for RDA and db-RDA and a
        mean-square contingency for CCA; ``share`` divides it by the total.
    statistic, pvalue : float (scope 'all') or Series (indexed by tested row)
    null_distribution : dict row -> ndarray
        The permuted pseudo-F values of every tested row (read-only).
    n_permutations : int
        Permutations per tested row (the distinct relabellings when ``exact``).
    exact : bool
        True when every distinct relabelling was enumerated (for every row).
    scheme : str
        How samples (or units) were relabelled.
    ss_type : {'sequential', 'marginal'} or None
    terms, conditions : tuple of str
    n_samples : int
    r_squared : float
        The constrained share of the ordination (of the whole total).
    chance_share : float
        What as many random constraint columns fit on average: m / (n - 1 - k) times the
        share left after the k condition columns (m / (n - 1) without conditions).
    adjusted_share : float or None
        The constrained share minus what chance explains: Ezekiel's (1930) adjustment for
        RDA and db-RDA, the permutation estimate of Peres-Neto et al. (2006) for CCA. Partial
        analyses: the adjusted share of terms and conditions together minus that of the
        conditions.
    units : dict
        The sampling units used and the stratum of every term.
    notes : tuple of str
    """

    scope: str
    method: str
    table: pd.DataFrame
    statistic: object
    pvalue: object
    null_distribution: dict = field(repr=False)
    n_permutations: int
    exact: bool
    scheme: str
    ss_type: str | None
    terms: tuple
    conditions: tuple
    n_samples: int
    r_squared: float
    chance_share: float
    adjusted_share: float | None
    units: dict = field(default_factory=dict)
    source: Ordination | None = field(default=None, repr=False)
    notes: tuple = ()

    def __post_init__(self):
        object.__setattr__(self, "null_distribution",
                           {k: readonly(v) for k, v in self.null_distribution.items()})

    @property
    def tested(self) -> list:
        """Labels of the tested rows of ``table``."""
        return list(self.null_distribution)

    @property
    def ordination(self) -> Ordination:
        """The tested ordination, now showing this test (``source.with_test(self)``)."""
        return self.source.with_test(self)

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    def _title(self) -> str:
        what = {"all": "all constraints together", "each_term": f"each term ({self.ss_type})",
                "each_axis": "each constrained axis"}[self.scope]
        perms = "exact" if self.exact else f"{self.n_permutations} permutations"
        return (f"{self.method} constraint test, {what} ({self.n_samples} samples, {perms}; "
                f"{self.scheme})")

    @property
    def reading(self) -> str:
        """The overall result in plain words (never more than the numbers say)."""
        share = f"{100 * self.r_squared:.1f} %"
        chance = f"{100 * self.chance_share:.1f} %"
        adj = ("" if self.adjusted_share is None or not np.isfinite(self.adjusted_share)
               else f"; adjusted share {100 * self.adjusted_share:.1f} %")
        text = (f"The constraints fit {share} of the total inertia, where as many random "
                f"columns would fit {chance} on average{adj}.")
        first = self.tested[0]
        p = float(self.table.loc[first, "pvalue"])
        if not np.isfinite(p):
            return text + " No permutation p-value was computed."
        label = "all terms together" if self.scope == "all" else repr(first)
        if p <= 0.05:
            return text + (f" Permutation {p_words(p)} for {label}: more than chance "
                           "would fit, at the 5 % level.")
        return text + (f" Permutation {p_words(p)} for {label}: no evidence that the "
                       "constraints fit more than random columns would.")

    def row_test(self, row: str | None = None) -> PermutationTest:
        """One tested row (default: the first) as a PermutationTest: its pseudo-F, p-value
        and permutation distribution (``path`` holds the row's name)."""
        rows = self.tested
        row = rows[0] if row is None else row
        if row not in rows:
            raise InputError(f"`row` must be one of {rows}; got {row!r}.")
        t = self.table.loc[row]
        return PermutationTest(statistic=float(t["pseudo_f"]), pvalue=float(t["pvalue"]),
                               null_distribution=self.null_distribution[row],
                               n_permutations=self.n_permutations, exact=self.exact,
                               n_distinct=None, scheme=self.scheme, df=(int(t["df"]), 0),
                               ss=(float(t["inertia"]), float("nan")), path=str(row))


# ---------------------------------------------------------------------------- strata
@dataclass
class _Stratum:
    name: str
    rows: Rows
    extra: np.ndarray
    blocks: np.ndarray | None
    block_name: str | None
    how: str
    perms: Permutations | None = None


def _combine(*codes) -> np.ndarray | None:
    parts = [np.asarray(c).astype(str) for c in codes if c is not None]
    if not parts:
        return None
    if len(parts) == 1:
        return parts[0]
    return pd.factorize(pd.MultiIndex.from_arrays(parts))[0]


def _stratum(data: ConstraintData, plan, k: int, block_codes, block_name) -> _Stratum:
    base = data.rows()
    none = np.empty((data.n, 0))
    if plan.independent:
        return _Stratum("samples", base, none, block_codes, block_name,
                        "samples permuted" + (f" within blocks of {block_name!r}"
                                              if block_codes is not None else ""))
    if k >= len(plan.levels):
        lv = plan.levels[-1]
        return _Stratum(f"within {lv.name!r}", base, indicator_columns(lv.codes),
                        _combine(lv.codes, block_codes), lv.name,
                        f"samples permuted within each {lv.name!r}, the units in the model")
    lv = plan.levels[k]
    rows = weighted_unit_rows(base, lv.codes)
    ub = unit_blocks(lv, block_codes, block_name)
    extra = np.empty((lv.m, 0)) if lv.parent is None else indicator_columns(lv.parent)
    parent = None if lv.parent is None else plan.levels[k - 1].name
    how = f"whole units of {lv.name!r} permuted (weighted unit means)"
    if parent:
        how += f" within each {parent!r}"
    if ub is not None:
        how += f" within blocks of {block_name!r}"
    return _Stratum(f"between {lv.name!r}", rows, extra, _combine(lv.parent, ub),
                    parent or block_name, how)


def _permutations(st: _Stratum, data: ConstraintData, n_permutations, rng) -> Permutations:
    if st.perms is None:
        design = np.hstack([st.rows.design(["conditions"] +
                                           [f"term:{t}" for t in data.terms]), st.extra])
        st.perms = Permutations(st.rows.n, n_permutations, rng, blocks=st.blocks,
                                block_name=st.block_name, design=design)
    return st.perms


def _split_terms(terms: list, t: str, ss: str) -> tuple[list, list]:
    """(reduced, later) terms for testing ``t`` (sequential or marginal)."""
    if ss == "sequential":
        i = terms.index(t)
        return terms[:i], terms[i + 1:]
    parts = frozenset(p.strip() for p in t.split(":"))
    containing = [u for u in terms if u != t and parts < frozenset(
        p.strip() for p in u.split(":"))]
    return [u for u in terms if u != t and u not in containing], containing


# ---------------------------------------------------------------------------- public
@reports_progress("Constraint test", knob="n_permutations")
def constraint_test(ordination, scope: str = "all", *, n_permutations: int = 999, rng=None,
                    units=None, blocks=None, ss: str = "sequential",
                    progress: Callable[[int, int], None] | None = None,
                    cancel: Callable[[], bool] | None = None) -> ConstraintTest:
    """Permutation test of the constraints of a CCA, RDA or db-RDA (partial ones too).

    Parameters
    ----------
    ordination : Ordination
        From :func:`~tallyform.core.constrained.cca`, :func:`~tallyform.core.constrained.rda`
        (with terms) or :func:`~tallyform.core.constrained.db_rda`.
    scope : {'all', 'each_term', 'each_axis'}, default 'all'
        All terms together; each term (see ``ss``); or each constrained axis in turn, given
        the axes before it (Legendre, Oksanen & ter Braak 2011).
    n_permutations : int, default 999
        When the number of distinct relabellings is at most this, all of them are used
        instead (exact test; the result says so).
    rng : None, int or numpy.random.Generator
    units : None, False, str or list of str
        Sampling units (tanks, sites, plots): terms constant within units are tested
        between them (whole units permuted), the others within them. None detects a units
        column, False treats samples as independent (see
        :func:`tallyform.core.units.resolve_units`).
    blocks : str, Series or sequence, optional
        Permute only within blocks (blocks must group whole units when units are used).
    ss : {'sequential', 'marginal'}, default 'sequential'
        ``each_term`` only: each term after the terms before it, or after every other term
        that does not contain it.
    progress : callable(done, total), optional
    cancel : callable() -> bool, optional
        True stops the run with :class:`tallyform.errors.Cancelled`.

    Returns
    -------
    ConstraintTest
        ``table`` with ``df, inertia, share, pseudo_f, pvalue`` per row; ``statistic`` and
        ``pvalue``; ``adjusted_share`` and ``chance_share``; ``ordination`` shows the test.

    Raises
    ------
    InputError
        Not a constrained ordination; bad options.
    DesignError
        Terms in different strata with ``scope='all'`` or ``'each_axis'``; blocks or units
        that leave nothing to permute; no residual degrees of freedom.

    Notes
    -----
    Pseudo-F = [S(T) / df_t] / [S_res / df_res], with S(T) the inertia the tested columns
    fit given the reduced model and S_res the residual inertia of the whole model; per-axis
    tests use the first eigenvalue of the fitted part over 1 df. The reduced model's
    residuals are permuted (Freedman & Lane 1983): the design rows are relabelled against
    them. In CCA every sample keeps its weight (row mass) when its residual moves, and the
    weighted regression is recomputed for every permutation (ter Braak 1986).
    The test holds its level exactly when the samples are exchangeable under the null. When
    sample totals differ with the constraints they are not, whatever the transform: profiles
    of samples with fewer individuals carry more counting noise, so RDA on profiles (or
    db-RDA on a measure of profiles) is liberal when the larger groups have the higher
    totals and conservative in the opposite case, and CCA loses power (the result says so
    for CCA and RDA; a dissimilarity does not carry the totals, so db-RDA cannot). Rarefying
    every sample to a common depth first (:func:`tallyform.rarefied_table`) makes the samples
    exchangeable again whatever their totals (Sanders 1968; Hurlbert 1971).
    p = (1 + #{F* >= F}) / (1 + P), or the exact share under complete enumeration.

    References
    ----------
    Legendre, Oksanen & ter Braak (2011) Methods Ecol. Evol. 2: 269-277. Freedman & Lane
    (1983) J. Bus. Econ. Stat. 1: 292-298. ter Braak (1986) Ecology 67: 1167-1179.
    Peres-Neto et al. (2006) Ecology 87: 2614-2625.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from tallyform.core.constrained import rda
    >>> rng = np.random.default_rng(1)                                      # synthetic
    >>> x = pd.DataFrame(rng.poisson(5, (12, 6)), index=[f"s{i}" for i in range(12)])
    >>> info = pd.DataFrame({"trt": list("abc") * 4}, index=x.index)
    >>> ct = constraint_test(rda(x, info, terms=["trt"]), n_permutations=199, rng=1)
    >>> list(ct.table.index)
    ['all terms', 'residual', 'total']
    >>> round(ct.chance_share, 4)   # 2 constraint columns, 12 samples: 2 / 11
    0.1818
    """
    data = _constraint_data(ordination)
    check_option("scope", scope, SCOPES)
    check_option("ss", ss, _SS_TYPES)
    n_permutations = check_n_permutations(n_permutations)
    rng = as_rng(rng)
    terms = list(data.terms)
    frame = data.frame
    block_codes, block_name = block_labels(frame, blocks)
    plan = resolve_units(frame, terms, units,
                         blocks=blocks if isinstance(blocks, str) else None)
    jobs, strata, shares = _plan_jobs(data, plan, terms, scope, ss, block_codes, block_name,
                                      n_permutations, rng)
    o = ordination
    results, adjusted, chance = _run_jobs(data, o, jobs, strata, shares, progress, cancel)
    table = _table(data, o, results, strata, plan)
    tested = list(results)
    stat = table.loc[tested, "pseudo_f"].rename("pseudo_f")
    pval = table.loc[tested, "pvalue"].rename("pvalue")
    if scope == "all":
        stat, pval = float(stat.iloc[0]), float(pval.iloc[0])
    used = {k: strata[k] for k in sorted({k for _, k, *_ in jobs})}
    notes = _notes(data, o, scope, ss, plan, used, table.loc[tested, "inertia"])
    return ConstraintTest(
        scope=scope, method=data.method, table=table, statistic=stat, pvalue=pval,
        null_distribution={lab: r.null for lab, (_, r) in results.items()},
        n_permutations=int(min(st.perms.total for st in used.values())),
        exact=all(st.perms.exact for st in used.values()), scheme=_scheme(data, used, jobs),
        ss_type=ss if scope == "each_term" else None, terms=tuple(terms),
        conditions=tuple(data.conditions), n_samples=data.n,
        r_squared=float(o.r_squared), chance_share=float(chance),
        adjusted_share=None if adjusted is None else float(adjusted),
        units=plan.provenance(), source=o, notes=tuple(notes))


def _plan_jobs(data, plan, terms, scope, ss, block_codes, block_name, n_permutations,
               rng) -> tuple:
    """The tests to run, their strata with relabellings, and CCA's chance-share ones."""
    key = {t: (0 if plan.independent else plan.strata.get(t, plan.within)) for t in terms}
    strata: dict[int, _Stratum] = {}

    def stratum(k):
        if k not in strata:
            strata[k] = _stratum(data, plan, k, block_codes, block_name)
        return strata[k]

    jobs = _jobs(data, scope, ss, key, stratum)
    for _, k, *_ in jobs:
        _permutations(stratum(k), data, n_permutations, rng)
    shares = share_plan(data, n_permutations, rng) if data.method == "CCA" else []
    return jobs, strata, shares


def _run_jobs(data, o, jobs, strata, shares, progress, cancel) -> tuple:
    """Run every F test (and, for CCA, the chance share) with one progress count."""
    grand = (sum(strata[k].perms.total for _, k, *_ in jobs) +
             sum(perms.total for _, perms in shares))
    state = {"done": 0}

    def tick(b):
        state["done"] += b
        if progress is not None:
            progress(state["done"], grand)

    results = {}
    for label, k, reduced, tested, later, first in jobs:
        st = strata[k]
        results[label] = (k, f_test(st.rows, reduced, tested, later, st.perms, first=first,
                                    progress=tick, cancel=cancel))
    adjusted, chance = o.adjusted_r_squared, o.chance_share
    if data.method == "CCA":
        adjusted, perm_chance = adjusted_from_plan(data, shares, progress=tick, cancel=cancel)
        chance = perm_chance if np.isfinite(perm_chance) else chance
    return results, adjusted, chance


def _scheme(data, used, jobs) -> str:
    scheme = "; ".join(f"{st.name}: {st.perms.describe()}, {st.how}" if len(used) > 1
                       else f"{st.perms.describe()}, {st.how}" for st in used.values())
    if any(reduced.shape[1] for _, _, reduced, *_ in jobs):
        scheme += "; residuals of the reduced model permuted (Freedman & Lane 1983)"
    if data.method == "CCA":
        scheme += "; each sample keeps its weight"
    return scheme


def _constraint_data(ordination) -> ConstraintData:
    if not isinstance(ordination, Ordination):
        raise InputError("`ordination` must be an Ordination from tly.cca, tly.rda (with "
                         f"terms) or tly.db_rda; got {type(ordination).__name__}.")
    data = getattr(ordination, "constraint_data", None)
    if data is None:
        raise InputError(f"a {ordination.method} has no constraints to test; constraint_test "
                         "needs a CCA, an RDA with terms or a db-RDA.",
                         hint="e.g. tly.rda(table, terms=['treatment']).")
    return data


def _jobs(data: ConstraintData, scope, ss, key, stratum) -> list:
    """(row label, stratum, reduced, tested, later, first-eigenvalue?) for every test."""
    terms = list(data.terms)
    if scope in ("all", "each_axis") and len(set(key.values())) > 1:
        names = {t: stratum(k).name for t, k in key.items()}
        raise DesignError(
            f"the terms lie in different strata ({names}), so no single permutation "
            f"scheme tests them together (scope={scope!r}).",
            hint="Test them one by one with scope='each_term', or treat samples as "
                 "independent with units=False if they really are.")

    def base(st):
        return np.hstack([st.rows.design(["conditions"]), st.extra])

    if scope == "each_term":
        out = []
        for t in terms:
            st = stratum(key[t])
            red, later = _split_terms(terms, t, ss)
            out.append((t, key[t], np.hstack([base(st), st.rows.design(
                [f"term:{u}" for u in red])]), st.rows.design([f"term:{t}"]),
                st.rows.design([f"term:{u}" for u in later]), False))
        return out
    k = key[terms[0]]
    st = stratum(k)
    tested = st.rows.design([f"term:{t}" for t in terms])
    if scope == "all":
        return [("all terms", k, base(st), tested, None, False)]
    values, vectors = fitted_axes(st.rows, base(st), tested)
    if values.size == 0:
        raise DesignError("the constraints fit nothing: there is no constrained axis to test.")
    return [(f"{data.axis_prefix}{j + 1}", k, np.hstack([base(st), vectors[:, :j]]), tested,
             None, True) for j in range(values.size)]


def _table(data, o, results, strata, plan) -> pd.DataFrame:
    total = float(o.total_inertia)
    rows = {}
    residuals = {}
    if data.Z is not None:
        rows["conditions"] = dict(df=int(o.condition_df), inertia=float(o.conditioned_inertia),
                                  pseudo_f=np.nan, pvalue=np.nan, stratum="")
    for label, (k, r) in results.items():
        rows[label] = dict(df=r.df_num, inertia=r.fitted, pseudo_f=r.statistic,
                           pvalue=r.pvalue, stratum=strata[k].name)
        residuals.setdefault(k, (r.df_res, r.residual))
    for k, (df, ss) in residuals.items():
        name = "residual" if len(residuals) == 1 else f"residual ({strata[k].name})"
        rows[name] = dict(df=df, inertia=ss, pseudo_f=np.nan, pvalue=np.nan,
                          stratum=strata[k].name)
    rows["total"] = dict(df=data.n - 1, inertia=total, pseudo_f=np.nan, pvalue=np.nan,
                         stratum="")
    table = pd.DataFrame.from_dict(rows, orient="index")
    table["df"] = table["df"].astype(int)
    table.insert(2, "share", table["inertia"] / total if total > 0 else np.nan)
    if plan.independent:
        table = table.drop(columns="stratum")
    table.index.name = "tested"
    return table


def _notes(data, o, scope, ss, plan, used, inertia) -> list:
    notes = list(plan.notes)
    for st in used.values():
        if st.perms.note():
            notes.append(st.perms.note())
    m = int(o.constraint_df)
    notes.append(
        f"A constrained share is never zero: {m} random constraint column"
        f"{'s' if m != 1 else ''} would fit {100 * o.chance_share:.1f} % of the total on "
        f"average here. Read the share ({100 * o.r_squared:.1f} %) against that chance level, "
        "or read the adjusted share and the p-value.")
    if scope == "each_axis":
        notes.append("Axes are tested in order, each given the axes before it; read them in "
                     "that order and stop at the first axis whose p-value is large. A later "
                     "axis is tested given earlier axes estimated from the same data: when "
                     "they are only moderately strong they have taken up some noise, and the "
                     "later tests are conservative (they hold their level but lose power).")
        ref = o.eigenvalues.iloc[:o.n_constrained].to_numpy()
        got = inertia.to_numpy()
        if got.size != np.sum(ref > 0) or not np.allclose(got, ref[ref > 0], rtol=1e-6):
            notes.append("The axes tested are the constrained axes of the data at the level "
                         f"of the test ({next(iter(used.values())).name}), which differ from "
                         "the ordination's own constrained axes; their eigenvalues are in the "
                         "table.")
    if scope == "each_term" and ss == "marginal" and any(
            _split_terms(list(data.terms), t, ss)[1] for t in data.terms):
        notes.append("Marginal tests: a term that is part of an interaction is tested "
                     "without adjusting for that interaction.")
    notes.extend(totals_notes(data))
    if data.method == "db-RDA" and o.negative_share > 0:
        notes.append(f"Negative eigenvalues hold {100 * o.negative_share:.1f} % of the total "
                     "(the measure is not Euclidean): inertias are traces of the Gower "
                     "matrix and the per-axis tests only cover axes with positive "
                     "eigenvalues.")
    return notes
