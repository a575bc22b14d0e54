"""The choices tried, under the Tests panel: every measure whose p-value was shown for a
grouping, and the current p-value adjusted for all of them.

The record is a :class:`tallyform.core.choice_record.ChoiceRecord` (one list per group
column); the adjusted p-value is one core call, ``tly.choice_adjusted(tab, group,
<the choices tried>, aspect="shape", units=..., blocks=..., n_permutations=..., rng=seed)``,
run by the dashboard's background runner (:class:`~tallyform.widgets.background.SettledRunner`)
once a run has shown a p-value for a second choice. Nothing here computes: the words come
from :mod:`tallyform.core.choice_record` and the numbers from the core call.
"""
from __future__ import annotations

import html
from typing import Callable

import ipywidgets as widgets

from ..core.choice_record import (SEARCH_NOTE, ChoiceRecord, adjusted_sentence,
                                  origin_sentence, search_sentence, with_menu)
from .background import SettledRunner
from .common import LABEL_STYLE, TABLE, Call, Ref, error_text, given
from .help import add_help

__all__ = ["ChoicesTried", "CHOICES_HELP"]

#: The difference between a choice made in the scan or audit and one made here (shown
#: under the controls).
CHOICES_HELP = (
    "A measure chosen in the scan or the audit needs no adjustment: neither ever sees how "
    "the groups differ in these data, so its p-value stands. A measure picked here after "
    "seeing the p-values of others does: the panel remembers every choice whose p-value it "
    "showed for this group and gives the p-value adjusted for all of them.")

_ORIGIN_LABELS = {"tests": "here, after seeing p-values", "scan": "in the scan",
                  "audit": "in the audit"}


class ChoicesTried(widgets.VBox):
    """Every choice whose p-value was shown, per grouping, and the adjusted p-value.

    Attributes
    ----------
    record : ChoiceRecord
        The choices tried, per group column (``record.family(group)``).
    origin : Dropdown
        Where the next choice shown was made (``'tests'``, ``'scan'``, ``'audit'``).
    clear_button : Button
        "Start over: a new question": forgets the choices of the current group.
    view : HTML
        The choices tried and the adjusted p-value (class ``tf-choice-adjusted``).
    help : HTML
        :data:`CHOICES_HELP`.
    result : ChoiceAdjustedResult or None
        The last adjusted run (None with fewer than two choices, while it runs, after a
        clear).
    call : Call or None
        Its core call (shown as code by the Report panel).
    result_menu, call_menu : ChoiceAdjustedResult, Call or None
        The same adjusted for every measure the panel offers (``menu``) as well as those
        tried: the p-value to quote after trying choices until one was small (None when
        every measure of the menu was tried).
    current : TriedChoice or None
        The record's entry of the choice last shown.
    status : str
        'idle', 'running', 'done', 'error' or 'cancelled' (of the adjusted run).
    """

    def __init__(self, table, *, core, group: Callable[[], str | None], menu=(),
                 changed: Callable[[], None] = lambda: None):
        self._table = table
        self._menu = tuple(menu)
        self._core = core
        self._group = group             # the current group of the panel
        self._changed = changed         # tells the panel (and the Report) of a change
        self.record = ChoiceRecord()
        self.runner = SettledRunner(delay=0.0)
        self.result = self.result_menu = None
        self.call: Call | None = None
        self.call_menu: Call | None = None
        self.current = None
        self.shown_group: str | None = None
        self.error: BaseException | None = None
        self.status = "idle"
        self.origin = widgets.Dropdown(options=[(v, k) for k, v in _ORIGIN_LABELS.items()],
                                       value="tests", description="Choice made",
                                       style=LABEL_STYLE)
        self.origin.add_class("tf-choice-origin")
        self.clear_button = widgets.Button(description="Start over: a new question",
                                           icon="refresh",
                                           layout=widgets.Layout(width="auto"))
        self.clear_button.add_class("tf-clear-choices")
        self.controls = [self.origin, self.clear_button]
        for w in self.controls:
            add_help(w)
        self.help = widgets.HTML(f"<small>{html.escape(CHOICES_HELP)}</small>")
        self.help.add_class("tf-choices-help")
        self.view = widgets.HTML()
        self.view.add_class("tf-choice-adjusted")
        super().__init__([self.view, widgets.HBox([self.origin, self.clear_button]),
                          self.help])
        self.add_class("tf-choices-tried")
        self.clear_button.on_click(lambda _: self.clear())

    # ------------------------------------------------------------------ state
    def n_choices(self, group: str | None = None) -> int:
        group = self._group() if group is None else group
        return self.record.n_choices(group) if group else 0

    def entries(self, group: str | None = None) -> tuple:
        """The choices of ``group`` (default: the panel's) as a spec records them."""
        group = self._group() if group is None else group
        return self.record.entries(group) if group else ()

    def load(self, group: str, entries) -> None:
        """Take the choices of a spec (``spec.choices_tried``) as those tried for ``group``."""
        self.record.load(group, entries)
        self._changed()

    def shown(self, *, group: str, measure: str, units, blocks, n_permutations: int,
              seed: int) -> None:
        """A run showed a p-value of ``measure`` for ``group``: record it, and with two
        choices or more compute the adjusted p-value in the background (the same units,
        blocks, permutations and seed as the run)."""
        self.current = self.record.add(group, {"measure": measure}, origin=self.origin.value)
        self.shown_group = group
        self.result = self.result_menu = self.error = None
        family = self.record.family(group)
        if len(family) < 2:
            self.runner.cancel()
            self.call, self.call_menu, self.status = None, None, "idle"
            self._render()
            return
        opts = given(aspect="shape", units=units, blocks=blocks,
                     n_permutations=int(n_permutations), rng=int(seed))
        tab = Ref(TABLE, self._table)
        call = Call("choice_adjusted", (tab, group, family), opts)
        every = with_menu(family, self._menu)
        menu = Call("choice_adjusted", (tab, group, every), opts) \
            if len(every) > len(family) else None
        self.call, self.call_menu, self.status = call, menu, "running"
        self._render()
        core = self._core

        def work(progress, cancel):
            first = call.run(core, progress=progress, cancel=cancel)
            return first, (menu.run(core, progress=progress, cancel=cancel)
                           if menu is not None else None)
        self.runner.request(work, lambda result, err: self._done(call, result, err))

    def _done(self, call, result, err) -> None:
        if call is not self.call:           # a newer request, or a clear, came first
            return
        self.result, self.result_menu = result if result is not None else (None, None)
        self.error = err
        self.status = "done" if err is None else "error"
        self._render()
        self._changed()

    def clear(self) -> None:
        """Forget the choices tried for the panel's group: a new question."""
        group = self._group()
        self.runner.cancel()
        if group:
            self.record.clear(group)
        self.result = self.call = self.current = self.error = None
        self.result_menu = self.call_menu = None
        self.status = "idle"
        self.view.value = (f"<small>Choices tried for {html.escape(repr(group))} forgotten: "
                           "the next p-value shown starts a new question.</small>"
                           if group else "")
        self._changed()

    def cancel(self) -> None:
        self.runner.cancel()
        if self.status == "running":
            self.status = "cancelled"

    def wait(self, timeout: float | None = None) -> bool:
        """Wait for the adjusted run to end; True when it has."""
        return self.runner.wait(timeout)

    # ------------------------------------------------------------------ words
    def _render(self) -> None:
        group, entry = self.shown_group, self.current
        n = self.record.n_choices(group) if group else 0
        origin = origin_sentence(entry, group=group, n_choices=n) if entry else ""
        if n < 2:
            # one choice: nothing extra, unless it is known to come from the scan or audit
            known = entry is not None and entry.origin in ("scan", "audit")
            self.view.value = f"<div class='tf-choice-origin-text'>{html.escape(origin)}" \
                              "</div>" if known else ""
            return
        names = ", ".join(f"{t.name} ({_ORIGIN_LABELS[t.origin]})"
                          for t in self.record.tried(group))
        head = (f"<b>{n} choices</b> tried for {html.escape(repr(group))}: "
                f"{html.escape(names)}.")
        if self.status == "running":
            body = "Adjusting for them (the same relabellings for every choice)..."
        elif self.error is not None:
            body = html.escape("The adjusted p-value could not be computed: "
                               + error_text(self.error))
        elif self.result is not None:
            body = f"<b>{html.escape(adjusted_sentence(self.result, entry.name))}</b> "
            if self.result_menu is not None:
                body += html.escape(search_sentence(self.result_menu, entry.name,
                                                    len(self._menu))) + " "
            body += html.escape(
                "The Welch-type shape test and the spread test above are not adjusted; the "
                "adjustment is PERMANOVA's, repeated with every choice. " + SEARCH_NOTE)
            notes = "".join(f"<li>{html.escape(x)}</li>" for x in self.result.notes)
            if notes:
                body += f"<details><summary>notes</summary><ul>{notes}</ul></details>"
        else:
            body = ""
        self.view.value = (f"<div class='tf-choice-adjusted-box' style='margin:4px 0'>"
                           f"{head}<br>{html.escape(origin)}<br>{body}</div>")

