"""AnalysisSpec: JSON round trip, validation naming the key, no code execution."""
from __future__ import annotations

import json

import pytest

import tallyform as tly
from tallyform.core.spec import AnalysisSpec
from tallyform.errors import InputError


def test_json_round_trip(tmp_path):
    spec = AnalysisSpec(group="treatment", terms=("treatment", "week"), blocks="tank_block",
                        transform="power(0.3)", measure="bray_curtis", shape_dims=4,
                        contrast=("control", "nutrient_high"), seed=7)
    again = AnalysisSpec.from_json(spec.to_json())
    assert again == spec
    p = tmp_path / "spec.json"
    spec.to_json(p)
    assert AnalysisSpec.from_json(p) == spec
    assert json.loads(p.read_text())["terms"] == ["treatment", "week"]


@pytest.mark.parametrize("data, match", [
    ({"measure": "bray"}, "spec key 'measure' must name a measure"),
    ({"mesure": "bray_curtis"}, "unknown spec key\\(s\\) \\['mesure'\\]"),
    ({"n_permutations": -5}, "spec key 'n_permutations' must be a whole number"),
    ({"n_permutations": "999"}, "spec key 'n_permutations' must be a whole number"),
    ({"alpha": 5}, "spec key 'alpha' must be a number between 0 and 1"),
    ({"transform": "cube"}, "spec key 'transform'"),
    ({"size": "biomass"}, "spec key 'size' must be one of"),
    ({"contrast": ["a", "a"]}, "spec key 'contrast' must name two different groups"),
    ({"version": 99}, "spec key 'version' is 99"),
])
def test_bad_values_name_the_key(data, match):
    with pytest.raises(InputError, match=match):
        AnalysisSpec.from_dict(data)


def test_loading_never_executes_code(tmp_path):
    # a spec is JSON only: text that would be code in another reader is just a bad value
    hostile = '{"measure": "__import__(\\"os\\").system(\\"touch PWNED\\")"}'
    with pytest.raises(InputError, match="must name a measure"):
        AnalysisSpec.from_json(hostile)
    with pytest.raises(InputError, match="not valid JSON"):
        AnalysisSpec.from_json("{'measure': 'bray_curtis'}")      # Python, not JSON
    assert not (tmp_path / "PWNED").exists()


def test_validate_against_table():
    tab = tly.demo("mesocosm")
    AnalysisSpec(group="treatment").validate(tab)
    with pytest.raises(InputError, match="column 'site'"):
        AnalysisSpec(group="site").validate(tab)
    with pytest.raises(InputError, match="column 'tank_blok'"):
        AnalysisSpec(group="treatment", terms=("treatment", "treatment:tank_blok")).validate(tab)


def test_reproduce_code_is_valid_python_with_every_choice():
    spec = AnalysisSpec(group="treatment", transform="sqrt", measure="hellinger",
                        blocks="tank_block", seed=3)
    code = spec.code()
    compile(code, "<reproduce>", "exec")
    for word in ("'hellinger'", "transform='sqrt'", "blocks='tank_block'", "rng=3"):
        assert word in code


@pytest.mark.parametrize("units", [None, False, "tank", ("site", "plot")])
def test_units_round_trip(units):
    spec = AnalysisSpec(group="treatment", units=units)
    back = AnalysisSpec.from_json(spec.to_json())
    assert back == spec and back.units == units
    # a list from JSON becomes a tuple; a one-column list is that column
    assert AnalysisSpec(units=["site", "plot"]).units == ("site", "plot")
    assert AnalysisSpec(units=["tank"]).units == "tank"


@pytest.mark.parametrize("data, match", [
    ({"units": True}, "spec key 'units' must be null \\(detect\\), false"),
    ({"units": 3}, "spec key 'units' must be null"),
    ({"units": []}, "spec key 'units' must be null"),
    ({"units": ["site", "site"]}, "lists a column twice"),
    ({"n_boot": -1}, "spec key 'n_boot' must be a whole number"),
    ({"scan_n_boot": 1.5}, "spec key 'scan_n_boot' must be a whole number"),
    ({"pairwise_statistic": "t"}, "spec key 'pairwise_statistic' must be one of"),
    ({"compare_with": {"measure": "bray"}}, "names unknown measure 'bray'"),
    ({"compare_with": {"colour": "red"}}, "keys from \\['measure', 'transform'"),
    ({"compare_with": {}}, "non-empty object"),
    ({"compare_with": {"transform": "cube"}}, "spec key 'compare_with'"),
    ({"compare_with": {"shape_dims": 0}}, "shape_dims' must be a whole number >= 1"),
    ({"source": {"demo": "forest"}}, "names a bundled scenario"),
    ({"source": {"samples": "s.csv"}}, "must give the counts file as 'counts'"),
    ({"source": {"counts": "c.csv", "load": "qpcr"}}, "unknown key\\(s\\) \\['load'\\]"),
    ({"source": {"counts": "c.csv", "header_row": "2"}}, "'header_row' must be a whole"),
])
def test_new_keys_are_checked(data, match):
    with pytest.raises(InputError, match=match):
        AnalysisSpec.from_dict(data)


def test_units_columns_are_checked_against_the_table():
    tab = tly.demo("mesocosm")
    AnalysisSpec(group="treatment", units="tank").validate(tab)
    with pytest.raises(InputError, match="column 'plot'"):
        AnalysisSpec(group="treatment", units=["tank", "plot"]).validate(tab)


def test_code_reads_the_data_first():
    # from the spec's source (demo or files, with the table options), or from the table
    demo = AnalysisSpec(group="treatment", source={"demo": "mesocosm"}).code()
    assert demo.splitlines()[2] == "tab = tly.demo('mesocosm')"
    files = AnalysisSpec(group="g", source={"counts": "c.csv", "samples": "s.csv",
                                            "effort": "nights"},
                         abundance="relative", load="copies").code()
    flat = " ".join(files.split())                       # long calls are wrapped
    assert ("tab = tly.read_counts('c.csv', samples='s.csv', effort='nights', "
            "abundance='relative', load='copies')") in flat
    tab = tly.demo("moths")
    assert "tab = tly.demo('moths')" in AnalysisSpec(group="habitat").code(tab)
    # a changed demo table is not the demo: the code says so instead of reading the demo
    sub = tab.subset(list(tab.sample_labels[:40]))
    code = AnalysisSpec(group="habitat").code(sub)
    assert "tly.demo" not in code and "# tab = tly.read_counts(" in code
    assert sub.fingerprint in code


def test_code_literals_read_back_in_a_fresh_session():
    # numpy scalars (group levels read from a table) are written as plain Python values
    import numpy as np

    from tallyform.core.steps import literal
    value = (np.int64(3), np.str_("a"), 0.95, None, {"x": np.float64(1.5)}, ("p", "q"))
    text = literal(value)
    assert "np." not in text
    assert eval(text, {}) == [3, "a", 0.95, None, {"x": 1.5}, ["p", "q"]]  # noqa: S307
