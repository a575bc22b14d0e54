"""The constrained share of CCA, RDA and db-RDA: its chance level, its adjusted value, and
how an ordination shows them (with the overall test once one is attached).

m constraint columns fit, on average over relabellings of the samples, m / (n - 1) of the
total inertia of n samples (with unit weights this is exact: E[tr(P H P' G)] = m / (n - 1)
tr(G) over all permutations P). After k condition columns they fit m / (n - 1 - k) of what
the conditions leave. The adjusted share subtracts that chance part: Ezekiel (1930) for RDA
and db-RDA; for CCA, whose row weights break the formula, the permutation estimate of
Peres-Neto et al. (2006), 1 - (1 - R^2) / (1 - mean R^2*), which is Ezekiel's value when
every weight is 1. A partial analysis' adjusted share is that of terms and conditions
together minus that of the conditions (fraction [a] of Peres-Neto et al. 2006).

References
----------
Ezekiel, M. (1930). Methods of Correlation Analysis. Wiley.
Peres-Neto, P. R., Legendre, P., Dray, S. & Borcard, D. (2006). Variation partitioning of
species data matrices: estimation and comparison of fractions. Ecology 87, 2614-2625.
"""
from __future__ import annotations

import numpy as np

from .display import p_words
from .constraint_engine import ConstraintData, f_test
from .errors import InputError
from .permutation import Permutations
from .random import as_rng

__all__ = ["share_parts", "reading_note", "share_summary", "permutation_adjusted_share",
           "share_plan", "adjusted_from_plan", "ordination_adjusted_share", "attach_test"]


def share_parts(total, conditioned, constrained, n, m, kz, ezekiel):
    """(r_squared, adjusted or None, chance level) of a constrained analysis.

    Chance level: what m random columns fit on average after k condition columns,
    m / (n - 1 - k) of what the conditions leave. Adjusted: Ezekiel (1930), for a partial
    analysis the adjusted share of terms and conditions minus that of the conditions
    (fraction [a] of Peres-Neto et al. 2006).
    """
    if total <= 0:
        return float("nan"), None, float("nan")
    cond = 0.0 if conditioned is None else conditioned / total
    r2 = constrained / total
    chance = m / (n - 1 - kz) * (1.0 - cond) if n - 1 - kz > 0 else float("nan")
    adj = None
    if ezekiel:
        def ez(r, k):
            return 1.0 - (1.0 - r) * (n - 1) / (n - k - 1) if n - k - 1 > 0 else float("nan")
        adj = ez(cond + r2, m + kz) - (ez(cond, kz) if kz else 0.0)
    return r2, adj, chance


def reading_note(method, r2, chance, adj, m, n) -> str:
    adj_text = (f"the adjusted share ({100 * adj:.1f} %, about 0 when the constraints fit no "
                "more than chance)" if adj is not None and np.isfinite(adj)
                else "the adjusted share (by permutation: adjusted_share())")
    return (f"How to read the constrained share ({100 * r2:.1f} %): it is never zero, since "
            f"{m} random constraint column{'s' if m != 1 else ''} fit "
            f"{100 * chance:.1f} % of the total on average with {n} samples (the chance "
            f"level{', approximately for CCA' if method == 'CCA' else ''}). Read it against "
            f"that level, as {adj_text}, and test it: tly.constraint_test(ordination). Two "
            "groups that look separated on the constrained axes are not evidence by "
            "themselves: the axes are chosen to separate them.")


def share_plan(data: ConstraintData, n_permutations: int, rng) -> list:
    """The permutation runs of :func:`permutation_adjusted_share`: (columns, Permutations)
    for terms and conditions together, then (partial analyses) for the conditions alone."""
    if n_permutations <= 0:
        return []
    rng = as_rng(rng)
    sets = [data.X if data.Z is None else np.hstack([data.Z, data.X])]
    if data.Z is not None:
        sets.append(data.Z)
    return [(cols, Permutations(data.n, n_permutations, rng, design=cols)) for cols in sets]


def adjusted_from_plan(data: ConstraintData, plan: list, *, progress=None,
                       cancel=None) -> tuple[float, float]:
    """(adjusted share, chance level) from the runs of :func:`share_plan`."""
    if not plan:
        return float("nan"), float("nan")
    rows = data.rows()
    none = np.empty((data.n, 0))
    parts = []
    for cols, perms in plan:
        r = f_test(rows, none, cols, None, perms, progress=progress, cancel=cancel)
        r2, mean = r.fitted / r.total, float(np.mean(r.null_fitted)) / r.total
        parts.append((1.0 - (1.0 - r2) / (1.0 - mean), mean))
    adj, chance = parts[0]
    if len(parts) == 2:
        adj, chance = adj - parts[1][0], chance - parts[1][1]
    return float(adj), float(chance)


def permutation_adjusted_share(data: ConstraintData, *, n_permutations: int = 999,
                               rng=None) -> tuple[float, float]:
    """Adjusted constrained share and chance level by permutation (Peres-Neto et al. 2006).

    R^2_adj = 1 - (1 - R^2) / (1 - mean R^2*), with R^2* the share fitted by the
    constraints after permuting their rows (each sample keeping its weight). With unit
    weights mean R^2* = m / (n - 1) and this is Ezekiel's adjustment. Partial analyses: the
    adjusted share of terms and conditions together minus that of the conditions alone.
    Exact enumeration (few distinct relabellings) gives the exact permutation mean.

    Returns
    -------
    (adjusted share, chance level) : tuple of float (NaN without permutations)
    """
    return adjusted_from_plan(data, share_plan(data, n_permutations, rng))


def share_summary(o) -> str | None:
    """See :meth:`tallyform.core.ordination.Ordination.constrained_summary`."""
    if o.r_squared is None:
        return None
    bits = []
    if o.chance_share is not None:
        bits.append(f"chance level {100 * o.chance_share:.1f} %")
    if o.adjusted_r_squared is not None and np.isfinite(o.adjusted_r_squared):
        bits.append(f"adjusted {100 * o.adjusted_r_squared:.1f} %")
    elif o.method == "CCA":
        bits.append("adjusted: by permutation, see adjusted_share()")
    t = o.constraint_test
    if t is not None:
        row = t.tested[0]
        p = float(t.table.loc[row, "pvalue"])
        perms = "exact" if t.exact else f"{t.n_permutations} permutations"
        what = "overall" if t.scope == "all" else repr(row)
        bits.append(f"{what} {p_words(p)}, {perms}" if np.isfinite(p) else f"{what}: no p-value")
    else:
        bits.append("not tested: tly.constraint_test(...)")
    return f"constrained share {100 * o.r_squared:.1f} % ({'; '.join(bits)})"


def ordination_adjusted_share(o, cache: dict, n_permutations, rng) -> float:
    """See :meth:`tallyform.core.ordination.Ordination.adjusted_share`."""
    if o.constraint_data is None:
        raise InputError(f"a {o.method} has no constraints, so no constrained share.")
    if o.method != "CCA":
        return float(o.adjusted_r_squared)
    from .inference import check_n_permutations
    n_permutations = check_n_permutations(n_permutations)
    key = ((n_permutations, rng) if rng is None or isinstance(rng, (int, np.integer))
           else None)
    if key is not None and key in cache:
        return cache[key][0]
    value = permutation_adjusted_share(o.constraint_data, n_permutations=n_permutations,
                                       rng=rng)
    if key is not None:
        cache[key] = value
    return value[0]


def attach_test(o, test):
    """See :meth:`tallyform.core.ordination.Ordination.with_test`."""
    from dataclasses import replace
    from .constraint_tests import ConstraintTest
    if not isinstance(test, ConstraintTest):
        raise InputError("`test` must be a ConstraintTest (from tly.constraint_test); got "
                         f"{type(test).__name__}.")
    if test.source is not None and test.source.constraint_data is not o.constraint_data:
        raise InputError("this ConstraintTest was computed for another ordination.")
    changes = {"constraint_test": test}
    if o.method == "CCA" and test.adjusted_share is not None:
        changes.update(adjusted_r_squared=test.adjusted_share, chance_share=test.chance_share)
    notes = [n for n in o.notes if not n.startswith("Constraint test: ")]
    notes.append(f"Constraint test: {test.reading}")
    return replace(o, notes=tuple(notes), **changes)
