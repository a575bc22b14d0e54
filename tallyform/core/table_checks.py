"""The checks of the table funnel: labels, cells, aligned information, per-sample values.

Used by :class:`tallyform.core.table.CommunityTable`; each check raises an InputError (or a
DesignError for an unknown column) naming the file, line or cell and column when known.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from .errors import DesignError, InputError, Location
from .origin import MAX_LISTED, Origin, listing, shown_value


def checked_labels(index: pd.Index, what: str, origin: Origin | None) -> pd.Index:
    """Labels as unique, non-blank strings, or an InputError that lists the offenders."""
    labels = pd.Index([str(x).strip() if not _is_missing(x) else "" for x in index],
                      dtype=object)
    file = origin.file if origin else None
    blank = [i for i, x in enumerate(labels) if x == ""]
    if blank:
        raise InputError(
            f"{len(blank)} {what} label(s) are blank (position(s) {listing([b + 1 for b in blank])}).",
            location=Location(file=file), hint=f"Give every {what} a name.")
    dup = labels[labels.duplicated()].unique()
    if len(dup):
        pos = {d: [i + 1 for i, x in enumerate(labels) if x == d] for d in dup[:MAX_LISTED]}
        where = "; ".join(f"{d!r} at positions {p}" for d, p in pos.items())
        raise InputError(f"{what} labels must be unique; repeated: {where}.",
                         location=Location(file=file),
                         hint=f"Rename or merge the repeated {what}s before loading.")
    return labels



def _is_missing(x) -> bool:
    try:
        return bool(pd.isna(x))
    except (TypeError, ValueError):
        return False


def numeric_values(df: pd.DataFrame, origin: Origin) -> np.ndarray:
    """float64 copy of the cells; an InputError naming the first bad cell otherwise."""
    n, p = df.shape
    out = np.empty((n, p), dtype=np.float64)
    for j, col in enumerate(df.columns):
        s = df.iloc[:, j]
        kind = getattr(s.dtype, "kind", "O")
        if kind in "cmM" or isinstance(s.dtype, (pd.DatetimeTZDtype, pd.PeriodDtype,
                                                 pd.IntervalDtype)):
            what = {"c": "complex numbers", "m": "time spans", "M": "dates"}.get(
                kind, f"values of type {s.dtype}")
            raise InputError(f"taxon column {str(col)!r} holds {what}, not counts.",
                             location=origin.cell(df.index[0], col) if len(df) else None,
                             hint="Counts must be real numbers >= 0; convert the column "
                                  "first, or leave it out of the counts.")
        if pd.api.types.is_bool_dtype(s.dtype):
            out[:, j] = s.to_numpy(dtype=np.float64)
            continue
        if pd.api.types.is_numeric_dtype(s.dtype):
            out[:, j] = s.to_numpy(dtype=np.float64, na_value=np.nan)
            continue
        num = pd.to_numeric(s, errors="coerce")
        text = s.astype(object)
        bad = num.isna() & ~text.map(_is_blank)
        if bad.any():
            i = int(np.flatnonzero(bad.to_numpy())[0])
            sample, taxon = (df.index[i], col)
            raise InputError(
                f"count cell holds text {text.iloc[i]!r}, not a number "
                f"({int(bad.sum())} such cell(s) in this column).",
                location=origin.cell(sample, taxon),
                hint="Counts must be numbers; fix the cell (decimal commas and thousands "
                     "separators can be declared with decimal=',' / thousands=' ').")
        out[:, j] = num.to_numpy(dtype=np.float64, na_value=np.nan)
    return out


def _is_blank(x) -> bool:
    return _is_missing(x) or (isinstance(x, str) and x.strip() == "")


def check_values(values: np.ndarray, samples: pd.Index, taxa: pd.Index, origin: Origin):
    finite = np.isfinite(values)
    if not finite.all():
        i, j = np.argwhere(~finite)[0]
        v = values[i, j]
        kind = "a blank or missing value" if np.isnan(v) else f"an infinite value ({v})"
        n_bad = int((~finite).sum())
        raise InputError(f"count cell holds {kind} ({n_bad} non-finite cell(s) in all).",
                         location=origin.cell(samples[i], taxa[j]),
                         hint="Write 0 for an absent taxon; remove or fix unknown values.")
    neg = values < 0
    if neg.any():
        i, j = np.argwhere(neg)[0]
        raise InputError(f"count cell holds a negative number ({values[i, j]:g}); "
                         f"{int(neg.sum())} negative cell(s) in all.",
                         location=origin.cell(samples[i], taxa[j]),
                         hint="Counts and biomass must be >= 0.")


def align_to_samples(info, labels: pd.Index, what: str, origin: Origin | None,
           info_name: str) -> pd.DataFrame:
    """Sample or taxon information aligned to ``labels`` (by label, never by position)."""
    if info is None:
        return pd.DataFrame(index=pd.Index(labels, name=what))
    if isinstance(info, pd.Series):
        info = info.to_frame()
    if not isinstance(info, pd.DataFrame):
        raise InputError(f"`{info_name}` must be a DataFrame indexed by {what} label; "
                         f"got {type(info).__name__}.")
    info = info.copy()
    info.index = checked_labels(info.index, f"{what} (in `{info_name}`)", None)
    have, want = set(info.index), set(labels)
    missing = [x for x in labels if x not in have]
    extra = [x for x in info.index if x not in want]
    if missing or extra:
        msg = []
        if missing:
            msg.append(f"{len(missing)} {what}(s) in the counts are missing from `{info_name}`: "
                       f"{listing(missing)}")
        if extra:
            msg.append(f"{len(extra)} {what}(s) in `{info_name}` are not in the counts: "
                       f"{listing(extra)}")
        source = info.attrs.get("file")
        if source:
            msg[-1] += f" (sample information read from {source!r})"
        raise InputError("; ".join(msg) + ".",
                         location=Location(file=origin.file) if origin else None,
                         hint=f"Labels are matched exactly (case and spaces count); make both "
                              f"tables list the same {what}s.")
    out = info.loc[list(labels)]
    out.index = pd.Index(labels, name=what)
    return out


def per_sample_values(value, info: pd.DataFrame, labels: pd.Index, origin: Origin, *,
                      role: str, noun: str, hint: str, default_name: str | None = None):
    """One positive, finite number per sample: from a column of the sample table (``value``
    a column name) or given directly (Series matched by label, or a sequence in table order).

    Returns (float64 array, name). ``role`` names the keyword in messages ('effort', 'load'),
    ``noun`` what must be positive ('sampling effort'); ``hint`` says why it must be.
    """
    if isinstance(value, str):
        if value not in info.columns:
            raise DesignError(
                f"{role} column {value!r} is not in the sample table "
                f"(columns: {listing(info.columns)}).",
                location=Location(file=info.attrs.get("file", origin.file),
                                  column=repr(value)),
                hint="Name one of the sample table's columns (case counts), or pass one "
                     "positive value per sample.")
        raw, name = info[value], value
    else:
        raw, name = value, getattr(value, "name", None) or default_name or role
        if isinstance(raw, pd.Series):
            raw = raw.copy()
            raw.index = [str(i) for i in raw.index]
            if set(raw.index) == set(labels):
                raw = raw.loc[list(labels)]
        raw = pd.Series(np.asarray(raw).ravel() if not isinstance(raw, pd.Series) else
                        raw.to_numpy(), index=None)
        if len(raw) != len(labels):
            raise InputError(f"{role} has {len(raw)} value(s) for {len(labels)} samples.")
        raw.index = labels
    num = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
    bad = ~np.isfinite(num) | (num <= 0)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        # a sample table read from a file knows its lines and columns (read_samples)
        attrs = getattr(info, "attrs", {}) if isinstance(value, str) else {}
        line = attrs.get("lines", {}).get(labels[i])
        col = attrs.get("columns", {}).get(name)
        raise InputError(
            f"{noun} must be a positive number; sample {labels[i]!r} has "
            f"{shown_value(raw.iloc[i])} ({int(bad.sum())} such sample(s)).",
            location=Location(file=attrs.get("file", origin.file),
                              row=(f"line {line} " if line else "") + f"(sample {labels[i]!r})",
                              column=(f"column {col} " if col else "") + f"({name!r})"),
            hint=hint)
    return num, name


def empty_policy(values: np.ndarray, sample_labels: pd.Index, taxon_labels: pd.Index,
                 origin: Origin, empty: str):
    """Rows and columns to keep under the empty policy: (row mask, column mask, dropped
    samples, dropped taxa); an InputError naming them under ``empty='error'``."""
    n, p = values.shape
    keep_r, keep_c = np.ones(n, dtype=bool), np.ones(p, dtype=bool)
    if empty == "keep":
        return keep_r, keep_c, [], []
    row_zero = values.sum(axis=1) == 0
    col_zero = values.sum(axis=0) == 0
    if empty == "error" and row_zero.any():
        bad = sample_labels[row_zero]
        raise InputError(
            f"{len(bad)} sample(s) have a total of 0: {listing(bad)}.",
            location=origin.label(bad[0], "samples"),
            hint="Remove them, or load with empty='drop' (they are then listed in "
                 "table.dropped).")
    if empty == "error" and col_zero.any():
        bad = taxon_labels[col_zero]
        raise InputError(
            f"{len(bad)} taxon/taxa are never observed (all counts 0): {listing(bad)}.",
            location=origin.label(bad[0], "taxa"),
            hint="Remove them, or load with empty='drop' (they are then listed in "
                 "table.dropped).")
    if not (row_zero.any() or col_zero.any()):
        return keep_r, keep_c, [], []
    keep_r = ~row_zero
    # taxa seen only in dropped samples become empty too
    keep_c = values[keep_r].sum(axis=0) != 0
    return keep_r, keep_c, list(sample_labels[row_zero]), list(taxon_labels[~keep_c])
