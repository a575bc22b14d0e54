"""The steps of :func:`tallyform.core.contributions.taxon_contributions` after validation:
the shape table (terms, shares and their intervals), the size table (log2 ratios and their
intervals) and the notes that go with them.

Every interval is a jackknife-t interval for a population value (see
:mod:`tallyform.core.taxon_terms`): the true D^2 between the groups' mean features (from the
noise-corrected terms), each taxon's share of it, and the true log2 ratios of mean
abundance.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .table import listing
from .taxon_terms import Groups, ShapeTerms, SizeRatios, jackknife_interval

__all__ = ["Prepared", "ShapePart", "SizePart", "shape_part", "size_part", "shape_notes",
           "size_notes"]


@dataclass(frozen=True)
class Prepared:
    """Validated inputs: the two groups' counts (taxa absent from both left out)."""

    gname: str
    a: str
    b: str
    labels: pd.Index
    x: np.ndarray
    e: np.ndarray
    taxa: pd.Index
    excluded: tuple
    groups: Groups
    what: str                 # "sample" or "unit"
    level: float
    jackknife: bool           # intervals requested and possible


@dataclass(frozen=True)
class ShapePart:
    table: pd.DataFrame
    total: float
    total_corrected: float | None
    total_ci: tuple
    noise_total: float | None
    shares_open: bool         # intervals of shares are [0, 100]: D^2 not shown above 0


@dataclass(frozen=True)
class SizePart:
    table: pd.DataFrame
    reference: dict
    only: np.ndarray
    n_infinite_ci: int


# ============================================================================== shape
def _share_intervals(st: ShapeTerms, net_total: float, lo_total: float, level: float,
                     p: int):
    """Interval of each taxon's share (%) of the population total, clipped to [0, 100].

    When the total's interval reaches 0 (or a leave-one-out total is not positive) the
    share of a total that may be 0 has no bound: the interval is the whole [0, 100].
    """
    ta, tb = st.jack_a.sum(axis=1), st.jack_b.sum(axis=1)
    if not (net_total > 0 and lo_total > 0 and (ta > 0).all() and (tb > 0).all()):
        return np.zeros(p), np.full(p, 100.0), True
    share = 100.0 * st.net / net_total
    lo, hi, _, _ = jackknife_interval(share, 100.0 * st.jack_a / ta[:, None],
                                      100.0 * st.jack_b / tb[:, None], level)
    return np.clip(lo, 0.0, 100.0), np.clip(hi, 0.0, 100.0), False


def shape_part(prep: Prepared, st: ShapeTerms, *, exact: bool) -> ShapePart:
    """The shape table, largest term first, with the total and its interval."""
    g, p = prep.groups, len(prep.taxa)
    total = float(st.terms.sum())
    net_total = float(st.net.sum())
    share = 100.0 * st.terms / total if total > 0 else np.zeros(p)
    share_net = (100.0 * st.net / net_total if net_total > 0 else np.full(p, np.nan))
    lo = hi = np.full(p, np.nan)
    total_ci, shares_open = (np.nan, np.nan), False
    if prep.jackknife:
        tl, th, _, _ = jackknife_interval(net_total, st.jack_a.sum(axis=1, keepdims=True),
                                          st.jack_b.sum(axis=1, keepdims=True), prep.level)
        total_ci = (max(float(tl[0]), 0.0), max(float(th[0]), 0.0))
        lo, hi, shares_open = _share_intervals(st, net_total, float(tl[0]), prep.level, p)
    x = prep.x
    rs = x.sum(axis=1, keepdims=True)
    prof = x / np.where(rs > 0, rs, 1.0)
    higher = np.where(st.diff > 0, prep.b, np.where(st.diff < 0, prep.a, "equal"))
    table = pd.DataFrame({
        "term": st.terms, "share_pct": share, "share_net_pct": share_net,
        "ci_low": lo, "ci_high": hi, "higher_in": higher.astype(object),
        "mean_a": prof[g.ia].mean(axis=0), "mean_b": prof[g.ib].mean(axis=0),
        "feature_a": st.feature_a, "feature_b": st.feature_b}, index=prep.taxa)
    noise_total = None
    if exact:
        table["noise"] = st.noise
        table["noise_pct"] = 100.0 * st.noise / total if total > 0 else np.nan
        if min(g.ma, g.mb) >= 2:
            noise_total = float(np.sum(st.noise))
    table = table.sort_values("term", ascending=False, kind="stable")
    table.insert(5, "cumulative_pct", table["share_pct"].cumsum())
    corrected = (total - noise_total if noise_total is not None else
                 (None if exact else total))
    return ShapePart(table=table, total=total, total_corrected=corrected,
                     total_ci=total_ci, noise_total=noise_total, shares_open=shares_open)


def shape_notes(prep: Prepared, st: ShapeTerms, part: ShapePart, *, exact: bool, rec,
                params: dict) -> list[str]:
    a, b, g = prep.a, prep.b, prep.groups
    notes: list[str] = []
    total = part.total
    if total <= 0:
        notes.append("the two groups have the same centroid: there is no difference to split "
                     "(every share is 0).")
    if exact:
        notes.append(f"each term is one taxon's part of the squared {rec.label} distance "
                     f"between the two group centroids (D^2 = {total:.4g}); the terms sum "
                     "to D^2 exactly, and shares are of D^2, not of D.")
        if part.noise_total is not None:
            notes.append(f"D^2 is biased upwards by sampling noise: with equal centroids it "
                         f"would be about {part.noise_total:.3g}. `total_corrected` = "
                         f"{part.total_corrected:.3g} removes it (unbiased for the true D^2; "
                         "negative when the centroids are closer than noise alone would put "
                         "them, i.e. when the groups do not differ).")
            if total < 2 * part.noise_total:
                notes.append(f"D^2 = {total:.3g} is less than twice the {part.noise_total:.3g}"
                             " expected from sampling noise alone if the groups had the same "
                             "centroid: the shares mostly describe noise, not a difference in "
                             "composition.")
        if rec.name == "chi_square" and "column_masses" not in params:
            notes.append(f"chi-square column masses are those of groups {a!r} and {b!r} "
                         "pooled (not of the whole table).")
        x = prep.x
        prof = x / np.where(x.sum(axis=1, keepdims=True) > 0, x.sum(axis=1, keepdims=True),
                            1.0)
        agree = np.sign(st.diff) == np.sign(prof[g.ib].mean(axis=0) - prof[g.ia].mean(axis=0))
        if rec.name in ("hellinger", "chord", "aitchison") and not agree.all():
            notes.append(f"for {int((~agree).sum())} taxon/taxa the feature centroid and the "
                         "mean relative abundance point to different groups; `higher_in` "
                         f"follows the {rec.label} features.")
    else:
        na, nb = len(g.ia), len(g.ib)
        notes.append(f"each term is the average, over all {na * nb} pairs of a sample of "
                     f"{a!r} with a sample of {b!r}, of the taxon's part of the pair's "
                     f"{rec.label} dissimilarity; the terms sum to the mean between-group "
                     f"dissimilarity ({total:.4g}). This is an average over pairs, not a "
                     "split of one distance between the groups.")
    if prep.jackknife:
        what = "the true D^2" if exact else "the population mean between-group dissimilarity"
        notes.append(f"intervals ({prep.level:.0%}) are for population values ({what}, each "
                     "taxon's share of it, the log2 ratios of mean abundance): jackknife-t, "
                     f"leaving out one {prep.what} at a time, with Welch-Satterthwaite "
                     "degrees of freedom. In simulations at 8-10 samples per group (300-1000 "
                     "studies each) they covered 93.5-97.5 % (true D^2 where the groups "
                     "differ), 91-97 % (the largest share, where its interval is bounded; "
                     "91 % with gamma-Poisson counts) and 94-94.5 % (log2 ratios) "
                     "for a nominal 95 %."
                     + (" They are not centred on the raw shares, which include noise; "
                        "`share_net_pct` is the matching point estimate." if exact else ""))
        if part.shares_open:
            notes.append(f"the interval for {what} reaches 0: the groups may not differ in "
                         "composition, so a taxon's share of the difference has no bound "
                         "(share intervals are [0, 100] %).")
        if exact:
            notes.append("when the groups do not differ at all the interval for the true D^2 "
                         "is conservative (it contained 0 in 99 % of simulated studies "
                         "for a nominal 95 %).")
    return notes


# ============================================================================== size
def size_part(prep: Prepared, sz: SizeRatios) -> SizePart:
    """The size table, largest absolute change first, and the total's reference ratio."""
    p, a, b, g, x = len(prep.taxa), prep.a, prep.b, prep.groups, prep.x
    ratio = sz.log2_ratio
    dep = ratio - sz.ref
    nan = np.full(p, np.nan)
    rlo = rhi = dlo = dhi = nan
    differs = pd.array([pd.NA] * p, dtype="boolean")
    ref_ci = (np.nan, np.nan)
    n_inf = 0
    if prep.jackknife:
        rlo, rhi, _, _ = jackknife_interval(ratio, sz.jack_a, sz.jack_b, prep.level)
        dlo, dhi, _, _ = jackknife_interval(
            dep, sz.jack_a - sz.jack_ref_a[:, None], sz.jack_b - sz.jack_ref_b[:, None],
            prep.level)
        bad = ~np.isfinite(ratio)
        n_inf = int(bad.sum())
        for arr in (rlo, rhi, dlo, dhi):
            arr[bad] = np.nan
        differs = pd.array((dlo > 0) | (dhi < 0), dtype="boolean")
        differs[np.isnan(dlo) | np.isnan(dhi)] = pd.NA
        tl, th, _, _ = jackknife_interval(np.array([sz.ref]), sz.jack_ref_a[:, None],
                                          sz.jack_ref_b[:, None], prep.level)
        ref_ci = (float(tl[0]), float(th[0]))
    seen_a, seen_b = x[g.ia].sum(axis=0) > 0, x[g.ib].sum(axis=0) > 0
    only = np.where(seen_a & ~seen_b, a, np.where(seen_b & ~seen_a, b, ""))
    table = pd.DataFrame({
        "mean_a": sz.mean_a, "mean_b": sz.mean_b, "change": sz.mean_b - sz.mean_a,
        "log2_ratio": ratio, "ci_low": rlo, "ci_high": rhi, "departure": dep,
        "departure_ci_low": dlo, "departure_ci_high": dhi,
        "differs_from_total": differs, "only_in": only.astype(object)}, index=prep.taxa)
    order = np.argsort(-np.abs(table["change"].to_numpy()), kind="stable")
    reference = {"mean_a": float(sz.tot_a), "mean_b": float(sz.tot_b),
                 "log2_ratio": sz.ref, "ci_low": ref_ci[0], "ci_high": ref_ci[1]}
    return SizePart(table=table.iloc[order], reference=reference, only=only,
                    n_infinite_ci=n_inf)


def size_notes(prep: Prepared, part: SizePart, *, pseudocount: float,
               effort_name) -> list[str]:
    notes: list[str] = []
    taxa, only, p = prep.taxa, part.only, len(prep.taxa)
    if effort_name is not None:
        notes.append(f"size side: abundances are per unit of {effort_name!r} (sum of "
                     "counts over sum of effort in each group); the shape side uses profiles, "
                     "which do not depend on effort.")
    if pseudocount > 0:
        n_only = int((only != "").sum())
        notes.append(f"size side: {pseudocount:g} count per sample of average total (scaled "
                     "by each sample's total) was added before the ratios; it keeps ratios "
                     f"finite ({n_only} taxon/taxa are seen in one group only) and pulls rare "
                     "taxa towards the total's ratio, never away from it.")
    else:
        inf = [str(t) for t, o in zip(taxa, only) if o]
        if inf:
            notes.append(f"size side: {len(inf)} taxon/taxa are seen in one group only and "
                         f"have an infinite log2 ratio (and no interval): {listing(inf)}.")
    if prep.jackknife:
        differs = part.table["differs_from_total"]
        k = int(np.sum(differs.to_numpy(dtype=bool, na_value=False)))
        notes.append(f"size side: {k} of {p} taxa have a log2 ratio whose {prep.level:.0%} "
                     "interval excludes the total's ratio (intervals not adjusted for "
                     f"multiplicity: about {(1 - prep.level) * p:.1f} expected by chance if all "
                     "taxa changed alike).")
    return notes
