"""The HTML report: self-contained, complete, escaped; outputs written atomically."""
from __future__ import annotations

import json
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.render.report import report_html, write_outputs

FAST = dict(n_permutations=99, audit_n_sim=10, audit_n_permutations=49,
            scan_measures=("bray_curtis", "hellinger"), scan_transforms=("none", "sqrt"))
HOSTILE = ["<script>alert(1)</script>", "=HYPERLINK(\"x\")", "+1", "@SUM(A1)",
           "x" * 300, "Ἀρτεμίσια", "蜉蝣_01", "</script><img src=x onerror=alert(2)>"]


class _Scripts(HTMLParser):
    def __init__(self):
        super().__init__()
        self.scripts, self.handlers, self.in_script, self.bodies = 0, [], False, []

    def handle_starttag(self, tag, attrs):
        if tag == "script":
            self.scripts += 1
            self.in_script = True
            self.bodies.append("")
        self.handlers += [k for k, _ in attrs if k.startswith("on")]
        if tag in ("img", "iframe", "link") or any(k == "src" for k, _ in attrs):
            self.handlers.append(f"<{tag} src>")

    def handle_endtag(self, tag):
        if tag == "script":
            self.in_script = False

    def handle_data(self, data):
        if self.in_script:
            self.bodies[-1] += data


@pytest.fixture(scope="module")
def demo_results():
    spec = tly.AnalysisSpec(group="treatment", terms=("treatment", "week"),
                            blocks="tank_block", **FAST)
    return tly.run(spec, tly.demo("mesocosm"))


def test_report_is_self_contained_and_complete(demo_results):
    page = report_html(demo_results)
    p = _Scripts()
    p.feed(page)
    assert p.handlers == []                                # no src=, no on*= anywhere
    assert "<script src" not in page
    for title in ("Data", "Size and shape of the chosen measure", "Which measure?",
                  "Ordination", "Size test, shape test and dispersion", "Pairwise",
                  "Which taxa", "Audit", "Methods", "Analysis spec"):
        assert title in page, title
    n_fig = page.count("class='figure'")
    assert n_fig >= 12 and p.scripts == n_fig + 1         # plotly.js once + one per figure
    assert "Every random step used the seed 1." in page
    assert json.loads(tly.AnalysisSpec.from_json(demo_results.spec.to_json()).to_json())


def test_hostile_labels_are_escaped_everywhere(tmp_path):
    rng = np.random.default_rng(3)
    n = 16
    counts = pd.DataFrame(rng.poisson(20, size=(n, len(HOSTILE))) + 1,
                          index=[f"{HOSTILE[i % len(HOSTILE)]}#{i}" for i in range(n)],
                          columns=HOSTILE)
    samples = pd.DataFrame({"grp": [HOSTILE[0], HOSTILE[1]] * (n // 2)}, index=counts.index)
    tab = tly.CommunityTable(counts, samples)
    res = tly.run(tly.AnalysisSpec(group="grp", **FAST), tab)
    page = report_html(res)
    p = _Scripts()
    p.feed(page)
    assert p.handlers == [], p.handlers
    n_fig = page.count("class='figure'")
    assert p.scripts == n_fig + 1                         # no script was added by a label
    assert not any("alert(" in body and "<script" in body for body in p.bodies)
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page   # shown as text in tables
    out = write_outputs(res, tmp_path / "out")
    csv = (tmp_path / "out" / "tables" / "taxa_shape.csv").read_text()
    assert "'=HYPERLINK" in csv and "'@SUM(A1)" in csv and "'+1" in csv
    assert "\n=HYPERLINK" not in csv and ",=HYPERLINK" not in csv
    assert out["report"].stat().st_mode & 0o777 != 0o600   # ordinary file permissions


def test_skipped_steps_are_listed():
    tab = tly.demo("mesocosm")
    res = tly.run(tly.AnalysisSpec(**FAST), tab)            # no group: tests cannot run
    page = report_html(res)
    assert "Steps that could not run" in page and "no group column in the spec" in page


def test_failed_report_keeps_the_old_file(tmp_path, demo_results, monkeypatch):
    target = tmp_path / "report.html"
    target.write_text("old report")
    import tallyform.core.fileio as fileio
    import tallyform.render.report as rep

    def boom(*a, **k):                 # the disk fails just as the new file would land
        raise OSError(28, "No space left on device (simulated)")
    monkeypatch.setattr(fileio.os, "replace", boom)
    with pytest.raises(OSError):
        rep.write_report(demo_results, target)
    assert target.read_text() == "old report"
    assert [q.name for q in tmp_path.iterdir()] == ["report.html"]


def test_report_says_the_units_tests_and_calibration(demo_results):
    page = report_html(demo_results)
    text = " ".join(page.split())
    # units and strata (DESIGN: sampling units; Hurlbert 1984)
    assert "60 samples from 15 tanks (4 samples each) &times; 36 taxa" in text
    assert "15 tanks, each sampled 4 times. Tested: &#x27;treatment&#x27; between tanks, " \
           "&#x27;week&#x27; within tanks." in text
    assert "found from the design" in text
    # the tests actually used, from the results
    assert "Welch-type test" in text and "Alekseyenko 2016" in text
    assert "Hotelling&#x27;s T² on within-block differences" in text   # the size test ran
    assert "random permutations of whole units of &#x27;tank&#x27;" in text
    assert "How each term was tested" in text
    # partition: intervals and the Monte Carlo test
    assert "(95 % interval" in text and "Monte Carlo test of the shape-only share" in text
    # ellipses say what they cover, and that they count samples
    assert "region for the group&#x27;s true centre" in text and "descriptive" in text
    assert "delete-one jackknife-t intervals, one unit of &#x27;tank&#x27;" in text
    assert "Every test used here was checked by simulation; see the calibration table " \
           "(docs/calibration.md in the tallyform repository)." in text
    # the reproduce-this code starts from reading the data
    assert "tab = tly.demo(&#x27;mesocosm&#x27;)" in text


def test_references_are_in_citation_order(demo_results):
    from tallyform.render.methods import methods_references, methods_text
    text = methods_text(demo_results.spec, demo_results)
    refs = methods_references(text)
    assert refs[0].startswith("Hurlbert SH (1984)")            # the first work cited
    assert any(r.startswith("Hamidi B") for r in refs)
    assert any(r.startswith("Shao J, Wu CFJ (1989)") for r in refs)
    # order of first citation; a co-author's citation is not the author's own work
    made_up = "Tested (Welch 1951), then McArdle & Anderson 2001, then Holm's (1979) method."
    assert [r.split(" (")[0] for r in methods_references(made_up)] == \
        ["Welch BL", "McArdle BH, Anderson MJ", "Holm S"]
    page = report_html(demo_results)
    assert page.index("<ol><li>Hurlbert SH (1984)") > page.index("<h3>References</h3>")


def test_relative_data_totals_are_never_called_sizes():
    tab = tly.read_counts(tly.core.scenarios.demo_dir() / "soil_counts.csv",
                          tly.core.scenarios.demo_dir() / "soil_samples.csv",
                          abundance="relative")
    spec = tly.AnalysisSpec(group="land_use", abundance="relative", **FAST)
    res = tly.run(spec, tab)
    page = report_html(res)
    assert "Sequencing depths by land_use" in page
    assert "Sample totals (size" not in page and "sum of all counts" not in page
    assert "size_shape" in res.skipped           # no loads: the partition refuses, said so
    assert "Size</h3><p>Not tested: the totals are sequencing depths" in page
    # the methods paragraph describes what ran, not what the spec asked for
    from tallyform.render.methods import methods_text
    text = methods_text(spec, res)
    assert "Size was not compared: the totals are sequencing depths" in text
    assert "Taxon contributions" not in text and "db-RDA" not in text
    assert "Not run on these data (the report says why): the size and shape partition" in text


def test_write_report_creates_a_missing_folder(tmp_path, demo_results):
    from tallyform.core.errors import InputError
    from tallyform.render.report import write_report
    path = write_report(demo_results, tmp_path / "new" / "deeper" / "report.html")
    assert path.is_file() and path.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    (tmp_path / "afile").write_text("x")
    with pytest.raises(InputError, match="in the way"):
        write_report(demo_results, tmp_path / "afile" / "report.html")


def test_methods_paragraph_has_no_empty_clause(demo_results):
    from tallyform.render.methods import methods_text
    text = methods_text(demo_results.spec, demo_results)
    assert ",  (" not in text and "  " not in text and "distance distances" not in text
