"""What every swept step does: the hands' set-up, cables, switch, sweeps and the
operator's choice after a sweep."""

from __future__ import annotations

import time
from collections.abc import Callable
from pathlib import Path
from typing import NamedTuple, TypeVar

import numpy as np

from bench.procedure.operators import REPEAT, SKIP, STOP, OperatorStop
from bench.procedure.plan import GAIN_PHASE, SINGLE_MOUNT_METHODS, Step
from bench.procedure.steps.context import RunContext
from bench.runstore import SKIPPED, file_stem

#: All four: SOLT corrects with all of them, the through response uses S21 and S12, and a
#: reprocess with another method needs them stored.
PARAMETERS = ("S11", "S21", "S12", "S22")

T = TypeVar("T")


def setup(ctx: RunContext) -> None:
    if ctx.set_up:
        return
    with ctx.pause():
        ctx.operator.fit_resistors(ctx.plan.fixture.series_r)
        ctx.operator.fit_transformer(ctx.plan.fixture.isolation_transformer)
    ctx.set_up = True


def cables_to(ctx: RunContext, target: str) -> None:
    """Have the hands connect ``target``: ``fixture`` (the network analyser's cables),
    ``gain-phase`` (the fixture on the gain-phase analyser), a single mount's method or a
    calibration standard; nothing when it is connected already in this session."""
    setup(ctx)
    if ctx.cables == target:
        return
    with ctx.pause():
        if target == "fixture":
            ctx.operator.connect_fixture()
        elif target == GAIN_PHASE:
            ctx.operator.connect_gain_phase()
        elif target in SINGLE_MOUNT_METHODS:
            ctx.operator.connect_mount(target)
        else:
            ctx.operator.connect_standard(target)
    ctx.cables = target
    ctx.store.log(f"cables: {target}")


def prepare_capture(ctx: RunContext, kind: str, position: int, cables: str = "fixture") -> None:
    """Cables to the fixture (``cables``: ``fixture`` or ``gain-phase``), the mount of
    ``position`` strapped (``kind`` ``mount_short``) or emptied (``mount_open``), and the
    position selected.

    The hands strap (or empty) every position whose capture is still to do in one action,
    so a fixture is prepared once, not position by position.
    """
    cables_to(ctx, cables)
    short = kind == "mount_short"
    done, undone = (ctx.strapped, ctx.emptied) if short else (ctx.emptied, ctx.strapped)
    if position not in done:
        todo = list(dict.fromkeys(ctx.pending_positions(kind)))
        with ctx.pause():
            if short:
                ctx.operator.strap_mounts(todo)
            else:
                ctx.operator.empty_mounts(todo)
        done.update(todo)
        undone.difference_update(todo)
        ctx.batch = None
    select(ctx, position)


def select(ctx: RunContext, position: int) -> None:
    if ctx.inst.switch is not None and ctx.selected != position:
        ctx.inst.switch.select(position)
    ctx.selected = position


def sweeps(ctx: RunContext, step: Step, label: str) -> None:
    """Take the step's sweeps (the procedure's average count), writing each at once.

    Sweeps already stored for this step (an interrupted earlier session) are kept and
    not taken again. A gain-phase step's sweeps are the gain-phase analyser's receiver
    ratio B/A, stored as S21 and S12 of the raw file (its comment says so).
    """
    store = ctx.store
    n = ctx.plan.sweep.averages
    base = file_stem(step.id)
    taken: list[tuple[np.ndarray, np.ndarray]] = []
    for k in range(1, n + 1):
        name = base if n == 1 else f"{base}_a{k}"
        if store.adopt_raw(step.id, name):
            taken.append(store.read_raw(str(store.raw_path(name).relative_to(store.root))))
            advance(ctx, step)
            continue
        ctx.display.step(f"{label} sweep {k}/{n}" if n > 1 else label)
        t0 = time.perf_counter()
        comment = f"raw, analyser correction off, sweep {k} of {n}"
        if step.method == GAIN_PHASE:
            f_gp, ratio = _measured(ctx, step, ctx.inst.gain_phase.ratio)
            s_gp = np.zeros((len(f_gp), 2, 2), dtype=complex)
            s_gp[:, 1, 0] = s_gp[:, 0, 1] = ratio
            data = _Sweep(np.asarray(f_gp, dtype=float), s_gp)
            comment = (
                f"gain-phase analyser, receiver ratio B/A stored as S21 and S12 (not an "
                f"S-parameter), sweep {k} of {n}"
            )
        else:
            data = _measured(ctx, step, lambda: ctx.inst.analyzer.sweep(PARAMETERS))
        spent = time.perf_counter() - t0
        ctx.sweep_seconds += spent
        ctx.step_sweep_seconds[step.id] = ctx.step_sweep_seconds.get(step.id, 0.0) + spent
        ctx.sweeps_done += 1
        # Listed in the manifest at the step's next mark; adopt_raw finds it otherwise.
        store.write_raw(
            step.id,
            name,
            data.f,
            data.s,
            z0=ctx.plan.fixture.z0,
            comments=(comment,),
            save=False,
        )
        taken.append((np.asarray(data.f, dtype=float), np.asarray(data.s, dtype=complex)))
        advance(ctx, step)
    ctx.counted.add(step.id)
    f = taken[0][0]
    ctx.last = (f, sum(s for _, s in taken) / len(taken))


#: A sweep with points the analyser could not measure (SCPI's 9.91E37) is taken again,
#: up to this many sweeps in all, before the run stops: an overload that passes (a
#: transient on the bias line, a switch settling) costs a sweep, not the run (common
#: practice, no source).
UNMEASURED_SWEEPS = 3


def _measured(ctx: RunContext, step: Step, take: Callable[[], T]) -> T:
    """``take()``, one sweep, taken again while the analyser sends points it could not
    measure, at most :data:`UNMEASURED_SWEEPS` times; each repeat is logged and shown.
    The last failure stops the run (the driver's error, naming the sweeps taken)."""
    from drivers.errors import UnmeasuredPoints

    for repeat in range(1, UNMEASURED_SWEEPS):
        try:
            return take()
        except UnmeasuredPoints as exc:
            text = (
                f"{step.id}: the analyser could not measure {exc.count} "
                f"point{'' if exc.count == 1 else 's'} of {exc.trace} (sent 9.91E37); "
                f"sweep taken again ({repeat} of {UNMEASURED_SWEEPS - 1} repeats)"
            )
            ctx.store.log(text)
            ctx.display.message(text)
    try:
        return take()
    except UnmeasuredPoints as exc:
        raise UnmeasuredPoints(
            exc.resource, exc.trace, exc.frequencies, exc.count, sweeps=UNMEASURED_SWEEPS
        ) from None


class _Sweep(NamedTuple):
    f: np.ndarray
    s: np.ndarray


def advance(ctx: RunContext, step: Step) -> None:
    """One sweep of ``step`` done: moves the progress count unless the step's sweeps were
    already counted in this session (a repeat at the operator's request)."""
    if step.id not in ctx.counted:
        ctx.display.advance()


def decide(ctx: RunContext, step: Step, label: str, result: str) -> str:
    """Guided sessions: ask what next; handles repeat here, returns skip/continue."""
    while ctx.operator.guided:
        with ctx.pause():
            choice = ctx.operator.after_sweep(label, result)
        if choice == STOP:
            raise OperatorStop("stopped by the operator")
        if choice == SKIP:
            ctx.store.mark(step.id, SKIPPED, message="skipped by the operator")
            return SKIP
        if choice != REPEAT:
            return choice
        for relative in ctx.store.step_files(step.id):
            ctx.store.reject_raw(step.id, Path(relative).stem)
        ctx.store.log(f"{step.id}: sweep repeated at the operator's request")
        return REPEAT
    return "continue"


def sample_done(ctx: RunContext, step: Step, label: str, result: str) -> bool:
    """A sample's live line: shown at once when unattended, and the operator's choice in a
    guided session. True when the step is done, False when the operator repeats it."""
    if not ctx.operator.guided:
        ctx.display.result(result)
    return decide(ctx, step, label, result) != REPEAT


def implausible(ctx: RunContext, step: Step, what: str, problem: str | None, result: str) -> str:
    """The result line of a capture, marked when a plausibility check failed.

    Unattended, a failed check stops the run with a clear message (the sweep is moved
    aside, so a resume takes it again). Guided, the operator sees the reason with the
    advice to repeat; :func:`keep_implausible` records it if they go on regardless.
    """
    if problem is None:
        return result
    if not ctx.operator.guided:
        for relative in ctx.store.step_files(step.id):
            ctx.store.reject_raw(step.id, Path(relative).stem)
        from bench.errors import RunError

        raise RunError(f"implausible {what}: {problem}")
    return f"IMPLAUSIBLE: {problem} Repeat (r) once it is fixed. [{result}]"


def checked_capture_done(
    ctx: RunContext, step: Step, what: str, problem: str | None, result: str
) -> bool:
    """After a capture with a plausibility check (``problem``, None when it passed): the
    result shown (:func:`implausible`), the operator's choice (:func:`decide`), and a kept
    failure recorded (:func:`keep_implausible`). True when the step is done (continued or
    skipped), False when the operator repeats it."""
    result = implausible(ctx, step, what, problem, result)
    choice = decide(ctx, step, what, result)
    if choice == REPEAT:
        return False
    if choice != SKIP:
        keep_implausible(ctx, what, problem)
    return True


def keep_implausible(ctx: RunContext, what: str, problem: str | None) -> None:
    """A guided operator went on past a failed check: the run's results say so."""
    if problem is not None:
        from bench.verdicts import PLAUSIBILITY_PREFIX

        ctx.note(f"{PLAUSIBILITY_PREFIX}{what}, kept by the operator: {problem}")
