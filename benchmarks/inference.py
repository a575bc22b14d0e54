"""Speed of the permutation engine, as ratios against references timed in the same run.

Run from the repository root:  python benchmarks/inference.py  [--quick]

1. One-factor PERMANOVA, n = 1000, 3 groups, 9999 permutations, Bray-Curtis (distance
   path), against
   - one float64 matrix product of the same flop count: an n x n by n x (3 x 9999)
     product (target: PERMANOVA at most 0.5x its time, which float64 cannot reach: the
     permutations run in single precision with a proven error bound, and those the bound
     cannot settle are recomputed in float64, so the p-value is the float64 one; the share
     re-checked is printed, for these data and for a null-true relabelling of them);
   - a plain loop recomputing the pseudo-F permutation by permutation with numpy (target:
     PERMANOVA at least 20x faster; the loop is timed on a subset of the permutations and
     scaled per permutation).
2. Feature path: n = 10 000 samples, p = 200 taxa, Hellinger, 9999 permutations, with the
   peak of traced memory (it must stay far below one n x n matrix), against the distance
   path at n = 2000.
3. Memory of the distance path at n = 2000: peak traced memory in units of one n x n matrix
   (O(n^2 + n * batch), not O(n^2 * batch)).

The machine may be shared: every timing is the best of ``--repeats`` runs, and all runs are
printed so the noise is visible. Data are synthetic.
"""
from __future__ import annotations

import argparse
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.spatial.distance import pdist

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tallyform.core.dissimilarity import Dissimilarity, dissimilarity  # noqa: E402
from tallyform.core.inference import permanova  # noqa: E402
from tallyform.core.single_precision import precision_tally  # noqa: E402


def timed(fn, repeats):
    runs = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        runs.append(time.perf_counter() - t)
    return min(runs), runs


def fmt(runs):
    return ", ".join(f"{r:.3f}" for r in runs)


def synthetic_counts(n, p, rng):
    """Counts with three groups of slightly different profiles (synthetic)."""
    base = rng.gamma(0.5, 1.0, size=p)
    groups = np.arange(n) % 3
    shift = rng.gamma(2.0, 0.5, size=(3, p))
    mu = base * shift[groups] * rng.lognormal(0, 0.3, size=(n, 1)) * 30
    return rng.poisson(mu).astype(float) + (rng.random((n, p)) < 0.02), groups


def plain_loop_pseudo_f(d2, groups, perms):
    """The textbook loop: one permutation at a time, within-group sums of squared d."""
    n = groups.size
    levels = np.unique(groups)
    a = levels.size
    ss_t = d2.sum() / (2 * n)
    out = np.empty(len(perms))
    for k, idx in enumerate(perms):
        g = groups[idx]
        ss_w = 0.0
        for lv in levels:
            m = np.flatnonzero(g == lv)
            ss_w += d2[np.ix_(m, m)].sum() / (2 * m.size)
        out[k] = ((ss_t - ss_w) / (a - 1)) / (ss_w / (n - a))
    return out


def bench_distance(n, n_perm, repeats, loop_perms):
    rng = np.random.default_rng(1)
    x, groups = synthetic_counts(n, 40, rng)
    labels = [f"s{i}" for i in range(n)]
    cond = np.asarray(dissimilarity(x, "bray_curtis").condensed)
    assert np.allclose(cond, pdist(x, "braycurtis"))
    info = pd.DataFrame({"group": np.array(["a", "b", "c"])[groups]}, index=labels)

    def ours():
        d = Dissimilarity(cond, labels, measure="bray_curtis")   # fresh: Gower included
        return permanova(d, info, "group", n_permutations=n_perm, rng=1)

    with precision_tally() as tally:
        res = ours()
    relabelled = np.random.default_rng(3).permutation(info["group"].to_numpy())
    info_null = info.assign(group=relabelled)                  # the null true
    with precision_tally() as tally_null:
        res_null = permanova(Dissimilarity(cond, labels, measure="bray_curtis"), info_null,
                             "group", n_permutations=n_perm, rng=1)
    g = Dissimilarity(cond, labels, measure="bray_curtis").gower()
    b = rng.standard_normal((n, 3 * n_perm))
    t_ref, ref_runs = timed(lambda: g @ b, repeats)
    t_ours, our_runs = timed(ours, repeats)
    d2 = Dissimilarity(cond, labels, measure="bray_curtis").square() ** 2
    perms = [rng.permutation(n) for _ in range(loop_perms)]
    t_loop_part, loop_runs = timed(lambda: plain_loop_pseudo_f(d2, groups, perms), 1)
    t_loop = t_loop_part * n_perm / loop_perms
    check = plain_loop_pseudo_f(d2, groups, [np.arange(n)])[0]
    print(f"[1] one-factor PERMANOVA, n = {n}, 3 groups, {n_perm} permutations, Bray-Curtis")
    print(f"    pseudo-F {res.statistic['group']:.6g} (plain loop identity: {check:.6g}), "
          f"p = {res.pvalue['group']:.4g}")
    print(f"    reference product n x n @ n x (3 x {n_perm}): best {t_ref:.3f} s "
          f"(runs {fmt(ref_runs)})")
    print(f"    PERMANOVA:                                 best {t_ours:.3f} s "
          f"(runs {fmt(our_runs)})")
    print(f"    plain loop: {t_loop_part:.3f} s for {loop_perms} permutations -> "
          f"{t_loop:.1f} s for {n_perm}")
    for what, t, r in (("these data", tally, res), ("null-true relabelling", tally_null,
                                                     res_null)):
        print(f"    re-checked in float64 ({what}, p = {r.pvalue['group']:.4g}): "
              f"{t.rechecked} of {t.single} single-precision permutations "
              f"({100 * t.rechecked_share:.2f}%)")
    print(f"    RATIO PERMANOVA / product = {t_ours / t_ref:.2f}  (target <= 0.5)")
    print(f"    RATIO plain loop / PERMANOVA = {t_loop / t_ours:.1f}  (target >= 20)")
    return t_ours


def bench_features(n_big, n_small, p, n_perm, repeats):
    rng = np.random.default_rng(2)
    x, groups = synthetic_counts(n_big, p, rng)
    labels = [f"s{i}" for i in range(n_big)]
    info = pd.DataFrame({"group": np.array(["a", "b", "c"])[groups]}, index=labels)
    d_feat = dissimilarity(pd.DataFrame(x, index=labels), "hellinger")
    assert d_feat.has_features and d_feat.features.shape == (n_big, p)
    hell = np.asarray(d_feat.features)

    def feat():
        return permanova(d_feat, info, "group", n_permutations=n_perm, rng=1)

    tracemalloc.start()
    feat()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    t_feat, feat_runs = timed(feat, repeats)
    # the distance path at n_small (no feature matrix: the Gower matrix is used)
    small = slice(0, n_small)
    d_dist = Dissimilarity(pdist(hell[small]), labels[:n_small], measure="hellinger")
    info_s = info.iloc[small]

    def dist():
        return permanova(d_dist, info_s, "group", n_permutations=n_perm, rng=1)

    dist()
    tracemalloc.start()
    dist()
    _, peak_dist = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    t_dist, dist_runs = timed(dist, repeats)
    nn = 8.0 * n_big * n_big
    print(f"[2] feature path: n = {n_big}, p = {p}, Hellinger, {n_perm} permutations")
    print(f"    feature path n = {n_big}: best {t_feat:.3f} s (runs {fmt(feat_runs)}); "
          f"peak traced memory {peak / 1e6:.0f} MB = {peak / nn:.3f} of one "
          f"{n_big} x {n_big} matrix ({nn / 1e9:.1f} GB)")
    print(f"    distance path n = {n_small}: best {t_dist:.3f} s (runs {fmt(dist_runs)})")
    print(f"    RATIO feature path (n = {n_big}) / distance path (n = {n_small}) = "
          f"{t_feat / t_dist:.2f}")
    ns = 8.0 * n_small * n_small
    print(f"[3] distance path n = {n_small}: peak traced memory {peak_dist / 1e6:.0f} MB = "
          f"{peak_dist / ns:.1f} n x n matrices (the batch of {n_perm} permutations would "
          f"need {n_perm} of them if not streamed)")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller sizes, for a smoke test")
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args(argv)
    if args.quick:
        bench_distance(300, 999, 2, 100)
        bench_features(2000, 500, 50, 999, 1)
    else:
        bench_distance(1000, 9999, args.repeats, 500)
        bench_features(10_000, 2000, 200, 9999, args.repeats)


if __name__ == "__main__":
    main()
