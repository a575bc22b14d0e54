"""Proof that loads make size meaningful again: simulate absolute abundances, sequence them
(multinomial reads at random depths, one group sequenced 2-3 times deeper), and compare every
size result on the reads-with-loads table with the same result on the absolute table.
All data are synthetic."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.core.audit import null_shape_tables


def study(seed, *, n_a=14, n_b=10, p=60, size_ratio=1.0, spike_share=0.05):
    """Absolute counts (about 10^5 to 10^6 cells per sample), their reads at depths of 20 000
    to 60 000 (group b 2.5 times deeper), and a spike-in added to every extract."""
    rng = np.random.default_rng(seed)
    n = n_a + n_b
    g = np.array(["a"] * n_a + ["b"] * n_b)
    base = np.sort(rng.lognormal(0.0, 1.3, p))[::-1]
    base /= base.sum()
    shift = np.where(np.arange(p) % 5 == 0, 2.0, 1.0)                # a composition effect
    share = base * np.where(g[:, None] == "b", shift, 1.0) * np.exp(rng.normal(0, 0.5, (n, p)))
    share /= share.sum(axis=1, keepdims=True)
    total = np.rint(3e5 * np.where(g == "b", size_ratio, 1.0) * np.exp(rng.normal(0, 0.5, n)))
    absolute = rng.multinomial(total.astype(np.int64), share).astype(float)
    load = absolute.sum(axis=1)
    added = spike_share * 3e5 * rng.uniform(0.8, 1.2, n)             # known amount per sample
    depth = rng.integers(20000, 60000, n) * np.where(g == "b", 2.5, 1.0)
    extract = np.column_stack([absolute, added])
    reads = rng.multinomial(depth.astype(np.int64), extract / extract.sum(axis=1)[:, None])
    idx = pd.Index([f"s{i:02d}" for i in range(n)])
    taxa = [f"t{j:02d}" for j in range(p)]
    info = pd.DataFrame({"g": g, "true_load": load, "added": added}, index=idx)
    A = tly.CommunityTable(pd.DataFrame(absolute, index=idx, columns=taxa), info, empty="drop")
    frame = pd.DataFrame(reads.astype(float), index=idx, columns=taxa + ["spike"])
    return A, frame, info


def with_load(frame, info):
    return tly.CommunityTable(frame.drop(columns="spike"), info, abundance="relative",
                              load="true_load", empty="drop")


@pytest.mark.parametrize("method", ["anova", "welch", "kruskal", "permutation"])
def test_size_test_on_loads_equals_size_test_on_absolute_data(method):
    A, frame, info = study(1)
    R = with_load(frame, info)
    kw = {"n_permutations": 199, "rng": 7} if method == "permutation" else {}
    on_abs = tly.size_test(A, "g", method=method, **kw)
    on_loads = tly.size_test(R, "g", method=method, **kw)
    # the loads are the absolute totals, so the statistics coincide: same p (same seed)
    assert on_loads.statistic == pytest.approx(on_abs.statistic, rel=1e-12)
    assert round(on_loads.pvalue, 3) == round(on_abs.pvalue, 3)
    pd.testing.assert_frame_equal(on_loads.summary, on_abs.summary, rtol=1e-12)


def test_reads_read_as_absolute_give_the_depth_artefact():
    # the totals have the same law in both groups; the reads of b are 2.5 times deeper
    A, frame, info = study(2)
    reads = tly.CommunityTable(frame.drop(columns="spike"), info)
    wrong = tly.size_test(reads, "g", method="welch")
    right = tly.size_test(with_load(frame, info), "g", method="welch")
    assert wrong.pvalue < 1e-4 and wrong.summary.loc["b", "ratio"] > 1.8
    assert right.pvalue == pytest.approx(tly.size_test(A, "g", method="welch").pvalue)


@pytest.mark.parametrize("seed", [3, 4, 5])
@pytest.mark.parametrize("measure, transform", [("bray_curtis", None), ("hellinger", None),
                                                ("euclidean", None), ("bray_curtis", "sqrt")])
def test_partition_with_loads_close_to_absolute_partition(seed, measure, transform):
    # (transforms that weigh the rarest taxa up, log1p or presence, differ more: taxa with a
    # few cells in 3 x 10^5 are often not sequenced at all, a detection limit of the reads)
    A, frame, info = study(seed, size_ratio=0.6)
    R = with_load(frame, info)
    fa = tly.size_shape(A, measure, transform=transform, shape_dims=3).fractions
    fr = tly.size_shape(R, measure, transform=transform, shape_dims=3).fractions
    assert np.abs(fa - fr).max() < 0.02, (fa, fr)


def test_spike_in_loads_recover_true_loads():
    for seed in (6, 7):
        A, frame, info = study(seed, size_ratio=0.5)
        S = tly.CommunityTable(frame, info, abundance="relative",
                               spike_in={"taxon": "spike", "added": "added"})
        # load_i = added_i (N_i - s_i) / s_i estimates the absolute total (Stammler et al.
        # 2016): exact for expected reads (see test_relative), close at these depths
        assert np.corrcoef(S.load, info["true_load"])[0, 1] > 0.99
        assert np.corrcoef(np.log(S.load), np.log(info["true_load"]))[0, 1] > 0.99
        assert np.median(np.abs(S.load / info["true_load"] - 1)) < 0.05
        w_abs = tly.size_test(A, "g", method="welch").summary.loc["b", "ratio"]
        w_spk = tly.size_test(S, "g", method="welch").summary.loc["b", "ratio"]
        assert w_spk == pytest.approx(w_abs, rel=0.05)


def test_audit_keeps_the_loads_and_counts_at_the_depths():
    _, frame, info = study(8, n_a=6, n_b=6, p=20)
    R = with_load(frame, info)
    draws = list(null_shape_tables(R, 3, model="multinomial", rng=1))
    for x in draws:
        # identity: reads drawn at the observed depths, scaled by load / depth, sum to loads
        np.testing.assert_allclose(x.sum(axis=1), R.totals, rtol=1e-12)
        # the counting noise is that of the reads: x * depth / load are whole numbers
        back = x * (R.depth.to_numpy() / R.totals.to_numpy())[:, None]
        np.testing.assert_allclose(back, np.rint(back), atol=1e-6)
    res = tly.audit(R, "g", "bray_curtis", n_sim=3, n_permutations=19, rng=1)
    assert res.n_sim == 3 and 0 <= res.rate <= 1


def test_contributions_size_side_uses_loads():
    A, frame, info = study(9, size_ratio=0.5)
    R = with_load(frame, info)
    ka = tly.taxon_contributions(A, "g", "a", "b", n_boot=0)
    kr = tly.taxon_contributions(R, "g", "a", "b", n_boot=0)
    # the reference (total) ratio is that of the loads, which are the absolute totals
    assert kr.size_reference["log2_ratio"] == pytest.approx(ka.size_reference["log2_ratio"],
                                                            rel=1e-12)
    common = ka.size.index
    np.testing.assert_allclose(kr.size.loc[common, "log2_ratio"],
                               ka.size.loc[common, "log2_ratio"], atol=0.15)
