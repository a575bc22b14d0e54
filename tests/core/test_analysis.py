"""tly.run: every result of a spec, equal to the step-by-step public calls of spec.code(),
every step on the same sampling units."""
from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.core.scenarios import demo_dir
from tallyform.errors import Cancelled, DesignError, InputError

ROOT = Path(__file__).resolve().parents[2]
FAST = dict(n_permutations=99, audit_n_sim=10, audit_n_permutations=49, n_boot=99,
            scan_measures=("bray_curtis", "hellinger"), scan_transforms=("none", "sqrt"))

# printed by the generated code and compared with the same numbers from tly.run
KEY_NUMBERS = '''
import json as _json
_key = {
    "fractions": [float(v) for v in s.fractions],
    "fractions_low": [float(v) for v in s.fractions_ci["low"]],
    "shape_only_p": float(s.pvalue),
    "scan": [float(v) for v in g.to_frame()["size_only"]],
    "axis1": float(o.explained.iloc[0]),
    "comparison_p": [float(v) for v in c.pvalue.fillna(-1)],
    "permanova_p": [float(v) for v in p.pvalue],
    "pairwise_p": [float(v) for v in w.to_frame()["pvalue_adjusted"]],
    "taxa_total": float(k.total), "taxa_ci": [float(v) for v in k.total_ci],
    "audit_rate": float(a.rate),
}
print(_json.dumps(_key))
'''


def key_numbers(res) -> str:
    """The numbers KEY_NUMBERS prints (as JSON text, NaN included), from an
    AnalysisResults."""
    s, c, p, w, k = (res.size_shape, res.comparison, res.permanova, res.pairwise,
                     res.contributions)
    return json.dumps({
        "fractions": [float(v) for v in s.fractions],
        "fractions_low": [float(v) for v in s.fractions_ci["low"]],
        "shape_only_p": float(s.pvalue),
        "scan": [float(v) for v in res.scan.to_frame()["size_only"]],
        "axis1": float(res.ordination.explained.iloc[0]),
        "comparison_p": [float(v) for v in c.pvalue.fillna(-1)],
        "permanova_p": [float(v) for v in p.pvalue],
        "pairwise_p": [float(v) for v in w.to_frame()["pvalue_adjusted"]],
        "taxa_total": float(k.total), "taxa_ci": [float(v) for v in k.total_ci],
        "audit_rate": float(res.audit.rate),
    })


def run_fresh(code: str, cwd: Path) -> str:
    """Execute generated code in a fresh interpreter (this checkout first on the path)."""
    env = {"PYTHONPATH": str(ROOT), "OMP_NUM_THREADS": "1", "PATH": "/usr/bin:/bin"}
    out = subprocess.run([sys.executable, "-c", code + KEY_NUMBERS], cwd=cwd, env=env,
                         capture_output=True, text=True, timeout=600)
    assert out.returncode == 0, out.stderr[-3000:]
    return out.stdout.strip().splitlines()[-1]


@pytest.fixture(scope="module")
def mesocosm_run():
    spec = tly.AnalysisSpec(group="treatment", terms=("treatment", "week"),
                            blocks="tank_block", transform="sqrt", seed=5,
                            compare_with={"transform": "fourth_root"}, **FAST)
    tab = tly.demo("mesocosm")
    return spec, tab, tly.run(spec, tab)


def test_run_matches_reproduce_code(mesocosm_run):
    # the "reproduce this" code (spec.code(table)) gives the same numbers as run()
    spec, tab, res = mesocosm_run
    assert res.skipped == {}
    code = res.code()
    assert code.startswith("import tallyform as tly\n\ntab = tly.demo('mesocosm')")
    scope = {}
    exec(code, scope)                             # our own generated code, not user input
    pd.testing.assert_frame_equal(scope["s"].to_frame(), res.size_shape.to_frame())
    pd.testing.assert_frame_equal(scope["p"].to_frame(), res.permanova.to_frame())
    pd.testing.assert_frame_equal(scope["x"].to_frame(), res.choices.to_frame())
    assert scope["c"].to_frame().equals(res.comparison.to_frame())
    np.testing.assert_array_equal(scope["a"].pvalues, res.audit.pvalues)
    pd.testing.assert_frame_equal(scope["k"].to_frame(), res.contributions.to_frame())
    pd.testing.assert_frame_equal(scope["e"].to_frame(), res.ellipses.to_frame())
    np.testing.assert_allclose(np.abs(scope["o"].scores.to_numpy()),
                               np.abs(res.ordination.scores.to_numpy()))
    # and tly.run inside the code is the same run
    assert key_numbers(scope["results"]) == key_numbers(res)


@pytest.mark.slow
def test_generated_code_runs_in_a_fresh_session_demo(mesocosm_run, tmp_path):
    _, _, res = mesocosm_run
    assert run_fresh(res.code(), tmp_path) == key_numbers(res)


@pytest.mark.slow
def test_generated_code_runs_in_a_fresh_session_from_files(tmp_path):
    # relative data read from files with a spike-in: the code reads them with the same
    # options (the spec's source, abundance and spike_in)
    source = {"counts": str(demo_dir() / "soil_counts.csv"),
              "samples": str(demo_dir() / "soil_samples.csv")}
    spike = {"taxon": "spike_in", "added": "spike_copies_per_g"}
    spec = tly.AnalysisSpec(group="land_use", abundance="relative", spike_in=spike,
                            source=source, contrast=("forest", "pasture"), **FAST)
    tab = tly.read_counts(source["counts"], source["samples"], abundance="relative",
                          spike_in=spike)
    res = tly.run(spec, tab)
    assert res.skipped == {}
    code = spec.code()                  # no table given: the code reads it from `source`
    assert "tab = tly.read_counts(" in code and "spike_in={'taxon': 'spike_in'" in code
    assert "units = 'site'" in code     # resolved on the table read from the source
    assert run_fresh(code, tmp_path) == key_numbers(res)


def test_code_without_table_resolves_units_as_run_does():
    # no source and no table: the code resolves the units and the contrast itself
    spec = tly.AnalysisSpec(group="treatment", **FAST)
    code = spec.code()
    assert "u = tly.core.steps.resolve_spec_units(spec, tab)" in code
    assert "levels = tly.core.steps.first_two_levels(tab, 'treatment')" in code
    tab = tly.demo("mesocosm")
    scope = {"tab": tab}
    exec(code, scope)
    res = tly.run(spec, tab)
    assert key_numbers(scope["results"]) == key_numbers(res)
    pd.testing.assert_frame_equal(scope["k"].to_frame(), res.contributions.to_frame())
    pd.testing.assert_frame_equal(scope["s"].to_frame(), res.size_shape.to_frame())


def test_every_step_uses_the_same_units(mesocosm_run):
    _, tab, res = mesocosm_run
    assert res.units.arg == "tank" and res.units.plan.detected
    assert res.permanova.units["units"] == ["tank"]
    assert res.permanova.table.loc["treatment", "stratum"] == "between 'tank'"
    assert res.permanova.table.loc["week", "stratum"] == "within 'tank'"
    assert res.comparison.n_replicates == 15 and res.comparison.size.units is not None
    assert res.size_shape.provenance["units"] == "tank"          # intervals leave out tanks
    assert res.choices.provenance["units"] == "tank"
    assert res.contributions.provenance["units"] == "tank"
    assert (res.pairwise.to_frame()["n_units"] == 10).all()    # two groups of 5 tanks
    # the same test as a direct call that detects the units itself (DESIGN: units=None)
    d = tly.dissimilarity(tab, "bray_curtis", transform="sqrt")
    direct = tly.permanova(d, tab, ["treatment", "week"], blocks="tank_block",
                           n_permutations=99, rng=5)
    pd.testing.assert_frame_equal(direct.to_frame(), res.permanova.to_frame())


def test_units_false_treats_samples_as_independent():
    tab = tly.demo("mesocosm")
    res = tly.run(tly.AnalysisSpec(group="treatment", units=False, **FAST), tab)
    assert res.units.arg is False and res.units.plan.independent
    assert res.comparison.n_replicates == 60
    assert res.size_shape.provenance["units"] is None
    assert res.contributions.provenance["units"] is None
    assert any("units=False" in n for n in res.units.plan.notes)   # they do repeat tanks
    assert not any("too small" in n for n in res.ellipses.notes)


def test_ellipses_say_they_count_samples_when_tests_count_units(mesocosm_run):
    _, _, res = mesocosm_run
    assert any("15 units of 'tank'" in n and "descriptive" in n for n in res.ellipses.notes)


def _nested_table():
    """Synthetic: 4 sites x 4 plots x 3 visits; treatment given to 2 plots in each site."""
    rng = np.random.default_rng(11)
    rows, info = [], []
    for site in range(4):
        for plot in range(4):
            for visit in range(3):
                rows.append(rng.poisson(rng.gamma(2.0, 10.0, size=12)) + 1)
                info.append({"site": f"S{site}", "plot": f"p{plot}",
                             "treatment": "fenced" if plot < 2 else "open",
                             "visit": f"v{visit}"})
    labels = [f"s{i:02d}" for i in range(len(rows))]
    counts = pd.DataFrame(rows, index=labels, columns=[f"t{j}" for j in range(12)])
    return tly.CommunityTable(counts, pd.DataFrame(info, index=labels))


def test_nested_units_reach_every_step_and_the_code():
    tab = _nested_table()
    spec = tly.AnalysisSpec(group="treatment", units=["site", "plot"], **FAST)
    assert spec.units == ("site", "plot")
    res = tly.run(spec, tab)
    # 4 sites are too few to leave a quarter out: the shares come without intervals, said
    assert list(res.skipped) == ["partition intervals"]
    assert "at least 5 units of 'site'" in res.skipped["partition intervals"]
    assert res.size_shape is not None and res.size_shape.fractions_ci is None
    assert res.units.arg == ["site", "plot"]
    assert res.permanova.table.loc["treatment", "stratum"] == "between 'plot'"
    assert res.comparison.n_replicates == 16
    labels = res.units.contribution                    # plots named within their site
    assert labels.nunique() == 16 and labels.iloc[0] == "S0/p0"
    assert res.contributions.provenance["units"] == "plot"
    code = res.code()
    assert "units=tab.samples[['site', 'plot']].astype(str)" in code
    assert "# n_boot=0: intervals of the partition's shares need at least 5" in code
    scope = {"tab": tab}
    exec(code, scope)
    pd.testing.assert_frame_equal(scope["s"].to_frame(), res.size_shape.to_frame())
    pd.testing.assert_frame_equal(scope["k"].to_frame(), res.contributions.to_frame())
    pd.testing.assert_frame_equal(scope["p"].to_frame(), res.permanova.to_frame())


def test_bad_units_are_refused_naming_the_column():
    tab = tly.demo("mesocosm")
    with pytest.raises(InputError, match="column 'tnak'"):
        tly.run(tly.AnalysisSpec(group="treatment", units="tnak", **FAST), tab)
    with pytest.raises(DesignError, match="both a tested term and the units"):
        tly.run(tly.AnalysisSpec(group="treatment", units="treatment", **FAST), tab)


def test_tables_cover_every_result(mesocosm_run):
    _, _, res = mesocosm_run
    names = set(res.tables())
    for want in ("summary", "totals_by_group", "sampling_units", "size_shape",
                 "choice_comparison", "scan", "ordination_scores", "ellipses", "size_test",
                 "comparison", "shape_test", "shape_permanova", "dispersion_test", "permanova",
                 "permanova_schemes", "pairwise", "taxa_shape", "taxa_size", "audit"):
        assert want in names, want
    units = res.tables()["sampling_units"]
    assert units.loc["units: tank", "n"] == 15
    assert units.loc["term: week", "stratum"] == "within 'tank'"


def test_steps_that_cannot_run_are_reported_not_hidden():
    tab = tly.demo("mesocosm")
    g = tab.samples["treatment"]
    one = tab.subset(list(g.index[g != "nutrient_high"]) + [g.index[g == "nutrient_high"][0]])
    res = tly.run(tly.AnalysisSpec(group="treatment", units=False, **FAST), one)
    assert "audit" in res.skipped and "single sample" in res.skipped["audit"]
    assert res.size_shape is not None
    no_group = tly.run(tly.AnalysisSpec(**FAST), tab)
    assert no_group.skipped["comparison"] == "no group column in the spec"
    assert no_group.units.plan is None


def test_cancel_and_progress():
    seen = []
    with pytest.raises(Cancelled):
        tly.run(tly.AnalysisSpec(group="treatment", **FAST), tly.demo("mesocosm"),
                progress=lambda d, t: seen.append(d / t), cancel=lambda: len(seen) > 3)
    assert 0 < seen[-1] < 1
