"""The dashboard: four panels in tabs, wired together; ``tly.explore(table)``."""
from __future__ import annotations

import html

import ipywidgets as widgets

from ..core.table import as_table
from .compare_panel import ComparePanel
from .data_panel import DataPanel
from .report_panel import ReportPanel
from .shape_panel import ShapePanel
from .tests_panel import TestsPanel

__all__ = ["Dashboard", "explore", "TAB_TITLES"]

TAB_TITLES = ("Data", "Size & shape", "Compare", "Tests", "Report")


class Dashboard(widgets.VBox):
    """Data, Size & shape, Compare (two choices side by side), Tests and Report panels over
    one table.

    The group chosen in one panel is the group of every panel (linked controls), and so
    is the seed; the sampling units chosen in the Tests panel are those the Size & shape
    intervals leave out whole. The Report panel follows every change. See :func:`explore`.

    Attributes
    ----------
    table : CommunityTable
    data, shape, compare, tests, report : the panels
    tabs : Tab
    present : bool
        Projector mode (see :meth:`set_present`).
    """

    def __init__(self, table, *, group: str | None = None, spec=None, present: bool = False,
                 core=None):
        self.table = as_table(table)
        self.present = False
        self.data = DataPanel(self.table, group=group, core=core)
        self.shape = ShapePanel(self.table, group=self.data.group.value, core=core)
        self.tests = TestsPanel(self.table, group=self.data.group.value, core=core)
        self.compare = ComparePanel(self.table, group=self.data.group.value, core=core)
        self.report = ReportPanel(self)
        self._links = [widgets.link((self.data.group, "value"), (self.shape.group, "value")),
                       widgets.link((self.data.group, "value"), (self.compare.group, "value")),
                       widgets.link((self.data.group, "value"), (self.tests.group, "value")),
                       widgets.link((self.tests.seed, "value"), (self.shape.seed, "value"))]
        self.tests.units.observe(self._units_to_shape, names="value")
        self._units_to_shape()
        self.tabs = widgets.Tab(children=[self.data, self.shape, self.compare, self.tests,
                                          self.report],
                                titles=TAB_TITLES)
        self.tabs.add_class("tf-tabs")
        self.tabs.observe(self._tab_shown, names="selected_index")
        src = getattr(self.table.origin, "file", None)
        self.header = widgets.HTML(
            f"<b>tallyform</b>: {self.table.n_samples} samples &times; "
            f"{self.table.n_taxa} taxa" + (f" from {html.escape(str(src))}" if src else ""))
        super().__init__([self.header, self.tabs])
        self.add_class("tf-dashboard")
        for panel in (self.data, self.shape, self.tests):
            panel.observe(self.report.refresh, names="revision")
        if spec is not None:
            self.apply_spec(spec)
        self.report.refresh()
        if present:
            self.set_present(True)

    def _tab_shown(self, change=None) -> None:
        """Figures first drawn in a hidden tab take their width once shown."""
        panel = self.tabs.children[self.tabs.selected_index or 0]
        fit = getattr(panel, "fit_figures", None)
        if fit is not None:
            fit()

    def _units_to_shape(self, change=None) -> None:
        """The intervals leave out the units of the tests (the coarsest level if nested)."""
        value = self.tests.units.value
        if isinstance(value, tuple):
            value = value[0] if value else False
        if value in [v for _, v in self.shape.units.options]:
            self.shape.units.value = value

    @property
    def spec(self):
        """The current settings as an AnalysisSpec (None while they form no valid spec)."""
        return self.report.spec

    def apply_spec(self, spec) -> None:
        """Set every control from an AnalysisSpec (or its dict or JSON text)."""
        from ..core.spec import AnalysisSpec
        if isinstance(spec, dict):
            spec = AnalysisSpec.from_dict(spec)
        elif isinstance(spec, str):
            spec = AnalysisSpec.from_json(spec)
        spec.validate(self.table)
        if spec.group:
            self.data.group.value = spec.group          # linked: every panel follows
        self.tests.apply_spec(spec)
        self.shape.apply_spec(spec)
        self.report.refresh()

    @property
    def panels(self) -> tuple:
        return (self.data, self.shape, self.compare, self.tests, self.report)

    def set_present(self, on: bool = True) -> None:
        """Projector mode: large fonts, every control hidden but the exponent slider."""
        self.present = bool(on)
        for panel in (self.data, self.shape, self.compare, self.tests):
            panel.set_present(self.present)
        for w in self.report.controls:
            w.layout.display = "none" if self.present else None
        if self.present:
            self.add_class("tf-present")
            self.tabs.selected_index = TAB_TITLES.index("Size & shape")
        else:
            self.remove_class("tf-present")


def explore(table=None, *, group: str | None = None, spec=None, present: bool = False,
            counts=None, samples=None, **read_options):
    """Open the dashboard on a table, or on files: data, size and shape, tests, report.

    Parameters
    ----------
    table : CommunityTable, DataFrame or array, optional
    group : str, optional
        Sample-information column to compare (default: the first text column).
    spec : AnalysisSpec, dict or JSON text, optional
        Start from these settings (e.g. the ``spec.json`` of an earlier export).
    present : bool, default False
        Projector mode: larger fonts, only the transform exponent slider shown.
    counts, samples : path, optional
        Instead of ``table``: files read by ``tly.read_counts`` inside the dashboard, so a
        problem in them is shown in the panel (file, line, column) rather than raised;
        ``read_options`` (``rows``, ``effort``, ``sheet``, ``encoding``...) are passed on.

    Returns
    -------
    Dashboard (or FileDashboard when opened on files)
        An ipywidgets container; display it in a notebook. Its panels keep their last
        results (``dash.shape.result``, ``dash.tests.result``...), and the Report panel
        shows the core calls behind them as code.

    Examples
    --------
    >>> import tallyform as tly
    >>> dash = tly.explore(tly.demo("mesocosm"), group="treatment")   # synthetic demo
    >>> dash.shape.exponent.value = 0.5          # what moving the slider does
    >>> dash.shape.result.transform
    'sqrt'
    >>> print(dash.shape.calls["partition"].code())
    tly.size_shape(tab, "bray_curtis", transform="sqrt", size="log_total", shape="chi_square")
    """
    if counts is not None:
        if table is not None:
            from ..core.errors import InputError
            raise InputError("give either a table or counts=... (a file), not both.")
        from .loader import FileDashboard
        return FileDashboard(counts, samples, group=group, spec=spec, present=present,
                             **read_options)
    return Dashboard(table, group=group, spec=spec, present=present)
