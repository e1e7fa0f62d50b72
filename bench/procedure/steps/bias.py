"""DC bias: the caution, the source with the plan's limits, a biased sweep, and the
output switched off whatever happened."""

from __future__ import annotations

import contextlib
import sys
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


def dc_commands(ctx: RunContext) -> Any:
    """The DC source's commands, from the map the procedure names (``default``)."""
    from drivers.instrument_maps import load_instrument_map

    return load_instrument_map("dc_source", ctx.plan.instruments["dc_source"].command_map)


def dc_source(ctx: RunContext, limit: float, transport: Any = None) -> Any:
    from drivers.dc_source import DcSource

    inst = ctx.plan.instruments["dc_source"]
    # `check` requires dc_source.max_current of a biased plan; the fallback is the
    # plan's own limit, never more.
    max_current = min(v for v in (inst.max_current, ctx.plan.bias.current_limit) if v is not None)
    return DcSource(
        transport if transport is not None else ctx.inst.dc_transport,
        max_voltage=limit,
        max_current=max_current,
        commands=dc_commands(ctx),
        sleep=ctx.sleep,
    )


#: How far (relative) the instrument's reported maximum may differ from the stated one.
MAX_VOLTAGE_AGREEMENT = 0.02


def ensure_off_at_start(ctx: RunContext) -> None:
    """Before any sweep: a source left on is reported and switched off (asked first when a
    person is at the bench), its reported maximum is checked against the procedure's
    statement, and its own over-voltage protection is set at the run's limit."""
    if ctx.inst.dc_transport is None:
        return
    source = dc_source(ctx, largest_limit(ctx))
    if source.output_is_on():
        volts = source.setpoint()
        found = (
            f"the DC source at {source.resource_name} was found with its output ON "
            f"(set to {volts:g} V): a part may be charged"
        )
        ctx.store.log(found)
        ctx.display.message("WARNING: " + found)
        if not ctx.assume_yes:
            with ctx.pause():
                agreed = ctx.operator.confirm("switch it off now (ramp down, output off)?")
            if not agreed:
                raise SafetyError(
                    f"{found}; the run does not start with it on. Switch it off by hand "
                    "and let the part discharge, then run again"
                )
        b = ctx.plan.bias
        source.shut_down(b.ramp_step, b.ramp_dwell_s, b.discharge_s)
        ctx.note("the DC source's output was found on at the start and was switched off")
    source.output_off()
    check_stated_maximum(ctx, source)
    if ctx.plan.biased:
        inst = ctx.plan.instruments["dc_source"]
        done = source.set_protection(largest_limit(ctx), inst.max_current or source.max_current)
        if done:
            ctx.store.log("instrument protection set: " + ", ".join(done))
            ctx.store.update("dc_protection", done)


def check_stated_maximum(ctx: RunContext, source: Any) -> None:
    """The procedure's ``dc_source.max_voltage`` against what the instrument reports."""
    stated = ctx.plan.instruments["dc_source"].max_voltage
    reported = source.reported_max_voltage()
    if reported is None or stated is None:
        return
    ctx.store.update("dc_source_reported_max_voltage", reported)
    if abs(reported - stated) > MAX_VOLTAGE_AGREEMENT * max(stated, reported):
        raise SafetyError(
            f"the procedure states dc_source.max_voltage {stated:g} V, but the source at "
            f"{source.resource_name} reports a maximum of {reported:g} V: a different "
            "source, or a wrong statement. Correct dc_source.max_voltage (or connect the "
            "source the procedure was written for); nothing was applied"
        )


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


def bias_off(ctx: RunContext) -> str | None:
    """Output off, whatever happened: on the open link, else on a fresh connection.

    Returns None when the output is confirmed off, else the message to give (also
    written to the log and to stderr): the caller ends with its own exit status.
    """
    if ctx.inst is None or ctx.inst.dc_transport is None:
        return None
    try:
        dc_source(ctx, largest_limit(ctx)).output_off()
        return None
    except Exception as exc:  # the link may be gone: try a new one below
        _note(ctx, f"output off on the open link failed ({exc}); reconnecting")
    from drivers.transport import VisaTransport

    inst = ctx.plan.instruments["dc_source"]
    try:
        with VisaTransport.open(inst.resource, timeout_s=inst.timeout_s) as link:
            # The set-point too: left at the bias voltage, it would come back the
            # moment someone switched the output on again.
            dc_source(ctx, largest_limit(ctx), transport=link).zero_and_off()
        _note(ctx, "DC output switched off and set to 0 V on a new connection")
        return None
    except Exception as exc:
        message = (
            f"could not confirm the DC source output is off ({exc}); switch it off by hand "
            "and let the part discharge before touching it"
        )
        _note(ctx, message)
        with contextlib.suppress(OSError):
            ctx.store.update("dc_output_unconfirmed", message)
        print(f"zbench: WARNING: {message}", file=sys.stderr, flush=True)
        return message


def _note(ctx: RunContext, message: str) -> None:
    """Log ``message``; a run folder that cannot be written (full, read-only) must not
    keep the output from being switched off, nor hide why the run stopped."""
    with contextlib.suppress(OSError):
        ctx.store.log(message)
