"""Long compiled calls that still let an interruption through.

Python handles Ctrl-C (a notebook's stop button, SIGINT) between bytecodes of the main
thread, so one long LAPACK call (a full eigen-decomposition of 2 000 x 2 000 takes seconds)
delays :class:`~tallyform.errors.Cancelled` until it returns. :func:`eigh` runs such a call in
a worker thread while the main thread waits in short, interruptible steps: the interruption
is raised at once and the abandoned result is dropped when the worker ends. numpy releases
the GIL inside LAPACK, so the waiting costs nothing; small matrices are decomposed directly.
"""
from __future__ import annotations

import threading

import numpy as np

__all__ = ["eigh", "in_worker"]

#: Matrices at least this wide are decomposed in a worker thread (below: milliseconds).
WORKER_FROM = 400
_POLL = 0.05


def in_worker(fn, *args, **kwargs):
    """``fn(*args, **kwargs)`` in a worker thread, waited for in interruptible steps.

    Outside the main thread (where interruptions are never delivered) it is a plain call.
    """
    if threading.current_thread() is not threading.main_thread():
        return fn(*args, **kwargs)
    box: dict = {}

    def work():
        try:
            box["out"] = fn(*args, **kwargs)
        except BaseException as err:          # handed to the caller below
            box["err"] = err

    worker = threading.Thread(target=work, name="tallyform-linalg", daemon=True)
    worker.start()
    while worker.is_alive():
        worker.join(_POLL)
    if "err" in box:
        raise box["err"]
    return box["out"]


def eigh(a: np.ndarray):
    """``numpy.linalg.eigh(a)``, interruptible when ``a`` is large (same numbers)."""
    if a.shape[0] < WORKER_FROM:
        return np.linalg.eigh(a)
    return in_worker(np.linalg.eigh, a)
