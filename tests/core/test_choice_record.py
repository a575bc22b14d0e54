"""The record of choices tried (per grouping), AnalysisSpec.choices_tried, tly.run's adjusted
step, and the report's and methods' words about it."""
from __future__ import annotations

import html
import re

import pandas as pd
import pytest

import tallyform as tly
from tallyform.core.choice_record import (ChoiceRecord, canonical_entries, origin_sentence,
                                          spec_choices)
from tallyform.core.display import p_words
from tallyform.errors import InputError

FAST = dict(n_permutations=99, audit_n_sim=10, audit_n_permutations=49, n_boot=0,
            scan_measures=("bray_curtis", "hellinger"), scan_transforms=("none", "sqrt"))




# ---------------------------------------------------------------------------- the record
def test_record_counts_each_choice_once_per_grouping():
    r = ChoiceRecord()
    first = r.add("site", {"measure": "hellinger"})
    # chord distance after a square root is the Hellinger distance (an identity; Legendre &
    # Gallagher 2001): the same choice, counted once, under the first name
    assert r.add("site", {"measure": "chord", "transform": "sqrt"}) == first
    assert r.add("site", "hellinger") == first
    # 'sqrt' and Power(0.5) are one transformation
    b = r.add("site", {"measure": "bray_curtis", "transform": "sqrt"})
    assert r.add("site", {"measure": "bray_curtis", "transform": tly.Power(0.5)}) == b
    assert r.n_choices("site") == 2
    assert r.n_choices("other") == 0                   # per grouping
    r.add("other", "chi_square", origin="scan")
    assert r.entries("other") == ({"measure": "chi_square", "transform": "none",
                                   "origin": "scan"},)
    assert r.family("site") == [{"measure": "hellinger", "transform": "none"},
                                {"measure": "bray_curtis", "transform": "sqrt"}]
    r.clear("site")
    assert r.n_choices("site") == 0 and r.n_choices("other") == 1
    r.clear()
    assert r.n_choices("other") == 0


def test_record_refuses_unknown_origins_and_measures():
    r = ChoiceRecord()
    with pytest.raises(InputError, match="origin"):
        r.add("site", "hellinger", origin="guess")
    with pytest.raises(InputError, match="unknown measure"):
        r.add("site", {"measure": "not_a_measure"})
    assert r.n_choices("site") == 0


def test_origin_words_say_whether_to_adjust():
    scan, tests = canonical_entries([{"measure": "hellinger", "origin": "scan"},
                                     {"measure": "chi_square"}])
    words = origin_sentence(scan, group="site", n_choices=3)
    assert "scan" in words and "needs no adjustment" in words
    assert "adjusted for all of them" in origin_sentence(tests, group="site", n_choices=3)
    assert "adjusted for both" in origin_sentence(tests, group="site", n_choices=2)
    assert "its own p-value stands" in origin_sentence(tests, group="site", n_choices=1)


# ---------------------------------------------------------------------------- the spec
def test_spec_records_the_choices_and_round_trips():
    tried = [{"measure": "chi_square"}, {"measure": "hellinger", "origin": "audit"}]
    spec = tly.AnalysisSpec(group="site", choices_tried=tried)
    assert spec.choices_tried == tuple(tried)
    tried[0]["measure"] = "aitchison"                  # the spec keeps its own copy
    assert spec.choices_tried[0]["measure"] == "chi_square"
    again = tly.AnalysisSpec.from_json(spec.to_json())
    assert again == spec and again.choices_tried == spec.choices_tried
    assert tly.AnalysisSpec.from_dict(spec.to_dict()) == spec
    spec.to_dict()["choices_tried"][0]["measure"] = "euclidean"     # a copy, not the spec's
    assert spec.choices_tried[0]["measure"] == "chi_square"
    with pytest.raises(InputError, match="choices_tried.*unknown measure"):
        tly.AnalysisSpec(choices_tried=[{"measure": "nope"}])
    with pytest.raises(InputError, match="choices_tried.*origin"):
        tly.AnalysisSpec(choices_tried=[{"measure": "hellinger", "origin": "guess"}])
    with pytest.raises(InputError, match="choices_tried"):
        tly.AnalysisSpec(choices_tried="hellinger")
    # the measure reported counts among the choices (once)
    entries, current = spec_choices(spec.replace(shape_measure="hellinger"))
    assert [t.name for t in entries] == ["chi_square", "hellinger"]
    assert current.name == "hellinger" and current.origin == "audit"


def test_run_adjusts_for_the_choices_tried(null_table):
    tried = [{"measure": "chi_square"}, {"measure": "aitchison"}]
    spec = tly.AnalysisSpec(group="site", units=False, shape_measure="hellinger",
                            choices_tried=tried, **FAST)
    res = tly.run(spec, null_table)
    j = res.choice_adjusted
    # the same numbers as the public call with the same family, units, seed (the API is
    # the reference)
    direct = tly.choice_adjusted(null_table, "site", tried + [{"measure": "hellinger"}],
                                 units=False, n_permutations=99, rng=spec.seed)
    assert j.n_choices == 3
    pd.testing.assert_series_equal(j.pvalue_adjusted, direct.pvalue_adjusted)
    pd.testing.assert_series_equal(j.pvalue, direct.pvalue)
    # single-step min-P never lowers a p-value (Westfall & Young 1993)
    assert (j.pvalue_adjusted >= j.pvalue).all()
    assert "choices_tried" in res.tables()
    code = spec.code(null_table)
    assert "j = tly.choice_adjusted(tab, 'site'" in code

    # the methods paragraph: how many choices, the adjusted p of the one reported
    from tallyform.render.methods import methods_references, methods_text
    text = methods_text(spec, res)
    assert "3 choices of measure" in text
    assert (f"{p_words(j.pvalue_adjusted['hellinger'])} (own "
            f"{p_words(j.pvalue['hellinger'])})") in text
    assert any(r.startswith("Westfall PH, Young SS (1993)")
               for r in methods_references(text))
    # the report: its own section with the count and the adjusted p
    from tallyform.render.report import report_html
    page = html.unescape(report_html(res))
    section = page[page.index("<section id='choices-tried'>"):]
    section = section[:section.index("</section>")]
    assert "adjusted for the 3 choices tried, " \
           f"{p_words(j.pvalue_adjusted['hellinger'])}" in section
    assert "The 3 choices whose shape test p-value was looked at" in section
    assert re.search(r"chi_square: chosen where the tests are shown", section)


def test_one_choice_adds_no_step(null_table):
    spec = tly.AnalysisSpec(group="site", units=False, shape_measure="hellinger",
                            choices_tried=[{"measure": "hellinger"}], **FAST)
    res = tly.run(spec, null_table)
    assert res.choice_adjusted is None and "choice_adjusted" not in res.skipped
    from tallyform.render.methods import methods_text
    assert "choices of measure" not in methods_text(spec, res)
    assert "choice_adjusted" not in spec.code(null_table)


def test_scan_origin_in_the_methods(null_table):
    spec = tly.AnalysisSpec(group="site", units=False, shape_measure="hellinger",
                            choices_tried=[{"measure": "chi_square"},
                                           {"measure": "hellinger", "origin": "scan"}])
    from tallyform.render.methods import methods_text
    text = methods_text(spec)
    assert "was chosen in the scan, which never looks at the groups" in text
    assert "adjusted for both" in text
