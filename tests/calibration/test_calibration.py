"""Short run of the calibration table (benchmarks/calibration_cells): every checked cell's
rejection rate or coverage must be consistent with its band (the 99 % Clopper-Pearson
interval of the short run meets the band). The full table, with >= 400 (levels) and >= 200
(coverage) replicates per cell, is built by ``python benchmarks/calibration.py --write`` and
kept in docs/calibration.md.
"""
from __future__ import annotations

import numpy as np
import pytest

from benchmarks.calibration_cells import Cell, all_cells, run_cell
from benchmarks.calibration_cells.base import clopper_pearson

CELLS = [c for c in all_cells() if c.check]


def test_cells_are_registered_with_full_replicates():
    cells = all_cells()
    assert cells, "no calibration cells registered"
    for c in cells:
        floor = 400 if c.kind == "level" else 200
        assert c.reps >= floor, f"{c.id}: the full run needs at least {floor} replicates"
        assert 0 < c.short_reps <= c.reps


@pytest.mark.slow
@pytest.mark.parametrize("cell", CELLS, ids=[c.id for c in CELLS])
def test_short_run_within_band(cell):
    res = run_cell(cell, cell.short_reps)
    assert res.failed <= 0.05 * res.reps, f"{cell.id}: {res.failed} replicates failed to run"
    assert res.consistent, (f"{cell.id}: observed {res.rate:.3f} over {res.reps} replicates; "
                            f"band {cell.acceptance}")


def test_harness_detects_a_liberal_test():
    # a 'test' that rejects 20 % of the time must fail the short-run check
    cell = Cell("harness/liberal", "harness", "p ~ U(0, 0.25)", "none",
                replicate=lambda rng: float(rng.uniform(0, 0.25)), short_reps=100)
    assert not run_cell(cell, 100).consistent
    ok = Cell("harness/exact", "harness", "p ~ U(0, 1)", "none",
              replicate=lambda rng: float(rng.uniform()), short_reps=100)
    assert run_cell(ok, 200).consistent


def test_clopper_pearson_against_scipy():
    # reference: scipy.stats.binomtest(...).proportion_ci(method="exact")
    from scipy.stats import binomtest
    for k, n in [(0, 20), (3, 50), (20, 400), (50, 50)]:
        ref = binomtest(k, n).proportion_ci(0.95, method="exact")
        got = clopper_pearson(k, n)
        assert np.allclose(got, (ref.low, ref.high), atol=1e-12)


def test_replicates_are_reproducible():
    cell = CELLS[0]
    a = [cell.replicate(np.random.default_rng([cell.seed, i])) for i in range(2)]
    b = [cell.replicate(np.random.default_rng([cell.seed, i])) for i in range(2)]
    assert np.allclose(np.asarray(a, float), np.asarray(b, float), equal_nan=True)
