"""Readers: wide tables (CSV, TSV, XLSX), long tables and Darwin Core events + occurrences.

Every reader only *reads* the user's files, keeps track of which line (or spreadsheet cell)
each value came from, and hands the cells to :class:`CommunityTable`, the one place where
values are checked. Errors therefore name the file, the line or cell, and the column.
"""
from __future__ import annotations

import csv
import io
import os
import zipfile
from pathlib import Path
import numpy as np
import pandas as pd

from .errors import InputError, Location
from .table import CommunityTable, Origin, _column_letter, _listing

__all__ = ["read_counts", "read_samples", "read_long", "read_darwin_core", "read_cells"]

_SAMPLE_HEADERS = {"sample", "samples", "sample_id", "sampleid", "sample id", "sample_name",
                   "site", "station", "event", "eventid", "event_id", "plot", "quadrat",
                   "trap", "core", "tank", "replicate"}
_TAXON_HEADERS = {"taxon", "taxa", "taxon_id", "taxonid", "species", "scientificname",
                  "scientific_name", "otu", "otu_id", "asv", "feature", "feature_id",
                  "morphospecies", "morphotype", "name"}
_SPREADSHEET = {".xlsx", ".xlsm"}


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
                            cell=f"{_column_letter(j)}{line}" +
                            (f" ({header!r})" if header else ""))
        col = None if j is None else (f"column {j + 1}" + (f" ({header!r})" if header else ""))
        return Location(file=self.file, sheet=self.sheet,
                        row=None if line is None else f"line {line}", column=col)


def _display_name(path) -> str:
    return os.fspath(path) if not isinstance(path, (bytes, bytearray)) else "<bytes>"


def _blank(x) -> bool:
    return x is None or (isinstance(x, float) and np.isnan(x)) or \
        (isinstance(x, str) and x.strip() == "")


def _sniff_sep(text: str, suffix: str) -> str:
    if suffix in {".tsv", ".tab"}:
        return "\t"
    first = next((ln for ln in text.splitlines() if ln.strip()), "")
    try:
        return csv.Sniffer().sniff(first, delimiters=",;\t|").delimiter
    except csv.Error:
        return "\t" if "\t" in first else ","


def _decode(raw: bytes, encoding: str | None, name: str) -> str:
    enc = encoding or "utf-8-sig"
    try:
        text = raw.decode(enc)
    except UnicodeDecodeError as exc:
        line = raw[:exc.start].count(b"\n") + 1
        raise InputError(
            f"the file is not valid {enc} text: byte 0x{raw[exc.start]:02x} cannot be decoded "
            f"(first seen at line {line}).",
            location=Location(file=name, row=f"line {line}"),
            hint="Pass the file's encoding, e.g. encoding='latin-1' or encoding='cp1252' "
                 "(spreadsheets saved as 'CSV' on older systems often use these).") from None
    except LookupError:
        raise InputError(f"unknown text encoding {enc!r}.", location=Location(file=name),
                         hint="Use a name such as 'utf-8', 'latin-1' or 'cp1252'.") from None
    if encoding and encoding.lower().replace("_", "-") in {"utf-8", "utf8"}:
        text = text.lstrip("\ufeff")
    return text


def read_cells(path, *, sheet=None, encoding: str | None = None, sep: str | None = None,
               data: bytes | None = None) -> Cells:
    """Raw cells of a delimited text file or a spreadsheet sheet, as strings.

    Blank rows are skipped (their line numbers are kept for the others), trailing blank
    columns are removed.
    """
    name = _display_name(path)
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
            raise InputError("this is a folder, not a file.", location=Location(file=name)) \
                from None
    if len(data.strip()) == 0:
        raise InputError("the file is empty.", location=Location(file=name),
                         hint="Export the table again; it has no header and no data.")
    if suffix in _SPREADSHEET or data[:4] == b"PK\x03\x04":
        frame, lines, sheet_name = _spreadsheet_cells(data, name, sheet)
        return _trimmed(frame, lines, name, sheet_name, True)
    if sheet is not None:
        raise InputError(f"`sheet={sheet!r}` was given but this is a text file, not a "
                         "spreadsheet.", location=Location(file=name))
    text = _decode(data, encoding, name)
    delimiter = sep or _sniff_sep(text, suffix)
    # csv.reader counts physical lines (a quoted cell may span several): keep one per record
    lines, line_no = [], 1
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter)
    rows = []
    for rec in reader:
        rows.append(rec)
        lines.append(line_no)
        line_no = reader.line_num + 1
    width = max((len(r) for r in rows), default=0)
    frame = pd.DataFrame([r + [""] * (width - len(r)) for r in rows], dtype=object)
    return _trimmed(frame, np.asarray(lines, dtype=int), name, None, False)


def _spreadsheet_cells(data: bytes, name: str, sheet):
    try:
        import openpyxl
        wb = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=True)
    except (zipfile.BadZipFile, KeyError, OSError, ValueError, EOFError) as exc:
        raise InputError(f"the file cannot be read as an XLSX workbook ({type(exc).__name__}: "
                         f"{exc}).", location=Location(file=name),
                         hint="It may be truncated or not a spreadsheet; open it in a "
                              "spreadsheet program and save it again as .xlsx or .csv.") \
            from None
    try:
        names = wb.sheetnames
        if sheet is None:
            chosen = names[0]
        elif isinstance(sheet, int):
            if not 0 <= sheet < len(names):
                raise InputError(f"sheet number {sheet} does not exist; the workbook has "
                                 f"{len(names)} sheet(s): {names}.", location=Location(file=name))
            chosen = names[sheet]
        else:
            if sheet not in names:
                raise InputError(f"no sheet named {sheet!r}; sheets are {names}.",
                                 location=Location(file=name))
            chosen = sheet
        ws = wb[chosen]
        rows = [list(r) for r in ws.iter_rows(min_row=1, min_col=1, values_only=True)]
        nonblank = [r for r in rows if any(not _blank(x) for x in r)]
        if not nonblank:
            others = []
            for other in names:
                if other == chosen:
                    continue
                if any(any(not _blank(x) for x in r)
                       for r in wb[other].iter_rows(values_only=True)):
                    others.append(other)
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
    blank = frame.map(_blank).to_numpy() if frame.size else np.ones(frame.shape, bool)
    keep_rows = ~blank.all(axis=1)
    frame, lines, blank = frame[keep_rows], lines[keep_rows], blank[keep_rows]
    if frame.shape[0] == 0:
        raise InputError("the file holds no values (only blank lines).",
                         location=Location(file=name, sheet=sheet))
    used = np.flatnonzero(~blank.all(axis=0))
    frame = frame.iloc[:, : used[-1] + 1]
    frame = frame.reset_index(drop=True)
    frame.columns = range(frame.shape[1])
    return Cells(frame, np.asarray(lines), name, sheet, spreadsheet)


def _header(cells: Cells, what: str) -> list[str]:
    head = [("" if _blank(x) else str(x).strip()) for x in cells.frame.iloc[0]]
    if cells.frame.shape[0] < 2:
        raise InputError(f"the file has a header line but no {what} rows.",
                         location=cells.where(0), hint="Export the table again with its data.")
    return head


def _to_text(x) -> str:
    if _blank(x):
        return ""
    if isinstance(x, float) and x.is_integer():
        return str(int(x))
    return str(x).strip()


# ---------------------------------------------------------------------------- sample tables
def read_samples(path, *, id_column: str | None = None, sheet=None,
                 encoding: str | None = None, sep: str | None = None) -> pd.DataFrame:
    """Read a sample-information table (one row per sample) from CSV, TSV or XLSX.

    The sample label is the first column, or ``id_column``. Columns whose every value is a
    number become numeric; everything else stays text. Labels must be unique.
    """
    cells = read_cells(path, sheet=sheet, encoding=encoding, sep=sep)
    head = _header(cells, "sample")
    id_j = _id_column(cells, head, id_column)
    body = cells.frame.iloc[1:]
    ids = [_to_text(x) for x in body.iloc[:, id_j]]
    _check_ids(cells, ids, id_j, head[id_j], "sample")
    out = {}
    for j, h in enumerate(head):
        if j == id_j:
            continue
        if h == "":
            if body.iloc[:, j].map(_blank).all():
                continue
            raise InputError("a column has values but no header.",
                             location=cells.where(0, j),
                             hint="Give every column of the sample table a name.")
        if h in out:
            raise InputError(f"column name {h!r} appears twice in the header.",
                             location=cells.where(0, j))
        col = body.iloc[:, j]
        texts = col.map(_to_text)
        nums = pd.to_numeric(texts.where(texts != "", None), errors="coerce")
        is_num = (texts == "") | nums.notna()
        if is_num.all() and (texts != "").any():
            out[h] = nums.to_numpy(dtype=float)
        else:
            out[h] = pd.array(texts.where(texts != "", None).to_numpy(dtype=object),
                              dtype="object")
    frame = pd.DataFrame(out, index=pd.Index(ids, name="sample"))
    frame.attrs["file"] = cells.file
    return frame


def _id_column(cells: Cells, head: list[str], id_column) -> int:
    if id_column is None:
        return 0
    if id_column not in head:
        raise InputError(f"id column {id_column!r} is not in the header; columns are "
                         f"{_listing([h for h in head if h], 20)}.", location=cells.where(0))
    return head.index(id_column)


def _check_ids(cells: Cells, ids: list[str], j: int, header: str, what: str):
    seen: dict[str, int] = {}
    for i, x in enumerate(ids):
        if x == "":
            raise InputError(f"a {what} label is blank.", location=cells.where(i + 1, j, header),
                             hint=f"Give every {what} a name.")
        if x in seen:
            first = int(cells.lines[seen[x] + 1])
            raise InputError(f"{what} label {x!r} appears twice (also on line {first}).",
                             location=cells.where(i + 1, j, header),
                             hint=f"{what.capitalize()} labels must be unique; rename or merge "
                                  "the rows.")
        seen[x] = i


def _sample_frame(samples, sheet, encoding, sep, id_column=None):
    if samples is None or isinstance(samples, pd.DataFrame):
        return samples
    return read_samples(samples, sheet=sheet, encoding=encoding, sep=sep, id_column=id_column)


# ---------------------------------------------------------------------------- wide tables
def read_counts(path, samples=None, *, rows: str | None = None, id_column: str | None = None,
                taxa=None, effort=None, sheet=None, samples_sheet=None,
                samples_id_column: str | None = None, encoding: str | None = None,
                sep: str | None = None, decimal: str = ".", thousands: str | None = None,
                empty: str = "error") -> CommunityTable:
    """Read a wide table of counts (CSV, TSV or XLSX) and, optionally, sample information.

    Parameters
    ----------
    path : str or path
        The counts file. ``.xlsx`` is read as a workbook, anything else as delimited text
        (separator sniffed from the header unless ``sep`` is given).
    samples : str, path or DataFrame, optional
        Sample information, one row per sample, matched to the counts by label.
    rows : {'samples', 'taxa'}, optional
        What the rows of the counts file are. When omitted it is decided from the sample
        table (which axis carries its labels) or from the header of the label column
        (``sample``, ``site``... vs ``taxon``, ``species``...); otherwise an error asks.
    id_column : str, optional
        Header of the label column (default: the first column).
    taxa : DataFrame, optional
        Taxon information indexed by taxon label.
    effort : str or array_like, optional
        Sampling-effort column of the sample table (or values), see :class:`CommunityTable`.
    sheet, samples_sheet : str or int, optional
        Workbook sheets for the counts and the sample table.
    encoding : str, optional
        Text encoding (default UTF-8, with or without byte-order mark).
    decimal, thousands : str
        Decimal mark and thousands separator used in the count cells.
    empty : {'error', 'drop', 'keep'}
        Policy for all-zero samples and taxa (see :class:`CommunityTable`).

    Returns
    -------
    CommunityTable

    Raises
    ------
    InputError
        Naming the file and the line (or cell) and column of the first problem.
    """
    if rows not in (None, "samples", "taxa"):
        raise InputError(f"`rows` must be 'samples' or 'taxa'; got {rows!r}.")
    info = _sample_frame(samples, samples_sheet, encoding, sep, samples_id_column)
    cells = read_cells(path, sheet=sheet, encoding=encoding, sep=sep)
    head = _header(cells, "data")
    id_j = _id_column(cells, head, id_column)
    body = cells.frame.iloc[1:]
    row_ids = [_to_text(x) for x in body.iloc[:, id_j]]
    data_cols = [j for j in range(len(head)) if j != id_j]
    # columns without a header: an error if they hold anything
    for j in list(data_cols):
        if head[j] == "":
            if body.iloc[:, j].map(_blank).all():
                data_cols.remove(j)
                continue
            raise InputError("a column holds values but has no header.",
                             location=cells.where(0, j),
                             hint="Every column needs a label (a sample or taxon name).")
    col_ids = [head[j] for j in data_cols]
    if not col_ids:
        raise InputError("the file has a label column but no data columns.",
                         location=cells.where(0))
    rows, why = _orientation(rows, info, row_ids, col_ids, head[id_j], cells)
    row_what = "sample" if rows == "samples" else "taxon"
    _check_ids(cells, row_ids, id_j, head[id_j], row_what)
    seen: dict[str, int] = {}
    for j, c in zip(data_cols, col_ids):
        if c in seen:
            raise InputError(f"{'taxon' if rows == 'samples' else 'sample'} label {c!r} "
                             f"appears twice in the header (columns {seen[c] + 1} and {j + 1}).",
                             location=cells.where(0, j), hint="Column labels must be unique.")
        seen[c] = j

    values = body.iloc[:, data_cols].map(lambda x: _clean_number(x, decimal, thousands))
    values.index, values.columns = row_ids, col_ids
    origin = Origin(file=cells.file, sheet=cells.sheet, rows=rows,
                    row_numbers={r: int(cells.lines[i + 1]) for i, r in enumerate(row_ids)},
                    column_numbers=dict(zip(col_ids, data_cols)),
                    spreadsheet=cells.spreadsheet)
    counts = values if rows == "samples" else values.T
    table = CommunityTable(counts, info, taxa, effort=effort, empty=empty, origin=origin)
    table._notes = (f"rows of {cells.file!r} read as {rows} ({why})",)
    return table


def _clean_number(x, decimal: str, thousands: str | None):
    if _blank(x):
        return np.nan
    if isinstance(x, (int, float, np.integer, np.floating)) and not isinstance(x, bool):
        return float(x)
    s = str(x).strip()
    if thousands:
        s = s.replace(thousands, "")
    if decimal != ".":
        s = s.replace(decimal, ".")
    return s


def _orientation(rows, info, row_ids, col_ids, id_header, cells):
    if rows is not None:
        return rows, "as requested"
    if info is not None:
        known = set(map(str, info.index))
        in_rows = sum(r in known for r in row_ids)
        in_cols = sum(c in known for c in col_ids)
        if in_rows and not in_cols:
            return "samples", "row labels match the sample table"
        if in_cols and not in_rows:
            return "taxa", "column labels match the sample table"
        if in_rows and in_cols:
            raise InputError(
                "both row and column labels match sample labels, so it is unclear whether "
                "rows are samples or taxa.", location=Location(file=cells.file),
                hint="Pass rows='samples' or rows='taxa'.")
        raise InputError(
            "neither the row labels nor the column labels match the sample table's labels "
            f"(rows start {_listing(row_ids, 3)}; columns start {_listing(col_ids, 3)}; "
            f"the sample table lists {_listing(list(known), 3)}).",
            location=Location(file=cells.file),
            hint="Check that both files use the same sample labels (case and spaces count).")
    key = id_header.strip().lower()
    if key in _SAMPLE_HEADERS:
        return "samples", f"the label column is headed {id_header!r}"
    if key in _TAXON_HEADERS:
        return "taxa", f"the label column is headed {id_header!r}"
    raise InputError(
        f"cannot tell whether the rows are samples or taxa ({len(row_ids)} rows x "
        f"{len(col_ids)} columns; label column headed {id_header!r}).",
        location=Location(file=cells.file),
        hint="Pass rows='samples' (one row per sample) or rows='taxa' (one row per taxon), "
             "or give the sample table with samples=... so labels can be matched.")


# ---------------------------------------------------------------------------- long tables
def read_long(path, samples=None, *, sample: str = "sample", taxon: str = "taxon",
              count: str = "count", sum_duplicates: bool = False, effort=None, sheet=None,
              samples_sheet=None, encoding: str | None = None, sep: str | None = None,
              decimal: str = ".", thousands: str | None = None,
              empty: str = "error") -> CommunityTable:
    """Read a long (tidy) table: one row per (sample, taxon, count).

    Pairs absent from the file are zeros. A (sample, taxon) pair listed twice is an error
    that lists the pairs and their lines, unless ``sum_duplicates=True``.
    """
    info = _sample_frame(samples, samples_sheet, encoding, sep)
    cells = read_cells(path, sheet=sheet, encoding=encoding, sep=sep)
    head = _header(cells, "data")
    cols = {}
    for role, name in (("sample", sample), ("taxon", taxon), ("count", count)):
        if name not in head:
            raise InputError(f"the {role} column {name!r} is not in the header; columns are "
                             f"{_listing([h for h in head if h], 20)}.",
                             location=cells.where(0),
                             hint=f"Name it with {role}='...'.")
        cols[role] = head.index(name)
    body = cells.frame.iloc[1:].reset_index(drop=True)
    s_ids = [_to_text(x) for x in body.iloc[:, cols["sample"]]]
    t_ids = [_to_text(x) for x in body.iloc[:, cols["taxon"]]]
    for ids, role in ((s_ids, "sample"), (t_ids, "taxon")):
        for i, x in enumerate(ids):
            if x == "":
                raise InputError(f"the {role} label is blank.",
                                 location=cells.where(i + 1, cols[role], head[cols[role]]))
    raw = body.iloc[:, cols["count"]].map(lambda x: _clean_number(x, decimal, thousands))
    vals = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    bad = ~np.isfinite(vals) | (vals < 0)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        shown = body.iloc[i, cols["count"]]
        what = ("is blank" if _blank(shown) else
                f"holds {shown!r}, not a finite number >= 0")
        raise InputError(f"the count {what} ({int(bad.sum())} bad count(s) in all).",
                         location=cells.where(i + 1, cols["count"], count),
                         hint="Counts must be numbers >= 0; write 0 or leave the pair out.")
    frame = pd.DataFrame({"s": s_ids, "t": t_ids, "v": vals,
                          "line": cells.lines[1:]})
    dup = frame.duplicated(["s", "t"], keep=False)
    notes = []
    if dup.any():
        pairs = frame[dup].groupby(["s", "t"], sort=False)["line"].apply(list)
        if not sum_duplicates:
            shown = "; ".join(f"({s!r}, {t!r}) on lines {ls}" for (s, t), ls in
                              list(pairs.items())[:5])
            raise InputError(f"{len(pairs)} (sample, taxon) pair(s) appear more than once: "
                             f"{shown}{' ...' if len(pairs) > 5 else ''}.",
                             location=Location(file=cells.file),
                             hint="Fix the duplicates, or pass sum_duplicates=True to add "
                                  "their counts.")
        notes.append(f"{len(pairs)} repeated (sample, taxon) pair(s) summed")
    wide = frame.pivot_table(index="s", columns="t", values="v", aggfunc="sum",
                             fill_value=0.0, sort=False)
    wide = wide.reindex(index=list(dict.fromkeys(s_ids)), columns=list(dict.fromkeys(t_ids)))
    table = CommunityTable(wide.astype(float), info, effort=effort, empty=empty,
                           origin=Origin(file=cells.file, sheet=cells.sheet))
    table._notes = tuple(notes)
    return table


# ---------------------------------------------------------------------------- Darwin Core
_DWC_QTY = "organismquantity"


def _dwc_sources(events, occurrences):
    """(name, bytes) of the event and occurrence tables from two paths, a folder or a zip."""
    if occurrences is not None:
        return (_display_name(events), None), (_display_name(occurrences), None)
    p = Path(events)
    if p.is_dir():
        ev = sorted(p.glob("event*.*"))
        oc = sorted(p.glob("occurrence*.*"))
        if not ev or not oc:
            raise InputError("the folder must hold an event table (event.txt/.csv) and an "
                             "occurrence table (occurrence.txt/.csv).",
                             location=Location(file=str(p)))
        return (str(ev[0]), None), (str(oc[0]), None)
    try:
        with zipfile.ZipFile(p) as zf:
            names = zf.namelist()
            ev = [n for n in names if Path(n).name.lower().startswith("event")]
            oc = [n for n in names if Path(n).name.lower().startswith("occurrence")]
            if not ev or not oc:
                raise InputError("the archive must hold event and occurrence tables; it has "
                                 f"{_listing(names)}.", location=Location(file=str(p)))
            return ((f"{p}!{ev[0]}", zf.read(ev[0])), (f"{p}!{oc[0]}", zf.read(oc[0])))
    except (zipfile.BadZipFile, FileNotFoundError, IsADirectoryError):
        raise InputError("give an event table and an occurrence table, or a folder or zip "
                         "archive that holds both.", location=Location(file=str(p))) from None


def _dwc_frame(name, data, encoding, sep):
    cells = read_cells(name.split("!")[0] if data is None else name, encoding=encoding,
                       sep=sep, data=data)
    head = _header(cells, "record")
    return cells, head, cells.frame.iloc[1:].reset_index(drop=True)


def read_darwin_core(events, occurrences=None, *, effort="auto", sum_duplicates: bool = True,
                     encoding: str | None = None, sep: str | None = None,
                     empty: str = "error") -> CommunityTable:
    """Read Darwin Core (TDWG) sampling events and the occurrences recorded in them.

    Parameters
    ----------
    events : path
        Event table with ``eventID`` and any sample information (``eventDate``,
        ``locationID``, ``sampleSizeValue``/``sampleSizeUnit``, ``samplingEffort``...).
        May also be a folder or zip archive holding ``event.*`` and ``occurrence.*``.
    occurrences : path, optional
        Occurrence table with ``eventID``, ``scientificName`` and the quantity:
        ``organismQuantity`` with ``organismQuantityType``, or ``individualCount``.
        ``occurrenceStatus = absent`` records count as 0.
    effort : 'auto', None or str
        ``'auto'`` takes ``sampleSizeValue`` when it is numeric for every event (the unit is
        noted); a column name takes that event column; None uses no effort.
    sum_duplicates : bool, default True
        Several occurrence records of one taxon in one event (sexes, life stages) are
        added up, and the number is noted in ``table.notes``.
    """
    (ev_name, ev_data), (oc_name, oc_data) = _dwc_sources(events, occurrences)
    ev_cells, ev_head, ev_body = _dwc_frame(ev_name, ev_data, encoding, sep)
    oc_cells, oc_head, oc_body = _dwc_frame(oc_name, oc_data, encoding, sep)
    lower_ev = {h.lower(): j for j, h in enumerate(ev_head)}
    lower_oc = {h.lower(): j for j, h in enumerate(oc_head)}
    if "eventid" not in lower_ev:
        raise InputError("the event table has no eventID column.", location=ev_cells.where(0),
                         hint="Darwin Core events are keyed by eventID.")
    for need in ("eventid", "scientificname"):
        if need not in lower_oc:
            raise InputError(f"the occurrence table has no {need.replace('id', 'ID').replace('name', 'Name')} column.",
                             location=oc_cells.where(0))
    ev_j = lower_ev["eventid"]
    ev_ids = [_to_text(x) for x in ev_body.iloc[:, ev_j]]
    _check_ids(ev_cells, ev_ids, ev_j, "eventID", "event")

    # sample information: every other event column, numbers as numbers
    info = {}
    for j, h in enumerate(ev_head):
        if j == ev_j or h == "":
            continue
        texts = ev_body.iloc[:, j].map(_to_text)
        nums = pd.to_numeric(texts.where(texts != "", None), errors="coerce")
        info[h] = (nums.to_numpy(float) if ((texts == "") | nums.notna()).all()
                   and (texts != "").any() else texts.where(texts != "", None).to_numpy(object))
    info = pd.DataFrame(info, index=pd.Index(ev_ids, name="sample"))

    # quantities
    n = len(oc_body)
    line = oc_cells.lines[1:]
    oc_ev = [_to_text(x) for x in oc_body.iloc[:, lower_oc["eventid"]]]
    oc_tx = [_to_text(x) for x in oc_body.iloc[:, lower_oc["scientificname"]]]
    qty = np.full(n, np.nan)
    qtype = [""] * n
    if _DWC_QTY in lower_oc:
        q = oc_body.iloc[:, lower_oc[_DWC_QTY]].map(_to_text)
        qty = np.array(pd.to_numeric(q.where(q != "", None), errors="coerce"), dtype=float)
        textual = (q != "") & np.isnan(qty)
        if textual.any():
            i = int(np.flatnonzero(textual.to_numpy())[0])
            raise InputError(f"organismQuantity holds {q.iloc[i]!r}, not a number.",
                             location=oc_cells.where(i + 1, lower_oc[_DWC_QTY],
                                                     "organismQuantity"))
        if "organismquantitytype" in lower_oc:
            qtype = [(_to_text(x)).lower() for x in
                     oc_body.iloc[:, lower_oc["organismquantitytype"]]]
    if "individualcount" in lower_oc:
        ic = oc_body.iloc[:, lower_oc["individualcount"]].map(_to_text)
        icv = pd.to_numeric(ic.where(ic != "", None), errors="coerce").to_numpy(float)
        fill = np.isnan(qty) & ~np.isnan(icv)
        qty = np.where(fill, icv, qty).astype(float)
        qtype = ["individuals" if f else t for f, t in zip(fill, qtype)]
    status = ([(_to_text(x)).lower() for x in oc_body.iloc[:, lower_oc["occurrencestatus"]]]
              if "occurrencestatus" in lower_oc else [""] * n)
    for i in range(n):
        if oc_ev[i] == "" or oc_tx[i] == "":
            field = "eventID" if oc_ev[i] == "" else "scientificName"
            raise InputError(f"{field} is blank.", location=oc_cells.where(i + 1, lower_oc[
                field.lower()], field))
        if status[i] == "absent":
            if not np.isnan(qty[i]) and qty[i] > 0:
                raise InputError(f"the record is marked absent but has quantity {qty[i]:g}.",
                                 location=oc_cells.where(i + 1))
            qty[i] = 0.0
            continue
        if np.isnan(qty[i]):
            raise InputError("the occurrence has no quantity (organismQuantity or "
                             "individualCount).", location=oc_cells.where(i + 1),
                             hint="Abundance analyses need a number for every record.")
        if qty[i] < 0 or not np.isfinite(qty[i]):
            raise InputError(f"the quantity {qty[i]:g} is not a finite number >= 0.",
                             location=oc_cells.where(i + 1))
    kinds = sorted({t if t else "(unstated)" for t, s in zip(qtype, status) if s != "absent"})
    if len(kinds) > 1:
        first = {k: int(line[[(t or "(unstated)") for t in qtype].index(k)]) for k in kinds}
        raise InputError(f"occurrences mix quantity types {kinds} (first lines: {first}).",
                         location=Location(file=oc_cells.file, column="organismQuantityType"),
                         hint="Keep one quantity type per analysis (e.g. only 'individuals').")
    known = set(ev_ids)
    orphans = sorted({e for e in oc_ev if e not in known})
    if orphans:
        i = next(k for k, e in enumerate(oc_ev) if e not in known)
        raise InputError(f"{len(orphans)} eventID(s) in the occurrences are not in the event "
                         f"table: {_listing(orphans)}.",
                         location=oc_cells.where(i + 1, lower_oc["eventid"], "eventID"),
                         hint="Every occurrence must belong to a listed event.")
    frame = pd.DataFrame({"s": oc_ev, "t": oc_tx, "v": qty, "line": line})
    dup = frame.duplicated(["s", "t"], keep=False)
    notes = [f"quantity type: {kinds[0] if kinds else '(none)'}"]
    if dup.any():
        pairs = frame[dup].groupby(["s", "t"], sort=False)["line"].apply(list)
        if not sum_duplicates:
            shown = "; ".join(f"({s!r}, {t!r}) on lines {ls}" for (s, t), ls in
                              list(pairs.items())[:5])
            raise InputError(f"{len(pairs)} (event, taxon) pair(s) have several records: "
                             f"{shown}.", location=Location(file=oc_cells.file),
                             hint="Pass sum_duplicates=True to add them up.")
        notes.append(f"{len(pairs)} (event, taxon) pair(s) with several records were summed")
    wide = frame.pivot_table(index="s", columns="t", values="v", aggfunc="sum",
                             fill_value=0.0, sort=False)
    wide = wide.reindex(index=ev_ids, columns=list(dict.fromkeys(oc_tx)), fill_value=0.0)

    eff = None
    if effort == "auto":
        if "sampleSizeValue" in info.columns and pd.api.types.is_numeric_dtype(
                info["sampleSizeValue"]) and info["sampleSizeValue"].notna().all():
            eff = "sampleSizeValue"
            unit = (info["sampleSizeUnit"].dropna().unique().tolist()
                    if "sampleSizeUnit" in info.columns else [])
            notes.append(f"effort: sampleSizeValue ({', '.join(map(str, unit)) or 'no unit'})")
    elif effort is not None:
        eff = effort
    table = CommunityTable(wide.astype(float), info, effort=eff, empty=empty,
                           origin=Origin(file=ev_cells.file))
    table._notes = tuple(notes)
    return table
