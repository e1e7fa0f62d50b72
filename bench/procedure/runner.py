"""The runner: executes a plan step by step into a run folder.

One code path for every way of working: the operator (a person at a console, or the
simulated bench's scripted hands) does the physical actions, the instruments do the
rest. Every raw sweep is written to the run store the moment it is read, and each step's
state is recorded, so a run stopped by Ctrl-C, a crash or a lost connection resumes at
its first incomplete step with every stored sweep kept.

The runner keeps the sequencing, the stop and the resume; each step kind lives in its
own module under :mod:`bench.procedure.steps`, and what a session shares between steps
is one :class:`~bench.procedure.steps.RunContext`. Physical state (what the cables are
on, what sits in the mounts) is never trusted across sessions: a resumed run asks the
operator again for whatever the next step needs.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import errno
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from bench import stop_signals
from bench.errors import BiasNotConfirmedOffError, RunError, RunFolderError, SafetyError
from bench.procedure.display import PlainDisplay
from bench.procedure.early_fit import EarlyFits, group_of
from bench.procedure.estimate import BENCH_KINDS, Estimate, duration, estimate
from bench.procedure.operators import Operator, OperatorStop
from bench.procedure.plan import SWEEP_STEPS, Plan, Step
from bench.procedure.steps import STEPS, RunContext, bias
from bench.procedure.steps.bias import CAUTION
from bench.procedure.steps.calibrate import (
    calibration_mismatch,
    maybe_reuse,
    point_last_calibration,
)
from bench.procedure.steps.mount import GROUND_LOOP_ADVICE
from bench.results import RunSummary
from bench.runstore import DONE, FAILED, RUNNING, SKIPPED, STOPPED, RunStore

__all__ = ["CAUTION", "GROUND_LOOP_ADVICE", "Runner", "calibration_mismatch"]

#: What to do when the run folder cannot be written, by the error's number.
FOLDER_FIXES = {
    errno.ENOSPC: "free space on the disk that holds the run folder",
    errno.EDQUOT: "free space within your disk quota (or have it raised)",
    errno.EROFS: "the file system is read-only: remount it writable, or copy the run "
    "folder to a writable disk and resume the copy",
    errno.EACCES: "make the run folder and its files writable for this user",
    errno.EPERM: "make the run folder and its files writable for this user",
}


def _driver_errors() -> tuple[type[BaseException], ...]:
    from drivers.errors import DriverError

    return (DriverError,)


class Runner:
    """Runs ``plan`` into ``store`` with ``instruments`` and ``operator``."""

    def __init__(
        self,
        plan: Plan,
        store: RunStore,
        instruments: Any,
        operator: Operator,
        display: Any = None,
        *,
        assume_yes: bool = False,
        sleep: Callable[[float], None] = time.sleep,
        time_scale: float = 1.0,
    ):
        self.ctx = RunContext(
            plan=plan,
            store=store,
            inst=instruments,
            operator=operator,
            display=display or PlainDisplay(),
            assume_yes=assume_yes,
            sleep=sleep,
        )
        self.plan = plan
        self.store = store
        self.display = self.ctx.display
        #: Wall time per step id, s (benchmarks read it).
        self.step_seconds: dict[str, float] = {}
        #: The simulated bench's clock compression (1 on real instruments): the
        #: estimate's instrument times are scaled by it.
        self.time_scale = time_scale
        #: The estimate of this session's pending steps (set once the instruments answer).
        self.estimate: Estimate | None = None
        #: Whether the workers' server was started at the session's start.
        self._workers_ready = False

    @property
    def summary(self) -> RunSummary | None:
        """The run's summary once the fit step (or an output step) built it."""
        return self.ctx.summary

    @property
    def sweep_seconds(self) -> float:
        """Time spent inside the analyser driver's sweeps in this session, s."""
        return self.ctx.sweep_seconds

    @property
    def step_sweep_seconds(self) -> dict[str, float]:
        return self.ctx.step_sweep_seconds

    @property
    def sweeps_done(self) -> int:
        return self.ctx.sweeps_done

    # -- top level --------------------------------------------------------------------

    def run(self) -> RunSummary | None:
        """Execute every step not yet done; returns the summary when a fit step ran.

        Ctrl-C, a termination request (SIGTERM) and a closed terminal (SIGHUP) stop the
        run alike, the DC bias ramped down and switched off, and later signals do not cut
        that short (:mod:`bench.stop_signals`)."""
        with stop_signals.stop_on_signals():
            return self._run()

    def _run(self) -> RunSummary | None:
        store, plan, ctx = self.store, self.plan, self.ctx
        pending = [s for s in plan.steps if store.step_state(s.id) not in (DONE, SKIPPED)]
        current: Step | None = None
        started = time.perf_counter()
        try:
            store.begin_session("resume" if store.manifest["sessions"] else "start")
            store.log(f"session start, plan {plan.name}, first step {store.first_incomplete()}")
            if plan.biased and any(s.bias_v for s in pending):
                bias.caution(ctx)
            self._workers_ready = self._start_workers(pending)
            ctx.early_fits = self._early_fits(pending)
            self._prepare_instruments()
            maybe_reuse(ctx)
            # Counted after a reused calibration, whose standards are not swept again.
            sweeps = sum(
                1
                for s in plan.steps
                if s.kind in SWEEP_STEPS and store.step_state(s.id) not in (DONE, SKIPPED)
            )
            self.estimate = self._estimate(started)
            self.display.start(sweeps * plan.sweep.averages, self.estimate.total)
            self.display.message(self.estimate.text())
            self._record_timing(None)
            for step in plan.steps:
                if store.step_state(step.id) in (DONE, SKIPPED):
                    continue
                current = step
                self._execute(step)
                current = None
            store.set_state("complete")
            store.log("run complete")
            return self.summary
        except OperatorStop as exc:
            self._stopped(current, f"stopped by the operator: {exc}", STOPPED)
            raise RunError(self._resume_text(f"stopped: {exc}")) from None
        except KeyboardInterrupt as exc:  # Ctrl-C, or SIGTERM or SIGHUP (stop_signals)
            why = stop_signals.reason(exc)
            self._stopped(current, why, STOPPED)
            raise RunError(self._resume_text(why)) from None
        except RunError as exc:
            self._stopped(current, str(exc))
            raise RunError(self._resume_text(str(exc))) from None
        except _driver_errors() as exc:
            self._stopped(current, f"instrument: {exc}")
            raise RunError(self._resume_text(f"instrument: {exc}")) from None
        except SafetyError as exc:
            self._stopped(current, f"safety: {exc}")
            raise RunError(self._resume_text(f"safety: {exc}")) from None
        except OSError as exc:
            fix = self._folder_fix(exc)
            if fix is None:  # not the run folder's fault: an internal error (below)
                self._stopped(current, f"internal error: {exc!r}")
                raise
            reason = f"cannot write {exc.filename or self.store.root}: {exc.strerror or exc}"
            self._stopped(current, f"run folder: {reason}", STOPPED)
            raise RunFolderError(self._resume_text(f"{reason}\n  fix: {fix}")) from None
        except Exception as exc:
            # A fault of zbench itself: record it so the run stays resumable, then let
            # the command line report it as an internal error.
            self._stopped(current, f"internal error: {exc!r}")
            raise
        finally:
            unconfirmed = bias.bias_off(ctx)
            if ctx.report_draft is not None:  # stopped before the report step
                ctx.report_draft.cancel()
                ctx.report_draft = None
            if ctx.early_fits is not None:  # stopped before the fit step
                ctx.early_fits.cancel()
                ctx.early_fits = None
            self._took(time.perf_counter() - started)
            self.display.stop()
            if unconfirmed is not None:
                # Its own exit status (4): the part may still be charged.
                raise BiasNotConfirmedOffError(self._resume_text(unconfirmed))

    @staticmethod
    def _start_workers(pending: list[Step]) -> bool:
        """Start the worker processes' server now when the fit or report steps will use
        one (``bench.parallel.start_server``), with what their tasks import, so that it
        imports beside the sweeps instead of before the first fit. Returns whether it
        runs (only where workers are forked from a server: this process runs threads)."""
        from bench.parallel import available_cores, start_server

        kinds = {s.kind for s in pending}
        if not kinds & {"fit", "report"} or available_cores() < 2:
            return False
        # The fit step's tasks and the early fits' (the ground-loop check imports
        # scipy.optimize: half a second a worker would pay at its first sample).
        modules = ("bench.procedure.processing", "bench.core.ground_loop")
        if "report" in kinds:
            from bench.report_sample import WORKER_MODULES

            # The figures' task and its plotting library (the report's text, made in
            # this process, imports none of it).
            modules += WORKER_MODULES
        return start_server(modules)

    def _early_fits(self, pending: list[Step]) -> EarlyFits | None:
        """Samples fitted during the sweeps (:mod:`bench.procedure.early_fit`) when this
        session fits, on every core (the fit step then only collects them)."""
        from bench.parallel import available_cores

        cores = available_cores()
        if cores < 2 or not any(s.kind == "fit" for s in pending):
            return None
        return EarlyFits(self.store.root, self.plan, cores)

    def _estimate(self, started: float) -> Estimate:
        """The pending steps' duration, with the analysers' own sweep times (as read at
        the start, in the manifest's ``instruments``) where they report them, and
        zbench's own work timed on this machine now (:mod:`bench.procedure.cost`)."""
        from bench.procedure import cost

        store, plan, ctx = self.store, self.plan, self.ctx
        pending = [s for s in plan.steps if store.step_state(s.id) not in (DONE, SKIPPED)]
        kinds = {s.kind for s in pending}
        costs = cost.measure(
            plan,
            store.root,
            store.manifest,
            sweeps=bool(kinds & set(SWEEP_STEPS)),
            fits=bool(kinds & {"fit", "export", "report"}),
            figures="report" in kinds,
            workers_ready=self._workers_ready,
        )
        reported = store.manifest.get("instruments") or {}

        def sweep_time(role: str) -> float | None:
            value = (reported.get(role) or {}).get("sweep_time_s")
            return float(value) if isinstance(value, (int, float)) and value > 0 else None

        return estimate(
            plan,
            pending,
            sweep_s=sweep_time("analyzer"),
            gain_phase_sweep_s=sweep_time("gain_phase"),
            time_scale=self.time_scale,
            person=getattr(ctx.operator, "person", True),
            guided=ctx.operator.guided,
            caution=plan.biased and not ctx.assume_yes and any(s.bias_v for s in pending),
            costs=costs,
            elapsed=time.perf_counter() - started,
        )

    def measured(self, total: float) -> dict[str, float]:
        """This session's real duration (s): the swept steps less the time with the
        operator (the instruments' part), the operator's, processing, and the total."""
        kinds = {s.id: s.kind for s in self.plan.steps}
        bench_s = sum(t for sid, t in self.step_seconds.items() if kinds[sid] in BENCH_KINDS)
        operator = self.ctx.operator_seconds
        processing = sum(self.step_seconds.values()) - bench_s
        return {
            "instruments": round(max(bench_s - operator, 0.0), 3),
            "operator": round(operator, 3),
            "processing": round(processing, 3),
            "total": round(total, 3),
        }

    def _record_timing(self, measured: dict[str, float] | None) -> None:
        """This session's entry in the manifest's ``timing``: the estimate, and once the
        session ends what it really took."""
        if self.estimate is None:
            return
        timing = list(self.store.manifest.get("timing", []))
        entry = {
            "session": len(self.store.manifest["sessions"]),
            "time_scale": self.time_scale,
            "estimated": self.estimate.record(),
        }
        if measured is not None:
            entry["measured"] = measured
        if timing and timing[-1].get("session") == entry["session"]:
            timing[-1] = entry
        else:
            timing.append(entry)
        self.store.update("timing", timing)

    def _took(self, total: float) -> None:
        """Say and record how long the session took beside the estimate."""
        if self.estimate is None:
            return
        took = self.measured(total)
        est = self.estimate
        self.display.message(
            f"took {duration(took['total'])} (estimated {duration(est.total)}): instruments "
            f"{duration(took['instruments'])} (estimated {duration(est.instruments)}), "
            f"operator {duration(took['operator'])} (estimated {duration(est.operator)}), "
            f"fit and report {duration(took['processing'])}"
        )
        with contextlib.suppress(OSError):  # a full disk must not hide why the run stopped
            self._record_timing(took)

    def _resume_text(self, reason: str) -> str:
        return (
            f"{reason}\n  the run is kept in {self.store.root}; every stored sweep is safe.\n"
            f"  continue it with: zbench run --resume {self.store.root}"
        )

    def _folder_fix(self, exc: OSError) -> str | None:
        """The fix when ``exc`` is the run folder refusing a write (full, read-only, not
        writable), else None. A full disk is the folder's whatever file it names; a
        refused permission only when the file is inside the run folder."""
        fix = FOLDER_FIXES.get(exc.errno or 0)
        if fix is None or exc.errno in (errno.ENOSPC, errno.EDQUOT):
            return fix
        if exc.filename is None:
            return None
        root = self.store.root.resolve()
        path = Path(str(exc.filename)).resolve()
        return fix if path == root or root in path.parents else None

    def _stopped(self, step: Step | None, message: str, state: str = FAILED) -> None:
        """Record where the run ended: the step ``failed``, or ``stopped`` by a person.

        Each record is tried on its own: on a full disk or a read-only folder any of them
        may fail, and the manifest already on disk stays as it was (written atomically).
        """
        with contextlib.suppress(Exception):
            if step is not None and self.store.step_state(step.id) == RUNNING:
                self.store.mark(step.id, state, message=message)
        with contextlib.suppress(Exception):
            self.store.set_state("stopped", message)
        with contextlib.suppress(Exception):
            self.store.log(f"stopped at {step.id if step else '-'}: {message}")

    def _prepare_instruments(self) -> None:
        from drivers.analyzer import SweepPlan

        s = self.plan.sweep
        analyzer = self.ctx.inst.analyzer
        wanted = SweepPlan(
            start_hz=s.start,
            stop_hz=s.stop,
            points=s.points,
            spacing=s.spacing,
            ifbw_hz=s.if_bandwidth,
            power_dbm=s.power,
        )
        analyzer.configure(wanted)
        # zbench corrects in software from the stored raw standards.
        analyzer.set_correction(False)
        g = self.plan.gain_phase
        if g is not None and self.ctx.inst.gain_phase is not None:
            self.ctx.inst.gain_phase.configure(
                SweepPlan(g.start, g.stop, g.points, g.spacing, g.bandwidth, g.level)
            )
        bias.ensure_off_at_start(self.ctx)
        snapshot = self.ctx.inst.snapshot()
        sessions = self.store.manifest.get("instrument_sessions", [])
        sessions.append({"time": _dt.datetime.now(_dt.timezone.utc).isoformat(), **snapshot})
        self.store.manifest["instrument_sessions"] = sessions
        self.store.update("instruments", snapshot)

    # -- steps ------------------------------------------------------------------------

    def _execute(self, step: Step) -> None:
        started = time.perf_counter()
        try:
            self._execute_step(step)
        finally:
            self.step_seconds[step.id] = time.perf_counter() - started

    def _execute_step(self, step: Step) -> None:
        store = self.store
        store.mark(step.id, RUNNING)
        store.log(f"step {step.id} started")
        STEPS[step.kind](self.ctx, step)
        if store.step_state(step.id) == RUNNING:
            store.mark(step.id, DONE)
        store.log(f"step {step.id} {store.step_state(step.id)}")
        if step.kind == "calibrate":
            point_last_calibration(self.ctx)
        if step.kind == "measure" and self.ctx.early_fits is not None:
            group = group_of(self.plan, step)
            if all(store.step_state(s.id) == DONE for s in group):
                self.ctx.early_fits.submit(group)
