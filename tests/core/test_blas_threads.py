"""one_blas_thread: BLAS on one thread inside, the original number restored when the last
block ends, whatever the order in which threads enter and leave (the reference is
threadpoolctl's own report of the BLAS thread count)."""
from __future__ import annotations

import threading

import pytest

threadpoolctl = pytest.importorskip("threadpoolctl")

from tallyform.core.blas_threads import blas_threads, one_blas_thread  # noqa: E402


def _now() -> int:
    return max(i["num_threads"] for i in threadpoolctl.threadpool_info()
               if i["user_api"] == "blas")


def test_limit_inside_and_restore_after():
    before = _now()
    with one_blas_thread():
        assert _now() == 1
        assert blas_threads() == before          # what BLAS has outside the block
        with one_blas_thread():                  # nested: still one, still restored once
            assert _now() == 1
        assert _now() == 1
    assert _now() == before


def test_interleaved_threads_leave_the_original_count():
    # A enters, B enters, A leaves, B leaves: with per-call save/restore B would restore
    # A's limit (1) as "the original"
    before = _now()
    a_in, b_in, a_out = threading.Event(), threading.Event(), threading.Event()
    seen = {}

    def a():
        with one_blas_thread():
            a_in.set()
            b_in.wait(5)
        a_out.set()

    def b():
        a_in.wait(5)
        with one_blas_thread():
            b_in.set()
            a_out.wait(5)
            seen["b_after_a_left"] = _now()

    ta, tb = threading.Thread(target=a), threading.Thread(target=b)
    ta.start(), tb.start()
    ta.join(10), tb.join(10)
    assert seen["b_after_a_left"] == 1           # B's block is still limited
    assert _now() == before


def test_an_error_inside_still_restores():
    before = _now()
    with pytest.raises(RuntimeError):
        with one_blas_thread():
            raise RuntimeError("inside")
    assert _now() == before


def test_a_thread_after_the_main_one_still_limits_and_restores():
    before = _now()
    with one_blas_thread():                      # the main thread takes the control first
        pass
    seen = {}

    def worker():
        with one_blas_thread():
            seen["inside"] = _now()

    t = threading.Thread(target=worker)
    t.start()
    t.join(10)
    assert seen["inside"] == 1
    assert _now() == before
