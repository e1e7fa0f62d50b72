"""``zbench check PROCEDURE``: validate a procedure and print its plan (docs/design.md §3)."""

from __future__ import annotations

import textwrap
from pathlib import Path
from typing import Any

import click

from bench.errors import InputError
from bench.procedure.estimate import duration as _duration
from bench.procedure.estimate import estimate
from bench.procedure.plan import SWEEP_STEPS, Plan, load_plan
from bench.units import format_si

# Keeps a number with its unit when a line is wrapped (textwrap breaks at spaces only).
NBSP = "\u00a0"


def _nominal_text(spec: Any) -> str:
    """``22 µF ±20 %``, or ``120 Ω ±25 % at 100 MHz`` for a bead; empty without a nominal."""
    if spec.nominal is None:
        return ""
    unit = {"mlcc": "F", "bulk": "F", "inductor": "H", "bead": "Ω"}[spec.kind]
    text = format_si(spec.nominal, unit)
    if spec.tolerance:
        text += f" ±{spec.tolerance * 100:g} %"
    if spec.kind == "bead" and spec.nominal_at_hz:
        text += f" at {format_si(spec.nominal_at_hz, 'Hz')}"
    return text


def describe_plan(plan: Plan) -> str:
    """The plan in plain words: set-up, parts, batches, steps and estimated duration."""
    s, fx, cal = plan.sweep, plan.fixture, plan.calibration
    averaging = f"{s.averages} sweeps averaged" if s.averages > 1 else "no averaging"
    positions = f"{fx.positions} position{'s' if fx.positions != 1 else ''}"
    used = list(fx.use_positions)
    if used != list(range(1, fx.positions + 1)):
        positions += f", using {', '.join(map(str, used))}"
    resistors = (
        f"series resistors {format_si(fx.series_r, 'Ω')} at both ports"
        if fx.series_r
        else "no series resistors"
    )
    lines = [
        f"procedure {plan.name} ({plan.source}), {plan.mode}",
        f"  sweep      {format_si(s.start, 'Hz')} to {format_si(s.stop, 'Hz')}, {s.points} points "
        f"{s.spacing}, IF {format_si(s.if_bandwidth, 'Hz')}, {s.power:g} dBm, {averaging}",
        f"  fixture    {positions}; {resistors}; isolation transformer "
        f"{'fitted' if fx.isolation_transformer else 'not fitted'}",
    ]
    g = plan.gain_phase
    if g is not None:
        z_in = (
            f"receiver B {format_si(g.input_resistance, 'Ω')} ∥ "
            f"{format_si(g.input_capacitance, 'F')}"
            if g.input_resistance is not None
            else "receiver B ideal"
        )
        lines.extend(
            textwrap.wrap(
                f"gain-phase analyser {format_si(g.start, 'Hz')} to {format_si(g.stop, 'Hz')}, "
                f"{g.points} points {g.spacing}, bandwidth {format_si(g.bandwidth, 'Hz')}, "
                f"{g.level:g} dBm; reference resistor {format_si(g.reference_resistor, 'Ω')}, "
                f"{z_in}; sweeps each gain-phase part where it sits in the fixture, and each "
                "used position's strap",
                width=88,
                initial_indent="  gain-phase ",
                subsequent_indent=" " * 13,
            )
        )
    text = cal.method + (
        f" (crossover {format_si(cal.crossover_hz, 'Hz')})" if cal.crossover_hz else ""
    )
    if cal.reuse_run:
        text += f"; reuse {cal.reuse_run} if younger than {_duration(cal.max_age_s)}"
    text += "; standards " + ", ".join(cal.standards)
    lines.append(f"  calibrate  {text}")
    lines.append("  parts")
    nominals = [_nominal_text(part.spec) for part in plan.parts]
    width = max([14, *(len(text) for text in nominals)])
    for part, nominal in zip(plan.parts, nominals, strict=True):
        spec = part.spec
        lines.append(
            f"    {spec.name:<14} {spec.kind:<8} {nominal:<{width}} model {spec.model:<10} "
            f"samples {', '.join(part.samples)}"
        )
        methods = " + ".join(part.methods)
        lines.append(
            " " * 19
            + f"method {methods}"
            + (" (stitched into one curve)" if len(part.methods) > 1 else "")
        )
        if part.bias != (0.0,):
            bias = ", ".join(f"{v:g}" for v in part.bias) + " V"
            text = (
                f"bias {bias}; limit {plan.bias_limit(part):g}{NBSP}V (the lowest of the "
                "part, bias-tee, DC-block and source ratings)"
            )
            lines.extend(
                textwrap.wrap(
                    text,
                    width=88,
                    initial_indent=" " * 19,
                    subsequent_indent=" " * 19,
                    break_on_hyphens=False,
                )
            )
    if plan.biased:
        b = plan.bias
        text = (
            f"ramped in {b.ramp_step:g}{NBSP}V steps, current limit "
            f"{format_si(b.current_limit, 'A').replace(' ', NBSP)}, settle {b.settle_s:g}{NBSP}s, "
            f"output off and a {b.discharge_s:g}{NBSP}s discharge wait at the end, on a stop "
            "and on any error. A "
            "caution is shown before the first biased step; local safety rules and the "
            "instruments' manuals take precedence."
        )
        lines.extend(
            textwrap.wrap(
                text,
                width=88,
                initial_indent="  DC bias    ",
                subsequent_indent=" " * 13,
                break_on_hyphens=False,
            )
        )
    lines.append("  batches    (position: part/sample)")
    for i, batch in enumerate(plan.batches, start=1):
        where = ", ".join(f"{p.position}: {p.part}/{p.sample}" for p in batch)
        lines.extend(
            textwrap.wrap(where, width=88, initial_indent=f"    {i}  ", subsequent_indent=" " * 7)
        )
    for method in ("series-through", "reflection"):
        on = [
            f"{s.placement.part}/{s.placement.sample}"
            for s in plan.steps
            if s.kind == "measure" and s.method == method and s.placement is not None
        ]
        if on:
            lines.extend(
                textwrap.wrap(
                    ", ".join(on),
                    width=88,
                    initial_indent=f"  {method + ' mount':<22} ",
                    subsequent_indent=" " * 25,
                )
            )
    counts: dict[str, int] = {}
    for step in plan.steps:
        counts[step.kind] = counts.get(step.kind, 0) + 1
    lines.append(
        "  steps      " + ", ".join(f"{k} ×{n}" if n > 1 else k for k, n in counts.items())
    )
    sweeps = sum(counts.get(k, 0) for k in SWEEP_STEPS)
    lines.append(f"  sweeps     {sweeps * s.averages}")
    guess = estimate(plan, caution=plan.biased)
    lines.append(f"  estimated  {_duration(guess.total)} with a person at the bench")
    parts = guess.text().split(": ", 1)[1]
    lines.append(
        textwrap.fill(parts, width=100, initial_indent=" " * 13, subsequent_indent=" " * 13)
    )
    return "\n".join(lines)


@click.command("check")
@click.argument("procedure", required=False, type=click.Path(path_type=Path))
@click.option("--schema", "show_schema", is_flag=True, help="Print the procedure JSON schema.")
@click.option(
    "--instruments",
    "probe",
    is_flag=True,
    help="Also connect to the instruments the procedure names: identify each, and report "
    "a DC source left on (offering to switch it off) or one whose maximum differs.",
)
@click.option("--yes", "assume_yes", is_flag=True, help="With --instruments: switch off unasked.")
def command(procedure: Path | None, show_schema: bool, probe: bool, assume_yes: bool) -> None:
    """Validate PROCEDURE and print its plan; exit 2 with file:line:key messages on errors."""
    if show_schema:
        import json

        from bench.procedure.schema import PROCEDURE_SCHEMA

        click.echo(json.dumps(PROCEDURE_SCHEMA, indent=2, ensure_ascii=False))
        return
    if procedure is None:
        raise InputError("no procedure given", hint="zbench check PROCEDURE.yaml")
    plan = load_plan(procedure)
    click.echo(describe_plan(plan))
    click.echo("procedure is valid")
    if probe:
        check_instruments(plan, assume_yes=assume_yes)


def check_instruments(plan: Any, *, assume_yes: bool = False) -> None:
    """Connect to the plan's instruments, identify them and look at the DC source."""
    from bench.errors import SafetyError
    from bench.procedure.instruments import needed_roles
    from drivers.dc_source import DcSource
    from drivers.instrument_maps import load_instrument_map
    from drivers.scpi import ScpiInstrument
    from drivers.transport import VisaTransport

    roles = needed_roles(plan, scripted=False)
    if plan.instruments["dc_source"].resource and "dc_source" not in roles:
        roles.append("dc_source")
    for role in roles:
        inst = plan.instruments[role]
        if not inst.resource:
            click.echo(f"  {role}: no resource given")
            continue
        with VisaTransport.open(inst.resource, timeout_s=inst.timeout_s) as link:
            click.echo(f"  {role}: {ScpiInstrument(link).identify()}")
            if role != "dc_source":
                continue
            source = DcSource(
                link,
                max_voltage=inst.max_voltage or 1.0,
                max_current=inst.max_current or 0.01,
                commands=load_instrument_map("dc_source", inst.command_map),
            )
            reported = source.reported_max_voltage()
            if reported is not None and inst.max_voltage is not None:
                agree = abs(reported - inst.max_voltage) <= 0.02 * max(reported, inst.max_voltage)
                click.echo(
                    f"  dc_source: reports a maximum of {reported:g} V; the procedure states "
                    f"{inst.max_voltage:g} V" + ("" if agree else " - THESE DISAGREE")
                )
                if not agree:
                    raise SafetyError(
                        f"the DC source reports a maximum of {reported:g} V, the procedure "
                        f"states {inst.max_voltage:g} V: correct dc_source.max_voltage"
                    )
            if source.output_is_on():
                click.echo(
                    f"  dc_source: its output is ON (set to {source.setpoint():g} V): "
                    "a part may be charged",
                    err=True,
                )
                if assume_yes or click.confirm("  switch it off now (0 V, output off)?"):
                    source.zero_and_off()
                    click.echo("  dc_source: output switched off and set to 0 V")
                else:
                    raise SafetyError("the DC source's output is on; switch it off by hand")
            else:
                click.echo("  dc_source: output off")
