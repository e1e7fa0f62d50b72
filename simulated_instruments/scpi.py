"""SCPI message parsing, command trees, the error queue and IEEE 488.2 common commands.

Pure parsing (no sockets): :func:`split_message_units`, :func:`parse_header`,
:func:`split_parameters`, the parameter readers (:func:`parse_numeric`,
:func:`parse_boolean`, :func:`parse_choice`, :func:`parse_string`,
:func:`parse_channel_list`) and :func:`format_block` are functions on text and bytes.
:class:`CommandTree` maps headers to handlers; :class:`Session` holds what belongs to one
client connection (error queue, status bytes, current header path, data format), so one
client's mistakes never show up in another client's answers.

Rules followed (SCPI-99 vol. 1 ch. 6 and IEEE 488.2 ch. 7; see docs/references.md §7):

- mnemonics match their short form (the upper-case letters of ``FREQuency``) or their
  long form, case-insensitively; nodes in brackets are optional;
- ``;`` separates message units; a unit without a leading ``:`` is read relative to the
  path of the previous unit's header (its last node dropped); ``:`` resets to the root;
  common commands (``*IDN?``) leave the path alone;
- a numeric suffix ``1`` on a node (``SENSe1``) is accepted, as on a one-channel
  instrument; others are ``-114``;
- numeric values take SI multipliers as IEEE 488.2 §7.7.3 defines them: ``M`` is milli
  and ``MA`` mega, except that ``MHZ`` and ``MOHM`` are mega; when the unit is current,
  ``MA`` is milliampere (the multiplier ``M`` followed by the unit ``A``), and ``MV``
  millivolt;
- the error queue keeps the oldest entries; when full, the newest is replaced by
  ``-350,"Queue overflow"`` (SCPI-99 §21.8);
- definite-length blocks ``#<n><len><bytes>`` (IEEE 488.2 §8.7.9).
"""

from __future__ import annotations

import collections
import math
import re
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from typing import Any

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

ERROR_QUEUE_SIZE = 20

# Event status register bits (IEEE 488.2 §11.5.1).
ESR_OPC = 0x01
ESR_QUERY_ERROR = 0x04
ESR_DEVICE_ERROR = 0x08
ESR_EXECUTION_ERROR = 0x10
ESR_COMMAND_ERROR = 0x20
# Status byte bits (IEEE 488.2 §11.2; bit 2 is the SCPI error/event queue summary).
STB_ERROR_QUEUE = 0x04
STB_MAV = 0x10
STB_ESB = 0x20
STB_MSS = 0x40


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


# --- command tree ----------------------------------------------------------------------

Handler = Callable[["Session", list[str]], Any]


@dataclass(frozen=True)
class _Node:
    short: str
    long: str
    optional: bool

    def matches(self, name: str) -> bool:
        return name in (self.short, self.long)


def _parse_pattern(pattern: str) -> tuple[_Node, ...]:
    """``[SENSe:]FREQuency:STARt`` -> nodes; a bracketed node is optional."""
    nodes: list[_Node] = []
    text = pattern
    while text:
        if text.startswith(":"):
            text = text[1:]
            continue
        optional = text.startswith("[")
        if optional:
            end = text.index("]")
            inner = text[1:end].strip(":")
            text = text[end + 1 :]
        else:
            end = text.find(":") if ":" in text else len(text)
            bracket = text.find("[")
            if 0 <= bracket < end:
                end = bracket
            inner = text[:end]
            text = text[end:]
        for name in inner.split(":"):
            if name:
                short, long = mnemonic_forms(name)
                nodes.append(_Node(short, long, optional))
    return tuple(nodes)


def _match_nodes(pattern: tuple[_Node, ...], names: tuple[str, ...]) -> bool:
    if not pattern:
        return not names
    head = pattern[0]
    if names and head.matches(names[0]) and _match_nodes(pattern[1:], names[1:]):
        return True
    return head.optional and _match_nodes(pattern[1:], names)


@dataclass
class _Entry:
    pattern: tuple[_Node, ...]
    text: str
    set: Handler | None = None
    query: Handler | None = None
    max_suffix: int = 1


class CommandTree:
    """Headers (``[SENSe:]FREQuency:STARt``) mapped to set and query handlers."""

    def __init__(self) -> None:
        self._entries: list[_Entry] = []
        self._common: dict[tuple[str, bool], Handler] = {}

    def add(
        self,
        pattern: str,
        *,
        set: Handler | None = None,
        query: Handler | None = None,
        max_suffix: int = 1,
    ):
        """Register handlers for ``pattern``; a handler gets (session, parameters).

        ``max_suffix`` > 1 lets the header's nodes carry a numeric suffix up to it
        (``MEASure3``); the handler finds it in ``session.suffix``.
        """
        nodes = _parse_pattern(pattern)
        for entry in self._entries:
            if entry.pattern == nodes:
                entry.set = set or entry.set
                entry.query = query or entry.query
                return
        self._entries.append(_Entry(nodes, pattern, set, query, max_suffix))

    def add_common(self, name: str, handler: Handler, *, query: bool) -> None:
        """Register an IEEE 488.2 common command (``IDN`` with ``query=True`` is ``*IDN?``)."""
        self._common[(name.upper(), query)] = handler

    def find(self, names: tuple[str, ...]) -> _Entry | None:
        for entry in self._entries:
            if _match_nodes(entry.pattern, names):
                return entry
        return None

    def resolve(
        self, header: Header, path: tuple[str, ...]
    ) -> tuple[Handler | None, tuple[str, ...]]:
        """Find the handler of ``header`` read from ``path``; returns (handler, full path).

        Without a leading ``:`` the header is first read relative to ``path`` and, if that
        names nothing, from the root (most instruments are lenient this way).
        """
        if header.common:
            return self._common.get((header.nodes[0][0], header.query)), path
        names = tuple(name for name, _ in header.nodes)
        tries = [names] if header.rooted or not path else [path + names, names]
        for full in tries:
            entry = self.find(full)
            if entry is not None:
                for _, suffix in header.nodes:
                    if suffix is not None and not 1 <= suffix <= entry.max_suffix:
                        raise ScpiError(-114, f"suffix {suffix}")
                handler = entry.query if header.query else entry.set
                if handler is None:
                    what = "query" if header.query else "command"
                    raise ScpiError(-113, f"{':'.join(full)} has no {what} form")
                return handler, full
        return None, path


# --- per-client session ----------------------------------------------------------------


def no_input_pending() -> bool:
    """The ``input_pending`` of a session with no connection behind it."""
    return False


@dataclass(eq=False)
class Session:
    """What belongs to one client connection of one instrument."""

    name: str = "client"
    errors: collections.deque = field(default_factory=collections.deque)
    esr: int = 0
    ese: int = 0
    sre: int = 0
    path: tuple[str, ...] = ()
    # Analyser data format is per client, so one client's FORMat does not change the
    # encoding another client receives.
    data_format: str = "ASCII"
    byte_order: str = "NORMAL"
    # The numeric suffix of the header being executed (1 when none was given).
    suffix: int = 1
    # Set by the server: True when the client has sent more input (for -410).
    input_pending: Callable[[], bool] = no_input_pending

    def push_error(self, code: int, detail: str = "") -> None:
        """Queue an error and set its event status bit (IEEE 488.2 §11.5.1)."""
        if -199 <= code <= -100:
            self.esr |= ESR_COMMAND_ERROR
        elif -299 <= code <= -200:
            self.esr |= ESR_EXECUTION_ERROR
        elif -399 <= code <= -300 or code > 0:
            self.esr |= ESR_DEVICE_ERROR
        elif -499 <= code <= -400:
            self.esr |= ESR_QUERY_ERROR
        if len(self.errors) >= ERROR_QUEUE_SIZE:
            self.errors[-1] = (-350, "")
            return
        self.errors.append((code, detail))

    def pop_error(self) -> str:
        if not self.errors:
            return error_string(0)
        code, detail = self.errors.popleft()
        return error_string(code, detail)

    def status_byte(self) -> int:
        stb = 0
        if self.errors:
            stb |= STB_ERROR_QUEUE
        if self.esr & self.ese:
            stb |= STB_ESB
        if stb & self.sre & ~STB_MSS:
            stb |= STB_MSS
        return stb


class Instrument:
    """Base of a simulated instrument: a command tree, IEEE 488.2 common commands and
    ``SYSTem:ERRor``. Subclasses add their nodes in ``build(tree)`` and may override
    :meth:`reset`, :meth:`wait_idle` and :meth:`identity`."""

    #: name used in resource listings
    name = "instrument"

    def __init__(self) -> None:
        self.tree = CommandTree()
        self._add_common(self.tree)
        self.build(self.tree)

    # subclasses -----------------------------------------------------------------------
    def build(self, tree: CommandTree) -> None:
        """Add instrument nodes to ``tree``."""

    def identity(self) -> str:
        return "zbench,simulated instrument,0,0.1"

    def reset(self) -> None:
        """``*RST``: settings to their defaults."""

    def wait_idle(self, session: Session) -> None:
        """Block until overlapped operations (a sweep) are done; may raise ScpiError."""

    # execution ------------------------------------------------------------------------
    def execute(self, session: Session, line: str) -> list[str | bytes]:
        """Run one program message; return the responses of its queries, in order.

        Errors go to ``session``'s queue; a unit in error gives no response and the units
        after it still run (IEEE 488.2 §6.1.6.1 leaves this to the device).
        """
        responses: list[str | bytes] = []
        try:
            units = split_message_units(line)
        except ScpiError as exc:
            session.push_error(exc.code, exc.detail)
            return responses
        for unit in units:
            try:
                header_text, param_text = split_unit(unit)
                header = parse_header(header_text)
                params = split_parameters(param_text)
                handler, full = self.tree.resolve(header, session.path)
                if handler is None:
                    session.path = ()
                    raise ScpiError(-113, header_text[:60])
                if not header.common:
                    session.path = full[:-1]
                session.suffix = max((n for _, n in header.nodes if n is not None), default=1)
                result = handler(session, params)
                if header.query:
                    if result is None:
                        raise ScpiError(-200, f"{header_text} gave no answer")
                    responses.append(result)
            except ScpiError as exc:
                session.push_error(exc.code, exc.detail)
            except Exception as exc:  # a bug must not kill the connection
                session.push_error(-200, f"internal: {type(exc).__name__}: {exc}")
        return responses

    # common commands ------------------------------------------------------------------
    def _add_common(self, tree: CommandTree) -> None:
        def no_params(params: list[str]) -> None:
            if params:
                raise ScpiError(-108, params[0][:40])

        def idn(s: Session, p: list[str]) -> str:
            no_params(p)
            return self.identity()

        def rst(s: Session, p: list[str]) -> None:
            no_params(p)
            self.reset()

        def cls(s: Session, p: list[str]) -> None:
            no_params(p)
            s.errors.clear()
            s.esr = 0

        def opc_query(s: Session, p: list[str]) -> str:
            no_params(p)
            self.wait_idle(s)
            return "1"

        def opc(s: Session, p: list[str]) -> None:
            no_params(p)
            self.wait_idle(s)
            s.esr |= ESR_OPC

        def wai(s: Session, p: list[str]) -> None:
            no_params(p)
            self.wait_idle(s)

        def esr_query(s: Session, p: list[str]) -> str:
            no_params(p)
            value, s.esr = s.esr, 0
            return str(value)

        def register_setter(attr: str) -> Handler:
            def setter(s: Session, p: list[str]) -> None:
                if len(p) != 1:
                    raise ScpiError(-109 if not p else -108, attr)
                setattr(s, attr, parse_integer(p[0], minimum=0, maximum=255, name=attr))

            return setter

        def register_getter(attr: str) -> Handler:
            def getter(s: Session, p: list[str]) -> str:
                no_params(p)
                return str(getattr(s, attr))

            return getter

        def stb(s: Session, p: list[str]) -> str:
            no_params(p)
            return str(s.status_byte())

        def tst(s: Session, p: list[str]) -> str:
            no_params(p)
            return "0"

        def error_next(s: Session, p: list[str]) -> str:
            no_params(p)
            return s.pop_error()

        def error_count(s: Session, p: list[str]) -> str:
            no_params(p)
            return str(len(s.errors))

        def error_all(s: Session, p: list[str]) -> str:
            no_params(p)
            if not s.errors:
                return s.pop_error()
            return ",".join(s.pop_error() for _ in range(len(s.errors)))

        tree.add_common("IDN", idn, query=True)
        tree.add_common("RST", rst, query=False)
        tree.add_common("CLS", cls, query=False)
        tree.add_common("OPC", opc_query, query=True)
        tree.add_common("OPC", opc, query=False)
        tree.add_common("WAI", wai, query=False)
        tree.add_common("ESR", esr_query, query=True)
        tree.add_common("ESE", register_setter("ese"), query=False)
        tree.add_common("ESE", register_getter("ese"), query=True)
        tree.add_common("SRE", register_setter("sre"), query=False)
        tree.add_common("SRE", register_getter("sre"), query=True)
        tree.add_common("STB", stb, query=True)
        tree.add_common("TST", tst, query=True)
        tree.add("SYSTem:ERRor[:NEXT]", query=error_next)
        tree.add("SYSTem:ERRor:COUNt", query=error_count)
        tree.add("SYSTem:ERRor:ALL", query=error_all)
