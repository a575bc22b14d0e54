"""Tests on a dissimilarity: PERMANOVA and pairwise PERMANOVA (the dispersion test is in
:mod:`tallyform.core.dispersion`), plus the input checks they share.

Both use the permutation engine (:mod:`tallyform.core.permutation`) and the one design
coder (:func:`tallyform.core.design.model_matrix`).
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from .design import as_samples, factor_levels, model_matrix
from .dissimilarity import Dissimilarity
from .random import as_rng
from .errors import DesignError, InputError, Location
from .permutation import (Permutations, PermutationTest, _clean, nested_bases,
                          permutation_f_test, prepare_response)
from .results import ResultMixin, readonly

__all__ = ["permanova", "pairwise_permanova", "adjust_pvalues", "PermanovaResult",
           "PairwiseResult", "check_option", "check_n_permutations", "align_samples",
           "align_labels", "block_labels"]

_SS_TYPES = ("sequential", "marginal")
_ADJUST = ("holm", "bh", None)


# ---------------------------------------------------------------------------- checks
def check_option(name: str, value, allowed) -> None:
    if value not in allowed:
        raise InputError(f"`{name}` must be one of {list(allowed)}; got {value!r}.")


def check_n_permutations(n_permutations) -> int:
    if isinstance(n_permutations, bool) or not isinstance(n_permutations, (int, np.integer)) \
            or n_permutations < 0:
        raise InputError(f"`n_permutations` must be a whole number >= 0; got "
                         f"{n_permutations!r}.")
    return int(n_permutations)


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
@dataclass(frozen=True, eq=False)
class PermanovaResult(ResultMixin):
    """A PERMANOVA table with its permutation evidence.

    Attributes
    ----------
    table : DataFrame
        Rows: every term, ``Residual``, ``Total``; columns ``df, ss, ms, pseudo_f, r2,
        pvalue``.
    statistic, pvalue : Series
        Pseudo-F and p-value of every term (indexed by term).
    null_distribution : dict term -> ndarray
        The permuted pseudo-F values of each term (read-only).
    scheme : str
        How samples were relabelled (free / within blocks; random or exact).
    n_permutations : int
        Permutations evaluated per term (with ``exact``, the number of distinct
        relabellings, identity included).
    exact : bool
    ss_type : {'sequential', 'marginal'}
    terms : tuple of str
    measure : str
    n_samples : int
    notes : tuple of str
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

    def __post_init__(self):
        object.__setattr__(self, "null_distribution",
                           {k: readonly(v) for k, v in self.null_distribution.items()})

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    def figure(self, *, term: str | None = None, **kwargs):
        """The permutation distribution of one term's pseudo-F with the observed value
        (:func:`tallyform.render.plots.null_distribution_figure`; default: first term)."""
        from ..render.inference_plots import null_distribution_figure  # lazy: plotly
        return null_distribution_figure(self, term=term, **kwargs)

    def _title(self) -> str:
        perms = "exact" if self.exact else f"{self.n_permutations} permutations"
        return (f"PERMANOVA on {self.measure} ({self.n_samples} samples, {self.ss_type} sums "
                f"of squares, {perms}; {self.scheme})")


def _term_parts(term: str) -> frozenset:
    return frozenset(p.strip() for p in term.split(":"))


def _split_terms(terms: list, t: str, ss: str) -> tuple[list, list]:
    """(reduced, later) terms for testing ``t``."""
    if ss == "sequential":
        i = terms.index(t)
        return terms[:i], terms[i + 1:]
    parts = _term_parts(t)
    containing = [u for u in terms if u != t and parts < _term_parts(u)]
    others = [u for u in terms if u != t and u not in containing]
    return others, containing


def permanova(d, samples, terms, *, blocks=None, n_permutations: int = 999, rng=None,
              ss: str = "sequential", progress: Callable[[int, int], None] | None = None,
              cancel: Callable[[], bool] | None = None) -> PermanovaResult:
    """Permutational multivariate analysis of variance on a dissimilarity (PERMANOVA).

    Parameters
    ----------
    d : Dissimilarity
    samples : DataFrame or CommunityTable
        Sample information, matched to ``d.labels`` by label.
    terms : str or list of str
        Factors, numeric covariates and interactions (``"a:b"``), in the order of the
        sequential table.
    blocks : str, Series or sequence, optional
        Blocking column (or labels): samples are permuted only within blocks. The blocks
        are not added to the model; list them in ``terms`` too to remove their effect.
    n_permutations : int, default 999
        When the number of distinct relabellings is at most this, all of them are used
        instead (exact test; the result says so).
    rng : None, int or numpy.random.Generator
    ss : {'sequential', 'marginal'}, default 'sequential'
        Sequential: each term after the terms listed before it. Marginal: each term after
        every other term that does not contain it (so a main effect is not adjusted for
        its own interactions: "type II"; coding-independent).
    progress : callable(done, total), optional
    cancel : callable() -> bool, optional
        True stops the run with :class:`tallyform.errors.Cancelled`; nothing is returned.

    Returns
    -------
    PermanovaResult
        ``.table`` with ``df, ss, ms, pseudo_f, r2, pvalue`` per term plus ``Residual`` and
        ``Total``.

    Raises
    ------
    DesignError
        Unknown column, one-level factor, missing values, a level per sample, no residual
        degrees of freedom, blocks of one sample each, sample labels that do not match.

    Notes
    -----
    With G = -1/2 C D^2 C (Gower 1966), H_t the hat matrix of the intercept and the terms up
    to t: SS_t = tr((H_t - H_{t-1}) G), SS_res = tr((I - H) G), SS_T = tr(G),
    pseudo-F_t = (SS_t / df_t) / (SS_res / df_res), R^2_t = SS_t / SS_T (Anderson 2001;
    McArdle & Anderson 2001). The first term is tested by permuting samples; every term is
    tested by permuting the residuals of the model without it (Freedman & Lane 1983;
    Anderson & ter Braak 2003), which for the first sequential term is the same thing.
    p = (1 + #{F* >= F}) / (1 + P), or the exact proportion when every distinct
    relabelling is enumerated. PERMANOVA responds to differences in spread as well as in
    location: read it next to :func:`dispersion_test` (Anderson 2006).

    References
    ----------
    Anderson, M. J. (2001). A new method for non-parametric multivariate analysis of
    variance. Austral Ecology 26, 32-46.
    Anderson, M. J. & ter Braak, C. J. F. (2003). Permutation tests for multi-factorial
    analysis of variance. J. Stat. Comput. Simul. 73, 85-113.
    Freedman, D. & Lane, D. (1983). J. Bus. Econ. Stat. 1, 292-298.
    McArdle, B. H. & Anderson, M. J. (2001). Ecology 82, 290-297.

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
    >>> float(res.pvalue["site"])
    0.1
    """
    d = check_dissimilarity(d)
    check_option("ss", ss, _SS_TYPES)
    n_permutations = check_n_permutations(n_permutations)
    frame, notes = align_samples(samples, d.labels)
    mm = model_matrix(frame, terms)
    block_codes, block_name = block_labels(frame, blocks)
    rng = as_rng(rng)
    terms = list(mm.terms)
    n = d.n

    resp = prepare_response(d)
    perms = Permutations(n, n_permutations, rng, blocks=block_codes, block_name=block_name,
                         design=mm.X)
    _, q_model, _ = nested_bases(None, mm.X)
    total = resp.total()
    df_res = n - 1 - q_model.shape[1]
    ss_res = _clean(total - float(resp.quad(q_model).sum()), total)

    def cols(ts):
        idx = [c for u in terms if u in ts for c in mm.term_columns[u]]
        return mm.X[:, idx] if idx else None

    rows, nulls, tested = {}, {}, []
    plan = []
    for t in terms:
        reduced, later = _split_terms(terms, t, ss)
        Xz, Xw = cols(reduced), cols(later)
        Xf = cols(reduced + [t])
        qz, qt, _ = nested_bases(Xz, Xf, Xw)
        plan.append((t, Xz, Xf, Xw, qt.shape[1]))
    n_tested = sum(1 for *_, k in plan if k > 0)
    grand = n_tested * perms.total
    offset = 0
    for t, Xz, Xf, Xw, df_t in plan:
        if df_t == 0:
            rows[t] = dict(df=0, ss=0.0, ms=np.nan, pseudo_f=np.nan, r2=0.0, pvalue=np.nan)
            notes += (f"Term {t!r} adds nothing once the terms before it are in the model "
                      "(its columns are aliased with theirs); it has no test.",)
            continue
        res: PermutationTest = permutation_f_test(
            resp, Xf, Xz, X_later=Xw, permutations=perms,
            progress=_sub_progress(progress, offset, grand), cancel=cancel)
        offset += perms.total
        ss_t, _ = res.ss
        rows[t] = dict(df=res.df[0], ss=ss_t, ms=ss_t / res.df[0], pseudo_f=res.statistic,
                       r2=ss_t / total, pvalue=res.pvalue)
        nulls[t] = res.null_distribution
        tested.append(t)
    rows["Residual"] = dict(df=df_res, ss=ss_res, ms=ss_res / df_res, pseudo_f=np.nan,
                            r2=ss_res / total, pvalue=np.nan)
    rows["Total"] = dict(df=n - 1, ss=total, ms=np.nan, pseudo_f=np.nan, r2=1.0,
                         pvalue=np.nan)
    table = pd.DataFrame.from_dict(rows, orient="index")[
        ["df", "ss", "ms", "pseudo_f", "r2", "pvalue"]]
    table["df"] = table["df"].astype(int)
    table.index.name = "term"
    if perms.note():
        notes += (perms.note(),)
    if ss == "marginal" and any(_split_terms(terms, t, ss)[1] for t in terms):
        notes += ("Marginal sums of squares: a term that is part of an interaction is "
                  "tested without adjusting for that interaction; if the interaction matters, "
                  "read the main effect with care.",)
    factor_hit = [t for t in tested if mm.kinds.get(t) != "numeric"
                  and table.loc[t, "pvalue"] <= 0.05]
    if factor_hit:
        notes += ("PERMANOVA also responds to differences in spread (dispersion) between "
                  "groups, not only to shifts of their centroids; check dispersion_test "
                  f"before reading {factor_hit[0]!r} as a difference in location.",)
    if resp.path == "distances" and total <= 0:
        notes += ("The total sum of squares is not positive; the dissimilarities are "
                  "degenerate.",)
    return PermanovaResult(
        table=table, statistic=table.loc[terms, "pseudo_f"].rename("pseudo_f"),
        pvalue=table.loc[terms, "pvalue"].rename("pvalue"), null_distribution=nulls,
        scheme=perms.describe() + ("; later terms by permuting residuals of the reduced "
                                   "model (Freedman & Lane 1983)" if len(terms) > 1 else ""),
        n_permutations=int(perms.total), exact=bool(perms.exact), ss_type=ss,
        terms=tuple(terms), measure=d.measure, n_samples=n, notes=notes)


# ---------------------------------------------------------------------------- pairwise
def adjust_pvalues(pvalues, method: str | None = "holm") -> np.ndarray:
    """Holm (1979) step-down or Benjamini & Hochberg (1995) step-up adjusted p-values.

    Examples
    --------
    >>> adjust_pvalues([0.01, 0.04, 0.03], "holm").round(3).tolist()
    [0.03, 0.06, 0.06]
    >>> adjust_pvalues([0.01, 0.04, 0.03], "bh").round(3).tolist()
    [0.03, 0.04, 0.04]
    """
    check_option("adjust", method, _ADJUST)
    p = np.asarray(pvalues, dtype=float)
    if method is None or p.size == 0:
        return p.copy()
    m = p.size
    order = np.argsort(p, kind="stable")
    ranked = p[order]
    if method == "holm":
        adj = np.maximum.accumulate(np.minimum(1.0, (m - np.arange(m)) * ranked))
    else:
        adj = np.minimum.accumulate((m / np.arange(m, 0, -1) * ranked[::-1]))[::-1]
        adj = np.minimum(1.0, adj)
    out = np.empty(m)
    out[order] = adj
    return out


@dataclass(frozen=True, eq=False)
class PairwiseResult(ResultMixin):
    """PERMANOVA between every pair of levels of one factor.

    Attributes
    ----------
    table : DataFrame
        One row per pair: ``group_a, group_b, n_a, n_b, pseudo_f, r2, pvalue,
        pvalue_adjusted, n_permutations, exact``; with ``statistic='welch'``, ``welch_t2,
        spread_a, spread_b`` in place of ``pseudo_f, r2``.
    statistic, pvalue, pvalue_adjusted : Series (indexed like ``table``)
    adjust : {'holm', 'bh', None}
    group : str
    notes : tuple of str
    statistic_name : {'pseudo_f', 'welch_t2'}
    """

    table: pd.DataFrame
    statistic: pd.Series
    pvalue: pd.Series
    pvalue_adjusted: pd.Series
    adjust: str | None
    group: str
    measure: str
    notes: tuple = ()
    statistic_name: str = "pseudo_f"

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    def _title(self) -> str:
        how = {"holm": "Holm", "bh": "Benjamini-Hochberg", None: "no"}[self.adjust]
        what = ("Welch-type tests (T_w^2)" if self.statistic_name == "welch_t2"
                else "PERMANOVA")
        return (f"Pairwise {what} on {self.measure} between levels of {self.group!r} "
                f"({how} adjustment)")


def pairwise_permanova(d, samples, group: str, *, adjust: str | None = "holm", blocks=None,
                       n_permutations: int = 999, rng=None, statistic: str = "pseudo_f",
                       progress: Callable[[int, int], None] | None = None,
                       cancel: Callable[[], bool] | None = None) -> PairwiseResult:
    """One-factor PERMANOVA between every pair of levels of ``group``, p-values adjusted.

    Parameters
    ----------
    d : Dissimilarity
    samples : DataFrame or CommunityTable
    group : str
        A factor column of ``samples``.
    adjust : {'holm', 'bh', None}, default 'holm'
        Holm (1979) family-wise or Benjamini & Hochberg (1995) false-discovery-rate
        adjustment over all pairs.
    blocks, n_permutations, rng, progress, cancel
        As in :func:`permanova`; each pair gets its own independent random stream.
    statistic : {'pseudo_f', 'welch'}, default 'pseudo_f'
        PERMANOVA's pseudo-F, or the Welch-type T_w^2 (Alekseyenko 2016), which allows
        each group its own spread (:func:`tallyform.core.welch.welch_permanova`; samples
        as replicates).

    Returns
    -------
    PairwiseResult

    Raises
    ------
    DesignError
        Unknown column, fewer than 2 levels, a level with fewer than 2 samples.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from scipy.spatial.distance import pdist
    >>> from tallyform.core.dissimilarity import Dissimilarity
    >>> x = np.array([[1.0], [2.0], [3.0], [7.0], [8.0], [9.0], [4.0], [5.0], [6.0]])
    >>> d = Dissimilarity(pdist(x), list("abcdefghi"), measure="euclidean")  # synthetic
    >>> info = pd.DataFrame({"site": list("xxxyyyzzz")}, index=list("abcdefghi"))
    >>> res = pairwise_permanova(d, info, "site", rng=1)
    >>> res.table.index.tolist()
    ['x vs y', 'x vs z', 'y vs z']
    >>> res.pvalue.tolist(), res.pvalue_adjusted.round(2).tolist()
    ([0.1, 0.1, 0.1], [0.3, 0.3, 0.3])
    """
    d = check_dissimilarity(d)
    check_option("adjust", adjust, _ADJUST)
    check_option("statistic", statistic, ("pseudo_f", "welch"))
    n_permutations = check_n_permutations(n_permutations)
    frame, notes = align_samples(samples, d.labels)
    model_matrix(frame, [group])                      # the same checks as PERMANOVA
    labels = frame[group].astype(str)
    levels = [str(x) for x in factor_levels(frame[group])]
    counts = labels.value_counts()
    small = [lv for lv in levels if counts.get(lv, 0) < 2]
    if small:
        raise DesignError(f"level(s) {small} of {group!r} hold a single sample; pairwise "
                          "comparisons need at least 2 samples in each level.",
                          location=Location(column=repr(group)),
                          hint="Merge or drop those levels first.")
    block_codes, block_name = block_labels(frame, blocks)
    rng = as_rng(rng)
    pairs = [(a, b) for i, a in enumerate(levels) for b in levels[i + 1:]]
    streams = rng.spawn(len(pairs))
    rows = []
    for k, ((a, b), stream) in enumerate(zip(pairs, streams)):
        mask = labels.isin([a, b]).to_numpy()
        sub = d.subset(mask)
        sub_frame = frame.loc[mask, [group]].copy()
        sub_frame[group] = pd.Categorical(labels[mask], categories=[a, b])
        sub_blocks = None if block_codes is None else pd.Series(
            block_codes[mask], index=sub.labels, name=block_name)
        test = permanova if statistic == "pseudo_f" else _welch_pair
        try:
            res = test(sub, sub_frame, [group], blocks=sub_blocks,
                       n_permutations=n_permutations, rng=stream,
                       progress=None if progress is None else
                       (lambda done, total, k=k: progress(k * total + done,
                                                          len(pairs) * total)),
                       cancel=cancel)
        except DesignError as err:
            raise DesignError(f"comparing {a!r} with {b!r}: {err.detail}",
                              location=err.location, hint=err.hint) from None
        row = dict(pair=f"{a} vs {b}", group_a=a, group_b=b, n_a=int(counts[a]),
                   n_b=int(counts[b]))
        if statistic == "pseudo_f":
            row.update(pseudo_f=res.table.loc[group, "pseudo_f"], r2=res.table.loc[group, "r2"])
        else:
            row.update(welch_t2=res.statistic, spread_a=res.groups.loc[a, "spread"],
                       spread_b=res.groups.loc[b, "spread"])
        rows.append(dict(row, pvalue=float(res.pvalue if statistic == "welch"
                                           else res.table.loc[group, "pvalue"]),
                         n_permutations=res.n_permutations, exact=res.exact))
        for note in res.notes:
            if note.startswith(("Only", "Group(s)")) and note not in notes:
                notes += (f"{a} vs {b}: {note}",)
    table = pd.DataFrame(rows).set_index("pair")
    table.insert(table.columns.get_loc("pvalue") + 1, "pvalue_adjusted",
                 adjust_pvalues(table["pvalue"].to_numpy(), adjust))
    if statistic == "pseudo_f":
        notes += ("Pairwise tests share PERMANOVA's sensitivity to unequal spread: a small "
                  "p-value can reflect different dispersions as well as different centroids.",)
    stat_col = "pseudo_f" if statistic == "pseudo_f" else "welch_t2"
    return PairwiseResult(table=table, statistic=table[stat_col].copy(),
                          pvalue=table["pvalue"].copy(),
                          pvalue_adjusted=table["pvalue_adjusted"].copy(), adjust=adjust,
                          group=str(group), measure=d.measure, notes=notes,
                          statistic_name=stat_col)


def _welch_pair(d, frame, terms, **kw):
    """The Welch-type test of one pair (samples as replicates), for pairwise_permanova."""
    from .welch import welch_permanova            # welch.py imports this module
    return welch_permanova(d, frame, terms[0], units=False, **kw)
