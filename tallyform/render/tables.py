"""Result tables as CSV files and one XLSX workbook: safe to open, written atomically.

Text cells that a spreadsheet would run as a formula (starting with ``=``, ``+``, ``-``,
``@``, tab or carriage return) get a leading apostrophe, the usual defence against formula
injection (common practice); numbers stay numbers. Labels (index and header) are text cells
too and are treated the same way.
"""
from __future__ import annotations

import io
import re
from pathlib import Path

import numpy as np
import pandas as pd

from ..core.fileio import atomic_write

__all__ = ["neutralise", "safe_frame", "write_csv", "write_xlsx", "write_tables"]

_TRIGGERS = ("=", "+", "-", "@", "\t", "\r")


def neutralise(value):
    """A text value made inert for spreadsheets; anything else unchanged."""
    if isinstance(value, str) and value.startswith(_TRIGGERS):
        return "'" + value
    return value


def safe_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy with every text cell, index label and column label neutralised."""
    out = frame.copy()
    for col in out.columns:
        s = out[col]
        if not (pd.api.types.is_numeric_dtype(s) or pd.api.types.is_bool_dtype(s)):
            out[col] = s.map(neutralise).astype(object)
    out.index = _safe_index(out.index)
    out.columns = _safe_index(out.columns)
    return out


def _safe_index(idx: pd.Index) -> pd.Index:
    if isinstance(idx, pd.MultiIndex):
        return pd.MultiIndex.from_tuples([tuple(neutralise(v) for v in t) for t in idx],
                                         names=[neutralise(n) for n in idx.names])
    return pd.Index([neutralise(v) for v in idx], name=neutralise(idx.name))


def write_csv(frame: pd.DataFrame, path) -> Path:
    """One table as UTF-8 CSV (atomic)."""
    plain = isinstance(frame.index, pd.RangeIndex) and frame.index.name is None
    text = safe_frame(frame).to_csv(lineterminator="\n", index=not plain)  # no bare 0..n-1
    with atomic_write(path, "w") as fh:
        fh.write(text)
    return Path(path)


def _sheet_name(name: str, used: set) -> str:
    base = re.sub(r"[\[\]:*?/\\]", "_", str(name))[:31] or "sheet"
    cand, k = base, 1
    while cand.lower() in used:
        k += 1
        cand = f"{base[:28]}_{k}"
    used.add(cand.lower())
    return cand


def write_xlsx(tables: dict, path) -> Path:
    """Every table as a sheet of one workbook (atomic). Formulas are never written."""
    used: set = set()
    buf = io.BytesIO()            # built in memory: a failure halfway leaves nothing on disk
    xw = pd.ExcelWriter(buf, engine="openpyxl")
    for name, frame in tables.items():
        safe_frame(_flat(frame)).to_excel(xw, sheet_name=_sheet_name(name, used))
    xw.close()
    with atomic_write(path, "wb") as fh:
        fh.write(buf.getvalue())
    return Path(path)


def _flat(frame: pd.DataFrame) -> pd.DataFrame:
    """Spreadsheets cannot hold tuples or arrays in a cell: show them as text."""
    out = frame.copy()
    for col in out.columns:
        if out[col].dtype == object:
            out[col] = out[col].map(lambda v: ", ".join(map(str, v))
                                    if isinstance(v, (tuple, list, np.ndarray)) else v)
    return out


def write_tables(tables: dict, folder, *, xlsx_name: str = "tables.xlsx") -> list[Path]:
    """Each table as ``folder/<name>.csv`` and all of them in ``folder/<xlsx_name>``."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    written = [write_csv(_flat(frame), folder / f"{name}.csv") for name, frame in tables.items()]
    written.append(write_xlsx(tables, folder / xlsx_name))
    return written
