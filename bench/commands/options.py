"""Click parameter types that read values with units the way procedures do.

``--tolerance 10%`` or ``0.1``, ``--noise-floor "-110 dB"``, ``--fmin "10 MHz"``: every
option that takes a quantity accepts the same spellings as a procedure file
(:func:`bench.units.parse_quantity`).
"""

from __future__ import annotations

from typing import Any

import click

from bench.units import QuantityError, parse_quantity


class Quantity(click.ParamType):
    """A number with an optional unit (``unit`` is the canonical one; '' for plain)."""

    name = "quantity"

    def __init__(self, unit: str, example: str):
        self.unit = unit
        self.example = example

    def convert(self, value: Any, param: Any, ctx: Any) -> float:
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            return float(value)
        text = str(value).strip()
        try:
            return parse_quantity(text, self.unit or None, name=getattr(param, "name", "value"))
        except QuantityError as exc:
            self.fail(f"{exc}; write it like {self.example}", param, ctx)


class Fraction(click.ParamType):
    """A fraction written ``0.1`` or ``10%`` (strictly between 0 and 1)."""

    name = "fraction"

    def convert(self, value: Any, param: Any, ctx: Any) -> float:
        text = str(value).strip()
        try:
            if text.endswith("%"):
                number = parse_quantity(text[:-1].strip(), None, name="value") / 100.0
            else:
                number = parse_quantity(text, None, name="value")
        except QuantityError:
            self.fail(f"cannot read {value!r}; write it like 0.1 or 10%", param, ctx)
        if not 0 < number < 1:
            self.fail(f"{value!r} must lie between 0 and 1 (0 % and 100 %)", param, ctx)
        return number
