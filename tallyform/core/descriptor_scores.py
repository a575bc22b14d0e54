"""Scores of descriptors on an ordination: weighted averages of taxa over sample scores
and correlations of variables with the axes (Legendre & Legendre 2012, section 9.1)."""
from __future__ import annotations

import numpy as np
import pandas as pd

from .errors import InputError

__all__ = ["aligned_values", "weighted_average_scores", "correlation_scores"]


def aligned_values(table, labels: pd.Index) -> tuple[np.ndarray, list]:
    """Abundances (n x p) with rows in the order of ``labels``, and the taxon names."""
    from .table import CommunityTable
    if isinstance(table, CommunityTable):
        frame = table.counts
    elif isinstance(table, pd.DataFrame):
        frame = table
    else:
        arr = np.asarray(table, dtype=float)
        if arr.ndim != 2 or arr.shape[0] != len(labels):
            raise InputError(f"the table must have one row per sample ({len(labels)} rows); "
                             f"got shape {arr.shape}.")
        frame = pd.DataFrame(arr, index=labels, columns=[f"taxon{j + 1}" for j in
                                                         range(arr.shape[1])])
    idx = pd.Index([str(x) for x in frame.index])
    if set(idx) != set(labels):
        missing = [x for x in labels if x not in set(idx)]
        raise InputError(f"the table's samples do not match the ordination's; missing "
                         f"from the table: {missing[:8]}.")
    frame = frame.set_axis(idx).loc[list(labels)]
    values = frame.apply(pd.to_numeric, errors="coerce").to_numpy(dtype=float)
    if not np.isfinite(values).all():
        raise InputError("the table holds non-numeric or non-finite values.")
    return values, [str(c) for c in frame.columns]


def weighted_average_scores(values: np.ndarray, scores: np.ndarray) -> np.ndarray:
    """Abundance-weighted means of sample scores per taxon: (X' S) / column totals."""
    tot = values.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = (values.T @ scores) / tot[:, None]
    out[tot <= 0] = np.nan
    return out


def correlation_scores(values: np.ndarray, scores: np.ndarray) -> np.ndarray:
    """Pearson correlation of each taxon (column of values) with each score column."""
    xc = values - values.mean(axis=0)
    sc = scores - scores.mean(axis=0)
    num = xc.T @ sc
    den = np.sqrt(np.sum(xc * xc, axis=0))[:, None] * np.sqrt(np.sum(sc * sc, axis=0))[None, :]
    with np.errstate(invalid="ignore", divide="ignore"):
        out = num / den
    out[~np.isfinite(out)] = np.nan
    return out
