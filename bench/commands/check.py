"""``zbench check PROCEDURE``: validate a procedure and print its plan (DESIGN §3)."""

from __future__ import annotations

from pathlib import Path

import click

from bench.errors import InputError
from bench.procedure.plan import Plan, load_plan
from bench.units import format_si


def _duration(seconds: float) -> str:
    seconds = round(seconds)
    hours, rest = divmod(seconds, 3600)
    minutes, secs = divmod(rest, 60)
    if hours:
        return f"{hours} h {minutes:02d} min"
    if minutes:
        return f"{minutes} min {secs:02d} s"
    return f"{secs} s"


def describe_plan(plan: Plan) -> str:
    """The plan in plain words: set-up, parts, batches, steps and estimated duration."""
    s, fx, cal = plan.sweep, plan.fixture, plan.calibration
    lines = [
        f"procedure {plan.name} ({plan.source}), {plan.mode}",
        f"  sweep      {format_si(s.start, 'Hz')} to {format_si(s.stop, 'Hz')}, {s.points} points "
        f"{s.spacing}, IF {format_si(s.if_bandwidth, 'Hz')}, {s.power:g} dBm, "
        f"{s.averages} sweep(s) averaged",
        f"  fixture    {fx.positions} position(s), using {', '.join(map(str, fx.use_positions))}; "
        f"series resistors {format_si(fx.series_r, 'ohm')}; isolation transformer "
        f"{'fitted' if fx.isolation_transformer else 'not fitted'}",
    ]
    text = cal.method + (
        f" (crossover {format_si(cal.crossover_hz, 'Hz')})" if cal.crossover_hz else ""
    )
    if cal.reuse_run:
        text += f"; reuse {cal.reuse_run} if younger than {_duration(cal.max_age_s)}"
    lines.append(f"  calibrate  {text}")
    lines.append("  parts")
    for part in plan.parts:
        spec = part.spec
        nominal = ""
        if spec.nominal is not None:
            unit = {"mlcc": "F", "bulk": "F", "inductor": "H", "bead": "Ω"}[spec.kind]
            nominal = format_si(spec.nominal, unit)
            if spec.tolerance:
                nominal += f" ±{spec.tolerance * 100:g} %"
        bias = ", ".join(f"{v:g}" for v in part.bias) + " V"
        extra = (
            f", limit {plan.bias_limit(part):g} V" if plan.biased and part.bias != (0.0,) else ""
        )
        lines.append(
            f"    {spec.name:<14} {spec.kind:<8} {nominal:<14} model {spec.model:<10} "
            f"samples {', '.join(part.samples)}; bias {bias}{extra}"
        )
    lines.append("  batches")
    for i, batch in enumerate(plan.batches, start=1):
        where = ", ".join(f"p{p.position}={p.part}/{p.sample}" for p in batch)
        lines.append(f"    {i}: {where}")
    counts: dict[str, int] = {}
    for step in plan.steps:
        counts[step.kind] = counts.get(step.kind, 0) + 1
    lines.append(
        "  steps      " + ", ".join(f"{k} ×{n}" if n > 1 else k for k, n in counts.items())
    )
    sweeps = sum(counts.get(k, 0) for k in ("calibrate", "mount_short", "measure"))
    lines.append(f"  sweeps     {sweeps * s.averages}")
    lines.append(f"  estimated  {_duration(plan.estimated_seconds())}")
    return "\n".join(lines)


@click.command("check")
@click.argument("procedure", required=False, type=click.Path(path_type=Path))
@click.option("--schema", "show_schema", is_flag=True, help="Print the procedure JSON schema.")
def command(procedure: Path | None, show_schema: bool) -> None:
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
