"""Reading values from a procedure document: numbers with units, fractions, the kit.

Each reader takes the document and a key path, so a bad value is reported with the
file, line and key it came from.
"""

from __future__ import annotations

import math
from typing import Any

from bench.core.calibration import CalibrationKit
from bench.errors import ProcedureError
from bench.procedure.loader import SourceDocument
from bench.procedure.schema import parse_duration
from bench.units import QuantityError, format_si, parse_quantity

MISSING = object()


def lookup(data: Any, path: tuple[Any, ...]) -> Any:
    node = data
    for part in path:
        in_dict = isinstance(node, dict) and part in node
        if in_dict or (isinstance(node, list) and isinstance(part, int) and part < len(node)):
            node = node[part]
        else:
            return MISSING
    return node


def number(doc: SourceDocument, path: tuple[Any, ...], unit: str | None, default: Any) -> Any:
    node = lookup(doc.data, path)
    if node is MISSING:
        return default
    try:
        if unit == "duration":
            return parse_duration(node)
        return parse_quantity(node, unit)
    except QuantityError as exc:
        raise doc.error(
            path, str(exc).removeprefix("value: "), hint="write a number with its unit"
        ) from None


#: ``calibration.kit`` keys, their units and whether 0 is allowed (the load must be > 0).
KIT_KEYS: tuple[tuple[str, str, bool], ...] = (
    ("short_inductance", "H", True),
    ("open_capacitance", "F", True),
    ("load_resistance", "ohm", False),
    ("load_inductance", "H", True),
    ("short_delay", "duration", True),
    ("open_delay", "duration", True),
    ("load_delay", "duration", True),
    ("through_delay", "duration", True),
)


def calibration_kit(doc: SourceDocument, errors: list[ProcedureError]) -> CalibrationKit:
    """``calibration.kit`` as a :class:`CalibrationKit`; bad values are added to ``errors``
    (and left ideal) so every error of the file is reported at once."""
    values: dict[str, float] = {}
    for key, unit, zero_ok in KIT_KEYS:
        path = ("calibration", "kit", key)
        try:
            value = number(doc, path, unit, None)
        except ProcedureError as exc:
            errors.append(exc)
            continue
        if value is None:
            continue
        if not math.isfinite(value) or value < 0 or (value == 0 and not zero_ok):
            bound = ">= 0" if zero_ok else "> 0"
            shown = "s" if unit == "duration" else unit
            errors.append(
                doc.error(
                    path,
                    f"a kit's {key.replace('_', ' ')} must be {bound} {shown}, "
                    f"got {format_si(value, shown)}",
                    hint="copy the value from the calibration kit's data sheet; leave the "
                    "key out for an ideal standard",
                )
            )
            continue
        values[key] = value
    return CalibrationKit(**values)


def fraction(doc: SourceDocument, path: tuple[Any, ...], default: float | None) -> float | None:
    node = lookup(doc.data, path)
    if node is MISSING:
        return default
    text = str(node).strip()
    try:
        value = float(text[:-1]) / 100.0 if text.endswith("%") else float(text)
    except ValueError:
        raise doc.error(
            path, f"cannot read {node!r} as a fraction", hint="write 0.1 or '10 %'"
        ) from None
    if not 0.0 < value < 1.0:
        raise doc.error(
            path,
            f"must lie between 0 and 1 (0 and 100 %), found {node!r}",
            hint="write 0.1 or '10 %'",
        )
    return value
