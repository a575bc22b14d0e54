"""Shape and spread tests protected against counting noise (rarefaction, exact permutation).

All data are synthetic.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import tallyform as tly
from tallyform.core.counting import shape_test, spread_test
from tallyform.core.counting_stats import (Embedding, location_statistic, spread_distances,
                                           spread_squared, spread_statistic)
from tallyform.core.dispersion import centroid_distances_squared
from tallyform.core.dissimilarity import dissimilarity
from tallyform.core.errors import Cancelled, DesignError, InputError
from tallyform.core.rarefaction import multinomial_noise


def two_groups(seed, totals=(50, 500), sizes=(8, 8), p=20, sd=(0.5, 0.5), shift=None):
    """Synthetic table: log-normal shares around one profile, multinomial counts."""
    rng = np.random.default_rng(seed)
    base = np.sort(rng.lognormal(0, 1.0, p))[::-1]
    base /= base.sum()
    rows, groups = [], []
    for k, (n, tot) in enumerate(zip(sizes, totals)):
        b = base.copy()
        if shift is not None and k == 1:
            b[:5] *= shift
        s = b * np.exp(sd[k] * rng.standard_normal((n, p)))
        rows.append(rng.multinomial(tot, s / s.sum(axis=1, keepdims=True)))
        groups += ["a" if k == 0 else "b"] * n
    x = np.vstack(rows)
    labels = [f"s{i:02d}" for i in range(len(groups))]
    return tly.CommunityTable(pd.DataFrame(x, index=labels),
                              pd.DataFrame({"g": groups}, index=labels), empty="drop")


# ------------------------------------------------------------------ the statistics
def test_pseudo_f_is_the_anova_f_and_permanova():
    # identity: with Euclidean distances on one variable the pseudo-F is the one-way ANOVA F
    # (reference: scipy.stats.f_oneway); on chi-square features it is PERMANOVA's pseudo-F
    rng = np.random.default_rng(1)
    y = rng.normal(size=21)
    codes = np.repeat([0, 1, 2], 7)
    ng = np.bincount(codes)
    f = location_statistic(Embedding(y[:, None]), codes, ng, statistic="pseudo_f")[0]
    assert f == pytest.approx(stats.f_oneway(*[y[codes == k] for k in range(3)]).statistic)
    tab = two_groups(2)
    d = dissimilarity(tab, "chi_square")
    codes = (tab.samples["g"] == "b").to_numpy().astype(int)
    ours = location_statistic(Embedding(d.features), codes, np.bincount(codes),
                              statistic="pseudo_f")[0]
    ref = tly.permanova(d, tab.samples, ["g"], n_permutations=19, rng=1).statistic["g"]
    assert ours == pytest.approx(ref, rel=1e-10)


def test_welch_statistic_is_welch_t_squared():
    # identity: for two groups on one variable W = t^2 of Welch's t
    # (reference: scipy.stats.ttest_ind(equal_var=False))
    rng = np.random.default_rng(3)
    y = np.r_[rng.normal(0, 1, 6), rng.normal(0.7, 3, 11)]
    codes = np.repeat([0, 1], [6, 11])
    w = location_statistic(Embedding(y[:, None]), codes, np.bincount(codes))[0]
    t = stats.ttest_ind(y[:6], y[6:], equal_var=False).statistic
    assert w == pytest.approx(t ** 2, rel=1e-10)


def test_spread_distances_levene_and_eigen_free_form():
    # identity: on one variable z_i = |y_i - mean_g| sqrt(n_g / (n_g - 1)), and the spread F
    # is the one-way ANOVA F of these z (reference: scipy.stats.f_oneway)
    rng = np.random.default_rng(4)
    y = np.r_[rng.normal(0, 1, 5), rng.normal(0, 2, 9)]
    codes = np.repeat([0, 1], [5, 9])
    ng = np.bincount(codes)
    emb = Embedding(y[:, None])
    z = spread_distances(emb, codes, ng)[0]
    mean = np.where(codes == 0, y[:5].mean(), y[5:].mean())
    expect = np.abs(y - mean) * np.sqrt(ng[codes] / (ng[codes] - 1))
    np.testing.assert_allclose(z, expect, rtol=1e-10)
    assert spread_statistic(emb, codes, ng)[0] == pytest.approx(
        stats.f_oneway(expect[:5], expect[5:]).statistic, rel=1e-10)
    # a non-Euclidean measure: principal coordinates with imaginary axes subtracted equal the
    # eigen-free form z^2 = mean_l d_il^2 - sum_lm d_lm^2 / (2 n_g^2) (Anderson 2006)
    from tallyform.core.counting_design import embed
    tab = two_groups(5)
    x = tab.values.astype(np.int64)
    emb, _ = embed(x, list(tab.sample_labels), tab.taxon_labels, "bray_curtis", None, {},
                   noise=False)
    assert emb.sign is not None and (emb.sign < 0).any()          # imaginary axes present
    codes = (tab.samples["g"] == "b").to_numpy().astype(int)
    ng = np.bincount(codes)
    d = dissimilarity(pd.DataFrame(x, index=tab.sample_labels), "bray_curtis")
    ref = centroid_distances_squared(d, codes, use="eigen-free") * ng[codes] / (ng[codes] - 1)
    np.testing.assert_allclose(spread_squared(emb, codes, ng)[0], ref, atol=1e-10)


def test_noise_correction_removes_counting_noise_on_average():
    # simulation against the closed form: every sample is multinomial(N_i, q) around ONE
    # profile, so the biological spread is 0; corrected squared distances average 0, and
    # uncorrected ones average the counting noise sum_j q_j (1 - q_j) / (c_j N) (common
    # practice: the multinomial variance)
    rng = np.random.default_rng(6)
    q = np.array([0.4, 0.3, 0.2, 0.07, 0.03])
    c = q.copy()                                        # fixed chi-square masses
    totals = np.r_[np.full(6, 30), np.full(9, 300)]
    codes = np.repeat([0, 1], [6, 9])
    ng = np.bincount(codes)
    u_corr, u_raw = [], []
    for _ in range(3000):
        x = rng.multinomial(totals, np.broadcast_to(q, (15, 5)))
        f = x / totals[:, None] / np.sqrt(c)
        v = multinomial_noise(x, 1 / c)
        u_corr.append(spread_squared(Embedding(f, noise=v), codes, ng)[0])
        u_raw.append(spread_squared(Embedding(f), codes, ng)[0])
    u_corr, u_raw = np.array(u_corr), np.array(u_raw)
    noise = np.sum(q * (1 - q) / c)
    for k, n in ((0, 30), (1, 300)):
        cols = codes == k
        m = u_corr[:, cols].mean()
        se = u_corr[:, cols].mean(axis=1).std(ddof=1) / np.sqrt(u_corr.shape[0])
        assert abs(m) < 4.5 * se
        # uncorrected: n_g/(n_g-1) E||f_i - c_g||^2 = v_i + (1/n_g)(mean of v in g - v_i)
        # ... with one total per group this is v = noise / N
        assert u_raw[:, cols].mean() == pytest.approx(noise / n, rel=0.05)


def test_a_batch_equals_one_relabelling_at_a_time():
    tab = two_groups(7, sizes=(5, 7))
    f = dissimilarity(tab, "hellinger").features
    codes = (tab.samples["g"] == "b").to_numpy().astype(int)
    ng = np.bincount(codes)
    rng = np.random.default_rng(0)
    labels = np.array([rng.permutation(codes) for _ in range(6)])
    emb = Embedding(f, noise=np.linspace(0.01, 0.02, len(codes)))
    for fn in (location_statistic, spread_statistic):
        batch = fn(emb, labels, ng)
        single = [fn(emb, lab[None, :], ng)[0] for lab in labels]
        np.testing.assert_allclose(batch, single, rtol=1e-12)


# ------------------------------------------------------------------ behaviour
def test_same_seed_same_answer():
    tab = two_groups(8)
    for fn in (shape_test, spread_test):
        a = fn(tab, "g", n_permutations=99, rng=3, units=False)
        b = fn(tab, "g", n_permutations=99, rng=3, units=False)
        assert a.pvalue == b.pvalue and a.statistic == b.statistic
        np.testing.assert_array_equal(a.null_distribution, b.null_distribution)
        c = fn(tab, "g", n_permutations=99, rng=3, units=False, n_draws=3)
        assert c.draw_pvalues.size == 3
        assert c.pvalue == pytest.approx(min(1.0, 1.5 * np.sort(c.draw_pvalues)[1]))


def test_pure_size_difference_fools_the_unadjusted_tests_only():
    # 30 synthetic data sets, 8 + 8 samples of one law of composition, totals 30 vs 600:
    # the unadjusted spread test fires on most; the rarefied tests at their level
    # (binomial bound: more than 6 of 30 at a true rate of 5 % has probability < 0.002,
    # scipy.stats.binom.sf(6, 30, 0.05))
    hits = {"shape": 0, "spread": 0, "spread_raw": 0}
    for s in range(30):
        tab = two_groups(100 + s, totals=(30, 600))
        kw = dict(n_permutations=99, units=False, rng=s)
        hits["shape"] += shape_test(tab, "g", **kw).pvalue <= 0.05
        hits["spread"] += spread_test(tab, "g", **kw).pvalue <= 0.05
        hits["spread_raw"] += spread_test(tab, "g", adjust="none", **kw).pvalue <= 0.05
    assert stats.binom.sf(6, 30, 0.05) < 0.002
    assert hits["shape"] <= 6 and hits["spread"] <= 6
    assert hits["spread_raw"] >= 20


def test_real_differences_are_found():
    tab = two_groups(9, totals=(100, 400), sizes=(10, 10), shift=4.0)
    assert shape_test(tab, "g", n_permutations=199, units=False, rng=1).pvalue <= 0.01
    tab = two_groups(10, totals=(400, 100), sizes=(10, 10), sd=(0.3, 1.2))
    assert spread_test(tab, "g", n_permutations=199, units=False, rng=1).pvalue <= 0.01


def test_small_designs_enumerate_every_relabelling():
    # 3 + 3 samples: C(6, 3) = 20 relabellings (math.comb), so the p-value is a multiple of
    # 1 / 20 and at least 1 / 20
    tab = two_groups(11, sizes=(3, 3))
    res = shape_test(tab, "g", n_permutations=999, units=False, rng=1)
    assert res.exact and res.n_permutations == 20
    assert res.pvalue >= 1 / 20 and (res.pvalue * 20) == pytest.approx(round(res.pvalue * 20))
    assert any("smallest possible p-value is 0.1" in n for n in res.notes)   # 2/20: labels swap


def test_notes_and_reading_say_what_was_done():
    tab = two_groups(12, totals=(50, 500))
    res = spread_test(tab, "g", n_permutations=99, units=False, rng=1)
    assert res.depth == int(tab.totals.min())
    assert res.size_ratio == pytest.approx(10, rel=0.01)
    text = " ".join(res.notes)
    assert "rarefied to" in text and "Sanders 1968" in text
    assert "10-fold" in text and "counting noise" in text
    assert "one random rarefaction" in text
    assert "counting noise removed" in res.method
    assert "cannot by itself" in res.reading
    raw = spread_test(tab, "g", adjust="none", n_permutations=99, units=False, rng=1)
    assert raw.depth is None and "unadjusted" in raw.method
    assert "can mistake" in raw.reading
    frame = res.to_frame()
    assert list(frame.index) == ["a", "b"] and frame["n"].tolist() == [8, 8]
    assert set(res.distances.index) == set(tab.sample_labels)
    # a depth above some totals leaves those samples out, and says so
    counts = tab.counts.copy()
    counts.iloc[9] = counts.iloc[9] // 40                  # one sample far below the others
    small = tly.CommunityTable(counts, tab.samples, empty="drop")
    left = shape_test(small, "g", depth=50, n_permutations=99, units=False, rng=1)
    assert left.left_out == ("s09",) and any("'s09'" in n and "left out" in n
                                              for n in left.notes)
    assert left.to_frame()["n"].tolist() == [8, 7]


def test_other_measures_and_options():
    tab = two_groups(13)
    for m in ("aitchison", "bray_curtis", "hellinger"):
        r = spread_test(tab, "g", measure=m, n_permutations=49, units=False, rng=1)
        assert 0 < r.pvalue <= 1 and any("No closed-form" in n for n in r.notes)
    r = shape_test(tab, "g", statistic="pseudo_f", n_permutations=49, units=False, rng=1)
    assert "pseudo-F" in r.method
    r = spread_test(tab, "g", noise_correction=False, n_permutations=49, units=False, rng=1)
    assert "noise removed" not in r.method


def test_whole_units_are_compared():
    rng = np.random.default_rng(14)
    rows = rng.multinomial(80, np.full(10, 0.1), size=24)
    labels = [f"s{i:02d}" for i in range(24)]
    info = pd.DataFrame({"g": np.repeat(["a", "b"], 12),
                         "tank": [f"t{i // 3}" for i in range(24)]}, index=labels)
    tab = tly.CommunityTable(pd.DataFrame(rows, index=labels), info)
    res = shape_test(tab, "g", n_permutations=99, rng=1)
    assert res.units == "tank" and res.to_frame()["n"].tolist() == [4, 4]
    assert any("Sampling units detected" in n for n in res.notes)
    sp = spread_test(tab, "g", units="tank", n_permutations=99, rng=1)
    assert len(sp.distances) == 8
    flat = shape_test(tab, "g", units=False, n_permutations=99, rng=1)
    assert flat.units is None and flat.to_frame()["n"].tolist() == [12, 12]
    info2 = info.assign(g=np.tile(["a", "b"], 12))          # varies within every tank
    tab2 = tly.CommunityTable(pd.DataFrame(rows, index=labels), info2)
    with pytest.raises(DesignError, match="varies within the units of 'tank'"):
        shape_test(tab2, "g", units="tank", rng=1)


def test_blocks_restrict_the_relabellings():
    # 2 blocks of 2 + 2 samples: within-block relabellings only, C(4, 2)^2 = 36 of them
    # (math.comb), and the group of a block is never moved to the other block
    tab = two_groups(20, sizes=(4, 4))
    info = tab.samples.assign(bench=["x", "x", "y", "y", "x", "x", "y", "y"])
    tab = tly.CommunityTable(tab.counts, info)
    for blocks in ("bench", info["bench"], list(info["bench"])):
        res = shape_test(tab, "g", blocks=blocks, n_permutations=999, units=False, rng=1)
        assert res.exact and res.n_permutations == 36
        assert "within blocks" in res.scheme
    with pytest.raises(InputError, match="`blocks` has 3 value"):
        shape_test(tab, "g", blocks=["x", "y", "x"], units=False)


def test_errors_name_the_argument():
    tab = two_groups(15)
    with pytest.raises(InputError, match="`adjust` must be one of"):
        shape_test(tab, "g", adjust="thin")
    with pytest.raises(InputError, match="`statistic` must be one of"):
        shape_test(tab, "g", statistic="t")
    with pytest.raises(InputError, match="`n_draws` must be a whole number"):
        spread_test(tab, "g", n_draws=0)
    with pytest.raises(InputError, match="with adjust='none' there is one data set"):
        spread_test(tab, "g", adjust="none", n_draws=3)
    with pytest.raises(InputError, match="no meaning with adjust='none'"):
        spread_test(tab, "g", adjust="none", depth=10)
    with pytest.raises(InputError, match="at least 19"):
        shape_test(tab, "g", n_permutations=5)
    with pytest.raises(InputError, match="`noise_correction` must be True or False"):
        spread_test(tab, "g", noise_correction="yes")
    with pytest.raises(DesignError, match="'nope' is not in the sample table"):
        shape_test(tab, "nope")
    frac = tly.CommunityTable(tab.counts * 0.5, tab.samples)
    with pytest.raises(InputError, match="whole-number counts"):
        shape_test(frac, "g")
    assert 0 <= shape_test(frac, "g", adjust="none", n_permutations=19, units=False,
                           rng=1).pvalue <= 1
    counts = tab.counts.copy()
    counts.loc["s00"] = 0
    counts.iloc[0, 0] = 1                                    # one individual in s00
    one = tly.CommunityTable(counts, tab.samples)
    with pytest.raises(InputError, match="depth of 1 individual.*'s00'"):
        spread_test(one, "g", units=False)
    big = int(np.sort(tab.totals)[-2])       # only group b has samples this large
    with pytest.raises(DesignError, match=r"\[.a.\] of .g. keep fewer than 2 samples with"):
        shape_test(tab, "g", depth=big, units=False)


def test_progress_cancel_and_untouched_inputs():
    tab = two_groups(16)
    frame, info = tab.counts.copy(), tab.samples.copy()
    seen = []
    res = spread_test(tly.CommunityTable(frame, info), "g", n_permutations=99, units=False,
                      n_draws=2, rng=1, progress=lambda d, t: seen.append((d, t)))
    assert seen[-1] == (198, 198) and res.n_permutations == 99
    pd.testing.assert_frame_equal(frame, tab.counts)
    pd.testing.assert_frame_equal(info, tab.samples)
    with pytest.raises(Cancelled, match="cancelled"):
        shape_test(tab, "g", n_permutations=99, units=False, rng=1, cancel=lambda: True)


def test_array_entry_for_simulation_loops_matches_the_public_tests():
    # the audit's fast entry runs the same draws and permutations as shape_test/spread_test
    # given the same random streams
    from tallyform.core.counting import rarefied_pvalues
    tab = two_groups(18)
    x = tab.values
    g = tab.samples["g"].to_numpy()
    streams = np.random.default_rng(5).spawn(2)
    ps = rarefied_pvalues(x, g, n_permutations=99, rng=5)
    assert ps[0] == shape_test(tab, "g", n_permutations=99, units=False, rng=streams[0]).pvalue
    assert ps[1] == spread_test(tab, "g", n_permutations=99, units=False,
                                rng=streams[1]).pvalue


def test_fast_embedding_agrees_with_dissimilarity():
    # the per-draw embedding skips the table funnel; it must give the distances
    # tallyform.dissimilarity gives, for every registered measure it accepts
    from tallyform.core.counting_design import embed
    from tallyform.core.measures import MEASURES
    tab = two_groups(19, sizes=(5, 6))
    x = tab.values.astype(np.int64)
    labels = list(tab.sample_labels)
    for name in MEASURES:
        for tr in (None, "sqrt"):
            emb, _ = embed(x, labels, tab.taxon_labels, name, tr, {}, noise=False)
            f = emb.features
            s = np.ones(f.shape[1]) if emb.sign is None else emb.sign
            diff = f[:, None, :] - f[None, :, :]
            ours = np.sqrt(np.clip(np.einsum("ijk,k->ij", diff ** 2, s), 0, None))
            ref = dissimilarity(pd.DataFrame(x, index=labels), name, transform=tr).square()
            np.testing.assert_allclose(ours, ref, atol=1e-7, err_msg=f"{name}, {tr}")


def test_figures():
    tab = two_groups(17)
    sp = spread_test(tab, "g", n_permutations=49, units=False, rng=1)
    fig = sp.figure()
    assert len(fig.data) == 2 and f"p = {sp.pvalue:.4g}" in fig.layout.title.text
    box = sp.figure(kind="distances")
    assert {t.name for t in box.data} >= {"a", "b", "group mean"}
    sh = shape_test(tab, "g", n_permutations=49, units=False, rng=1)
    assert len(sh.figure().data) == 2
    with pytest.raises(InputError, match="spread tests only"):
        sh.figure(kind="distances")
