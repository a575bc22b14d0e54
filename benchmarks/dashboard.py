"""Speed of the dashboard's live path: exponent slider -> core calls -> figures.

Drives a real ``ShapePanel`` headless: every step sets ``panel.exponent.value`` to an
exponent not seen before (so the transformed dissimilarity is never in the core's cache,
as when a user drags the slider), which runs ``tly.size_shape(...)`` and
``tly.pcoa(tly.dissimilarity(...), dims=2)``, builds the partition bars and the ordination
and copies them into the FigureWidgets. Printed per table size and measure:

* compute: seconds spent in the core calls (``panel.last_compute``), median over steps;
* handler: the whole update (compute + figures + widget copies), median;
* both as ratios to one cold ``tly.dissimilarity`` call of the same setting, timed in the
  same run (a bare time means little on a shared machine);
* the share intervals (``n_boot``, the panel's default) that follow in the background once
  the slider settles: seconds from the end of the handler to the intervals drawn (the
  settle delay excluded), also as a ratio to the handler. The handler itself only
  schedules them (steps come faster than the settle delay, so none starts mid-drag);
* where the compute goes: the core functions that take the most time in one step.

Targets (DESIGN.md): compute under 150 ms at 200 samples x 100 taxa and under 1.5 s at
2000 x 300; the whole handler at most 100 ms and 250 ms there.

Run: python benchmarks/dashboard.py [--quick]
"""
from __future__ import annotations

import cProfile
import pstats
import statistics
import sys
import time

from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))   # this checkout's package
import tallyform as tly  # noqa: E402
from tallyform.core.cache import clear_cache  # noqa: E402

TARGETS = {(200, 100): 0.15, (2000, 300): 1.5}
# the whole handler (compute + figures), for Bray-Curtis and Hellinger (issue targets)
HANDLER_TARGETS = {(200, 100): 0.10, (2000, 300): 0.25}


def synthetic_table(n, p, seed=7):
    """Invented data: four groups, two differing in size, one in composition."""
    design = pd.DataFrame({"grp": np.repeat(["a", "b", "c", "d"], n // 4)},
                          index=[f"s{i:04d}" for i in range(n)])
    raw = tly.simulate_community(design, n_taxa=p, mean_total=800,
                                 size_effects={"grp": {"b": 0.5, "c": 1.5}},
                                 shape_effects={"grp": {"d": {j: 3.0 for j in range(10)}}},
                                 rng=seed)
    return tly.CommunityTable(raw.counts, raw.samples, empty="drop")


def reference(tab, measure, exponents):
    """Median of cold dissimilarity() calls at the given exponents (distances formed)."""
    out = []
    for a in exponents:
        clear_cache()
        t = time.perf_counter()
        tly.dissimilarity(tab, measure, transform=tly.Power(a)).condensed
        out.append(time.perf_counter() - t)
    return statistics.median(out)


def slider_steps(panel, exponents):
    compute, handler = [], []
    for a in exponents:
        t = time.perf_counter()
        panel.exponent.value = a
        handler.append(time.perf_counter() - t)
        compute.append(panel.last_compute)
        assert panel.error is None, panel.messages.text
    return statistics.median(compute), statistics.median(handler)


def background_intervals(panel, exponent):
    """Seconds from the handler's end to the intervals drawn (no settle delay)."""
    delay = panel._runner.delay
    panel._runner.delay = 0.0
    try:
        panel.exponent.value = exponent
        t = time.perf_counter()
        assert panel.wait_intervals(600)
        elapsed = time.perf_counter() - t
        assert panel.intervals_result is not None, panel.interval_state.value
    finally:
        panel._runner.delay = delay
    return elapsed


def where_time_goes(panel, exponent, top=6):
    prof = cProfile.Profile()
    prof.enable()
    panel.exponent.value = exponent
    prof.disable()
    stats = pstats.Stats(prof)
    rows = []
    for (file, _, func), (_, _, _, cum, _) in stats.stats.items():
        if "tallyform/core" in file or func in ("eigvalsh", "eigh", "eigsh", "svd"):
            rows.append((cum, f"{file.split('tallyform/')[-1]}:{func}"))
    rows.sort(reverse=True)
    return rows[:top]


def main(quick=False):
    from tallyform.widgets import ShapePanel
    import os
    load = ", ".join(f"{x:.1f}" for x in os.getloadavg())
    print(f"load average (1, 5, 15 min): {load} on {os.cpu_count()} cores; BLAS threads: "
          f"{os.environ.get('OPENBLAS_NUM_THREADS', 'default')} (a loaded shared machine "
          "slows multi-threaded BLAS far more than single-threaded)")
    steps = 5 if quick else 9
    exponents = [round(0.95 - 0.05 * i, 2) for i in range(steps)]
    for (n, p), target in TARGETS.items():
        tab = synthetic_table(n, p)
        print(f"\ntable: {tab.n_samples} samples x {tab.n_taxa} taxa (synthetic)")
        for measure in ("bray_curtis", "hellinger"):
            clear_cache()
            panel = ShapePanel(tab, group="grp")
            panel.measure.value = measure               # warm-up: numba, imports, figures
            panel.cancel_intervals()           # nothing in the background while timing
            panel.wait_intervals(120)          # (a cancelled run stops at its next poll)
            ref = reference(tab, measure, [a + 0.001 for a in exponents])
            compute, handler = slider_steps(panel, exponents)
            boot = background_intervals(panel, 0.321)
            print(f"  {measure:12s} compute median {1000 * compute:8.1f} ms "
                  f"(target < {1000 * target:.0f} ms: {'met' if compute < target else 'NOT met'})"
                  f" = {compute / ref:6.1f} x one dissimilarity call ({1000 * ref:.1f} ms); "
                  f"whole handler {1000 * handler:8.1f} ms = {handler / ref:6.1f} x "
                  f"(target <= {1000 * HANDLER_TARGETS[(n, p)]:.0f} ms: "
                  f"{'met' if handler <= HANDLER_TARGETS[(n, p)] else 'NOT met'}); "
                  f"slider live while dragging: {panel.exponent.continuous_update}")
            print(f"  {'':12s} intervals ({panel.intervals.value} resamples, background) "
                  f"{1000 * boot:8.1f} ms after the handler = {boot / handler:6.1f} x the "
                  "handler")
            if compute > target:
                print("    where one step's compute goes (cumulative seconds):")
                panel.intervals.value = 0            # the live path alone
                for cum, name in where_time_goes(panel, 0.123):
                    print(f"      {cum:7.3f}  {name}")
            panel.cancel_intervals()


if __name__ == "__main__":
    main(quick="--quick" in sys.argv)
