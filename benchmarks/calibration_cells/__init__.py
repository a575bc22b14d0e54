"""Calibration cells: one module per family of tests or intervals.

Every module defines ``CELLS``, a list of :class:`benchmarks.calibration_cells.base.Cell`.
``benchmarks/calibration.py`` runs them all (the full table in docs/calibration.md) and
``tests/calibration/test_calibration.py`` runs a short version of each in the suite.
A new test or interval in tallyform adds its cells here, in its family's module.
"""
from __future__ import annotations

import importlib
import pkgutil

from .base import Cell, run_cell, CellResult  # noqa: F401


def all_cells() -> list:
    """Every registered cell, in module order (modules sorted by name)."""
    out = []
    for info in sorted(pkgutil.iter_modules(__path__), key=lambda m: m.name):
        if info.name in ("base", "generators"):
            continue
        mod = importlib.import_module(f"{__name__}.{info.name}")
        out.extend(getattr(mod, "CELLS", []))
    ids = [c.id for c in out]
    dup = sorted({i for i in ids if ids.count(i) > 1})
    if dup:
        raise ValueError(f"calibration cell ids must be unique; repeated: {dup}")
    return out
