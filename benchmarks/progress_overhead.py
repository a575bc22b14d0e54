"""What the progress machinery costs: PERMANOVA of 500 samples with 999 permutations.

Run from the repository root:  python benchmarks/progress_overhead.py  [--repeats 15]

Three ways of calling the same test, timed in one run (interleaved, best of ``--repeats``):
``progress=False`` (the reference), ``progress=True`` with a stand-in display (what a
notebook bar costs the computation, without drawing), and a callable. Printed: each time
divided by the reference's (target <= 1.02). Data are synthetic.
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


class StandIn:
    """A display that accepts everything a bar would get and draws nothing."""
    shows = 0

    def show(self, done, total, rate, left, *, final=False):
        StandIn.shows += 1

    def message(self, text):
        pass

    def close(self, *, failed=False):
        pass


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=15)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(1)
    n, p = 500, 200
    g = np.arange(n) % 3
    prof = rng.gamma(0.5, 1.0, size=p) * np.exp(0.2 * rng.standard_normal((3, p)))[g]
    counts = rng.poisson(prof / prof.sum(axis=1, keepdims=True) * 2000)
    labels = [f"s{i}" for i in range(n)]
    info = pd.DataFrame({"group": np.array(["a", "b", "c"])[g]}, index=labels)
    d = dissimilarity(pd.DataFrame(counts, index=labels), "bray_curtis")
    P._display_for = lambda label: StandIn()          # progress=True draws on the stand-in
    P.SHOW_AFTER = 0.0                                # and draws from the start
    ticks = []
    ways = {"progress=False": False, "progress=True (stand-in display)": True,
            "progress=callable": lambda done, total: ticks.append(done)}
    best = {k: np.inf for k in ways}
    permanova(d, info, "group", n_permutations=99, progress=False)      # warm up
    for _ in range(args.repeats):
        for name, how in ways.items():
            t = time.perf_counter()
            permanova(d, info, "group", n_permutations=999, rng=1, progress=how)
            best[name] = min(best[name], time.perf_counter() - t)
    ref = best["progress=False"]
    for name, t in best.items():
        print(f"{name:36s} ratio {t / ref:.3f}")


if __name__ == "__main__":
    main()
