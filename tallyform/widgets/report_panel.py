"""The Report panel: the settings as an AnalysisSpec, "reproduce this" code, and export.

The code shown is built from the very :class:`~tallyform.widgets.common.Call` objects the
other panels ran, so rerunning it gives the numbers on screen without the widgets; the
settings are a :class:`tallyform.AnalysisSpec`, so ``tly.run(spec, tab)`` recomputes them
all (and the steps the dashboard does not show: scan, PERMANOVA, audit).
"""
from __future__ import annotations

import html
import warnings
from pathlib import Path

import ipywidgets as widgets

from .common import TABLE, MessageArea, literal
from .tests_panel import strata_frame

__all__ = ["ReportPanel", "reproduce_code", "dashboard_spec", "spec_code"]

# variable names in the reproduced code, by core function
_NAMES = {"size_shape": "s", "pcoa": "o", "ellipses": "e", "group": "groups",
          "compare_groups": "c", "pairwise_permanova": "w", "taxon_contributions": "k",
          "totals_by": "totals", "summary": "facts"}


def dashboard_spec(dashboard):
    """The dashboard's choices as a validated :class:`tallyform.AnalysisSpec`."""
    from ..core.spec import AnalysisSpec
    values = {**dashboard.data.spec_values(), **dashboard.tests.spec_values(),
              **dashboard.shape.spec_values()}
    return AnalysisSpec(**values).validate(dashboard.table)


def spec_code(spec) -> str:
    """``tly.AnalysisSpec(...)`` with the choices that differ from the defaults."""
    from dataclasses import fields

    from ..core.spec import AnalysisSpec
    default = AnalysisSpec()
    changed = [f"{f.name}={literal(getattr(spec, f.name))}" for f in fields(spec)
               if getattr(spec, f.name) != getattr(default, f.name)]
    return f"tly.AnalysisSpec({', '.join(changed)})"


def reproduce_code(dashboard, spec=None) -> str:
    """Python that recomputes what the dashboard shows, one core call per line."""
    tab = dashboard.table
    spec = dashboard_spec(dashboard) if spec is None else spec
    origin = f"read from {tab.origin.file}; " if getattr(tab.origin, "file", None) else ""
    lines = ["import tallyform as tly", "",
             f"{TABLE} = ...  # the CommunityTable given to tly.explore ({origin}"
             f"fingerprint {tab.fingerprint})",
             f"spec = {spec_code(spec)}",
             f"# results = tly.run(spec, {TABLE})  # every step at once, scan and audit too",
             "", "# What the dashboard shows, call by call", "# Data"]
    data = dashboard.data.calls
    for key in ("summary", "totals"):
        if key in data:
            lines.append(f"{_NAMES[data[key].func]} = {data[key].code()}")
    lines += ["", "# Size & shape"]
    calls = dashboard.shape.calls
    # with intervals, one call gives the shares on screen and their intervals
    for key in ("intervals" if "intervals" in calls else "partition", "ordination",
                "ellipses"):
        if key in calls:
            lines.append(f"{_NAMES[calls[key].func]} = {calls[key].code()}")
    group = f", group={calls['group'].code()}" if "group" in calls else ""
    ell = ", ellipses=e" if "ellipses" in calls else ""
    lines += ["tly.plots.partition_bars(s)", f"tly.plots.ordination_figure(o{group}{ell})"]
    tests = dashboard.tests
    call = tests.build_call()
    ran = tests.call is not None and tests.call.code() == call.code()
    lines += ["", "# Tests" + (" (as last run)" if ran else " (current settings, not run yet)"),
              f"{_NAMES.get(call.func, 'r')} = {call.code()}"]
    return "\n".join(lines) + "\n"


class ReportPanel(widgets.VBox):
    """Spec JSON, "reproduce this" code and export of the figures and tables on screen.

    Attributes
    ----------
    spec : AnalysisSpec or None
        The current settings (None while they do not form a valid spec; the message
        says why).
    code : str
        The "reproduce this" code.
    folder : Text
        Where :meth:`export` writes.
    static : Checkbox
        Also write PNG and SVG copies of the figures (needs Chromium; skipped with a
        reason otherwise).
    export_button : Button
    written : list of Path
        Files written by the last export.
    """

    def __init__(self, dashboard):
        self._dash = dashboard
        self.spec = None
        self.code = ""
        self.written: list[Path] = []
        self.error: BaseException | None = None
        self.reproduce = widgets.HTML()
        self.reproduce.add_class("tf-reproduce")
        self.spec_view = widgets.HTML()
        self.spec_view.add_class("tf-spec")
        self.folder = widgets.Text(value="tallyform-export", description="Folder")
        self.folder.add_class("tf-export-folder")
        self.static = widgets.Checkbox(value=False, indent=False,
                                       description="also PNG and SVG (needs Chromium)")
        self.static.add_class("tf-export-static")
        self.export_button = widgets.Button(description="Export figures and tables",
                                            icon="download")
        self.export_button.add_class("tf-export-button")
        self.export_state = widgets.HTML()
        self.export_state.add_class("tf-export-state")
        self.messages = MessageArea()
        self.controls = [self.folder, self.static, self.export_button]
        super().__init__([
            widgets.HTML("<b>Reproduce this</b>: the core calls behind what is shown"),
            self.reproduce,
            widgets.HTML("<b>Settings</b> (an AnalysisSpec, JSON)"), self.spec_view,
            widgets.HBox(self.controls), self.export_state, self.messages])
        self.add_class("tf-panel-report")
        self.export_button.on_click(lambda _: self.export())

    def refresh(self, change=None) -> None:
        """Rebuild the spec and the code from the panels' current state."""
        try:
            self.spec = dashboard_spec(self._dash)
            self.code = reproduce_code(self._dash, self.spec)
        except Exception as err:        # e.g. settings no spec can hold: say which
            self.spec, self.error = None, err
            self.messages.show_error(err)
            return
        self.error = None
        self.messages.clear()
        self.reproduce.value = f"<pre class='tf-code'>{html.escape(self.code)}</pre>"
        self.spec_view.value = f"<pre class='tf-code'>{html.escape(self.spec.to_json())}</pre>"

    # ------------------------------------------------------------------ export
    def export(self, folder=None) -> list[Path]:
        """Write the figures, the result tables (CSV and one XLSX), spec, code and methods.

        Figures go through ``tly.plots.save`` and tables through the render ring's table
        writer; every file is written to a temporary file and renamed, so a failed export
        leaves no half-written file. Returns the paths written.
        """
        from ..core.fileio import write_text_atomic
        from ..render.methods import methods_text
        from ..render.tables import write_tables
        self.refresh()
        out = Path(self.folder.value if folder is None else folder).expanduser()
        written: list[Path] = []
        skipped: dict = {}
        formats = ("html", "png", "svg") if self.static.value else ("html",)
        try:
            if self.spec is None:
                raise self.error
            out.mkdir(parents=True, exist_ok=True)
            for name, fig in self._figures():
                saved = _save_figure(fig, out / name, formats)
                written += list(saved)
                skipped.update(getattr(saved, "skipped", {}))
            written += write_tables(self._tables(), out)
            self.spec.to_json(out / "spec.json")
            written.append(out / "spec.json")
            written.append(write_text_atomic(out / "reproduce.py", self.code))
            written.append(write_text_atomic(out / "methods.txt",
                                             methods_text(self.spec) + "\n"))
        except Exception as err:
            self.error = err
            self.messages.show_error(err)
            self.export_state.value = ""
        else:
            self.error = None
            why = "".join(f" {fmt.upper()} skipped: {html.escape(reason)}."
                          for fmt, reason in skipped.items())
            self.export_state.value = (f"Wrote {len(written)} files to "
                                       f"<code>{html.escape(str(out))}</code>.{why}")
        self.written = written
        return written

    def _figures(self):
        import plotly.graph_objects as go
        d = self._dash
        figs = [("totals", d.data.totals_plot), ("partition", d.shape.partition_plot),
                ("ordination", d.shape.ordination_plot), ("tests", d.tests.plot),
                ("tests_2", d.tests.plot2), ("tests_3", d.tests.plot3)]
        return [(name, go.Figure(fw)) for name, fw in figs if len(fw.data)]

    def _tables(self) -> dict:
        """The tables of the results on screen, named as ``tly.run(...).tables()`` names them."""
        d = self._dash
        out = {}
        if d.data.summary is not None:
            out["summary"] = d.data.summary.to_frame("value")
        if d.data.result is not None:
            out["totals_per_effort" if d.data.per_effort.value else "totals_by_group"] = \
                d.data.result
        if d.shape.result is not None:
            shown = (d.shape.intervals_result if d.shape.intervals_result is not None
                     else d.shape.result)                    # with its intervals when done
            out["size_shape"] = shown.to_frame()
            out["size_shape_by_dims"] = d.shape.result.by_dims()
        if d.shape.ordination is not None:
            out["ordination_axes"] = d.shape.ordination.to_frame()
            out["ordination_scores"] = d.shape.ordination.scores
        if d.shape.ellipse_set is not None:
            out["ellipses"] = d.shape.ellipse_set.to_frame()
        r = d.tests.result
        kind = type(r).__name__
        if kind == "ComparisonResult":
            if r.size is not None:                 # None: relative data without loads
                out["size_test"] = r.size.to_frame()
            out["comparison"] = r.to_frame()
            out["shape_test"] = r.shape.to_frame()
            if r.permanova is not None:
                out["shape_permanova"] = r.permanova.to_frame()
            out["dispersion_test"] = r.dispersion.to_frame()
            out["strata"] = strata_frame(r)
        elif kind == "PairwiseResult":
            out["pairwise"] = r.to_frame()
        elif r is not None:
            out["taxa_shape"] = r.to_frame()
            out["taxa_size"] = r.size_frame()
        return out


def _save_figure(fig, stem: Path, formats):
    """Save through the render ring's ``save`` (atomic there); the files it wrote."""
    from ..render.export import StaticExportWarning, save
    with warnings.catch_warnings():          # the reason is shown in the panel instead
        warnings.simplefilter("ignore", StaticExportWarning)
        return save(fig, stem, formats=formats)
