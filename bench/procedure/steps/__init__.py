"""The steps of a run, one module per kind, sharing one :class:`RunContext`.

Each step kind maps to a function ``(ctx, step) -> None`` in :data:`STEPS`. A step function
does the physical actions through the operator, takes its sweeps (each stored at once) and
records what it found; it leaves the step RUNNING (the runner marks it DONE), or marks it
itself (SKIPPED at the operator's request, DONE with its files). Sequencing, stop and resume
are the runner's (:mod:`bench.procedure.runner`).

| module | steps and helpers |
| --- | --- |
| ``context`` | ``RunContext``: plan, store, instruments, hands, and the session's state |
| ``sweep`` | set-up, cables, straps or empty mounts, switch, sweeps (stored at once), the |
|  | operator's choice, a capture's plausibility check |
| ``live`` | a sample's live line (landmarks from a quick correction) |
| ``bias`` | the DC-bias caution, the source within limits, output off whatever happened |
| ``calibrate`` | ``calibrate``; reuse of an earlier run's calibration |
| ``mount`` | ``mount_open``, ``mount_short`` (with the ground-loop check) |
| ``measure`` | ``measure`` and its live line |
| ``single_mount`` | the series-through and reflection mounts' captures and samples |
| ``gain_phase`` | the gain-phase analyser's strap captures and samples on the fixture |
| ``outputs`` | ``fit``, ``export``, ``report`` |
"""

from __future__ import annotations

from collections.abc import Callable

from bench.procedure.plan import Step
from bench.procedure.steps.calibrate import calibrate
from bench.procedure.steps.context import RunContext
from bench.procedure.steps.measure import measure
from bench.procedure.steps.mount import mount_open, mount_short
from bench.procedure.steps.outputs import export, fit, report

#: The function that carries out each step kind.
STEPS: dict[str, Callable[[RunContext, Step], None]] = {
    "calibrate": calibrate,
    "mount_open": mount_open,
    "mount_short": mount_short,
    "measure": measure,
    "fit": fit,
    "export": export,
    "report": report,
}

__all__ = ["STEPS", "RunContext"]
