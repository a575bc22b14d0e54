"""Sampling units: detection, nesting, strata and the errors a user can cause."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.core.units import (aggregate_by_unit, resolve_units, unit_blocks,
                                  unit_centroid_gower)
from tallyform.errors import DesignError, InputError


def _visits(tanks=6, visits=3, treatments=("a", "b")):
    rows = []
    for t in range(tanks):
        for v in range(visits):
            rows.append(dict(treatment=treatments[t % len(treatments)], tank=f"T{t}",
                             week=f"w{v}", bench=f"b{t // 2}", day=7 * (v + 1)))
    return pd.DataFrame(rows, index=[f"s{i}" for i in range(len(rows))])


def test_detects_the_tank_and_splits_terms_into_strata():
    info = _visits()
    plan = resolve_units(info, ["treatment", "week", "treatment:week", "day"])
    assert plan.detected and [lv.name for lv in plan.levels] == ["tank"]
    assert plan.stratum_name("treatment") == "between 'tank'"
    for t in ("week", "treatment:week", "day"):
        assert plan.stratum_name(t) == "within 'tank'"
    lv = plan.levels[0]
    assert lv.m == 6 and lv.balanced and lv.sizes.tolist() == [3] * 6
    assert "6 units of 'tank', 3 samples each" in plan.notes[0]
    assert "tested at the level of 'tank'" in plan.describe("treatment")


def test_blocks_are_never_taken_as_units_and_coarsest_column_wins():
    info = _visits(tanks=8)
    # 'bench' holds 2 tanks of different treatments: it does not nest the treatment
    assert resolve_units(info, ["treatment"]).levels[0].name == "tank"
    # a coarser column that nests the treatment (2 units per level) is preferred
    info["room"] = np.where(np.arange(len(info)) // 6 % 2 == 0, "r1", "r2")
    info["room"] = [f"r{int(t[1:]) % 4}" for t in info["tank"]]   # tanks 0,4 / 1,5 / ...
    plan = resolve_units(info, ["treatment"])
    assert plan.levels[0].name == "room" and plan.levels[0].m == 4
    assert resolve_units(info, ["treatment"], blocks="room").levels[0].name == "tank"


def test_no_units_when_nothing_repeats_and_units_false_notes_the_repeats():
    info = _visits(visits=1)
    assert resolve_units(info, ["treatment"]).independent
    info = _visits()
    plan = resolve_units(info, ["treatment"], units=False)
    assert plan.independent and "repeat units" in plan.notes[0]


def test_nested_levels_and_labels_reused_across_parents():
    rows = []
    for s in range(4):
        for p in range(2):
            for v in range(2):
                rows.append(dict(habitat="wood" if s < 2 else "field", site=f"S{s}",
                                 plot=f"p{p}", treatment="x" if p == 0 else "y", visit=v))
    info = pd.DataFrame(rows, index=[f"s{i}" for i in range(len(rows))])
    plan = resolve_units(info, ["habitat", "treatment", "visit"], units=["site", "plot"])
    assert [lv.m for lv in plan.levels] == [4, 8]       # 'p0' of S0 is not 'p0' of S1
    assert plan.levels[1].parent.tolist() == [0, 0, 1, 1, 2, 2, 3, 3]
    assert plan.stratum_name("habitat") == "between 'site'"
    assert plan.stratum_name("treatment") == "between 'plot'"
    assert plan.stratum_name("visit") == "within 'plot'"


@pytest.mark.parametrize("units, match", [
    ("tanks", "units column 'tanks' is not in the sample table"),
    ("treatment", "both a tested term and the units column"),
    (3, "`units` must be"),
])
def test_bad_units_arguments(units, match):
    with pytest.raises((DesignError, InputError), match=match):
        resolve_units(_visits(), ["treatment"], units=units)


def test_missing_unit_and_partly_nested_factor_and_single_unit_level():
    info = _visits()
    info.loc["s4", "tank"] = np.nan
    with pytest.raises(DesignError, match=r"no unit for sample\(s\) \['s4'\]"):
        resolve_units(info, ["treatment"], units="tank")
    info = _visits()
    info.loc["s0", "treatment"] = "b"          # tank T0 now holds both treatments
    with pytest.raises(DesignError, match=r"constant within some units of 'tank' \(e.g. "
                                          r"'T\d'\) but varies within others \(e.g. 'T0'\)"):
        resolve_units(info, ["treatment"], units="tank")
    info = _visits(tanks=3, treatments=("a", "b", "c"))
    with pytest.raises(DesignError, match=r"single unit of 'tank'"):
        resolve_units(info, ["treatment"], units="tank")


def test_unit_blocks_and_aggregation_and_centroid_gower():
    info = _visits()
    lv = resolve_units(info, ["treatment"]).levels[0]
    assert unit_blocks(lv, info["bench"].to_numpy(), "bench").tolist() == \
        ["b0", "b0", "b1", "b1", "b2", "b2"]
    bad = info["bench"].to_numpy().copy()
    bad[1] = "b9"
    with pytest.raises(DesignError, match="unit 'T0' of 'tank' has samples in more than one"):
        unit_blocks(lv, bad, "bench")
    x = np.arange(len(info) * 2, dtype=float).reshape(-1, 2)
    assert np.allclose(aggregate_by_unit(x, lv)[0], x[:3].sum(axis=0))
    # identity: the Gower matrix of unit centroids equals the centred Gram matrix of the
    # unit means of the features (Gower 1966)
    rng = np.random.default_rng(1)
    f = rng.standard_normal((len(info), 4))
    d = tly.Dissimilarity.from_features(f, list(info.index))
    means = np.vstack([f[lv.codes == u].mean(axis=0) for u in range(lv.m)])
    means_c = means - f.mean(axis=0)
    assert np.allclose(unit_centroid_gower(np.asarray(d.gower()), lv), means_c @ means_c.T)


def test_demo_scenarios_find_their_units():
    m = tly.demo("mesocosm")
    plan = resolve_units(m, ["treatment", "week"])
    assert plan.levels[0].name == "tank" and plan.levels[0].m == 15
    mo = tly.demo("moths")
    plan = resolve_units(mo, ["habitat", "month", "land_use"])
    assert plan.levels[0].name == "site" and plan.levels[0].m == 12
    assert plan.stratum_name("land_use") == "between 'site'"
