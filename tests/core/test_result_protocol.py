"""Every public result class keeps one protocol: to_frame(), tables(), reading, provenance,
_repr_html_(), figure(kind=...) for each of its kinds; tests carry statistic and pvalue.

The classes are found by walking tallyform.core for ResultMixin subclasses, so a new result
class fails here until it is built below and keeps the protocol. Data: the synthetic demo.
"""
from __future__ import annotations

import importlib
import inspect
import pkgutil

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
import tallyform.core as core
from tallyform.core.results import ResultMixin
from tallyform.errors import InputError

TESTS = {"PermanovaResult", "WelchResult", "DispersionResult", "PermutationTest",
         "SizeTestResult", "ComparisonResult", "CountingTestResult", "ConstraintTest",
         "ChoiceAdjustedResult", "PairwiseResult", "SizeShapeResult"}


def _all_result_classes() -> set:
    found = set()
    for m in pkgutil.iter_modules(core.__path__):
        mod = importlib.import_module(f"tallyform.core.{m.name}")
        for obj in vars(mod).values():
            if inspect.isclass(obj) and issubclass(obj, ResultMixin) and obj is not ResultMixin:
                found.add(obj.__name__)
    return found


@pytest.fixture(scope="module")
def results() -> dict:
    tab = tly.demo()
    info = tab.samples
    d = tly.dissimilarity(tab, "bray_curtis")
    o = tly.pcoa(d)
    p = tly.permanova(d, info, "treatment", n_permutations=99, rng=1)
    cons = tly.rda(tab, terms=["treatment"])
    out = {
        "PermanovaResult": p,
        "WelchResult": tly.welch_permanova(d, info, "treatment", n_permutations=99, rng=1),
        "DispersionResult": tly.dispersion_test(d, info["treatment"], n_permutations=99, rng=1),
        "SizeTestResult": tly.size_test(tab, "treatment"),
        "ComparisonResult": tly.compare_groups(tab, "treatment", n_permutations=99, rng=1),
        "CountingTestResult": tly.shape_test(tab, "treatment", n_permutations=99, rng=1),
        "ConstraintTest": tly.constraint_test(cons, n_permutations=99, rng=1),
        "ChoiceAdjustedResult": tly.choice_adjusted(
            tab, "treatment", [{"measure": "bray_curtis"}, {"measure": "hellinger"}],
            n_permutations=99, rng=1),
        "PairwiseResult": tly.pairwise_permanova(d, info, group="treatment",
                                                 n_permutations=99, rng=1),
        "OutlierSamples": tly.outlier_samples(tab),
        "SizeShapeResult": tly.size_shape(tab, "bray_curtis", n_permutations=19, rng=1),
        "ScanResult": tly.scan(tab, measures=["bray_curtis", "hellinger"], transforms=[1.0]),
        "ChoiceComparison": tly.compare_choices(tab, {"measure": "bray_curtis"},
                                                {"measure": "hellinger"}, n_boot=9, rng=1),
        "AuditResult": tly.audit(tab, "treatment", n_sim=5, n_permutations=19, rng=1),
        "Ordination": o,
        "EllipseSet": o.ellipses(info["treatment"], kind="confidence"),
        "TaxonContributions": tly.taxon_contributions(tab, "treatment", "control",
                                                      "nutrient_high", rng=1, n_boot=19),
    }
    out["PermutationTest"] = out["ConstraintTest"].row_test()
    return out


def test_every_result_class_is_covered(results):
    assert _all_result_classes() <= set(results), _all_result_classes() - set(results)


@pytest.mark.parametrize("name", sorted(_all_result_classes()))
def test_protocol(results, name):
    r = results[name]
    assert type(r).__name__ == name
    frame = r.to_frame()
    assert isinstance(frame, pd.DataFrame) and not frame.empty
    tables = r.tables()
    assert isinstance(tables, dict) and tables
    first = next(iter(tables.values()))
    pd.testing.assert_frame_equal(first, frame)          # the main table comes first
    for key, t in tables.items():
        assert isinstance(key, str) and key == key.lower() and " " not in key
        assert isinstance(t, pd.DataFrame)
    assert isinstance(r.reading, str) and len(r.reading) > 20
    prov = r.provenance
    assert isinstance(prov, dict) and prov
    assert isinstance(r._repr_html_(), str) and "<" in r._repr_html_()
    assert str(r)
    if name in TESTS:
        assert r.statistic is not None and r.pvalue is not None


@pytest.mark.parametrize("name", sorted(_all_result_classes()))
def test_every_figure_kind_draws(results, name):
    import plotly.graph_objects as go
    from tallyform.render.figures import figure_kinds
    r = results[name]
    kinds = figure_kinds(r)
    assert kinds
    assert isinstance(r.figure(), go.Figure)             # the default kind
    for kind in kinds:
        if name == "ComparisonResult" and kind == "permanova" and r.permanova is None:
            with pytest.raises(InputError, match="PERMANOVA"):
                r.figure(kind)
            continue
        if name == "CountingTestResult" and kind == "distances" and r.aspect != "spread":
            with pytest.raises(InputError, match="spread"):
                r.figure(kind)
            continue
        assert isinstance(r.figure(kind), go.Figure), kind
    with pytest.raises(InputError, match="kind"):
        r.figure("no such kind")


def test_provenance_records_the_call_and_repeats_it():
    # the call recorded on a result runs again to the same numbers (same seed)
    tab = tly.demo()
    d = tly.dissimilarity(tab, "bray_curtis")
    p = tly.permanova(d, tab.samples, "treatment", n_permutations=99, rng=3)
    prov = p.provenance
    assert prov["function"] == "tallyform.permanova"
    assert prov["options"]["rng"] == 3 and prov["options"]["n_permutations"] == 99
    assert prov["tallyform"] == tly.__version__
    again = tly.permanova(d, tab.samples, **prov["options"])
    assert np.array_equal(again.table["pvalue"].to_numpy(), p.table["pvalue"].to_numpy(),
                          equal_nan=True)


def test_a_generator_seed_is_said_to_be_unknown():
    tab = tly.demo()
    s = tly.size_shape(tab, "hellinger", rng=np.random.default_rng(1))
    assert "not known" in s.provenance["call"]["rng"]
    assert s.provenance["function"] == "tallyform.size_shape"


def test_analysis_tables_are_the_results_tables():
    tab = tly.demo()
    res = tly.run(tly.AnalysisSpec(group="treatment", n_permutations=99, seed=1), tab)
    out = res.tables()
    assert res.comparison is not None
    for key, t in res.comparison.tables().items():
        pd.testing.assert_frame_equal(out[key], t)
