"""Fits on every core: a map over worker processes that keeps the input order.

``ordered_map(fn, items, jobs)`` calls ``fn(item)`` for each item and yields the results
in the order of ``items``, as soon as each one and those before it are done, so output
streams in input order while later items are still being worked on. ``fn`` must be a
module-level function, and items and results picklable (arrays and frozen dataclasses
are). One item or one job runs in this process, with no pool at all.

Workers are forked from this process when it runs one thread (they then start with
everything already imported); a process with other threads (the simulated bench of a
``run --sim``) forks them from a clean server process instead, which imports the fitting
core once, since forking a threaded process can deadlock.

``shared`` (optional) is handed to every call as ``fn(item, shared)``: options common to
all items (a loaded mount short, say) reach each worker once, when it starts (inherited
as it is with ``fork``), rather than pickled with every item.
"""

from __future__ import annotations

import os
import threading
from collections.abc import Callable, Iterable, Iterator
from typing import Any, TypeVar

T = TypeVar("T")
R = TypeVar("R")

#: Modules a worker process needs before its first task (forkserver preload); numpy.ma
#: is what numpy's median imports at its first call.
PRELOAD = ["bench.core.fitting", "numpy.ma"]

_NOTHING = object()
#: The ``shared`` value of the map this worker process serves (set when it starts).
_shared: Any = _NOTHING


def _set_shared(value: Any) -> None:
    global _shared
    _shared = value


def _call(fn: Callable[..., R], item: Any) -> R:
    return fn(item) if _shared is _NOTHING else fn(item, _shared)


def available_cores() -> int:
    """Cores this process may run on (its CPU affinity where the system tells it)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def worker_count(jobs: int | None, tasks: int) -> int:
    """Workers for ``tasks`` items: ``jobs`` (all cores when None), never more than tasks."""
    wanted = available_cores() if jobs is None or jobs <= 0 else jobs
    return max(1, min(wanted, tasks))


def _context(preload: tuple[str, ...] = ()):
    import multiprocessing

    modules = [*PRELOAD, *preload]
    if threading.active_count() == 1 and "fork" in multiprocessing.get_all_start_methods():
        import importlib

        for name in modules:  # imported once here, inherited by every worker
            importlib.import_module(name)
        return multiprocessing.get_context("fork")
    if "forkserver" in multiprocessing.get_all_start_methods():
        context = multiprocessing.get_context("forkserver")
        # Takes effect when the server starts (the first pool of the process).
        context.set_forkserver_preload(modules)
        return context
    return multiprocessing.get_context("spawn")


def pool(workers: int, *, preload: tuple[str, ...] = (), shared: Any = _NOTHING) -> Any:
    """A process pool of ``workers`` made as :func:`ordered_map` makes its own (the start
    method, :data:`PRELOAD` and ``preload``, ``shared`` set in each worker), for work
    handed out one item at a time: ``pool.submit(call, fn, item)``; the caller shuts it
    down."""
    from concurrent.futures import ProcessPoolExecutor

    setup = {} if shared is _NOTHING else {"initializer": _set_shared, "initargs": (shared,)}
    return ProcessPoolExecutor(max_workers=workers, mp_context=_context(preload), **setup)


#: ``fn(item)``, or ``fn(item, shared)`` in a worker of a pool given ``shared``.
call = _call


def start_server(preload: tuple[str, ...] = ()) -> bool:
    """Start the workers' server now, importing :data:`PRELOAD` and ``preload``, when
    workers will be forked from one (this process runs threads); returns whether it runs.

    The server imports beside whatever this process does next (a run's sweeps), so the
    first pool finds it ready, and every worker then starts with those modules. Without
    threads the workers are forked from this process and nothing is started."""
    import multiprocessing

    if threading.active_count() == 1 or "forkserver" not in multiprocessing.get_all_start_methods():
        return False
    from multiprocessing import forkserver

    _context(preload)  # the server's preload (it takes effect as the server starts)
    forkserver.ensure_running()
    return True


def ordered_map(
    fn: Callable[[T], R],
    items: Iterable[T],
    jobs: int | None = None,
    *,
    preload: tuple[str, ...] = (),
    shared: Any = _NOTHING,
) -> Iterator[R]:
    """``fn`` over ``items`` on up to ``jobs`` processes (all cores when None), in order.

    ``preload`` names modules the workers need besides :data:`PRELOAD` (imported before
    the first task where the start method allows). With ``shared``, each call is
    ``fn(item, shared)``, and ``shared`` goes to each worker once."""
    todo = list(items)
    workers = worker_count(jobs, len(todo))
    if workers == 1:
        for item in todo:
            yield fn(item) if shared is _NOTHING else fn(item, shared)
        return
    from concurrent.futures import ProcessPoolExecutor

    # The sentinel does not survive pickling, so a map without ``shared`` sets nothing.
    setup = {} if shared is _NOTHING else {"initializer": _set_shared, "initargs": (shared,)}
    pool = ProcessPoolExecutor(max_workers=workers, mp_context=_context(preload), **setup)
    try:
        futures = [pool.submit(_call, fn, item) for item in todo]
        for future in futures:
            yield future.result()
    finally:
        # On an error or Ctrl-C nothing further is started and the workers are stopped.
        pool.shutdown(wait=True, cancel_futures=True)


class StartedMap:
    """``fn`` over ``items`` handed to the workers at once (:func:`start_map`); the
    results are read later, in input order, with :meth:`results`.

    For work that can run while this process does something else (a report's figures
    drawn while the exports are written). One item or one job is run by :meth:`results`
    in this process, as :func:`ordered_map` would."""

    def __init__(
        self,
        fn: Callable[[T], R],
        items: Iterable[T],
        jobs: int | None = None,
        *,
        preload: tuple[str, ...] = (),
    ) -> None:
        self._fn = fn
        self._todo = list(items)
        self._pool: Any = None
        self._futures: list[Any] = []
        if worker_count(jobs, len(self._todo)) > 1:
            from concurrent.futures import ProcessPoolExecutor

            workers = worker_count(jobs, len(self._todo))
            self._pool = ProcessPoolExecutor(max_workers=workers, mp_context=_context(preload))
            self._futures = [self._pool.submit(fn, item) for item in self._todo]

    def results(self) -> Iterator[R]:
        """The results in input order (waiting for each); the workers stop after the last."""
        if self._pool is None:
            for item in self._todo:
                yield self._fn(item)
            return
        try:
            for future in self._futures:
                yield future.result()
        finally:
            self.cancel()

    def done(self) -> bool:
        """Whether no item is waiting or running in a worker (finished or cancelled)."""
        return all(future.done() for future in self._futures)

    def cancel(self) -> None:
        """Start nothing further and stop the workers (the results are then not read)."""
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)


def start_map(
    fn: Callable[[T], R],
    items: Iterable[T],
    jobs: int | None = None,
    *,
    preload: tuple[str, ...] = (),
) -> StartedMap:
    """:func:`ordered_map`'s work handed to the workers now, its results read later."""
    return StartedMap(fn, items, jobs, preload=preload)
