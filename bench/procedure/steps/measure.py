"""The measure step: one part's sample at one bias point, and its live line (landmarks
from a quick correction, before any fit)."""

from __future__ import annotations

from typing import Any

import numpy as np

from bench.plausibility import check_part
from bench.procedure.plan import GAIN_PHASE, SHUNT, SINGLE_MOUNT_METHODS, Step
from bench.procedure.processing import (
    averaged,
    main_value,
    mount_short_impedance,
    open_fit,
    sample_impedance,
)
from bench.procedure.steps import bias, single_mount
from bench.procedure.steps.context import RunContext
from bench.procedure.steps.live import landmark_line, part_landmarks
from bench.procedure.steps.sweep import cables_to, sample_done, select, sweeps
from bench.runstore import DONE


def place(ctx: RunContext, placement: Any, cables: str = "fixture") -> None:
    """Cables on the fixture (``cables``: the network analyser's ``fixture``, or
    ``gain-phase``), ``placement``'s batch loaded and its position selected."""
    plan = ctx.plan
    cables_to(ctx, cables)
    if ctx.batch != placement.batch:
        batch = plan.batches[placement.batch]
        with ctx.pause():
            ctx.operator.load_parts(batch)
        ctx.batch = placement.batch
        ctx.strapped.difference_update(p.position for p in batch)
        ctx.emptied.difference_update(p.position for p in batch)
    select(ctx, placement.position)


def measure(ctx: RunContext, step: Step) -> None:
    if step.method in SINGLE_MOUNT_METHODS:
        single_mount.measure(ctx, step)
        return
    if step.method == GAIN_PHASE:
        from bench.procedure.steps import gain_phase

        gain_phase.measure(ctx, step)
        return
    placement = step.placement
    assert placement is not None
    plan = ctx.plan
    part = plan.part(placement.part)
    label = f"{placement.part}/{placement.sample}" + (
        f" at {step.bias_v:g} V" if step.bias_v else ""
    )
    where = f"{label}, position {placement.position}"
    while True:
        place(ctx, placement)
        if step.bias_v:
            bias.biased(ctx, part, step.bias_v, label, lambda: sweeps(ctx, step, where))
        else:
            sweeps(ctx, step, where)
        ctx.last_live = None
        result = live_result(ctx, step, part)
        if ctx.last_live is not None:
            # At the floor: said here and in the verdict (CHECK); the lot goes on.
            problem = check_part(ctx.last_live.inside_window, label)
            if problem is not None:
                result += f"\n    IMPLAUSIBLE: {problem}" + (
                    " Repeat (r) once it is fixed." if ctx.operator.guided else ""
                )
        if sample_done(ctx, step, label, result):
            break


def live_result(ctx: RunContext, step: Step, part: Any) -> str:
    """Landmarks of the sample just measured, for the live line (no fit yet).

    At 0 V the main landmark is kept, so the same sample's bias points show their change
    from it (and no verdict, as in the exports).
    """
    placement = step.placement
    assert placement is not None
    label = placement.part + "/" + placement.sample
    if step.bias_v:
        label += f" {step.bias_v:g}V"
    key = (placement.part, placement.sample)
    try:
        f, s = ctx.last_average()
        marks, data = live_landmarks(ctx, placement, part, f, s)
    except Exception as exc:  # the live line is information; the fit step decides
        return f"{label}: no landmarks ({exc})"
    ctx.last_live = data
    main = main_value(part.spec, marks, data)
    reference = None
    if not step.bias_v:
        if main is not None:
            ctx.zero_bias[key] = main
    else:
        reference = zero_bias_reference(ctx, step, part)
    return landmark_line(label, part, marks, data, bias_v=step.bias_v, reference=reference)


def live_landmarks(
    ctx: RunContext, placement: Any, part: Any, f: np.ndarray, s: np.ndarray
) -> tuple[dict[str, Any], Any]:
    """(landmarks, impedance data) of one sample's raw sweep with the quick correction."""
    plan, store = ctx.plan, ctx.store
    # A quick through-response correction: the live line is a first look; the fit step
    # applies the run's full calibration.
    s21n = ctx.correction().quick(f, s)[:, 1, 0]
    z_short = ctx.quick_shorts.get(placement.position)
    if z_short is None and store.step_state(f"mount_short/p{placement.position}") == DONE:
        _, z_short = mount_short_impedance(
            plan, ctx.correction(), store, placement.position, quick=True
        )
        ctx.quick_shorts[placement.position] = z_short
    data = sample_impedance(plan, plan.analysis, f, s21n, z_short, quick_open(ctx, placement))
    valid = np.asarray(data.inside_window) & (f >= ctx.loops.get(placement.position, 0.0))
    return part_landmarks(part, f, data, valid), data


def zero_bias_reference(ctx: RunContext, step: Step, part: Any) -> float | None:
    """The same sample's main landmark at 0 V: kept from this session, or (after a resume)
    worked out again from its stored sweep; None when it was not measured."""
    placement = step.placement
    assert placement is not None
    key = (placement.part, placement.sample)
    if key in ctx.zero_bias:
        return ctx.zero_bias[key]
    for other in ctx.plan.steps:
        there = other.placement
        if (
            other.kind == "measure"
            and other.method == SHUNT
            and not other.bias_v
            and there is not None
            and (there.part, there.sample) == key
            and ctx.store.step_state(other.id) == DONE
        ):
            try:
                f, s = averaged(ctx.store, other.id)
                marks, data = live_landmarks(ctx, there, part, f, s)
            except Exception:  # the change is information; without it the line is shorter
                return None
            main = main_value(part.spec, marks, data)
            if main is not None:
                ctx.zero_bias[key] = main
            return main
    return None


def quick_open(ctx: RunContext, placement: Any) -> Any:
    """The pads of ``placement``'s position from its open capture (quick correction), or
    None when there is none or it was not usable; computed once per position."""
    pos = placement.position
    if pos not in ctx.quick_opens:
        step_id = f"mount_open/p{pos}"
        if step_id not in {s.id for s in ctx.plan.steps}:
            return None
        if ctx.store.step_state(step_id) != DONE:
            return None
        opened = open_fit(
            ctx.plan,
            ctx.plan.analysis,
            ctx.correction(),
            ctx.store,
            pos,
            ctx.quick_shorts.get(pos),
            quick=True,
        )
        ctx.quick_opens[pos] = opened.mount_open
    return ctx.quick_opens[pos]
