"""The Report panel: the current settings as JSON, "reproduce this" code, and export.

The code shown is built from the very :class:`~tallyform.widgets.common.Call` objects the
other panels ran, so rerunning it gives the numbers on screen without the widgets.
"""
from __future__ import annotations

import html
import json
import os
import tempfile
from pathlib import Path

import ipywidgets as widgets

from .common import TABLE, MessageArea

__all__ = ["ReportPanel", "reproduce_code", "settings_spec", "atomic_write_text"]

# variable names in the reproduced code, by core function
_NAMES = {"size_shape": "s", "pcoa": "o", "ellipses": "e", "group": "groups",
          "compare_groups": "c", "pairwise_permanova": "w", "taxon_contributions": "k",
          "totals_by": "totals", "summary": "facts"}


def settings_spec(dashboard) -> dict:
    """Every choice on screen, as a plain dict (JSON-ready).

    SWITCH: when ``tallyform.core.spec.AnalysisSpec`` lands on main, build the spec object
    here (``AnalysisSpec(...)``) and show ``spec.to_json()``; the keys below are the same
    choices.
    """
    import tallyform
    tab = dashboard.table
    return {
        "tallyform": tallyform.__version__,
        "table": {"fingerprint": tab.fingerprint, "samples": tab.n_samples,
                  "taxa": tab.n_taxa, "effort": tab.effort_name},
        "data": dashboard.data.settings(),
        "size_shape": dashboard.shape.settings(),
        "tests": dashboard.tests.settings(),
    }


def reproduce_code(dashboard) -> str:
    """Python that recomputes what the dashboard shows, one core call per line."""
    tab = dashboard.table
    origin = f"read from {tab.origin.file}; " if getattr(tab.origin, "file", None) else ""
    lines = ["import tallyform as tly", "",
             f"{TABLE} = ...  # the CommunityTable given to tly.explore ({origin}"
             f"fingerprint {tab.fingerprint})", ""]
    data = dashboard.data.calls
    lines.append("# Data")
    for key in ("summary", "totals"):
        if key in data:
            lines.append(f"{_NAMES[data[key].func]} = {data[key].code()}")
    lines += ["", "# Size & shape"]
    calls = dashboard.shape.calls
    for key in ("partition", "ordination", "ellipses"):
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


def atomic_write_text(path, text: str) -> Path:
    """Write text to ``path`` through a temporary file in the same folder, then rename."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return path


class ReportPanel(widgets.VBox):
    """Spec JSON, "reproduce this" code and export of the figures and tables on screen.

    Attributes
    ----------
    spec : dict
        The current settings (see :func:`settings_spec`).
    code : str
        The "reproduce this" code.
    folder : Text
        Where :meth:`export` writes.
    export_button : Button
    written : list of Path
        Files written by the last export.
    """

    def __init__(self, dashboard):
        self._dash = dashboard
        self.spec: dict = {}
        self.code = ""
        self.written: list[Path] = []
        self.error: BaseException | None = None
        self.reproduce = widgets.HTML()
        self.reproduce.add_class("tf-reproduce")
        self.spec_view = widgets.HTML()
        self.spec_view.add_class("tf-spec")
        self.folder = widgets.Text(value="tallyform-export", description="Folder")
        self.folder.add_class("tf-export-folder")
        self.export_button = widgets.Button(description="Export figures and tables",
                                            icon="download")
        self.export_button.add_class("tf-export-button")
        self.static = widgets.Checkbox(value=False, indent=False,
                                       description="also PNG and SVG (needs Chromium)")
        self.static.add_class("tf-export-static")
        self.export_state = widgets.HTML()
        self.export_state.add_class("tf-export-state")
        self.messages = MessageArea()
        self.controls = [self.folder, self.static, self.export_button]
        super().__init__([
            widgets.HTML("<b>Reproduce this</b> (the core calls behind what is shown)"),
            self.reproduce,
            widgets.HTML("<b>Settings</b> (JSON)"), self.spec_view,
            widgets.HBox(self.controls), self.export_state, self.messages])
        self.add_class("tf-panel-report")
        self.export_button.on_click(lambda _: self.export())

    def refresh(self, change=None) -> None:
        """Rebuild the spec and the code from the panels' current state."""
        try:
            self.spec = settings_spec(self._dash)
            self.code = reproduce_code(self._dash)
        except Exception as err:
            self.messages.show_error(err)
            return
        self.messages.clear()
        self.reproduce.value = f"<pre class='tf-code'>{html.escape(self.code)}</pre>"
        self.spec_view.value = (f"<pre class='tf-code'>"
                                f"{html.escape(json.dumps(self.spec, indent=2))}</pre>")

    # ------------------------------------------------------------------ export
    def export(self, folder=None) -> list[Path]:
        """Write the figures (``tly.plots.save``), result tables (CSV), spec and code.

        Every file goes through a temporary file and a rename, so a failed export leaves
        no half-written file. Returns the paths written.
        """
        self.refresh()
        out = Path(self.folder.value if folder is None else folder).expanduser()
        self.error = None
        self.messages.clear()
        written: list[Path] = []
        skipped: dict = {}
        formats = ("html", "png", "svg") if self.static.value else ("html",)
        try:
            for name, fig in self._figures():
                saved = _save_figure(fig, out / name, formats)
                written += list(saved)
                skipped.update(getattr(saved, "skipped", {}))
            for name, frame in self._tables():
                written.append(atomic_write_text(out / f"{name}.csv", frame.to_csv()))
            written.append(atomic_write_text(out / "settings.json",
                                             json.dumps(self.spec, indent=2) + "\n"))
            written.append(atomic_write_text(out / "reproduce.py", self.code))
        except Exception as err:
            self.error = err
            self.messages.show_error(err)
            self.export_state.value = ""
        else:
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
                ("tests_2", d.tests.plot2)]
        return [(name, go.Figure(fw)) for name, fw in figs if len(fw.data)]

    def _tables(self):
        d = self._dash
        out = []
        if d.data.result is not None:
            out.append(("totals_by_group", d.data.result))
        if d.shape.result is not None:
            out.append(("partition", d.shape.result.to_frame()))
            out.append(("partition_by_dims", d.shape.result.by_dims()))
        if d.shape.ordination is not None:
            out.append(("ordination_axes", d.shape.ordination.to_frame()))
            out.append(("ordination_scores", d.shape.ordination.scores))
        r = d.tests.result
        if r is not None:
            out.append(("tests", r.to_frame()))
            for part in ("size", "shape", "dispersion"):    # compare_groups keeps all three
                sub = getattr(r, part, None)
                if hasattr(sub, "to_frame"):
                    out.append((f"tests_{part}", sub.to_frame()))
        return out


def _save_figure(fig, stem: Path, formats):
    """Save through the render ring's ``save`` (atomic there); the files it wrote."""
    import warnings

    from ..render.export import StaticExportWarning, save
    with warnings.catch_warnings():          # the reason is shown in the panel instead
        warnings.simplefilter("ignore", StaticExportWarning)
        return save(fig, stem, formats=formats)

