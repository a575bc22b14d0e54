"""Readers: wide tables (CSV, TSV, XLSX), long tables and Darwin Core events + occurrences.

Every reader only *reads* the user's files, keeps track of which line (or spreadsheet cell)
each value came from, and hands the cells to :class:`CommunityTable`, the one place where
values are checked. Errors therefore name the file, the line or cell, and the column.
"""
from __future__ import annotations


import numpy as np
import pandas as pd

from .cells import (NA_TOKENS, BadCell, Cells,
                    is_blank as _blank, parse_number, parse_numbers, read_cells,
                    to_text as _to_text)
from .errors import InputError, Location
from .table import CommunityTable, Origin, listing

__all__ = ["read_counts", "read_samples", "read_long", "read_darwin_core", "read_cells"]

_SAMPLE_HEADERS = {"sample", "samples", "sample_id", "sampleid", "sample id", "sample_name",
                   "site", "station", "event", "eventid", "event_id", "plot", "quadrat",
                   "trap", "core", "tank", "replicate"}
_TAXON_HEADERS = {"taxon", "taxa", "taxon_id", "taxonid", "species", "scientificname",
                  "scientific_name", "otu", "otu_id", "asv", "feature", "feature_id",
                  "morphospecies", "morphotype", "name"}

def _start(cells: Cells, header_row) -> Cells:
    """The cells from the header line on (``header_row`` is 1-based, as the file shows it)."""
    if isinstance(header_row, bool) or not isinstance(header_row, (int, np.integer)) or \
            header_row < 1:
        raise InputError(f"`header_row` must be a line number >= 1; got {header_row!r}.",
                         hint="Lines are numbered from 1, as a text editor or spreadsheet "
                              "shows them.")
    return cells if header_row == 1 else cells.from_line(int(header_row))


def header_names(cells: Cells, what: str) -> list[str]:
    head = [("" if _blank(x) else str(x).strip()) for x in cells.frame.iloc[0]]
    if cells.frame.shape[0] < 2:
        raise InputError(f"the file has a header line but no {what} rows "
                         f"({len(head)} column(s) in the header).",
                         location=cells.where(0), hint="Export the table again with its data.")
    return head


def _check_number_options(decimal, thousands):
    if decimal not in (".", ","):
        raise InputError(f"`decimal` must be '.' or ','; got {decimal!r}.",
                         hint="It is the mark between the whole and the fractional part.")
    if thousands is not None and (not isinstance(thousands, str) or len(thousands) != 1
                                  or thousands.isalnum() or thousands in "+-"):
        raise InputError(f"`thousands` must be one separator character such as ',', '.', "
                         f"' ' or \"'\"; got {thousands!r}.",
                         hint="Leave it out when the file has no thousands separators.")
    if thousands == decimal:
        raise InputError(f"`decimal` and `thousands` are both {decimal!r}.",
                         hint="They must differ, e.g. decimal=',' with thousands='.'.")


# ---------------------------------------------------------------------------- sample tables
def read_samples(path, *, id_column: str | None = None, sheet=None,
                 encoding: str | None = None, sep: str | None = None,
                 decimal: str = ".", thousands: str | None = None,
                 header_row: int = 1) -> pd.DataFrame:
    """Read a sample-information table (one row per sample) from CSV, TSV or XLSX.

    The sample label is the first column, or ``id_column``. Columns whose every value is a
    number (written with ``decimal`` and ``thousands`` as in :func:`read_counts`) become
    numeric; everything else stays text. Labels must be unique. ``header_row`` is the line
    (or spreadsheet row) of the header; lines above it are ignored.
    """
    _check_number_options(decimal, thousands)
    cells = _start(read_cells(path, sheet=sheet, encoding=encoding, sep=sep), header_row)
    head = header_names(cells, "sample")
    id_j = _id_column(cells, head, id_column)
    body = cells.frame.iloc[1:]
    ids = [_to_text(x) for x in body.iloc[:, id_j]]
    check_ids(cells, ids, id_j, head[id_j], "sample")
    out = {}
    seen: dict[str, int] = {}
    for j, h in enumerate(head):
        if j == id_j:
            continue
        if h == "":
            if body.iloc[:, j].map(_blank).all():
                continue
            i = int(np.flatnonzero(~body.iloc[:, j].map(_blank).to_numpy())[0])
            raise InputError(f"a column has values but no header (first value on line "
                             f"{int(cells.lines[i + 1])}).", location=cells.where(0, j),
                             hint="Give every column of the sample table a name.")
        if h in seen:
            raise InputError(f"column name {h!r} appears twice in the header (columns "
                             f"{cells.column_name(seen[h])} and {cells.column_name(j)}).",
                             location=cells.where(0, j, h),
                             hint="Column names must be unique; rename one of them.")
        seen[h] = j
        col = body.iloc[:, j]
        texts = col.map(_to_text)
        nums, unreadable, _ = parse_numbers(col.to_frame(), decimal, thousands)
        if not unreadable.any() and (texts != "").any():
            out[h] = nums[:, 0]
        else:
            out[h] = pd.array(texts.where(texts != "", None).to_numpy(dtype=object),
                              dtype="object")
    frame = pd.DataFrame(out, index=pd.Index(ids, name="sample"))
    frame.attrs["file"] = cells.file
    frame.attrs["lines"] = {x: int(cells.lines[i + 1]) for i, x in enumerate(ids)}
    frame.attrs["columns"] = {h: cells.column_name(j) for j, h in enumerate(head) if h}
    return frame


def _id_column(cells: Cells, head: list[str], id_column) -> int:
    if id_column is None:
        return 0
    if id_column not in head:
        raise InputError(f"id column {id_column!r} is not in the header; columns are "
                         f"{listing([h for h in head if h], 20)}.", location=cells.where(0),
                         hint="Pass the exact header of the label column (case counts).")
    return head.index(id_column)


def check_ids(cells: Cells, ids: list[str], j: int, header: str, what: str):
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


def _sample_frame(samples, sheet, encoding, sep, id_column=None, decimal=".", thousands=None):
    if samples is None or isinstance(samples, pd.DataFrame):
        return samples
    return read_samples(samples, sheet=sheet, encoding=encoding, sep=sep, id_column=id_column,
                        decimal=decimal, thousands=thousands)


# ---------------------------------------------------------------------------- wide tables
def read_counts(path, samples=None, *, rows: str | None = None, id_column: str | None = None,
                taxa=None, effort=None, sheet=None, samples_sheet=None,
                samples_id_column: str | None = None, encoding: str | None = None,
                sep: str | None = None, decimal: str = ".", thousands: str | None = None,
                header_row: int = 1, empty: str = "error", abundance: str = "absolute",
                load=None, spike_in: dict | None = None) -> CommunityTable:
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
        Text encoding (default UTF-8, with or without byte-order mark; UTF-16 with a
        byte-order mark is recognised).
    decimal, thousands : str
        Decimal mark ('.' or ',') and thousands separator used in the count cells (and in
        the numeric columns of a sample table read from a file). A cell
        that does not follow them (a comma under ``decimal='.'``, a point under
        ``decimal=','``, a separator not between groups of three digits) is an error,
        never a guess.
    header_row : int, default 1
        Line (or spreadsheet row) of the header. Spreadsheets often export a group row
        above the taxon names; ``header_row=2`` reads the header from line 2 and ignores
        the lines above it.
    empty : {'error', 'drop', 'keep'}
        Policy for all-zero samples and taxa (see :class:`CommunityTable`).
    abundance : {'absolute', 'relative'}, default 'absolute'
        What the totals mean: counts of individuals or biomass, or sequencing reads and
        percentages (see :class:`CommunityTable`).
    load, spike_in : optional
        With ``abundance='relative'``: a sample column of absolute abundance per sample, or
        ``{'taxon': label, 'added': column}`` for a spike-in (see :class:`CommunityTable`).

    Returns
    -------
    CommunityTable

    Raises
    ------
    InputError
        Naming the file and the line (or cell) and column of the first problem, with a
        hint.
    DesignError
        An effort column that is not in the sample table.
    """
    if rows not in (None, "samples", "taxa"):
        raise InputError(f"`rows` must be 'samples' or 'taxa'; got {rows!r}.",
                         hint="'samples' when each line is a sample, 'taxa' when each line "
                              "is a taxon.")
    _check_number_options(decimal, thousands)
    info = _sample_frame(samples, samples_sheet, encoding, sep, samples_id_column, decimal,
                         thousands)
    cells = _start(read_cells(path, sheet=sheet, encoding=encoding, sep=sep), header_row)
    head = header_names(cells, "data")
    id_j = _id_column(cells, head, id_column)
    body = cells.frame.iloc[1:]
    data_cols = _data_columns(cells, head, id_j, decimal, thousands, header_row)
    row_ids = [_to_text(x) for x in body.iloc[:, id_j]]
    col_ids = [head[j] for j in data_cols]
    explicit = rows is not None
    rows, why = _orientation(rows, info, row_ids, col_ids, head[id_j], cells, data_cols, id_j)
    check_ids(cells, row_ids, id_j, head[id_j], "sample" if rows == "samples" else "taxon")
    _check_column_labels(cells, data_cols, col_ids, "taxon" if rows == "samples" else "sample")
    clash = _label_clash(cells, row_ids, col_ids, data_cols, rows, explicit)
    origin = Origin(file=cells.file, sheet=cells.sheet, rows=rows,
                    row_numbers={r: int(cells.lines[i + 1]) for i, r in enumerate(row_ids)},
                    column_numbers=dict(zip(col_ids, data_cols)),
                    spreadsheet=cells.spreadsheet)
    values = _count_values(body.iloc[:, data_cols], row_ids, col_ids, rows, origin, decimal,
                           thousands)
    frame = pd.DataFrame(values, index=row_ids, columns=col_ids)
    counts = frame if rows == "samples" else frame.T
    table = CommunityTable(counts, info, taxa, effort=effort, empty=empty, origin=origin,
                           abundance=abundance, load=load, spike_in=spike_in)
    table._notes = _reading_notes(cells, rows, why, header_row, clash) + table.notes
    return table


def _no_data_columns(cells: Cells) -> InputError:
    """The error for a file with a label column and nothing else."""
    return InputError("the file has a label column but no data columns.",
                      location=cells.where(0),
                      hint="Check the separator (pass sep=...) or export the table again.")


def _data_columns(cells: Cells, head, id_j, decimal, thousands, header_row) -> list[int]:
    """Positions of the data columns: all but the label column, less unnamed empty ones."""
    data_cols = [j for j in range(len(head)) if j != id_j]
    if not data_cols:
        raise _no_data_columns(cells)
    _second_header(cells, head, data_cols, decimal, thousands, header_row)
    body = cells.frame.iloc[1:]
    # columns without a header: an error if they hold anything
    for j in list(data_cols):
        if head[j] == "":
            filled = ~body.iloc[:, j].map(_blank).to_numpy()
            if not filled.any():
                data_cols.remove(j)
                continue
            i = int(np.flatnonzero(filled)[0])
            ragged = sum(not _blank(x) for x in cells.frame.iloc[0]) < len(head)
            raise InputError(
                f"a column holds values but has no header (first value "
                f"{body.iloc[i, j]!r} on line {int(cells.lines[i + 1])}).",
                location=cells.where(0, j),
                hint="Every column needs a label (a sample or taxon name)"
                     + ("; if that line simply has more cells than the header, fix the "
                        "line (an extra separator?)." if ragged else "."))
    if not data_cols:
        raise _no_data_columns(cells)
    return data_cols


def _check_column_labels(cells: Cells, data_cols, col_ids, col_what: str) -> None:
    """Refuse a column label that appears twice in the header."""
    seen: dict[str, int] = {}
    for j, c in zip(data_cols, col_ids):
        if c in seen:
            raise InputError(f"{col_what} label {c!r} appears twice in the header (columns "
                             f"{cells.column_name(seen[c])} and {cells.column_name(j)}).",
                             location=cells.where(0, j, c), hint="Column labels must be unique.")
        seen[c] = j


def _count_values(block: pd.DataFrame, row_ids, col_ids, rows, origin: Origin, decimal,
                  thousands) -> np.ndarray:
    """The count cells as numbers; the first unreadable cell is an error located by origin."""
    values, bad, found = parse_numbers(block, decimal, thousands)
    if bad.any():
        i, k = np.argwhere(bad)[0]
        sample, taxon = ((row_ids[i], col_ids[k]) if rows == "samples"
                         else (col_ids[k], row_ids[i]))
        cell = found[0]
        raise InputError(f"{cell.describe()}; {int(bad.sum())} cell(s) in all could not be "
                         "read as numbers.",
                         location=origin.cell(sample, taxon), hint=cell.hint)
    return values


def _reading_notes(cells: Cells, rows, why, header_row, clash) -> tuple:
    """Notes on how the file was read: orientation, header line, repeated labels."""
    notes = [f"rows of {cells.file!r} read as {rows} ({why})"]
    if header_row != 1:
        notes.append(f"header read from line {header_row}; the lines above it were ignored")
    if clash:
        notes.append(f"{len(clash)} column label(s) are also row labels (e.g. {clash[0]!r}); "
                     f"read with rows={rows!r} as requested")
    return tuple(notes)


def _looks_like_text(x) -> bool:
    """A non-blank cell that is neither a number (in any common notation) nor a
    missing-value marker."""
    if _blank(x) or isinstance(x, (int, float, np.number)):
        return False
    if str(x).strip().lower() in NA_TOKENS:
        return False
    return all(isinstance(parse_number(x, d, t), BadCell)
               for d, t in ((".", None), (".", ","), (",", " "), (",", ".")))


def _second_header(cells: Cells, head, data_cols, decimal, thousands, header_row):
    """Refuse a second header line (a group row above the taxon names, as spreadsheets
    export them): the first data line holds text, and no number, in its count columns."""
    if cells.frame.shape[0] < 3:
        return
    first = cells.frame.iloc[1, data_cols]
    texts = [x for x in first if _looks_like_text(x)]
    numbers = [x for x in first if not _blank(x) and not _looks_like_text(x)
               and str(x).strip().lower() not in NA_TOKENS]
    if len(texts) < max(1, (len(data_cols) + 1) // 2) or numbers:
        return
    later = cells.frame.iloc[2:, data_cols].to_numpy().ravel()[:10000]
    if not any(not _blank(x) and not _looks_like_text(x) for x in later):
        return
    line = int(cells.lines[1])
    upper = int(cells.lines[0])
    shown = ", ".join(repr(str(x).strip()) for x in texts[:3])
    raise InputError(
        f"line {line} holds text in the count columns ({shown}...) where numbers are "
        f"expected: it looks like a second header line below line {upper}.",
        location=cells.where(1, data_cols[0]),
        hint=f"If line {upper} is a group row above the real header, pass "
             f"header_row={line} (the lines above it are then ignored); otherwise "
             "remove the extra line.")


def _label_clash(cells: Cells, row_ids, col_ids, data_cols, rows, explicit) -> list:
    """A column label that is also a row label: samples and taxa cannot be told apart.

    An error when the orientation was inferred (the file may be transposed or mislabelled);
    with ``rows=`` given, the labels listed (numbered samples and numbered taxa, say)."""
    rows_at = {r: i for i, r in enumerate(row_ids)}
    clash = [c for c in col_ids if c in rows_at]
    if explicit:
        return clash
    for j, c in zip(data_cols, col_ids):
        if c in rows_at:
            i = rows_at[c]
            row_what, col_what = (("sample", "taxon") if rows == "samples"
                                  else ("taxon", "sample"))
            raise InputError(
                f"the {col_what} column {c!r} has the same name as the {row_what} on line "
                f"{int(cells.lines[i + 1])}, so it is unclear whether {c!r} is a sample or "
                "a taxon.", location=cells.where(0, j, c),
                hint=f"Rename the {col_what} or the {row_what}; if the labels are meant to "
                     f"repeat (numbered samples and numbered taxa), pass rows={rows!r} to "
                     "confirm what the rows are.")
    return clash


def _orientation(rows, info, row_ids, col_ids, id_header, cells, data_cols, id_j):
    if rows is not None:
        return rows, "as requested"
    if info is not None:
        known = set(map(str, info.index))
        in_rows = [i for i, r in enumerate(row_ids) if r in known]
        in_cols = [k for k, c in enumerate(col_ids) if c in known]
        if in_rows and not in_cols:
            return "samples", "row labels match the sample table"
        if in_cols and not in_rows:
            return "taxa", "column labels match the sample table"
        if in_rows and in_cols:
            i, k = in_rows[0], in_cols[0]
            raise InputError(
                f"both row labels (e.g. {row_ids[i]!r} on line {int(cells.lines[i + 1])}) and "
                f"column labels (e.g. {col_ids[k]!r} in column "
                f"{cells.column_name(data_cols[k])}) match sample labels, so it is unclear "
                "whether rows are samples or taxa.",
                location=cells.where(0, data_cols[k], col_ids[k]),
                hint="Pass rows='samples' or rows='taxa', and check the labels.")
        raise InputError(
            "neither the row labels nor the column labels match the sample table's labels "
            f"(rows start {listing(row_ids, 3)}; columns start {listing(col_ids, 3)}; "
            f"the sample table lists {listing([str(x) for x in info.index], 3)}).",
            location=cells.where(0, id_j, id_header or None),
            hint="Check that both files use the same sample labels (case and spaces count).")
    key = id_header.strip().lower()
    if key in _SAMPLE_HEADERS:
        return "samples", f"the label column is headed {id_header!r}"
    if key in _TAXON_HEADERS:
        return "taxa", f"the label column is headed {id_header!r}"
    raise InputError(
        f"cannot tell whether the rows are samples or taxa ({len(row_ids)} rows x "
        f"{len(col_ids)} columns; label column headed {id_header!r}).",
        location=cells.where(0, id_j, id_header or None),
        hint="Pass rows='samples' (one row per sample) or rows='taxa' (one row per taxon), "
             "or give the sample table with samples=... so labels can be matched.")


# ---------------------------------------------------------------------------- long tables
def read_long(path, samples=None, *, sample: str = "sample", taxon: str = "taxon",
              count: str = "count", sum_duplicates: bool = False, effort=None, sheet=None,
              samples_sheet=None, encoding: str | None = None, sep: str | None = None,
              decimal: str = ".", thousands: str | None = None, header_row: int = 1,
              empty: str = "error", abundance: str = "absolute", load=None,
              spike_in: dict | None = None) -> CommunityTable:
    """Read a long (tidy) table: one row per (sample, taxon, count).

    Pairs absent from the file are zeros. A (sample, taxon) pair listed twice is an error
    that lists the pairs and their lines, unless ``sum_duplicates=True``. ``decimal``,
    ``thousands`` and ``header_row`` are as in :func:`read_counts`; so are ``abundance``,
    ``load`` and ``spike_in`` (what the totals mean, see :class:`CommunityTable`).
    """
    _check_number_options(decimal, thousands)
    info = _sample_frame(samples, samples_sheet, encoding, sep, None, decimal, thousands)
    cells = _start(read_cells(path, sheet=sheet, encoding=encoding, sep=sep), header_row)
    head = header_names(cells, "data")
    cols = {}
    for role, name in (("sample", sample), ("taxon", taxon), ("count", count)):
        if name not in head:
            raise InputError(f"the {role} column {name!r} is not in the header; columns are "
                             f"{listing([h for h in head if h], 20)}.",
                             location=cells.where(0),
                             hint=f"Name it with {role}='...'.")
        cols[role] = head.index(name)
    if len(set(cols.values())) < 3:
        raise InputError(f"the sample, taxon and count columns must differ; got sample="
                         f"{sample!r}, taxon={taxon!r}, count={count!r}.",
                         location=cells.where(0), hint="Name three different columns.")
    body = cells.frame.iloc[1:].reset_index(drop=True)
    s_ids = [_to_text(x) for x in body.iloc[:, cols["sample"]]]
    t_ids = [_to_text(x) for x in body.iloc[:, cols["taxon"]]]
    for ids, role in ((s_ids, "sample"), (t_ids, "taxon")):
        for i, x in enumerate(ids):
            if x == "":
                raise InputError(f"the {role} label is blank.",
                                 location=cells.where(i + 1, cols[role], head[cols[role]]),
                                 hint=f"Give every line a {role}, or delete the line.")
    vals, unreadable, found = parse_numbers(body.iloc[:, [cols["count"]]], decimal, thousands)
    vals = vals[:, 0]
    if unreadable.any():
        i = int(np.flatnonzero(unreadable[:, 0])[0])
        raise InputError(f"{found[0].describe('the count')}; {int(unreadable.sum())} "
                         "unreadable count(s) in all.",
                         location=cells.where(i + 1, cols["count"], count), hint=found[0].hint)
    bad = ~np.isfinite(vals) | (vals < 0)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        shown = body.iloc[i, cols["count"]]
        what = ("is blank" if _blank(shown) else
                f"holds {shown!r}, not a finite number >= 0")
        raise InputError(f"the count {what} ({int(bad.sum())} bad count(s) in all).",
                         location=cells.where(i + 1, cols["count"], count),
                         hint="Counts must be numbers >= 0; write 0 or leave the pair out.")
    frame = pd.DataFrame({"s": s_ids, "t": t_ids, "v": vals, "line": cells.lines[1:]})

    def where(line, s, t):
        return Location(file=cells.file, row=f"line {line}",
                        column=f"columns {cells.column_name(cols['sample'])} and "
                               f"{cells.column_name(cols['taxon'])} ({s!r}, {t!r})")
    wide, notes = records_to_wide(frame, list(dict.fromkeys(s_ids)),
                                  list(dict.fromkeys(t_ids)), what="sample",
                                  sum_duplicates=sum_duplicates, where=where,
                                  hint="Fix the duplicates, or pass sum_duplicates=True to "
                                       "add their counts.")
    table = CommunityTable(wide.astype(float), info, effort=effort, empty=empty,
                           origin=Origin(file=cells.file, sheet=cells.sheet),
                           abundance=abundance, load=load, spike_in=spike_in)
    table._notes = tuple(notes) + table.notes
    return table


def records_to_wide(frame: pd.DataFrame, rows: list, columns: list, *, what: str,
                    sum_duplicates: bool, where, hint: str):
    """(s, t, v, line) records -> a rows x columns table, zeros for absent pairs.

    A (s, t) pair listed more than once is an InputError that lists the pairs with their
    lines (``where(line, s, t)`` locates the first repeat), unless ``sum_duplicates``: then
    the records are added and a note says how many pairs were summed.
    """
    dup = frame.duplicated(["s", "t"], keep=False)
    notes = []
    if dup.any():
        pairs = frame[dup].groupby(["s", "t"], sort=False)["line"].apply(list)
        if not sum_duplicates:
            shown = "; ".join(f"({s!r}, {t!r}) on lines {ls}" for (s, t), ls in
                              list(pairs.items())[:5])
            (s0, t0), lines0 = next(iter(pairs.items()))
            raise InputError(f"{len(pairs)} ({what}, taxon) pair(s) appear more than once: "
                             f"{shown}{' ...' if len(pairs) > 5 else ''}.",
                             location=where(int(lines0[1]), s0, t0), hint=hint)
        notes.append(f"{len(pairs)} repeated ({what}, taxon) pair(s) summed")
    wide = frame.pivot_table(index="s", columns="t", values="v", aggfunc="sum",
                             fill_value=0.0, sort=False)
    return wide.reindex(index=rows, columns=columns, fill_value=0.0), notes


from .darwin_core import read_darwin_core  # noqa: E402  (re-exported)
