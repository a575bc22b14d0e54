"""What a lab takes away from the dashboard: help on every control, the Report tab's
report.html, the compare view, continuity of the ordination, outlier flags, and the
"reproduce this" code run in a fresh interpreter."""
from __future__ import annotations

import json
import os
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.widgets import Dashboard
from tallyform.widgets.help import HELP, controls_without_help, exponent_words

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def dash():
    d = Dashboard(tly.demo("mesocosm"), group="treatment")      # synthetic demo
    d.tests.n_permutations.value = 99
    d.shape.intervals.value = 0
    return d


def test_every_control_has_a_help_line(dash):
    for panel in dash.panels:
        controls = list(panel.controls) + ([panel.exponent] if panel is dash.shape else [])
        assert controls_without_help(controls) == [], type(panel).__name__
    assert all(text.strip() and len(text) < 260 for text in HELP.values())
    assert "square root" in dash.shape.exponent.tooltip
    assert exponent_words(0.5) == "0.50 = square root"
    assert exponent_words(0.0) == "0.00 = presence/absence"
    dash.shape.exponent.value = 0.25
    assert "fourth root" in dash.shape.exponent_words.value
    dash.shape.exponent.value = 1.0


class _Tables(HTMLParser):
    def __init__(self):
        super().__init__()
        self.headers, self._in = [], False

    def handle_starttag(self, tag, attrs):
        self._in = tag == "th"

    def handle_endtag(self, tag):
        self._in = False

    def handle_data(self, data):
        if self._in and data.strip():
            self.headers.append(data.strip())


def test_report_tab_writes_the_report_of_tly_report(dash, tmp_path):
    out = tmp_path / "not" / "yet" / "there"
    dash.report.write_report(out, block=True)
    assert dash.report.messages.text == ""
    path = dash.report.report_path
    assert path == out / "report.html" and path.is_file()
    assert str(path) in dash.report.report_state.value
    text = path.read_text(encoding="utf-8")
    # the same builder as tly.report: the same spec gives the same sections and settings
    spec = tly.AnalysisSpec.from_json((out / "spec.json").read_text())
    assert spec == dash.spec
    assert "<h2>Methods</h2>" in text and "Samples that stand out" in text
    parser = _Tables()
    parser.feed(text)
    assert "pvalue_adjusted" not in parser.headers and "share_unadjusted" not in parser.headers
    assert (out / "tables" / "size_shape.csv").is_file() and (out / "methods.txt").is_file()


def test_compare_view_shows_two_choices(dash):
    c = dash.compare
    c.transform_b.value = "none"
    c.measure_b.value = "hellinger"
    direct = {"a": tly.size_shape(dash.table, "bray_curtis"),
              "b": tly.size_shape(dash.table, "hellinger")}
    for k in ("a", "b"):
        pd.testing.assert_series_equal(c.results[k].fractions, direct[k].fractions)
        assert len(getattr(c, f"partition_{k}").data) and len(getattr(c, f"ordination_{k}").data)
    # B is turned onto A: distances between samples unchanged (identity of rotations)
    o_b = tly.pcoa(tly.dissimilarity(dash.table, "hellinger"), dims=2).scores.to_numpy()
    shown = c.ordinations["b"].scores.to_numpy()
    d = lambda x: np.sqrt(((x[:, None] - x[None]) ** 2).sum(-1))      # noqa: E731
    np.testing.assert_allclose(d(shown), d(o_b), atol=1e-10)
    assert "Hellinger" in c.heading_b.value and "size only" in c.heading_a.value


def test_adjacent_exponents_move_points_smoothly(dash):
    dash.shape.exponent.value = 0.5
    before = dash.shape.shown_ordination.scores.copy()
    dash.shape.exponent.value = 0.55
    after = dash.shape.shown_ordination.scores
    scale = np.abs(before.to_numpy()).max()
    assert np.abs(after.to_numpy() - before.to_numpy()).max() < 0.1 * scale
    # what is on screen is what the figure holds
    xs = np.concatenate([np.asarray(t.x, float) for t in dash.shape.ordination_plot.data
                         if (t.meta or {}).get("role") == "samples"])
    assert np.isin(np.round(xs, 10), np.round(after.iloc[:, 0].to_numpy(), 10)).all()
    dash.shape.exponent.value = 1.0


def test_data_tab_flags_a_sample_that_stands_out():
    tab = tly.demo("mesocosm")
    counts = tab.counts.copy()
    counts.iloc[3] *= 8
    d = Dashboard(tly.CommunityTable(counts, tab.samples), group="treatment")
    label = str(counts.index[3])
    assert d.data.outlier_result.flagged == [label]
    assert label in d.data.outliers.value and "tf-outlier-flags" in d.data.outliers.value
    assert "tly.outlier_samples(tab" in d.report.code


def test_panel_reproduce_code_runs_in_a_fresh_interpreter(dash, tmp_path):
    dash.shape.exponent.value = 0.5
    dash.tests.run(block=True)
    assert dash.tests.status == "done"
    code = dash.report.code
    assert code.splitlines()[2] == "tab = tly.demo('mesocosm')"      # reads the data first
    script = tmp_path / "reproduce.py"
    script.write_text(code + "\nimport json\nprint(json.dumps({'s': s.fractions.tolist(), "
                      "'c': c.pvalue.tolist()}))\n")
    env = dict(os.environ, PYTHONPATH=str(ROOT), OMP_NUM_THREADS="1")
    out = subprocess.run([sys.executable, str(script)], capture_output=True, text=True,
                         env=env, timeout=600, cwd=tmp_path)
    assert out.returncode == 0, out.stderr[-2000:]
    got = json.loads(out.stdout.strip().splitlines()[-1])
    np.testing.assert_allclose(got["s"], dash.shape.result.fractions.to_numpy(), rtol=1e-12)
    np.testing.assert_allclose(got["c"], dash.tests.result.pvalue.to_numpy(), rtol=0)
    dash.shape.exponent.value = 1.0


def test_report_reproduce_code_runs_in_a_fresh_interpreter(tmp_path):
    spec = tly.AnalysisSpec(group="treatment", units="tank", blocks="tank_block",
                            n_permutations=99, n_boot=0, scan_measures=("bray_curtis",),
                            scan_transforms=("none",), audit_n_sim=20)
    res = tly.run(spec, tly.demo("mesocosm"))
    from tallyform.render.report import report_html
    html = report_html(res)
    code = html.split("from reading the data on</h3><pre>", 1)[1].split("</pre>", 1)[0]
    import html as _html
    code = _html.unescape(code)
    assert "tab = tly.demo('mesocosm')" in code
    script = tmp_path / "report_code.py"
    script.write_text(code + "\nimport json\nprint(json.dumps(results.comparison.pvalue"
                      ".tolist()))\n")
    env = dict(os.environ, PYTHONPATH=str(ROOT), OMP_NUM_THREADS="1")
    out = subprocess.run([sys.executable, str(script)], capture_output=True, text=True,
                         env=env, timeout=900, cwd=tmp_path)
    assert out.returncode == 0, out.stderr[-2000:]
    got = json.loads(out.stdout.strip().splitlines()[-1])
    np.testing.assert_allclose(got, res.comparison.pvalue.to_numpy(), rtol=0)
