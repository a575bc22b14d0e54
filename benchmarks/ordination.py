"""Ordination speed and memory (not part of the test run; prints ratios, asserts nothing).

1. PCoA of n = 5000 Bray-Curtis dissimilarities (synthetic counts): the leading 10 axes
   (``dims=10``, ARPACK) against the full eigen-decomposition timed in the same run.
   Target: under 20 % of the full time.
2. PCoA of n = 20 000 samples x p = 300 taxa, Hellinger (the feature path: thin SVD of the
   feature matrix). Target: completes without any n x n matrix; peak memory reported
   (tracemalloc sees numpy's allocations) next to what one n x n float64 matrix would need.

Usage: python benchmarks/ordination.py [--n 5000] [--big-n 20000] [--big-p 300]
All data are synthetic (drawn here).
"""
from __future__ import annotations

import argparse
import resource
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np
import scipy.linalg
from scipy.spatial.distance import pdist

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tallyform.core.dissimilarity import Dissimilarity  # noqa: E402
from tallyform.core.ordination import pcoa  # noqa: E402


def synthetic_counts(n: int, p: int, rng: np.random.Generator) -> np.ndarray:
    """Negative-binomial-like counts along a gradient (synthetic), no empty sample."""
    grad = rng.random(n)
    optima = rng.random(p)
    mean = 20 * np.exp(-((grad[:, None] - optima[None, :]) ** 2) / 0.05)
    x = rng.poisson(mean * rng.gamma(2.0, 0.5, size=(n, p))).astype(float)
    x[:, 0] += 1
    return x


def timed(f):
    t = time.perf_counter()
    out = f()
    return time.perf_counter() - t, out


def blas_note() -> str:
    try:
        from threadpoolctl import threadpool_info
        info = threadpool_info()
        return ", ".join(f"{i['internal_api']} {i.get('architecture', '')} "
                         f"{i['num_threads']} threads" for i in info)
    except Exception:  # pragma: no cover - optional
        return "unknown"


def leading_axes_vs_full(n: int, rng) -> None:
    x = synthetic_counts(n, 60, rng)
    labels = [f"s{i}" for i in range(n)]
    cond = pdist(x, "braycurtis")
    print(f"[1] PCoA, Bray-Curtis, n = {n}")
    # each call gets a fresh Dissimilarity so both include building the Gower matrix
    t_dims, part = timed(lambda: pcoa(Dissimilarity(cond, labels, measure="bray_curtis"),
                                      dims=10))
    d = Dissimilarity(cond, labels, measure="bray_curtis")
    t_full, full = timed(lambda: pcoa(d))
    G = d.gower()
    t_eigh, _ = timed(lambda: scipy.linalg.eigh(G))
    err = np.max(np.abs(part.eigenvalues.to_numpy() - full.eigenvalues.to_numpy()[:10]))
    print(f"    pcoa(dims=10)            {t_dims:8.2f} s")
    print(f"    pcoa() full              {t_full:8.2f} s")
    print(f"    scipy.linalg.eigh(G)     {t_eigh:8.2f} s   (reference)")
    print(f"    ratio dims / full pcoa   {t_dims / t_full:8.3f}   (target < 0.20)")
    print(f"    ratio dims / eigh alone  {t_dims / t_eigh:8.3f}")
    print(f"    max |eigenvalue difference| on the 10 axes: {err:.2e} "
          f"(largest {full.eigenvalues.iloc[0]:.3g})")


def feature_path(n: int, p: int, rng) -> None:
    print(f"[2] PCoA, Hellinger, feature path, n = {n}, p = {p}")
    x = synthetic_counts(n, p, rng)
    feats = np.sqrt(x / x.sum(axis=1, keepdims=True))
    del x
    d = Dissimilarity.from_features(feats, measure="hellinger")
    del feats
    tracemalloc.start()
    t, o = timed(lambda: pcoa(d))
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024  # kB on Linux
    square = n * n * 8
    print(f"    time                     {t:8.2f} s   ({o.scores.shape[1]} axes, "
          f"path: {o.provenance['path']})")
    print(f"    peak traced allocation   {peak / 1e6:8.1f} MB")
    print(f"    process max RSS          {rss / 1e6:8.1f} MB")
    print(f"    one n x n float64 matrix {square / 1e6:8.1f} MB   "
          f"(peak / n x n = {peak / square:.3f})")
    print(f"    condensed distances formed: {d._condensed is not None}")


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=5000)
    ap.add_argument("--big-n", type=int, default=20_000)
    ap.add_argument("--big-p", type=int, default=300)
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(args.seed)
    print(f"BLAS: {blas_note()}")
    feature_path(args.big_n, args.big_p, rng)
    leading_axes_vs_full(args.n, rng)


if __name__ == "__main__":
    main()
