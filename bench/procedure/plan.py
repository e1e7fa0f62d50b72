"""A schema-checked procedure resolved to a typed :class:`Plan`, every value checked.

A :class:`Plan` is everything the runner needs, resolved to SI numbers: instruments,
sweep, fixture, calibration, analysis settings, bias limits, the parts with their
samples and bias points, the fixture batches, and the ordered list of :class:`Step`
whose ids the run store records so a stopped run resumes where it stopped.

This module builds it (:func:`build_plan`, :func:`load_plan`, :func:`plan_from_text`)
and re-exports the public names of its parts, so callers import from here:
``plan_types`` (the dataclasses), ``plan_values`` (numbers, fractions and the kit read
from the document), ``plan_limits`` (analyser limits, bias safety), ``plan_checks``
(step order, methods, command maps), ``plan_steps`` (batches, steps, manifest form,
duration estimate) and ``outputs`` (one file per output name).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from bench.errors import ProcedureError
from bench.procedure import plan_steps
from bench.procedure.loader import ProcedureErrors, SourceDocument, load_document
from bench.procedure.plan_checks import check_methods, check_steps, command_map_errors
from bench.procedure.plan_gain_phase import gain_phase_sweep
from bench.procedure.plan_limits import (
    DEFAULT_LIMITS,
    DEFAULT_MAX_POWER_DBM,
    analyzer_limits,
    check_bias,
    check_sweep,
)
from bench.procedure.plan_steps import estimated_seconds
from bench.procedure.plan_types import (
    DEFAULT_METHOD,
    DEFAULT_MODEL,
    FIXTURE_METHODS,
    GAIN_PHASE,
    NOMINAL_UNIT,
    SHUNT,
    SINGLE_MOUNT_METHODS,
    SWEEP_STEPS,
    Analysis,
    Bias,
    Calibration,
    Fixture,
    GainPhaseSweep,
    Instrument,
    PartPlan,
    Placement,
    Plan,
    Step,
    Sweep,
    bias_tag,
)
from bench.procedure.plan_values import calibration_kit, fraction, number
from bench.procedure.schema import DEFAULT_STEPS
from bench.results import PartSpec


def build_plan(doc: SourceDocument) -> Plan:
    """Turn a schema-checked document into a :class:`Plan`, checking values against each other.

    Raises :class:`ProcedureErrors` listing every problem found, each with file:line and key.
    """
    errors: list[ProcedureError] = []
    data = doc.data

    def attempt(fn: Any, *args: Any) -> Any:
        try:
            return fn(*args)
        except ProcedureError as exc:
            errors.append(exc)
            return None

    inst_data = data.get("instruments", {})
    instruments: dict[str, Instrument] = {}
    for role in ("analyzer", "switch", "dc_source", "bench", "gain_phase"):
        entry = inst_data.get(role, {})
        instruments[role] = Instrument(
            role=role,
            resource=entry.get("resource", ""),
            command_map=entry.get(
                "command_map", "gain_phase" if role == "gain_phase" else "default"
            ),
            timeout_s=attempt(number, doc, ("instruments", role, "timeout"), "duration", 10.0)
            or 10.0,
            max_voltage=attempt(number, doc, ("instruments", role, "max_voltage"), "V", None),
            max_current=attempt(number, doc, ("instruments", role, "max_current"), "A", None),
            max_power=attempt(number, doc, ("instruments", role, "max_power"), "dBm", None),
        )

    errors.extend(command_map_errors(doc, instruments))

    s = data["sweep"]
    sweep = Sweep(
        start=attempt(number, doc, ("sweep", "start"), "Hz", None) or 0.0,
        stop=attempt(number, doc, ("sweep", "stop"), "Hz", None) or 0.0,
        points=int(s["points"]),
        spacing=s.get("spacing", "log"),
        if_bandwidth=attempt(number, doc, ("sweep", "if_bandwidth"), "Hz", 1e3) or 1e3,
        power=attempt(number, doc, ("sweep", "power"), "dBm", 0.0) or 0.0,
        averages=int(s.get("averages", 1)),
    )
    check_sweep(doc, sweep, instruments, errors)

    f = data.get("fixture", {})
    positions = int(f.get("positions", 1))
    use_positions = tuple(f.get("use_positions", range(1, positions + 1)))
    for i, pos in enumerate(use_positions):
        if not 1 <= pos <= positions:
            errors.append(
                doc.error(
                    ("fixture", "use_positions", i),
                    f"position {pos} is not on a {positions}-position fixture",
                    hint=f"use positions 1 to {positions}",
                )
            )
    series_r = attempt(number, doc, ("fixture", "series_resistor"), "ohm", 0.0) or 0.0
    if series_r < 0:
        errors.append(
            doc.error(("fixture", "series_resistor"), "cannot be negative", hint="0 or more")
        )
    z0 = attempt(number, doc, ("fixture", "z0"), "ohm", 50.0) or 50.0
    fixture = Fixture(
        positions=positions,
        use_positions=use_positions,
        series_r=series_r,
        isolation_transformer=bool(f.get("isolation_transformer", False)),
        bias_tee_rating=attempt(number, doc, ("fixture", "bias_tee_rating"), "V", None),
        dc_block_rating=attempt(number, doc, ("fixture", "dc_block_rating"), "V", None),
        z0=z0,
    )

    c = data.get("calibration", {})
    reuse = c.get("reuse", {})
    calibration = Calibration(
        method=c.get("method", "through"),
        crossover_hz=attempt(number, doc, ("calibration", "crossover"), "Hz", None),
        reuse_run=reuse.get("run"),
        max_age_s=attempt(number, doc, ("calibration", "reuse", "max_age"), "duration", 28800.0)
        or 28800.0,
        kit=calibration_kit(doc, errors),
    )
    if calibration.method == "hybrid":
        if calibration.crossover_hz is None:
            errors.append(
                doc.error(
                    ("calibration", "method"),
                    "a hybrid calibration needs a crossover frequency",
                    hint="add 'crossover: 1 MHz' under calibration",
                )
            )
        elif not sweep.start < calibration.crossover_hz < sweep.stop:
            errors.append(
                doc.error(
                    ("calibration", "crossover"),
                    f"{calibration.crossover_hz:g} Hz is not inside the sweep",
                    hint="choose a crossover between sweep.start and sweep.stop",
                )
            )

    analysis = Analysis(
        noise_floor_db=attempt(number, doc, ("analysis", "noise_floor"), "dB", -100.0) or -100.0,
        trace_noise_db=attempt(number, doc, ("analysis", "trace_noise"), "dB", 0.01) or 0.01,
        tolerance=attempt(fraction, doc, ("analysis", "tolerance"), 0.1) or 0.1,
        mount=data.get("analysis", {}).get("mount", "measured"),
    )
    bias = Bias(
        ramp_step=attempt(number, doc, ("bias", "ramp_step"), "V", 0.5) or 0.5,
        ramp_dwell_s=attempt(number, doc, ("bias", "ramp_dwell"), "duration", 0.05) or 0.0,
        settle_s=attempt(number, doc, ("bias", "settle"), "duration", 0.5) or 0.0,
        discharge_s=attempt(number, doc, ("bias", "discharge"), "duration", 1.0) or 0.0,
        current_limit=attempt(number, doc, ("bias", "current_limit"), "A", 0.01) or 0.01,
    )
    if bias.ramp_step <= 0:
        errors.append(doc.error(("bias", "ramp_step"), "must be above 0 V", hint="e.g. 0.5 V"))

    parts: list[PartPlan] = []
    names: set[str] = set()
    for i, p in enumerate(data["parts"]):
        kind = p["kind"]
        if p["name"] in names:
            errors.append(
                doc.error(
                    ("parts", i, "name"), f"part {p['name']!r} is listed twice", hint="merge them"
                )
            )
        names.add(p["name"])
        nominal = attempt(number, doc, ("parts", i, "nominal"), NOMINAL_UNIT[kind], None)
        if nominal is not None and nominal <= 0:
            errors.append(
                doc.error(("parts", i, "nominal"), "must be above 0", hint="give the value")
            )
        nominal_at = attempt(number, doc, ("parts", i, "nominal_at"), "Hz", None)
        if kind == "bead" and nominal is not None and nominal_at is None:
            errors.append(
                doc.error(
                    ("parts", i, "nominal"),
                    "a bead's nominal impedance needs its frequency",
                    hint="add 'nominal_at: 100 MHz'",
                )
            )
        rated = attempt(number, doc, ("parts", i, "rated_voltage"), "V", None)
        spec = PartSpec(
            name=p["name"],
            kind=kind,
            nominal=nominal,
            tolerance=attempt(fraction, doc, ("parts", i, "tolerance"), None),
            nominal_at_hz=nominal_at,
            model=p.get("model", DEFAULT_MODEL[kind]),
            rated_voltage=rated,
            description=p.get("description", ""),
        )
        samples_value = p.get("samples", 1)
        if isinstance(samples_value, int):
            samples = tuple(f"s{k}" for k in range(1, samples_value + 1))
        else:
            samples = tuple(samples_value)
        bias_points: list[float] = []
        tags: dict[str, int] = {}
        for j, _ in enumerate(p.get("bias", [0.0])):
            value = attempt(number, doc, ("parts", i, "bias", j), "V", 0.0)
            value = 0.0 if value is None else value
            # Equal after unit parsing ([2 V, 2000 mV]), or equal in step ids and file
            # names (bias_tag keeps six digits): one step, so one entry.
            tag = bias_tag(value)
            if tag in tags:
                errors.append(
                    doc.error(
                        ("parts", i, "bias", j),
                        f"the same bias point as bias[{tags[tag]}] ({tag})",
                        hint="remove the repeated point",
                    )
                )
                continue
            tags[tag] = j
            bias_points.append(value)
        stated = p.get("method", DEFAULT_METHOD[kind])
        methods = (stated,) if isinstance(stated, str) else tuple(stated)
        if kind not in ("mlcc", "bulk"):
            bias_points_checked: list[float] = []  # _check_bias refuses them already
        else:
            bias_points_checked = bias_points
        check_methods(doc, i, methods, bias_points_checked, series_r, errors, "method" in p)
        part = PartPlan(spec=spec, samples=samples, bias=tuple(bias_points), methods=methods)
        parts.append(part)

    plan_parts = tuple(parts)
    used = {m for part in plan_parts for m in part.methods}
    gain_phase = gain_phase_sweep(doc, plan_parts, instruments, errors)
    calibration = Calibration(
        **{
            **calibration.__dict__,
            "two_port": bool(used - {"reflection", GAIN_PHASE}) or not used,
            "one_port": "reflection" in used,
        }
    )
    steps_list = tuple(data.get("steps", DEFAULT_STEPS))
    check_steps(doc, steps_list, errors)
    mode = data.get("mode", "guided")

    plan_batches = plan_steps.batches(plan_parts, fixture.use_positions)
    provisional = Plan(
        name=data["name"],
        source=doc.path,
        description=data.get("description", ""),
        mode=mode,
        instruments=instruments,
        sweep=sweep,
        fixture=fixture,
        calibration=calibration,
        analysis=analysis,
        bias=bias,
        parts=plan_parts,
        batches=plan_batches,
        steps=(),
        step_names=steps_list,
        gain_phase=gain_phase,
    )
    check_bias(doc, provisional, errors)
    if errors:
        raise ProcedureErrors(errors)
    plan = Plan(
        **{
            **provisional.__dict__,
            "steps": plan_steps.steps(provisional),
            "resolved": plan_steps.resolved(provisional),
        }
    )
    from bench.procedure.outputs import output_errors

    clashes = output_errors(doc, plan)
    if clashes:
        raise ProcedureErrors(clashes)
    return plan


def load_plan(path: str | Path) -> Plan:
    """Read, validate and resolve a procedure file (nothing is touched on the bench)."""
    doc = load_document(path)
    return build_plan(doc)


__all__ = [
    "DEFAULT_LIMITS",
    "DEFAULT_MAX_POWER_DBM",
    "DEFAULT_METHOD",
    "DEFAULT_MODEL",
    "FIXTURE_METHODS",
    "GAIN_PHASE",
    "NOMINAL_UNIT",
    "SHUNT",
    "SINGLE_MOUNT_METHODS",
    "SWEEP_STEPS",
    "Analysis",
    "Bias",
    "Calibration",
    "Fixture",
    "GainPhaseSweep",
    "Instrument",
    "PartPlan",
    "Placement",
    "Plan",
    "ProcedureErrors",
    "Step",
    "Sweep",
    "analyzer_limits",
    "bias_tag",
    "build_plan",
    "estimated_seconds",
    "load_plan",
    "plan_from_text",
]


def plan_from_text(text: str, source: str) -> Plan:
    """Validate and resolve procedure ``text`` (as stored in a run folder) named ``source``."""
    from bench.procedure.loader import parse_text, validate_document

    doc = parse_text(text, source)
    errors = validate_document(doc)
    if errors:
        raise ProcedureErrors(errors)
    return build_plan(doc)
