"""Speed of tallyform's dissimilarities against scipy.spatial.distance.pdist, timed in one run.

Usage: python benchmarks/measures.py [--n 2000] [--p 200] [--repeats 5]

Prints, for each measure, the best-of-repeats time of ``tly.dissimilarity(...).condensed``
(the whole call: reading the table, transforming, computing) and of scipy's ``pdist`` with the
same metric, and their ratio (scipy time / ours; above 1 means we are faster). For the
Euclidean-family measures the reference is ``pdist(features, 'euclidean')`` on the already
transformed data (so our transformation time counts against us), and the ratio of the bare
Gram kernel is shown too. The data are synthetic (gamma-Poisson counts, about 45 % zeros).
A second table, {n} x 300 with 10 % non-zero cells (what real community and microbiome
tables look like), times the sparse kernels of Bray-Curtis and kin against pdist and against
the dense kernels on the same table (target: >= 15x pdist for Bray-Curtis).
The machine may be shared: run it a few times and read the spread.
"""
from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

import numpy as np

from scipy.spatial.distance import pdist

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import tallyform as tly  # noqa: E402
from tallyform.core import kernels  # noqa: E402
from tallyform.core.cache import clear_cache  # noqa: E402


def best(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        clear_cache()                     # time the computation, not tallyform's result cache
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=2000)
    ap.add_argument("--p", type=int, default=200)
    ap.add_argument("--repeats", type=int, default=5)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(1)
    x = rng.poisson(rng.gamma(0.5, 8.0, size=(args.n, args.p))).astype(float)
    x[x.sum(axis=1) == 0, 0] = 1.0
    x[0, x.sum(axis=0) == 0] = 1.0
    tab = tly.CommunityTable(x)
    print(f"synthetic table {args.n} x {args.p}, {100 * np.mean(x == 0):.0f} % zeros; "
          f"numba kernels: {kernels.numba_enabled()}; cores: {os.cpu_count()}")

    t = time.perf_counter()
    for m in ("bray_curtis", "canberra", "hellinger"):   # compile or load, start the threads
        tly.dissimilarity(tab, m).condensed
    print(f"first calls (numba import, compile or cache load, one run each): "
          f"{time.perf_counter() - t:.2f} s")

    print(f"\n{'measure':<14} {'ours (s)':>9} {'pdist (s)':>10} {'ratio':>7}  reference")
    for ours, theirs in (("bray_curtis", "braycurtis"), ("manhattan", "cityblock"),
                         ("canberra", "canberra")):
        a = best(lambda: tly.dissimilarity(tab, ours).condensed, args.repeats)
        b = best(lambda: pdist(x, theirs), max(2, args.repeats // 2))
        print(f"{ours:<14} {a:9.4f} {b:10.4f} {b / a:7.2f}  pdist '{theirs}'")

    for m in ("euclidean", "hellinger", "chord", "chi_square", "aitchison"):
        f = tly.feature_matrix(tab, m)
        a = best(lambda: tly.dissimilarity(tab, m).condensed, args.repeats)
        k = best(lambda: kernels.euclidean_condensed(f), args.repeats)
        b = best(lambda: pdist(f, "euclidean"), max(2, args.repeats // 2))
        print(f"{m:<14} {a:9.4f} {b:10.4f} {b / a:7.2f}  pdist 'euclidean' on the features "
              f"(Gram kernel alone: {b / k:.2f})")

    for ours, theirs in (("jaccard", "jaccard"), ("sorensen", "dice")):
        a = best(lambda: tly.dissimilarity(tab, ours).condensed, args.repeats)
        b = best(lambda: pdist(x > 0, theirs), max(2, args.repeats // 2))
        print(f"{ours:<14} {a:9.4f} {b:10.4f} {b / a:7.2f}  pdist '{theirs}' on booleans")

    a = best(lambda: tly.dissimilarity(tab, "bray_curtis", dtype="float32").condensed,
             args.repeats)
    print(f"\nbray_curtis as float32: {a:.4f} s")
    big = np.tile(x, (10, 1))
    a = best(lambda: tly.feature_matrix(big, "hellinger"), 2)
    print(f"feature_matrix('hellinger') at n = {big.shape[0]}: {a:.3f} s (no n x n memory)")

    # sparse tables: 10 % non-zero cells
    xs = rng.poisson(rng.gamma(0.5, 8.0, size=(args.n, 300))).astype(float)
    xs *= rng.random(xs.shape) < 0.115
    xs[xs.sum(axis=1) == 0, 0] = 1.0
    xs[0, xs.sum(axis=0) == 0] = 1.0
    tabs = tly.CommunityTable(xs)
    print(f"\nsparse table {args.n} x 300, {100 * np.mean(xs > 0):.1f} % non-zero (sparse "
          f"kernels below {100 * kernels.SPARSE_DENSITY:.0f} %)")
    print(f"{'measure':<22} {'ours (s)':>9} {'pdist (s)':>10} {'ratio':>7} {'dense/ours':>11}")
    for ours, theirs in (("bray_curtis", "braycurtis"), ("manhattan", "cityblock"),
                         ("canberra", "canberra"), ("quantitative_jaccard", None),
                         ("kulczynski", None)):
        a = best(lambda: tly.dissimilarity(tabs, ours).condensed, args.repeats)
        keep = kernels.SPARSE_DENSITY
        kernels.SPARSE_DENSITY = 0.0
        try:
            dense = best(lambda: tly.dissimilarity(tabs, ours).condensed, args.repeats)
        finally:
            kernels.SPARSE_DENSITY = keep
        if theirs:
            b = best(lambda: pdist(xs, theirs), max(2, args.repeats // 2))
            ratio = f"{b:10.4f} {b / a:7.2f}"
        else:
            ratio = f"{'-':>10} {'-':>7}"
        print(f"{ours:<22} {a:9.4f} {ratio} {dense / a:11.2f}"
              + ("   target >= 15x pdist" if ours == "bray_curtis" else ""))


if __name__ == "__main__":
    main()
