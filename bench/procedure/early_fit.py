"""Samples fitted during the sweeps, while the bench measures the next one.

As soon as every sweep of a sample and bias point is stored, the runner hands the
sample to a worker process (:meth:`EarlyFits.submit`). The worker builds the sample's
fit task from the run folder with the fit step's own code
(:func:`bench.procedure.processing.prepare_fixture` and
:func:`~bench.procedure.processing.sample_and_task`) and fits it. The fit step then
builds every task itself, as always, and takes an early result only where the worker's
task was the very same input (a digest of the model, the points, their uncertainties,
the window and the ground-loop limit); any other sample (a capture redone after it, a
worker that failed) is fitted then, as it would have been. So the results cannot differ
from fitting everything at the end: only the time moves, into the sweeps.

Early fits take one core fewer than the machine has (the session's own process works
through the sweeps); a stopped run cancels them (:meth:`EarlyFits.cancel`) after the
DC bias is off, and nothing they do writes to the run folder.
"""

from __future__ import annotations

import hashlib
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from bench.procedure.plan_types import Plan, Step

#: A fit task: (model, impedance data, ground-loop limit Hz), as the fit step builds it.
Task = tuple[str, Any, float]


def task_digest(task: Task) -> bytes:
    """A digest of everything a fit of ``task`` reads (:func:`processing.fit_sample`)."""
    model, data, valid_above = task
    h = hashlib.blake2b(digest_size=20)
    h.update(f"{model}|{float(valid_above)!r}".encode())
    for values in (data.f, data.z, data.rel_uncertainty, data.inside_window):
        array = np.ascontiguousarray(values)
        h.update(f"|{array.dtype.str}{array.shape}".encode())
        h.update(array.tobytes())
    return h.digest()


def group_of(plan: Plan, step: Step) -> tuple[Step, ...]:
    """The measure steps of ``step``'s sample and bias point, in plan order (the fit
    step's grouping)."""
    assert step.placement is not None
    key = (step.placement.part, step.placement.sample, step.bias_v)
    return tuple(
        s
        for s in plan.steps
        if s.kind == "measure"
        and s.placement is not None
        and (s.placement.part, s.placement.sample, s.bias_v) == key
    )


def _early_task(step_ids: tuple[str, ...], shared: tuple[str, Plan]) -> tuple[bytes, Any]:
    """A worker's job: one sample's fit task built from the run folder, and its fit."""
    from bench.procedure.processing import fit_sample, prepare_fixture, sample_and_task
    from bench.runstore import RunStore

    root, plan = shared
    store = RunStore.open(Path(root))
    steps = [s for s in plan.steps if s.id in step_ids]
    positions = {s.position for s in steps if s.position is not None}
    methods = {s.method for s in steps}
    fixture = prepare_fixture(store, plan, plan.analysis, positions, methods)
    _, task = sample_and_task(store, plan, plan.analysis, fixture, steps, None)
    return task_digest(task), fit_sample(*task)


def _own_task(task: Task, shared: Any) -> tuple[bytes, Any]:
    """A worker's job for a sample the fit step hands out itself: its task's fit."""
    from bench.procedure.processing import fit_task

    return task_digest(task), fit_task(task)


def _outcome(future: Any) -> tuple[bytes, Any] | None:
    """A worker's (digest, fit), waited for; None when it was not handed out or failed
    (any reason: the fit step then fits the sample itself)."""
    if future is None:
        return None
    try:
        return future.result()
    except Exception:
        return None


class EarlyFits:
    """Samples handed to worker processes during the sweeps, their fits read by the fit
    step (:meth:`fits`)."""

    def __init__(self, root: Path, plan: Plan, workers: int) -> None:
        self._root = str(root)
        self._plan = plan
        self._workers = workers
        self._pool: Any = None
        self._futures: dict[tuple[str, ...], Any] = {}
        #: Samples whose early fit the fit step took (the rest were fitted there).
        self.taken = 0

    def submit(self, steps: Sequence[Step]) -> None:
        """Fit the sample whose measure steps are ``steps`` (all stored) in a worker."""
        from bench import parallel

        key = tuple(s.id for s in steps)
        if self._pool is None:
            self._pool = parallel.pool(
                self._workers,
                preload=("bench.procedure.processing", "bench.core.ground_loop"),
                shared=(self._root, self._plan),
            )
        old = self._futures.pop(key, None)
        if old is not None:  # measured again: the new sweeps count
            old.cancel()
        self._futures[key] = self._pool.submit(parallel.call, _early_task, key)

    def fits(
        self, keys: Sequence[tuple[str, ...]], tasks: Sequence[Task], jobs: int | None = None
    ) -> list[tuple[Any, str | None]]:
        """The fit of each task, in order: the early fit of its sample where that fitted
        this very task; a sample not handed out early is handed to the same workers now.
        Any other (an early fit of other input, a failed worker) is fitted again on up
        to ``jobs`` processes. The workers stop afterwards."""
        from bench import parallel
        from bench.procedure.processing import fit_task

        if not self._futures:
            return list(parallel.ordered_map(fit_task, tasks, jobs))
        results: list[Any] = [None] * len(tasks)
        again: list[int] = []
        try:
            futures = []
            key_early = []
            for key, task in zip(keys, tasks, strict=True):
                future = self._futures.get(key)
                key_early.append(future is not None and not future.cancelled())
                if not key_early[-1]:
                    try:
                        future = self._pool.submit(parallel.call, _own_task, task)
                    except Exception:  # the workers are gone: fitted again below
                        future = None
                futures.append(future)
            for i, future in enumerate(futures):
                outcome = _outcome(future)
                if outcome is not None and outcome[0] == task_digest(tasks[i]):
                    results[i] = outcome[1]
                    self.taken += key_early[i]
                else:
                    again.append(i)
        finally:
            self.cancel()
        redone = parallel.ordered_map(fit_task, [tasks[i] for i in again], jobs)
        for i, result in zip(again, redone, strict=True):
            results[i] = result
        return results

    def cancel(self) -> None:
        """Start no further early fit and stop the workers."""
        self._futures.clear()
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None
