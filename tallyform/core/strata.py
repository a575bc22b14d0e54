"""Error strata for PERMANOVA: each term tested at the level of the unit it was applied to.

With sampling units u (tanks, sites; nested levels coarsest first) the variation of the data
splits into strata (Nelder 1965; Snedecor & Cochran 1989, ch. 16): between the units of the
coarsest level, between the units of each finer level within their parent unit, and within
the finest units. A term that is constant within the units of a level (a treatment given to
whole tanks) is tested in that level's stratum:

    F = [SS_t / df_t] / [SS_units|B / df_units|B],   SS_units|B = tr((H_u - H_B) G),

with H_u the hat matrix of the unit indicators, H_B that of the parent units and every
between-unit term of the stratum, df_units|B = #units - rank(B); its p-value comes from
permuting whole units (within their parent unit and within blocks), each unit keeping all of
its samples. A term that varies within the finest units (the week of a visit) is tested
within units, against tr((I - H_u - H_W) G) with df = n - #units - rank(W), permuting samples
within their unit (or cyclic shifts of ordered visits). With one variable and Euclidean
distances these are the F ratios of the classical split-plot and repeated-measures tables.

Between-unit strata are computed on the unit means. With balanced units each is weighted by
its number of samples, and the sums of squares are the classical sample-level ones (sample-
level sums of squares of terms constant within units equal the weighted unit-level ones).
With unbalanced units (missing visits) a unit mean's precision depends both on its number of
samples and on the variance of the unit effects, so the means are weighted by their estimated
precision 1 / (s2_u + s2_e / n_u) (:func:`precision_weights`; Searle, Casella & McCulloch
1992): between the classical sample weights (no unit effects) and equal weights (the
analysis of unit means, when unit effects dominate), never worse than both by much. The
variance components come from the unit structure alone, so a whole-unit relabelling moves
each unit's data together with its fixed weight to another design row: the test stays the
exact randomisation test. The small unit-level basis is then recomputed for every
permutation (a batched QR).

In every stratum the test of a term permutes the residuals of the reduced model that keeps
the stratum's other terms not containing it, with the fitted part added back (Freedman & Lane
1983; Anderson & ter Braak 2003); the numerator keeps its sequential (or marginal) form.

References
----------
Anderson, M. J. & ter Braak, C. J. F. (2003). Permutation tests for multi-factorial analysis
of variance. J. Stat. Comput. Simul. 73, 85-113.
Freedman, D. & Lane, D. (1983). A nonstochastic interpretation of reported significance
levels. J. Bus. Econ. Stat. 1, 292-298.
Nelder, J. A. (1965). The analysis of randomized experiments with orthogonal block structure.
Proc. R. Soc. Lond. A 283, 147-178.
Searle, S. R., Casella, G. & McCulloch, C. E. (1992). Variance Components, ch. 3. Wiley.
Snedecor, G. W. & Cochran, W. G. (1989). Statistical Methods, 8th ed., ch. 16. Iowa State
University Press.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from .errors import DesignError
from .permutation import Response, clean_ss
from .unit_engine import full_rank_columns, precision_weights, unit_f, unit_residual

__all__ = ["design_tests", "term_sets", "TermTest", "StratumRow", "unit_f",
           "precision_weights"]


@dataclass
class TermTest:
    """One term's row of a stratified PERMANOVA table, with its evidence."""

    term: str
    stratum: str
    df: int
    ss: float
    pseudo_f: float
    pvalue: float
    null: np.ndarray
    scheme: str
    n_permutations: int
    exact: bool
    n_distinct: int | None
    min_pvalue: float | None
    reduced: str
    tested_against: str
    df_denominator: int
    note: str | None = None
    order_dependent: bool = False


@dataclass
class StratumRow:
    """The residual (error) row of one stratum."""

    label: str
    stratum: str
    df: int
    ss: float


# ---------------------------------------------------------------------------- assembly
def term_sets(terms: list, t: str, ss: str) -> tuple[list, list, list]:
    """(before, later, reduced) for testing ``t`` among ``terms``.

    ``before``: what the numerator conditions on (the terms listed before ``t`` for sequential
    sums of squares; every term not containing ``t`` for marginal ones); ``later``: the
    other terms of the model; ``reduced``: the model whose residuals are permuted, every other
    term that does not contain ``t`` (Anderson & ter Braak 2003).
    """
    parts = _parts(t)
    containing = [u for u in terms if u != t and parts < _parts(u)]
    others = [u for u in terms if u != t and u not in containing]
    if ss == "sequential":
        i = terms.index(t)
        return terms[:i], terms[i + 1:], others
    return others, containing, others


def _is_numeric(col) -> bool:
    import pandas as pd
    return bool(pd.api.types.is_numeric_dtype(col) and not pd.api.types.is_bool_dtype(col))


def _parts(term: str) -> frozenset:
    return frozenset(p.strip() for p in term.split(":"))


class DesignColumns:
    """Columns of the coded design for lists of terms, on any transform of its rows."""

    def __init__(self, mm, X: np.ndarray | None = None):
        self.mm = mm
        self.X = mm.X if X is None else X

    def __call__(self, ts) -> np.ndarray | None:
        idx = [c for u in self.mm.terms if u in ts for c in self.mm.term_columns[u]]
        return self.X[:, idx] if idx else None

    def rows(self, index) -> "DesignColumns":
        return DesignColumns(self.mm, self.X[index])


def main_effects(frame, terms, rows=None) -> list:
    """(kind, values) of every main effect in ``terms``, for :func:`label_symmetries`."""
    out, seen = [], set()
    for t in terms:
        for p in sorted(_parts(t)):
            if p in seen:
                continue
            seen.add(p)
            col = frame[p]
            numeric = _is_numeric(col)
            values = col.to_numpy()
            if rows is not None:
                values = values[rows]
            out.append(("numeric" if numeric else "factor",
                        values if numeric else values.astype(str)))
    return out


def replication_text(frame, term: str, level, first: np.ndarray) -> str | None:
    """"3 units of 'tank' per level of 'treatment'" for a factor tested between units."""
    if ":" in term or term not in frame.columns:
        return None
    col = frame[term]
    if _is_numeric(col):
        return f"{level.m} units of {level.name!r}"
    per_unit = col.astype(str).to_numpy()[first]
    counts = np.unique(per_unit, return_counts=True)[1]
    lo, hi = int(counts.min()), int(counts.max())
    k = f"{lo}" if lo == hi else f"{lo}-{hi}"
    return f"{k} units of {level.name!r} per level of {term!r}"


def constant_within(X: np.ndarray | None, blocks) -> bool:
    """True when every column of X takes one value within every block."""
    if X is None or blocks is None:
        return False
    b = np.asarray(blocks)
    order = np.argsort(b, kind="stable")
    xs, bs = np.asarray(X)[order], b[order]
    same = bs[1:] == bs[:-1]
    return bool(np.all(np.abs(np.diff(xs, axis=0))[same] <= 1e-12 * (1 + np.abs(xs).max())))


@dataclass
class Job:
    """One term's test, ready to run: ``run(offset, grand_total)`` returns a TermTest."""

    term: str
    total: int
    run: Callable


def _describe_reduced(base: str, others: list) -> str:
    return " + ".join([base] + list(others))


def _aliased(term, stratum, against, df_den, why) -> TermTest:
    return TermTest(term, stratum, 0, 0.0, np.nan, np.nan, np.empty(0), "not tested", 0,
                    False, None, None, "", against, df_den, why)


def sample_jobs(resp: Response, cols: DesignColumns, terms: list, ss: str, perms, *,
                df_res: int, stratum: str, against: str, base: str, blocks=None,
                block_name: str | None = None, only=None, batch_size=None, progress=None,
                cancel=None) -> list:
    """Jobs for the terms of a sample-level stratum (samples as replicates, or within
    units with ``resp`` and ``cols`` already centred within the units); ``only`` restricts
    the tests to some of ``terms`` (the others still enter the models)."""
    from .permutation import nested_bases
    jobs = []
    for t in (terms if only is None else only):
        before, later, others = term_sets(terms, t, ss)
        qb, qt, qw = nested_bases(cols(before), cols(before + [t]), cols(later))
        if qt.shape[1] == 0:
            jobs.append(_aliased(t, stratum, against, df_res,
                                 f"Term {t!r} adds nothing once the terms before it are in "
                                 "the model (its columns are aliased with theirs); it has no "
                                 "test."))
            continue
        if constant_within(cols([t]), blocks):
            jobs.append(_aliased(t, stratum, against, df_res,
                                 f"{t!r} is constant within the blocks of {block_name!r}, so "
                                 "permutations within those blocks cannot test it; it has no "
                                 "p-value (test it without those blocks)."))
            continue
        qz = nested_bases(None, cols(others))[1] if others else np.empty((resp.n, 0))
        qa = np.hstack([qb, qt, qw])
        reduced = _describe_reduced(base, others)
        tangled = bool(qz.shape[1] and np.abs(qz.T @ qt).max() > 1e-9)

        def run(offset, grand, t=t, qa=qa, nb=qb.shape[1], nt=qt.shape[1], qz=qz,
                reduced=reduced, tangled=tangled):
            from .permutation import permuted_f, pvalue_from_null
            # the null only forms the p-value (and a figure): single precision settles it
            obs, null, ss_t, _ = permuted_f(resp, qa, nb, nt, qz, perms, df_res=df_res,
                                            batch_size=batch_size, progress=progress,
                                            cancel=cancel, offset=offset, grand_total=grand,
                                            single_precision=True)
            return TermTest(t, stratum, nt, ss_t, obs,
                            pvalue_from_null(obs, null, exact=perms.exact), null,
                            perms.describe(), int(perms.total), bool(perms.exact),
                            perms.n_distinct, perms.min_pvalue, reduced, against, df_res,
                            order_dependent=tangled)
        jobs.append(Job(t, int(perms.total), run))
    return jobs


def unit_jobs(y, signs, weights, base_cols: np.ndarray, cols: DesignColumns, terms: list,
              ss: str, perms, *, df_res: int, stratum: str, against: str, base: str,
              blocks=None, block_name: str | None = None, only=None, batch_size=None,
              progress=None, cancel=None) -> list:
    """Jobs for the terms of a between-unit stratum (``cols`` at the unit level)."""
    jobs = []
    m = len(weights)
    empty = np.empty((m, 0))

    def get(ts):
        x = cols(ts)
        return empty if x is None else x

    for t in (terms if only is None else only):
        before, later, others = term_sets(terms, t, ss)
        _, counts = full_rank_columns([base_cols, get(before), get([t])])
        if counts[2] == 0:
            jobs.append(_aliased(t, stratum, against, df_res,
                                 f"Term {t!r} adds nothing once the terms before it are in "
                                 "the model (its columns are aliased with theirs); it has no "
                                 "test."))
            continue
        if constant_within(cols([t]), blocks):
            jobs.append(_aliased(t, stratum, against, df_res,
                                 f"{t!r} is constant within the blocks of {block_name!r}, so "
                                 "whole units permuted within those blocks cannot test it; "
                                 "it has no p-value."))
            continue
        reduced = _describe_reduced(base, others)

        def run(offset, grand, t=t, before=before, later=later, others=others,
                reduced=reduced):
            from .permutation import pvalue_from_null
            obs, null, ss_t, _, df_t, df_r = unit_f(
                y, signs, weights, base_cols, get(before), get([t]), get(later),
                np.hstack([base_cols, get(others)]), perms, batch_size=batch_size,
                progress=progress, cancel=cancel, offset=offset, grand_total=grand)
            return TermTest(t, stratum, df_t, ss_t, obs,
                            pvalue_from_null(obs, null, exact=perms.exact), null,
                            perms.describe(), int(perms.total), bool(perms.exact),
                            perms.n_distinct, perms.min_pvalue, reduced, against, df_r)
        jobs.append(Job(t, int(perms.total), run))
    return jobs


def run_jobs(jobs: list) -> dict:
    """Run every job in order with one running count of permutations; term -> TermTest."""
    grand = sum(j.total for j in jobs if isinstance(j, Job))
    out, offset = {}, 0
    for j in jobs:
        if isinstance(j, TermTest):
            out[j.term] = j
            continue
        out[j.term] = j.run(offset, grand)
        offset += j.total
    return out


def _order_codes(values) -> np.ndarray:
    """Visit order from a column: numbers as they are, text in natural order (w2 < w10)."""
    import pandas as pd
    from .design import factor_levels
    s = pd.Series(values)
    if _is_numeric(s):
        return s.to_numpy(dtype=float)
    levels = factor_levels(s)
    rank = {str(lv): i for i, lv in enumerate(levels)}
    return np.array([rank[str(v)] for v in s.astype(str)], dtype=float)


def _unit_first(codes: np.ndarray, m: int) -> np.ndarray:
    first = np.full(m, -1, dtype=np.intp)
    seen = np.unique(codes, return_index=True)
    first[seen[0]] = seen[1]
    return first


def design_tests(resp: Response, frame, mm, plan, *, ss: str, block_codes, block_name,
                 cyclic: str | None, n_permutations: int, rng, batch_size=None,
                 progress=None, cancel=None) -> tuple[dict, list, list]:
    """Every term of ``mm`` tested in its stratum of ``plan``.

    Returns (tests: term -> TermTest, residual rows in table order, notes).
    """
    from .permutation import Permutations, nested_bases
    from .schemes import label_symmetries
    terms = list(mm.terms)
    cols = DesignColumns(mm)
    common = dict(batch_size=batch_size, progress=progress, cancel=cancel)
    jobs, rows, schemes = [], [], []
    n = resp.n
    if plan.independent:
        sym = label_symmetries(main_effects(frame, terms), block_codes)
        perms = Permutations(n, n_permutations, rng, blocks=block_codes,
                             block_name=block_name, design=mm.X, symmetries=sym)
        q_model = nested_bases(None, mm.X)[1]
        df_res = n - 1 - q_model.shape[1]
        total = resp.total()
        ss_res = clean_ss(total - float(resp.quad(q_model).sum()), total)
        jobs += sample_jobs(resp, cols, terms, ss, perms, df_res=df_res, stratum="samples",
                            against="Residual", base="intercept", blocks=block_codes,
                            block_name=block_name, **common)
        rows.append(StratumRow("Residual", "samples", df_res, ss_res))
        schemes.append((perms, terms, None))
    else:
        for k, lv in enumerate(plan.levels):
            stratum_terms = [t for t in terms if plan.strata[t] == k]
            jobs += _between(resp, frame, cols, plan, k, stratum_terms, rows, schemes,
                             ss=ss, block_codes=block_codes, block_name=block_name,
                             n_permutations=n_permutations, rng=rng, **common)
        within = [t for t in terms if plan.strata[t] == plan.within]
        jobs += _within(resp, frame, mm, plan, within, rows, schemes, ss=ss,
                        block_codes=block_codes, block_name=block_name, cyclic=cyclic,
                        n_permutations=n_permutations, rng=rng, **common)
    tests = run_jobs(jobs)
    notes = [tests[t].note for t in terms if tests[t].note]
    for perms, ts, replication in schemes:
        tested = [t for t in ts if tests[t].exact or tests[t].n_permutations]
        note = perms.note(term=tested[0] if len(tested) == 1 else None,
                          replication=replication)
        if note:
            notes.append(note)
    return tests, rows, notes


def _between(resp, frame, cols, plan, k, stratum_terms, rows, schemes, *, ss, block_codes,
             block_name, n_permutations, rng, **common) -> list:
    from .schemes import UnitPermutations, combine_codes, label_symmetries
    from .units import unit_blocks
    lv = plan.levels[k]
    codes, m = lv.codes, lv.m
    if k == 0:
        base, parent, base_desc = np.ones((m, 1)), None, "intercept"
    else:
        up = plan.levels[k - 1]
        parent, base_desc = lv.parent, f"units of {up.name!r}"
        base = np.eye(up.m)[parent]
    label, stratum = f"Residual (between {lv.name!r})", f"between {lv.name!r}"
    y, signs = resp.unit_means(codes)
    w, _ = precision_weights(resp, codes, y, signs, parent)
    if not stratum_terms:
        ss_tot, df_tot = unit_residual(y, signs, w, base)
        rows.append(StratumRow(label, stratum, df_tot, clean_ss(ss_tot, resp.total())))
        return []
    ub = unit_blocks(lv, block_codes, block_name) if block_codes is not None else None
    ublocks = combine_codes(parent, ub)
    names = ([plan.levels[k - 1].name] if k else []) + ([block_name or "blocks"]
                                                       if ub is not None else [])
    ub_name = " x ".join(names) or None
    first = _unit_first(codes, m)
    ucols = cols.rows(first)
    ss_res, df_res = unit_residual(y, signs, w, np.hstack([base, ucols(stratum_terms)]))
    if df_res <= 0:
        raise DesignError(f"the terms tested between units of {lv.name!r} "
                          f"({', '.join(map(repr, stratum_terms))}) use all {m} units, "
                          "leaving no replicate units to test them against.",
                          hint="Use fewer between-unit terms or levels, or more units.")
    sym = label_symmetries(main_effects(frame, stratum_terms, rows=first), ublocks)
    perms = UnitPermutations(codes, n_permutations, rng, unit_name=lv.name, blocks=ublocks,
                             block_name=ub_name, design=ucols(stratum_terms), symmetries=sym)
    rows.append(StratumRow(label, stratum, df_res, clean_ss(ss_res, resp.total())))
    rep = replication_text(frame, stratum_terms[0], lv, first) if len(stratum_terms) == 1 \
        else None
    schemes.append((perms, stratum_terms, rep))
    return unit_jobs(y, signs, w, base, ucols, stratum_terms, ss, perms, df_res=df_res,
                     stratum=stratum, against=label, base=base_desc, blocks=ublocks,
                     block_name=ub_name, **common)


def _within(resp, frame, mm, plan, within, rows, schemes, *, ss, block_codes, block_name,
            cyclic, n_permutations, rng, **common) -> list:
    from .permutation import nested_bases
    from .schemes import CyclicShifts, combine_codes, label_symmetries, within_units
    lv = plan.levels[-1]
    codes, m, n = lv.codes, lv.m, resp.n
    label, stratum = f"Residual (within {lv.name!r})", f"within {lv.name!r}"
    resp_w = resp.centred_within(codes)
    total = resp_w.total()
    if not within:
        rows.append(StratumRow(label, stratum, n - m, clean_ss(total, resp.total())))
        return []
    sums = np.zeros((m, mm.X.shape[1]))
    np.add.at(sums, codes, mm.X)
    xc = mm.X - (sums / lv.sizes[:, None])[codes]
    wcols = DesignColumns(mm, xc)
    q_w = nested_bases(None, wcols(within))[1]
    df_res = n - m - q_w.shape[1]
    if df_res <= 0:
        raise DesignError(f"the terms tested within units of {lv.name!r} "
                          f"({', '.join(map(repr, within))}) leave no within-unit "
                          "replication to test them against.",
                          hint="Use fewer within-unit terms or levels.")
    ss_res = clean_ss(total - float(resp_w.quad(q_w).sum()), resp.total())
    rows.append(StratumRow(label, stratum, df_res, ss_res))
    strata_codes = combine_codes(codes, block_codes)
    if cyclic is not None:
        if cyclic not in frame.columns:
            raise DesignError(f"column {cyclic!r} (the visit order for cyclic shifts) is not "
                              f"in the sample table; columns are "
                              f"{list(map(str, frame.columns))}.")
        perms = CyclicShifts(codes, _order_codes(frame[cyclic]), n_permutations, rng,
                             unit_name=lv.name, order_name=cyclic)
        strata_codes = codes
    else:
        sym = label_symmetries(main_effects(frame, within), strata_codes)
        perms = within_units(codes, n_permutations, rng, unit_name=lv.name,
                             blocks=block_codes, block_name=block_name,
                             design=DesignColumns(mm)(within), symmetries=sym)
    schemes.append((perms, within, None))
    return sample_jobs(resp_w, wcols, within, ss, perms, df_res=df_res, stratum=stratum,
                       against=label, base=f"units of {lv.name!r}", blocks=strata_codes,
                       block_name=lv.name if block_codes is None
                       else f"{lv.name} x {block_name}", **common)
