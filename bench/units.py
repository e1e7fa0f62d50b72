"""Values with SI prefixes, as engineers write them: ``22u``, ``4.7n``, ``100 Hz``, ``200 MHz``.

Prefixes are case-sensitive as in SI (``m`` milli, ``M`` mega); ``meg`` is accepted
for mega as SPICE writes it, and ``u`` for micro. Units are checked when the caller
names the one expected, so ``6.3 V`` given for a frequency is an error, not 6.3 Hz.
"""

from __future__ import annotations

import math
import re

PREFIXES: dict[str, float] = {
    "f": 1e-15,
    "p": 1e-12,
    "n": 1e-9,
    "u": 1e-6,
    "µ": 1e-6,
    "μ": 1e-6,
    "m": 1e-3,
    "": 1.0,
    "k": 1e3,
    "K": 1e3,
    "meg": 1e6,
    "M": 1e6,
    "G": 1e9,
    "T": 1e12,
}

# Unit spellings accepted for each canonical unit (case-insensitive after the prefix).
UNITS: dict[str, tuple[str, ...]] = {
    "Hz": ("hz",),
    "V": ("v",),
    "A": ("a",),
    "F": ("f",),
    "H": ("h",),
    "ohm": ("ohm", "ohms", "Ω", "r"),
    "s": ("s", "sec"),
    "dB": ("db",),
    "dBm": ("dbm",),
}

# Digits of a number's exponent read: more cannot give a finite float (the limit is 308).
MAX_EXPONENT_DIGITS = 4
_NUMBER = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_PATTERN = re.compile(rf"^\s*(?P<num>{_NUMBER})\s*(?P<rest>[^\s\d.+-].*?)?\s*$")


class QuantityError(ValueError):
    """A value that is not a number with an optional SI prefix and the expected unit."""


def _is_unit(text: str, unit: str | None) -> bool:
    return unit is not None and text.lower() in {u.lower() for u in UNITS.get(unit, ())}


def _split_prefix_unit(rest: str, unit: str | None) -> tuple[float, str]:
    """Return (multiplier, unit text) for the text after the number."""
    if not rest:
        return 1.0, ""
    candidates = []
    for prefix in sorted(PREFIXES, key=len, reverse=True):
        if rest.startswith(prefix) or (prefix == "meg" and rest.lower().startswith("meg")):
            candidates.append((prefix, rest[len(prefix) :]))
    # Prefer the reading whose remainder is the expected unit (so "F" alone is farad, not femto).
    for prefix, remainder in candidates:
        if _is_unit(remainder, unit) or (remainder == "" and prefix != ""):
            if remainder == "" and prefix in ("f", "F") and unit == "F" and len(rest) == 1:
                continue
            return PREFIXES[prefix], remainder
    if _is_unit(rest, unit):
        return 1.0, rest
    for prefix, remainder in candidates:
        if prefix:
            return PREFIXES[prefix], remainder
    return 1.0, rest


def parse_quantity(value: object, unit: str | None = None, *, name: str = "value") -> float:
    """Parse ``value`` (a number or a string like ``"4.7n"``, ``"200 MHz"``) into SI units.

    ``unit`` is the canonical unit expected (a key of :data:`UNITS`); a different unit in
    the text raises :class:`QuantityError`. A bare number is taken as already in ``unit``.
    """
    if isinstance(value, bool):
        raise QuantityError(f"{name}: expected a number{_unit_hint(unit)}, got {value!r}")
    if isinstance(value, (int, float)):
        number = float(value)
    elif isinstance(value, str):
        match = _PATTERN.match(value)
        if not match:
            raise QuantityError(
                f"{name}: cannot read {value!r} as a number{_unit_hint(unit)}; "
                f"write it like '4.7n', '100 Hz' or '200 MHz'"
            )
        rest = (match.group("rest") or "").replace(" ", "")
        multiplier, unit_text = _split_prefix_unit(rest, unit)
        if unit_text and not _is_unit(unit_text, unit):
            raise QuantityError(
                f"{name}: unit {unit_text!r} in {value!r} is not {unit or 'a known unit'}; "
                f"write the value in {unit or 'plain numbers'}"
            )
        # Scale through the decimal exponent so "4.7n" is exactly 4.7e-9 (and "1e3 m" 1.0:
        # the number's own exponent and the prefix's add up).
        exponent = round(math.log10(multiplier))
        digits, _, own = match.group("num").lower().partition("e")
        if own:
            exponent += int(own[: MAX_EXPONENT_DIGITS + 1])  # 2e999… is infinite anyway
        number = float(f"{digits}e{exponent}") if exponent else float(digits)
    else:
        raise QuantityError(f"{name}: expected a number{_unit_hint(unit)}, got {value!r}")
    if not math.isfinite(number):
        raise QuantityError(f"{name}: {value!r} is not a finite number")
    return number


def _unit_hint(unit: str | None) -> str:
    return f" in {unit}" if unit else ""


_FORMAT_PREFIXES = [
    (1e12, "T"),
    (1e9, "G"),
    (1e6, "M"),
    (1e3, "k"),
    (1.0, ""),
    (1e-3, "m"),
    (1e-6, "µ"),
    (1e-9, "n"),
    (1e-12, "p"),
    (1e-15, "f"),
]


def format_si(value: float, unit: str = "", digits: int = 4) -> str:
    """Format ``value`` with an SI prefix, e.g. ``format_si(4.7e-9, 'F') == '4.7 nF'``."""
    if value == 0 or not math.isfinite(value):
        return f"{value:g} {unit}".strip()
    magnitude = abs(value)
    scale, prefix = next(
        (p for p in _FORMAT_PREFIXES if magnitude >= p[0] * 0.9999999), _FORMAT_PREFIXES[-1]
    )
    text = f"{value / scale:.{digits}g}"
    if "e+" in text:  # more integer digits than asked for (151 at 2 digits): all of them
        text = f"{value / scale:.0f}"
    return f"{text} {prefix}{unit}".strip()


#: Unit of each landmark a fit reports (SI).
LANDMARK_UNITS = {
    "c_low": "F",
    "esl": "H",
    "srf": "Hz",
    "esr_at_srf": "Ω",
    "l_low": "H",
    "r_dc": "Ω",
    "z_at_srf": "Ω",
    "c_par": "F",
    "z_at_nominal_hz": "Ω",
}
