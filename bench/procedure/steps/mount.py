"""The fixture-removal captures: the empty mount (pads) and the mount short, per
position; the ground-loop check runs on the short."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from bench.errors import RunError
from bench.plausibility import check_mount_short
from bench.procedure.operators import REPEAT
from bench.procedure.plan import GAIN_PHASE, SINGLE_MOUNT_METHODS, Step
from bench.procedure.processing import (
    ground_loop,
    ground_loop_note,
    loop_removed_with_short,
    mount_short_impedance,
    open_fit,
)
from bench.procedure.steps import single_mount
from bench.procedure.steps.context import RunContext
from bench.procedure.steps.sweep import (
    checked_capture_done,
    decide,
    prepare_capture,
    sweeps,
)
from bench.units import format_si

GROUND_LOOP_ADVICE = (
    "Fit a common-mode isolation transformer (or enough ferrite) on port 2, shorten the "
    "port-1 lead, then resume the run."
)


def mount_open(ctx: RunContext, step: Step) -> None:
    if step.method in SINGLE_MOUNT_METHODS:
        single_mount.capture(ctx, step)
        return
    assert step.position is not None
    pos = step.position
    while True:
        prepare_capture(ctx, "mount_open", pos)
        sweeps(ctx, step, f"open mount, position {pos}")
        # The short usually comes later; the mount's series milliohms are nothing beside
        # the pads' kilohms, and processing subtracts the short once it exists.
        opened = open_fit(ctx.plan, ctx.plan.analysis, ctx.correction(), ctx.store, pos)
        if decide(ctx, step, f"open mount {pos}", opened.message) != REPEAT:
            break
    records = dict(ctx.store.manifest.get("mount_open", {}))
    records[str(pos)] = opened.record()
    ctx.store.update("mount_open", records)
    if opened.mount_open is None:
        ctx.note(opened.message)
    elif not ctx.operator.guided:
        ctx.display.message(opened.message)


def mount_short(ctx: RunContext, step: Step) -> None:
    if step.method in SINGLE_MOUNT_METHODS:
        single_mount.capture(ctx, step)
        return
    if step.method == GAIN_PHASE:
        from bench.procedure.steps import gain_phase

        gain_phase.capture(ctx, step)
        return
    assert step.position is not None
    pos = step.position
    plan, store = ctx.plan, ctx.store
    while True:
        prepare_capture(ctx, "mount_short", pos)
        sweeps(ctx, step, f"mount short, position {pos}")
        f, z_short = mount_short_impedance(plan, ctx.correction(), store, pos)
        loop = ground_loop(f, z_short, pos)
        result = f"|Z| {format_si(float(np.median(np.abs(z_short))), 'Ω', 3)} (median)"
        if loop.detected:
            result += f"; ground loop below {format_si(loop.valid_above_hz, 'Hz')}"
        problem = check_mount_short(f, z_short, pos)
        if checked_capture_done(ctx, step, f"mount short {pos}", problem, result):
            break
        if problem is not None:
            ctx.strapped.discard(pos)  # the hands are asked to fit the strap again
    loops = dict(store.manifest.get("ground_loop", {}))
    loops[str(pos)] = {
        "detected": loop.detected,
        "valid_above_hz": loop.valid_above_hz,
        "message": loop.message,
    }
    store.update("ground_loop", loops)
    if loop.detected and ctx.operator.guided and not plan.fixture.isolation_transformer:
        # The sweep is kept (moved aside), and the step runs again on resume.
        for relative in store.step_files(step.id):
            store.reject_raw(step.id, Path(relative).stem)
        raise RunError(
            f"ground loop on the mount short at position {pos}: {loop.message}. "
            + GROUND_LOOP_ADVICE
        )
    if loop.detected:
        # The same note, word for word, as processing writes into the summary, so the
        # run's notes give each position once.
        ctx.note(ground_loop_note(loop, plan.analysis))
        if not loop_removed_with_short(plan.analysis):
            ctx.loops[pos] = loop.valid_above_hz
