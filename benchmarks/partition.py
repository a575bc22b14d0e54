"""Speed of the size and shape partition (the live-slider path) and of the scan.

Prints ratios against references timed in the same run (a bare time means little on a
shared machine), plus the medians, which the issues state targets for:

* size_shape without permutations, 200 samples x 100 taxa: under 150 ms median, reported as
  a ratio to one ``dissimilarity`` call on the same data;
* scan over 8 measures x 5 transforms on the same table: under 3 s;
* intervals: one leave-out replicate (``n_boot``) at most 1.5 x one partition of the same
  table, reported against a cold ``size_shape`` call (distances computed) and against the
  partition alone (distances already computed, as a replicate has them);
* the Monte Carlo test: one simulated table against one cold ``size_shape`` call.

Run: python benchmarks/partition.py
"""
from __future__ import annotations

import statistics
import time

import numpy as np
import pandas as pd

import tallyform as tly
from tallyform.core.cache import clear_cache


def timed(fn, repeat=15, *, cold=True):
    """Median time of fn(); cold=True empties tallyform's result cache before each call."""
    fn()                                         # warm-up (numba caches, imports)
    out = []
    for _ in range(repeat):
        if cold:
            clear_cache()
        t = time.perf_counter()
        fn()
        out.append(time.perf_counter() - t)
    return statistics.median(out)


def table(n=200, p=100, seed=7):
    design = pd.DataFrame({"grp": np.repeat(["a", "b", "c", "d"], n // 4)},
                          index=[f"s{i:04d}" for i in range(n)])
    return tly.simulate_community(
        design, n_taxa=p, mean_total=800,
        size_effects={"grp": {"b": 0.5, "c": 1.5}},
        shape_effects={"grp": {"d": {j: 3.0 for j in range(10)}}}, rng=seed)


def main():
    raw = table()
    tab = tly.CommunityTable(raw.counts, raw.samples, empty="drop")
    print(f"table: {tab.n_samples} samples x {tab.n_taxa} taxa")
    for measure, transform in [("bray_curtis", None), ("bray_curtis", tly.Power(0.37)),
                               ("hellinger", None), ("jaccard", None)]:
        ref = timed(lambda: tly.dissimilarity(tab, measure, transform=transform).condensed)
        run = timed(lambda: tly.size_shape(tab, measure, transform=transform))
        name = measure if transform is None else f"{measure} + {transform.name}"
        warm = timed(lambda: tly.size_shape(tab, measure, transform=transform), cold=False)
        print(f"size_shape({name}): median {1000 * run:.1f} ms (target < 150 ms) = "
              f"{run / ref:.1f} x one dissimilarity call ({1000 * ref:.2f} ms); "
              f"repeated with the cache warm: {1000 * warm:.1f} ms")
    resampling(tab)
    scan_t = timed(lambda: tly.scan(tab), repeat=5)
    one = timed(lambda: tly.size_shape(tab, "bray_curtis"), repeat=5)
    print(f"scan 8 measures x 5 transforms: median {scan_t:.2f} s (target < 3 s) = "
          f"{scan_t / one:.1f} x one size_shape call (40 cells)")


def resampling(tab, n_boot=100, n_sim=50):
    """Time per leave-out replicate and per simulated null table, as ratios."""
    from tallyform.core.partition import size_shape_from, prepared_arrays
    from tallyform.core.partition_resample import leave_out_sets, replicate_shares
    for measure, transform in [("bray_curtis", None), ("hellinger", None),
                               ("bray_curtis", tly.Power(0.25))]:
        name = measure if transform is None else f"{measure} + {transform.name}"
        cold = timed(lambda: tly.size_shape(tab, measure, transform=transform), repeat=7)
        d = tly.dissimilarity(tab, measure, transform=transform)
        part = timed(lambda: size_shape_from(
            tab, d, measure=measure, transform=transform, size="log_total",
            shape="chi_square", shape_dims=None, n_permutations=0, rng=None, progress=None,
            cancel=None), repeat=7, cold=False)
        res = tly.size_shape(tab, measure, transform=transform)
        arrays = prepared_arrays(tab, d, measure=measure, transform=transform,
                                 size="log_total", shape="chi_square")
        kept, _, _ = leave_out_sets(tab.n_samples, n_boot, np.random.default_rng(1))
        per = timed(lambda: replicate_shares(arrays, kept, res.shape_dims), repeat=3,
                    cold=False) / n_boot
        sim = timed(lambda: tly.size_shape(tab, measure, transform=transform,
                                           n_permutations=n_sim, rng=1), repeat=3) / n_sim
        print(f"{name}: one leave-out replicate {1000 * per:.2f} ms = {per / cold:.2f} x one "
              f"cold size_shape ({1000 * cold:.1f} ms; target <= 1.5) = {per / part:.2f} x "
              f"the partition alone ({1000 * part:.1f} ms); one simulated null table "
              f"{1000 * sim:.1f} ms = {sim / cold:.2f} x one cold size_shape")


if __name__ == "__main__":
    main()
