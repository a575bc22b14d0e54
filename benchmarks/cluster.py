"""Tiled Bray-Curtis PERMANOVA on a local Dask cluster: time and bytes per tile, and a
projection of the wall time to larger n and more workers.

Run from the repository root:  python benchmarks/cluster.py  [--sizes 3000,6000,12000]
[--n 30000] [--perms 999] [--memory 1GB] [--workers 2] [--quick]

For every size n: a LocalCluster on 127.0.0.1 (``--workers`` processes, one thread each,
``--memory`` per worker) computes the tiles of D (chunks = ``--chunks`` samples, default
n / 4) and runs a one-factor PERMANOVA with ``--perms`` permutations. Printed per size:
seconds to build one tile (per pair of samples), seconds per tile and pass of the products
(per tile, per vector: one multiply-add per cell), bytes sent to and from a tile per pass,
the number of passes, the wall time, and the in-memory PERMANOVA of the same data when it
fits (the ratio of the two).

How the cost grows. The tiles hold n^2 / 2 cells (8 bytes each in float64), built once:
build = (n^2 / 2) * 2 * s_pair / w (the kernel runs on the rows of both blocks, so each
off-diagonal tile evaluates twice its pairs). A PERMANOVA with P permutations and k model
columns makes about P / B passes of B k vectors each, every pass n^2 multiply-adds per
vector: products = n^2 * k * (P + a few) * s_mac / w, plus passes * (per-pass latency), and
each pass moves about 2 * 8 * c * n * (number of tile columns) bytes to the tiles. The
projection uses the slowest measured s_pair and s_mac per worker (the largest n measured),
the latency of a pass measured here, and assumes that the workers scale linearly and each
holds n^2 * 8 / (2 w) bytes of tiles.

With ``--tasks``: the parallel tasks and the tiled partition, as ratios against the same
call in this process (timed before the cluster starts): ``scan`` (its 40 cells as tasks),
``audit`` (its simulations as tasks), both checked equal to the plain loop, and
``size_shape(..., chunks=)`` with ``n_boot`` against the in-memory partition (same shares).

Data are synthetic (Poisson counts around gamma-distributed taxon means). The machine may be
shared: the figures are one run each, printed as measured.
"""
from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import tallyform as tly  # noqa: E402


def _data(n: int, p: int, seed: int = 1):
    rng = np.random.default_rng(seed)
    mean = rng.gamma(0.6, 4.0, size=(1, p))
    x = rng.poisson(mean, size=(n, p)).astype(float)
    x[:, 0] += 1                                          # no empty sample
    info = pd.DataFrame({"g": rng.choice(["a", "b", "c"], n)},
                        index=[f"s{i + 1}" for i in range(n)])
    return x, info


def _fmt_bytes(b: float) -> str:
    for unit in ("B", "KB", "MB", "GB", "TB"):
        if b < 1024:
            return f"{b:.3g} {unit}"
        b /= 1024
    return f"{b:.3g} PB"


def _fmt_s(s: float) -> str:
    if s < 120:
        return f"{s:.3g} s"
    if s < 7200:
        return f"{s / 60:.3g} min"
    if s < 172800:
        return f"{s / 3600:.3g} h"
    return f"{s / 86400:.3g} days"


def measure(client, n: int, p: int, perms: int, chunks: int, in_memory: bool) -> dict:
    x, info = _data(n, p)
    t0 = time.perf_counter()
    d = tly.dissimilarity(x, "bray_curtis", chunks=chunks)
    d.total_ss()                                          # waits for every tile
    build = time.perf_counter() - t0
    workers = len(client.scheduler_info()["workers"])
    tiles = d._tiles
    n_tiles = d.n_tiles
    sizes = np.diff(tiles.edges)
    pairs = float(n) * n / 2.0
    # passes of products with c1 and c2 vectors, timed alone (best of 2): the slope is the
    # time per multiply-add, the intercept the latency of a pass
    rng = np.random.default_rng(2)
    c1, c2 = 8, 200
    times = {}
    for c in (c1, c2):
        w = rng.normal(size=(n, c))
        best = np.inf
        for _ in range(2):
            t0 = time.perf_counter()
            d.sq_quad(w)
            best = min(best, time.perf_counter() - t0)
        times[c] = best
    workers = len(client.scheduler_info()["workers"])
    s_mac = max(times[c2] - times[c1], 1e-9) * workers / (float(n) * n * (c2 - c1))
    latency = max(times[c1] - float(n) * n * c1 * s_mac / workers, 0.0)
    c = c2
    one_pass = times[c2]
    before = tiles.passes
    t0 = time.perf_counter()
    res = tly.permanova(d, info, ["g"], units=False, n_permutations=perms, rng=1,
                        progress=None)
    wall = time.perf_counter() - t0
    passes = tiles.passes - before
    out = dict(n=n, chunks=chunks, n_tiles=n_tiles, build=build,
               s_pair=build * workers / (2 * pairs), one_pass=one_pass, latency=latency,
               s_mac=s_mac,
               tile_bytes=float(sizes.max()) ** 2 * 8,
               moved_per_tile=2 * 8 * c * float(sizes.max()) + 8 * c,
               passes=passes, wall=wall, pseudo_f=float(res.statistic["g"]),
               pvalue=float(res.pvalue["g"]), mem_wall=None)
    if in_memory:
        t0 = time.perf_counter()
        dm = tly.dissimilarity(x, "bray_curtis")
        rm = tly.permanova(dm, info, ["g"], units=False, n_permutations=perms, rng=1)
        out["mem_wall"] = time.perf_counter() - t0
        out["same"] = (abs(rm.statistic["g"] - res.statistic["g"]) <= 1e-9 *
                       abs(rm.statistic["g"]) and rm.pvalue["g"] == res.pvalue["g"])
        del dm
    del d
    return out


def _task_calls(n: int, p: int, n_sim: int, n_boot: int):
    """The timed calls of --tasks, by name: (seconds, result to compare)."""
    x, info = _data(n, p, seed=3)
    x = x * np.random.default_rng(4).lognormal(0.0, 0.5, size=(n, 1)).round(3)
    tab = tly.CommunityTable(pd.DataFrame(np.round(x) + 1, index=info.index,
                                          columns=[f"t{j}" for j in range(p)]), info)
    small = tly.CommunityTable(tab.counts.iloc[:60], info.iloc[:60])
    calls = {
        f"scan (40 cells, n_boot = {n_boot})": lambda: tly.scan(
            small, n_boot=n_boot, rng=1, progress=False).frame,
        f"audit ({n_sim} simulations)": lambda: tly.audit(
            small, "g", n_sim=n_sim, n_permutations=199, rng=1, progress=False).pvalues,
    }
    return tab, calls


def _timed(fn):
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def tasks_before(args) -> dict:
    """Plain-loop times (no client yet) of the --tasks calls."""
    tab, calls = _task_calls(args.tasks_n, args.p, args.n_sim, args.n_boot)
    out = {k: _timed(f) for k, f in calls.items()}
    out["size_shape"] = _timed(lambda: tly.size_shape(tab, "bray_curtis", n_boot=args.n_boot,
                                                      rng=1, progress=False))
    return out


def tasks_on(client, args, before: dict) -> None:
    tab, calls = _task_calls(args.tasks_n, args.p, args.n_sim, args.n_boot)
    workers = len(client.scheduler_info()["workers"])
    warm = tly.CommunityTable(tab.counts.iloc[:20], tab.samples.iloc[:20])
    tly.scan(warm, n_boot=5, rng=1, progress=False)     # workers import and compile first
    tly.audit(warm, "g", n_sim=workers, n_permutations=19, rng=1, progress=False)
    print(f"\nParallel tasks on {workers} workers (ratio = with the client / plain loop; "
          "below 1 is faster):")
    for k, f in calls.items():
        t, res = _timed(f)
        ref = before[k][1]
        if hasattr(res, "select_dtypes"):               # the scan's frame: numbers to rounding
            num = res.select_dtypes("number").columns
            same = bool(np.allclose(res[num], ref[num], rtol=1e-12, atol=1e-12,
                                    equal_nan=True) and res.drop(columns=num).equals(
                                        ref.drop(columns=num)))
        else:
            same = bool(np.array_equal(res, ref, equal_nan=True))
        tol = " (to 1e-12)" if hasattr(res, "select_dtypes") else ""
        print(f"  {k}: {before[k][0]:.3g} s in a loop, {t:.3g} s as tasks, ratio "
              f"{t / before[k][0]:.2f}; same result{tol}: {same}",
              flush=True)
    chunks = int(np.ceil(tab.n_samples / 4))
    t, res = _timed(lambda: tly.size_shape(tab, "bray_curtis", n_boot=args.n_boot, rng=1,
                                           chunks=chunks, progress=False))
    ref = before["size_shape"][1]
    diff = float(np.max(np.abs(res.fractions_ci.to_numpy() - ref.fractions_ci.to_numpy())))
    print(f"  size_shape, n = {tab.n_samples}, n_boot = {args.n_boot}: in memory "
          f"{before['size_shape'][0]:.3g} s, on tiles of {chunks} {t:.3g} s, ratio "
          f"{t / before['size_shape'][0]:.2f}; largest difference of the intervals {diff:.1e}",
          flush=True)


def project(n: int, workers: int, perms: int, m: dict, k: int = 1) -> dict:
    """Wall time of a PERMANOVA of n samples on ``workers`` workers from measured rates."""
    from tallyform.core.permutation import default_batch_size
    batch = default_batch_size(n, k, None)
    pairs = float(n) * n / 2.0
    build = 2 * pairs * m["s_pair"] / workers
    passes = int(np.ceil(perms / batch)) + 3
    products = float(n) * n * k * (perms + 3) * m["s_mac"] / workers
    wall = build + products + passes * m["latency"]
    return dict(build=build, products=products, wall=wall,
                per_worker=pairs * 8 / workers)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="3000,6000,12000",
                    help="sample counts measured (comma-separated)")
    ap.add_argument("--n", type=int, default=None,
                    help="also run this n (30000 is the issue's case: long on 2 cores)")
    ap.add_argument("--p", type=int, default=100, help="taxa")
    ap.add_argument("--perms", type=int, default=999)
    ap.add_argument("--chunks", type=int, default=None, help="samples per tile (n / 4)")
    ap.add_argument("--memory", default="1GB", help="memory limit per worker")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--quick", action="store_true", help="small sizes, for a smoke test")
    ap.add_argument("--tasks", action="store_true",
                    help="also time scan, audit and the tiled size_shape (ratios)")
    ap.add_argument("--tasks-n", type=int, default=2000, help="samples of the tiled partition")
    ap.add_argument("--n-sim", type=int, default=40, help="audit simulations (--tasks)")
    ap.add_argument("--n-boot", type=int, default=100, help="partition replicates (--tasks)")
    ap.add_argument("--only-tasks", action="store_true", help="skip the PERMANOVA sizes")
    args = ap.parse_args(argv)
    if args.only_tasks:
        args.tasks = True
    from distributed import Client, LocalCluster
    sizes = [int(s) for s in args.sizes.split(",") if s]
    if args.quick:
        sizes, args.perms = [1500, 3000], 199
    if args.n:
        sizes.append(args.n)
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    before = tasks_before(args) if args.tasks else None
    rows = []
    with LocalCluster(host="127.0.0.1", n_workers=args.workers, threads_per_worker=1,
                      memory_limit=args.memory, dashboard_address=None) as cluster, \
            Client(cluster) as client:
        if args.tasks:
            tasks_on(client, args, before)
        if args.only_tasks:
            return
        for n in sizes:
            chunks = args.chunks or int(np.ceil(n / 4))
            fits = 8.0 * n * n * 3 < 8e9                  # in-memory reference if it fits
            m = measure(client, n, args.p, args.perms, chunks, fits)
            rows.append(m)
            ratio = (f", in memory {m['mem_wall']:.3g} s (tiled / in memory "
                     f"{m['wall'] / m['mem_wall']:.2f}, same result: {m['same']})"
                     if m["mem_wall"] else "")
            print(f"n = {n}: {m['n_tiles']} tiles of {chunks} ({_fmt_bytes(m['tile_bytes'])} "
                  f"each); built in {m['build']:.3g} s ({m['s_pair'] * 1e9:.3g} ns per "
                  f"pair per worker); one pass of 200 vectors {m['one_pass']:.3g} s "
                  f"({m['one_pass'] / m['n_tiles'] * args.workers:.3g} s per tile per worker, "
                  f"{_fmt_bytes(m['moved_per_tile'])} moved per tile), latency of a pass "
                  f"{m['latency']:.3g} s; PERMANOVA ({args.perms} permutations): "
                  f"{m['passes']} passes, {m['wall']:.3g} s{ratio}; pseudo-F "
                  f"{m['pseudo_f']:.6g}, p = {m['pvalue']:.4g}", flush=True)
    ref = rows[-1]
    print(f"\nProjection from n = {ref['n']} ({ref['s_pair'] * 1e9:.3g} ns per pair and "
          f"{ref['s_mac'] * 1e9:.3g} ns per multiply-add per worker, "
          f"{ref['latency']:.3g} s latency per pass), {args.perms} permutations, one "
          "factor; cost ~ n^2 (tiles) x P (permutations) / workers:")
    print(f"{'n':>9} {'workers':>8} {'tiles built':>12} {'products':>10} {'wall':>10} "
          f"{'tiles per worker':>17}")
    for n in (30_000, 100_000, 1_000_000):
        for w in (args.workers, 32, 256):
            pr = project(n, w, args.perms, ref)
            print(f"{n:>9} {w:>8} {_fmt_s(pr['build']):>12} {_fmt_s(pr['products']):>10} "
                  f"{_fmt_s(pr['wall']):>10} {_fmt_bytes(pr['per_worker']):>17}")
    print("(float64 D^2 tiles; dtype='float32' halves the memory per worker.)")


if __name__ == "__main__":
    main()
