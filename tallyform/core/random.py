"""Random streams: one keyword ``rng`` (None, a whole-number seed or a numpy Generator)."""
from __future__ import annotations

import numpy as np

from .errors import InputError

__all__ = ["as_rng"]


def as_rng(rng, name: str = "rng") -> np.random.Generator:
    """``np.random.default_rng(rng)``, with a readable error for values it cannot take.

    Same seed, same stream on every machine (numpy's PCG64); a Generator is used as given.
    """
    if isinstance(rng, (bool, np.bool_)) or isinstance(rng, (float, np.floating)):
        raise InputError(f"`{name}` must be None, a whole-number seed >= 0 or a "
                         f"numpy.random.Generator; got {rng!r}.")
    try:
        return np.random.default_rng(rng)
    except (TypeError, ValueError) as err:
        raise InputError(f"`{name}` must be None, a whole-number seed >= 0 or a "
                         f"numpy.random.Generator; got {rng!r} ({err}).") from None
