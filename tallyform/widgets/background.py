"""One core call at a time in the background, started once the controls have settled.

A slider fires many changes while it is dragged. :class:`SettledRunner` waits until no new
request has come for ``delay`` seconds, then runs the latest request in a daemon thread with
a ``cancel`` callback; a new request (or :meth:`SettledRunner.cancel`) stops the pending or
running one, whose result is then dropped. Only the result of the latest request is handed
to ``on_done``, under a lock that :meth:`SettledRunner.cancel` also takes, so a panel that
cancels before it redraws never sees a stale result drawn over its new figure.

It computes nothing itself: the work is a core call handed over by the panel.
"""
from __future__ import annotations

import threading
from typing import Callable

from ..core.errors import Cancelled

__all__ = ["SettledRunner"]


class SettledRunner:
    """Debounced, cancellable background runner of one call at a time.

    Parameters
    ----------
    delay : float
        Seconds without a new request before the work starts.

    Attributes
    ----------
    state : str
        'idle', 'waiting' (for the controls to settle), 'running', 'done', 'cancelled' or
        'error' (of the latest request).
    """

    def __init__(self, delay: float = 0.5):
        self.delay = float(delay)
        self.state = "idle"
        self._lock = threading.RLock()
        self._generation = 0
        self._stop: threading.Event | None = None
        self._thread: threading.Thread | None = None

    def request(self, work: Callable, on_done: Callable, *,
                on_progress: Callable | None = None) -> None:
        """Run ``work(progress, cancel)`` once the requests stop for ``delay`` seconds, then
        ``on_done(result, error)`` (error None on success) if no newer request came."""
        with self._lock:
            self._stop_current()
            self._generation += 1
            stop = threading.Event()
            self._stop = stop
            self.state = "waiting"
            thread = threading.Thread(target=self._run, name="tallyform-background",
                                      args=(self._generation, stop, work, on_done,
                                            on_progress), daemon=True)
            self._thread = thread
        thread.start()

    def cancel(self) -> None:
        """Stop the pending or running work; its result, if any, is dropped."""
        with self._lock:
            self._stop_current()
            self._generation += 1
            if self.state in ("waiting", "running"):
                self.state = "cancelled"

    def wait(self, timeout: float | None = None) -> bool:
        """Wait for the latest work to end (or be dropped); True when it has."""
        thread = self._thread
        if thread is not None:
            thread.join(timeout)
        return thread is None or not thread.is_alive()

    @property
    def busy(self) -> bool:
        return self.state in ("waiting", "running")

    def hold(self):
        """The lock under which results are handed over: hold it while drawing, so no
        result lands half-way through."""
        return self._lock

    def _stop_current(self) -> None:
        if self._stop is not None:
            self._stop.set()

    def _current(self, generation: int, stop: threading.Event) -> bool:
        return generation == self._generation and not stop.is_set()

    def _run(self, generation, stop, work, on_done, on_progress) -> None:
        if stop.wait(self.delay):            # a newer request came while waiting
            return
        with self._lock:
            if not self._current(generation, stop):
                return
            self.state = "running"

        def progress(done, total):
            if on_progress is not None and self._current(generation, stop):
                on_progress(done, total)

        try:
            result, error = work(progress, stop.is_set), None
        except Cancelled:
            return
        except Exception as err:             # handed to the panel, shown as a message
            result, error = None, err
        with self._lock:
            if not self._current(generation, stop):
                return
            self.state = "done" if error is None else "error"
            on_done(result, error)
