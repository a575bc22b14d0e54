"""Opening the dashboard on files: the files are read inside the widget, so a problem in
them is shown in the panel (file, line, column, what to do), never as a traceback.

Core call: ``tly.read_counts(counts, samples=..., **options)``.
"""
from __future__ import annotations

import ipywidgets as widgets

from ..core.errors import DesignError, InputError
from .common import MessageArea

__all__ = ["FileDashboard"]


class FileDashboard(widgets.VBox):
    """File names, a Load button, the reader's message, and the dashboard once loaded.

    Attributes
    ----------
    counts_path, samples_path : Text
    load_button : Button
    messages : MessageArea
    table : CommunityTable or None
    dashboard : Dashboard or None
    """

    def __init__(self, counts, samples=None, *, group=None, spec=None, present=False,
                 read=None, **read_options):
        import tallyform
        self._read = read or tallyform.read_counts
        self._options = read_options
        self._dash_options = {"group": group, "spec": spec, "present": present}
        self.counts_path = widgets.Text(value=str(counts), description="Counts",
                                        layout=widgets.Layout(width="70%"))
        self.counts_path.add_class("tf-counts-path")
        self.samples_path = widgets.Text(value="" if samples is None else str(samples),
                                         description="Samples",
                                         layout=widgets.Layout(width="70%"))
        self.samples_path.add_class("tf-samples-path")
        self.load_button = widgets.Button(description="Load", button_style="primary")
        self.load_button.add_class("tf-load-button")
        self.messages = MessageArea()
        self.controls = widgets.VBox([self.counts_path, self.samples_path, self.load_button])
        self.table = None
        self.dashboard = None
        super().__init__([self.controls, self.messages])
        self.add_class("tf-file-dashboard")
        self.load_button.on_click(self.load)
        self.load()

    def load(self, *_):
        """Read the files; show the dashboard, or the reader's message."""
        from .dashboard import Dashboard
        self.messages.clear()
        samples = self.samples_path.value.strip() or None
        try:
            table = self._read(self.counts_path.value.strip(), samples=samples,
                               **self._options)
            dash = Dashboard(table, **self._dash_options)
        except (InputError, DesignError) as err:
            self.messages.show_error(err)
            self.table = self.dashboard = None
            self.children = [self.controls, self.messages]
            return
        except Exception as err:          # anything unexpected: one line, never a traceback
            self.messages.show_error(err)
            self.table = self.dashboard = None
            self.children = [self.controls, self.messages]
            return
        self.table, self.dashboard = table, dash
        self.children = [self.controls, self.messages, dash]
