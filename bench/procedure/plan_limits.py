"""Limits a plan must respect: the analyser's (points, frequency, power, IF bandwidth)
and the safety bounds of DC bias (part rating, bias tee, DC blocks, source maximum)."""

from __future__ import annotations

from typing import Any

from bench.errors import ProcedureError
from bench.procedure.loader import SourceDocument
from bench.procedure.plan_types import Instrument, Plan, Sweep
from bench.units import format_si

# Analyser limits used when the command map states none (a generic bench analyser).
DEFAULT_LIMITS = {"max_points": 10001, "min_hz": 1.0, "max_hz": 20e9, "power": (-60.0, 10.0)}
# The highest power a shunt-through set-up should put into the analyser's receivers
# without a statement from the procedure (common practice, no source: stay well below
# the usual +10 dBm receiver compression and damage levels).
DEFAULT_MAX_POWER_DBM = 10.0


def analyzer_limits(command_map: str) -> dict[str, Any]:
    """Limits the analyser's command map states (points, frequency, power, IF bandwidth)."""
    limits = dict(DEFAULT_LIMITS)
    try:
        from drivers.command_map import load_command_map

        stated = load_command_map(command_map).limits
    except Exception:  # the map is checked again, with its own message, when the run opens it
        return limits
    limits["max_points"] = int(stated.points.max)
    limits["min_hz"] = stated.frequency_hz.min
    limits["max_hz"] = stated.frequency_hz.max
    limits["power"] = (stated.power_dbm.min, stated.power_dbm.max)
    limits["ifbw"] = (stated.ifbw_hz.min, stated.ifbw_hz.max)
    return limits


def check_sweep(
    doc: SourceDocument,
    sweep: Sweep,
    instruments: dict[str, Instrument],
    errors: list[ProcedureError],
) -> None:
    """The sweep against itself and the analyser's limits; the source power also against
    the procedure's ``max_power`` (or :data:`DEFAULT_MAX_POWER_DBM`)."""
    limits = analyzer_limits(instruments["analyzer"].command_map)
    if sweep.start <= 0:
        errors.append(doc.error(("sweep", "start"), "must be above 0 Hz", hint="e.g. '100 Hz'"))
    if sweep.start >= sweep.stop:
        errors.append(
            doc.error(
                ("sweep", "stop"),
                f"stop ({format_si(sweep.stop, 'Hz')}) must be above "
                f"start ({format_si(sweep.start, 'Hz')})",
                hint="swap the two values or raise stop",
            )
        )
    if sweep.start > 0 and sweep.start < limits["min_hz"]:
        errors.append(
            doc.error(
                ("sweep", "start"),
                f"{format_si(sweep.start, 'Hz')} is below the analyser's lowest frequency "
                f"{format_si(limits['min_hz'], 'Hz')}",
                hint="raise start",
            )
        )
    if sweep.stop > limits["max_hz"]:
        errors.append(
            doc.error(
                ("sweep", "stop"),
                f"{format_si(sweep.stop, 'Hz')} is above the analyser's highest frequency "
                f"{format_si(limits['max_hz'], 'Hz')}",
                hint="lower stop",
            )
        )
    check_points(doc, "sweep", sweep.points, limits, errors)
    low, high = limits["power"]
    max_power = instruments["analyzer"].max_power
    ceiling = min(high, max_power if max_power is not None else DEFAULT_MAX_POWER_DBM)
    if not low <= sweep.power <= ceiling:
        errors.append(
            doc.error(
                ("sweep", "power"),
                f"{sweep.power:g} dBm is outside the allowed {low:g} … {ceiling:g} dBm",
                hint="choose a source power inside the analyser's and the procedure's limits",
            )
        )
    check_bandwidth(
        doc,
        ("sweep", "if_bandwidth"),
        sweep.if_bandwidth,
        limits,
        errors,
        hint="choose an IF bandwidth the analyser offers",
    )


def check_points(
    doc: SourceDocument,
    section: str,
    points: int,
    limits: dict[str, Any],
    errors: list[ProcedureError],
) -> None:
    """``section.points`` against the analyser's most points."""
    if points > limits["max_points"]:
        errors.append(
            doc.error(
                (section, "points"),
                f"{points} points is more than the analyser allows ({limits['max_points']})",
                hint=f"use at most {limits['max_points']} points",
            )
        )


def check_bandwidth(
    doc: SourceDocument,
    key: tuple[str, str],
    bandwidth: float,
    limits: dict[str, Any],
    errors: list[ProcedureError],
    *,
    hint: str,
) -> None:
    """A receiver bandwidth (Hz) against the analyser's range."""
    low, high = limits.get("ifbw", (1e-3, 1e9))
    if not low <= bandwidth <= high:
        errors.append(
            doc.error(
                key,
                f"{format_si(bandwidth, 'Hz')} is outside the analyser's "
                f"{format_si(low, 'Hz')} … {format_si(high, 'Hz')}",
                hint=hint,
            )
        )


def check_bias(doc: SourceDocument, plan: Plan, errors: list[ProcedureError]) -> None:
    max_current = plan.instruments["dc_source"].max_current
    if plan.biased and max_current is not None and plan.bias.current_limit > max_current:
        errors.append(
            doc.error(
                ("bias", "current_limit"),
                f"the current limit {format_si(plan.bias.current_limit, 'A')} is above "
                f"dc_source.max_current {format_si(max_current, 'A')}",
                hint="lower bias.current_limit, or state the source's real maximum",
            )
        )
    for i, part in enumerate(plan.parts):
        if not any(v != 0.0 for v in part.bias):
            continue
        if part.spec.kind != "mlcc" and part.spec.kind != "bulk":
            errors.append(
                doc.error(
                    ("parts", i, "bias"),
                    f"DC bias is only applied to capacitors, not a {part.spec.kind}",
                    hint="remove the bias points of this part",
                )
            )
            continue
        missing = []
        if part.spec.rated_voltage is None:
            missing.append((("parts", i, "rated_voltage"), "the part's rated_voltage"))
        if plan.fixture.bias_tee_rating is None:
            missing.append((("fixture", "bias_tee_rating"), "fixture.bias_tee_rating"))
        if plan.fixture.dc_block_rating is None:
            missing.append((("fixture", "dc_block_rating"), "fixture.dc_block_rating"))
        if plan.instruments["dc_source"].max_voltage is None:
            missing.append((("instruments", "dc_source", "max_voltage"), "dc_source.max_voltage"))
        if plan.instruments["dc_source"].max_current is None:
            # The current limit needs a bound as the voltage has: a source that can
            # deliver amperes would deliver them into a shorted or failing part.
            missing.append((("instruments", "dc_source", "max_current"), "dc_source.max_current"))
        if missing:
            for _, what in missing:
                errors.append(
                    doc.error(
                        ("parts", i, "bias"),
                        f"a biased part needs {what} so the bias can be bounded",
                        hint=f"state {what}",
                    )
                )
            continue
        limit = plan.bias_limit(part)
        for j, value in enumerate(part.bias):
            if value < 0:
                errors.append(
                    doc.error(
                        ("parts", i, "bias", j),
                        f"negative bias {value:g} V is not supported",
                        hint="use 0 V or above",
                    )
                )
            elif value > limit:
                errors.append(
                    doc.error(
                        ("parts", i, "bias", j),
                        f"{value:g} V is above the limit {limit:g} V "
                        "(the lowest of the part rating, bias tee, DC blocks and source maximum)",
                        hint=f"use at most {limit:g} V",
                    )
                )
