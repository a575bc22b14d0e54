"""Memory guard: estimate before any n x n allocation, refuse clearly past a limit.

The limit is, in order: :func:`set_memory_limit`, the environment variable
``TALLYFORM_MEMORY_LIMIT`` (bytes, or with a unit: ``"8GB"``, ``"512MB"``), or 60 % of the
machine's physical memory.
"""
from __future__ import annotations

import os
import re

from .errors import InputError, TooLargeError, format_bytes

__all__ = ["memory_limit", "set_memory_limit", "check_memory", "parse_bytes"]

_limit: int | None = None
_UNITS = {"": 1, "B": 1, "KB": 10**3, "MB": 10**6, "GB": 10**9, "TB": 10**12,
          "KIB": 2**10, "MIB": 2**20, "GIB": 2**30, "TIB": 2**40}


def parse_bytes(text) -> int:
    """``'8GB'`` -> 8_000_000_000; plain numbers are bytes."""
    if isinstance(text, (int, float)):
        return int(text)
    m = re.fullmatch(r"\s*([0-9.]+)\s*([A-Za-z]*)\s*", str(text))
    if not m or m.group(2).upper() not in _UNITS:
        raise InputError(f"cannot read {text!r} as a memory size; use e.g. '8GB' or '512MB'.")
    return int(float(m.group(1)) * _UNITS[m.group(2).upper()])


def _physical_memory() -> int:
    try:
        return int(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):
        return 8 * 10**9


def memory_limit() -> int:
    """The number of bytes a single tallyform allocation may use."""
    if _limit is not None:
        return _limit
    env = os.environ.get("TALLYFORM_MEMORY_LIMIT")
    if env:
        return parse_bytes(env)
    return int(0.6 * _physical_memory())


def set_memory_limit(limit) -> None:
    """Set the limit (bytes or a string such as ``'4GB'``); None restores the default."""
    global _limit
    _limit = None if limit is None else parse_bytes(limit)


def check_memory(nbytes: float, what: str, *, alternatives: str = "") -> None:
    """Raise TooLargeError when ``nbytes`` exceeds the limit, naming the size and options."""
    limit = memory_limit()
    if nbytes > limit:
        raise TooLargeError(
            f"{what} would need {format_bytes(nbytes)}, more than the memory limit of "
            f"{format_bytes(limit)}.", needed_bytes=int(nbytes), limit_bytes=limit,
            hint=(alternatives + " " if alternatives else "") +
                 "The limit can be raised with tallyform.set_memory_limit('...GB') or the "
                 "TALLYFORM_MEMORY_LIMIT environment variable.")
