"""The dashboard as a whole: tabs, linked groups, data panel, report, export, explore()."""
from __future__ import annotations

import subprocess
import sys

import pandas as pd
import pytest

import tallyform as tly
from tallyform.widgets import TAB_TITLES, DataPanel, Dashboard


@pytest.fixture(scope="module")
def dash():
    return tly.explore(tly.demo("mesocosm"))


def test_explore_is_lazy_and_returns_the_dashboard(mesocosm):
    code = ("import sys, tallyform as tly; f = tly.explore; "
            "assert 'ipywidgets' in sys.modules; print(f.__module__)")
    out = subprocess.run([sys.executable, "-c", code], check=True, capture_output=True,
                         text=True)
    assert out.stdout.strip() == "tallyform.widgets.dashboard"


def test_tabs_and_classes(dash):
    assert isinstance(dash, Dashboard) and "tf-dashboard" in dash._dom_classes
    assert tuple(dash.tabs.titles) == TAB_TITLES
    classes = [p._dom_classes for p in dash.tabs.children]
    assert [c[0] for c in classes] == ["tf-panel-data", "tf-panel-shape",
                                       "tf-panel-compare", "tf-panel-tests",
                                       "tf-panel-report"]


def test_group_is_linked_across_panels(dash):
    dash.shape.group.value = "week"
    assert dash.data.group.value == "week" == dash.tests.group.value
    pd.testing.assert_frame_equal(dash.data.result, dash.table.totals_by("week"))
    dash.data.group.value = "treatment"
    assert dash.shape.group.value == "treatment"


def test_data_panel_totals(moths):
    panel = DataPanel(moths, group="land_use")
    assert panel.error is None
    pd.testing.assert_series_equal(panel.summary, moths.summary())
    before = len(panel.totals_plot.data)
    panel.per_effort.value = True
    pd.testing.assert_frame_equal(panel.result, moths.totals_by("land_use", per_effort=True))
    assert panel.calls["totals"].code() == 'tab.totals_by("land_use", per_effort=True)'
    assert before > 0 and len(panel.totals_plot.data) > 0


def test_reproduce_code_reruns_to_the_same_numbers(dash):
    dash.shape.exponent.value = 0.5
    dash.shape.measure.value = "hellinger"
    dash.tests.n_permutations.value = 99
    dash.tests.run(block=True)
    assert dash.shape.wait_intervals(60) and dash.shape.intervals_result is not None
    code = dash.report.code
    assert "tly.size_shape(tab, \"hellinger\", transform=\"sqrt\"" in code
    assert "(as last run)" in code
    # the detected units reach every call: the tests and the intervals' resampling
    assert 'tly.compare_groups(tab, "treatment", units="tank"' in code
    assert 'n_boot=199, units="tank", rng=1)' in code
    ns = {"tab": dash.table}
    exec(code.replace("tab = ...", "tab = tab"), ns)        # the shared-notebook path
    pd.testing.assert_series_equal(ns["s"].fractions, dash.shape.result.fractions)
    pd.testing.assert_frame_equal(ns["s"].fractions_ci, dash.shape.intervals_result.fractions_ci)
    pd.testing.assert_frame_equal(ns["o"].scores, dash.shape.ordination.scores)
    pd.testing.assert_series_equal(ns["c"].pvalue, dash.tests.result.pvalue)
    pd.testing.assert_series_equal(ns["c"].statistic, dash.tests.result.statistic)
    pd.testing.assert_frame_equal(ns["totals"], dash.data.result)


def test_units_and_seed_are_shared(mesocosm):
    d = tly.explore(mesocosm)
    assert d.tests.units.value == "tank" == d.shape.units.value
    d.tests.units.value = False
    assert d.shape.units.value is False
    assert "units=" not in d.shape.calls["intervals"].code()
    d.tests.set_units(["tank_block", "tank"])          # nested: the coarsest is left out
    assert d.shape.units.value == "tank_block"
    d.tests.seed.value = 7
    assert d.shape.seed.value == 7 and "rng=7" in d.shape.calls["intervals"].code()
    d.shape.cancel_intervals()


def test_report_follows_changes(dash):
    dash.shape.measure.value = "chord"
    assert 'tly.size_shape(tab, "chord"' in dash.report.code
    assert dash.spec.measure == "chord"
    dash.tests.seed.value = 11
    assert dash.spec.seed == 11 and "rng=11" in dash.report.code
    assert "(current settings, not run yet)" in dash.report.code
    assert tly.AnalysisSpec.from_json(dash.spec.to_json()) == dash.spec


def test_spec_round_trip_through_a_new_dashboard(mesocosm):
    first = tly.explore(mesocosm, group="week")
    with first.shape.hold():
        first.shape.exponent.value = 0.3
        first.shape.measure.value = "hellinger"
        first.shape.shape_dims.value = 4
    first.tests.shape_measure.value = "aitchison"
    first.tests.seed.value = 9
    second = tly.explore(mesocosm, spec=first.spec.to_json())
    assert second.spec == first.spec
    assert second.shape.calls["partition"].code() == first.shape.calls["partition"].code()
    pd.testing.assert_series_equal(second.shape.result.fractions, first.shape.result.fractions)


def test_run_of_the_spec_gives_the_numbers_on_screen(mesocosm):
    dash = tly.explore(mesocosm)
    dash.shape.exponent.value = 0.5
    dash.tests.n_permutations.value = 49
    dash.tests.run(block=True)
    spec = dash.spec.replace(audit_n_sim=1, audit_n_permutations=19,
                             scan_measures=("bray_curtis",), scan_transforms=("none",))
    res = tly.run(spec, mesocosm)
    pd.testing.assert_series_equal(res.size_shape.fractions, dash.shape.result.fractions)
    pd.testing.assert_series_equal(res.comparison.pvalue, dash.tests.result.pvalue)


def test_export_writes_tables_and_figures(dash, tmp_path):
    if dash.tests.result is None:
        dash.tests.n_permutations.value = 49
        dash.tests.run(block=True)
    written = dash.report.export(tmp_path / "out")
    assert dash.report.error is None, dash.report.messages.text
    names = {p.name for p in written}
    assert {"size_shape.csv", "partition.html", "ordination.html", "spec.json",
            "reproduce.py", "methods.txt", "totals_by_group.csv", "tables.xlsx"} <= names
    assert {"strata.csv", "comparison.csv", "shape_permanova.csv", "permanova_reference.html"} <= names
    strata = pd.read_csv(tmp_path / "out" / "strata.csv", index_col=0)
    assert strata.loc["treatment", "stratum"] == "between 'tank'"
    assert tly.AnalysisSpec.from_json(tmp_path / "out" / "spec.json") == dash.spec
    frame = pd.read_csv(tmp_path / "out" / "size_shape.csv", index_col=0)
    assert frame["share"].to_dict() == pytest.approx(
        dash.shape.result.to_frame()["share"].to_dict(), rel=1e-12)
    assert not list((tmp_path / "out").glob("*.part"))          # no half-written files


def test_export_error_is_readable(dash, tmp_path, clean):
    blocker = tmp_path / "a_file"
    blocker.write_text("not a folder")
    dash.report.export(blocker / "out")
    assert dash.report.error is not None
    assert clean(dash.report.messages.value) and dash.report.messages.text


def test_presentation_mode(mesocosm):
    d = tly.explore(mesocosm, present=True)
    assert d.tabs.selected_index == TAB_TITLES.index("Size & shape")
    hidden = d.shape.controls + d.data.controls + d.tests.controls + d.report.controls
    assert all(w.layout.display == "none" for w in hidden)
    assert d.shape.exponent.layout.display != "none"
    assert "tf-present" in d._dom_classes
    d.set_present(False)
    assert all(w.layout.display != "none" for w in d.shape.controls)


def test_bare_array_without_sample_information(clean):
    # synthetic counts with no sample table: no group, every panel still usable
    counts = [[3, 0, 1, 5, 2], [1, 1, 0, 2, 4], [0, 4, 2, 2, 1], [6, 1, 1, 0, 3],
              [2, 2, 2, 2, 2], [5, 0, 3, 1, 1], [1, 3, 0, 4, 2]]
    d = tly.explore(counts)
    assert d.shape.group.value == "" and d.shape.error is None
    assert d.shape.result is not None and "group" not in d.shape.calls
    assert d.data.result is None and "Choose a group" in d.data.totals.value
    d.tests.run()
    assert d.tests.status == "error" and "choose a group" in d.tests.messages.text
    assert clean(d.tests.messages.value)
    assert "tly.size_shape(tab" in d.report.code and d.spec.group is None


def test_explore_on_files_shows_reader_errors_in_the_panel(tmp_path):
    import tallyform as tly
    from tallyform.core.scenarios import demo_dir
    good = tly.explore(counts=demo_dir() / "moths_counts.csv",
                       samples=demo_dir() / "moths_samples.csv", effort="trap_nights",
                       group="habitat")
    assert good.dashboard is not None and good.messages.text == ""
    bad = tmp_path / "bad.csv"
    bad.write_text("sample,Ta,Tb\ns1,3,-1\ns2,1,1\n")
    dash = tly.explore(counts=bad, rows="samples")
    assert dash.dashboard is None
    assert "line 2" in dash.messages.text and "column 3 ('Tb')" in dash.messages.text
    assert "Traceback" not in dash.messages.value
    bad.write_text("sample,Ta,Tb\ns1,3,1\ns2,1,1\n")          # fix the file, press Load
    dash.load_button.click()
    assert dash.dashboard is not None and dash.messages.text == ""
