"""Shared fixtures: small tables built in code (nothing is downloaded)."""
from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest


@pytest.fixture
def small_counts() -> pd.DataFrame:
    return pd.DataFrame(
        [[3, 0, 1, 5], [1, 1, 0, 2], [0, 4, 2, 2], [6, 1, 1, 0]],
        index=["s1", "s2", "s3", "s4"], columns=["Ta", "Tb", "Tc", "Td"], dtype=float)


@pytest.fixture
def small_samples() -> pd.DataFrame:
    return pd.DataFrame({"treatment": ["a", "a", "b", "b"], "nights": [1, 2, 1, 3]},
                        index=["s1", "s2", "s3", "s4"])


def file_digest(path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


@pytest.fixture
def unchanged():
    """Context helper: assert that files keep their bytes across a block of code."""
    class _Guard:
        def __init__(self):
            self.before = {}

        def watch(self, *paths):
            for p in paths:
                self.before[Path(p)] = file_digest(p)
            return self

        def check(self):
            for p, h in self.before.items():
                assert file_digest(p) == h, f"{p} was modified"
    g = _Guard()
    yield g
    g.check()


@pytest.fixture
def rng():
    return np.random.default_rng(12345)


@pytest.fixture
def null_table():
    """Synthetic: 24 samples x 10 taxa, one gamma-Poisson composition for all three groups
    of 'site' (no difference), so the p-values are not at their floor."""
    import tallyform as tly
    rng = np.random.default_rng(11)
    mean = rng.gamma(2.0, 8.0, size=10)
    counts = rng.poisson(mean * rng.gamma(3.0, 1 / 3.0, size=(24, 10))) + 1
    labels = [f"s{i:02d}" for i in range(24)]
    info = pd.DataFrame({"site": np.repeat(["north", "south", "east"], 8)}, index=labels)
    return tly.CommunityTable(pd.DataFrame(counts, index=labels,
                                           columns=[f"t{j}" for j in range(10)]), info)
