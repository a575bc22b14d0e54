"""Independent tasks on the active Dask cluster, or a plain loop without one.

:func:`cluster_map` runs ``fn(item, shared, cancel)`` for every item: the cells of
:func:`tallyform.scan`, the simulations of :func:`tallyform.audit`. With an active
``dask.distributed`` client (:func:`tallyform.core.tiled.active_client`) every item is one
task (``client.map``; ``shared`` is scattered to the workers once), results come back in
input order, ``progress(done, total)`` is called as each task finishes and ``cancel()`` is
polled between completions (and at least every ``POLL`` seconds while waiting): when it
returns True the unfinished tasks are cancelled and :class:`Cancelled` is raised. Without a
client it is the plain loop the callers always ran.

The callers fix every random stream per item before calling (a seed or a spawned
Generator inside the item), so the result is the same with and without a client and with
any number of workers. ``fn`` must be a module-level function (it is pickled to the
workers); on a worker it gets ``cancel=None`` and any public call nested in it reports no
progress of its own.
"""
from __future__ import annotations

from typing import Callable, Sequence

from .errors import Cancelled

__all__ = ["cluster_map", "POLL"]

#: Seconds between two polls of ``cancel`` while waiting for tasks on the cluster.
POLL = 0.25


def cluster_map(fn: Callable, items: Sequence, *, shared=None, progress=None, cancel=None,
                what: str = "the work") -> list:
    """``[fn(item, shared, cancel) for item in items]``, as tasks on the active client.

    Parameters
    ----------
    fn : module-level function ``fn(item, shared, cancel)``
    items : sequence
        One task each; every item carries its own random stream (seed or Generator).
    shared : object, optional
        What every task needs besides its item (the table, options); sent to the workers
        once.
    progress, cancel : callables, optional
        ``progress(done, total)`` after every finished item; ``cancel() -> bool`` raises
        :class:`Cancelled` (the tasks not yet finished are cancelled).
    what : str
        Names the work in the message of :class:`Cancelled`.
    """
    from .tiled import active_client
    items = list(items)
    client = active_client()
    if client is None:
        return _loop(fn, items, shared, progress, cancel, what)
    return _on_cluster(client, fn, items, shared, progress, cancel, what)


def _stop(what: str, done: int, total: int):
    raise Cancelled(f"{what} was cancelled after {done} of {total} steps; no result was "
                    "kept.")


def _loop(fn, items, shared, progress, cancel, what) -> list:
    out = []
    total = len(items)
    for i, item in enumerate(items):
        if cancel is not None and cancel():
            _stop(what, i, total)
        out.append(fn(item, shared, cancel))
        if progress is not None:
            progress(i + 1, total)
    return out


def _task(fn, item, shared):
    """Runs on a worker: ``fn`` with no cancel callable and nested progress silenced."""
    from .progress import silenced
    with silenced():                            # nested public calls: no bar of their own
        return fn(item, shared, None)


def _on_cluster(client, fn, items, shared, progress, cancel, what) -> list:
    import functools
    import uuid

    from distributed import wait
    total = len(items)
    if not total:
        return []
    if cancel is not None and cancel():
        _stop(what, 0, total)
    name = getattr(fn, "__name__", "task").lstrip("_")
    tag = uuid.uuid4().hex[:8]
    # one object (a dict would be scattered value by value), sent to every worker once
    shared_f = client.scatter([shared], broadcast=True, hash=False)[0] \
        if shared is not None else None
    keys = [f"{name}-{tag}-{i}" for i in range(total)]
    futures = client.map(functools.partial(_task, fn), items, shared=shared_f, key=keys,
                         pure=False)
    position = {f.key: i for i, f in enumerate(futures)}
    out: list = [None] * total
    pending = set(futures)
    done = 0
    try:
        while pending:
            finished, pending = _wait(wait, pending)
            for f in finished:
                out[position[f.key]] = f.result()        # a task's error is raised here
                done += 1
                if progress is not None:
                    progress(done, total)
            if pending and cancel is not None and cancel():
                _stop(what, done, total)
    finally:
        if pending:
            client.cancel(list(pending))
        if shared_f is not None:
            client.cancel([shared_f])
    return out


def _wait(wait, pending):
    """(finished, still pending) after at most POLL seconds."""
    try:
        res = wait(list(pending), timeout=POLL, return_when="FIRST_COMPLETED")
    except TimeoutError:
        return set(), pending
    return set(res.done), set(res.not_done)
