"""The gain-phase analyser's sweeps on the switched fixture: its own sweep of each
strapped position it uses (the mount short it removes) and each sample it measures
where the sample sits, at 0 V.

The hands move the fixture from the network analyser's cables to the gain-phase analyser
before these sweeps (and back before the next network-analyser sweep). It reads the
ratio of its two receivers, B/A, across the position through its reference resistor;
:mod:`bench.procedure.methods` turns that into an impedance with its window.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from bench.plausibility import check_gain_phase_short
from bench.procedure import methods
from bench.procedure.plan import GAIN_PHASE, Step
from bench.procedure.steps.context import RunContext
from bench.procedure.steps.live import landmark_line, part_landmarks
from bench.procedure.steps.sweep import (
    checked_capture_done,
    prepare_capture,
    sample_done,
    sweeps,
)
from bench.units import format_si


def _ratio_impedance(ctx: RunContext) -> tuple[np.ndarray, np.ndarray]:
    """(f, Z) of the sweep just taken, receiver B's input removed (nothing else)."""
    from bench.core.conversions import gain_phase_z

    g = ctx.plan.gain_phase
    assert g is not None
    f, s = ctx.last_average()
    return f, gain_phase_z(s[:, 1, 0], r_ref=g.reference_resistor, z_in=g.input_impedance(f))


def capture(ctx: RunContext, step: Step) -> None:
    """``mount_short/gain-phase/p<n>``: the gain-phase analyser on position n's strap,
    checked like the network analyser's mount short."""
    assert step.position is not None
    pos = step.position
    what = f"gain-phase mount short {pos}"
    while True:
        prepare_capture(ctx, "mount_short", pos, cables=GAIN_PHASE)
        sweeps(ctx, step, f"gain-phase, mount short, position {pos}")
        problem = None
        try:
            f, z = _ratio_impedance(ctx)
            result = f"|Z| {format_si(float(np.median(np.abs(z))), 'Ω', 3)} (median)"
            problem = check_gain_phase_short(f, z, pos)
        except Exception as exc:  # the live line is information; processing decides
            result = f"no value ({exc})"
        if not ctx.operator.guided and problem is None:
            ctx.display.message(f"gain-phase, mount short {pos}: {result}")
        if checked_capture_done(ctx, step, what, problem, result):
            break
        if problem is not None:
            # The hands are asked again for the strap and for the gain-phase analyser.
            ctx.strapped.discard(pos)
            ctx.cables = None
    ctx.quick_mounts.pop(f"gain-phase/p{pos}", None)


def measure(ctx: RunContext, step: Step) -> None:
    """One sample swept by the gain-phase analyser in its fixture position."""
    from bench.procedure.steps.measure import place

    placement = step.placement
    assert placement is not None
    part = ctx.plan.part(placement.part)
    label = f"{placement.part}/{placement.sample} gain-phase"
    while True:
        place(ctx, placement, cables=GAIN_PHASE)
        sweeps(ctx, step, f"{label}, position {placement.position}")
        result = live_result(ctx, step, part, label)
        if sample_done(ctx, step, label, result):
            break


def live_result(ctx: RunContext, step: Step, part: Any, label: str) -> str:
    """Landmarks of the sample just swept by the gain-phase analyser (no fit yet)."""
    assert step.position is not None
    key = f"gain-phase/p{step.position}"
    try:
        f, s = ctx.last_average()
        if key not in ctx.quick_mounts:
            ctx.quick_mounts[key] = methods.gain_phase_short(ctx.plan, ctx.store, step.position)
        data = methods.gain_phase_impedance(
            ctx.plan, ctx.plan.analysis, f, s[:, 1, 0], ctx.quick_mounts[key]
        )
        marks = part_landmarks(part, f, data)
    except Exception as exc:  # the live line is information; the fit step decides
        return f"{label}: no landmarks ({exc})"
    return landmark_line(label, part, marks, data)
