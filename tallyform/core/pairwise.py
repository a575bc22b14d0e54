"""Pairwise PERMANOVA between the levels of one factor, with Holm or Benjamini-Hochberg
adjusted p-values, and the same handling of sampling units as :func:`permanova`."""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd

from .design import factor_levels, model_matrix
from .errors import DesignError, Location
from .inference import (ADJUST_METHODS, align_samples, block_labels, check_dissimilarity,
                        check_n_permutations, check_option, permanova)
from .random import as_rng
from .results import ResultMixin
from .progress import reports_progress

__all__ = ["pairwise_permanova", "adjust_pvalues", "PairwiseResult", "PAIRWISE_STATISTICS"]

#: the statistics a pairwise contrast can use: PERMANOVA's pseudo-F or the Welch-type T_w^2
PAIRWISE_STATISTICS = ("pseudo_f", "welch")


def adjust_pvalues(pvalues, method: str | None = "holm") -> np.ndarray:
    """Holm (1979) step-down or Benjamini & Hochberg (1995) step-up adjusted p-values.

    The arithmetic is statsmodels' ``multipletests`` (methods ``'holm'`` and ``'fdr_bh'``);
    missing p-values (NaN) stay missing and do not count among the tests.

    Examples
    --------
    >>> adjust_pvalues([0.01, 0.04, 0.03], "holm").round(3).tolist()
    [0.03, 0.06, 0.06]
    >>> adjust_pvalues([0.01, 0.04, 0.03], "bh").round(3).tolist()
    [0.03, 0.04, 0.04]
    """
    check_option("adjust", method, ADJUST_METHODS)
    p = np.array(pvalues, dtype=float)           # a copy: the caller's array is not touched
    if method is None or p.size == 0:
        return p
    from statsmodels.stats.multitest import multipletests
    flat = p.reshape(-1)
    ok = np.isfinite(flat)
    if ok.any():
        flat[ok] = multipletests(flat[ok], method=_MULTIPLETESTS[method])[1]
    return flat.reshape(p.shape)


_MULTIPLETESTS = {"holm": "holm", "bh": "fdr_bh"}


@dataclass(frozen=True, eq=False)
class PairwiseResult(ResultMixin):
    """PERMANOVA between every pair of levels of one factor.

    Attributes
    ----------
    table : DataFrame
        One row per pair: ``group_a, group_b, n_a, n_b, pseudo_f, r2, pvalue,
        pvalue_adjusted, n_permutations, exact, min_pvalue, stratum`` (and ``n_units`` with
        sampling units); ``min_pvalue`` is the smallest p-value the pair's exact test can
        give.
    statistic, pvalue, pvalue_adjusted : Series (indexed like ``table``)
    adjust : {'holm', 'bh', None}
    group : str
    notes : tuple of str
    statistic_name : {'pseudo_f', 'welch_t2'}
        With ``statistic='welch'`` the table holds ``welch_t2, spread_a, spread_b`` in
        place of ``pseudo_f, r2``.
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

    def tables(self) -> dict:
        return {"pairwise": self.to_frame()}

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    @property
    def reading(self) -> str:
        """Which pairs differ after the adjustment, at the 5 % level."""
        adj = self.pvalue_adjusted
        hit = [str(k) for k, p in adj.items() if p <= 0.05]
        how = {"holm": "Holm", "bh": "Benjamini-Hochberg", None: "no"}[self.adjust]
        head = (f"{len(hit)} of {len(adj)} pairs of {self.group!r} differ at adjusted "
                f"p <= 0.05 ({how} adjustment)")
        return head + (": " + "; ".join(hit) + "." if hit else ".")

    def _title(self) -> str:
        how = {"holm": "Holm", "bh": "Benjamini-Hochberg", None: "no"}[self.adjust]
        what = ("Welch-type tests (T_w^2)" if self.statistic_name == "welch_t2"
                else "PERMANOVA")
        return (f"Pairwise {what} on {self.measure} between levels of {self.group!r} "
                f"({how} adjustment)")


@reports_progress("Pairwise PERMANOVA", knob="n_permutations")
def pairwise_permanova(d, samples, group: str, *, adjust: str | None = "holm", units=None,
                       blocks=None, n_permutations: int = 999, rng=None,
                       statistic: str = "pseudo_f",
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
    units : None, False, str, list of str or Series
        Sampling units, as in :func:`permanova`; resolved once on all samples (detected
        when None) and used by every pair, so a factor applied to whole units is compared
        by permuting whole units.
    blocks, n_permutations, rng, progress, cancel
        As in :func:`permanova`; each pair gets its own independent random stream.
    statistic : {'pseudo_f', 'welch'}, default 'pseudo_f'
        PERMANOVA's pseudo-F, or the Welch-type T_w^2 (Alekseyenko 2016), which allows
        each group its own spread (:func:`tallyform.core.welch.welch_permanova`; with
        units, the unit centroids are compared).

    Returns
    -------
    PairwiseResult
        Notes that hold for every pair are given once; when the adjustment leaves no pair
        able to reach p <= 0.05 (too few units or samples per level), a note says so.

    Raises
    ------
    DesignError
        Unknown column, fewer than 2 levels, a level with fewer than 2 samples (or units).

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
    from .inference import resolve_plan
    d = check_dissimilarity(d)
    check_option("adjust", adjust, ADJUST_METHODS)
    check_option("statistic", statistic, PAIRWISE_STATISTICS)
    n_permutations = check_n_permutations(n_permutations)
    frame, notes = align_samples(samples, d.labels)
    labels, levels, counts = _pair_levels(frame, group)
    block_codes, block_name = block_labels(frame, blocks)
    plan = resolve_plan(frame, [group], units, block_name)
    notes += plan.notes
    unit_cols = _unit_columns(frame, plan)
    rng = as_rng(rng)
    pairs = [(a, b) for i, a in enumerate(levels) for b in levels[i + 1:]]
    streams = rng.spawn(len(pairs))
    rows, pair_notes = [], []
    for k, ((a, b), stream) in enumerate(zip(pairs, streams)):
        res, n_units = _test_pair(
            d, labels, unit_cols, block_codes, block_name, group, a, b, statistic=statistic,
            n_permutations=n_permutations, rng=stream, cancel=cancel,
            progress=None if progress is None else
            (lambda done, total, k=k: progress(k * total + done, len(pairs) * total)))
        rows.append(dict(_pair_row(res, statistic, group, a, b, counts), n_units=n_units))
        pair_notes.append((f"{a} vs {b}", [x for x in res.notes
                                            if not x.startswith("PERMANOVA also responds")]))
    table = pd.DataFrame(rows).set_index("pair")
    if not len(unit_cols.columns):
        table = table.drop(columns=["n_units"])
    table.insert(table.columns.get_loc("pvalue") + 1, "pvalue_adjusted",
                 adjust_pvalues(table["pvalue"].to_numpy(), adjust))
    notes += _pairwise_notes(table, adjust, statistic, pair_notes)
    stat_col = "pseudo_f" if statistic == "pseudo_f" else "welch_t2"
    return PairwiseResult(table=table, statistic=table[stat_col].copy(),
                          pvalue=table["pvalue"].copy(),
                          pvalue_adjusted=table["pvalue_adjusted"].copy(), adjust=adjust,
                          group=str(group), measure=d.measure, notes=notes,
                          statistic_name=stat_col)


def _pair_levels(frame: pd.DataFrame, group: str):
    """Labels, levels and level counts of the factor; every level needs 2 samples."""
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
    return labels, levels, counts


def _test_pair(d, labels, unit_cols, block_codes, block_name, group, a, b, *, statistic,
               n_permutations, rng, progress, cancel):
    """The test of one pair of levels on its samples, and its number of units (or None)."""
    mask = labels.isin([a, b]).to_numpy()
    sub = d.subset(mask)
    sub_frame = unit_cols.loc[mask].copy()
    sub_frame[group] = pd.Categorical(labels[mask], categories=[a, b])
    sub_blocks = None if block_codes is None else pd.Series(
        block_codes[mask], index=sub.labels, name=block_name)
    test = permanova if statistic == "pseudo_f" else _welch_pair
    try:
        res = test(sub, sub_frame, [group], blocks=sub_blocks,
                   units=[c for c in unit_cols.columns] or False,
                   n_permutations=n_permutations, rng=rng, progress=progress, cancel=cancel)
    except DesignError as err:
        raise DesignError(f"comparing {a!r} with {b!r}: {err.detail}",
                          location=err.location, hint=err.hint) from None
    n_units = (len(np.unique(sub_frame[unit_cols.columns[0]].astype(str)))
               if len(unit_cols.columns) else None)
    return res, n_units


def _pair_row(res, statistic: str, group: str, a: str, b: str, counts) -> dict:
    """One pair's row of the table, from its PERMANOVA or Welch-type result."""
    out = dict(pair=f"{a} vs {b}", group_a=a, group_b=b, n_a=int(counts[a]),
               n_b=int(counts[b]))
    if statistic == "pseudo_f":
        row = res.table.loc[group]
        out.update(pseudo_f=row["pseudo_f"], r2=row["r2"], pvalue=row["pvalue"],
                   n_permutations=res.n_permutations, exact=res.exact,
                   min_pvalue=res.min_pvalue[group], stratum=row["stratum"])
    else:
        out.update(welch_t2=res.statistic, spread_a=res.groups.loc[a, "spread"],
                   spread_b=res.groups.loc[b, "spread"], pvalue=res.pvalue,
                   n_permutations=res.n_permutations, exact=res.exact,
                   min_pvalue=(np.nan if res.min_pvalue is None else res.min_pvalue),
                   stratum=("samples" if res.units is None
                            else f"between {res.units!r}"))
    return out


def _pairwise_notes(table: pd.DataFrame, adjust, statistic: str, pair_notes: list) -> tuple:
    """The pairs' notes (shared ones once), the adjusted floor and the spread caveat."""
    notes = _shared_notes(pair_notes)
    floor = _adjusted_floor(table, adjust)
    if floor:
        notes += (floor,)
    if statistic == "pseudo_f":
        notes += ("Pairwise tests share PERMANOVA's sensitivity to unequal spread: a small "
                  "p-value can reflect different dispersions as well as different "
                  "centroids.",)
    return notes


def _welch_pair(d, frame, terms, **kw):
    """The Welch-type test of one pair, for pairwise_permanova."""
    from .welch import welch_permanova            # welch.py imports the inference module
    return welch_permanova(d, frame, terms[0], **kw)


def _unit_columns(frame: pd.DataFrame, plan) -> pd.DataFrame:
    """The resolved unit columns (one per level), to hand to every pair."""
    out = pd.DataFrame(index=frame.index)
    for lv in plan.levels:
        out[lv.name] = np.asarray(lv.labels, dtype=object)[lv.codes]
    return out


def _shared_notes(pair_notes: list) -> tuple:
    """Notes every pair carries, once; the others prefixed by their pair."""
    if not pair_notes:
        return ()
    shared = [x for x in pair_notes[0][1] if all(x in n for _, n in pair_notes)]
    out = list(shared)
    for pair, ns in pair_notes:
        out += [f"{pair}: {x}" for x in ns if x not in shared]
    return tuple(dict.fromkeys(out))


def _adjusted_floor(table: pd.DataFrame, adjust, alpha: float = 0.05) -> str | None:
    """A note when no pair can reach alpha after adjustment, whatever the data: the
    adjusted values of the smallest attainable p-values are all above alpha (Holm and
    Benjamini-Hochberg are monotone in every p-value)."""
    floors = table["min_pvalue"].to_numpy(dtype=float)
    if not np.isfinite(floors).all():
        return None
    best = adjust_pvalues(floors, adjust)
    if best.min() <= alpha:
        return None
    how = {"holm": "Holm", "bh": "Benjamini-Hochberg", None: "no"}[adjust]
    lo, hi = floors.min(), floors.max()
    each = f"{lo:.2g}" if np.isclose(lo, hi) else f"{lo:.2g}-{hi:.2g}"
    return (f"No pair can reach p <= {alpha:g} after {how} adjustment over {len(table)} "
            f"pairs, whatever the data: the smallest possible p-value of each pair is {each} "
            f"before adjustment ({best.min():.2g} after). Non-significant pairs here say "
            "nothing about whether the levels differ.")
