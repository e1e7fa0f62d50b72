"""SCPI message parsing, command trees, the error queue and IEEE 488.2 common commands.

Pure parsing (no sockets) lives in :mod:`simulated_instruments.scpi_parse` and is
re-exported here: :func:`split_message_units`, :func:`parse_header`,
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
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from simulated_instruments.scpi_parse import (
    ERROR_TEXTS,
    MAX_MNEMONIC,
    SPECIAL_NUMERIC,
    Header,
    ScpiError,
    error_string,
    format_block,
    format_number,
    match_mnemonic,
    mnemonic_forms,
    parse_block,
    parse_boolean,
    parse_channel_list,
    parse_choice,
    parse_header,
    parse_integer,
    parse_numeric,
    parse_string,
    split_message_units,
    split_parameters,
    split_unit,
)

__all__ = [
    "ERROR_QUEUE_SIZE",
    "ERROR_TEXTS",
    "ESR_COMMAND_ERROR",
    "ESR_DEVICE_ERROR",
    "ESR_EXECUTION_ERROR",
    "ESR_OPC",
    "ESR_QUERY_ERROR",
    "MAX_MNEMONIC",
    "SPECIAL_NUMERIC",
    "STB_ERROR_QUEUE",
    "STB_ESB",
    "STB_MAV",
    "STB_MSS",
    "CommandTree",
    "Handler",
    "Header",
    "Instrument",
    "ScpiError",
    "Session",
    "error_string",
    "format_block",
    "format_number",
    "match_mnemonic",
    "mnemonic_forms",
    "no_input_pending",
    "parse_block",
    "parse_boolean",
    "parse_channel_list",
    "parse_choice",
    "parse_header",
    "parse_integer",
    "parse_numeric",
    "parse_string",
    "split_message_units",
    "split_parameters",
    "split_unit",
]

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
