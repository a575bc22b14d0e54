"""The Report panel: the settings as an AnalysisSpec, "reproduce this" code, and export.

The code shown is built from the very :class:`~tallyform.widgets.common.Call` objects the
other panels ran, so rerunning it gives the numbers on screen without the widgets; the
settings are a :class:`tallyform.AnalysisSpec`, so ``tly.run(spec, tab)`` recomputes them
all (and the steps the dashboard does not show: scan, PERMANOVA, audit).
"""
from __future__ import annotations

import html
import os
import threading
import warnings
from pathlib import Path

import ipywidgets as widgets

from .common import TABLE, MessageArea, literal
from .help import add_help
from .tests_panel import strata_frame

__all__ = ["ReportPanel", "reproduce_code", "dashboard_spec", "spec_code"]

# variable names in the reproduced code, by core function
_NAMES = {"size_shape": "s", "pcoa": "o", "ellipses": "e", "group": "groups",
          "compare_groups": "c", "pairwise_permanova": "w", "taxon_contributions": "k",
          "totals_by": "totals", "summary": "facts", "outlier_samples": "flags",
          "choice_adjusted": "j"}


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
    from ..core.reproduce import read_lines
    tab = dashboard.table
    spec = dashboard_spec(dashboard) if spec is None else spec
    read, _ = read_lines(spec, tab)          # reads the data first, as spec.code() does
    lines = ["import tallyform as tly", "", *read,
             f"# the table analysed: {tab.n_samples} samples x {tab.n_taxa} taxa "
             f"(tab.fingerprint == {tab.fingerprint!r})",
             f"spec = {spec_code(spec)}",
             f"# results = tly.run(spec, {TABLE})  # every step at once, scan and audit too",
             "", "# What the dashboard shows, call by call", "# Data"]
    data = dashboard.data.calls
    for key in ("summary", "totals", "outliers"):
        if key in data:
            lines.append(f"{_NAMES[data[key].func]} = {data[key].code()}")
    lines += ["", "# Size & shape"]
    calls = dashboard.shape.calls
    # with intervals, one call gives the shares on screen and their intervals
    # (past a few hundred samples the live call skips the eigenvalues; the settled one
    # is the call that reproduces the screen once the controls rest)
    first = next(k for k in ("intervals", "settled", "partition") if k in calls)
    ordination = "ordination_settled" if "ordination_settled" in calls else "ordination"
    for key in (first, ordination, "ellipses"):
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
    adjusted = tests.choices.call
    if adjusted is not None:
        n = len(adjusted.args[2])
        lines += [f"# the p-value adjusted for the {n} choices tried for "
                  f"{adjusted.args[1]!r} (start over: a new question clears them)",
                  f"{_NAMES[adjusted.func]} = {adjusted.code()}"]
    if tests.choices.call_menu is not None:
        lines += ["# ... and for every measure the panel offers (after a search until one "
                  "was small)", f"j_all = {tests.choices.call_menu.code()}"]
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
        self.report_button = widgets.Button(description="Write report.html", icon="file",
                                            button_style="primary",
                                            layout=widgets.Layout(width="auto"))
        self.report_button.add_class("tf-report-button")
        self.report_progress = widgets.IntProgress(value=0, min=0, max=100,
                                                   layout=widgets.Layout(width="160px"))
        self.report_progress.add_class("tf-report-progress")
        self.report_progress.layout.display = "none"
        self.report_state = widgets.HTML()
        self.report_state.add_class("tf-report-state")
        self.report_path: Path | None = None
        self.report_files: dict = {}
        self._report_thread: threading.Thread | None = None
        self.export_button = widgets.Button(description="Export figures and tables",
                                            icon="download",
                                            layout=widgets.Layout(width="auto"))
        self.export_button.add_class("tf-export-button")
        self.export_state = widgets.HTML()
        self.export_state.add_class("tf-export-state")
        self.messages = MessageArea()
        self.controls = [self.folder, self.static, self.report_button, self.export_button]
        for w in self.controls:
            add_help(w)
        super().__init__([
            widgets.HTML("<b>Report</b>: the same self-contained report.html as "
                         "<code>tly.report</code> for the current choices, with its tables, "
                         "settings and methods"),
            widgets.HBox([self.folder, self.report_button, self.report_progress]),
            self.report_state,
            widgets.HTML("<b>Reproduce this</b>: reads the data, then the core calls behind "
                         "what is shown"),
            self.reproduce,
            widgets.HTML("<b>Settings</b> (an AnalysisSpec, JSON)"), self.spec_view,
            widgets.HBox([self.static, self.export_button]), self.export_state,
            self.messages])
        self.add_class("tf-panel-report")
        self.export_button.on_click(lambda _: self.export())
        self.report_button.on_click(lambda _: self.write_report())

    # ------------------------------------------------------------------ the report
    def write_report(self, folder=None, *, block: bool = False) -> None:
        """Run the current spec (``tly.run``) and write what ``tly.write_outputs`` writes:
        report.html (the very report of ``tly.report``), tables, spec.json, methods.txt.

        Runs in a background thread with a progress bar; ``block=True`` waits. The path is
        shown when done (``report_path``).
        """
        if self._report_thread is not None and self._report_thread.is_alive():
            return
        self.refresh()
        out = Path(self.folder.value if folder is None else folder).expanduser()
        spec, table = self.spec, self._dash.table
        self.report_path, self.report_files = None, {}
        if spec is None:
            self.messages.show_error(self.error)
            return
        self.report_button.disabled = True
        self.report_progress.value = 0
        self.report_progress.layout.display = None
        self.report_state.value = "running every step of the analysis..."

        def progress(done, total):
            if total > 0:
                self.report_progress.value = min(100, int(100 * done / total))

        def work():
            from ..render.report import write_outputs
            from ..core.analysis import run
            try:
                results = run(spec, table, progress=progress)
                files = write_outputs(results, out)
            except Exception as err:      # shown in the panel, never a traceback
                self.messages.show_error(err)
                self.report_state.value = ""
            else:
                self.report_files = files
                self.report_path = Path(files["report"])
                self.report_state.value = (
                    "Wrote <a class='tf-report-link' href='" + html.escape(
                        _link(self.report_path)) + "' target='_blank'><code>"
                    + html.escape(str(self.report_path)) + "</code></a> with tables, "
                    "spec.json and methods.txt beside it.")
            finally:
                self.report_button.disabled = False
                self.report_progress.value = 100
        self._report_thread = threading.Thread(target=work, name="tallyform-report",
                                               daemon=True)
        self._report_thread.start()
        if block:
            self._report_thread.join()

    def wait_report(self, timeout: float | None = None) -> bool:
        """Wait for the report being written; True when done."""
        if self._report_thread is not None:
            self._report_thread.join(timeout)
        return self._report_thread is None or not self._report_thread.is_alive()

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
        kind = type(d.tests.result).__name__
        names = (("shape_test", "spread_test", "permanova_reference")
                 if kind == "ComparisonResult" else
                 ("taxa_shape", "taxa_size", "tests_other")
                 if kind == "TaxonContributions" else ("tests", "tests_b", "tests_c"))
        figs = [("totals", d.data.totals_plot), ("partition", d.shape.partition_plot),
                ("ordination", d.shape.ordination_plot)] + list(zip(
                    names, (d.tests.plot, d.tests.plot2, d.tests.plot3)))
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
            out["size_shape_by_dims"] = shown.by_dims()      # every k once settled
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


def _link(path: Path) -> str:
    """A link JupyterLab opens: ``files/<path relative to the server's folder>``."""
    try:
        rel = os.path.relpath(path.resolve(), Path.cwd())
    except ValueError:
        rel = str(path)
    return "files/" + rel.replace(os.sep, "/") if not rel.startswith("..") else str(path)


def _save_figure(fig, stem: Path, formats):
    """Save through the render ring's ``save`` (atomic there); the files it wrote."""
    from ..render.export import StaticExportWarning, save
    with warnings.catch_warnings():          # the reason is shown in the panel instead
        warnings.simplefilter("ignore", StaticExportWarning)
        return save(fig, stem, formats=formats)
