"""Speed of taxon_contributions' bootstrap against resampling the samples one by one.

Usage: python benchmarks/contributions.py [--n 100] [--p 300] [--boot 999] [--repeats 3]

Prints the best-of-repeats time of ``tly.taxon_contributions`` (the whole call: both sides,
``n_boot`` resamples) and of a plain reference that draws the same number of resamples by
indexing the samples (``rng.integers``) and recomputes the group centroids and the size
ratios from the copied rows, for Hellinger (exact split) and Bray-Curtis (average over pairs;
the reference calls scipy's ``cdist`` per resample). The ratio is reference time / ours (above
1 means we are faster). Synthetic gamma-Poisson counts in two groups of n samples each. The
machine may be shared: run it a few times and read the spread.
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


def reference(x, ia, ib, n_boot, measure, rng):
    """Resample rows by index and recompute everything from the copies."""
    prof = np.sqrt(x / x.sum(axis=1, keepdims=True))
    out = []
    for _ in range(n_boot):
        ra = ia[rng.integers(0, len(ia), len(ia))]
        rb = ib[rng.integers(0, len(ib), len(ib))]
        if measure == "hellinger":
            d = prof[rb].mean(axis=0) - prof[ra].mean(axis=0)
            terms = d * d
        else:
            xa, xb = x[ra], x[rb]
            terms = (np.abs(xa[:, None, :] - xb[None, :, :])
                     / (xa.sum(1)[:, None] + xb.sum(1)[None, :])[:, :, None]).mean(axis=(0, 1))
            cdist(xa, xb, "braycurtis")           # the per-resample distance a user would add
        size = np.log2((x[rb] + 0.5).mean(axis=0) / (x[ra] + 0.5).mean(axis=0))
        out.append((terms / terms.sum(), size))
    return out


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=100, help="samples per group")
    ap.add_argument("--p", type=int, default=300, help="taxa")
    ap.add_argument("--boot", type=int, default=999)
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
    print(f"{n} + {n} samples x {p} taxa, {args.boot} resamples, best of {args.repeats}")
    for measure in ("hellinger", "bray_curtis"):
        ours = best(lambda: tly.taxon_contributions(tab, "g", "a", "b", measure=measure,
                                                    n_boot=args.boot, rng=2), args.repeats)
        ref = best(lambda: reference(x, ia, ib, args.boot, measure,
                                     np.random.default_rng(2)), args.repeats)
        print(f"{measure:12s} ours {ours:8.3f} s   reference {ref:8.3f} s   ratio "
              f"{ref / ours:6.2f}")


if __name__ == "__main__":
    main()
