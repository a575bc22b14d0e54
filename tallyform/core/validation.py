"""One home for the checks of option and number arguments.

Every public call checks its keyword options here, so the same mistake gets the same
message everywhere: the argument's name, what it must be, and what was given. Each check
returns the value in its canonical type (a Python ``int`` or ``float``), so callers use what
the check returns.
"""
from __future__ import annotations

import math
import numbers

from .errors import InputError

__all__ = ["check_option", "check_whole", "check_fraction", "check_n_permutations"]


def check_option(name: str, value, allowed):
    """``value`` if it is one of ``allowed``; otherwise InputError listing them.

    >>> check_option("ss", "marginal", ("sequential", "marginal"))
    'marginal'
    """
    try:
        ok = value in allowed
    except TypeError:                    # unhashable value against a set or dict
        ok = False
    if not ok:
        raise InputError(f"`{name}` must be one of {list(allowed)}; got {value!r}.")
    return value


def check_whole(name: str, value, low: int = 0) -> int:
    """``value`` as an int if it is a whole number (not a bool) of at least ``low``.

    >>> check_whole("n_boot", 99, 1)
    99
    """
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < low:
        raise InputError(f"`{name}` must be a whole number of at least {low}; got {value!r}.")
    return int(value)


def check_fraction(name: str, value) -> float:
    """``value`` as a float if it is a real number strictly between 0 and 1 (a level or an
    alpha); bools, strings and NaN are refused.

    >>> check_fraction("alpha", 0.05)
    0.05
    """
    if isinstance(value, bool) or not isinstance(value, numbers.Real) \
            or not math.isfinite(float(value)) or not 0 < float(value) < 1:
        raise InputError(f"`{name}` must be a number between 0 and 1 (exclusive); got "
                         f"{value!r}.")
    return float(value)


def check_n_permutations(n_permutations) -> int:
    """The number of permutations as an int (0 allowed: no test)."""
    if isinstance(n_permutations, bool) or not isinstance(n_permutations, numbers.Integral) \
            or n_permutations < 0:
        raise InputError(f"`n_permutations` must be a whole number >= 0; got "
                         f"{n_permutations!r}.")
    return int(n_permutations)
