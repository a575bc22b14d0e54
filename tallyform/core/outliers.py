"""Samples far from the rest: a total or a composition that stands out.

Two robust scores per sample, each a modified z-score (Iglewicz & Hoaglin 1993):
``M = (x - median) / (1.4826 MAD)``, flagged when ``|M| > threshold`` (3.5 by their
recommendation). Median and MAD are untouched by a few extreme samples, so one sample with
eight times the others' total cannot hide itself by inflating the spread.

* total: ``x`` is log10 of the sample's total (its size; its sequencing depth for relative
  data without loads, which is then a technical fact, not an ecological one);
* profile: ``x`` is the Hellinger distance (Rao 1995; Legendre & Gallagher 2001) from the
  sample's profile to the centroid of the profiles of its group (of all samples without a
  group); only large values are flagged.

A flag is a prompt to look at the sample (a typing error, a failed extraction, a different
habitat), never a reason to drop it silently.

References
----------
Iglewicz, B. & Hoaglin, D. C. (1993). How to Detect and Handle Outliers. ASQC Quality Press.
Legendre, P. & Gallagher, E. D. (2001). Ecologically meaningful transformations for
ordination of species data. Oecologia 129, 271-280.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .errors import InputError
from .results import ResultMixin, readonly

__all__ = ["OutlierSamples", "outlier_samples", "robust_scores", "THRESHOLD"]

THRESHOLD = 3.5          # Iglewicz & Hoaglin (1993), modified z-scores
_MAD_SCALE = 1.4826      # 1 / Phi^{-1}(0.75): MAD of a normal sample estimates sigma


def robust_scores(x) -> np.ndarray:
    """Modified z-scores ``(x - median) / (1.4826 MAD)``; 0 where the MAD is 0 and x is
    the median, +-inf where the MAD is 0 and x differs from it."""
    x = np.asarray(x, dtype=np.float64)
    med = np.median(x)
    mad = _MAD_SCALE * np.median(np.abs(x - med))
    dev = x - med
    if mad > 0:
        return dev / mad
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(dev == 0, 0.0, np.sign(dev) * np.inf)


@dataclass(frozen=True, eq=False)
class OutlierSamples(ResultMixin):
    """Samples whose total or composition stands out (see :func:`outlier_samples`).

    Attributes
    ----------
    table : DataFrame
        One row per sample: ``total``, ``times_median_total``, ``total_score``,
        ``profile_distance``, ``profile_score``, ``flagged`` (bool) and ``why`` (words).
    threshold : float
    group : str or None
    statistic : float
        The largest absolute score (no test: ``pvalue`` is None).
    notes : tuple of str
    """

    table: pd.DataFrame
    threshold: float
    group: str | None
    what_total: str
    statistic: float
    pvalue: None = None
    notes: tuple = ()

    def __post_init__(self):
        object.__setattr__(self, "table", readonly(self.table))

    @property
    def flagged(self) -> list[str]:
        """Labels of the flagged samples, most extreme first."""
        t = self.table[self.table["flagged"]]
        order = np.maximum(t["total_score"].abs(), t["profile_score"]).sort_values(
            ascending=False)
        return [str(x) for x in order.index]

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    @property
    def reading(self) -> str:
        return self.summary

    def _title(self) -> str:
        return "Samples that stand out"

    @property
    def summary(self) -> str:
        """One sentence: which samples stand out and why (or that none does)."""
        if not self.flagged:
            return (f"No sample stands out: every {self.what_total} and every composition is "
                    f"within {self.threshold:g} robust standard deviations of the others.")
        t = self.table
        parts = [f"{s!r} ({t.loc[s, 'why']})" for s in self.flagged]
        return (f"{len(parts)} sample(s) stand out from the others: " + "; ".join(parts)
                + ". Check them (a typing error, a failed sample, another habitat) before "
                "reading the tests; a flag is no reason to drop a sample unseen.")


def outlier_samples(table, group: str | None = None, *,
                    threshold: float = THRESHOLD) -> OutlierSamples:
    """Flag samples whose total or composition is far from the rest.

    Parameters
    ----------
    table : CommunityTable
    group : str, optional
        Sample-information column: compositions are compared with the centroid of their
        own group (groups of fewer than 3 samples use the centroid of all samples).
    threshold : float, default 3.5
        Modified z-score above which a sample is flagged (Iglewicz & Hoaglin 1993).

    Returns
    -------
    OutlierSamples
        ``.flagged`` (labels), ``.summary`` (a sentence), ``.table`` (every score).

    Examples
    --------
    >>> import tallyform as tly
    >>> tly.outlier_samples(tly.demo("mesocosm"), "treatment").flagged   # synthetic data
    []
    """
    from .table import as_table
    tab = as_table(table)
    if not (isinstance(threshold, (int, float)) and np.isfinite(threshold) and threshold > 0):
        raise InputError(f"`threshold` must be a positive number; got {threshold!r}.")
    labels = pd.Index([str(x) for x in tab.sample_labels], name="sample")
    totals = np.asarray(tab.totals, dtype=np.float64)
    if np.any(totals <= 0):
        raise InputError("every sample needs a positive total to be compared with the others.")
    log_total = np.log10(totals)
    total_score = robust_scores(log_total)
    values = np.asarray(tab.values, dtype=np.float64)
    feats = np.sqrt(values / values.sum(axis=1, keepdims=True))     # Hellinger features
    centre = np.broadcast_to(feats.mean(axis=0), feats.shape).copy()
    notes = []
    if group:
        g = tab.group(group)
        codes = pd.Series(np.asarray(g, dtype=object)).astype(str).to_numpy()
        for level in pd.unique(codes):
            rows = codes == level
            if rows.sum() >= 3:
                centre[rows] = feats[rows].mean(axis=0)
            else:
                notes.append(f"group {level!r} of {group!r} has fewer than 3 samples: its "
                             "compositions are compared with the centroid of all samples.")
    dist = np.sqrt(((feats - centre) ** 2).sum(axis=1))
    profile_score = robust_scores(dist)
    median_total = float(np.median(totals))
    what = {"absolute": "total", "relative": "sequencing depth"}.get(
        tab.abundance, "total")
    if tab.abundance != "absolute" and tab.load is not None:
        what = "load"
    big_total = np.abs(total_score) > threshold
    big_profile = profile_score > threshold
    why = []
    for i in range(len(labels)):
        parts = []
        if big_total[i]:
            ratio = totals[i] / median_total
            parts.append(f"{what} {ratio:.3g} times the median" if ratio >= 1
                         else f"{what} 1/{1 / ratio:.3g} of the median")
        if big_profile[i]:
            parts.append("composition far from its group's" if group
                         else "composition far from the others'")
        why.append("; ".join(parts))
    frame = pd.DataFrame({
        "total": totals, "times_median_total": totals / median_total,
        "total_score": total_score, "profile_distance": dist,
        "profile_score": profile_score, "flagged": big_total | big_profile, "why": why},
        index=labels)
    if tab.abundance == "relative" and tab.load is None:
        notes.append("totals are sequencing depths here: a flagged depth is a technical fact "
                     "(a sample read deeper or shallower), not a difference in abundance.")
    finite = np.concatenate([np.abs(total_score), profile_score])
    stat = float(np.max(finite)) if finite.size else float("nan")
    return OutlierSamples(table=frame, threshold=float(threshold), group=group or None,
                          what_total=what, statistic=stat, notes=tuple(notes))
