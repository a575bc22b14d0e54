"""Tables for reading: column labels in words, p-values as people write them, yes/no.

``to_frame()`` keeps the programmatic column names (``share_unadjusted``, ``pvalue``...),
which code and exported CSV files rely on. What is *shown* (the notebook display of a
result, the report, the dashboard) goes through :func:`display_frame`, which only relabels
and formats: it computes nothing.

* p-values: ``< 0.001`` below 0.001, else three significant digits (common practice in
  journals' statistical guidelines);
* booleans: ``yes`` / ``no``;
* a bare 0..n-1 row index is numbered from 1.
"""
from __future__ import annotations

import re

import numpy as np
import pandas as pd

__all__ = ["display_frame", "column_label", "format_p", "p_words", "LABELS"]

# exact labels for the columns whose words matter most; the rest follow the rules below
LABELS = {
    "pvalue": "p", "p_value": "p", "p_adjusted": "p (adjusted)", "p_raw": "p (unadjusted)",
    "pvalue_adjusted": "p (adjusted)", "min_pvalue": "smallest possible p",
    "pseudo_f": "pseudo-F", "r2": "R\u00b2", "r2_adj": "adjusted R\u00b2",
    "adj_r2": "adjusted R\u00b2", "df": "df", "ss": "sum of squares", "ms": "mean square",
    "df_denominator": "df (denominator)", "tested_against": "tested against",
    "share_unadjusted": "share (unadjusted R\u00b2)", "share": "share",
    "size_only": "size only", "shape_only": "shape only", "shared": "shared",
    "residual": "residual", "mean_a": "mean in A", "mean_b": "mean in B",
    "n_a": "samples in A", "n_b": "samples in B",
    "n_sim": "simulations", "n_simulations": "simulations",
    "false_alarm_rate": "false alarms", "detected": "detected",
    "flagged": "stands out", "why": "why", "times_median_total": "times the median total",
    "total_score": "total: robust z", "profile_score": "composition: robust z",
    "profile_distance": "composition: distance to centroid",
    "log2_ratio": "log2 ratio", "statistic": "statistic",
}
_SUFFIXES = [("_ci_low", ", 95 % low"), ("_ci_high", ", 95 % high"), ("_low", ", low"),
             ("_high", ", high"), ("_pct", " (%)")]
_P_COLUMNS = re.compile(r"^(p|pvalue|p_value|p_adjusted|p_raw|pvalue_adjusted|.*_pvalue|"
                        r"pvalue_.*|p_.*)$")


def column_label(name) -> str:
    """A column name in words: ``departure_ci_low`` -> ``departure, 95 % low``."""
    if not isinstance(name, str):
        return name
    if name in LABELS:
        return LABELS[name]
    for suffix, words in _SUFFIXES:
        if name.endswith(suffix) and len(name) > len(suffix):
            return column_label(name[: -len(suffix)]) + words
    return name.replace("_", " ")


def format_p(p) -> str:
    """``'< 0.001'``, ``'0.0123'``, ``''`` for a missing value."""
    try:
        p = float(p)
    except (TypeError, ValueError):
        return str(p)
    if not np.isfinite(p):
        return ""
    return "< 0.001" if p < 0.001 else f"{p:.3g}"


def _is_p(name) -> bool:
    return isinstance(name, str) and bool(_P_COLUMNS.match(name)) and name not in (
        "p_a", "p_b", "pct")


def display_frame(frame: pd.DataFrame, *, rename: dict | None = None) -> pd.DataFrame:
    """A copy of ``frame`` for reading: p-values and booleans as text, columns in words.

    ``rename`` maps columns of this table to labels of its own (e.g. ``{"term": "part of
    D²"}``, taking precedence over the shared labels).
    """
    if frame is None:
        return None
    out = frame.copy()
    if isinstance(out, pd.Series):
        out = out.to_frame()
    for col in out.columns:
        s = out[col]
        if pd.api.types.is_bool_dtype(s) or (s.dtype == object and len(s) and
                                             s.map(lambda v: isinstance(v, (bool, np.bool_))
                                                   ).all()):
            out[col] = s.map(lambda v: "yes" if bool(v) else "no").astype(object)
        elif _is_p(col) and pd.api.types.is_numeric_dtype(s):
            out[col] = s.map(format_p).astype(object)
    labels = {c: (rename or {}).get(c, column_label(c)) for c in out.columns
              if not isinstance(out.columns, pd.MultiIndex)}
    if labels:
        out = out.rename(columns=labels)
    if isinstance(out.index, pd.RangeIndex) and out.index.name is None \
            and out.index.start == 0:
        out.index = pd.RangeIndex(1, len(out) + 1)
    if isinstance(out.index.name, str):
        out.index.name = column_label(out.index.name) if out.index.name in LABELS else \
            out.index.name
    return out


def p_words(p) -> str:
    """``'p < 0.001'`` or ``'p = 0.0123'`` (three significant digits), for sentences."""
    text = format_p(p)
    if not text:
        return "no p-value"
    return f"p {text}" if text.startswith("<") else f"p = {text}"
