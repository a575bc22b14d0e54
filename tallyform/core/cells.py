"""Raw cells of a delimited text file or a spreadsheet sheet, and strict number parsing.

The readers in :mod:`tallyform.core.io` build on this module. It only *reads* the user's
file (opened read-only, bytes never written), keeps the line (or spreadsheet row) of every
record so that later errors can point back into the file, and turns count cells into numbers
with rules strict enough that an ambiguous cell is refused rather than guessed:

* ``decimal='.'`` (the default): a comma in a count cell is an error (a decimal comma or a
  thousands separator that was not declared);
* ``decimal=','``: a point in a count cell is an error unless ``thousands='.'`` (a file that
  mixes both decimal marks cannot be read safely);
* ``thousands``: the separator must stand between groups of three digits (``1,200`` but
  not ``1,20``); ``thousands=' '`` also accepts the no-break spaces that spreadsheets write.
"""
from __future__ import annotations

import csv
import datetime as _dt
import io
import math
import os
import re
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError, Location
from .table import column_letter

__all__ = ["Cells", "read_cells", "BadCell", "parse_number", "parse_numbers", "is_blank",
           "to_text", "NA_TOKENS"]

_SPREADSHEET = {".xlsx", ".xlsm"}
_SPACES = " \t\u00a0\u202f\u2009"          # space, tab, no-break, narrow no-break, thin
#: Texts that mean "no value" in exported tables; never read as a number or a label row.
NA_TOKENS = frozenset({"na", "n/a", "nan", "null", "none", "-", "--", "?", "#n/a", "missing",
                       ".", "nd", "n.d."})
_PLAIN = re.compile(r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?")
_INFINITE = {"inf", "+inf", "-inf", "infinity", "+infinity", "-infinity"}


# ---------------------------------------------------------------------------- raw cells
class Cells:
    """The raw cells of one sheet or delimited file, as strings, with their positions.

    ``frame`` holds every non-blank row; ``lines[i]`` is the 1-based line (or spreadsheet
    row) of ``frame.iloc[i]``; column j of ``frame`` is column j of the file.
    """

    def __init__(self, frame: pd.DataFrame, lines: np.ndarray, file: str,
                 sheet: str | None, spreadsheet: bool):
        self.frame, self.lines, self.file = frame, lines, file
        self.sheet, self.spreadsheet = sheet, spreadsheet

    def where(self, i: int | None = None, j: int | None = None, header: str | None = None):
        """Location of row i (frame index) and column j."""
        line = None if i is None else int(self.lines[i])
        if self.spreadsheet and line is not None and j is not None:
            return Location(file=self.file, sheet=self.sheet,
                            cell=f"{column_letter(j)}{line}" +
                            (f" ({header!r})" if header else ""))
        col = None if j is None else (f"column {j + 1}" + (f" ({header!r})" if header else ""))
        return Location(file=self.file, sheet=self.sheet,
                        row=None if line is None else f"line {line}", column=col)

    def column_name(self, j: int) -> str:
        """How a person names column j: a letter in a spreadsheet, a number in text."""
        return column_letter(j) if self.spreadsheet else str(j + 1)

    def from_line(self, first: int) -> "Cells":
        """The cells of line (or spreadsheet row) ``first`` onwards (1-based)."""
        keep = self.lines >= first
        if not keep.any():
            raise InputError(f"the file has no line {first} or later with values.",
                             location=Location(file=self.file, sheet=self.sheet),
                             hint=f"`header_row` must be a line of the file; the last line "
                                  f"with values is {int(self.lines[-1])}.")
        frame = self.frame[keep].reset_index(drop=True)
        frame.columns = range(frame.shape[1])
        return Cells(frame, self.lines[keep], self.file, self.sheet, self.spreadsheet)


def display_name(path) -> str:
    return os.fspath(path) if not isinstance(path, (bytes, bytearray)) else "<bytes>"


def is_blank(x) -> bool:
    return x is None or (isinstance(x, float) and math.isnan(x)) or \
        (isinstance(x, str) and x.strip(_SPACES) == "")


def to_text(x) -> str:
    """A label as the user typed it (spreadsheet numbers 3.0 -> '3')."""
    if is_blank(x):
        return ""
    if isinstance(x, float) and x.is_integer():
        return str(int(x))
    return str(x).strip(_SPACES)


def _sniff_sep(text: str, suffix: str) -> str:
    if suffix in {".tsv", ".tab"}:
        return "\t"
    first = next((ln for ln in text.splitlines() if ln.strip()), "")
    try:
        return csv.Sniffer().sniff(first, delimiters=",;\t|").delimiter
    except csv.Error:
        return "\t" if "\t" in first else ","


_BOMS = ((b"\xff\xfe", "utf-16"), (b"\xfe\xff", "utf-16"))


def _decode(raw: bytes, encoding: str | None, name: str) -> str:
    enc = encoding
    if enc is None:
        # UTF-16 with a byte-order mark is what spreadsheets write as "Unicode text"
        enc = next((e for bom, e in _BOMS if raw.startswith(bom)), "utf-8-sig")
    try:
        text = raw.decode(enc)
    except UnicodeDecodeError as exc:
        line = raw[:exc.start].count(b"\n") + 1
        raise InputError(
            f"the file is not valid {enc} text: byte 0x{raw[exc.start]:02x} cannot be decoded "
            f"(first seen at line {line}).",
            location=Location(file=name, row=f"line {line}"),
            hint="Pass the file's encoding, e.g. encoding='latin-1' or encoding='cp1252' "
                 "(spreadsheets saved as 'CSV' on older systems often use these); if it is "
                 "not a text table at all, export the data as CSV or XLSX.") from None
    except LookupError:
        raise InputError(f"unknown text encoding {enc!r}.", location=Location(file=name),
                         hint="Use a name such as 'utf-8', 'latin-1' or 'cp1252'.") from None
    text = text.lstrip("\ufeff")
    if "\x00" in text:
        line = text[:text.index("\x00")].count("\n") + 1
        raise InputError("the file holds NUL bytes, so it is not a text table (or its "
                         "encoding is wrong).", location=Location(file=name, row=f"line {line}"),
                         hint="Export the table again as CSV (UTF-8), or pass the right "
                              "encoding (e.g. encoding='utf-16').")
    return text


def read_cells(path, *, sheet=None, encoding: str | None = None, sep: str | None = None,
               data: bytes | None = None) -> Cells:
    """Raw cells of a delimited text file or a spreadsheet sheet, as strings.

    Blank rows are skipped (their line numbers are kept for the others), trailing blank
    columns are removed. A quoted cell that is never closed is an error naming its line.
    """
    name = display_name(path)
    suffix = Path(name).suffix.lower()
    if data is None:
        try:
            with open(path, "rb") as fh:
                data = fh.read()
        except FileNotFoundError:
            raise InputError("file not found.", location=Location(file=name),
                             hint="Check the path (it is read relative to the current "
                                  f"folder, {os.getcwd()!r}).") from None
        except IsADirectoryError:
            raise InputError("this is a folder, not a file.", location=Location(file=name),
                             hint="Give the path of the table inside it.") from None
        except PermissionError:
            raise InputError("the file cannot be opened for reading (permission denied).",
                             location=Location(file=name),
                             hint="Check the file's permissions, or copy it somewhere "
                                  "readable.") from None
    if len(data.strip()) == 0:
        raise InputError("the file is empty.", location=Location(file=name),
                         hint="Export the table again; it has no header and no data.")
    if suffix in _SPREADSHEET or data[:4] == b"PK\x03\x04":
        frame, lines, sheet_name = _spreadsheet_cells(data, name, sheet)
        return _trimmed(frame, lines, name, sheet_name, True)
    if sheet is not None:
        raise InputError(f"`sheet={sheet!r}` was given but this is a text file, not a "
                         "spreadsheet.", location=Location(file=name),
                         hint="Leave out `sheet` for CSV and TSV files.")
    text = _decode(data, encoding, name)
    if not text.strip(_SPACES + "\r\n"):
        raise InputError("the file is empty.", location=Location(file=name),
                         hint="Export the table again; it has no header and no data.")
    delimiter = sep or _sniff_sep(text, suffix)
    # csv.reader counts physical lines (a quoted cell may span several): keep one per record
    lines, line_no = [], 1
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, strict=True)
    rows = []
    try:
        for rec in reader:
            rows.append(rec)
            lines.append(line_no)
            line_no = reader.line_num + 1
    except csv.Error as exc:
        raise InputError(f"the line cannot be split into cells ({exc}); a quote (\") is "
                         "probably never closed, or text follows a closing quote.",
                         location=Location(file=name, row=f"line {line_no}"),
                         hint="Open the file in a text editor at that line and fix the "
                              "quotes; a quoted cell must end with a quote before the next "
                              "separator.") from None
    width = max((len(r) for r in rows), default=0)
    frame = pd.DataFrame([r + [""] * (width - len(r)) for r in rows], dtype=object)
    return _trimmed(frame, np.asarray(lines, dtype=int), name, None, False)


def _spreadsheet_cells(data: bytes, name: str, sheet):
    try:
        import openpyxl
        wb = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=True)
    except Exception as exc:  # zip, XML and openpyxl errors all mean "not a readable workbook"
        raise InputError(f"the file cannot be read as an XLSX workbook ({type(exc).__name__}: "
                         f"{exc}).", location=Location(file=name),
                         hint="It may be truncated or not a spreadsheet; open it in a "
                              "spreadsheet program and save it again as .xlsx or .csv.") \
            from None
    try:
        names = wb.sheetnames
        if sheet is None:
            chosen = names[0]
        elif isinstance(sheet, int) and not isinstance(sheet, bool):
            if not 0 <= sheet < len(names):
                raise InputError(f"sheet number {sheet} does not exist; the workbook has "
                                 f"{len(names)} sheet(s): {names}.", location=Location(file=name),
                                 hint="Sheets are numbered from 0; or pass the sheet's name.")
            chosen = names[sheet]
        else:
            if sheet not in names:
                raise InputError(f"no sheet named {sheet!r}; sheets are {names}.",
                                 location=Location(file=name),
                                 hint="Pass one of those names (case counts) or a number "
                                      "from 0.")
            chosen = sheet
        try:
            ws = wb[chosen]
            rows = [list(r) for r in ws.iter_rows(min_row=1, min_col=1, values_only=True)]
            nonblank = [r for r in rows if any(not is_blank(x) for x in r)]
            others = []
            if not nonblank:
                for other in names:
                    if other != chosen and any(any(not is_blank(x) for x in r)
                                               for r in wb[other].iter_rows(values_only=True)):
                        others.append(other)
        except InputError:
            raise
        except Exception as exc:  # a damaged part of the archive
            raise InputError(f"sheet {chosen!r} cannot be read ({type(exc).__name__}: {exc}).",
                             location=Location(file=name, sheet=chosen),
                             hint="The workbook may be damaged; open it in a spreadsheet "
                                  "program and save it again.") from None
        if not nonblank:
            hint = (f"The data seem to be on sheet(s) {others}; pass sheet={others[0]!r}."
                    if others else "No sheet of this workbook holds data.")
            raise InputError(f"sheet {chosen!r} is empty.",
                             location=Location(file=name, sheet=chosen), hint=hint)
    finally:
        wb.close()
    width = max(len(r) for r in rows)
    frame = pd.DataFrame([r + [None] * (width - len(r)) for r in rows], dtype=object)
    return frame, np.arange(1, len(rows) + 1), chosen


def _trimmed(frame: pd.DataFrame, lines: np.ndarray, name: str, sheet, spreadsheet) -> Cells:
    blank = frame.map(is_blank).to_numpy() if frame.size else np.ones(frame.shape, bool)
    keep_rows = ~blank.all(axis=1)
    frame, lines, blank = frame[keep_rows], lines[keep_rows], blank[keep_rows]
    if frame.shape[0] == 0:
        raise InputError("the file holds no values (only blank lines).",
                         location=Location(file=name, sheet=sheet),
                         hint="Export the table again with its data.")
    used = np.flatnonzero(~blank.all(axis=0))
    frame = frame.iloc[:, : used[-1] + 1]
    frame = frame.reset_index(drop=True)
    frame.columns = range(frame.shape[1])
    return Cells(frame, np.asarray(lines), name, sheet, spreadsheet)


# ---------------------------------------------------------------------------- numbers
class BadCell:
    """A count cell that is not a number: the text as found, why, and what to do."""

    __slots__ = ("text", "reason", "hint")

    def __init__(self, text: str, reason: str, hint: str):
        self.text, self.reason, self.hint = text, reason, hint

    def __repr__(self) -> str:
        return f"BadCell({self.text!r}: {self.reason})"

    def describe(self, what: str = "count cell") -> str:
        """E.g. "count cell holds text '2,5', not a number (it has a comma, ...)"."""
        return (f"{what} holds text {self.text!r}, not a number"
                + (f" ({self.reason})" if self.reason else ""))


_HINT_TEXT = ("Counts must be numbers; fix the cell (decimal commas and thousands separators "
              "can be declared with decimal=',' / thousands=' ').")


def _thousands_chars(thousands: str) -> str:
    return _SPACES if thousands.strip(_SPACES) == "" else thousands


def parse_number(x, decimal: str = ".", thousands: str | None = None):
    """One count cell as a float (NaN when blank), or a :class:`BadCell` saying why not.

    >>> parse_number("1.200,5", decimal=",", thousands=".")
    1200.5
    >>> parse_number("2,5").reason
    "it has a comma, but decimal='.' (the default)"
    """
    if is_blank(x):
        return float("nan")
    if isinstance(x, (bool, np.bool_)):
        return BadCell(str(x), "a true/false value", "Counts must be numbers >= 0.")
    if isinstance(x, (int, np.integer)):
        try:
            return float(x)
        except OverflowError:
            return float("inf")
    if isinstance(x, (float, np.floating)):
        return float(x)
    if isinstance(x, (_dt.date, _dt.time, _dt.datetime, _dt.timedelta)):
        return BadCell(str(x), "a date or time",
                       "The spreadsheet formats this cell as a date; format the column as a "
                       "number and save again.")
    s = str(x).strip(_SPACES)
    low = s.lower()
    if low in NA_TOKENS:
        return BadCell(s, "a missing-value marker",
                       "Write 0 where the taxon was looked for and not found; drop the sample "
                       "(or the taxon) where it was not recorded.")
    if low in _INFINITE:
        return float(low.replace("infinity", "inf"))
    if thousands:
        seps = _thousands_chars(thousands)
        if any(c in s for c in seps):
            body = s.lstrip("+-")
            head = body.split(decimal, 1)[0] if decimal not in seps else body
            unified = "".join(" " if c in seps else c for c in head)
            if not re.fullmatch(r"\d{1,3}(?: \d{3})+", unified):
                return BadCell(s, f"the thousands separator {thousands!r} does not stand "
                                  "between groups of three digits",
                               "Check the cell; if it is a decimal number, declare the "
                               "decimal mark with decimal=...")
            s = "".join(c for c in s if c not in seps)
    if decimal != ".":
        if "." in s:
            return BadCell(s, f"it has a '.', but decimal={decimal!r}: the file mixes "
                              "decimal marks",
                           "Use one decimal mark throughout the file, or declare the point "
                           "as thousands separator with thousands='.'.")
        s = s.replace(decimal, ".")
    elif "," in s:
        return BadCell(s, "it has a comma, but decimal='.' (the default)",
                       "For a decimal comma pass decimal=','; for a thousands separator "
                       "pass thousands=','.")
    if not _PLAIN.fullmatch(s):
        return BadCell(s, "", _HINT_TEXT)
    return float(s)


def parse_numbers(frame: pd.DataFrame, decimal: str = ".",
                  thousands: str | None = None) -> tuple[np.ndarray, np.ndarray, list]:
    """Parse every cell of ``frame``: (float values, bad-cell mask, BadCell per bad cell).

    Bad cells hold NaN in the values; the list follows row-major order of the mask.
    Columns of plain numbers take a vectorised path; the rest are parsed cell by cell.
    """
    n, p = frame.shape
    values = np.full((n, p), np.nan)
    bad = np.zeros((n, p), dtype=bool)
    found: dict[tuple[int, int], BadCell] = {}
    for j in range(p):
        col = frame.iloc[:, j]
        todo = np.arange(n)
        if decimal == "." and not thousands:
            num = pd.to_numeric(col.map(lambda v: v if isinstance(v, str) else
                                        (v if isinstance(v, (int, float)) and
                                         not isinstance(v, bool) else None)),
                                errors="coerce").to_numpy(dtype=float, na_value=np.nan)
            ok = ~np.isnan(num) & np.isfinite(num)
            values[ok, j] = num[ok]
            todo = np.flatnonzero(~ok)
        for i in todo:
            v = parse_number(col.iloc[i], decimal, thousands)
            if isinstance(v, BadCell):
                bad[i, j] = True
                found[(i, j)] = v
            else:
                values[i, j] = v
    order = [found[(i, j)] for i, j in np.argwhere(bad)]
    return values, bad, order
