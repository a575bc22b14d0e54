"""Fixtures for the headless dashboard tests: small synthetic tables, recording cores."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import tallyform as tly


@pytest.fixture(scope="session")
def mesocosm():
    return tly.demo("mesocosm")           # synthetic demo: 60 samples x 36 taxa


@pytest.fixture(scope="session")
def moths():
    return tly.demo("moths")              # synthetic demo with an effort column


@pytest.fixture
def small_table():
    """A synthetic 24 x 8 table with a factor, a column with a gap, and blocks."""
    rng = np.random.default_rng(3)
    counts = pd.DataFrame(rng.poisson(6.0, size=(24, 8)) + 1.0,
                          index=[f"s{i:02d}" for i in range(24)],
                          columns=[f"taxon_{j}" for j in range(8)])
    info = pd.DataFrame({"site": np.repeat(["north", "south", "east"], 8),
                         "gappy": ["x", None] * 12,
                         "block": np.tile(["b1", "b2"], 12)}, index=counts.index)
    return tly.CommunityTable(counts, info)


class Recorder:
    """A core namespace that forwards to tallyform and counts the calls by name."""

    def __init__(self, **overrides):
        self.counts: dict[str, int] = {}
        self._overrides = overrides

    def __getattr__(self, name):
        fn = self._overrides.get(name) or getattr(tly, name)

        def wrapped(*args, **kwargs):
            self.counts[name] = self.counts.get(name, 0) + 1
            return fn(*args, **kwargs)
        wrapped.__signature__ = __import__("inspect").signature(fn)
        return wrapped

    def reset(self):
        self.counts.clear()


@pytest.fixture
def recorder():
    return Recorder


def no_traceback(text: str) -> bool:
    return "Traceback" not in text and 'File "' not in text


@pytest.fixture
def clean():
    return no_traceback


