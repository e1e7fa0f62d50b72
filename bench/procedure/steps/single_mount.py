"""The single mounts (series-through and reflection): their own captures (the empty gap
or open, the zero-ohm strap) and the samples measured on them, one at a time."""

from __future__ import annotations

from typing import Any

from bench.procedure import methods
from bench.procedure.operators import REPEAT
from bench.procedure.plan import Step
from bench.procedure.steps.context import RunContext
from bench.procedure.steps.live import landmark_line, part_landmarks
from bench.procedure.steps.sweep import cables_to, decide, sample_done, sweeps


def _fill(ctx: RunContext, method: str, item: Any, key: str) -> None:
    """Have the hands put ``item`` in ``method``'s mount unless it is there already."""
    if ctx.mounted.get(method) == key:
        return
    with ctx.pause():
        ctx.operator.fill_mount(method, item)
    ctx.mounted[method] = key
    ctx.store.log(f"{method} mount: {key}")


def capture(ctx: RunContext, step: Step) -> None:
    """``mount_open/<method>`` (the empty gap or open) or ``mount_short/<method>`` (the
    zero-ohm strap): the mount's own fixture removal."""
    method = step.method
    item = "empty" if step.kind == "mount_open" else "strap"
    words = methods.CAPTURE_WORDS[(method, step.kind)]
    while True:
        cables_to(ctx, method)
        _fill(ctx, method, item, item)
        sweeps(ctx, step, f"{method} mount: {words}")
        f, s = ctx.last_average()
        try:
            z = methods.method_z(ctx.plan, ctx.correction(), method, f, s, quick=True)
            result = methods.capture_result(method, step.kind, f, z)
        except Exception as exc:  # the live line is information; processing decides
            result = f"{words}: no value ({exc})"
        if not ctx.operator.guided:
            ctx.display.message(f"{method} mount, {result}")
        if decide(ctx, step, f"{method} mount {words}", result) != REPEAT:
            break
    ctx.quick_mounts.pop(method, None)


def measure(ctx: RunContext, step: Step) -> None:
    """One sample on a single mount, with its live line."""
    placement = step.placement
    assert placement is not None
    method = step.method
    part = ctx.plan.part(placement.part)
    label = f"{placement.part}/{placement.sample} {method}"
    while True:
        cables_to(ctx, method)
        _fill(ctx, method, placement, f"{placement.part}/{placement.sample}")
        sweeps(ctx, step, label)
        result = live_result(ctx, step, part, label)
        if sample_done(ctx, step, label, result):
            break


def live_result(ctx: RunContext, step: Step, part: Any, label: str) -> str:
    """Landmarks of the sample just measured on a single mount (quick correction)."""
    method = step.method
    try:
        f, s = ctx.last_average()
        mount = ctx.quick_mounts.get(method)
        if mount is None:
            mount = methods.captures(ctx.plan, ctx.correction(), ctx.store, method, quick=True)
            ctx.quick_mounts[method] = mount
        data = methods.single_mount_impedance(
            ctx.plan, ctx.plan.analysis, ctx.correction(), method, f, s, mount, quick=True
        )
        marks = part_landmarks(part, f, data)
    except Exception as exc:  # the live line is information; the fit step decides
        return f"{label}: no landmarks ({exc})"
    return landmark_line(label, part, marks, data)
