"""Speed of taxon_contributions' jackknife against leaving the samples out one by one.

Usage: python benchmarks/contributions.py [--n 100] [--p 300] [--repeats 3]

Prints the best-of-repeats time of ``tly.taxon_contributions`` (the whole call: both sides,
with the leave-one-out intervals computed as updates of group sums) and of a plain
reference that deletes each sample in turn (``np.delete``) and recomputes the
noise-corrected Hellinger terms (or the Bray-Curtis pair terms, with scipy's ``cdist`` as a
user would) and the size ratios from the copied rows. The ratio is reference time / ours
(above 1 means we are faster). Synthetic gamma-Poisson counts in two groups of n samples
each. The machine may be shared: run it a few times and read the spread.
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.spatial.distance import cdist

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import tallyform as tly  # noqa: E402


def best(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def reference(x, ia, ib, measure):
    """Leave each sample out, recompute everything from the copied rows."""
    prof = np.sqrt(x / x.sum(axis=1, keepdims=True))
    out = []
    for grp, drop in [(0, i) for i in range(len(ia))] + [(1, i) for i in range(len(ib))]:
        ra = np.delete(ia, drop) if grp == 0 else ia
        rb = np.delete(ib, drop) if grp == 1 else ib
        if measure == "hellinger":
            fa, fb = prof[ra], prof[rb]
            d = fb.mean(axis=0) - fa.mean(axis=0)
            terms = (d * d - fa.var(axis=0, ddof=1) / len(ra)
                     - fb.var(axis=0, ddof=1) / len(rb))
        else:
            xa, xb = x[ra], x[rb]
            terms = (np.abs(xa[:, None, :] - xb[None, :, :])
                     / (xa.sum(1)[:, None] + xb.sum(1)[None, :])[:, :, None]).mean(axis=(0, 1))
            cdist(xa, xb, "braycurtis")           # the distance a user would add
        size = np.log2((x[rb] + 0.5).mean(axis=0) / (x[ra] + 0.5).mean(axis=0))
        out.append((terms / terms.sum(), size))
    return out


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=100, help="samples per group")
    ap.add_argument("--p", type=int, default=300, help="taxa")
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(1)
    n, p = args.n, args.p
    mu = rng.gamma(0.5, 20.0, p)
    x = rng.poisson(rng.gamma(0.8, mu / 0.8, (2 * n, p))).astype(float)
    x[:, x.sum(axis=0) == 0] = 1.0
    x[x.sum(axis=1) == 0, 0] = 1.0
    idx = [f"s{i}" for i in range(2 * n)]
    tab = tly.CommunityTable(pd.DataFrame(x, index=idx),
                             pd.DataFrame({"g": ["a"] * n + ["b"] * n}, index=idx))
    ia, ib = np.arange(n), np.arange(n, 2 * n)
    print(f"{n} + {n} samples x {p} taxa, leave-one-out intervals, best of {args.repeats}")
    for measure in ("hellinger", "bray_curtis"):
        ours = best(lambda: tly.taxon_contributions(tab, "g", "a", "b", measure=measure),
                    args.repeats)
        ref = best(lambda: reference(x, ia, ib, measure), args.repeats)
        print(f"{measure:12s} ours {ours:8.3f} s   reference {ref:8.3f} s   ratio "
              f"{ref / ours:6.2f}")


if __name__ == "__main__":
    main()
