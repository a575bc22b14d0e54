"""Low-level distance kernels (the hot loops). Pure functions on float64 arrays."""
from __future__ import annotations

import numpy as np
from scipy.spatial.distance import pdist

__all__ = ["euclidean_condensed"]


def euclidean_condensed(features: np.ndarray) -> np.ndarray:
    """Condensed Euclidean distances between the rows of ``features``."""
    return pdist(np.asarray(features, dtype=np.float64), "euclidean")
