"""Darwin Core (TDWG) sampling events and the occurrences recorded in them, as a table.

Split from :mod:`tallyform.core.io` (which re-exports :func:`read_darwin_core`); the same
rules hold: files are only read, and every error names the file, line and column.
"""
from __future__ import annotations

import zipfile
from pathlib import Path

import numpy as np
import pandas as pd

from .cells import display_name as _display_name
from .cells import parse_numbers, read_cells
from .cells import to_text as _to_text
from .errors import InputError, Location
from .io import check_ids, header_names, records_to_wide
from .table import CommunityTable, Origin, listing

__all__ = ["read_darwin_core"]

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
                             location=Location(file=str(p)),
                             hint="Or pass the two tables: read_darwin_core(events, "
                                  "occurrences).")
        return (str(ev[0]), None), (str(oc[0]), None)
    try:
        with zipfile.ZipFile(p) as zf:
            names = zf.namelist()
            ev = [n for n in names if Path(n).name.lower().startswith("event")]
            oc = [n for n in names if Path(n).name.lower().startswith("occurrence")]
            if not ev or not oc:
                raise InputError("the archive must hold event and occurrence tables; it has "
                                 f"{listing(names)}.", location=Location(file=str(p)),
                                 hint="A Darwin Core archive holds event.txt and "
                                      "occurrence.txt (or .csv).")
            return ((f"{p}!{ev[0]}", zf.read(ev[0])), (f"{p}!{oc[0]}", zf.read(oc[0])))
    except (zipfile.BadZipFile, FileNotFoundError, IsADirectoryError):
        raise InputError("give an event table and an occurrence table, or a folder or zip "
                         "archive that holds both.", location=Location(file=str(p)),
                         hint="e.g. read_darwin_core('event.txt', 'occurrence.txt').") from None


def _dwc_frame(name, data, encoding, sep):
    cells = read_cells(name.split("!")[0] if data is None else name, encoding=encoding,
                       sep=sep, data=data)
    head = header_names(cells, "record")
    return cells, head, cells.frame.iloc[1:].reset_index(drop=True)


def read_darwin_core(events, occurrences=None, *, effort="auto", sum_duplicates: bool = True,
                     encoding: str | None = None, sep: str | None = None,
                     empty: str = "error", abundance: str = "absolute", load=None,
                     spike_in: dict | None = None) -> CommunityTable:
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
    abundance, load, spike_in
        What the totals mean (see :class:`CommunityTable`): ``abundance='relative'`` for
        quantities of type 'DNA sequence reads' (a note suggests it when they are read as
        absolute), with ``load`` an event column of absolute abundance per event or
        ``spike_in={'taxon': scientificName, 'added': event column}``.
    """
    (ev_name, ev_data), (oc_name, oc_data) = _dwc_sources(events, occurrences)
    ev_cells, ev_head, ev_body = _dwc_frame(ev_name, ev_data, encoding, sep)
    oc_cells, oc_head, oc_body = _dwc_frame(oc_name, oc_data, encoding, sep)
    lower_ev, lower_oc = _key_columns(ev_cells, ev_head, oc_cells, oc_head)
    ev_j = lower_ev["eventid"]
    ev_ids = [_to_text(x) for x in ev_body.iloc[:, ev_j]]
    check_ids(ev_cells, ev_ids, ev_j, "eventID", "event")
    info = _event_info(ev_cells, ev_head, ev_body, ev_j, ev_ids)

    # quantities
    n = len(oc_body)
    line = oc_cells.lines[1:]
    oc_ev = [_to_text(x) for x in oc_body.iloc[:, lower_oc["eventid"]]]
    oc_tx = [_to_text(x) for x in oc_body.iloc[:, lower_oc["scientificname"]]]
    qty, qtype = _quantities(oc_cells, oc_head, oc_body, lower_oc)
    status = ([(_to_text(x)).lower() for x in oc_body.iloc[:, lower_oc["occurrencestatus"]]]
              if "occurrencestatus" in lower_oc else [""] * n)
    _check_records(oc_cells, oc_head, lower_oc, oc_ev, oc_tx, qty, status)
    kinds = _quantity_kinds(oc_cells, lower_oc, qtype, status, line)
    _check_orphans(oc_cells, lower_oc, oc_ev, ev_ids)
    frame = pd.DataFrame({"s": oc_ev, "t": oc_tx, "v": qty, "line": line})
    wide, notes = records_to_wide(
        frame, ev_ids, list(dict.fromkeys(oc_tx)), what="event",
        sum_duplicates=sum_duplicates,
        where=lambda ln, s, t: Location(file=oc_cells.file, row=f"line {ln}"),
        hint="Several records of one taxon in one event (sexes, life stages) are usually "
             "meant to be added: pass sum_duplicates=True.")
    notes.insert(0, f"quantity type: {kinds[0] if kinds else '(none)'}")
    eff = _event_effort(effort, info, notes)
    if abundance == "absolute" and any("read" in k for k in kinds):
        notes.append(f"quantity type {kinds[0]!r}: sequencing reads are relative (their "
                     "totals are sequencing depths); load with abundance='relative' (and "
                     "load= or spike_in= to compare sizes). Nothing was changed.")
    table = CommunityTable(wide.astype(float), info, effort=eff, empty=empty,
                           origin=Origin(file=ev_cells.file), abundance=abundance, load=load,
                           spike_in=spike_in)
    table._notes = tuple(notes) + table.notes
    return table


def _key_columns(ev_cells, ev_head, oc_cells, oc_head) -> tuple[dict, dict]:
    """Lower-cased header -> position in each table; eventID and scientificName required."""
    lower_ev = {h.lower(): j for j, h in enumerate(ev_head)}
    lower_oc = {h.lower(): j for j, h in enumerate(oc_head)}
    if "eventid" not in lower_ev:
        raise InputError("the event table has no eventID column.", location=ev_cells.where(0),
                         hint="Darwin Core events are keyed by eventID.")
    for need in ("eventid", "scientificname"):
        if need not in lower_oc:
            label = {"eventid": "eventID", "scientificname": "scientificName"}[need]
            raise InputError(f"the occurrence table has no {label} column.",
                             location=oc_cells.where(0),
                             hint="Darwin Core occurrences name their event in eventID and "
                                  "their taxon in scientificName; add or rename the "
                                  "column.")
    return lower_ev, lower_oc


def _event_info(ev_cells, ev_head, ev_body, ev_j, ev_ids) -> pd.DataFrame:
    """Sample information: every other event column, numbers as numbers."""
    info = {}
    for j, h in enumerate(ev_head):
        if j == ev_j or h == "":
            continue
        texts = ev_body.iloc[:, j].map(_to_text)
        nums = pd.to_numeric(texts.where(texts != "", None), errors="coerce")
        info[h] = (nums.to_numpy(float) if ((texts == "") | nums.notna()).all()
                   and (texts != "").any() else texts.where(texts != "", None).to_numpy(object))
    info = pd.DataFrame(info, index=pd.Index(ev_ids, name="sample"))
    # lines and columns of the event table, for errors about effort or load values
    info.attrs.update(file=ev_cells.file,
                      lines={x: int(ev_cells.lines[i + 1]) for i, x in enumerate(ev_ids)},
                      columns={h: ev_cells.column_name(j) for j, h in enumerate(ev_head) if h})
    return info


def _quantities(oc_cells, oc_head, oc_body, lower_oc) -> tuple[np.ndarray, list]:
    """Quantity and its type per record: organismQuantity, else individualCount."""
    n = len(oc_body)
    qty = np.full(n, np.nan)
    qtype = [""] * n

    def quantities(key, label):
        j = lower_oc[key]
        vals, unreadable, found = parse_numbers(oc_body.iloc[:, [j]])
        if unreadable.any():
            i = int(np.flatnonzero(unreadable[:, 0])[0])
            raise InputError(f"{found[0].describe(label)}.",
                             location=oc_cells.where(i + 1, j, oc_head[j]), hint=found[0].hint)
        return vals[:, 0]

    if _DWC_QTY in lower_oc:
        qty = quantities(_DWC_QTY, "organismQuantity")
        if "organismquantitytype" in lower_oc:
            qtype = [(_to_text(x)).lower() for x in
                     oc_body.iloc[:, lower_oc["organismquantitytype"]]]
    if "individualcount" in lower_oc:
        icv = quantities("individualcount", "individualCount")
        fill = np.isnan(qty) & ~np.isnan(icv)
        qty = np.where(fill, icv, qty).astype(float)
        qtype = ["individuals" if f else t for f, t in zip(fill, qtype)]
    return qty, qtype


def _check_records(oc_cells, oc_head, lower_oc, oc_ev, oc_tx, qty, status) -> None:
    """Every record has an event, a taxon and a quantity >= 0; absent ones are set to 0."""
    q_j = lower_oc.get(_DWC_QTY, lower_oc.get("individualcount"))
    q_name = None if q_j is None else oc_head[q_j]
    for i in range(len(qty)):
        if oc_ev[i] == "" or oc_tx[i] == "":
            field = "eventID" if oc_ev[i] == "" else "scientificName"
            raise InputError(f"{field} is blank.", location=oc_cells.where(i + 1, lower_oc[
                field.lower()], field), hint="Every occurrence needs an event and a taxon.")
        if status[i] == "absent":
            if not np.isnan(qty[i]) and qty[i] > 0:
                raise InputError(f"the record is marked absent but has quantity {qty[i]:g}.",
                                 location=oc_cells.where(i + 1, q_j, q_name),
                                 hint="Set occurrenceStatus to 'present', or the quantity to "
                                      "0 or blank.")
            qty[i] = 0.0
            continue
        if np.isnan(qty[i]):
            raise InputError("the occurrence has no quantity (organismQuantity or "
                             "individualCount).", location=oc_cells.where(i + 1, q_j, q_name),
                             hint="Abundance analyses need a number for every record; mark "
                                  "records of taxa not found with occurrenceStatus 'absent'.")
        if qty[i] < 0 or not np.isfinite(qty[i]):
            raise InputError(f"the quantity {qty[i]:g} is not a finite number >= 0.",
                             location=oc_cells.where(i + 1, q_j, q_name),
                             hint="Quantities must be numbers >= 0.")


def _quantity_kinds(oc_cells, lower_oc, qtype, status, line) -> list[str]:
    """The quantity types of the present records; more than one is an error."""
    kinds = sorted({t if t else "(unstated)" for t, s in zip(qtype, status) if s != "absent"})
    if len(kinds) > 1:
        first = {k: int(line[[(t or "(unstated)") for t in qtype].index(k)]) for k in kinds}
        second = sorted(first.values())[1]
        t_j = lower_oc.get("organismquantitytype")
        raise InputError(f"occurrences mix quantity types {kinds} (first lines: {first}).",
                         location=Location(file=oc_cells.file, row=f"line {second}",
                                           column=("column " + oc_cells.column_name(t_j) +
                                                   " ('organismQuantityType')")
                                           if t_j is not None else "'organismQuantityType'"),
                         hint="Keep one quantity type per analysis (e.g. only 'individuals').")
    return kinds


def _check_orphans(oc_cells, lower_oc, oc_ev, ev_ids) -> None:
    """Refuse occurrences whose eventID is not in the event table."""
    known = set(ev_ids)
    orphans = sorted({e for e in oc_ev if e not in known})
    if orphans:
        i = next(k for k, e in enumerate(oc_ev) if e not in known)
        raise InputError(f"{len(orphans)} eventID(s) in the occurrences are not in the event "
                         f"table: {listing(orphans)}.",
                         location=oc_cells.where(i + 1, lower_oc["eventid"], "eventID"),
                         hint="Every occurrence must belong to a listed event.")


def _event_effort(effort, info: pd.DataFrame, notes: list):
    """The effort column: 'auto' takes a complete numeric sampleSizeValue (noted)."""
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
    return eff
