"""Results of the synthetic demo scenarios, computed once per test session for the figures."""
from __future__ import annotations

import dataclasses

import pandas as pd
import pytest

import tallyform as tly


@pytest.fixture(scope="session")
def meso():
    return tly.demo("mesocosm")


@pytest.fixture(scope="session")
def bray(meso):
    return tly.dissimilarity(meso, "bray_curtis")


@pytest.fixture(scope="session")
def partition(meso):
    return tly.size_shape(meso, "bray_curtis", n_permutations=49, rng=1)


@pytest.fixture(scope="session")
def negative_partition(partition):
    """The partition with a clearly negative shared fraction (suppression), as a result."""
    frac = pd.Series({"size_only": 0.30, "shared": -0.08, "shape_only": 0.45,
                      "residual": 0.33}, name="share")
    return dataclasses.replace(partition, fractions=frac)


@pytest.fixture(scope="session")
def grid(meso):
    return tly.scan(meso, measures=["bray_curtis", "hellinger", "euclidean"],
                    transforms=[1.0, 0.5, 0.0])


@pytest.fixture(scope="session")
def partition_ci(meso):
    return tly.size_shape(meso, "bray_curtis", n_permutations=19, n_boot=30, rng=1)


@pytest.fixture(scope="session")
def grid_ci(meso):
    return tly.scan(meso, measures=["bray_curtis", "hellinger"], transforms=[1.0, 0.25],
                    n_boot=20, rng=1)


@pytest.fixture(scope="session")
def comparison(meso):
    return tly.compare_choices(meso, a={"measure": "bray_curtis"},
                               b={"measure": "bray_curtis", "transform": "fourth_root"},
                               n_boot=30, rng=1)


@pytest.fixture(scope="session")
def ordination(bray):
    return tly.pcoa(bray)
