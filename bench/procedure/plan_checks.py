"""Checks beyond the schema that relate a procedure's values: the order of the steps,
a part's methods against its bias and the port resistors, and the command maps named."""

from __future__ import annotations

from bench.errors import ProcedureError
from bench.procedure.loader import SourceDocument
from bench.procedure.plan_types import GAIN_PHASE, SINGLE_MOUNT_METHODS, Instrument
from bench.procedure.schema import STEP_NAMES
from bench.units import format_si


def command_map_errors(
    doc: SourceDocument, instruments: dict[str, Instrument]
) -> list[ProcedureError]:
    """Each named command map must load and validate, by ``check`` time.

    The message is the map loader's, which names the file and key and never quotes the
    file's contents (a mistyped path may point at any file).
    """
    from drivers.command_map import load_command_map
    from drivers.errors import CommandMapError
    from drivers.instrument_maps import load_instrument_map

    loaders = {
        "analyzer": load_command_map,
        "switch": lambda name: load_instrument_map("switch", name),
        "dc_source": lambda name: load_instrument_map("dc_source", name),
        "gain_phase": load_command_map,
    }
    errors = []
    for role, load in loaders.items():
        name = instruments[role].command_map
        if name == "default":
            continue
        try:
            load(name)
        except CommandMapError as exc:
            errors.append(
                doc.error(
                    ("instruments", role, "command_map"),
                    f"the command map does not load: {str(exc).splitlines()[0]}",
                    hint=exc.hint or "give a shipped map's name or a map file that validates",
                )
            )
    return errors


def check_steps(doc: SourceDocument, steps: tuple[str, ...], errors: list[ProcedureError]) -> None:
    order = {name: i for i, name in enumerate(STEP_NAMES)}
    for i in range(1, len(steps)):
        if order[steps[i]] < order[steps[i - 1]]:
            errors.append(
                doc.error(
                    ("steps", i),
                    f"'{steps[i]}' cannot come after '{steps[i - 1]}'",
                    hint=f"keep the order {', '.join(STEP_NAMES)}",
                )
            )
    needs = {
        "mount_open": "calibrate",
        "mount_short": "calibrate",
        "measure": "calibrate",
        "fit": "measure",
        "export": "fit",
        "report": "fit",
    }
    for i, name in enumerate(steps):
        if name in needs and needs[name] not in steps:
            errors.append(
                doc.error(
                    ("steps", i),
                    f"'{name}' needs a '{needs[name]}' step",
                    hint=f"add '{needs[name]}' before it",
                )
            )


def check_methods(
    doc: SourceDocument,
    i: int,
    methods: tuple[str, ...],
    bias: list[float],
    series_r: float,
    errors: list[ProcedureError],
    stated: bool = True,
) -> None:
    """A part's methods against its bias points and the port resistors."""
    if GAIN_PHASE in methods and any(v != 0.0 for v in bias):
        errors.append(
            doc.error(
                ("parts", i, "method"),
                "the gain-phase analyser measures a part at 0 V only (no bias path)",
                hint="remove the bias points, or measure the biased part shunt-through alone",
            )
        )
    single = [m for m in methods if m in SINGLE_MOUNT_METHODS]
    if not single:
        return
    named = single[0] if stated else f"{single[0]} (the default for this kind of part)"
    where = ("parts", i, "method") if stated else ("parts", i, "kind")
    if any(v != 0.0 for v in bias):
        errors.append(
            doc.error(
                where,
                f"DC bias reaches a part only on the shunt-through fixture, not by {named}",
                hint="measure a biased part shunt-through, or remove its bias points",
            )
        )
    if series_r > 0:
        errors.append(
            doc.error(
                where,
                f"{named} is measured without port series resistors, but "
                f"fixture.series_resistor is {format_si(series_r, 'Ω')}",
                hint="add 'method: shunt-through' to measure the part on the resistor "
                "board, or use a separate procedure for the series-through mount",
            )
        )
