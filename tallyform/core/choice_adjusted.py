"""Honest p-values after exploring: a group test adjusted for every transform and measure tried.

Trying several transformations and measures and keeping the one with the smallest p-value
makes that p-value too small: under a clean null, the smallest p over the 29 choices of the
default family falls below 0.05 in about 17 % of studies. :func:`choice_adjusted` tests
every choice on the same relabellings and adjusts each p-value for the whole family by the
single-step min-P method (Westfall & Young 1993): the adjusted p of a choice is the share of
relabellings whose smallest p-value over all choices is at most that choice's p-value.
Choices made from views that never look at the group labels (the scan, the partition, the
audit) need no adjustment; only choosing by the tests' own p-values does.

Computation. Each choice's dissimilarity is computed once. The relabellings are drawn in
batches, and every batch is evaluated for every choice (the per-choice statistics come from
the permutation engine, on the feature path where a measure has one), so all choices see the
same relabellings and none is ever recomputed per relabelling. The p-value of every permuted
statistic against its own choice's permutation distribution (the rank transform of Westfall
& Young 1993, ch. 2) needs each choice's whole null distribution: the P x K statistics are
kept (and nothing larger), then each column is ranked in turn and the running minimum over
the columns is the smallest p of every relabelling. Counts are kept as integers, so that
``pvalue_adjusted`` equals ``pvalue`` exactly with one choice, is never below it, and never
above K times it (the Bonferroni bound).

References
----------
Westfall, P. H. & Young, S. S. (1993). Resampling-Based Multiple Testing: Examples and
Methods for p-Value Adjustment, ch. 2. Wiley.
Phipson, B. & Smyth, G. K. (2010). Permutation p-values should never be zero. Stat. Appl.
Genet. Mol. Biol. 9, 39.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from .choice_grid import as_choices
from .choice_tests import CHOICE_TESTS, build_layout
from .errors import Cancelled, InputError
from .progress import reports_progress
from .random import as_rng
from .results import ResultMixin, readonly

__all__ = ["choice_adjusted", "ChoiceAdjustedResult", "single_step_min_p"]

#: Bytes of per-choice data held at once; past it, choices are run in groups (each group
#: replays the same relabellings).
_GROUP_BYTES = 512 * 2**20
#: Bytes of permuted design handled per batch.
_BATCH_BYTES = 32 * 2**20


# ---------------------------------------------------------------------------- min-P
def _ge_counts(values: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """For every entry: the total weight of the entries at least as large (ties within a
    relative 1e-9, as in the engine's p-values; NaN counts as the least extreme)."""
    from .permutation import TIE_RTOL
    v = np.where(np.isnan(values), -np.inf, values)
    order = np.argsort(v, kind="stable")
    s = v[order]
    with np.errstate(invalid="ignore"):
        gap = s[1:] - s[:-1]
        scale = np.maximum(np.abs(s[1:]), np.abs(s[:-1]))
        new = gap > TIE_RTOL * scale
    start = np.zeros(s.size, dtype=np.intp)
    start[1:] = np.where(new, np.arange(1, s.size), 0)
    np.maximum.accumulate(start, out=start)
    suffix = np.cumsum(weights[order][::-1])[::-1]
    out = np.empty(s.size, dtype=np.int64)
    out[order] = suffix[start]
    return out


def single_step_min_p(observed, null, *, exact: bool = False):
    """Raw and single-step min-P adjusted p-values of K tests on the same relabellings.

    Parameters
    ----------
    observed : array_like (K,)
        Observed statistic of every test (larger is more extreme).
    null : array_like (P, K)
        Statistic of every test under each of P relabellings (the same relabellings for all).
    exact : bool
        True when the P relabellings are every distinct relabelling, the identity included
        (p = share of them at least as extreme); False for random ones (the observed
        arrangement counts as one of P + 1: p = (1 + hits) / (P + 1)).

    Returns
    -------
    (pvalue (K,), pvalue_adjusted (K,), min_null (P,))
        ``min_null`` is the smallest p-value over the K tests of every relabelling.

    Notes
    -----
    With the observed arrangement added (random relabellings) the reference set holds
    M = P + 1 arrangements. p_bk, the share of the set whose statistic k is at least that
    of arrangement b, is the p-value of arrangement b's statistic against test k's own
    permutation distribution; the adjusted p of test k is the share of arrangements b with
    min_j p_bj <= p_0k (Westfall & Young 1993, algorithm 2.8, with min-P instead of
    max-T, so that tests on different scales count alike).

    Examples
    --------
    >>> obs = [5.0, 1.0]
    >>> null = [[1.0, 2.0], [2.0, 0.5], [6.0, 0.1]]     # three relabellings
    >>> p, adj, _ = single_step_min_p(obs, null)
    >>> p.tolist(), adj.tolist()
    ([0.5, 0.5], [0.75, 0.75])
    """
    obs = np.asarray(observed, dtype=np.float64).ravel()
    null = np.asarray(null, dtype=np.float64)
    if null.ndim != 2 or null.shape[1] != obs.size:
        raise InputError(f"`null` must be P x K with K = {obs.size}; got shape {null.shape}.")
    P, K = null.shape
    weights = np.ones(P + 1, dtype=np.int64)
    if exact:
        weights[0] = 0              # the identity is among the enumerated relabellings
    total = int(weights.sum())
    if total == 0:
        nan = np.full(K, np.nan)
        return nan, nan.copy(), np.empty(0)
    cmin = np.full(P + 1, np.iinfo(np.int64).max, dtype=np.int64)
    c_obs = np.empty(K, dtype=np.int64)
    col = np.empty(P + 1)
    for k in range(K):
        col[0] = obs[k]
        col[1:] = null[:, k]
        c = _ge_counts(col, weights)
        c_obs[k] = c[0]
        np.minimum(cmin, c, out=cmin)
    order = np.argsort(cmin, kind="stable")
    cum = np.cumsum(weights[order])
    pos = np.searchsorted(cmin[order], c_obs, side="right")
    adj = np.where(pos > 0, cum[np.maximum(pos - 1, 0)], 0)
    return c_obs / total, adj / total, cmin[1:] / total


# ---------------------------------------------------------------------------- result
@dataclass(frozen=True, eq=False)
class ChoiceAdjustedResult(ResultMixin):
    """A group test over a family of choices, each p-value adjusted for the whole family.

    Attributes
    ----------
    frame : DataFrame
        One row per distinct choice (index: its canonical name) with ``measure``,
        ``transform``, ``size_free``, ``statistic``, ``pvalue`` (the choice's own
        permutation p-value), ``pvalue_adjusted`` (single-step min-P over the family) and
        ``error`` (why a choice could not be tested; such rows are not in the family).
    statistic, pvalue, pvalue_adjusted : Series
        The same columns, indexed by choice.
    smallest : str or None
        The choice with the smallest p-value (the first of them when several tie).
    n_choices : int
        Choices compared (those with a p-value): the size of the family adjusted for.
    group : str
    aspect : {'shape', 'spread'}
    test : str
        The per-choice test, in words.
    n_permutations : int
        Relabellings evaluated for every choice (with ``exact``, every distinct one).
    exact : bool
    scheme : str
        How samples (or whole units) were relabelled.
    units : str
        The replicates that were relabelled, in words.
    min_null : ndarray
        The smallest p-value over the choices of every relabelling (the null distribution
        the adjusted p-values are read against).
    choices : tuple of dict
        The family as canonical dicts (what an analysis records).
    reading : str
    notes : tuple of str
    """

    frame: pd.DataFrame
    statistic: pd.Series
    pvalue: pd.Series
    pvalue_adjusted: pd.Series
    smallest: str | None
    n_choices: int
    group: str
    aspect: str
    test: str
    n_permutations: int
    exact: bool
    scheme: str
    units: str
    min_null: np.ndarray = field(repr=False)
    choices: tuple = ()
    reading: str = ""
    notes: tuple = ()

    def __post_init__(self):
        object.__setattr__(self, "min_null", readonly(self.min_null))

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    def _title(self) -> str:
        perms = ("exact" if self.exact else f"{self.n_permutations} relabellings")
        return (f"{self.aspect.capitalize()} of {self.group!r} over {self.n_choices} choices, "
                f"adjusted for all of them ({self.test}; {perms})")

    def __str__(self) -> str:
        return super().__str__() + ("\n\n" + self.reading if self.reading else "")


def _p(p: float) -> str:
    return "p < 0.001" if p < 0.001 else f"p = {p:.2g}" if p < 0.01 else f"p = {p:.3g}"


def _reading(frame, *, n_choices, group, test, layout, n_perms, exact, alpha=0.05) -> str:
    ok = frame[frame["error"] == ""]
    p, adj = ok["pvalue"], ok["pvalue_adjusted"]
    best = p[p == p.min()].index.tolist()
    how = (f"all {n_perms} distinct relabellings" if exact else f"the same {n_perms} random "
           "relabellings")
    whom = ("whole units" if layout.kind == "units" else "samples within units"
            if layout.kind == "within" else "samples")
    out = [f"{n_choices} choice{'s' if n_choices != 1 else ''} of transformation and measure "
           f"{'were' if n_choices != 1 else 'was'} tested for a difference in {test.what} "
           f"between the levels of {group!r}, every one on {how} of {whom} "
           f"({layout.replicates})."]
    if n_choices == 1:
        out.append(f"With one choice there is nothing to adjust for: {_p(p.iloc[0])}.")
    else:
        a, low = float(adj[best[0]]), _p(float(p[best[0]]))
        if len(best) == 1:
            first = f"The smallest p-value is that of {best[0]!r}, {low}"
        else:
            first = (f"The smallest p-value, {low}, is shared by {len(best)} choices "
                     f"({', '.join(map(repr, best[:4]))}{' ...' if len(best) > 4 else ''})")
        out.append(f"{first}; adjusted for the {n_choices} choices tried (single-step min-P, "
                   f"Westfall & Young 1993), {_p(a)}.")
        if a <= alpha:
            out.append(f"So a difference is detected at the {alpha:g} level even allowing "
                       "for the search over choices.")
        else:
            out.append(f"So, once the search over choices is allowed for, no difference is "
                       f"detected at the {alpha:g} level; this is not evidence that the groups "
                       "are the same.")
        out.append("Quote the adjusted p-value when the choice was picked after seeing these "
                   "p-values; a choice fixed in advance, or picked from views that never look "
                   "at the groups (scan, partition, audit), keeps its own p-value.")
    floor = layout.perms.min_pvalue
    if floor is not None and floor > alpha:
        out.append(f"With these {layout.n_replicates} replicates the smallest possible p-value "
                   f"is {floor:.2g}, above {alpha:g}: no choice can detect a difference at "
                   "that level, whatever the data.")
    return " ".join(out)


def _coarse_note(raw, min_null, *, exact: bool, n_choices: int,
                 alpha: float = 0.05) -> str | None:
    """A note when the adjusted p-values are coarse: the share of relabellings tied at the
    smallest p over the choices (about the smallest adjusted p possible) is above
    alpha / 5. With K choices, up to K relabellings are each some choice's most extreme
    one, so min-P needs more relabellings than one test does (Westfall & Young 1993)."""
    if n_choices < 2 or min_null.size == 0:
        return None
    low = min(float(min_null.min()), float(np.min(raw)))
    ties = int(np.sum(np.isclose(min_null, low, rtol=1e-12, atol=0)))
    ties += int(not exact and np.isclose(np.min(raw), low, rtol=1e-12, atol=0))
    floor = ties / (min_null.size + (0 if exact else 1))
    if floor <= alpha / 5:
        return None
    return (f"The adjusted p-values are coarse: {ties} of the relabellings are the most "
            f"extreme one for some of the {n_choices} choices, so an adjusted p-value cannot "
            f"fall much below {floor:.2g} here; more permutations (e.g. n_permutations=9999) "
            "refine them.")


#: Ratio of the groups' geometric-mean counted totals from which a note warns of depth.
DEPTH_RATIO = 1.5


def depth_note(tab, codes: np.ndarray, levels: list) -> str | None:
    """A note when the groups were counted to different depths (whole-number counts whose
    geometric-mean totals differ by ``DEPTH_RATIO`` or more), else None."""
    from .abundance import counting_basis
    counts = np.asarray(counting_basis(tab)[0], dtype=np.float64)
    if not np.array_equal(counts, np.round(counts)):
        return None
    totals = counts.sum(axis=1)
    if np.any(totals <= 0):
        return None
    gm = np.array([np.exp(np.log(totals[codes == g]).mean()) for g in range(len(levels))])
    lo, hi = int(np.argmin(gm)), int(np.argmax(gm))
    ratio = gm[hi] / gm[lo]
    if ratio < DEPTH_RATIO:
        return None
    return (f"The groups were counted to different depths (geometric-mean totals "
            f"{gm[lo]:,.0f} in {levels[lo]!r} to {gm[hi]:,.0f} in {levels[hi]!r}, {ratio:.2g} "
            "times): counts of one composition then differ in counting noise and in zeros, "
            "and the test of each choice can respond to that, the more so for choices that "
            "stress rare taxa (low powers, log-ratios, presence/absence). The adjustment "
            "covers the search over choices, not this: measured with 30 size-free choices "
            "at totals of about 3000 against 9000, the adjusted smallest p fell below 0.05 "
            "in 11 % of data sets without any difference in composition, and in 4 % after "
            "rarefying every sample to the smallest total (a subsample without "
            "replacement).")


def _frame(family, ok, observed, raw, adj, free, errors) -> pd.DataFrame:
    pv = np.full(len(family), np.nan)
    pa = np.full(len(family), np.nan)
    pv[ok], pa[ok] = raw, adj
    return pd.DataFrame({"measure": [c.measure for c in family],
                         "transform": [c.transform for c in family],
                         "size_free": [bool(f) if e == "" else np.nan
                                       for f, e in zip(free, errors)],
                         "statistic": np.where(ok, observed, np.nan), "pvalue": pv,
                         "pvalue_adjusted": pa, "error": errors},
                        index=pd.Index([c.name for c in family], name="choice"))


def _notes(tab, layout, aspect, frame, raw, min_null, dups, dnotes) -> tuple:
    tested = frame["error"] == ""
    k = int(tested.sum())
    notes = list(layout.notes)
    notes.append(_coarse_note(raw, min_null, exact=bool(layout.perms.exact), n_choices=k))
    notes.append(depth_note(tab, layout.codes, layout.levels))
    if dups:
        notes.append(f"{len(dups)} repeated choice(s) were tested once: "
                     f"{', '.join(dict.fromkeys(dups))}.")
    if not tested.all():
        bad = list(frame.index[~tested])
        notes.append(f"{len(bad)} choice(s) could not be tested on these data and are not "
                     f"counted in the adjustment: {', '.join(bad)} (see the error column).")
    if aspect == "shape":
        loose = int((tested & (frame["size_free"] == False)).sum())  # noqa: E712
        if loose:
            notes.append(f"{loose} of the {k} choices are not size-free, so their tests "
                         "also respond to differences in total abundance, not only in "
                         "composition.")
    notes.extend(dnotes)
    return tuple(dict.fromkeys(n for n in notes if n))


# ---------------------------------------------------------------------------- driver
def _groups(sizes: list, budget: int) -> list:
    out, cur, used = [], [], 0
    for i, s in enumerate(sizes):
        if cur and used + s > budget:
            out.append(cur)
            cur, used = [], 0
        cur.append(i)
        used += s
    if cur:
        out.append(cur)
    return out


def _batch_size(layout) -> int:
    n = layout.n_replicates
    k = max(1, layout.qt.shape[1] if layout.qt is not None else len(layout.levels))
    return max(16, int(_BATCH_BYTES // (8 * k * 2 * max(n, 1))))


def _run_family(test, tab, family, layout, progress, cancel):
    """Observed statistics, the P x K null, errors and notes of every choice."""
    K = len(family)
    perms = layout.perms
    P = int(perms.total)
    observed = np.full(K, np.nan)
    null = np.full((P, K), np.nan)
    errors, free, notes = [""] * K, [False] * K, []
    sizes = [test.working_bytes(c, tab) for c in family]
    size = _batch_size(layout)
    done_all, grand = 0, P * K
    for group in _groups(sizes, _GROUP_BYTES):
        prepared = {}
        for k in group:
            try:
                prep = test.prepare(tab, family[k], layout)
            except InputError as err:          # undefined for these data: not in the family
                errors[k] = str(err)
                continue
            prepared[k] = prep
            free[k] = prep.size_free
            notes.extend(f"{family[k].name}: {n}" for n in prep.notes)
        done = 0
        for idx in perms.batches(size):
            if cancel is not None and cancel():
                raise Cancelled(f"stopped after {done_all} of {grand} relabellings x choices; "
                                "no result was produced.")
            b = idx.shape[0]
            for k, prep in prepared.items():
                observed[k], null[done:done + b, k] = prep.evaluate(idx)
            done += b
            done_all += b * len(group)
            if progress is not None:
                progress(done_all, grand)
        done_all += (P - done) * len(group)
    return observed, null, errors, free, notes


def _check_options(aspect: str, n_permutations) -> int:
    """Check ``aspect`` and ``n_permutations`` (at least 1); the checked count."""
    from .inference import check_n_permutations, check_option
    check_option("aspect", aspect, tuple(CHOICE_TESTS))
    n_permutations = check_n_permutations(n_permutations)
    if n_permutations < 1:
        raise InputError("`n_permutations` must be at least 1 (999 is usual).")
    return n_permutations


def _testable(family, observed, errors: list) -> np.ndarray:
    """Which choices gave a statistic (filling ``errors`` for the others); none is refused."""
    ok = np.array([e == "" and not np.isnan(o) for e, o in zip(errors, observed)])
    for k in np.flatnonzero(~ok):
        if not errors[k]:
            errors[k] = "the statistic is undefined for these data (no variation)."
    if not ok.any():
        raise InputError("no choice could be tested on these data: "
                         + "; ".join(f"{c.name}: {e}" for c, e in zip(family, errors)))
    return ok


@reports_progress("Choice-adjusted test", knob="n_permutations")
def choice_adjusted(table, group, choices=None, *, aspect: str = "shape",
                    n_permutations: int = 999, rng=None, units=None, blocks=None,
                    progress: Callable[[int, int], None] | None = None,
                    cancel: Callable[[], bool] | None = None) -> ChoiceAdjustedResult:
    """Test a group difference with every choice of a family, each p adjusted for them all.

    Parameters
    ----------
    table : CommunityTable, DataFrame or array
    group : str or Series
        A factor column of the sample table (or the group of every sample).
    choices : list of dict, optional
        The family: ``{"measure": ..., "transform": ..., <measure options>}`` (a measure
        name alone is read as ``{"measure": name}``). Default: the scan's grid (every
        measure of ``DEFAULT_SCAN_MEASURES`` under every transformation of
        ``DEFAULT_SCAN_TRANSFORMS``) with presence/absence once: 29 choices, 27 distinct
        tests (chord after a square or fourth root is Hellinger, already in the grid).
        Choices that are the same once named canonically (``'sqrt'`` and ``Power(0.5)``;
        Jaccard after any transformation that keeps zeros) or that give the same distances
        up to scale are tested once, and counted once.
    aspect : {'shape', 'spread'}, default 'shape'
        'shape': PERMANOVA of the group, the shape test of :func:`compare_groups`; 'spread':
        the dispersion test (distances to group centroids), its spread test.
    n_permutations : int, default 999
        Relabellings, the same for every choice (all of them, and an exact test, when the
        distinct relabellings are this many or fewer).
    rng : None, int or numpy.random.Generator
        Seeds the relabellings exactly as :func:`permanova` with the same design and seed.
    units : None, False, str, list of str or Series
        Sampling units, as in :func:`compare_groups`: groups applied to whole units are
        compared by permuting whole units, groups that vary within units within them. None
        detects them; False treats samples as independent.
    blocks : str, Series or sequence, optional
        Relabel only within these blocks.
    progress, cancel : optional
        ``progress(done, total)`` over relabellings x choices; ``cancel()`` returning True
        stops the run with :class:`~tallyform.errors.Cancelled`.

    Returns
    -------
    ChoiceAdjustedResult
        ``frame`` with ``statistic``, ``pvalue`` and ``pvalue_adjusted`` per choice, and a
        ``reading`` that says how many choices were compared and which has the smallest p.

    Raises
    ------
    InputError
        An unknown measure, transformation or option in ``choices``; no choice defined for
        these data; ``n_permutations`` below 1.
    DesignError
        As in :func:`compare_groups` (unknown or one-level group, a group level with one
        sample or one unit, units or blocks that do not fit the design).

    Notes
    -----
    Single-step min-P (Westfall & Young 1993): with p_c the permutation p-value of choice
    c and, for every relabelling b, p_bc the p-value of b's statistic against choice c's own
    permutation distribution, p_adj(c) = #{b : min_c' p_bc' <= p_c} / #{b}, the observed
    arrangement counted among the relabellings (Phipson & Smyth 2010). Min-P rather than
    the maximum statistic, since the choices' statistics are on different scales. It
    controls the family-wise error over the choices whatever their dependence, because every
    choice is tested on the same relabellings; it is never larger than Bonferroni's K p_c,
    and much smaller when the choices agree, as transformations and measures of one table
    do. A choice repeated, or two choices that give the same distances, change nothing:
    the smallest p over the family is the same.

    With K choices up to K relabellings are each some choice's most extreme one, so the
    adjusted p-values are coarser than a single test's: use 999 permutations or more (the
    result says when they are coarse). Measured (benchmarks/calibration_cells/
    choice_adjusted.py, 1000 data sets per cell, 199 permutations): 2.2-5.2 % false
    rejections for families of 5 to 30 choices, independent samples or repeated visits,
    against 7-28 % for the smallest raw p; the most conservative cell (2.2 %, 30 choices)
    gave 4.8 % with 999 permutations.

    Counts of one composition taken to different depths differ in counting noise and in
    zeros, and each choice's test can respond to that; the adjustment does not remove it,
    and the result says when the groups' totals differ (``depth_note``).

    The per-choice test can be swapped: see :mod:`tallyform.core.choice_tests`.

    References
    ----------
    Westfall, P. H. & Young, S. S. (1993). Resampling-Based Multiple Testing, ch. 2. Wiley.
    Anderson, M. J. (2001). Austral Ecology 26, 32-46. Anderson, M. J. (2006). Biometrics
    62, 245-253.

    Examples
    --------
    >>> import tallyform as tly
    >>> tab = tly.demo("mesocosm")
    >>> j = tly.choice_adjusted(tab, "treatment", [{"measure": "hellinger"},
    ...                         {"measure": "chi_square", "transform": "sqrt"}],
    ...                         n_permutations=99, rng=1, progress=False)
    >>> j.n_choices, bool((j.pvalue_adjusted >= j.pvalue).all())
    (2, True)
    """
    from .table import as_table
    n_permutations = _check_options(aspect, n_permutations)
    tab = as_table(table)
    family, dups = as_choices(choices)
    test = CHOICE_TESTS[aspect]
    layout = build_layout(tab, group, units=units, blocks=blocks,
                          n_permutations=n_permutations, rng=as_rng(rng))
    observed, null, errors, free, dnotes = _run_family(test, tab, family, layout, progress,
                                                      cancel)
    ok = _testable(family, observed, errors)
    perms = layout.perms
    raw, adj, min_null = single_step_min_p(observed[ok], null[:, ok], exact=perms.exact)
    frame = _frame(family, ok, observed, raw, adj, free, errors)
    K = int(ok.sum())
    n_perm = int(perms.total)
    smallest = str(frame["pvalue"].idxmin())
    notes = _notes(tab, layout, aspect, frame, raw, min_null, dups, dnotes)
    reading = _reading(frame, n_choices=K, group=layout.group, test=test, layout=layout,
                       n_perms=n_perm, exact=bool(perms.exact))
    stat = frame["statistic"].rename(test.statistic_name)
    return ChoiceAdjustedResult(
        frame=frame, statistic=stat, pvalue=frame["pvalue"].copy(),
        pvalue_adjusted=frame["pvalue_adjusted"].copy(), smallest=smallest, n_choices=K,
        group=layout.group, aspect=aspect,
        test=f"{test.what}, {test.statistic_name} of {layout.group!r}",
        n_permutations=n_perm, exact=bool(perms.exact), scheme=perms.describe(),
        units=layout.replicates, min_null=min_null,
        choices=tuple(c.as_dict() for c in family), reading=reading, notes=notes)
