"""SCPI program messages read as text: errors, headers, parameters and blocks (pure).

Pure functions on text and bytes, no sockets and no state: :func:`split_message_units`,
:func:`parse_header`, :func:`split_parameters`, the parameter readers
(:func:`parse_numeric`, :func:`parse_integer`, :func:`parse_boolean`,
:func:`parse_choice`, :func:`parse_string`, :func:`parse_channel_list`), definite-length
blocks (:func:`format_block`, :func:`parse_block`) and the standard error texts with
:class:`ScpiError`. The rules followed are listed in :mod:`simulated_instruments.scpi`
(SCPI-99 vol. 1 ch. 6 and IEEE 488.2 ch. 7; see docs/references.md §7).
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable
from dataclasses import dataclass

# Standard error texts (SCPI-99 vol. 2 §21.8). Only the ones the simulator raises.
ERROR_TEXTS: dict[int, str] = {
    0: "No error",
    -100: "Command error",
    -101: "Invalid character",
    -102: "Syntax error",
    -103: "Invalid separator",
    -104: "Data type error",
    -108: "Parameter not allowed",
    -109: "Missing parameter",
    -112: "Program mnemonic too long",
    -113: "Undefined header",
    -114: "Header suffix out of range",
    -120: "Numeric data error",
    -131: "Invalid suffix",
    -138: "Suffix not allowed",
    -141: "Invalid character data",
    -150: "String data error",
    -200: "Execution error",
    -221: "Settings conflict",
    -222: "Data out of range",
    -224: "Illegal parameter value",
    -230: "Data corrupt or stale",
    -240: "Hardware error",
    -350: "Queue overflow",
    -363: "Input buffer overrun",
    -410: "Query INTERRUPTED",
    -420: "Query UNTERMINATED",
}


class ScpiError(Exception):
    """A SCPI error to be put in the session's queue: standard code and optional detail."""

    def __init__(self, code: int, detail: str = ""):
        self.code = code
        self.detail = detail
        super().__init__(f"{code},{ERROR_TEXTS.get(code, 'Error')}{';' + detail if detail else ''}")


def error_string(code: int, detail: str = "") -> str:
    """The SYSTem:ERRor? answer, e.g. ``-113,"Undefined header;FOO"``.

    SCPI-99 allows device-dependent information after a ``;`` inside the quoted text;
    double quotes in it become single ones so the string stays one string.
    """
    text = ERROR_TEXTS.get(code, "Device-specific error")
    if detail:
        clean = "".join(ch if 32 <= ord(ch) < 127 else "?" for ch in detail).replace('"', "'")
        text = f"{text};{clean[:120]}"
    return f'{code},"{text}"'


# --- message and header parsing (pure) -------------------------------------------------


def split_message_units(line: str) -> list[str]:
    """Split a program message at ``;`` outside quoted strings (IEEE 488.2 §7.3).

    A quote left open raises ``ScpiError(-150)``.
    """
    units: list[str] = []
    current: list[str] = []
    quote: str | None = None
    for ch in line:
        if quote:
            current.append(ch)
            if ch == quote:
                quote = None
        elif ch in "\"'":
            quote = ch
            current.append(ch)
        elif ch == ";":
            units.append("".join(current))
            current = []
        else:
            current.append(ch)
    if quote:
        raise ScpiError(-150, "string not terminated")
    units.append("".join(current))
    # A trailing ';' (or an empty message) is harmless; an empty unit between two is not.
    if units and not units[-1].strip():
        units.pop()
    for unit in units:
        if not unit.strip():
            raise ScpiError(-102, "empty message unit between ';'")
    return units


@dataclass(frozen=True)
class Header:
    """A parsed program header: ``rooted`` (leading ``:``), node mnemonics with their
    numeric suffixes, ``query`` (trailing ``?``) and ``common`` (``*XXX``)."""

    nodes: tuple[tuple[str, int | None], ...]
    query: bool
    rooted: bool
    common: bool


_MNEMONIC = re.compile(r"^([A-Za-z][A-Za-z_]*?)(\d*)$")
MAX_MNEMONIC = 12  # IEEE 488.2 §7.6.1.4: mnemonics up to 12 characters


def parse_header(text: str) -> Header:
    """Parse a program header such as ``:SENS1:FREQ:STAR?`` or ``*IDN?``.

    Raises :class:`ScpiError` with -101 (non-printable character), -102 (syntax) or -112.
    """
    if not text:
        raise ScpiError(-102, "empty header")
    for ch in text:
        if ord(ch) < 32 or ord(ch) > 126:
            raise ScpiError(-101, f"character 0x{ord(ch):02x} in header")
    query = text.endswith("?")
    body = text[:-1] if query else text
    if body.startswith("*"):
        name = body[1:]
        if not name.isalpha():
            raise ScpiError(-102, f"common command {text!r}")
        if len(name) > MAX_MNEMONIC:
            raise ScpiError(-112, text[:40])
        return Header(((name.upper(), None),), query, rooted=True, common=True)
    rooted = body.startswith(":")
    if rooted:
        body = body[1:]
    if not body:
        raise ScpiError(-102, f"header {text!r}")
    nodes: list[tuple[str, int | None]] = []
    for part in body.split(":"):
        match = _MNEMONIC.match(part)
        if not match:
            raise ScpiError(-102, f"header {text[:40]!r}")
        name, suffix = match.groups()
        if len(name) > MAX_MNEMONIC:
            raise ScpiError(-112, name[:40])
        nodes.append((name.upper(), int(suffix) if suffix else None))
    return Header(tuple(nodes), query, rooted=rooted, common=False)


def split_unit(unit: str) -> tuple[str, str]:
    """Split a message unit into header text and parameter text (IEEE 488.2 §7.4)."""
    unit = unit.strip(" \t")
    for i, ch in enumerate(unit):
        if ch in " \t":
            return unit[:i], unit[i + 1 :].strip(" \t")
    return unit, ""


def split_parameters(text: str) -> list[str]:
    """Split parameter text at commas outside quotes and parentheses; strip blanks.

    An empty parameter (``1,,2``) or unbalanced brackets raise ``ScpiError(-103)``.
    """
    if not text.strip():
        return []
    params: list[str] = []
    current: list[str] = []
    quote: str | None = None
    depth = 0
    for ch in text:
        if quote:
            current.append(ch)
            if ch == quote:
                quote = None
            continue
        if ch in "\"'":
            quote = ch
        elif ch == "(":
            depth += 1
        elif ch == ")":
            depth -= 1
            if depth < 0:
                raise ScpiError(-103, "')' without '('")
        elif ch == "," and depth == 0:
            params.append("".join(current).strip())
            current = []
            continue
        current.append(ch)
    if depth:
        raise ScpiError(-103, "'(' without ')'")
    params.append("".join(current).strip())
    if any(not p for p in params):
        raise ScpiError(-103, "empty parameter")
    return params


# --- parameter readers (pure) ----------------------------------------------------------

_NUMBER = re.compile(r"^([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*([A-Za-z]*)$")

# IEEE 488.2 §7.7.3.5 suffix multipliers. "M" is milli; mega is "MA".
_MULTIPLIERS: dict[str, float] = {
    "EX": 1e18,
    "PE": 1e15,
    "T": 1e12,
    "G": 1e9,
    "MA": 1e6,
    "K": 1e3,
    "M": 1e-3,
    "U": 1e-6,
    "N": 1e-9,
    "P": 1e-12,
    "F": 1e-15,
    "A": 1e-18,
}
# Spellings of each unit accepted as a suffix. "MHZ" and "MOHM" are the two
# exceptions of IEEE 488.2 where M means mega.
_UNIT_SUFFIXES: dict[str, tuple[str, ...]] = {
    "HZ": ("HZ",),
    "V": ("V",),
    "A": ("A",),
    "S": ("S",),
    "DBM": ("DBM",),
    "DB": ("DB",),
    "OHM": ("OHM",),
    "F": ("F",),
    "H": ("H",),
    "PCT": ("PCT",),
}
_MEGA_EXCEPTIONS = {"MHZ": 1e6, "MOHM": 1e6}

SPECIAL_NUMERIC = ("MINimum", "MAXimum", "DEFault")


def _suffix_multiplier(suffix: str, unit: str | None) -> float:
    s = suffix.upper()
    if not s:
        return 1.0
    if s in _MEGA_EXCEPTIONS and unit in ("HZ", "OHM") and s.endswith(unit):
        return _MEGA_EXCEPTIONS[s]
    if unit is not None:
        for spelling in _UNIT_SUFFIXES.get(unit, (unit,)):
            if s == spelling:
                return 1.0
            if s.endswith(spelling):
                prefix = s[: -len(spelling)]
                if prefix in _MULTIPLIERS:
                    return _MULTIPLIERS[prefix]
                raise ScpiError(-131, f"suffix {suffix!r}")
    if s in _MULTIPLIERS:
        return _MULTIPLIERS[s]
    if unit is None:
        raise ScpiError(-138, f"suffix {suffix!r} on a unitless value")
    raise ScpiError(-131, f"suffix {suffix!r}, expected {unit}")


def parse_numeric(
    text: str,
    unit: str | None = None,
    *,
    minimum: float | None = None,
    maximum: float | None = None,
    default: float | None = None,
    name: str = "value",
) -> float:
    """Read a decimal numeric parameter with optional multiplier and unit suffix.

    ``unit`` is the SCPI unit expected (``"HZ"``, ``"V"``, ``"A"``, ``"S"``, ``"DBM"``,
    ``"OHM"``) or None. ``MINimum``/``MAXimum``/``DEFault`` give the bounds or the default.
    A value outside ``[minimum, maximum]`` raises ``ScpiError(-222)``.
    """
    special = match_mnemonic(text, SPECIAL_NUMERIC)
    if special is not None:
        value = {"MINIMUM": minimum, "MAXIMUM": maximum, "DEFAULT": default}[special]
        if value is None:
            raise ScpiError(-224, f"{name}: {text} not available")
        return float(value)
    match = _NUMBER.match(text.strip())
    if not match:
        if text[:1] in "\"'":
            raise ScpiError(-104, f"{name}: string where a number is expected")
        raise ScpiError(-120, f"{name}: cannot read {text[:40]!r} as a number")
    number, suffix = match.groups()
    value = float(number) * _suffix_multiplier(suffix, unit)
    if not math.isfinite(value):
        raise ScpiError(-222, f"{name}: {text[:40]} is not finite")
    # A relative slack of 1e-12 either side of a bound (on its magnitude, so a negative
    # bound such as -30 dBm is not narrowed).
    if minimum is not None and value < minimum - 1e-12 * abs(minimum) - 1e-300:
        raise ScpiError(-222, f"{name} {value:g} below {minimum:g}")
    if maximum is not None and value > maximum + 1e-12 * abs(maximum) + 1e-300:
        raise ScpiError(-222, f"{name} {value:g} above {maximum:g}")
    if minimum is not None:
        value = max(value, minimum)
    if maximum is not None:
        value = min(value, maximum)
    return value


def parse_integer(
    text: str, *, minimum: int | None = None, maximum: int | None = None, name: str = "value"
) -> int:
    """Read an integer parameter (a decimal number with no fraction), bounds -222."""
    value = parse_numeric(
        text,
        None,
        minimum=minimum,
        maximum=maximum,
        default=minimum,
        name=name,
    )
    if value != round(value):
        raise ScpiError(-222, f"{name} {value:g} is not a whole number")
    return round(value)


def mnemonic_forms(mnemonic: str) -> tuple[str, str]:
    """(short, long) upper-case forms of ``FREQuency`` -> ``("FREQ", "FREQUENCY")``.

    The short form is the leading upper-case letters, plus any trailing digits.
    """
    short = ""
    for ch in mnemonic:
        if ch.isupper() or ch.isdigit():
            short += ch
        else:
            break
    if not short:
        short = mnemonic.upper()
    return short, mnemonic.upper()


def match_mnemonic(text: str, choices: Iterable[str]) -> str | None:
    """The long upper-case form of the choice that ``text`` names, or None."""
    word = text.strip().upper()
    for choice in choices:
        short, long = mnemonic_forms(choice)
        if word in (short, long):
            return long
    return None


def parse_choice(text: str, choices: Iterable[str], *, name: str = "value") -> str:
    """Read character program data among ``choices`` (``["LINear", "LOGarithmic"]``);
    returns the long upper-case form. Anything else is ``ScpiError(-141)``."""
    choices = tuple(choices)
    found = match_mnemonic(text, choices)
    if found is None:
        raise ScpiError(-141, f"{name}: {text[:40]!r} is not one of {'|'.join(choices)}")
    return found


def parse_boolean(text: str, *, name: str = "state") -> bool:
    """Read ``ON``/``OFF``/``1``/``0`` (SCPI-99 §7.3: a number rounds, non-zero is ON)."""
    word = text.strip().upper()
    if word == "ON":
        return True
    if word == "OFF":
        return False
    try:
        return round(float(word)) != 0
    except ValueError:
        raise ScpiError(-141, f"{name}: {text[:40]!r} is not ON, OFF, 1 or 0") from None


def parse_string(text: str, *, name: str = "value") -> str:
    """Read string program data in single or double quotes; a doubled quote is one quote."""
    text = text.strip()
    if len(text) < 2 or text[0] not in "\"'" or text[-1] != text[0]:
        raise ScpiError(-150 if text[:1] in "\"'" else -104, f"{name}: expected a quoted string")
    quote = text[0]
    inner = text[1:-1]
    if quote in inner.replace(quote * 2, ""):
        raise ScpiError(-150, f"{name}: stray quote")
    return inner.replace(quote * 2, quote)


def parse_channel_list(text: str, *, name: str = "channel list") -> list[int]:
    """Read a SCPI channel list ``(@1)``, ``(@1,3)`` or ``(@2:4)`` into channel numbers."""
    text = text.strip()
    if not (text.startswith("(@") and text.endswith(")")):
        raise ScpiError(-104, f"{name}: expected (@n), got {text[:40]!r}")
    inner = text[2:-1].strip()
    if not inner:
        return []
    channels: list[int] = []
    for item in inner.split(","):
        item = item.strip()
        try:
            if ":" in item:
                first, last = (int(x) for x in item.split(":"))
                step = 1 if last >= first else -1
                channels.extend(range(first, last + step, step))
            else:
                channels.append(int(item))
        except ValueError:
            raise ScpiError(-104, f"{name}: {item[:20]!r} is not a channel number") from None
    return channels


def format_block(payload: bytes) -> bytes:
    """IEEE 488.2 §8.7.9 definite-length block ``#<n><len><payload>``."""
    length = str(len(payload))
    if len(length) > 9:
        raise ValueError("a definite-length block holds at most 999 999 999 bytes")
    return b"#" + str(len(length)).encode() + length.encode() + payload


def parse_block(data: bytes) -> tuple[bytes, int]:
    """Read one definite-length block from the start of ``data``.

    Returns (payload, bytes consumed). Raises ValueError on a malformed header.
    """
    if len(data) < 2 or data[:1] != b"#" or not data[1:2].isdigit() or data[1:2] == b"0":
        raise ValueError("not a definite-length block header")
    n = int(data[1:2])
    digits = data[2 : 2 + n]
    if len(digits) != n or not digits.isdigit():
        raise ValueError("block length digits missing")
    length = int(digits)
    start = 2 + n
    if len(data) < start + length:
        raise ValueError("block shorter than its header says")
    return data[start : start + length], start + length


def format_number(value: float) -> str:
    """ASCII number with full precision (shortest text that reads back exactly)."""
    return repr(float(value))
