"""The calibration harness: a cell is one (method, design) pair checked by simulation.

A *level* cell simulates studies under a true null and returns each study's p-value; the
observed rejection rate at the nominal alpha must lie in the cell's band (default
[0.03, 0.07] at alpha = 0.05). A *coverage* cell simulates studies with a known truth and
returns whether each 95 % interval covered it; the coverage must lie in its band (default
[0.92, 0.98]). A *reference* cell (``check=False``) is printed beside the others to show what
an unadjusted method does (e.g. the same test without sampling units) and is never checked.

Replicate ``i`` of a cell always gets ``numpy.random.default_rng([seed, i])``, so a row of
the table can be reproduced exactly, alone or in parallel.
"""
from __future__ import annotations

import math
import time
import zlib
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from scipy import stats

__all__ = ["Cell", "CellResult", "run_cell", "clopper_pearson"]


@dataclass(frozen=True)
class Cell:
    """One row of the calibration table.

    Attributes
    ----------
    id : str
        Unique, stable identifier (``family/short-name``), used to select cells.
    family : str
        The family of methods ("PERMANOVA", "size test", "dispersion", ...).
    method : str
        What is checked, in the words of the API (``permanova(units='tank')``).
    design : str
        The simulated design and data generator, in a few words.
    replicate : callable(numpy.random.Generator) -> float or bool
        One simulated study: its p-value (kind 'level') or whether the interval covered the
        truth (kind 'coverage'). NaN p-values count as failures to run and are reported.
    kind : {'level', 'coverage'}
    nominal : float
        alpha for 'level' (default 0.05), the confidence level for 'coverage' (0.95).
    band : (float, float) or None
        Acceptance band of the observed rate; None gives [0.03, 0.07] for a level cell at
        alpha = 0.05 and [0.92, 0.98] for a 95 % coverage cell.
    reps : int
        Replicates of the full run (>= 400 for levels, >= 200 for coverage).
    short_reps : int
        Replicates of the short run inside the test suite.
    check : bool
        False for reference rows (shown, never checked).
    seed : int, optional
        Base seed of the cell (default: a stable hash of its id).
    """

    id: str
    family: str
    method: str
    design: str
    replicate: Callable = field(repr=False)
    kind: str = "level"
    nominal: float | None = None
    band: tuple | None = None
    reps: int = 400
    short_reps: int = 100
    check: bool = True
    seed: int | None = None

    def __post_init__(self):
        if self.kind not in ("level", "coverage"):
            raise ValueError(f"cell {self.id}: kind must be 'level' or 'coverage'.")
        if self.seed is None:
            # every cell its own stream (a stable function of its id), so Monte Carlo errors
            # are not shared between cells
            object.__setattr__(self, "seed", zlib.crc32(self.id.encode()))

    @property
    def alpha(self) -> float:
        return self.nominal if self.nominal is not None else (
            0.05 if self.kind == "level" else 0.95)

    @property
    def acceptance(self) -> tuple:
        if self.band is not None:
            return self.band
        if self.kind == "level":
            return (0.6 * self.alpha, 1.4 * self.alpha)
        return (self.alpha - 0.03, self.alpha + 0.03)


@dataclass(frozen=True)
class CellResult:
    cell: Cell
    reps: int
    hits: int
    failed: int
    rate: float
    ci: tuple
    seconds: float

    @property
    def inside(self) -> bool:
        lo, hi = self.cell.acceptance
        return lo <= self.rate <= hi

    @property
    def consistent(self) -> bool:
        """True when the band is within Monte Carlo reach of the observed rate: the 99 %
        Clopper-Pearson interval of the rate meets the band (used by the short run)."""
        lo, hi = self.cell.acceptance
        c_lo, c_hi = clopper_pearson(self.hits, self.reps - self.failed, 0.99)
        return c_hi >= lo and c_lo <= hi

    def row(self) -> dict:
        lo, hi = self.cell.acceptance
        return {"id": self.cell.id, "family": self.cell.family, "method": self.cell.method,
                "design": self.cell.design, "kind": self.cell.kind,
                "nominal": self.cell.alpha, "observed": self.rate,
                "mc_low": self.ci[0], "mc_high": self.ci[1], "band_low": lo, "band_high": hi,
                "replicates": self.reps - self.failed, "failed": self.failed,
                "checked": self.cell.check,
                "verdict": verdict(self.cell.check, self.cell.kind, self.rate, lo, hi),
                "seconds": round(self.seconds, 1)}


def verdict(checked: bool, kind: str, rate: float, lo: float, hi: float) -> str:
    """'ok', 'reference', or which side of its band a checked cell fell on, in words."""
    if not checked:
        return "reference"
    if lo <= rate <= hi:
        return "ok"
    if kind == "coverage":
        return "OUT OF BAND: covers too rarely" if rate < lo else "OUT OF BAND: covers too often"
    return ("OUT OF BAND: conservative" if rate < lo
            else "OUT OF BAND: rejects too often")


def clopper_pearson(k: int, n: int, level: float = 0.95) -> tuple:
    """Exact binomial interval (Clopper & Pearson 1934)."""
    if n <= 0:
        return (math.nan, math.nan)
    a = 1 - level
    lo = 0.0 if k == 0 else float(stats.beta.ppf(a / 2, k, n - k + 1))
    hi = 1.0 if k == n else float(stats.beta.ppf(1 - a / 2, k + 1, n - k))
    return (lo, hi)


def run_cell(cell: Cell, reps: int | None = None) -> CellResult:
    """Run ``reps`` replicates of a cell (default ``cell.reps``)."""
    reps = cell.reps if reps is None else int(reps)
    t0 = time.perf_counter()
    hits = failed = 0
    for i in range(reps):
        rng = np.random.default_rng([cell.seed, i])
        out = cell.replicate(rng)
        if cell.kind == "level":
            p = float(out)
            if not np.isfinite(p):
                failed += 1
            elif p <= cell.alpha:
                hits += 1
        else:
            if out is None or (isinstance(out, float) and not np.isfinite(out)):
                failed += 1
            elif bool(out):
                hits += 1
    done = reps - failed
    rate = hits / done if done else math.nan
    return CellResult(cell, reps, hits, failed, rate, clopper_pearson(hits, done),
                      time.perf_counter() - t0)
