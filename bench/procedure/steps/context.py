"""The state one run session shares between its steps.

Physical state (what the cables are on, what sits in the mounts) is what the hands have
done in this session; nothing is assumed from an earlier one, so a resumed run asks the
operator again for whatever the next step needs.
"""

from __future__ import annotations

import contextlib
import dataclasses
import time
from collections.abc import Callable, Iterator
from typing import Any

import numpy as np

from bench.procedure.operators import Operator
from bench.procedure.plan import Plan
from bench.procedure.processing import Corrector
from bench.results import RunSummary
from bench.runstore import DONE, SKIPPED, RunStore


@dataclasses.dataclass(eq=False)
class RunContext:
    """Plan, store, instruments and hands of a session, and what happened in it so far."""

    plan: Plan
    store: RunStore
    inst: Any
    operator: Operator
    display: Any
    assume_yes: bool = False
    sleep: Callable[[float], None] = time.sleep
    summary: RunSummary | None = None
    # The hands' doing in this session.
    set_up: bool = False
    cables: str | None = None
    strapped: set[int] = dataclasses.field(default_factory=set)
    emptied: set[int] = dataclasses.field(default_factory=set)
    batch: int | None = None
    selected: int | None = None
    #: What each single mount holds in this session (``empty``, ``strap``, or a sample).
    mounted: dict[str, str] = dataclasses.field(default_factory=dict)
    #: The single mounts' captures with the quick correction, for the live lines.
    quick_mounts: dict[str, Any] = dataclasses.field(default_factory=dict)
    caution_done: bool = False
    # Processing kept between steps.
    corrector: Corrector | None = None
    quick_shorts: dict[int, np.ndarray] = dataclasses.field(default_factory=dict)
    quick_opens: dict[int, Any] = dataclasses.field(default_factory=dict)
    #: (f, mean S) of the sweeps the last step took.
    last: tuple[np.ndarray, np.ndarray] | None = None
    #: Impedance data of the sample just measured (quick correction), for its checks.
    last_live: Any = None
    #: Ground-loop corner per position, Hz, where the fit must start above it.
    loops: dict[int, float] = dataclasses.field(default_factory=dict)
    #: Main landmark (c_low F, l_low H, a bead's |Z| Ω at its stated frequency) of each
    #: (part, sample) at 0 V, as measured: the bias points' live lines compare with it.
    zero_bias: dict[tuple[str, str], float] = dataclasses.field(default_factory=dict)
    #: Steps whose sweeps have moved the progress count in this session: a repeat takes
    #: the sweeps again but does not count them twice.
    counted: set[str] = dataclasses.field(default_factory=set)
    #: Time inside the analyser driver's sweep (instrument time and transfer), s, in
    #: total and per step: benchmarks subtract it to find the tool's own overhead.
    sweep_seconds: float = 0.0
    step_sweep_seconds: dict[str, float] = dataclasses.field(default_factory=dict)
    sweeps_done: int = 0
    #: Time spent with the operator (every physical action, answer and caution), s.
    operator_seconds: float = 0.0
    #: The report started at the end of the fit step (``bench.report.ReportDraft``): its
    #: figures are drawn while the exports are written; the report step finishes it.
    report_draft: Any = None
    #: Samples fitted in worker processes during the sweeps
    #: (``bench.procedure.early_fit.EarlyFits``), read by the fit step.
    early_fits: Any = None
    _pausing: bool = False

    @contextlib.contextmanager
    def pause(self) -> Iterator[None]:
        """Free the console while a person is asked something (not for scripted hands);
        the time spent inside counts as the operator's."""
        if self._pausing:  # nested: counted once, by the outer pause
            yield
            return
        started = time.perf_counter()
        self._pausing = True
        try:
            if getattr(self.operator, "interactive", False):
                with self.display.pause():
                    yield
            else:
                yield
        finally:
            self._pausing = False
            self.operator_seconds += time.perf_counter() - started

    def correction(self) -> Corrector:
        if self.corrector is None:
            self.corrector = Corrector.from_store(self.store, self.plan)
        return self.corrector

    def last_average(self) -> tuple[np.ndarray, np.ndarray]:
        """The mean of the sweeps just taken (kept in memory by the sweep step)."""
        assert self.last is not None
        return self.last

    def pending_positions(self, kind: str) -> list[int]:
        """Positions whose ``kind`` step (mount_open, mount_short) is still to do."""
        return [
            s.position
            for s in self.plan.steps
            if s.kind == kind
            and s.position is not None
            and self.store.step_state(s.id) not in (DONE, SKIPPED)
        ]

    def note(self, note: str) -> None:
        """A warning for the manifest (once) and the display."""
        warnings = list(self.store.manifest.get("warnings", []))
        if note not in warnings:
            warnings.append(note)
        self.store.update("warnings", warnings)
        self.display.message(note)

    def need_summary(self) -> RunSummary:
        if self.summary is None:
            from bench.procedure.processing import build_summary

            self.summary = build_summary(self.store, self.plan)
        return self.summary
