"""What a lab takes away, in the browser: help on every control, the Report tab writing
report.html, the compare view, and the ordination staying in place between adjacent
exponents. Waits are on conditions in the page; numbers are checked against core calls made
here. Screenshots go to tests/browser/screenshots/ (words_*.png).
"""
from __future__ import annotations

from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

import tallyform as tly
from tallyform.widgets.help import HELP
from tallyform.widgets.shape_panel import ORDINATION_WIDTH, PARTITION_WIDTH

from test_dashboard_browser import (DASH, ORDINATION, QUICK, choose, open_notebook,  # noqa
                                    run_all, show_tab)

pytestmark = [pytest.mark.browser, pytest.mark.timeout(420)]

MESOCOSM = tly.demo("mesocosm")          # synthetic demo, as the quick start loads it

# every element carrying one of the help classes, with its title (the tooltip)
HELP_TITLES = """([root, classes]) => classes.flatMap(c =>
  [...document.querySelectorAll(root + ' .' + c)].map(e => {
    const t = e.getAttribute('title') || (e.querySelector('[title]') || {}).title || '';
    return [c, t, e.offsetParent !== null]; }))"""

COMPARE_READY = """(root) => ['a', 'b'].every(k => {
  for (const w of ['partition', 'ordination']) {
    const d = document.querySelector(root + ' .tf-compare-' + w + '-' + k + '.js-plotly-plot');
    if (!d || !d._fullData || !d._fullData.length) return false;
  }
  return true; })"""

COMPARE_BARS = """([root, k]) => {
  const d = document.querySelector(root + ' .tf-compare-partition-' + k + '.js-plotly-plot');
  return d._fullData.filter(t => t.type === 'bar').map(t =>
    [t.meta && t.meta.fraction, Number(Array.from(t.x)[0])]); }"""


@pytest.fixture(scope="module")
def dashboard(open_page, lab):
    p = open_page()
    open_notebook(p, lab, QUICK)
    run_all(p, QUICK)
    p.page.locator(f"{DASH} .tf-panel-data").wait_for(state="visible")
    return p


def test_every_control_has_a_help_text(dashboard):
    p = dashboard
    checked = {}
    for tab in ("Data", "Size & shape", "Compare", "Tests", "Report"):
        show_tab(p, DASH, tab)
        for cls, title, visible in p.page.evaluate(HELP_TITLES, [DASH, list(HELP)]):
            if visible:
                assert title.strip(), f"{cls} on the {tab} tab has no help text"
                checked[cls] = title
    # the controls a user sees carry the words of the help table
    for cls in ("tf-exponent-slider", "tf-measure", "tf-shape-basis", "tf-shape-dims",
                "tf-units", "tf-blocks", "tf-permutations", "tf-report-button",
                "tf-compare-a"):
        assert checked.get(cls) == HELP[cls], cls
    assert len(checked) >= 20
    show_tab(p, DASH, "Size & shape")
    words = p.page.locator(f"{DASH} .tf-exponent-words")
    assert "counts as they are" in words.inner_text() or "=" in words.inner_text()
    p.page.locator(f"{DASH} .tf-panel-shape").scroll_into_view_if_needed()
    p.shot("words_1_size_and_shape_help")


def test_axis_continuity_between_adjacent_exponents(dashboard):
    p = dashboard
    show_tab(p, DASH, "Size & shape")
    slider = f"{DASH} .tf-exponent-slider"
    handle = p.page.locator(f"{slider} .noUi-handle")
    readout = p.page.locator(f"{slider} .widget-readout")
    handle.focus()
    before_value = float(readout.inner_text())
    before = p.page.wait_for_function(ORDINATION, arg=DASH).json_value()
    handle.press("ArrowLeft")                        # one step: the adjacent exponent
    target = f"{before_value - 0.05:.2f}"
    p.page.wait_for_function(
        "([sel, t]) => document.querySelector(sel).textContent.trim() === t",
        arg=[f"{slider} .widget-readout", target])
    p.page.wait_for_function(
        "([root, old]) => { const d = document.querySelector(root + "
        "' .tf-ordination-plot.js-plotly-plot'); const t = d._fullData.find("
        "t => t.meta && t.meta.role === 'samples'); return t && Number(Array.from(t.x)[0]) "
        "!== old; }", arg=[DASH, next(iter(before.values()))[0]])
    after = p.page.evaluate(ORDINATION, DASH)
    labels = sorted(before)
    b = np.array([before[s] for s in labels])
    a = np.array([after[s] for s in labels])
    scale = np.abs(b).max()
    tol = 0.1 * scale
    # every sample's score keeps its sign unless it sits within the tolerance of 0, and
    # moves by less than the tolerance: no axis flipped
    assert np.abs(a - b).max() < tol
    flipped = (np.sign(a) != np.sign(b)) & (np.abs(b) > tol)
    assert not flipped.any(), [labels[i] for i in np.flatnonzero(flipped.any(axis=1))]
    # the distances drawn are those of the core at the new exponent (a turn keeps them)
    o = tly.pcoa(tly.dissimilarity(MESOCOSM, "bray_curtis",
                                   transform=tly.Power(float(target))), dims=2)
    ref = o.scores.loc[labels].to_numpy()
    d = lambda x: np.sqrt(((x[:, None] - x[None]) ** 2).sum(-1))     # noqa: E731
    np.testing.assert_allclose(d(a), d(ref), rtol=1e-6, atol=1e-8)
    p.page.locator(f"{DASH} .tf-ordination-plot").scroll_into_view_if_needed()
    p.shot("words_2_continuity_after_one_step")


def test_compare_view_two_choices_side_by_side(dashboard):
    p = dashboard
    show_tab(p, DASH, "Compare")
    panel = f"{DASH} .tf-panel-compare"
    p.page.wait_for_function(COMPARE_READY, arg=DASH, timeout=120_000)
    choose(p, f"{panel} .tf-compare-transform-b select", "square root")
    expected = {"a": tly.size_shape(MESOCOSM, "bray_curtis"),
                "b": tly.size_shape(MESOCOSM, "hellinger", transform="sqrt")}
    p.page.wait_for_function(
        "([root, x]) => { const d = document.querySelector(root + "
        "' .tf-compare-partition-b.js-plotly-plot'); if (!d || !d._fullData) return false;"
        " const t = d._fullData.find(t => t.meta && t.meta.fraction === 'size_only');"
        " return t && Math.abs(Number(Array.from(t.x)[0]) - x) < 1e-9; }",
        arg=[DASH, float(expected["b"].fractions["size_only"])])
    for k in ("a", "b"):
        bars = dict((f, x) for f, x in p.page.evaluate(COMPARE_BARS, [DASH, k]))
        for f, x in bars.items():
            assert x == pytest.approx(float(expected[k].fractions[f]), abs=1e-9)
    heads = p.page.locator(f"{panel} .tf-compare-heading")
    assert "Bray-Curtis" in heads.nth(0).inner_text()
    assert "Hellinger of square root" in heads.nth(1).inner_text()
    # side by side on this screen: the two columns start at the same height
    box_a = p.page.locator(f"{panel} .tf-compare-a-column").bounding_box()
    box_b = p.page.locator(f"{panel} .tf-compare-b-column").bounding_box()
    assert abs(box_a["y"] - box_b["y"]) < 2 and box_b["x"] > box_a["x"] + 200
    p.page.locator(panel).scroll_into_view_if_needed()
    p.shot("words_3_compare_view")


class _Report(HTMLParser):
    def __init__(self):
        super().__init__()
        self.h2, self.external, self._tag = [], [], None

    def handle_starttag(self, tag, attrs):
        self._tag = tag
        for k, v in attrs:
            if k in ("src", "href") and v and v.startswith(("http:", "https:", "//")):
                self.external.append(v)

    def handle_data(self, data):
        if self._tag == "h2" and data.strip():
            self.h2.append(data.strip())

    def handle_endtag(self, tag):
        self._tag = None


def test_report_tab_writes_report_html(dashboard, lab, file_page):
    p = dashboard
    show_tab(p, DASH, "Report")
    panel = f"{DASH} .tf-panel-report"
    folder = p.page.locator(f"{panel} .tf-export-folder input")
    folder.fill("lab_meeting")
    folder.press("Enter")
    p.page.locator(f"{panel} .tf-report-button").click()
    state = p.page.locator(f"{panel} .tf-report-state")
    from playwright.sync_api import expect
    expect(state).to_contain_text("report.html", timeout=300_000)
    assert p.page.locator(f"{panel} .tf-message").count() == 0 or \
        p.page.locator(f"{panel} .tf-message").inner_text() == ""
    path = Path(lab["root"]) / "lab_meeting" / "report.html"
    assert path.is_file(), state.inner_text()
    assert str(Path("lab_meeting") / "report.html") in state.inner_text()
    parser = _Report()
    parser.feed(path.read_text(encoding="utf-8"))
    for section in ("Data", "Size and shape of the chosen measure", "Ordination",
                    "Size test, shape test and dispersion", "Methods", "Analysis spec"):
        assert section in parser.h2, parser.h2
    assert parser.external == []                   # self-contained
    spec = tly.AnalysisSpec.from_json((path.parent / "spec.json").read_text())
    assert spec.group == "treatment" and spec.blocks == "tank_block"
    p.page.locator(panel).scroll_into_view_if_needed()
    p.shot("words_4_report_tab_written")
    # the report opens offline and draws its figures
    file_page.page.goto(path.as_uri())
    file_page.page.wait_for_function(
        "() => document.querySelectorAll('.js-plotly-plot').length >= 3", timeout=120_000)
    assert file_page.blocked == []
    file_page.shot("words_5_report_html_opened")


def test_partition_and_ordination_side_by_side_at_970_px(dashboard):
    p = dashboard
    show_tab(p, DASH, "Size & shape")
    p.page.evaluate("async () => { const app = window.jupyterapp;"
                    " if (!app.shell.leftCollapsed) await app.commands.execute("
                    "'application:toggle-left-area'); }")
    p.page.set_viewport_size({"width": 970, "height": 900})
    try:
        bars = p.page.locator(f"{DASH} .tf-partition-plot")
        points = p.page.locator(f"{DASH} .tf-ordination-plot")
        p.page.wait_for_function(
            "(root) => document.querySelector(root + ' .tf-shape-plots')"
            ".getBoundingClientRect().width < 960", arg=DASH)
        row = p.page.evaluate(
            "(root) => document.querySelector(root + ' .tf-shape-plots')"
            ".getBoundingClientRect().width", DASH)
        p.shot("words_6_side_by_side_970px")
        assert row >= PARTITION_WIDTH + ORDINATION_WIDTH, f"{row} px for the two figures"
        p.page.wait_for_function(
            "(root) => { const a = document.querySelector(root + ' .tf-partition-plot')"
            ".getBoundingClientRect(), b = document.querySelector(root + "
            "' .tf-ordination-plot').getBoundingClientRect();"
            " return Math.abs(a.top - b.top) < 2 && b.left >= a.right - 1; }", arg=DASH)
        a, b = bars.bounding_box(), points.bounding_box()
        assert b["x"] + b["width"] <= 970            # nothing runs off the screen
        assert a["width"] == pytest.approx(PARTITION_WIDTH, abs=1)
        assert b["width"] == pytest.approx(ORDINATION_WIDTH, abs=1)
        bars.scroll_into_view_if_needed()
        p.shot("words_6_side_by_side_970px")
    finally:
        p.page.set_viewport_size({"width": 1400, "height": 1000})
