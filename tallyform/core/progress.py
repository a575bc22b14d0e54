"""Progress of long calls: a bar by default where someone is watching, an estimate before a
long run, and a clean stop on interruption.

Every public call that loops (permutations, simulations, resamples, the scan grid, ``run``)
is wrapped by :func:`reports_progress`. Its ``progress`` argument means:

- ``None`` (the default): the session default, :func:`set_progress` (initially ``True``,
  or ``False`` when the environment variable ``TALLYFORM_PROGRESS`` is ``0``);
- ``True``: a bar where someone is watching: an ipywidgets bar in a notebook, one line on
  stderr in a terminal, nothing when output goes to a file, a pipe or a log (scripts, CI);
- ``False``: nothing;
- a callable ``progress(done, total)``: called as the work advances (what the dashboard and
  the command line use).

Nested work shows one bar: a public call made inside another one's run (a scan whose cells
run permutations) reports nothing of its own unless it was handed a callable.

Before a run predicted to take more than ``ESTIMATE_AFTER`` seconds, one line says the
estimate and, when the call has an obvious knob (``n_permutations``, ``n_sim``, ``n_boot``),
what a smaller value would take. The estimate is measured, not guessed: the set-up (up to the
call's first report) counts once, and the rest is projected from the pace of the steps
measured since then (after at least ``WARMUP`` seconds in all).

Interrupting (KeyboardInterrupt, a notebook's stop button) or cancelling (``cancel()``
returning True) stops the call at its next step and raises :class:`Cancelled`, saying how
far it got; nothing partial is returned, and files are only ever written atomically.
"""
from __future__ import annotations

import contextvars
import functools
import inspect
import math
import sys
import threading
import time
from typing import Callable

from .errors import Cancelled, InputError
from .results import record_call

__all__ = ["set_progress", "get_progress", "reports_progress", "Reporter", "format_seconds",
           "ESTIMATE_AFTER"]

#: A run predicted to take longer than this (seconds) announces its estimate.
ESTIMATE_AFTER = 30.0
#: Seconds of work measured before the estimate is trusted.
WARMUP = 1.0
#: Seconds between two redraws of a bar (the work may report far more often).
REDRAW = 0.2
#: A bar appears only once the call has run this long: quick calls leave no trace.
SHOW_AFTER = 0.5

def _from_environment() -> bool:
    """The starting default: True, unless TALLYFORM_PROGRESS is 0, false, no or off (for
    notebooks executed to be shared, logs, CI)."""
    import os
    return os.environ.get("TALLYFORM_PROGRESS", "").strip().lower() not in (
        "0", "false", "no", "off")


_default: dict = {"progress": _from_environment()}
_active: contextvars.ContextVar = contextvars.ContextVar("tallyform_progress", default=None)


def silenced():
    """Context in which nested public calls show no progress of their own (as inside an
    outer call): used by tasks that run on Dask workers."""
    import contextlib

    @contextlib.contextmanager
    def quiet():
        token = _active.set(Reporter("task"))
        try:
            yield
        finally:
            _active.reset(token)
    return quiet()


def set_progress(value) -> None:
    """Set the session default for ``progress=None``: True (bars where someone is watching),
    False (never), or a callable ``progress(done, total)``.

    Examples
    --------
    >>> set_progress(False); get_progress()
    False
    >>> set_progress(True)
    """
    if not (isinstance(value, bool) or callable(value)):
        raise InputError(f"`progress` must be True, False or a callable(done, total); got "
                         f"{value!r}.")
    _default["progress"] = value


def get_progress():
    """The session default set by :func:`set_progress`."""
    return _default["progress"]


def format_seconds(s: float) -> str:
    """``'45 s'``, ``'4 min'``, ``'1.5 h'``: a duration as a person says it."""
    if not math.isfinite(s):
        return "?"
    if s < 90:
        return f"{max(s, 0):.0f} s"
    if s < 5400:
        return f"{s / 60:.0f} min"
    return f"{s / 3600:.1f} h"


# ---------------------------------------------------------------------------- displays
def _in_notebook() -> bool:
    shell = sys.modules.get("IPython")
    if shell is None or "ipykernel" not in sys.modules:
        return False
    try:
        ip = shell.get_ipython()
    except Exception:
        return False
    return ip is not None and type(ip).__name__ == "ZMQInteractiveShell"


def _stderr_is_terminal() -> bool:
    try:
        return bool(sys.stderr.isatty())
    except (AttributeError, ValueError):
        return False


class _TerminalLine:
    """One line on stderr, redrawn in place (at most ten times a second)."""

    def __init__(self, label: str):
        self.label = label
        self._last = 0.0

    def show(self, done, total, rate, left, *, final=False):
        now = time.monotonic()
        if not final and now - self._last < 0.1:
            return
        self._last = now
        pct = 100.0 * done / total if total else 100.0
        done, total = int(round(done)), int(round(total))
        text = (f"\r{self.label}: {done}/{total} ({pct:3.0f} %), {rate:.3g}/s, "
                f"{format_seconds(left)} left" if not final else
                f"\r{self.label}: {done}/{total} done in {format_seconds(left)}")
        sys.stderr.write(text.ljust(72) + ("\n" if final else ""))
        sys.stderr.flush()

    def message(self, text):
        sys.stderr.write("\r" + text.ljust(72) + "\n")
        sys.stderr.flush()

    def close(self, *, failed=False):
        if failed:
            sys.stderr.write("\n")
            sys.stderr.flush()


def _display_for(label: str):
    if threading.current_thread() is not threading.main_thread():
        return None             # a background job (the dashboard's) reports by callable
    if _in_notebook():
        try:
            from ..widgets.progress import NotebookBar   # lazy: the interaction ring
            return NotebookBar(label)
        except Exception:                                 # no widgets: a terminal line
            pass
    if _stderr_is_terminal():
        return _TerminalLine(label)
    return None


# ---------------------------------------------------------------------------- reporter
class Reporter:
    """What a running call reports to: counts, rate, time left, the one-off estimate, the
    cancel check. Built by :func:`reports_progress`; passed down as ``progress``."""

    def __init__(self, label: str, display=None, callback: Callable | None = None,
                 cancel: Callable | None = None, knob: tuple | None = None):
        self.label = label
        self.display = display
        self.callback = callback
        self.cancel = cancel
        self.knob = knob                     # (name, value) of the call's main repetitions
        self.done = 0
        self.total = 0
        self.started = time.monotonic()
        self.estimated = False
        self.estimate_text: str | None = None
        self.projected: float | None = None  # seconds the whole call should take
        self._drawn = -math.inf              # when the display was last redrawn
        self._first = None                   # (seconds, done) at the first report

    def __call__(self, done, total):
        self.done, self.total = done, total
        if self.callback is not None:
            self.callback(done, total)
        if self.display is not None or not self.estimated:
            now = time.monotonic()
            elapsed = now - self.started
            if self._first is None:
                self._first = (elapsed, done)
            elif not self.estimated and done > self._first[1] and elapsed >= WARMUP:
                self._estimate(elapsed, done, total)
            if (self.display is not None and now - self._drawn >= REDRAW
                    and elapsed >= SHOW_AFTER):
                self._drawn = now
                rate = done / elapsed if elapsed > 0 else float("inf")
                left = (total - done) / rate if rate > 0 else float("inf")
                self.display.show(done, total, rate, left)

    def _estimate(self, elapsed, done, total):
        self.estimated = True
        # set-up (up to the first report) once, then the measured pace of the steps
        t0, d0 = self._first
        projected = self.projected = t0 + (elapsed - t0) * (total - d0) / (done - d0)
        if projected <= ESTIMATE_AFTER:
            return
        text = f"{self.label}: about {format_seconds(projected)} in all"
        if self.knob is not None:
            name, value = self.knob
            if isinstance(value, int) and not isinstance(value, bool) and value > 100:
                smaller = 999 if value > 999 else max(99, value // 10)
                text += (f"; {name}={smaller} would take about "
                         f"{format_seconds(projected * smaller / value)}")
        self.estimate_text = text + "."
        if self.display is not None:
            self.display.message(self.estimate_text)

    def stopped_text(self, how: str) -> str:
        where = (f" after {_count(self.done)} of {_count(self.total)} steps" if self.total
                 else " before its first step")
        return f"{self.label} was {how}{where}; no result was kept."

    def finish(self):
        if self.display is not None and self._drawn > -math.inf:
            self.display.show(self.total, self.total, 0.0,
                              time.monotonic() - self.started, final=True)
            self.display.close()

    def fail(self):
        if self.display is not None and self._drawn > -math.inf:
            self.display.close(failed=True)


def _count(x) -> str:
    return f"{x:.0f}" if isinstance(x, float) else str(x)


def _knob_of(knob, sig: inspect.Signature, arguments: dict):
    """(name, value) of the argument that sets the amount of work, or None.

    ``knob`` is a name, a tuple of names (the one given a positive whole number, if exactly
    one is), or a function of the call's arguments (defaults filled in) returning a name.
    """
    if knob is None:
        return None

    def value(name):
        if name in arguments:
            return arguments[name]
        par = sig.parameters.get(name)
        return None if par is None or par.default is inspect.Parameter.empty else par.default

    if callable(knob):
        full = {k: value(k) for k in sig.parameters}
        name = knob(full)
        return None if name is None else (name, value(name))
    if isinstance(knob, str):
        return (knob, value(knob))
    used = [(k, value(k)) for k in knob
            if isinstance(value(k), int) and not isinstance(value(k), bool) and value(k) > 0]
    return used[0] if len(used) == 1 else None


def _is_interrupt(err: BaseException) -> bool:
    """True for a KeyboardInterrupt, also one that a compiled (numba) call wrapped in a
    SystemError because the signal arrived while it was being set up."""
    seen = 0
    while err is not None and seen < 8:
        if isinstance(err, KeyboardInterrupt):
            return True
        if not isinstance(err, SystemError):
            return False
        err = err.__cause__ or err.__context__
        seen += 1
    return False


def reports_progress(label: str, *, knob=None):
    """Decorator for a public call with ``progress`` and ``cancel`` keyword arguments.

    Resolves ``progress`` (see the module notes) into a :class:`Reporter` passed to the call
    as its ``progress`` callable, shows one bar for nested calls, and turns an interruption
    into :class:`Cancelled` (in the outermost call only, which knows how far the whole work
    got). ``knob`` names the argument that sets the amount of work, for the estimate's
    advice: a name, a tuple of names (whichever one is given a positive number), or a
    function of the call's arguments returning a name (or None).

    Examples
    --------
    >>> @reports_progress("Counting", knob="n_steps")
    ... def count(n_steps=10, *, progress=None, cancel=None):
    ...     for i in range(n_steps):
    ...         progress(i + 1, n_steps)       # always callable inside: a Reporter
    ...     return n_steps
    >>> count(5, progress=False)
    5
    """
    def wrap(fn):
        sig = inspect.signature(fn)
        if "progress" not in sig.parameters or "cancel" not in sig.parameters:
            raise TypeError(f"{fn.__name__} needs `progress` and `cancel` arguments")

        @functools.wraps(fn)
        def inner(*args, **kwargs):
            bound = sig.bind_partial(*args, **kwargs)
            progress = bound.arguments.get("progress")
            outer = _active.get()
            if progress is None:
                progress = _default["progress"] if outer is None else False
            if not (isinstance(progress, bool) or callable(progress)):
                raise InputError(f"`progress` must be None, True, False or a "
                                 f"callable(done, total); got {progress!r}.")
            display = _display_for(label) if progress is True else None
            callback = None if isinstance(progress, bool) else progress
            rep = Reporter(label, display, callback, bound.arguments.get("cancel"),
                           _knob_of(knob, sig, bound.arguments))
            kwargs = dict(kwargs)
            kwargs["progress"] = rep
            token = _active.set(rep)
            try:
                out = fn(*args, **kwargs)
            except BaseException as err:
                rep.fail()
                if not _is_interrupt(err):
                    raise
                if outer is not None:        # the outermost call says how far it all got
                    if isinstance(err, KeyboardInterrupt):
                        raise
                    raise KeyboardInterrupt from err
                raise Cancelled(rep.stopped_text("interrupted")) from None
            finally:
                _active.reset(token)
            rep.finish()
            full = sig.bind_partial(*args, **kwargs)
            full.apply_defaults()
            record_call(out, fn.__name__, full.arguments)
            return out

        inner.__wrapped__ = fn
        return inner
    return wrap
