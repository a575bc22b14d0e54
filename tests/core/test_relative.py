"""Relative data (reads): what the totals mean, loads and spike-ins, and the refusal of size
results on technical totals. All data are synthetic."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.core.abundance import counting_basis, require_absolute
from tallyform.errors import DesignError, InputError

READS = pd.DataFrame({"Ta": [30, 10, 60, 5, 40, 22], "Tb": [50, 70, 20, 45, 10, 30],
                      "Tc": [0, 20, 20, 50, 50, 8], "spike": [20, 100, 40, 10, 25, 40]},
                     index=[f"s{i}" for i in range(1, 7)], dtype=float)
INFO = pd.DataFrame({"g": list("aaabbb"), "copies": [1e6, 2e6, 4e6, 1e6, 3e6, 5e5],
                     "added": [1000.0, 1000.0, 2000.0, 1000.0, 500.0, 1000.0]},
                    index=READS.index)


def relative(**kw):
    return tly.CommunityTable(READS, INFO, abundance="relative", **kw)


# ---------------------------------------------------------------------------- views
def test_relative_without_load_keeps_reads_and_profiles():
    ab = tly.CommunityTable(READS, INFO)
    rel = relative()
    assert ab.abundance == "absolute" and rel.abundance == "relative"
    np.testing.assert_array_equal(rel.values, ab.values)
    np.testing.assert_array_equal(rel.totals, ab.totals)         # the depths
    pd.testing.assert_frame_equal(rel.profiles, ab.profiles)
    pd.testing.assert_frame_equal(rel.reads, ab.counts)
    np.testing.assert_array_equal(rel.depth, READS.sum(axis=1))
    assert rel.load is None and ab.reads is None and ab.depth is None
    assert ab.fingerprint != rel.fingerprint            # same numbers, different meaning
    assert rel.summary()["totals are"] == "sequencing depths (technical)"
    assert "abundance='relative'" in repr(rel)


def test_load_column_gives_absolute_abundances():
    tab = relative(load="copies")
    # definition (Vandeputte et al. 2017): absolute = profile x load; totals are the loads
    prof = READS.div(READS.sum(axis=1), axis=0)
    np.testing.assert_allclose(tab.values, prof.to_numpy() * INFO["copies"].to_numpy()[:, None],
                               rtol=1e-14)
    np.testing.assert_array_equal(tab.totals.to_numpy(), INFO["copies"].to_numpy())
    # identity: profiles x totals = values, and rows of values sum to the loads
    np.testing.assert_allclose(tab.profiles.to_numpy() * tab.totals.to_numpy()[:, None],
                               tab.values, rtol=1e-14)
    np.testing.assert_allclose(tab.values.sum(axis=1), INFO["copies"], rtol=1e-14)
    np.testing.assert_array_equal(tab.reads, READS)
    assert list(tab.reads.columns) == list(READS.columns)
    assert tab.load.name == "copies" and tab.load_name == "copies"
    assert not tab.is_integer and tab.spike_in is None
    assert tab.summary()["reads per sample, max"] == READS.sum(axis=1).max()


def test_load_given_as_values_or_series():
    by_column = relative(load="copies")
    shuffled = INFO["copies"].iloc[::-1].rename("qpcr")       # matched by label
    by_series = relative(load=shuffled)
    by_list = relative(load=INFO["copies"].tolist())
    np.testing.assert_array_equal(by_series.values, by_column.values)
    np.testing.assert_array_equal(by_list.values, by_column.values)
    assert by_series.load_name == "qpcr" and by_list.load_name == "load"


def test_spike_in_worked_example():
    tab = relative(spike_in={"taxon": "spike", "added": "added"})
    # worked example, sample s1: 30 + 50 + 0 reads of the community and 20 of a spike-in
    # added at 1000: load = 1000 x 80 / 20 = 4000 (Stammler et al. 2016); s2: 1000 x 100 / 100
    assert tab.load["s1"] == pytest.approx(4000.0, rel=1e-15)
    assert tab.load["s2"] == pytest.approx(1000.0, rel=1e-15)
    assert tab.values[0].tolist() == pytest.approx([1500.0, 2500.0, 0.0], rel=1e-15)
    assert list(tab.taxon_labels) == ["Ta", "Tb", "Tc"]        # the spike-in is removed
    assert tab.spike_reads.tolist() == READS["spike"].tolist()
    assert tab.spike_in == {"taxon": "spike", "added": "added"}
    assert tab.depth.tolist() == READS.drop(columns="spike").sum(axis=1).tolist()
    s = tab.summary()
    assert s["spike-in taxon"] == "spike" and s["spike-in reads, min"] == 10
    assert "spike-in 'spike'" in s["totals are"]


def test_spike_in_recovers_loads_exactly_from_expected_reads():
    # identity: when reads are in exact proportion to the amounts in the extract,
    # s = N A / (L + A) and N - s = N L / (L + A), so A (N - s) / s = L for any depth N
    rng = np.random.default_rng(3)
    n, p = 8, 12
    load = rng.lognormal(20, 1, n)
    share = rng.dirichlet(np.ones(p), n)
    added = rng.uniform(1e7, 5e7, n)
    depth = rng.uniform(1e3, 1e6, n)
    extract = np.column_stack([share * load[:, None], added])
    reads = depth[:, None] * extract / extract.sum(axis=1, keepdims=True)
    info = pd.DataFrame({"added": added}, index=[f"s{i}" for i in range(n)])
    frame = pd.DataFrame(reads, index=info.index, columns=[f"t{j}" for j in range(p)] + ["sp"])
    tab = tly.CommunityTable(frame, info, abundance="relative",
                             spike_in={"taxon": "sp", "added": "added"})
    np.testing.assert_allclose(tab.load, load, rtol=1e-12)
    np.testing.assert_allclose(tab.values, share * load[:, None], rtol=1e-12)


def test_subset_keeps_absolute_abundances():
    tab = relative(spike_in={"taxon": "spike", "added": "added"})
    sub = tab.subset(taxa=["Ta", "Tb"])
    # the kept taxa keep their absolute abundances: the load shrinks to their sum
    np.testing.assert_allclose(sub.values, tab.values[:, :2], rtol=1e-14)
    np.testing.assert_allclose(sub.totals, tab.values[:, :2].sum(axis=1), rtol=1e-14)
    assert sub.abundance == "relative" and sub.spike_in == tab.spike_in
    np.testing.assert_array_equal(sub.reads, READS[["Ta", "Tb"]])
    rows = tab.subset(samples=["s2", "s5"])
    np.testing.assert_array_equal(rows.totals, tab.totals[["s2", "s5"]])
    assert rows.spike_reads.tolist() == [100, 25]
    plain = relative().subset(samples=["s1", "s2"])
    assert plain.abundance == "relative" and plain.load is None


def test_effort_still_divides_loads():
    tab = relative(load="copies", effort="added")
    tb = tab.totals_by("g", per_effort=True)
    a = INFO["copies"][:3] / INFO["added"][:3]
    assert tb.loc["a", "mean"] == pytest.approx(a.mean())


def test_inputs_are_not_modified():
    r0, i0 = READS.copy(), INFO.copy()
    relative(spike_in={"taxon": "spike", "added": "added"})
    relative(load="copies")
    pd.testing.assert_frame_equal(READS, r0)
    pd.testing.assert_frame_equal(INFO, i0)


# ---------------------------------------------------------------------------- bad input
@pytest.mark.parametrize("value, shown", [(0.0, "0"), (-5.0, "-5"), (np.nan, "nan")])
def test_bad_load_names_sample_and_column(value, shown):
    info = INFO.copy()
    info.loc["s4", "copies"] = value
    with pytest.raises(InputError, match=rf"absolute load must be a positive number; "
                                         rf"sample 's4' has {shown}") as exc:
        tly.CommunityTable(READS, info, abundance="relative", load="copies")
    assert "'copies'" in str(exc.value) and "qPCR" in str(exc.value)


def test_load_column_unknown_or_wrong_length():
    with pytest.raises(DesignError, match="load column 'qpcr' is not in the sample table"):
        relative(load="qpcr")
    with pytest.raises(InputError, match="load has 2 value"):
        relative(load=[1.0, 2.0])


def test_spike_in_absent_from_a_sample():
    reads = READS.copy()
    reads.loc[["s3", "s5"], "spike"] = 0
    with pytest.raises(InputError, match="spike-in 'spike' has no reads in sample 's3' "
                                         r"\(2 such sample\(s\): 's3', 's5'\)") as exc:
        tly.CommunityTable(reads, INFO, abundance="relative",
                           spike_in={"taxon": "spike", "added": "added"})
    assert "taxon 'spike'" in str(exc.value) and "load='column'" in str(exc.value)


def test_spike_in_errors():
    with pytest.raises(InputError, match="spike-in taxon 'Spike' is not a taxon"):
        relative(spike_in={"taxon": "Spike", "added": "added"})
    with pytest.raises(InputError, match="keys 'taxon' and 'added'"):
        relative(spike_in={"taxon": "spike"})
    with pytest.raises(InputError, match="keys 'taxon' and 'added'"):
        relative(spike_in="spike")
    info = INFO.copy()
    info.loc["s2", "added"] = -1
    with pytest.raises(InputError, match="amount of spike-in 'spike' added must be a "
                                         "positive number; sample 's2'"):
        tly.CommunityTable(READS, info, abundance="relative",
                           spike_in={"taxon": "spike", "added": "added"})
    only_spike = READS.copy()
    only_spike.loc["s6", ["Ta", "Tb", "Tc"]] = 0
    with pytest.raises(InputError, match=r"1 sample\(s\) have a total of 0: 's6'"):
        tly.CommunityTable(only_spike, INFO, abundance="relative",
                           spike_in={"taxon": "spike", "added": "added"})
    dropped = tly.CommunityTable(only_spike, INFO, abundance="relative", empty="drop",
                                 spike_in={"taxon": "spike", "added": "added"})
    assert dropped.dropped["samples"] == ("s6",) and dropped.n_samples == 5


def test_keyword_combinations_are_refused():
    with pytest.raises(InputError, match="only needed for relative data.*abundance='relative'"):
        tly.CommunityTable(READS, INFO, load="copies")
    with pytest.raises(InputError, match="`spike_in=` gives"):
        tly.CommunityTable(READS, INFO, spike_in={"taxon": "spike", "added": "added"})
    with pytest.raises(InputError, match="either `load=`.*not both"):
        relative(load="copies", spike_in={"taxon": "spike", "added": "added"})
    with pytest.raises(InputError, match="`abundance` must be one of"):
        tly.CommunityTable(READS, INFO, abundance="reads")


def test_sequencing_like_table_gets_a_note_and_nothing_else():
    rng = np.random.default_rng(1)
    reads = rng.poisson(40, (6, 150)).astype(float)        # 150 taxa, ~6000 per sample
    tab = tly.CommunityTable(reads)
    assert any("look like sequencing reads" in n and "abundance='relative'" in n
               for n in tab.notes)
    assert tab.abundance == "absolute"                    # never switched silently
    assert not tly.CommunityTable(reads, abundance="relative").notes
    assert not tly.CommunityTable(reads[:, :50]).notes    # 50 taxa: no note
    assert not tly.CommunityTable(reads / 7).notes        # not whole numbers


def test_depths_far_apart_get_a_note():
    # counting noise ~ 1 / depth (Warton et al. 2012): composition tests see depth too
    deep = READS.copy()
    deep.loc[["s4", "s5", "s6"]] *= 4
    tab = tly.CommunityTable(deep, INFO, abundance="relative", load="copies")
    (note,) = [n for n in tab.notes if "sequencing depths range" in n]
    # by hand: the smallest depth is s1's 100 reads, the largest s5's 4 x 125
    assert "from 100 to 500 reads (5.0-fold)" in note and "tab.depth" in note
    assert not relative().notes                         # 100 to 200: no note


# ---------------------------------------------------------------------------- refusals
def test_size_results_refused_without_load():
    tab = relative()
    for call in (lambda: tly.size_test(tab, "g"),
                 lambda: tly.size_shape(tab, "bray_curtis"),
                 lambda: tly.taxon_contributions(tab, "g", "a", "b", n_boot=0),
                 lambda: tly.audit(tab, "g", n_sim=2, n_permutations=19, rng=1)):
        with pytest.raises(InputError, match="relative abundances") as exc:
            call()
        msg = str(exc.value)
        assert "sequencing depths" in msg and "load='column'" in msg and "spike_in=" in msg
    # the scan keeps going past cells it cannot compute: every cell says why
    grid = tly.scan(tab, ["bray_curtis", "hellinger"], ["none"]).frame
    assert grid["size_only"].isna().all()
    assert grid["error"].str.contains("relative abundances").all()


def test_compare_groups_on_relative_data_compares_shape_and_spread_only():
    c = tly.compare_groups(relative(), "g", n_permutations=99, rng=1)
    assert c.size is None and np.isnan(c.pvalue["size"])
    assert "sequencing depths" in c.size_skipped and "load=" in c.size_skipped
    assert c.reading.startswith("Size was not tested: the totals are sequencing depths")
    assert np.isfinite(c.pvalue[["shape", "spread", "permanova"]]).all()
    assert c.depth is not None          # reads are counts: rarefied like any counts
    assert c.to_frame().loc["size", "detected"] == False  # noqa: E712 (numpy bool)


def test_shape_and_spread_run_on_relative_data_as_on_the_reads():
    ab, rel = tly.CommunityTable(READS, INFO), relative()
    for tab in (ab, rel):
        d = tly.dissimilarity(tab, "chi_square")
        tab.p = tly.permanova(d, tab, ["g"], n_permutations=199, rng=4).pvalue["g"]
        tab.q = tly.dispersion_test(d, tab.samples["g"], n_permutations=199, rng=4).pvalue
    assert (ab.p, ab.q) == (rel.p, rel.q)


def test_negbin_refused_on_loads():
    with pytest.raises(InputError, match="negative-binomial size test models counts"):
        tly.size_test(relative(load="copies"), "g", method="negbin")


def test_require_absolute_notes():
    assert require_absolute(tly.CommunityTable(READS, INFO), "x") == ()
    (note,) = require_absolute(relative(load="copies"), "x")
    assert "'copies'" in note and "Vandeputte" in note
    res = tly.size_test(relative(load="copies"), "g", method="welch")
    assert any("Vandeputte" in n for n in res.notes)


def test_counting_basis():
    counts, scale = counting_basis(relative(load="copies"))
    np.testing.assert_array_equal(counts, READS.to_numpy())
    np.testing.assert_allclose(counts * scale[:, None], relative(load="copies").values,
                               rtol=1e-14)
    counts, scale = counting_basis(tly.CommunityTable(READS, INFO))
    assert np.all(scale == 1) and np.array_equal(counts, READS.to_numpy())


def test_run_records_refused_steps_and_runs_the_rest():
    tab = relative()
    spec = tly.AnalysisSpec(group="g", n_permutations=19, audit_n_sim=2, scan_measures=(
        "bray_curtis",), scan_transforms=("none",), abundance="relative")
    res = tly.run(spec, tab)
    for step in ("size_shape", "contributions", "audit"):
        assert "relative abundances" in res.skipped[step], step
    assert res.comparison is not None and res.comparison.size is None   # shape and spread
    assert res.permanova is not None and res.pairwise is not None
    assert res.ordination is not None
