"""Option lists live once, in the core: the spec, the CLI and the widgets offer exactly what
the core functions accept, and the core refuses what the lists do not hold. Data: the
synthetic demo."""
from __future__ import annotations

import pytest

import tallyform as tly
from tallyform.core.spec import SPEC_CHOICES
from tallyform.errors import InputError


@pytest.fixture(scope="module")
def demo():
    tab = tly.demo()
    return tab, tly.dissimilarity(tab, "bray_curtis")


def test_every_listed_size_method_runs_and_others_are_refused(demo):
    tab, _ = demo
    for m in SPEC_CHOICES["size_method"]:
        kw = {"n_boot": 19, "rng": 1} if m == "negbin" else {}
        if m == "permutation":
            kw = {"n_permutations": 99, "rng": 1}
        r = tly.size_test(tab, "treatment", method=m, **kw)
        assert 0 <= r.pvalue <= 1 and r.method == m
    with pytest.raises(InputError, match="method"):
        tly.size_test(tab, "treatment", method="t_test")


def test_every_listed_sum_of_squares_correction_and_ellipse_kind_runs(demo):
    tab, d = demo
    for ss in SPEC_CHOICES["ss"]:
        tly.permanova(d, tab.samples, ["treatment"], ss=ss, n_permutations=9, rng=1)
    with pytest.raises(InputError, match="ss"):
        tly.permanova(d, tab.samples, ["treatment"], ss="type_three", n_permutations=9)
    for c in SPEC_CHOICES["correction"]:
        tly.pcoa(d, correction=c)
    with pytest.raises(InputError, match="correction"):
        tly.pcoa(d, correction="square_root")
    o = tly.pcoa(d)
    for kind in (k for k in SPEC_CHOICES["ellipse"] if k is not None):
        o.ellipses(tab.samples["treatment"], kind=kind, rng=1)


def test_every_listed_centre_adjustment_and_pairwise_statistic_runs(demo):
    tab, d = demo
    for centre in SPEC_CHOICES["dispersion_centre"]:
        tly.dispersion_test(d, tab.samples["treatment"], centre=centre, n_permutations=9,
                            rng=1)
    for adjust in SPEC_CHOICES["pairwise_adjust"]:
        for stat in SPEC_CHOICES["pairwise_statistic"]:
            tly.pairwise_permanova(d, tab.samples, group="treatment", adjust=adjust,
                                   statistic=stat, n_permutations=9, rng=1)


def test_size_and_shape_options_run_and_shape_measures_are_size_free(demo):
    tab, _ = demo
    effort = tab.effort is not None
    for size in SPEC_CHOICES["size"]:
        if size == "log_total_per_effort" and not effort:
            continue
        for shape in SPEC_CHOICES["shape"]:
            tly.size_shape(tab, "bray_curtis", size=size, shape=shape)
    for m in SPEC_CHOICES["shape_measure"]:
        assert tly.MEASURES[m].size_free, m                     # ignores totals
    assert set(SPEC_CHOICES["audit_model"]) >= {"dirichlet_multinomial"}


def test_spec_refuses_what_the_lists_do_not_hold():
    with pytest.raises(InputError):
        tly.AnalysisSpec(group="treatment", size_method="t_test")


def test_widgets_offer_only_listed_values():
    pytest.importorskip("ipywidgets")
    from tallyform.widgets.shape_panel import ShapePanel
    from tallyform.widgets.tests_panel import TestsPanel
    tab = tly.demo()
    sp, tp = ShapePanel(tab), TestsPanel(tab)

    def values(dropdown):
        return [v for _, v in dropdown.options]
    assert set(values(sp.size)) <= set(SPEC_CHOICES["size"])
    assert set(values(sp.shape)) <= set(SPEC_CHOICES["shape"])
    assert set(values(sp.ellipses)) <= set(SPEC_CHOICES["ellipse"])
    assert values(tp.shape_measure) == list(SPEC_CHOICES["shape_measure"])
    assert values(tp.size_method) == list(SPEC_CHOICES["size_method"])
    assert set(values(tp.adjust)) <= set(SPEC_CHOICES["pairwise_adjust"])
    for m in values(sp.measure):
        assert m in tly.MEASURES


def test_cli_choices_come_from_the_core():
    from tallyform.cli import build_parser
    from tallyform.core.abundance import ABUNDANCE
    from tallyform.core.table import EMPTY_POLICIES
    parser = build_parser()
    sub = next(a for a in parser._actions if a.__class__.__name__ == "_SubParsersAction")
    demo_choices = next(a.choices for a in sub.choices["demo"]._actions if a.dest == "name")
    assert list(demo_choices) == tly.demo_names()
    run = sub.choices["report"]
    by_dest = {a.dest: a.choices for a in run._actions}
    assert list(by_dest["abundance"]) == list(ABUNDANCE)
    assert list(by_dest["empty"]) == list(EMPTY_POLICIES)
