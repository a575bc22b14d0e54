"""The dashboard in JupyterLab, driven in headless Chromium as a user drives it.

Every wait is on a condition in the page (kernel state, a widget's DOM, the data of a plotly
div), never a fixed sleep. Numbers read from the page are checked against the same core calls
made here, in the test process. Screenshots go to tests/browser/screenshots/.
"""
from __future__ import annotations

import re
import subprocess
import sys

import numpy as np
import pytest

import tallyform as tly
from tallyform.core.measures import MEASURES
from tallyform.core.scenarios import demo_dir

pytestmark = [pytest.mark.browser, pytest.mark.timeout(300)]

FRACTIONS = ("size_only", "shared", "shape_only", "residual")

# ------------------------------------------------------------------ page helpers (JS)
KERNEL_IDLE = """(path) => {
  const w = window.jupyterapp && window.jupyterapp.shell.currentWidget;
  if (!w || !w.context || w.context.path !== path) return false;
  const s = w.sessionContext && w.sessionContext.session;
  const k = s && s.kernel;
  return !!k && k.connectionStatus === 'connected' && k.status === 'idle';
}"""

# every code cell executed (after a clear), no cell pending, the kernel idle again
NOTEBOOK_DONE = """(path) => {
  const w = window.jupyterapp.shell.currentWidget;
  if (!w || w.context.path !== path) return false;
  const k = w.sessionContext.session && w.sessionContext.session.kernel;
  if (!k || k.status !== 'idle') return false;
  const code = w.content.widgets.filter(c => c.model.type === 'code');
  return code.every(c => c.model.executionCount !== null
                         && !c.node.querySelector('.jp-InputPrompt').textContent.includes('*'));
}"""

ERROR_OUTPUTS = """() => {
  const w = window.jupyterapp.shell.currentWidget;
  return w.content.widgets.filter(c => c.model.type === 'code')
    .flatMap(c => c.model.outputs.toJSON())
    .filter(o => o.output_type === 'error' || o.name === 'stderr')
    .map(o => o.output_type === 'error' ? o.ename + ': ' + o.evalue : o.text);
}"""

PARTITION = """(root) => {
  const d = document.querySelector(root + ' .tf-partition-plot.js-plotly-plot');
  if (!d || !d._fullData || d._fullData.length < 4) return null;
  return d._fullData.filter(t => t.type === 'bar').map(t => ({
    fraction: t.meta && t.meta.fraction, x: Array.from(t.x).map(Number),
    text: Array.from(t.text || [])}));
}"""

ORDINATION = """(root) => {
  const d = document.querySelector(root + ' .tf-ordination-plot.js-plotly-plot');
  if (!d || !d._fullData) return null;
  const pts = {};
  for (const t of d._fullData) {
    if (!t.meta || t.meta.role !== 'samples') continue;
    const x = Array.from(t.x), y = Array.from(t.y), h = Array.from(t.hovertext);
    h.forEach((s, i) => { pts[s.match(/<b>(.*?)<\\/b>/)[1]] = [Number(x[i]), Number(y[i])]; });
  }
  return Object.keys(pts).length ? pts : null;
}"""

# true once the bars show these fractions (numbers in the data, text printed in the bars)
PARTITION_EQUALS = """([root, expected]) => {
  const d = document.querySelector(root + ' .tf-partition-plot.js-plotly-plot');
  if (!d || !d._fullData) return false;
  const bars = d._fullData.filter(t => t.type === 'bar');
  if (bars.length !== expected.length) return false;
  return bars.every((t, i) => {
    const x = Number(Array.from(t.x)[0]), txt = String(Array.from(t.text)[0]);
    const shown = parseFloat(txt.replace(' %', ''));
    return t.meta.fraction === expected[i][0] && Math.abs(x - expected[i][1]) < 1e-9
           && Math.abs(shown - 100 * expected[i][1]) <= 0.05 + 1e-9;
  });
}"""


# the share intervals drawn beside the bars: each share with its whiskers
INTERVALS = """(root) => {
  const d = document.querySelector(root + ' .tf-partition-plot.js-plotly-plot');
  if (!d || !d._fullData) return null;
  const t = d._fullData.filter(t => t.meta && t.meta.kind === 'interval');
  if (t.length < 4) return null;
  return t.map(t => ({fraction: t.meta.fraction, x: Number(Array.from(t.x)[0]),
    plus: Number(Array.from(t.error_x.array)[0]),
    minus: Number(Array.from(t.error_x.arrayminus)[0])}));
}"""

# rows of an HTML table: the cells' text, header cell first
TABLE_ROWS = """(sel) => [...document.querySelectorAll(sel + ' tbody tr')].map(r =>
  [...r.children].map(c => c.textContent.trim()))"""

# (ipywidgets writes the spaces of option labels as no-break spaces)
SELECTED = """(sel) => { const s = document.querySelector(sel);
  return s ? s.options[s.selectedIndex].textContent.replace(/\\u00a0/g, ' ').trim() : null; }"""
OPTION_INDEX = """([sel, label]) => [...document.querySelector(sel).options].findIndex(
  o => o.textContent.replace(/\\u00a0/g, ' ').trim() === label)"""


def shown_p_matches(text: str, p: float) -> bool:
    """A p-value as the panel shows it ("< 0.001" below that) against the core's value."""
    text = text.strip()
    if text.startswith("<"):
        return p < float(text.lstrip("< "))
    return float(text) == pytest.approx(p, rel=1e-3)


def choose(p, select: str, label: str) -> None:
    """Pick a dropdown option by its label, as a user does."""
    index = p.page.evaluate(OPTION_INDEX, [select, label])
    assert index >= 0, f"no option {label!r}"
    p.page.locator(select).select_option(index=index)


def enter(p, selector: str, value: str) -> None:
    """Type a value into a text field and press Enter (what commits it in the widget)."""
    field = p.page.locator(selector)
    field.fill(value)
    field.press("Enter")


def open_notebook(p, lab, name: str) -> None:
    """Open a notebook of the served copy and wait for its kernel to be connected and idle
    (the toolbar's indicator flips too early to rely on)."""
    p.page.goto(f"{lab['url']}/lab/tree/{name}?token={lab['token']}")
    p.page.wait_for_function(KERNEL_IDLE, arg=name, timeout=90_000)


def run_all(p, name: str) -> None:
    """Clear the outputs, run every cell, and wait until the last one has run."""
    p.page.evaluate("async () => {"
                    " await window.jupyterapp.commands.execute('notebook:clear-all-cell-outputs');"
                    " await window.jupyterapp.commands.execute('notebook:run-all-cells'); }")
    p.page.wait_for_function(NOTEBOOK_DONE, arg=name, timeout=180_000, polling=250)


def show_tab(p, root: str, title: str) -> None:
    tab = p.page.locator(f"{root} .lm-TabBar-tab", has_text=title)
    tab.click()
    p.page.wait_for_function(
        """([root, title]) => [...document.querySelectorAll(root + ' .lm-TabBar-tab')]
             .some(t => t.textContent.trim() === title && t.classList.contains('lm-mod-current'))""",
        arg=[root, title])


def expected_partition(measure: str, exponent: float):
    """The direct core call behind the bars (what the panel runs)."""
    return tly.size_shape(MESOCOSM, measure, transform=tly.Power(exponent))


def as_pairs(result) -> list:
    return [[f, float(result.fractions[f])] for f in FRACTIONS]


def assert_same_points(shown: dict, measure: str, exponent: float) -> None:
    """Page's ordination points == tly.pcoa(tly.dissimilarity(...), dims=2), up to an
    orthogonal turn (the panel keeps the previous view's orientation: Procrustes)."""
    from scipy.linalg import orthogonal_procrustes
    o = tly.pcoa(tly.dissimilarity(MESOCOSM, measure, transform=tly.Power(exponent)), dims=2)
    scores = o.scores.iloc[:, :2]
    labels = [str(s) for s in scores.index]
    assert sorted(shown) == sorted(labels)
    got = np.array([shown[s] for s in labels])
    ref = scores.to_numpy()
    # identity: got = ref R for an orthogonal R (scipy finds the R that fits best)
    r, _ = orthogonal_procrustes(ref, got)
    np.testing.assert_allclose(r.T @ r, np.eye(2), atol=1e-9)
    np.testing.assert_allclose(ref @ r, got, rtol=1e-6, atol=1e-8)


MESOCOSM = tly.demo("mesocosm")          # synthetic demo, as the quick start loads it
QUICK = "01_quickstart.ipynb"
DASH = ".tf-dashboard"


# ------------------------------------------------------------------ the quick start
@pytest.fixture(scope="module")
def quickstart(open_page, lab):
    """The quick-start notebook opened and run all in one page (scenarios 1-4 share it)."""
    p = open_page()
    open_notebook(p, lab, QUICK)
    run_all(p, QUICK)
    p.page.locator(f"{DASH} .tf-panel-data").wait_for(state="visible")
    return p


def test_quickstart_run_all_shows_the_dashboard(quickstart):
    from playwright.sync_api import expect
    p = quickstart
    assert p.page.evaluate(ERROR_OUTPUTS) == []
    show_tab(p, DASH, "Size & shape")
    p.page.locator(f"{DASH} .tf-partition-plot.js-plotly-plot").wait_for(state="visible")
    p.page.locator(f"{DASH} .tf-ordination-plot.js-plotly-plot").wait_for(state="visible")
    bars = p.page.wait_for_function(PARTITION, arg=DASH).json_value()
    assert [b["fraction"] for b in bars] == list(FRACTIONS)
    s = expected_partition("bray_curtis", 1.0)            # the dashboard's defaults
    for b in bars:
        assert b["x"][0] == pytest.approx(s.fractions[b["fraction"]], abs=1e-9)
        assert re.fullmatch(r"-?\d+\.\d %", b["text"][0]), b["text"]
    points = p.page.wait_for_function(ORDINATION, arg=DASH).json_value()
    assert_same_points(points, "bray_curtis", 1.0)
    # drawn, not only held as data: the bars and points are SVG in the page
    p.page.wait_for_function(
        "(root) => document.querySelectorAll(root + ' .tf-partition-plot .bars path').length"
        " >= 4", arg=DASH)
    expect(p.page.locator(f"{DASH} .tf-ordination-plot .scatterlayer .point")).to_have_count(
        MESOCOSM.n_samples)
    p.page.locator(f"{DASH} .tf-panel-shape").scroll_into_view_if_needed()
    p.shot("1_quickstart_size_and_shape")


def test_exponent_slider_by_keyboard_redraws_to_the_core_numbers(quickstart):
    from playwright.sync_api import expect
    p = quickstart
    show_tab(p, DASH, "Size & shape")
    slider = f"{DASH} .tf-exponent-slider"
    handle = p.page.locator(f"{slider} .noUi-handle")
    readout = p.page.locator(f"{slider} .widget-readout")
    before_value = float(readout.inner_text())
    before_bars = p.page.evaluate(PARTITION, DASH)
    before_points = p.page.evaluate(ORDINATION, DASH)
    handle.focus()
    for _ in range(3):                   # three steps of 0.05 to the left
        handle.press("ArrowLeft")
    target = f"{before_value - 0.15:.2f}"
    # (aria-valuenow is rounded to one decimal by the slider library: read the readout)
    p.page.wait_for_function(
        "([sel, t]) => document.querySelector(sel).textContent.trim() === t",
        arg=[f"{slider} .widget-readout", target])
    value = float(readout.inner_text())
    assert float(handle.get_attribute("aria-valuetext")) == pytest.approx(value)
    # the page redraws to what a direct core call gives for the value the slider shows
    s = expected_partition("bray_curtis", value)
    p.page.wait_for_function(PARTITION_EQUALS, arg=[DASH, as_pairs(s)])
    bars = p.page.evaluate(PARTITION, DASH)
    assert bars != before_bars
    p.page.wait_for_function(
        "([root, old]) => { const d = document.querySelector(root + "
        "' .tf-ordination-plot.js-plotly-plot'); const t = d._fullData.find("
        "t => t.meta && t.meta.role === 'samples'); return t && Number(Array.from(t.x)[0]) "
        "!== old; }", arg=[DASH, next(iter(before_points.values()))[0]])
    points = p.page.evaluate(ORDINATION, DASH)
    assert_same_points(points, "bray_curtis", value)
    # the sentence under the controls follows (a message of its own, after the figures)
    expect(p.page.locator(f"{DASH} .tf-partition-summary")).to_contain_text(
        f"size only {100 * s.fractions['size_only']:.1f}%")
    # once the slider has settled, the intervals are computed in the background and drawn
    # beside the bars: those of the same call, leaving out whole tanks (the units the Tests
    # panel detected)
    state = p.page.locator(f"{DASH} .tf-interval-state")
    expect(state).to_contain_text("leaving out whole units of 'tank'", timeout=120_000)
    ci = tly.size_shape(MESOCOSM, "bray_curtis", transform=tly.Power(value), n_boot=199,
                        units="tank", rng=1)
    shown = {r["fraction"]: r for r in p.page.wait_for_function(INTERVALS, arg=DASH)
             .json_value()}
    assert set(shown) == set(FRACTIONS)
    for f in FRACTIONS:
        share, (lo, hi) = ci.fractions[f], ci.fractions_ci.loc[f, ["low", "high"]]
        assert shown[f]["x"] == pytest.approx(share, abs=1e-9)
        assert shown[f]["x"] + shown[f]["plus"] == pytest.approx(max(hi, share), abs=1e-9)
        assert shown[f]["x"] - shown[f]["minus"] == pytest.approx(min(lo, share), abs=1e-9)
    p.shot("2_exponent_slider_moved")


def test_size_free_measure_shrinks_the_size_only_share(quickstart):
    p = quickstart
    show_tab(p, DASH, "Size & shape")
    value = float(p.page.locator(f"{DASH} .tf-exponent-slider .widget-readout").inner_text())
    assert p.page.locator(f"{DASH} .tf-measure select").input_value() == "Bray-Curtis"
    shown = p.page.evaluate(PARTITION, DASH)
    before = dict((b["fraction"], b["x"][0]) for b in shown)["size_only"]
    assert before == pytest.approx(
        expected_partition("bray_curtis", value).fractions["size_only"], abs=1e-9)
    size_free = "chi_square"
    assert MEASURES[size_free].size_free
    p.page.locator(f"{DASH} .tf-measure select").select_option(label=MEASURES[size_free].label)
    s = expected_partition(size_free, value)
    p.page.wait_for_function(PARTITION_EQUALS, arg=[DASH, as_pairs(s)])
    after = dict((b["fraction"], b["x"][0]) for b in p.page.evaluate(PARTITION, DASH))
    # the demo's size effect is real: a size-free measure gives size far less
    assert after["size_only"] < before - 0.2
    p.shot("3_size_free_measure")


def _progress(p) -> float:
    width = p.page.evaluate(
        "() => document.querySelector('.tf-dashboard .tf-progress .progress-bar').style.width")
    return float(width.rstrip("%") or 0)


def test_tests_panel_progress_results_and_cancel(quickstart):
    from playwright.sync_api import expect       # waits for the condition (no sleeps)
    p = quickstart
    show_tab(p, DASH, "Tests")
    panel = f"{DASH} .tf-panel-tests"
    run = p.page.locator(f"{panel} .tf-run-button")
    cancel = p.page.locator(f"{panel} .tf-cancel-button")
    state = p.page.locator(f"{panel} .tf-run-state")
    bar = f"{panel} .tf-progress .progress-bar"

    # no blocks (the default follows the design's complete blocks, whose few relabellings
    # would be enumerated at once): a long run, the bar moves, Cancel stops it
    choose(p, f"{panel} .tf-blocks select", "(none)")
    enter(p, f"{panel} .tf-permutations input", "999999")
    run.click()
    p.page.wait_for_function(
        "(sel) => parseFloat(document.querySelector(sel).style.width) >= 1", arg=bar)
    first = _progress(p)
    p.page.wait_for_function(
        "([sel, v]) => parseFloat(document.querySelector(sel).style.width) > v",
        arg=[bar, first])
    assert first < _progress(p) < 100
    expect(cancel).to_be_enabled()
    expect(run).to_be_disabled()
    p.shot("4a_tests_running")
    cancel.click()
    p.page.wait_for_function("(sel) => document.querySelector(sel).textContent === 'cancelled'",
                             arg=f"{panel} .tf-run-state")
    assert _progress(p) < 100
    expect(p.page.locator(f"{panel} .tf-error")).to_contain_text("Cancelled")
    # (each widget change is its own message: wait for the buttons, not only the text)
    expect(run).to_be_enabled()
    expect(cancel).to_be_disabled()
    assert p.page.locator(f"{panel} .tf-test-results table").count() == 0
    p.shot("4b_tests_cancelled")

    # the panel is still usable: a short run completes with its table
    enter(p, f"{panel} .tf-permutations input", "199")
    run.click()
    p.page.locator(f"{panel} .tf-test-results table").first.wait_for(state="visible")
    p.page.wait_for_function("(sel) => document.querySelector(sel).textContent.startsWith('done')",
                             arg=f"{panel} .tf-run-state")
    expect(run).to_be_enabled()
    assert _progress(p) == 100
    assert p.page.locator(f"{panel} .tf-error").inner_text().strip() == ""
    # the table shows what the same core call gives here (same options, same seed)
    rows = p.page.evaluate(
        "(sel) => [...document.querySelectorAll(sel + ' tbody tr')].map(r => "
        "[...r.children].map(c => c.textContent.trim()))",
        f"{panel} .tf-test-results table")
    c = tly.compare_groups(MESOCOSM, "treatment", units="tank", shape_measure="chi_square",
                           n_permutations=199, rng=1).to_frame()
    shown = {r[0]: r for r in rows}
    assert list(shown) == list(c.index) == ["size", "shape", "spread", "permanova"]
    for aspect in c.index:
        _, _, statistic, pvalue, _ = shown[aspect]
        assert float(statistic) == pytest.approx(c.loc[aspect, "statistic"], rel=1e-3)
        assert shown_p_matches(pvalue, c.loc[aspect, "pvalue"])
    assert state.inner_text().startswith("done")
    p.page.locator(f"{panel} .tf-test-plot.js-plotly-plot").wait_for(state="visible")
    p.shot("4c_tests_done")


def _run_and_wait(p, panel: str, stratum: str) -> None:
    """Press Run; wait until this run is over: the strata table (cleared when a run starts)
    names the expected stratum and the state says done."""
    p.page.locator(f"{panel} .tf-run-button").click()
    p.page.wait_for_function(
        """([panel, stratum]) => {
             const s = document.querySelector(panel + ' .tf-run-state');
             const cells = [...document.querySelectorAll(panel + ' .tf-strata tbody td')];
             return s && s.textContent.startsWith('done') && cells.length > 0
                    && cells[0].textContent.trim() === stratum; }""",
        arg=[panel, stratum], timeout=120_000, polling=200)


def _kernel_has(p, units_label: str, seed: str) -> None:
    """Wait until the kernel has taken the units and seed: it echoes them into the Size &
    shape panel (the intervals leave out the same units, with the same seed)."""
    p.page.wait_for_function(
        """([root, label, seed]) => {
             const s = document.querySelector(root + ' .tf-interval-units select');
             const i = document.querySelector(root + ' .tf-interval-seed input');
             return s && i && i.value === seed && s.options[s.selectedIndex].textContent
               .replace(/\\u00a0/g, ' ').trim() === label; }""",
        arg=[DASH, units_label, seed])


def _check_run(p, panel: str, units) -> None:
    """The results and strata tables on the page == the API call with the same options."""
    direct = tly.compare_groups(MESOCOSM, "treatment", units=units,
                                shape_measure="chi_square", n_permutations=199, rng=7)
    rows = {r[0]: r for r in p.page.evaluate(TABLE_ROWS, f"{panel} .tf-test-results table")}
    assert list(rows) == list(direct.pvalue.index)
    for aspect, pvalue in direct.pvalue.items():
        assert shown_p_matches(rows[aspect][3], pvalue)
    strata = p.page.evaluate(TABLE_ROWS, f"{panel} .tf-strata table")
    assert [r[0] for r in strata] == ["treatment"]
    _, stratum, against, df, pvalue, floor = strata[0]
    table = direct.permanova.table
    assert stratum == table.loc["treatment", "stratum"]
    assert against == table.loc["treatment", "tested_against"]
    den = table.loc["treatment", "df_denominator"]
    assert df == f"{table.loc['treatment', 'df']}, {den}"
    assert shown_p_matches(pvalue, direct.pvalue["permanova"])
    assert floor == "\u2014"             # many relabellings: only the permutations limit p


def test_units_chosen_in_the_tests_panel_reach_the_tests(quickstart):
    """Choose the sampling units, run, and read the strata table and p-values: they are
    those of the API call with the same units, options and seed."""
    from playwright.sync_api import expect
    p = quickstart
    show_tab(p, DASH, "Tests")
    panel = f"{DASH} .tf-panel-tests"
    select = f"{panel} .tf-units select"
    p.page.locator(select).wait_for(state="visible")
    detected = "tank: 15 units, 4 samples each (detected)"
    assert p.page.evaluate(SELECTED, select) == detected      # the core's detection
    expect(p.page.locator(f"{panel} .tf-blocks-help")).to_contain_text(
        "Blocks only restrict the permutations")
    enter(p, f"{panel} .tf-permutations input", "199")
    enter(p, f"{panel} .tf-seed input", "7")
    choose(p, f"{panel} .tf-blocks select", "(none)")     # compared with calls without blocks

    # samples as independent replicates (60 samples)
    choose(p, select, "none: samples independent")
    _kernel_has(p, "single samples", "7")
    _run_and_wait(p, panel, "samples")
    _check_run(p, panel, False)
    expect(p.page.locator(f"{panel} .tf-strata")).to_contain_text("Residual")
    p.page.locator(f"{panel} .tf-strata").scroll_into_view_if_needed()
    p.shot("8a_units_none")

    # back to the tanks: tested between tanks, against the residual between tanks
    choose(p, select, detected)
    _kernel_has(p, "whole units of 'tank'", "7")
    _run_and_wait(p, panel, "between 'tank'")
    _check_run(p, panel, "tank")
    expect(p.page.locator(f"{panel} .tf-strata")).to_contain_text("between 'tank'")
    assert p.page.locator(f"{panel} .tf-error").inner_text().strip() == ""
    p.page.locator(f"{panel} .tf-strata").scroll_into_view_if_needed()
    p.shot("8b_units_tank")


def test_tests_panel_adjusts_for_the_two_choices_tried(quickstart):
    """Start over, run the Tests panel with two shape measures, and read the p-value
    adjusted for the 2 choices tried: it is the one tly.choice_adjusted gives for the same
    choices, units, permutations and seed."""
    from playwright.sync_api import expect
    from tallyform.core.display import p_words
    p = quickstart
    show_tab(p, DASH, "Tests")
    panel = f"{DASH} .tf-panel-tests"
    view = p.page.locator(f"{panel} .tf-choice-adjusted")
    select = f"{panel} .tf-units select"
    p.page.locator(select).wait_for(state="visible")
    choose(p, select, "tank: 15 units, 4 samples each (detected)")
    choose(p, f"{panel} .tf-blocks select", "(none)")     # compared with a call without blocks
    enter(p, f"{panel} .tf-permutations input", "199")
    enter(p, f"{panel} .tf-seed input", "3")
    _kernel_has(p, "whole units of 'tank'", "3")
    # a new question: the choices shown by the tests before are forgotten
    p.page.locator(f"{panel} .tf-clear-choices").click()
    expect(view).to_contain_text("forgotten")

    choose(p, f"{panel} .tf-shape-measure select", MEASURES["chi_square"].label)
    _run_and_wait(p, panel, "between 'tank'")
    expect(view).not_to_contain_text("forgotten")
    assert view.inner_text().strip() == ""                 # one choice: nothing extra
    choose(p, f"{panel} .tf-shape-measure select", MEASURES["hellinger"].label)
    _run_and_wait(p, panel, "between 'tank'")
    expect(view).to_contain_text("2 choices", timeout=120_000)
    expect(view).to_contain_text("adjusted for the 2 choices tried", timeout=120_000)
    text = " ".join(view.inner_text().split())
    direct = tly.choice_adjusted(MESOCOSM, "treatment", [{"measure": "chi_square"},
                                                         {"measure": "hellinger"}],
                                 units="tank", n_permutations=199, rng=3, progress=False)
    assert direct.n_choices == 2
    want = (f"hellinger: adjusted for the 2 choices tried, "
            f"{p_words(direct.pvalue_adjusted['hellinger'])} "
            f"(own {p_words(direct.pvalue['hellinger'])};")
    assert want in text, text
    assert "after looking at p-values" in text
    assert p.page.locator(f"{panel} .tf-error").inner_text().strip() == ""
    p.page.locator(f"{panel} .tf-choices-tried").scroll_into_view_if_needed()
    p.shot("9_two_choices_adjusted")


# ------------------------------------------------------------------ the template notebook
def test_template_bad_file_shows_readable_error(open_page, lab):
    from playwright.sync_api import expect
    lines = (demo_dir() / "moths_counts.csv").read_text().splitlines()
    header = lines[0].split(",")
    row = lines[3].split(",")
    row[5] = "-4"                                   # file line 4, column 6 ('S02_may')
    lines[3] = ",".join(row)
    (lab["root"] / "bad_counts.csv").write_text("\n".join(lines) + "\n")

    p = open_page()
    name = "04_your_data.ipynb"
    open_notebook(p, lab, name)
    run_all(p, name)
    root = ".tf-file-dashboard"
    p.page.locator(f"{root} .tf-dashboard").wait_for(state="visible")   # the good demo file
    path = p.page.locator(f"{root} .tf-counts-path input")
    path.fill("bad_counts.csv")
    p.page.locator(f"{root} .tf-load-button").click()
    message = p.page.locator(f"{root} > .tf-error .tf-message")
    message.wait_for(state="visible")
    text = message.inner_text()
    assert "bad_counts.csv" in text and "line 4" in text
    assert "column 6" in text and header[5] in text and "negative" in text
    expect(p.page.locator(f"{root} .tf-dashboard")).to_have_count(0)   # no stale dashboard
    assert "Traceback" not in p.page.locator("body").inner_text()
    assert p.page.evaluate(ERROR_OUTPUTS) == []
    message.scroll_into_view_if_needed()
    p.shot("5_template_bad_file")


# ------------------------------------------------------------------ the HTML report
def test_demo_report_opens_offline_without_console_errors(file_page, tmp_path):
    out = tmp_path / "demo"
    subprocess.run([sys.executable, "-m", "tallyform.cli", "demo", "--out", str(out),
                    "--no-notebook"], check=True, capture_output=True, timeout=240)
    report = out / "report.html"
    p = file_page
    p.page.goto(report.as_uri())
    p.page.wait_for_load_state("load")
    figures = p.page.locator(".js-plotly-plot")
    figures.first.wait_for(state="visible")
    assert figures.count() >= 5            # partition, grid, ordination, tests, audit...
    # every figure drawn by the embedded plotly.js (nothing fetched): SVG with its traces
    p.page.wait_for_function(
        "() => [...document.querySelectorAll('.js-plotly-plot')].every("
        "d => d._fullLayout && d._fullData && d.querySelector('svg.main-svg'))")
    p.shot("6a_demo_report_top")
    p.page.locator("#ordination .js-plotly-plot").first.scroll_into_view_if_needed()
    p.shot("6b_demo_report_ordination")
    assert p.blocked == [], f"the report asked the network for {p.blocked[:5]}"
    assert p.console_errors == [] and p.page_errors == []


# ------------------------------------------------------------------ shipped notebooks
def test_executed_notebooks_show_their_figures_offline(file_page, tmp_path):
    """nbconvert HTML of the shipped notebooks, opened with the network cut: every figure is
    an image drawn from the file itself (the PNG copy stored beside each plotly output)."""
    import nbformat
    from nbconvert import HTMLExporter

    from tallyform.render.notebooks import notebook_dir

    exporter = HTMLExporter()
    # what the exporter's page template asks the network for whatever the notebook holds
    empty, _ = exporter.from_notebook_node(nbformat.v4.new_notebook())
    p = file_page
    refused = 0
    for path in sorted(notebook_dir().glob("0[1-3]_*.ipynb")):
        nb = nbformat.read(str(path), as_version=4)
        n_figures = sum("application/vnd.plotly.v1+json" in o.get("data", {})
                        for c in nb.cells if c.cell_type == "code" for o in c.outputs)
        assert n_figures >= 3, path.name
        body, _ = exporter.from_notebook_node(nb)
        html_path = tmp_path / f"{path.stem}.html"
        html_path.write_text(body)
        p.blocked.clear()
        p.page.goto(html_path.as_uri())
        p.page.wait_for_load_state("load")
        drawn = p.page.evaluate(
            "() => [...document.querySelectorAll('img')].filter(i => i.src.startsWith("
            "'data:image/png') && i.complete && i.naturalWidth > 300).length")
        assert drawn >= n_figures, path.name
        # the only requests refused are the exporter template's own (script loaders for
        # interactive outputs and maths), none from the notebook's content
        assert all(u.split("?")[0] in empty for u in p.blocked), p.blocked
        refused += len(p.blocked)
        if path.name.startswith("01"):
            p.page.locator("img[src^='data:image/png']").nth(1).scroll_into_view_if_needed()
            p.shot("7_quickstart_nbconvert_offline")
    assert p.page_errors == []
    # the console's only complaints are those refused template requests
    assert len(p.console_errors) == refused
    assert all("Failed to load resource" in e for e in p.console_errors)
