"""The ``gain_phase`` section of a procedure: the low-frequency gain-phase analyser's own
sweep and set-up, checked against its command map's limits."""

from __future__ import annotations

from typing import Any

from bench.errors import ProcedureError
from bench.procedure.loader import SourceDocument
from bench.procedure.plan_limits import analyzer_limits, check_bandwidth, check_points
from bench.procedure.plan_types import GAIN_PHASE, GainPhaseSweep, Instrument, PartPlan
from bench.procedure.plan_values import number
from bench.units import format_si


def gain_phase_sweep(
    doc: SourceDocument,
    parts: tuple[PartPlan, ...],
    instruments: dict[str, Instrument],
    errors: list[ProcedureError],
) -> GainPhaseSweep | None:
    """The ``gain_phase`` section, checked against its analyser's command map; None when
    no part is measured with it."""
    users = [i for i, p in enumerate(parts) if GAIN_PHASE in p.methods]
    g = doc.data.get("gain_phase")
    if not users:
        return None
    if g is None:
        errors.append(
            doc.error(
                ("parts", users[0], "method"),
                "a part measured gain-phase needs the gain-phase analyser's sweep and set-up",
                hint="add a 'gain_phase:' section with start, stop, points and reference_resistor",
            )
        )
        return None

    def num(key: str, unit: str, default: Any) -> Any:
        try:
            return number(doc, ("gain_phase", key), unit, default)
        except ProcedureError as exc:
            errors.append(exc)
            return default

    sweep = GainPhaseSweep(
        start=num("start", "Hz", 0.0) or 0.0,
        stop=num("stop", "Hz", 0.0) or 0.0,
        points=int(g["points"]),
        reference_resistor=num("reference_resistor", "ohm", 0.0) or 0.0,
        spacing=g.get("spacing", "log"),
        bandwidth=num("bandwidth", "Hz", 100.0) or 100.0,
        level=num("level", "dBm", 0.0) or 0.0,
        input_resistance=num("input_resistance", "ohm", None),
        input_capacitance=num("input_capacitance", "F", 0.0) or 0.0,
        noise_floor_db=num("noise_floor", "dB", -110.0) or -110.0,
    )
    if sweep.reference_resistor <= 0:
        errors.append(
            doc.error(
                ("gain_phase", "reference_resistor"),
                "must be above 0 Ω",
                hint="give the set-up's reference resistor, e.g. 1 ohm",
            )
        )
    limits = analyzer_limits(instruments["gain_phase"].command_map)
    if not limits["min_hz"] <= sweep.start < sweep.stop <= limits["max_hz"]:
        errors.append(
            doc.error(
                ("gain_phase", "start"),
                f"{format_si(sweep.start, 'Hz')} to {format_si(sweep.stop, 'Hz')} is not an "
                f"increasing band inside the analyser's {format_si(limits['min_hz'], 'Hz')} "
                f"… {format_si(limits['max_hz'], 'Hz')}",
                hint="choose start below stop, both inside the gain-phase analyser's range",
            )
        )
    check_points(doc, "gain_phase", sweep.points, limits, errors)
    low, high = limits["power"]
    if not low <= sweep.level <= high:
        errors.append(
            doc.error(
                ("gain_phase", "level"),
                f"{sweep.level:g} dBm is outside the analyser's {low:g} … {high:g} dBm",
                hint="choose a source level the gain-phase analyser offers",
            )
        )
    check_bandwidth(
        doc,
        ("gain_phase", "bandwidth"),
        sweep.bandwidth,
        limits,
        errors,
        hint="choose a receiver bandwidth the gain-phase analyser offers",
    )
    return sweep
