"""The gain-phase analyser's sweeps on the switched fixture: its own sweep of each
strapped position it uses (the mount short it removes) and each sample it measures
where the sample sits, at 0 V.

It reads the ratio of its two receivers, B/A, across the position through its reference
resistor; :mod:`bench.procedure.methods` turns that into an impedance with its window.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from bench.procedure import methods
from bench.procedure.display import result_line
from bench.procedure.operators import REPEAT
from bench.procedure.plan import Step
from bench.procedure.steps.context import RunContext
from bench.procedure.steps.sweep import cables_to, decide, select, sweeps
from bench.units import format_si


def _ratio_impedance(ctx: RunContext) -> tuple[np.ndarray, np.ndarray]:
    """(f, Z) of the sweep just taken, receiver B's input removed (nothing else)."""
    from bench.core.conversions import gain_phase_z

    g = ctx.plan.gain_phase
    assert g is not None
    f, s = ctx.last_average()
    return f, gain_phase_z(s[:, 1, 0], r_ref=g.reference_resistor, z_in=g.input_impedance(f))


def capture(ctx: RunContext, step: Step) -> None:
    """``mount_short/gain-phase/p<n>``: the gain-phase analyser on position n's strap."""
    assert step.position is not None
    pos = step.position
    while True:
        cables_to(ctx, "fixture")
        if pos not in ctx.strapped:
            todo = ctx.pending_positions("mount_short")
            with ctx.pause():
                ctx.operator.strap_mounts(todo)
            ctx.strapped.update(todo)
            ctx.emptied.difference_update(todo)
            ctx.batch = None
        select(ctx, pos)
        sweeps(ctx, step, f"gain-phase, mount short, position {pos}")
        try:
            _, z = _ratio_impedance(ctx)
            result = f"|Z| {format_si(float(np.median(np.abs(z))), 'Ω', 3)} (median)"
        except Exception as exc:  # the live line is information; processing decides
            result = f"no value ({exc})"
        if not ctx.operator.guided:
            ctx.display.message(f"gain-phase, mount short {pos}: {result}")
        if decide(ctx, step, f"gain-phase mount short {pos}", result) != REPEAT:
            break
    ctx.quick_mounts.pop(f"gain-phase/p{pos}", None)


def measure(ctx: RunContext, step: Step) -> None:
    """One sample swept by the gain-phase analyser in its fixture position."""
    from bench.procedure.steps.measure import place

    placement = step.placement
    assert placement is not None
    part = ctx.plan.part(placement.part)
    label = f"{placement.part}/{placement.sample} gain-phase"
    while True:
        place(ctx, placement)
        sweeps(ctx, step, f"{label}, position {placement.position}")
        result = live_result(ctx, step, part, label)
        if not ctx.operator.guided:
            ctx.display.result(result)
        if decide(ctx, step, label, result) != REPEAT:
            break


def live_result(ctx: RunContext, step: Step, part: Any, label: str) -> str:
    """Landmarks of the sample just swept by the gain-phase analyser (no fit yet)."""
    from bench.core.landmarks import landmarks_for
    from bench.procedure.processing import z_at_nominal

    assert step.position is not None
    key = f"gain-phase/p{step.position}"
    try:
        f, s = ctx.last_average()
        if key not in ctx.quick_mounts:
            ctx.quick_mounts[key] = methods.gain_phase_short(ctx.plan, ctx.store, step.position)
        data = methods.gain_phase_impedance(
            ctx.plan, ctx.plan.analysis, f, s[:, 1, 0], ctx.quick_mounts[key]
        )
        kind = "capacitor" if part.spec.kind in ("mlcc", "bulk") else "inductor"
        marks = dict(landmarks_for(kind, f, data.z, np.asarray(data.inside_window)))
    except Exception as exc:  # the live line is information; the fit step decides
        return f"{label}: no landmarks ({exc})"
    return result_line(
        label,
        part.spec.kind,
        marks,
        nominal=part.spec.nominal,
        tolerance=part.spec.tolerance,
        outside=data.points_outside_window,
        z_at_nominal=z_at_nominal(part.spec, data),
        nominal_at_hz=part.spec.nominal_at_hz if part.spec.kind == "bead" else None,
    )
