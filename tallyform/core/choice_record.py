"""The choices tried in a session: for every grouping, each transform + measure whose group
test p-value was shown, and where the choice came from.

Looking at the p-values of several choices and keeping one makes that p-value too small
(:mod:`tallyform.core.choice_adjusted`); the honest p-value is the one adjusted for every
choice tried. A :class:`ChoiceRecord` is what remembers them: one list per grouping (the
group column compared), in the order first shown, a choice written twice (``'sqrt'`` and
``Power(0.5)``, or two choices with the same distances up to scale) counted once, exactly
as :func:`~tallyform.core.choice_adjusted.choice_adjusted` counts its family.

Every choice carries its *origin*: ``'tests'`` (picked where the tests are shown, so
possibly after seeing other p-values), ``'scan'`` or ``'audit'``. The scan never looks at
the groups and the audit only at tables simulated without any difference between them, so a
choice made there needs no adjustment; a choice made after seeing p-values does
(:func:`origin_sentence` says which in words).

Nothing here computes a test: the record holds choices, the adjusted p-value comes from
``choice_adjusted`` on the record's :meth:`ChoiceRecord.family`.
"""
from __future__ import annotations

import threading
from dataclasses import dataclass
from typing import Mapping

from .errors import InputError

__all__ = ["ChoiceRecord", "TriedChoice", "ORIGINS", "split_origin", "canonical_entries",
           "entry_for", "spec_choices", "with_menu", "origin_sentence", "search_sentence",
           "SEARCH_NOTE", "adjusted_sentence"]

#: Where a choice was made, in words.
ORIGINS = {"tests": "where the tests are shown, after looking at p-values",
           "scan": "in the scan", "audit": "in the audit"}


@dataclass(frozen=True)
class TriedChoice:
    """One choice tried: its canonical form and where it was made."""

    choice: object            # tallyform.core.choice_grid.Choice
    origin: str = "tests"

    @property
    def name(self) -> str:
        return self.choice.name

    def as_dict(self) -> dict:
        """The choice as ``choice_adjusted`` takes it, with ``origin`` when not 'tests'
        (what an :class:`~tallyform.AnalysisSpec` records)."""
        out = self.choice.as_dict()
        if self.origin != "tests":
            out["origin"] = self.origin
        return out


def split_origin(item, position: int = 0) -> tuple:
    """(the choice without ``origin``, the origin) of a recorded entry (a dict, or a measure
    name)."""
    if isinstance(item, str):
        return {"measure": item}, "tests"
    if not isinstance(item, Mapping):
        raise InputError(f"choice {position + 1} must be a dict such as {{'measure': "
                         f"'hellinger', 'transform': 'none'}}; got {type(item).__name__}.")
    item = dict(item)
    origin = item.pop("origin", "tests")
    if origin not in ORIGINS:
        raise InputError(f"choice {position + 1} has origin {origin!r}; the origin of a "
                         f"choice is one of {list(ORIGINS)}.")
    return item, origin


def canonical_entries(entries) -> list:
    """Distinct :class:`TriedChoice` records of ``entries`` (dicts with an optional
    ``origin``), in the order given; a repeated choice keeps its first origin. Raises
    InputError for an unknown measure, transformation or option."""
    from .choice_grid import as_choices
    items, origins = [], []
    for i, e in enumerate(entries):
        c, o = split_origin(e, i)
        items.append(c)
        origins.append(o)
    if not items:
        return []
    family, _ = as_choices(items)
    out = []
    for choice in family:
        # the first entry whose canonical form this is (as_choices keeps the first given)
        k = next(i for i, it in enumerate(items) if as_choices([it])[0][0] == choice)
        out.append(TriedChoice(choice, origins[k]))
    return out


def entry_for(entries, item) -> TriedChoice | None:
    """The entry of ``entries`` that is the choice ``item`` (a dict or measure name): the
    same canonical form, or the same distances up to scale; None when there is none."""
    item, _ = split_origin(item)
    for t in entries:
        if len(canonical_entries([t.choice.as_dict(), item])) == 1:
            return t
    return None


def with_menu(family: list, menu) -> list:
    """``family`` and every choice of ``menu`` (measure names) not in it, canonical and
    distinct: the family whose adjustment covers any way of choosing among the menu."""
    entries = canonical_entries(list(family) + [{"measure": m} for m in menu])
    return [t.choice.as_dict() for t in entries]


def spec_choices(spec) -> tuple:
    """(every distinct choice of ``spec.choices_tried`` and ``spec.shape_measure``, the
    entry of the choice reported: ``shape_measure``)."""
    entries = canonical_entries(list(spec.choices_tried or ()) +
                                [{"measure": spec.shape_measure}])
    return entries, entry_for(entries, {"measure": spec.shape_measure})


class ChoiceRecord:
    """Per grouping, the distinct choices whose group test p-value was shown.

    Safe to use from a background thread (one lock around every change).

    Examples
    --------
    >>> r = ChoiceRecord()
    >>> _ = r.add("treatment", {"measure": "chi_square"})
    >>> _ = r.add("treatment", {"measure": "hellinger", "transform": "none"})
    >>> _ = r.add("treatment", {"measure": "chi_square"})          # shown again: once
    >>> r.n_choices("treatment"), [c["measure"] for c in r.family("treatment")]
    (2, ['chi_square', 'hellinger'])
    >>> r.clear("treatment"); r.n_choices("treatment")
    0
    """

    def __init__(self):
        self._lock = threading.Lock()
        self._tried: dict[str, list] = {}

    def add(self, group: str, choice, *, origin: str = "tests") -> TriedChoice:
        """Record that ``choice`` (a dict or measure name) was shown for ``group``; returns
        the record's entry for it (the earlier one when the same choice, or one with the
        same distances up to scale, was recorded before)."""
        item, given = split_origin(choice)
        origin = given if given != "tests" else origin
        if origin not in ORIGINS:
            raise InputError(f"`origin` must be one of {list(ORIGINS)}; got {origin!r}.")
        with self._lock:
            now = list(self._tried.get(group, []))
            merged = canonical_entries([t.as_dict() for t in now] + [dict(item, origin=origin)])
            self._tried[group] = merged
            if len(merged) > len(now):           # new: appended last
                return merged[-1]
            return self._twin(merged, item)

    @staticmethod
    def _twin(entries: list, item: dict) -> TriedChoice:
        return entry_for(entries, item) or entries[-1]

    def tried(self, group: str) -> tuple:
        """The :class:`TriedChoice` entries of ``group``, in the order first shown."""
        with self._lock:
            return tuple(self._tried.get(group, ()))

    def family(self, group: str) -> list:
        """The choices of ``group`` as ``choice_adjusted`` takes them (no ``origin``)."""
        return [t.choice.as_dict() for t in self.tried(group)]

    def entries(self, group: str) -> tuple:
        """The choices of ``group`` with their origins (what an AnalysisSpec records)."""
        return tuple(t.as_dict() for t in self.tried(group))

    def entry(self, group: str, choice) -> TriedChoice | None:
        """The record's entry for ``choice`` under ``group`` (None when not tried)."""
        return entry_for(self.tried(group), choice)

    def n_choices(self, group: str) -> int:
        return len(self.tried(group))

    def load(self, group: str, entries) -> None:
        """Replace the record of ``group`` by ``entries`` (e.g. a spec's ``choices_tried``)."""
        merged = canonical_entries(list(entries or ()))
        with self._lock:
            if merged:
                self._tried[group] = merged
            else:
                self._tried.pop(group, None)

    def clear(self, group: str | None = None) -> None:
        """Forget the choices of ``group`` (every grouping when None): a new question."""
        with self._lock:
            if group is None:
                self._tried.clear()
            else:
                self._tried.pop(group, None)


# ---------------------------------------------------------------------------- words
def _p(p) -> str:
    from .display import p_words
    return p_words(p)


def origin_sentence(entry: TriedChoice | None, *, group: str, n_choices: int,
                    session: bool = True) -> str:
    """Where the choice behind a p-value came from and whether its p-value needs adjusting
    ('' when the record does not know the choice). ``session``: the words of the dashboard
    ("in this session"); False for a report written from a spec."""
    if entry is None:
        return ""
    name, where = entry.name, ORIGINS[entry.origin]
    when = " in this session" if session else ""
    if entry.origin in ("scan", "audit"):
        why = ("the scan never looks at the groups" if entry.origin == "scan" else
               "the audit only looks at tables simulated without any difference between "
               "the groups")
        return (f"{name!r} was chosen {where}: {why}, so its own p-value needs no "
                "adjustment for the other choices tried.")
    if n_choices <= 1:
        return (f"{name!r} is the only choice whose p-value was shown for {group!r}{when}, "
                "so no other p-value was seen before it: its own p-value stands.")
    return (f"{name!r} was chosen {where}, one of {n_choices} choices whose p-values were "
            f"shown for {group!r}{when}: quote its p-value adjusted for "
            f"{'both' if n_choices == 2 else 'all of them'}.")


#: What adjusting for the choices tried does not control (measured by the calibration cells
#: benchmarks/calibration_cells/choices_tried.py, 1000 synthetic data sets each).
SEARCH_NOTE = (
    "Adjusting for the choices tried covers picking one of them after seeing their "
    "p-values; it does not cover going on to try further choices until one gives a small "
    "p-value. Measured on synthetic data without any difference (the 4 measures of the "
    "Tests panel tried in turn until the adjusted p fell to 0.05; 1000 data sets per "
    "design), that search gave false alarms at the 0.05 level in 6.3-7.2 % of data sets "
    "when the p-value quoted was adjusted for the choices tried so far, and in 2.9-4.2 % "
    "when it was adjusted for all 4 measures the panel offers.")


def search_sentence(result, name: str, n_menu: int) -> str:
    """The p-value of ``name`` adjusted for every measure the panel offers (``result``:
    choice_adjusted over them), the one to quote after trying until one was small."""
    adj = result.pvalue_adjusted.get(name)
    return (f"Adjusted for all {n_menu} measures this panel offers, {_p(adj)}: quote this "
            "one if choices were tried until one gave a small p-value.")


def adjusted_sentence(result, name: str) -> str:
    """``"Adjusted for the 2 choices tried: p = 0.02 (own p = 0.012; PERMANOVA ...)"``
    for the choice ``name`` of a :class:`ChoiceAdjustedResult`."""
    k = result.n_choices
    adj, own = result.pvalue_adjusted.get(name), result.pvalue.get(name)
    perms = ("every distinct relabelling" if result.exact
             else f"the same {result.n_permutations} relabellings")
    return (f"{name}: adjusted for the {k} choice{'s' if k != 1 else ''} tried, {_p(adj)} "
            f"(own {_p(own)}; {result.test}, every choice on {perms}, single-step min-P, "
            "Westfall & Young 1993).")
