"""BLAS on one thread for a while, safe when several threads ask at once.

threadpoolctl's limits are process-wide. Two threads that each limit and then restore can
leave BLAS on one thread for good: the second one saves the first one's limit as "the
original" and restores it last. Here the first caller saves and limits, the last one to
leave restores, and those in between share the limit. Without threadpoolctl (it comes with
scikit-learn) nothing is limited.

Recent threadpoolctl lets only one "controlling" thread change OpenBLAS's process-wide pool
(the thread that set a limit first, until it leaves its own limit block); a set from any other
thread is silently dropped. The limit here is taken without that block, so the thread that
restores releases the control before and after restoring (``clear_controlling_thread``),
or the original count would not come back while the first thread lives.
"""
from __future__ import annotations

import contextlib
import threading

__all__ = ["one_blas_thread", "blas_threads"]

_LOCK = threading.Lock()
_state = {"count": 0, "limiter": None, "outside": None}


def _release_control() -> None:
    """Let any thread set OpenBLAS's limits again (threadpoolctl >= 3.6; a no-op before)."""
    try:
        from threadpoolctl import OpenBLASController
    except ImportError:                                     # pragma: no cover
        return
    clear = getattr(OpenBLASController, "clear_controlling_thread", None)
    if clear is not None:
        clear(force=True)


def _current() -> int:
    try:
        from threadpoolctl import threadpool_info
    except ImportError:                                     # pragma: no cover
        return 1
    return max([int(i.get("num_threads", 1)) for i in threadpool_info()
                if i.get("user_api") == "blas"], default=1)


def blas_threads() -> int:
    """The number of BLAS threads outside any :func:`one_blas_thread` block."""
    with _LOCK:
        if _state["count"]:
            return _state["outside"]
    return _current()


@contextlib.contextmanager
def one_blas_thread():
    """Within the block (and in every other thread while it lasts) BLAS runs on one thread."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:                                     # pragma: no cover
        yield
        return
    with _LOCK:
        if _state["count"] == 0:
            _state["outside"] = _current()
            _state["limiter"] = threadpool_limits(limits=1, user_api="blas")
        _state["count"] += 1
    try:
        yield
    finally:
        with _LOCK:
            _state["count"] -= 1
            if _state["count"] == 0:
                _release_control()
                _state["limiter"].restore_original_limits()
                _release_control()
                _state["limiter"] = None
