"""The runner: executes a plan step by step into a run folder.

One code path for every way of working: the operator (a person at a console, or the
simulated bench's scripted hands) does the physical actions, the instruments do the
rest. Every raw sweep is written to the run store the moment it is read, and each step's
state is recorded, so a run stopped by Ctrl-C, a crash or a lost connection resumes at
its first incomplete step with every stored sweep kept.

Physical state (what the cables are on, what sits in the mounts) is never trusted across
sessions: a resumed run asks the operator again for whatever the next step needs.
"""

from __future__ import annotations

import contextlib
import dataclasses
import datetime as _dt
import json
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from bench.errors import InputError, RunError, SafetyError
from bench.files import atomic_write_bytes, atomic_write_text
from bench.procedure.display import PlainDisplay, result_line
from bench.procedure.operators import REPEAT, SKIP, STOP, Operator, OperatorStop
from bench.procedure.plan import SWEEP_STEPS, Plan, Step
from bench.procedure.processing import (
    Corrector,
    averaged,
    build_summary,
    ground_loop,
    ground_loop_note,
    loop_removed_with_short,
    main_value,
    mount_short_impedance,
    open_fit,
    sample_impedance,
    z_at_nominal,
)
from bench.results import RunSummary
from bench.runstore import (
    DONE,
    FAILED,
    LAST_CALIBRATION,
    RUNNING,
    SKIPPED,
    RunStore,
    file_stem,
    parse_iso,
)
from bench.units import format_si

CAUTION = (
    "CAUTION - DC bias. This procedure applies DC voltage to capacitors.\n"
    "A charged capacitor stores energy and can deliver a large current when\n"
    "shorted. DC must reach the part only through a bias tee, with DC blocks\n"
    "protecting the analyser ports; never connect DC to an analyser port directly.\n"
    "zbench keeps every bias point at or below the lowest of the part rating, the\n"
    "bias-tee and DC-block ratings and the source maximum, ramps the voltage, and\n"
    "switches the output off with a discharge wait at the end, on a stop and on\n"
    "any error. Follow your local safety rules and the instruments' manuals;\n"
    "they take precedence over this program."
)

GROUND_LOOP_ADVICE = (
    "Fit a common-mode isolation transformer (or enough ferrite) on port 2, shorten the "
    "port-1 lead, then resume the run."
)


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
    ):
        self.plan = plan
        self.store = store
        self.inst = instruments
        self.operator = operator
        self.display = display or PlainDisplay()
        self.assume_yes = assume_yes
        self.sleep = sleep
        self.summary: RunSummary | None = None
        # What the hands have done in this session; nothing is assumed from an earlier one.
        self._set_up = False
        self._cables: str | None = None
        self._strapped: set[int] = set()
        self._emptied: set[int] = set()
        self._batch: int | None = None
        self._selected: int | None = None
        self._caution_done = False
        self._corrector: Corrector | None = None
        self._quick_shorts: dict[int, np.ndarray] = {}
        self._quick_opens: dict[int, Any] = {}
        self._last: tuple[np.ndarray, np.ndarray] | None = None
        self._loops: dict[int, float] = {}
        # Main landmark (c_low F, l_low H, a bead's |Z| Ω at its stated frequency) of each
        # (part, sample) at 0 V, as measured: the bias points' live lines compare with it.
        self._zero_bias: dict[tuple[str, str], float] = {}
        # Steps whose sweeps have moved the progress count in this session: a repeat
        # takes the sweeps again but does not count them twice, so the count stays
        # within the total given at the start.
        self._counted: set[str] = set()
        # Time spent inside the analyser driver's sweep (instrument time and transfer), s,
        # in total and per step: benchmarks subtract it to find the tool's own overhead.
        self.sweep_seconds = 0.0
        self.step_sweep_seconds: dict[str, float] = {}
        self.step_seconds: dict[str, float] = {}
        self.sweeps_done = 0

    # -- top level --------------------------------------------------------------------

    def run(self) -> RunSummary | None:
        """Execute every step not yet done; returns the summary when a fit step ran."""
        store, plan = self.store, self.plan
        store.begin_session("resume" if store.manifest["sessions"] else "start")
        store.log(f"session start, plan {plan.name}, first step {store.first_incomplete()}")
        pending = [s for s in plan.steps if store.step_state(s.id) not in (DONE, SKIPPED)]
        current: Step | None = None
        try:
            if plan.biased and any(s.bias_v for s in pending):
                self._caution()
            self._prepare_instruments()
            self._maybe_reuse_calibration()
            # Counted after a reused calibration, whose standards are not swept again.
            sweeps = sum(
                1
                for s in plan.steps
                if s.kind in SWEEP_STEPS and store.step_state(s.id) not in (DONE, SKIPPED)
            )
            self.display.start(sweeps * plan.sweep.averages, plan.estimated_seconds())
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
            self._stopped(current, f"stopped by the operator: {exc}")
            raise RunError(self._resume_text(f"stopped: {exc}")) from None
        except KeyboardInterrupt:
            self._stopped(current, "interrupted (Ctrl-C)")
            raise RunError(self._resume_text("interrupted")) from None
        except RunError as exc:
            self._stopped(current, str(exc))
            raise RunError(self._resume_text(str(exc))) from None
        except _driver_errors() as exc:
            self._stopped(current, f"instrument: {exc}")
            raise RunError(self._resume_text(f"instrument: {exc}")) from None
        except SafetyError as exc:
            self._stopped(current, f"safety: {exc}")
            raise RunError(self._resume_text(f"safety: {exc}")) from None
        except Exception as exc:
            # A fault of zbench itself: record it so the run stays resumable, then let
            # the command line report it as an internal error.
            self._stopped(current, f"internal error: {exc!r}")
            raise
        finally:
            self._bias_off()
            self.display.stop()

    def _pause(self) -> Any:
        """Free the console while a person is asked something (not for scripted hands)."""
        if getattr(self.operator, "interactive", False):
            return self.display.pause()
        return contextlib.nullcontext()

    def _resume_text(self, reason: str) -> str:
        return (
            f"{reason}\n  the run is kept in {self.store.root}; every stored sweep is safe.\n"
            f"  continue it with: zbench run --resume {self.store.root}"
        )

    def _stopped(self, step: Step | None, message: str) -> None:
        with contextlib.suppress(Exception):
            if step is not None and self.store.step_state(step.id) == RUNNING:
                self.store.mark(step.id, FAILED, message=message)
            self.store.set_state("stopped", message)
            self.store.log(f"stopped at {step.id if step else '-'}: {message}")

    # -- set-up -----------------------------------------------------------------------

    def _caution(self) -> None:
        if self._caution_done:
            return
        with self._pause():
            if self.assume_yes:
                self.display.message(CAUTION)
            else:
                self.operator.caution(CAUTION)
        self._caution_done = True
        self.store.log("DC-bias caution shown and acknowledged")

    def _prepare_instruments(self) -> None:
        from drivers.analyzer import SweepPlan

        s = self.plan.sweep
        analyzer = self.inst.analyzer
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
        self._ensure_bias_off_at_start()
        snapshot = self.inst.snapshot()
        sessions = self.store.manifest.get("instrument_sessions", [])
        sessions.append({"time": _dt.datetime.now(_dt.timezone.utc).isoformat(), **snapshot})
        self.store.manifest["instrument_sessions"] = sessions
        self.store.update("instruments", snapshot)

    def _ensure_bias_off_at_start(self) -> None:
        if self.inst.dc_transport is None:
            return
        source = self._dc_source(self._largest_limit())
        if source.output_is_on():
            source.shut_down(
                self.plan.bias.ramp_step, self.plan.bias.ramp_dwell_s, self.plan.bias.discharge_s
            )
        source.output_off()

    def _largest_limit(self) -> float:
        limits = [self.plan.bias_limit(p) for p in self.plan.parts if p.bias != (0.0,)]
        return max([v for v in limits if v > 0] or [1.0])

    def _dc_source(self, limit: float) -> Any:
        from drivers.dc_source import DcSource

        inst = self.plan.instruments["dc_source"]
        max_current = min(
            v for v in (inst.max_current, self.plan.bias.current_limit) if v is not None
        )
        return DcSource(
            self.inst.dc_transport, max_voltage=limit, max_current=max_current, sleep=self.sleep
        )

    def _bias_off(self) -> None:
        """Output off, whatever happened: on the open link, else on a fresh connection."""
        if self.inst is None or self.inst.dc_transport is None:
            return
        try:
            self._dc_source(self._largest_limit()).output_off()
            return
        except Exception as exc:  # the link may be gone: try a new one below
            self.store.log(f"output off on the open link failed ({exc}); reconnecting")
        from drivers.dc_source import DcSource
        from drivers.transport import VisaTransport

        inst = self.plan.instruments["dc_source"]
        try:
            with VisaTransport.open(inst.resource, timeout_s=inst.timeout_s) as link:
                DcSource(link, max_voltage=self._largest_limit(), max_current=1.0).output_off()
            self.store.log("DC output switched off on a new connection")
        except Exception as exc:
            message = (
                f"could not confirm the DC source output is off ({exc}); switch it off by hand "
                "and let the part discharge before touching it"
            )
            self.store.log(message)
            self.display.message("WARNING: " + message)

    def _setup(self) -> None:
        if self._set_up:
            return
        with self._pause():
            self.operator.fit_resistors(self.plan.fixture.series_r)
            self.operator.fit_transformer(self.plan.fixture.isolation_transformer)
        self._set_up = True

    def _cables_to(self, target: str) -> None:
        self._setup()
        if self._cables == target:
            return
        with self._pause():
            if target == "fixture":
                self.operator.connect_fixture()
            else:
                self.operator.connect_standard(target)
        self._cables = target
        self.store.log(f"cables: {target}")

    def _select(self, position: int) -> None:
        if self.inst.switch is not None and self._selected != position:
            self.inst.switch.select(position)
        self._selected = position

    # -- calibration reuse -------------------------------------------------------------

    def _maybe_reuse_calibration(self) -> None:
        cal = self.plan.calibration
        cal_steps = [s for s in self.plan.steps if s.kind == "calibrate"]
        if not cal.reuse_run or not cal_steps:
            return
        if all(self.store.step_state(s.id) == DONE for s in cal_steps):
            return
        path = self._reuse_path()
        if not path.exists():
            # The first run of a lot: nothing to reuse yet, and nothing is wrong.
            text = f"no earlier calibration found at {path}; taking a new one"
            self.display.message(text)
            self.store.log(text)
            return
        reason = self._reuse_problem()
        if reason is not None:
            self.display.message(f"calibration not reused: {reason}; calibrating anew")
            self.store.log(f"calibration not reused: {reason}")
            return
        old = RunStore.open(self._reuse_path())
        for step in cal_steps:
            self.store.mark(step.id, RUNNING)
            for relative in old.step_files(step.id):
                target = self.store.root / relative
                atomic_write_bytes(target, (old.root / relative).read_bytes())
                self.store._step(step.id)["files"].append(relative)
            self.store.mark(step.id, DONE, reused_from=str(old.root))
        self.store.update(
            "calibration",
            {**old.manifest.get("calibration", {}), "reused_from": str(old.root)},
        )
        self.display.message(f"calibration reused from {old.root}")
        self.store.log(f"calibration reused from {old.root}")

    def _point_last_calibration(self) -> None:
        """Once every standard is stored, let later runs find this calibration by name."""
        cal_steps = [s.id for s in self.plan.steps if s.kind == "calibrate"]
        if not all(self.store.step_state(i) == DONE for i in cal_steps):
            return
        try:
            link = self.store.point_latest()
        except OSError as exc:  # a file system without links: reuse by run folder still works
            self.store.log(f"could not point {LAST_CALIBRATION} at this run ({exc})")
            return
        self.store.log(f"{link} now points at this run's calibration")

    def _reuse_path(self) -> Path:
        given = Path(self.plan.calibration.reuse_run or "")
        if not given.is_absolute() and not given.exists():
            beside = Path(self.plan.source).parent / given
            if beside.exists():
                return beside
        return given

    def _reuse_problem(self) -> str | None:
        """Why the named calibration cannot be reused, or None when it can."""
        path = self._reuse_path()
        try:
            old = RunStore.open(path)
        except InputError as exc:
            return f"{path}: {str(exc).splitlines()[0]}"
        problems = calibration_mismatch(old.manifest["procedure"], self.plan.resolved)
        if problems:
            return "; ".join(problems)
        times = []
        for step in self.plan.steps:
            if step.kind != "calibrate":
                continue
            try:
                info = old.step_info(step.id)
            except KeyError:
                return f"{path} has no {step.id} step"
            if info["state"] != DONE or "finished" not in info:
                return f"{path}: {step.id} was not completed"
            times.append(parse_iso(info["finished"]))
        age = (_dt.datetime.now(_dt.timezone.utc) - min(times)).total_seconds()
        if age > self.plan.calibration.max_age_s:
            allowed = self.plan.calibration.max_age_s / 3600
            return f"it is {age / 3600:.1f} h old, more than the {allowed:g} h allowed"
        return None

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
        if step.kind == "calibrate":
            self._calibrate(step)
        elif step.kind == "mount_open":
            self._mount_open(step)
        elif step.kind == "mount_short":
            self._mount_short(step)
        elif step.kind == "measure":
            self._measure(step)
        elif step.kind == "fit":
            self._fit(step)
        elif step.kind == "export":
            self._export(step)
        elif step.kind == "report":
            self._report(step)
        if store.step_state(step.id) == RUNNING:
            store.mark(step.id, DONE)
        store.log(f"step {step.id} {store.step_state(step.id)}")
        if step.kind == "calibrate":
            self._point_last_calibration()

    def _parameters(self) -> tuple[str, ...]:
        # All four: SOLT corrects with all of them, the through response uses S21 and S12,
        # and a reprocess with another method needs them stored.
        return ("S11", "S21", "S12", "S22")

    def _sweeps(self, step: Step, label: str) -> None:
        """Take the step's sweeps (the procedure's average count), writing each at once.

        Sweeps already stored for this step (an interrupted earlier session) are kept and
        not taken again.
        """
        n = self.plan.sweep.averages
        base = file_stem(step.id)
        sweeps: list[tuple[np.ndarray, np.ndarray]] = []
        for k in range(1, n + 1):
            name = base if n == 1 else f"{base}_a{k}"
            if self.store.adopt_raw(step.id, name):
                sweeps.append(
                    self.store.read_raw(str(self.store.raw_path(name).relative_to(self.store.root)))
                )
                self._advance(step)
                continue
            self.display.step(f"{label} sweep {k}/{n}" if n > 1 else label)
            t0 = time.perf_counter()
            data = self.inst.analyzer.sweep(self._parameters())
            spent = time.perf_counter() - t0
            self.sweep_seconds += spent
            self.step_sweep_seconds[step.id] = self.step_sweep_seconds.get(step.id, 0.0) + spent
            self.sweeps_done += 1
            # Listed in the manifest at the step's next mark; adopt_raw finds it otherwise.
            self.store.write_raw(
                step.id,
                name,
                data.f,
                data.s,
                z0=self.plan.fixture.z0,
                comments=(f"raw, analyser correction off, sweep {k} of {n}",),
                save=False,
            )
            sweeps.append((np.asarray(data.f, dtype=float), np.asarray(data.s, dtype=complex)))
            self._advance(step)
        self._counted.add(step.id)
        f = sweeps[0][0]
        self._last = (f, sum(s for _, s in sweeps) / len(sweeps))

    def _advance(self, step: Step) -> None:
        """One sweep of ``step`` done: moves the progress count unless the step's sweeps
        were already counted in this session (a repeat at the operator's request)."""
        if step.id not in self._counted:
            self.display.advance()

    def _decide(self, step: Step, label: str, result: str) -> str:
        """Guided sessions: ask what next; handles repeat here, returns skip/continue."""
        while self.operator.guided:
            with self._pause():
                choice = self.operator.after_sweep(label, result)
            if choice == STOP:
                raise OperatorStop("stopped by the operator")
            if choice == SKIP:
                self.store.mark(step.id, SKIPPED, message="skipped by the operator")
                return SKIP
            if choice != REPEAT:
                return choice
            for relative in self.store.step_files(step.id):
                self.store.reject_raw(step.id, Path(relative).stem)
            self.store.log(f"{step.id}: sweep repeated at the operator's request")
            return REPEAT
        return "continue"

    def _calibrate(self, step: Step) -> None:
        assert step.standard is not None
        while True:
            self._cables_to(step.standard)
            self._sweeps(step, f"calibration: {step.standard}")
            _, s = self._last_average(step)
            s21 = s[:, 1, 0]
            result = f"|S21| {20 * np.log10(np.median(np.abs(s21)) + 1e-300):.2f} dB (median)"
            if self._decide(step, f"calibration {step.standard}", result) != REPEAT:
                break
        if step.standard == self.plan.calibration.standards[-1]:
            self.store.update(
                "calibration",
                {
                    "method": self.plan.calibration.method,
                    "crossover_hz": self.plan.calibration.crossover_hz,
                    "kit": dataclasses.asdict(self.plan.calibration.kit),
                    "standards": {
                        std: self.store.step_files(f"calibrate/{std}")
                        for std in self.plan.calibration.standards
                    },
                    "time": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
                },
            )

    def _last_average(self, step: Step) -> tuple[np.ndarray, np.ndarray]:
        """The mean of the sweeps just taken for ``step`` (kept in memory by _sweeps)."""
        assert self._last is not None
        return self._last

    def _correction(self) -> Corrector:
        if self._corrector is None:
            self._corrector = Corrector.from_store(self.store, self.plan)
        return self._corrector

    def _pending_positions(self, kind: str) -> list[int]:
        """Positions whose ``kind`` step (mount_open, mount_short) is still to do."""
        return [
            s.position
            for s in self.plan.steps
            if s.kind == kind
            and s.position is not None
            and self.store.step_state(s.id) not in (DONE, SKIPPED)
        ]

    def _mount_open(self, step: Step) -> None:
        assert step.position is not None
        pos = step.position
        while True:
            self._cables_to("fixture")
            if pos not in self._emptied:
                # One action for every open still to capture, like the straps.
                todo = self._pending_positions("mount_open")
                with self._pause():
                    self.operator.empty_mounts(todo)
                self._emptied.update(todo)
                self._strapped.difference_update(todo)
                self._batch = None
            self._select(pos)
            self._sweeps(step, f"open mount, position {pos}")
            # The short usually comes later; the mount's series milliohms are nothing
            # beside the pads' kilohms, and processing subtracts the short once it exists.
            opened = open_fit(self.plan, self.plan.analysis, self._correction(), self.store, pos)
            if self._decide(step, f"open mount {pos}", opened.message) != REPEAT:
                break
        records = dict(self.store.manifest.get("mount_open", {}))
        records[str(pos)] = opened.record()
        self.store.update("mount_open", records)
        if opened.mount_open is None:
            self._note(opened.message)
        elif not self.operator.guided:
            self.display.message(opened.message)

    def _note(self, note: str) -> None:
        """A warning for the manifest (once) and the display."""
        warnings = list(self.store.manifest.get("warnings", []))
        if note not in warnings:
            warnings.append(note)
        self.store.update("warnings", warnings)
        self.display.message(note)

    def _mount_short(self, step: Step) -> None:
        assert step.position is not None
        pos = step.position
        while True:
            self._cables_to("fixture")
            if pos not in self._strapped:
                todo = self._pending_positions("mount_short")
                with self._pause():
                    self.operator.strap_mounts(todo)
                self._strapped.update(todo)
                self._emptied.difference_update(todo)
                self._batch = None
            self._select(pos)
            self._sweeps(step, f"mount short, position {pos}")
            f, z_short = mount_short_impedance(self.plan, self._correction(), self.store, pos)
            loop = ground_loop(f, z_short, pos)
            result = f"|Z| {format_si(float(np.median(np.abs(z_short))), 'Ω', 3)} (median)"
            if loop.detected:
                result += f"; ground loop below {format_si(loop.valid_above_hz, 'Hz')}"
            choice = self._decide(step, f"mount short {pos}", result)
            if choice == REPEAT:
                continue
            break
        loops = dict(self.store.manifest.get("ground_loop", {}))
        loops[str(pos)] = {
            "detected": loop.detected,
            "valid_above_hz": loop.valid_above_hz,
            "message": loop.message,
        }
        self.store.update("ground_loop", loops)
        if loop.detected and self.operator.guided and not self.plan.fixture.isolation_transformer:
            # The sweep is kept (moved aside), and the step runs again on resume.
            for relative in self.store.step_files(step.id):
                self.store.reject_raw(step.id, Path(relative).stem)
            raise RunError(
                f"ground loop on the mount short at position {pos}: {loop.message}. "
                + GROUND_LOOP_ADVICE
            )
        if loop.detected:
            # The same note, word for word, as processing writes into the summary, so the
            # run's notes give each position once.
            self._note(ground_loop_note(loop, self.plan.analysis))
            if not loop_removed_with_short(self.plan.analysis):
                self._loops[pos] = loop.valid_above_hz

    def _measure(self, step: Step) -> None:
        placement = step.placement
        assert placement is not None
        part = self.plan.part(placement.part)
        label = f"{placement.part}/{placement.sample}" + (
            f" at {step.bias_v:g} V" if step.bias_v else ""
        )
        while True:
            self._cables_to("fixture")
            if self._batch != placement.batch:
                batch = self.plan.batches[placement.batch]
                with self._pause():
                    self.operator.load_parts(batch)
                self._batch = placement.batch
                self._strapped.difference_update(p.position for p in batch)
                self._emptied.difference_update(p.position for p in batch)
            self._select(placement.position)
            if step.bias_v:
                limit = self.plan.bias_limit(part)
                if step.bias_v > limit:
                    raise SafetyError(
                        f"{label}: {step.bias_v:g} V is above the limit {limit:g} V; "
                        "nothing applied"
                    )
                self._caution()
                self.display.step(f"{label}: ramping and settling")
                source = self._dc_source(limit)
                b = self.plan.bias
                with source.biased(
                    step.bias_v,
                    current_limit=min(b.current_limit, source.max_current),
                    step_v=b.ramp_step,
                    dwell_s=b.ramp_dwell_s,
                    discharge_s=b.discharge_s,
                ):
                    if b.settle_s:
                        self.sleep(b.settle_s)
                    self._sweeps(step, f"{label}, position {placement.position}")
            else:
                self._sweeps(step, f"{label}, position {placement.position}")
            result = self._live_result(step, part)
            if not self.operator.guided:
                self.display.result(result)
            if self._decide(step, label, result) != REPEAT:
                break

    def _live_result(self, step: Step, part: Any) -> str:
        """Landmarks of the sample just measured, for the live line (no fit yet).

        At 0 V the main landmark is kept, so the same sample's bias points show their
        change from it (and no verdict, as in the exports).
        """
        placement = step.placement
        assert placement is not None
        label = placement.part + "/" + placement.sample
        if step.bias_v:
            label += f" {step.bias_v:g}V"
        key = (placement.part, placement.sample)
        try:
            f, s = self._last_average(step)
            marks, data = self._live_landmarks(placement, part, f, s)
        except Exception as exc:  # the live line is information; the fit step decides
            return f"{label}: no landmarks ({exc})"
        z_nominal = z_at_nominal(part.spec, data)
        main = main_value(part.spec, marks, data)
        reference = None
        if not step.bias_v:
            if main is not None:
                self._zero_bias[key] = main
        else:
            reference = self._zero_bias_reference(step, part)
        return result_line(
            label,
            part.spec.kind,
            marks,
            nominal=part.spec.nominal,
            tolerance=part.spec.tolerance,
            outside=data.points_outside_window,
            bias_v=step.bias_v,
            reference=reference,
            z_at_nominal=z_nominal,
            nominal_at_hz=part.spec.nominal_at_hz if part.spec.kind == "bead" else None,
        )

    def _live_landmarks(
        self, placement: Any, part: Any, f: np.ndarray, s: np.ndarray
    ) -> tuple[dict[str, Any], Any]:
        """(landmarks, impedance data) of one sample's raw sweep with the quick correction."""
        from bench.core.landmarks import landmarks_for

        # A quick through-response correction: the live line is a first look; the fit
        # step applies the run's full calibration.
        s21n = self._correction().quick(f, s)[:, 1, 0]
        z_short = self._quick_shorts.get(placement.position)
        if z_short is None and self.store.step_state(f"mount_short/p{placement.position}") == DONE:
            _, z_short = mount_short_impedance(
                self.plan, self._correction(), self.store, placement.position, quick=True
            )
            self._quick_shorts[placement.position] = z_short
        data = sample_impedance(
            self.plan, self.plan.analysis, f, s21n, z_short, self._quick_open(placement)
        )
        valid = np.asarray(data.inside_window) & (f >= self._loops.get(placement.position, 0.0))
        kind = "capacitor" if part.spec.kind in ("mlcc", "bulk") else "inductor"
        return dict(landmarks_for(kind, f, data.z, valid)), data

    def _zero_bias_reference(self, step: Step, part: Any) -> float | None:
        """The same sample's main landmark at 0 V: kept from this session, or (after a
        resume) worked out again from its stored sweep; None when it was not measured."""
        placement = step.placement
        assert placement is not None
        key = (placement.part, placement.sample)
        if key in self._zero_bias:
            return self._zero_bias[key]
        for other in self.plan.steps:
            there = other.placement
            if (
                other.kind == "measure"
                and not other.bias_v
                and there is not None
                and (there.part, there.sample) == key
                and self.store.step_state(other.id) == DONE
            ):
                try:
                    f, s = averaged(self.store, other.id)
                    marks, data = self._live_landmarks(there, part, f, s)
                except Exception:  # the change is information; without it the line is shorter
                    return None
                main = main_value(part.spec, marks, data)
                if main is not None:
                    self._zero_bias[key] = main
                return main
        return None

    def _quick_open(self, placement: Any) -> Any:
        """The pads of ``placement``'s position from its open capture (quick correction),
        or None when there is none or it was not usable; computed once per position."""
        pos = placement.position
        if pos not in self._quick_opens:
            step_id = f"mount_open/p{pos}"
            if step_id not in {s.id for s in self.plan.steps}:
                return None
            if self.store.step_state(step_id) != DONE:
                return None
            opened = open_fit(
                self.plan,
                self.plan.analysis,
                self._correction(),
                self.store,
                pos,
                self._quick_shorts.get(pos),
                quick=True,
            )
            self._quick_opens[pos] = opened.mount_open
        return self._quick_opens[pos]

    def _fit(self, step: Step) -> None:
        self.display.step("fitting models")
        from bench.exports import main_landmark, zero_bias_values

        summary = build_summary(self.store, self.plan)
        references = zero_bias_values(summary)
        models = self.store.root / "models"
        for sample in summary.samples:
            if sample.fit is not None:
                text = json.dumps(sample.fit.to_json(), indent=2, default=_plain)
                atomic_write_text(models / f"{file_stem(sample.label)}.fit.json", text + "\n")
                part = self.plan.part(sample.part)
                name, value = main_landmark(part.spec, sample)
                bead_point = name == "z_at_nominal_hz"
                self.display.result(
                    result_line(
                        "fit " + sample.label,
                        part.spec.kind,
                        dict(sample.fit.landmarks),
                        nominal=part.spec.nominal,
                        tolerance=part.spec.tolerance,
                        bias_v=sample.bias_v,
                        reference=(
                            references.get((sample.part, sample.sample)) if sample.bias_v else None
                        ),
                        z_at_nominal=value if bead_point else None,
                        nominal_at_hz=part.spec.nominal_at_hz if bead_point else None,
                    )
                    + f"  [{sample.fit.model}, rms log error "
                    f"{sample.fit.quality.rms_log_error:.3f}]"
                )
            else:
                self.display.result(f"fit {sample.label}: no model ({sample.fit_error})")
        self.summary = summary

    def _need_summary(self) -> RunSummary:
        if self.summary is None:
            self.summary = build_summary(self.store, self.plan)
        return self.summary

    def _export(self, step: Step) -> None:
        self.display.step("writing exports")
        try:
            from bench.exports import write_exports
        except ImportError:
            self.store.mark(step.id, SKIPPED, message="exports are not available in this build")
            return
        written = write_exports(self.store.root, self._need_summary())
        files = [
            str(Path(p).relative_to(self.store.root)) for paths in written.values() for p in paths
        ]
        self.store.mark(step.id, DONE, files=files)

    def _report(self, step: Step) -> None:
        self.display.step("writing the report")
        try:
            from bench.report import write_report
        except ImportError:
            self.store.mark(step.id, SKIPPED, message="the report is not available in this build")
            return
        path = write_report(self.store.root, self._need_summary())
        self.store.mark(step.id, DONE, files=[str(Path(path).relative_to(self.store.root))])
        self.store.update("report", str(Path(path).relative_to(self.store.root)))


def calibration_mismatch(old: dict[str, Any], new: dict[str, Any]) -> list[str]:
    """Settings of a stored calibration that differ from the new plan's (empty: reusable)."""
    problems = []
    for section, keys in (
        ("sweep", ("start", "stop", "points", "spacing", "if_bandwidth", "power")),
        ("fixture", ("series_r", "isolation_transformer", "z0")),
        ("calibration", ("method", "crossover_hz")),
    ):
        for key in keys:
            a = old.get(section, {}).get(key)
            b = new.get(section, {}).get(key)
            if a != b:
                was, now = _setting_text(key, a), _setting_text(key, b)
                problems.append(f"{section}.{key} was {was}, the plan has {now}")
    return problems


#: Units of the calibration settings :func:`calibration_mismatch` compares.
_SETTING_UNITS = {
    "start": "Hz",
    "stop": "Hz",
    "if_bandwidth": "Hz",
    "crossover_hz": "Hz",
    "series_r": "Ω",
    "z0": "Ω",
}


def _setting_text(key: str, value: Any) -> str:
    """A stored setting as an engineer writes it: ``1 kHz``, ``0 dBm``, ``log``, ``none``."""
    if value is None:
        return "none"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, (int, float)):
        if key in _SETTING_UNITS:
            return format_si(float(value), _SETTING_UNITS[key])
        return f"{value:g} dBm" if key == "power" else f"{value:g}"
    return str(value)


def _plain(value: Any) -> Any:
    if isinstance(value, (np.floating, np.integer)):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    return str(value)
