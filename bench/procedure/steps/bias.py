"""DC bias: the caution, the source with the plan's limits, a biased sweep, and the
output switched off whatever happened."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from bench.errors import SafetyError
from bench.procedure.steps.context import RunContext

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


def caution(ctx: RunContext) -> None:
    if ctx.caution_done:
        return
    with ctx.pause():
        if ctx.assume_yes:
            ctx.display.message(CAUTION)
        else:
            ctx.operator.caution(CAUTION)
    ctx.caution_done = True
    ctx.store.log("DC-bias caution shown and acknowledged")


def largest_limit(ctx: RunContext) -> float:
    limits = [ctx.plan.bias_limit(p) for p in ctx.plan.parts if p.bias != (0.0,)]
    return max([v for v in limits if v > 0] or [1.0])


def dc_source(ctx: RunContext, limit: float) -> Any:
    from drivers.dc_source import DcSource

    inst = ctx.plan.instruments["dc_source"]
    max_current = min(v for v in (inst.max_current, ctx.plan.bias.current_limit) if v is not None)
    return DcSource(
        ctx.inst.dc_transport, max_voltage=limit, max_current=max_current, sleep=ctx.sleep
    )


def ensure_off_at_start(ctx: RunContext) -> None:
    if ctx.inst.dc_transport is None:
        return
    source = dc_source(ctx, largest_limit(ctx))
    if source.output_is_on():
        b = ctx.plan.bias
        source.shut_down(b.ramp_step, b.ramp_dwell_s, b.discharge_s)
    source.output_off()


def biased(ctx: RunContext, part: Any, bias_v: float, label: str, action: Callable[[], None]):
    """Run ``action`` with ``bias_v`` on ``part`` (ramped, settled, always switched off)."""
    limit = ctx.plan.bias_limit(part)
    if bias_v > limit:
        raise SafetyError(f"{label}: {bias_v:g} V is above the limit {limit:g} V; nothing applied")
    caution(ctx)
    ctx.display.step(f"{label}: ramping and settling")
    source = dc_source(ctx, limit)
    b = ctx.plan.bias
    try:
        with source.biased(
            bias_v,
            current_limit=min(b.current_limit, source.max_current),
            step_v=b.ramp_step,
            dwell_s=b.ramp_dwell_s,
            discharge_s=b.discharge_s,
        ):
            if b.settle_s:
                ctx.sleep(b.settle_s)
            action()
    except BaseException:
        # A stop, Ctrl-C or error under bias: the context has ramped down, switched off
        # and waited; tell the person at the bench what the source now reports.
        confirm_discharged(ctx, source, label)
        raise


def confirm_discharged(ctx: RunContext, source: Any, label: str) -> None:
    """Say on the console whether the output is off and the part discharged."""
    wait = ctx.plan.bias.discharge_s
    try:
        on = source.output_is_on()
        volts = source.measure_voltage()
    except Exception as exc:  # the link may be gone; say so rather than reassure
        message = (
            f"WARNING: {label}: could not confirm the DC source output is off ({exc}); "
            "switch it off by hand and let the part discharge before touching it"
        )
    else:
        if on:
            message = (
                f"WARNING: {label}: the DC source output still reads ON ({volts:.3g} V); "
                "switch it off by hand and let the part discharge before touching it"
            )
        else:
            message = (
                f"{label}: DC bias output is OFF (reads {volts:.3g} V) and the part was "
                f"discharged for {wait:g} s"
            )
    ctx.store.log(message)
    ctx.display.message(message)


def bias_off(ctx: RunContext) -> None:
    """Output off, whatever happened: on the open link, else on a fresh connection."""
    if ctx.inst is None or ctx.inst.dc_transport is None:
        return
    try:
        dc_source(ctx, largest_limit(ctx)).output_off()
        return
    except Exception as exc:  # the link may be gone: try a new one below
        ctx.store.log(f"output off on the open link failed ({exc}); reconnecting")
    from drivers.dc_source import DcSource
    from drivers.transport import VisaTransport

    inst = ctx.plan.instruments["dc_source"]
    try:
        with VisaTransport.open(inst.resource, timeout_s=inst.timeout_s) as link:
            DcSource(link, max_voltage=largest_limit(ctx), max_current=1.0).output_off()
        ctx.store.log("DC output switched off on a new connection")
    except Exception as exc:
        message = (
            f"could not confirm the DC source output is off ({exc}); switch it off by hand "
            "and let the part discharge before touching it"
        )
        ctx.store.log(message)
        ctx.display.message("WARNING: " + message)
