"""Random factors crossed with fixed ones: denominators from expected mean squares.

In a balanced factorial of factors, some random (sites, years drawn from many) and some fixed
(treatments), the expected mean square of a term T is sigma^2 plus r x (product of the
levels of the factors not in S) x sigma^2_S for T itself and for every term S containing T
whose extra factors (S minus T) are all random (Cornfield & Tukey 1956; their finite
population model with fixed factors exhausted; Winer, Brown & Michels 1991, ch. 5). A term
is tested against the term D whose expected mean square equals its own without sigma^2_T:
the set of terms containing T with random extras must be D together with the terms that
contain D with random extras. For a fixed ``treatment`` crossed with a random ``site``:
F(treatment) = MS(treatment) / MS(treatment:site); ``site`` and ``treatment:site`` are
tested against the residual. When no single term qualifies a quasi-F ratio would be needed,
and it is refused.

Permutations. A term tested against D is tested between the cells of D's factors: the
cell means are the units, the cells are permuted whole within the cells of D's other
factors (``treatment`` labels exchanged among the ``treatment:site`` cells of each site), and
the residual of the cell means after the other terms within D is exactly D's sum of squares
in a balanced design (Anderson & ter Braak 2003 for restricted permutation in mixed
models). Terms tested against the residual permute residuals of their reduced model among
all samples (Freedman & Lane 1983).

Only balanced designs of factors are supported: every combination of the levels of the
factors present holds the same number of samples, every sub-term of a listed interaction is
listed, and interactions that are not listed are taken to be absent.

References
----------
Anderson, M. J. & ter Braak, C. J. F. (2003). J. Stat. Comput. Simul. 73, 85-113.
Cornfield, J. & Tukey, J. W. (1956). Average values of mean squares in factorials. Ann.
Math. Stat. 27, 907-949.
Winer, B. J., Brown, D. R. & Michels, K. M. (1991). Statistical Principles in Experimental
Design, 3rd ed. McGraw-Hill.
"""
from __future__ import annotations

import itertools

import numpy as np
import pandas as pd

from .errors import DesignError, Location

__all__ = ["denominators", "random_tests"]


def _parts(term: str) -> frozenset:
    return frozenset(p.strip() for p in term.split(":"))


def _check(frame: pd.DataFrame, mm, random: list) -> int:
    """Checks of the supported class; returns the samples per cell."""
    terms = list(mm.terms)
    mains = {p for t in terms for p in _parts(t)}
    for r in random:
        if r not in terms or mm.kinds.get(r) != "factor":
            raise DesignError(f"random factor {r!r} must be listed in `terms` as a factor; "
                              f"terms are {terms}.", location=Location(column=repr(r)),
                              hint="Add it to `terms` (and its interactions with the fixed "
                                   "factors).")
    for p in sorted(mains):
        col = frame[p]
        if pd.api.types.is_numeric_dtype(col) and not pd.api.types.is_bool_dtype(col):
            raise DesignError(f"{p!r} is numeric; random factors are supported in designs of "
                              "factors only.", location=Location(column=repr(p)),
                              hint="Code it as a factor (text), or drop `random`.")
    listed = {_parts(t) for t in terms}
    for t in terms:
        ps = _parts(t)
        for k in range(1, len(ps)):
            for sub in itertools.combinations(sorted(ps), k):
                if frozenset(sub) not in listed:
                    raise DesignError(f"{t!r} is listed but its sub-term "
                                      f"{':'.join(sub)!r} is not; with random factors every "
                                      "sub-term of an interaction must be in the model.",
                                      hint=f"Add {':'.join(sub)!r} to `terms`.")
    names = sorted(mains)
    counts = frame.groupby([frame[p].astype(str) for p in names], observed=True).size()
    n_cells = int(np.prod([frame[p].astype(str).nunique() for p in names]))
    if counts.size != n_cells or counts.nunique() != 1:
        raise DesignError(
            f"the design of {names} is unbalanced (cells hold {int(counts.min())}-"
            f"{int(counts.max())} samples, {n_cells - counts.size} of {n_cells} cells "
            "empty); denominators from expected mean squares need a balanced design.",
            hint="Use `units` for repeated samples of the same units, or balance the design.")
    return int(counts.iloc[0])


def denominators(terms: list, random: list) -> dict:
    """term -> denominator term (or None for the residual), by the Cornfield & Tukey rules.

    Raises DesignError when a term would need a quasi-F ratio.

    Examples
    --------
    >>> denominators(["t", "site", "t:site"], ["site"])
    {'t': 't:site', 'site': None, 't:site': None}
    """
    rand = set(random)
    parts = {t: _parts(t) for t in terms}

    def above(t):
        return {s for s in terms if parts[s] > parts[t] and parts[s] - parts[t] <= rand}

    out = {}
    for t in terms:
        c = above(t)
        if not c:
            out[t] = None
            continue
        found = [d for d in c if c == {d} | above(d)]
        if not found:
            raise DesignError(
                f"no single term has the expected mean square {t!r} must be tested against "
                f"(it would need a quasi-F ratio combining {sorted(c)}); tallyform does not "
                "compute quasi-F ratios.",
                hint="Declare fewer factors random, or drop interactions with the random "
                     "factors that are not needed.")
        out[t] = found[0]
    return out


def _cells(frame: pd.DataFrame, names) -> np.ndarray | None:
    names = sorted(names)
    if not names:
        return None
    keys = pd.MultiIndex.from_arrays([frame[p].astype(str).to_numpy() for p in names])
    return pd.factorize(keys)[0].astype(np.intp)


def random_tests(resp, frame, mm, random, *, ss, block_codes, block_name, n_permutations,
                 rng, progress=None, cancel=None) -> tuple:
    """Tests of every term with denominators from expected mean squares.

    Returns (tests, residual rows, notes, provenance) like
    :func:`tallyform.core.strata.design_tests`.
    """
    from .permutation import Permutations, nested_bases
    from .permutation import clean_ss
    from .schemes import UnitPermutations, combine_codes, label_symmetries
    from .strata import (DesignColumns, StratumRow, main_effects, run_jobs, sample_jobs,
                         unit_jobs, unit_residual)
    from .units import UnitLevel, unit_blocks
    random = [random] if isinstance(random, str) else [str(r) for r in random]
    terms = list(mm.terms)
    r = _check(frame, mm, random)
    den = denominators(terms, random)
    cols = DesignColumns(mm)
    n = resp.n
    total = resp.total()
    q_model = nested_bases(None, mm.X)[1]
    df_res = n - 1 - q_model.shape[1]
    ss_res = clean_ss(total - float(resp.quad(q_model).sum()), total)
    common = dict(progress=progress, cancel=cancel)
    jobs, schemes = [], []
    plain = [t for t in terms if den[t] is None]
    if plain:
        sym = label_symmetries(main_effects(frame, terms), block_codes)
        perms = Permutations(n, n_permutations, rng, blocks=block_codes,
                             block_name=block_name, design=mm.X, symmetries=sym)
        jobs += sample_jobs(resp, cols, terms, ss, perms, df_res=df_res, stratum="samples",
                            against="Residual", base="intercept", blocks=block_codes,
                            block_name=block_name, only=plain, **common)
        schemes.append((perms, plain))
    for t in terms:
        d = den[t]
        if d is None:
            continue
        outer = _parts(d) - _parts(t)
        codes = _cells(frame, _parts(d))
        m = int(codes.max()) + 1
        level = UnitLevel(d, codes, tuple(str(i) for i in range(m)))
        first = np.unique(codes, return_index=True)[1]
        parent = _cells(frame.iloc[first], outer)
        base = np.ones((m, 1)) if parent is None else np.eye(int(parent.max()) + 1)[parent]
        inner = [s for s in terms if _parts(s) <= _parts(d) and s != d
                 and not _parts(s) <= outer]
        ub = None if block_codes is None else unit_blocks(level, block_codes, block_name)
        ublocks = combine_codes(parent, ub)
        ucols = cols.rows(first)
        y, signs = resp.unit_means(codes)
        w = level.sizes.astype(float)
        _, df_d = unit_residual(y, signs, w, np.hstack([base, ucols(inner)]))
        outer_name = ":".join(sorted(outer)) if outer else None
        perms = UnitPermutations(codes, n_permutations, rng, unit_name=f"{d} cells",
                                 blocks=ublocks, block_name=outer_name,
                                 design=ucols(inner),
                                 symmetries=label_symmetries(
                                     main_effects(frame, inner, rows=first), ublocks))
        jobs += unit_jobs(y, signs, w, base, ucols, inner, ss, perms, df_res=df_d,
                          stratum=f"between {d!r} cells", against=d,
                          base=f"{outer_name} cells" if outer_name else "intercept",
                          blocks=ublocks, block_name=outer_name, only=[t], **common)
        schemes.append((perms, [t]))
    tests = run_jobs(jobs)
    for t in terms:                       # the row a term is tested against, and its df
        if den[t] is not None:
            tests[t].df_denominator = tests[den[t]].df
    notes = [f"Random factor(s) {random}: each term is tested against the term its expected "
             f"mean square calls for (Cornfield & Tukey 1956) in this balanced design of {r} "
             f"sample(s) per cell; interactions not listed are taken to be absent. "
             + "; ".join(f"{t!r} against {den[t]!r}, permuting whole {den[t]!r} cells"
                         + (f" within each {':'.join(sorted(_parts(den[t]) - _parts(t)))!r}"
                            if _parts(den[t]) - _parts(t) else "")
                         for t in terms if den[t] is not None) + "."]
    notes += [tests[t].note for t in terms if tests[t].note]
    for perms, ts in schemes:
        note = perms.note(term=ts[0] if len(ts) == 1 else None)
        if note:
            notes.append(note)
    rows = [StratumRow("Residual", "samples", df_res, ss_res)]
    provenance = {"random": random, "denominators": {t: den[t] or "Residual" for t in terms}}
    return tests, rows, notes, provenance
