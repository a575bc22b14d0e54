"""The notebook progress bar used by the core's long calls (tallyform.core.progress).

An ipywidgets bar with the count, the rate and the time left; when the call ends it
collapses to one line ("... done in 12 s"), and the one-off estimate of a long run is shown
under it. It computes nothing: the core hands it numbers.
"""
from __future__ import annotations

import html

import ipywidgets as widgets
from IPython.display import display

from ..core.progress import format_seconds

__all__ = ["NotebookBar"]


class NotebookBar:
    def __init__(self, label: str):
        self.label = label
        self.bar = widgets.IntProgress(value=0, min=0, max=1, description="",
                                       layout=widgets.Layout(width="40%"))
        self.text = widgets.HTML(value=html.escape(f"{label}: starting"))
        self.note = widgets.HTML(value="")
        self.box = widgets.VBox([widgets.HBox([self.bar, self.text]), self.note])
        self.box.add_class("tallyform-progress")
        self._shown = False

    def _ensure(self):
        if not self._shown:
            display(self.box)
            self._shown = True

    def show(self, done, total, rate, left, *, final=False):
        self._ensure()
        self.bar.max = max(int(total), 1)
        self.bar.value = min(int(done), self.bar.max)
        if final:
            self.bar.layout.display = "none"
            self.text.value = html.escape(f"{self.label}: {done} of {total} done in "
                                          f"{format_seconds(left)}")
        else:
            self.text.value = html.escape(f"{self.label}: {done} of {total}, {rate:.3g}/s, "
                                          f"about {format_seconds(left)} left")

    def message(self, text):
        self._ensure()
        self.note.value = html.escape(text)

    def close(self, *, failed=False):
        if failed and self._shown:
            self.bar.bar_style = "danger"
            self.text.value = html.escape(f"{self.label}: stopped at {self.bar.value} of "
                                          f"{self.bar.max}")
