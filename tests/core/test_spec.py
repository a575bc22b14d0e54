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
