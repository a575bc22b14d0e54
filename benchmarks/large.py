"""Large data end to end: 20 000 samples x 2000 taxa of sparse counts (synthetic).

Run from the repository root:  python benchmarks/large.py  [--n 20000] [--quick]

Steps, each timed at the full size and at a reference size n_ref = n / 10 in the same run,
with the time ratio compared with the ratio the algorithm's complexity predicts:

1. Bray-Curtis dissimilarities stored as float32 (n (n - 1) / 2 values; the memory estimate is
   printed and checked against the limit first). Expected ratio: (n / n_ref)^2.
2. PCoA of them, 10 leading axes (ARPACK on the squared distances as an operator: one pass
   over n^2 values per product). Expected: (n / n_ref)^2 per product, times the ratio of the
   number of products (printed).
3. PERMANOVA, one factor, 999 permutations, Hellinger on its feature path (n x p features,
   no n x n matrix). Expected: n / n_ref.
4. The memory guard: a full eigen-decomposition of the n x n Gower matrix (5 n^2 doubles),
   and float64 Bray-Curtis for 100 000 samples, must be refused before any allocation, with
   the size and the alternatives in the message.

Peak memory: the traced peak (tracemalloc) of each step, and the process's maximum resident
set (ru_maxrss) after it. The machine may be shared with other work: reference steps are
the best of three runs (all shown), full-size steps single runs (they take minutes), so read
ratios to within about 30 %.
"""
from __future__ import annotations

import argparse
import resource
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import tallyform as tly  # noqa: E402
from tallyform.core.cache import clear_cache  # noqa: E402
from tallyform.core.errors import format_bytes  # noqa: E402
from tallyform.core.memory import memory_limit  # noqa: E402


def sparse_counts(n: int, p: int, seed: int = 1, chunk: int = 2000) -> np.ndarray:
    """Counts of n samples x p taxa, about 5 % non-zero, three groups (synthetic).

    Simulated in chunks of rows, so that generation needs no temporaries of the full size.
    """
    rng = np.random.default_rng(seed)
    base = rng.gamma(0.4, 1.0, size=p)
    shift = rng.gamma(4.0, 0.25, size=(3, p))
    out = np.zeros((n, p))
    for i0 in range(0, n, chunk):
        i1 = min(i0 + chunk, n)
        g = np.arange(i0, i1) % 3
        present = rng.random((i1 - i0, p)) < 0.05
        mu = base * shift[g] * rng.lognormal(0, 0.4, size=(i1 - i0, 1)) * 40
        out[i0:i1] = np.where(present, rng.poisson(mu) + 1, 0)
    return out


def table(x: np.ndarray) -> tly.CommunityTable:
    labels = [f"s{i}" for i in range(len(x))]
    info = pd.DataFrame({"group": np.array(["a", "b", "c"])[np.arange(len(x)) % 3]},
                        index=labels)
    return tly.CommunityTable(pd.DataFrame(x, index=labels, copy=False), info, empty="drop")


def rss() -> str:
    return format_bytes(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024)


def step(name, fn, repeats=1):
    """Run ``fn`` (``repeats`` times: the reference steps are short, so the best of three
    shields their ratio from a busy moment of a shared machine); time, traced peak."""
    runs = []
    for _ in range(repeats):
        clear_cache()                 # time the computation, not tallyform's result cache
        tracemalloc.start()
        t = time.perf_counter()
        out = fn()
        runs.append(time.perf_counter() - t)
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
    dt = min(runs)
    shown = ", ".join(f"{r:.2f}" for r in runs)
    print(f"  {name:<44s} {dt:8.2f} s   traced peak {format_bytes(peak):>9s}   "
          f"max RSS so far {rss()}" + (f"   (runs: {shown})" if repeats > 1 else ""),
          flush=True)
    return out, dt, peak


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--n", type=int, default=20_000)
    ap.add_argument("--p", type=int, default=2000)
    ap.add_argument("--quick", action="store_true", help="n = 4000 (a smoke run)")
    args = ap.parse_args()
    n = 4000 if args.quick else args.n
    p, n_ref = args.p, max(n // 10, 200)
    scale = n / n_ref
    print(f"large data: {n} x {p} sparse counts (reference n = {n_ref}); memory limit "
          f"{format_bytes(memory_limit())}")

    t0 = time.perf_counter()
    x = sparse_counts(n, p)
    print(f"  simulated in {time.perf_counter() - t0:.1f} s: {format_bytes(x.nbytes)}, "
          f"{100 * np.mean(x > 0):.1f} % non-zero")
    big, ref = table(x), table(x[:n_ref])
    del x
    print(f"  tables built; max RSS {rss()}")

    # compile the kernels once (numba caches them on disk) so that no timing includes it
    tly.dissimilarity(table(sparse_counts(300, 50, seed=2)), "bray_curtis", dtype="float32")
    need = n * (n - 1) / 2 * 4
    print(f"1. Bray-Curtis, float32: estimate {format_bytes(need)} "
          f"({100 * need / memory_limit():.0f} % of the limit)")
    d_ref, t_ref, _ = step(f"n = {n_ref}", lambda: tly.dissimilarity(ref, "bray_curtis",
                                                                     dtype="float32"),
                           repeats=3)
    d_big, t_big, _ = step(f"n = {n}", lambda: tly.dissimilarity(big, "bray_curtis",
                                                                 dtype="float32"))
    print(f"   time ratio {t_big / t_ref:.0f} (n^2 predicts {scale ** 2:.0f}): "
          f"{t_big / t_ref / scale ** 2:.2f} x the prediction")

    print("2. PCoA, 10 leading axes")
    counter = {"n": 0}
    from tallyform.core import eigen
    original = eigen.gower_operator

    def counted(d):
        op = original(d)
        mv = op.matvec

        def matvec(v):
            counter["n"] += 1
            return mv(v)
        from scipy.sparse.linalg import LinearOperator
        return LinearOperator(op.shape, matvec=matvec, matmat=lambda m: np.column_stack(
            [matvec(c) for c in m.T]), dtype=np.float64)

    import tallyform.core.ordination as ordmod
    original_smallest = ordmod.smallest_eigenvalue

    def smallest(G, tol=1e-10):          # products spent on the note about negative values
        counter["leading"] = counter["n"]
        return original_smallest(G, tol=tol)

    ordmod.gower_operator, ordmod.smallest_eigenvalue = counted, smallest
    try:
        counter.update(n=0, leading=None)
        _, t_ref, _ = step(f"n = {n_ref}", lambda: (counter.update(n=0, leading=None),
                                                     tly.pcoa(d_ref, dims=10))[1], repeats=3)
        k_ref, lead_ref = counter["n"], counter["leading"]
        counter.update(n=0, leading=None)
        o, t_big, _ = step(f"n = {n}", lambda: tly.pcoa(d_big, dims=10))
        k_big, lead_big = counter["n"], counter["leading"]
    finally:
        ordmod.gower_operator, ordmod.smallest_eigenvalue = original, original_smallest
    pred = scale ** 2 * k_big / max(k_ref, 1)
    print(f"   operator products: {k_ref} at n = {n_ref} ({lead_ref} for the 10 axes, the "
          f"rest for the smallest eigenvalue, which the note on negative eigenvalues "
          f"needs), {k_big} at n = {n} ({lead_big} for the axes)")
    print(f"   time ratio {t_big / t_ref:.0f} (n^2 x products predicts {pred:.0f}): "
          f"{t_big / t_ref / pred:.2f} x the prediction; first axes explain "
          f"{', '.join(f'{100 * v:.2f} %' for v in o.explained.iloc[:3])}")
    t = time.perf_counter()
    try:
        tly.pcoa(d_big)
        print("   (4) full PCoA was NOT refused")
    except tly.TooLargeError as exc:
        print(f"   (4) every eigenvalue of the {n} x {n} Gower matrix: refused in "
              f"{time.perf_counter() - t:.3f} s: {exc}")
    del d_big, o

    print("3. PERMANOVA, Hellinger feature path, 999 permutations")
    h_ref, h_big = tly.dissimilarity(ref, "hellinger"), tly.dissimilarity(big, "hellinger")
    r_ref, t_ref, _ = step(f"n = {n_ref}", lambda: tly.permanova(
        h_ref, ref, ["group"], n_permutations=999, rng=1), repeats=3)
    r_big, t_big, peak = step(f"n = {n}", lambda: tly.permanova(
        h_big, big, ["group"], n_permutations=999, rng=1))
    print(f"   time ratio {t_big / t_ref:.1f} (n predicts {scale:.0f}): "
          f"{t_big / t_ref / scale:.2f} x the prediction; traced peak "
          f"{format_bytes(peak)} = {peak / (n * n * 8):.3f} of one n x n float64 matrix; "
          f"pseudo-F {r_big.table.loc['group', 'pseudo_f']:.2f}, "
          f"p = {r_big.pvalue['group']:.3g}")
    del h_ref, h_big

    print("4. Memory guard")
    huge = tly.CommunityTable(np.ones((100_000, 3)) + np.eye(100_000, 3), empty="keep")
    t = time.perf_counter()
    try:
        tly.dissimilarity(huge, "bray_curtis")
        print("   100 000-sample float64 request was NOT refused")
    except tly.TooLargeError as exc:
        print(f"   float64 for 100 000 samples refused in {time.perf_counter() - t:.3f} s: "
              f"{exc}")
    print(f"max RSS of the whole run: {rss()}")


if __name__ == "__main__":
    main()
