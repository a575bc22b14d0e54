"""How good is the estimate announced before a long run? Estimate / real time, three sizes.

Run from the repository root:  python benchmarks/progress_estimate.py  [--quick]

The estimate (tallyform.core.progress) is projected from the first ``WARMUP`` seconds of a
call: elapsed x total / done. Here a PERMANOVA (Bray-Curtis, one factor of three groups,
free permutations) runs on synthetic counts at three sizes, with enough permutations to
take several seconds; the ratio of the projected time to the measured time of the same call
is printed (target: between 0.5 and 2). Data are synthetic.
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tallyform.core import progress as P  # noqa: E402
from tallyform.core.dissimilarity import dissimilarity  # noqa: E402
from tallyform.core.inference import permanova  # noqa: E402


def synthetic(n, p, rng):
    """Counts of three groups with slightly different profiles (synthetic)."""
    g = np.arange(n) % 3
    base = rng.gamma(0.5, 1.0, size=p)
    prof = base * np.exp(0.2 * rng.standard_normal((3, p)))[g]
    prof /= prof.sum(axis=1, keepdims=True)
    counts = rng.poisson(prof * rng.lognormal(np.log(2000), 0.3, size=(n, 1)))
    labels = [f"s{i}" for i in range(n)]
    return (pd.DataFrame(counts, index=labels),
            pd.DataFrame({"group": np.array(["a", "b", "c"])[g]}, index=labels))


def estimate_and_time(d, info, n_perm):
    seen = {}

    def grab(done, total):               # the running call's Reporter: the estimate
        seen.setdefault("rep", P._active.get())

    t = time.perf_counter()
    permanova(d, info, "group", n_permutations=n_perm, rng=1, progress=grab)
    real = time.perf_counter() - t
    return seen["rep"].projected, real


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true", help="smaller runs (about 20 s in all)")
    args = ap.parse_args(argv)
    rng = np.random.default_rng(1)
    sizes = [(200, 400_000), (600, 60_000), (1500, 6_000)]
    if args.quick:
        sizes = [(n, k // 3) for n, k in sizes]
    counts, info = synthetic(60, 50, rng)                 # compile the kernels first
    permanova(dissimilarity(counts, "bray_curtis"), info, "group", n_permutations=99,
              progress=False)
    for n, n_perm in sizes:
        counts, info = synthetic(n, 200, rng)
        d = dissimilarity(counts, "bray_curtis")
        est, real = estimate_and_time(d, info, n_perm)
        if est is None:
            print(f"n = {n:5d}, {n_perm} permutations: ran {real:.1f} s, under the "
                  f"{P.WARMUP:.0f} s warm-up, no estimate")
            continue
        print(f"n = {n:5d}, {n_perm:6d} permutations: estimate {est:6.1f} s, real {real:6.1f} s, "
              f"ratio {est / real:.2f}  ({'within' if 0.5 <= est / real <= 2 else 'OUTSIDE'} 2x)")


if __name__ == "__main__":
    main()
