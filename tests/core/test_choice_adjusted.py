"""choice_adjusted: a group test over a family of choices of transform and measure, every
p-value adjusted for the family by single-step min-P (Westfall & Young 1993).

Outside references: scipy.stats.f_oneway (PERMANOVA on the Euclidean distances of one
variable is the one-way ANOVA F, docs/methods.md, section 11) with every relabelling enumerated by itertools,
and the definition of single-step min-P computed by brute force; identities (one choice:
adjusted = raw; raw <= adjusted <= K x raw, the Bonferroni bound); and the package's own
permanova / dispersion_test, of which each choice's test must be an exact copy (same seed,
same relabellings, same p-value). All data are synthetic.
"""
from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
from scipy.stats import f_oneway

import tallyform as tly
from tallyform.core import choice_adjusted as module
from tallyform.core.choice_adjusted import choice_adjusted, single_step_min_p
from tallyform.core.choice_grid import as_choices, default_choices, presence_based
from tallyform.core.errors import Cancelled, DesignError, InputError

P = dict(progress=False)


def _table(rng, groups=(8, 12), p=15, units=None, shift=1.0):
    """Log-normal counts; ``units``: samples per unit (visits of tanks, group per tank)."""
    rows = []
    if units is None:
        for g, m in enumerate(groups):
            rows += [dict(g=f"g{g}") for _ in range(m)]
    else:
        for g, m in enumerate(groups):
            for t in range(m):
                rows += [dict(g=f"g{g}", tank=f"T{g}{t}", visit=f"v{v}", block=f"b{t % 2}")
                         for v in range(units)]
    info = pd.DataFrame(rows, index=[f"s{i:02d}" for i in range(len(rows))])
    n = len(info)
    base = np.sort(rng.lognormal(0, 1, p))[::-1]
    mu = base * np.exp(0.5 * rng.standard_normal((n, p)))
    mu[info["g"].to_numpy() == "g1", :3] *= shift
    counts = rng.poisson(8 * mu / mu.sum(axis=1, keepdims=True) * p) + 0.0
    counts[:, 0] += 1
    return tly.CommunityTable(pd.DataFrame(counts, index=info.index,
                                           columns=[f"t{j}" for j in range(p)]), info)


FAMILY = [{"measure": "bray_curtis"}, {"measure": "bray_curtis", "transform": "sqrt"},
          {"measure": "hellinger"}, {"measure": "chi_square", "transform": "log1p"},
          {"measure": "jaccard"}, {"measure": "euclidean", "transform": "fourth_root"}]


# ---------------------------------------------------------------------------- min-P
def _brute_min_p(obs, null, exact):
    """Single-step min-P from its definition (Westfall & Young 1993, ch. 2): the reference
    set is every relabelling (plus the observed one for random relabellings)."""
    ref = null if exact else np.vstack([obs[None, :], null])
    m, k = ref.shape

    def pval(value, col):
        return np.sum(ref[:, col] >= value - 1e-9 * abs(value)) / m
    raw = np.array([pval(obs[c], c) for c in range(k)])
    minp = np.array([min(pval(ref[b, c], c) for c in range(k)) for b in range(m)])
    adj = np.array([np.sum(minp <= raw[c] + 1e-15) / m for c in range(k)])
    return raw, adj


@pytest.mark.parametrize("exact", [False, True])
def test_min_p_matches_its_definition(exact):
    rng = np.random.default_rng(1)
    for trial in range(20):
        k = int(rng.integers(1, 6))
        null = np.round(rng.normal(size=(int(rng.integers(5, 40)), k)), 1)   # with ties
        obs = null[0] if exact else np.round(rng.normal(size=k) + 0.5, 1)
        raw, adj, _ = single_step_min_p(obs, null, exact=exact)
        b_raw, b_adj = _brute_min_p(obs, null, exact)
        assert np.allclose(raw, b_raw, rtol=0, atol=1e-12)
        assert np.allclose(adj, b_adj, rtol=0, atol=1e-12)


def test_min_p_identities():
    rng = np.random.default_rng(2)
    null = rng.normal(size=(199, 7)) @ rng.normal(size=(7, 7))      # correlated tests
    obs = rng.normal(size=7) * 2
    raw, adj, min_null = single_step_min_p(obs, null)
    assert np.all(adj >= raw)
    assert np.all(adj <= np.minimum(1.0, 7 * raw) + 1e-12)      # Bonferroni bound
    one_raw, one_adj, _ = single_step_min_p(obs[:1], null[:, :1])
    assert one_adj[0] == one_raw[0]                              # exactly, not nearly
    # a duplicated test changes nothing (the smallest p over the family is the same)
    d_raw, d_adj, _ = single_step_min_p(np.r_[obs, obs[2]], np.c_[null, null[:, 2]])
    assert np.array_equal(d_adj[:7], adj) and d_adj[7] == adj[2]
    assert min_null.shape == (199,) and np.all((min_null > 0) & (min_null <= 1))


# ---------------------------------------------------------------------------- exact test
def test_exact_enumeration_against_f_oneway():
    # one variable: PERMANOVA on its Euclidean distances is the one-way ANOVA F (METHODS 8;
    # reference scipy.stats.f_oneway); 5 + 5 samples: all 252 relabellings enumerated
    x = np.array([3.0, 5, 9, 2, 60, 8, 20, 11, 35, 14])
    labels = [f"s{i}" for i in range(10)]
    g = np.array(list("aaaaabbbbb"))
    tab = tly.CommunityTable(pd.DataFrame({"t": x}, index=labels),
                             pd.DataFrame({"g": g}, index=labels))
    tr = {"none": x, "sqrt": np.sqrt(x), "log1p": np.log1p(x), "fourth_root": x ** 0.25}
    res = choice_adjusted(tab, "g", [{"measure": "euclidean", "transform": t} for t in tr],
                          n_permutations=999, rng=1, **P)
    assert res.exact and res.n_permutations == 252
    subsets = list(itertools.combinations(range(10), 5))
    F = np.empty((len(subsets), len(tr)))
    for b, s in enumerate(subsets):
        mask = np.zeros(10, bool)
        mask[list(s)] = True
        F[b] = [f_oneway(v[mask], v[~mask]).statistic for v in tr.values()]
    obs = np.array([f_oneway(v[g == "a"], v[g == "b"]).statistic for v in tr.values()])
    raw, adj = _brute_min_p(obs, F, exact=True)
    assert np.allclose(res.statistic.to_numpy(), obs, rtol=1e-10)
    assert np.allclose(res.pvalue.to_numpy(), raw, rtol=0, atol=1e-12)
    assert np.allclose(res.pvalue_adjusted.to_numpy(), adj, rtol=0, atol=1e-12)
    assert (adj > raw).any()                 # the adjustment does something here


# ---------------------------------------------------------------------------- same test
def _design_cases():
    return [("samples", dict(units=False), "g"),
            ("units", dict(units="tank"), "g"),
            ("units, blocks", dict(units="tank", blocks="block"), "g"),
            ("within units", dict(units="tank"), "visit")]


@pytest.mark.parametrize("aspect", ["shape", "spread"])
@pytest.mark.parametrize("case", _design_cases(), ids=lambda c: c[0])
def test_each_choice_is_the_compare_groups_test(aspect, case):
    # one choice = permanova (shape) or dispersion_test (spread) with the same seed: the same
    # relabellings (samples, whole units, within units, within blocks) and the same p-value
    _, kw, group = case
    tab = _table(np.random.default_rng(3), groups=(4, 5), units=3)
    for ch in FAMILY[:3]:
        res = choice_adjusted(tab, group, [ch], aspect=aspect, n_permutations=99, rng=11,
                              **kw, **P)
        d = tly.dissimilarity(tab, ch["measure"], transform=ch.get("transform"))
        if aspect == "shape":
            ref = tly.permanova(d, tab.samples, [group], n_permutations=99, rng=11, **kw)
            stat, p = float(ref.statistic[group]), float(ref.pvalue[group])
        else:
            ref = tly.dispersion_test(d, group, samples=tab.samples, n_permutations=99,
                                      rng=11, **kw)
            stat, p = ref.statistic, ref.pvalue
        assert res.statistic.iloc[0] == pytest.approx(stat, rel=1e-9)
        assert res.pvalue.iloc[0] == p
        assert res.pvalue_adjusted.iloc[0] == res.pvalue.iloc[0]      # one choice: exact


# ---------------------------------------------------------------------------- identities
@pytest.mark.parametrize("kw", [dict(units=False), dict(units="tank")], ids=["samples", "units"])
def test_identities_on_a_family(kw):
    tab = _table(np.random.default_rng(4), groups=(5, 6), units=2, shift=1.6)
    res = choice_adjusted(tab, "g", FAMILY, n_permutations=199, rng=5, **kw, **P)
    raw, adj = res.pvalue.to_numpy(), res.pvalue_adjusted.to_numpy()
    k = res.n_choices
    assert k == len(FAMILY)
    assert np.all(adj >= raw)
    # never above Bonferroni (the brief allows one permutation step; the integer counts
    # give the bound exactly)
    assert np.all(adj <= np.minimum(1.0, k * raw) + 1e-12)
    again = choice_adjusted(tab, "g", FAMILY, n_permutations=199, rng=5, **kw, **P)
    pd.testing.assert_frame_equal(res.frame, again.frame)        # same rng, same table
    other = choice_adjusted(tab, "g", FAMILY, n_permutations=199, rng=6, **kw, **P)
    assert not np.array_equal(other.pvalue.to_numpy(), raw)


def test_duplicate_choices_change_nothing():
    tab = _table(np.random.default_rng(6), shift=1.5)
    res = choice_adjusted(tab, "g", FAMILY, n_permutations=199, rng=2, **P)
    dup = FAMILY + [{"measure": "Bray-Curtis"}, {"measure": "bray_curtis", "transform": 0.5},
                    {"measure": "jaccard", "transform": "log1p"},
                    {"measure": "quantitative_jaccard", "transform": "presence"},
                    {"measure": "chord", "transform": "sqrt"}]
    more = choice_adjusted(tab, "g", dup, n_permutations=199, rng=2, **P)
    pd.testing.assert_frame_equal(res.frame, more.frame)
    assert any("tested once" in n for n in more.notes)


def test_same_distances_under_another_name_do_not_move_the_adjustment():
    # one taxon: Manhattan and Euclidean distances are equal, so adding one to a family
    # holding the other leaves every adjusted p-value as it was (min-P property)
    rng = np.random.default_rng(7)
    x = rng.lognormal(2, 1, 20)
    labels = [f"s{i}" for i in range(20)]
    tab = tly.CommunityTable(pd.DataFrame({"t": x}, index=labels),
                             pd.DataFrame({"g": ["a"] * 8 + ["b"] * 12}, index=labels))
    fam = [{"measure": "euclidean"}, {"measure": "euclidean", "transform": "log1p"}]
    a = choice_adjusted(tab, "g", fam, n_permutations=199, rng=1, **P)
    b = choice_adjusted(tab, "g", fam + [{"measure": "manhattan"}], n_permutations=199,
                        rng=1, **P)
    assert b.n_choices == 3
    assert np.array_equal(a.pvalue_adjusted.to_numpy(), b.pvalue_adjusted.to_numpy()[:2])


def test_memory_groups_replay_the_same_relabellings(monkeypatch):
    tab = _table(np.random.default_rng(8), units=2, groups=(4, 4))
    one = choice_adjusted(tab, "g", FAMILY, n_permutations=99, rng=3, units="tank", **P)
    monkeypatch.setattr(module, "_GROUP_BYTES", 1)             # one choice per group
    many = choice_adjusted(tab, "g", FAMILY, n_permutations=99, rng=3, units="tank", **P)
    pd.testing.assert_frame_equal(one.frame, many.frame)


# ---------------------------------------------------------------------------- grid
def test_default_family_is_the_scan_grid_with_presence_once():
    from tallyform.core.spec import DEFAULT_SCAN_MEASURES, DEFAULT_SCAN_TRANSFORMS
    grid = default_choices()
    plain = [m for m in DEFAULT_SCAN_MEASURES if not presence_based(m)]
    assert len(grid) == len(plain) * (len(DEFAULT_SCAN_TRANSFORMS) - 1) + \
        (len(DEFAULT_SCAN_MEASURES) - len(plain)) == 29
    family, dups = as_choices(None)
    # the chord distance after a square root is the Hellinger distance (and after a
    # fourth root, Hellinger after a square root): tested once
    assert len(family) == 27 and len(dups) == 2
    assert all("chord on" in d for d in dups)


def test_presence_based_measures_are_found_by_their_values():
    # Jaccard and Sorensen read presences only (Legendre & Legendre 2012, ch. 7); the
    # quantitative measures do not
    assert presence_based("jaccard") and presence_based("sorensen")
    assert not any(presence_based(m) for m in ("bray_curtis", "hellinger", "canberra"))
    fam, _ = as_choices([{"measure": "bray_curtis", "transform": "presence"},
                         {"measure": "jaccard", "transform": "fourth_root"},
                         {"measure": "euclidean", "transform": "presence"}])
    # Bray-Curtis on presences is Sorensen (common practice)
    assert [c.name for c in fam] == ["sorensen", "jaccard", "euclidean on presence"]


def test_choices_round_trip_through_the_result():
    tab = _table(np.random.default_rng(9))
    res = choice_adjusted(tab, "g", FAMILY, n_permutations=49, rng=1, **P)
    again = choice_adjusted(tab, "g", list(res.choices), n_permutations=49, rng=1, **P)
    pd.testing.assert_frame_equal(res.frame, again.frame)
    assert [c["measure"] for c in res.choices] == [c["measure"] for c in FAMILY]


# ---------------------------------------------------------------------------- result
def test_reading_counts_the_choices_and_names_the_smallest():
    tab = _table(np.random.default_rng(10), shift=3.0)
    res = choice_adjusted(tab, "g", FAMILY, n_permutations=199, rng=1, **P)
    assert f"{len(FAMILY)} choices" in res.reading
    assert "Westfall & Young 1993" in res.reading
    assert res.smallest == res.pvalue.idxmin()
    assert repr(res.smallest) in res.reading or "choices (" in res.reading
    assert set(res.frame.columns) >= {"statistic", "pvalue", "pvalue_adjusted"}
    text = str(res)
    assert res.reading in text and "bray_curtis on sqrt" in text
    assert "not size-free" in " ".join(res.notes)
    assert res.min_null.shape == (199,) and not res.min_null.flags.writeable
    html = res._repr_html_()
    assert "p (adjusted)" in html          # displayed in words


def test_spread_reading_and_statistic_name():
    tab = _table(np.random.default_rng(11))
    res = choice_adjusted(tab, "g", FAMILY[:2], aspect="spread", n_permutations=49, rng=1,
                          **P)
    assert "spread" in res.reading and res.aspect == "spread"
    assert res.statistic.name.startswith("F of distances")


def test_a_choice_undefined_for_the_data_is_left_out_and_said():
    tab = _table(np.random.default_rng(12))
    assert (tab.values == 0).any().any()
    fam = FAMILY[:2] + [{"measure": "aitchison", "zeros": "error"}]
    res = choice_adjusted(tab, "g", fam, n_permutations=49, rng=1, **P)
    assert res.n_choices == 2
    bad = res.frame.loc["aitchison [zeros=error]"]
    assert np.isnan(bad["pvalue_adjusted"]) and "zero" in bad["error"].lower()
    assert any("could not be tested" in n for n in res.notes)
    base = choice_adjusted(tab, "g", FAMILY[:2], n_permutations=49, rng=1, **P)
    assert np.array_equal(base.pvalue_adjusted.to_numpy(),
                          res.pvalue_adjusted.to_numpy()[:2])
    with pytest.raises(InputError, match="no choice could be tested"):
        choice_adjusted(tab, "g", [{"measure": "aitchison", "zeros": "error"}],
                        n_permutations=49, rng=1, **P)


def test_progress_and_cancel():
    tab = _table(np.random.default_rng(13))
    seen = []
    choice_adjusted(tab, "g", FAMILY[:3], n_permutations=99, rng=1,
                    progress=lambda d, t: seen.append((d, t)))
    assert seen and seen[-1] == (3 * 99, 3 * 99)
    assert all(a <= b for (a, _), (b, _) in zip(seen, seen[1:]))
    with pytest.raises(Cancelled):
        choice_adjusted(tab, "g", FAMILY[:3], n_permutations=99, rng=1, progress=False,
                        cancel=lambda: True)


def test_inputs_are_not_modified():
    tab = _table(np.random.default_rng(14), units=2, groups=(3, 4))
    values, samples = tab.values.copy(), tab.samples.copy()
    fam = [dict(c) for c in FAMILY]
    keep = [dict(c) for c in fam]
    choice_adjusted(tab, "g", fam, n_permutations=19, rng=1, units="tank", **P)
    assert np.array_equal(tab.values, values)
    pd.testing.assert_frame_equal(tab.samples, samples)
    assert fam == keep


@pytest.mark.parametrize("bad, match", [
    ([{"measure": "bray"}], None),
    ([{"measure": "braycurtis_typo"}], "unknown measure"),
    ([{"measure": "hellinger", "centre": "median"}], "unknown key"),
    ([{"transform": "sqrt"}], "names no measure"),
    ([], "empty"),
    ([3], "must be a dict"),
    ([{"measure": "hellinger", "transform": "cube"}], "cube"),
])
def test_bad_choices_are_named(bad, match):
    tab = _table(np.random.default_rng(15))
    if match is None:                   # an alias is fine
        choice_adjusted(tab, "g", bad, n_permutations=9, rng=1, **P)
        return
    with pytest.raises(InputError, match=match):
        choice_adjusted(tab, "g", bad, n_permutations=9, rng=1, **P)


def test_bad_design_and_options():
    tab = _table(np.random.default_rng(16), units=2, groups=(3, 3))
    with pytest.raises(DesignError, match="'nope'"):
        choice_adjusted(tab, "nope", FAMILY[:1], n_permutations=9, **P)
    with pytest.raises(InputError, match="aspect"):
        choice_adjusted(tab, "g", FAMILY[:1], aspect="size", n_permutations=9, **P)
    with pytest.raises(InputError, match="at least 1"):
        choice_adjusted(tab, "g", FAMILY[:1], n_permutations=0, **P)
    with pytest.raises(DesignError, match="constant within the blocks"):
        choice_adjusted(tab, "g", FAMILY[:1], units=False, blocks="g", n_permutations=9,
                        **P)


def test_examples_are_doctests():
    import doctest

    from tallyform.core import choice_grid
    for mod in (module, choice_grid):
        result = doctest.testmod(mod, optionflags=doctest.NORMALIZE_WHITESPACE)
        assert result.failed == 0 and result.attempted > 0, mod.__name__


def test_a_difference_in_counting_depth_is_said():
    rng = np.random.default_rng(17)
    tab = _table(rng)
    res = choice_adjusted(tab, "g", FAMILY[:2], n_permutations=19, rng=1, **P)
    assert not any("counted to different depths" in n for n in res.notes)
    values = pd.DataFrame(tab.values, index=tab.sample_labels, columns=tab.taxon_labels)
    deeper = values.mul(np.where(tab.samples["g"] == "g1", 3.0, 1.0), axis=0)
    res = choice_adjusted(tly.CommunityTable(deeper, tab.samples), "g", FAMILY[:2],
                          n_permutations=19, rng=1, **P)
    note = next(n for n in res.notes if "counted to different depths" in n)
    gm = np.exp(np.log(deeper.sum(axis=1)).groupby(tab.samples["g"]).mean())
    assert f"{gm['g1'] / gm['g0']:.2g} times" in note and "'g1'" in note
    # fractions (biomass, cover) are not counts: no counting depth to speak of
    res = choice_adjusted(tly.CommunityTable(deeper * 1.01, tab.samples), "g", FAMILY[:2],
                          n_permutations=19, rng=1, **P)
    assert not any("counted to different depths" in n for n in res.notes)


def test_coarse_adjusted_p_values_are_said():
    # 27 choices on 99 relabellings under a null: several relabellings are each some
    # choice's most extreme one, so the adjusted p-values cannot be small; 999 refine them
    tab = _table(np.random.default_rng(5))
    few = choice_adjusted(tab, "g", n_permutations=99, rng=1, **P)
    note = next(n for n in few.notes if "coarse" in n)
    ties = int(note.split(": ")[1].split(" of the")[0])
    low = min(few.min_null.min(), few.pvalue.min())
    assert ties == np.sum(np.isclose(few.min_null, low)) + int(few.pvalue.min() == low)
    assert few.pvalue_adjusted.min() >= ties / 100 - 1e-12
    many = choice_adjusted(tab, "g", n_permutations=999, rng=1, **P)
    assert not any("coarse" in n for n in many.notes)
