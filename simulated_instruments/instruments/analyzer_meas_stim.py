"""The simulated network analyser's second dialect, ``meas_stim``: a command tree of our own.

It exists so that the drivers are proven against more than their twin. It measures the
same bench as :class:`~simulated_instruments.instruments.analyzer.Analyzer` (the sweep
engine is shared) but speaks differently on every axis a command map must absorb:

- another tree: ``STIMulus:...`` for the source and sweep, ``RECeiver:...`` for the IF
  bandwidth and duration, ``CORRection:APPLy`` for the correction;
- no blocking completion: ``RUN:SINGle`` starts a sweep and ``STATus:SWEep:EVENt?`` (an
  event register, cleared when read and by ``STATus:SWEep:CLEar``) has bit 1 (value 2)
  set once it has finished; ``*OPC?`` answers at once, as for an instrument whose sweeps
  are not overlapped commands;
- data as ASCII or 4-byte floats (``DATA:ENCoding ASCii|FLOat32``, ``DATA:ORDer
  MSBFirst|LSBFirst``), no 8-byte floats;
- numbered measurements: ``MEASure<n>:DEFine S21`` (n = 1…4) then ``MEASure<n>:VALues?``;
- no stimulus query: the frequencies follow from start, stop, points and scale;
- its own error codes beside the standard ones: 201 measurement not defined, 202 no
  sweep data yet; errors are read with ``DIAGnostic:ERRor?``.
"""

from __future__ import annotations

import time

from simulated_instruments.instruments.analyzer import PARAMETERS, Analyzer
from simulated_instruments.instruments.nodes import Nodes, none, one
from simulated_instruments.scpi import (
    ERROR_TEXTS,
    CommandTree,
    ScpiError,
    Session,
    format_number,
    parse_choice,
)

MEASUREMENTS = 4
SWEEP_DONE = 0x02
SWEEPING = 0x01
ERR_NOT_DEFINED = 201
ERR_NO_DATA = 202
ERROR_TEXTS.setdefault(ERR_NOT_DEFINED, "Measurement not defined")
ERROR_TEXTS.setdefault(ERR_NO_DATA, "No sweep data")


class MeasStimAnalyzer(Analyzer):
    """The analyser of :mod:`.analyzer` behind the ``meas_stim`` command tree."""

    def reset(self) -> None:
        super().reset()
        self.definitions: dict[int, str] = {}
        self.events = 0

    def trigger(self) -> None:
        self.events = 0
        super().trigger()

    def sweep_events(self) -> int:
        """The event register now: bit 1 once the last sweep has finished (read clears)."""
        sweep = self.last
        if sweep is not None and time.monotonic() >= sweep.done_at and not self._reported:
            self.events |= SWEEP_DONE
            self._reported = True
        value, self.events = self.events, 0
        return value

    def run_single(self) -> None:
        """Start a sweep; the event register reports its end once."""
        self.trigger()
        self._reported = False

    def clear_events(self) -> None:
        self.events = 0

    def sweep_condition(self) -> int:
        """The condition register: bit 0 while a sweep runs."""
        sweep = self.last
        busy = sweep is not None and time.monotonic() < sweep.done_at
        return SWEEPING if busy else 0

    def build(self, tree: CommandTree) -> None:
        spec = self.spec
        self._reported = True

        nodes = Nodes(tree, self)
        nodes.numeric("STIMulus:FSTart", "start", "HZ", spec.f_min, spec.f_max)
        nodes.numeric("STIMulus:FSTOp", "stop", "HZ", spec.f_min, spec.f_max)
        nodes.numeric("STIMulus:LEVel", "power", "DBM", spec.power_min, spec.power_max)
        nodes.numeric("RECeiver:IFBW", "if_bandwidth", "HZ", spec.ifbw_min, spec.ifbw_max)
        nodes.integer("STIMulus:NPOints", "points", spec.points_min, spec.points_max)
        nodes.choice("STIMulus:SCALe", "spacing", ("LINear", "LOGarithmic"), name="scale")
        nodes.query("RECeiver:DURation", lambda: format_number(self.sweep_time()))
        nodes.boolean("CORRection:APPLy", "corrected", name="correction", answers=("OFF", "ON"))
        nodes.action("RUN:SINGle", self.run_single)

        nodes.action("STATus:SWEep:CLEar", self.clear_events)
        nodes.query("STATus:SWEep:EVENt", lambda: str(self.sweep_events()))
        nodes.query("STATus:SWEep:CONDition", lambda: str(self.sweep_condition()))

        def set_encoding(s: Session, p: list[str]) -> None:
            kind = parse_choice(one(p, "encoding"), ("ASCii", "FLOat32"), name="encoding")
            s.data_format = "REAL32" if kind == "FLOAT32" else "ASCII"

        tree.add(
            "DATA:ENCoding",
            set=set_encoding,
            query=lambda s, p: (none(p), "FLO32" if s.data_format == "REAL32" else "ASC")[1],
        )

        def set_order(s: Session, p: list[str]) -> None:
            order = parse_choice(one(p, "order"), ("MSBFirst", "LSBFirst"), name="order")
            s.byte_order = "NORMAL" if order == "MSBFIRST" else "SWAPPED"

        tree.add(
            "DATA:ORDer",
            set=set_order,
            query=lambda s, p: (none(p), "MSBF" if s.byte_order == "NORMAL" else "LSBF")[1],
        )

        def define(s: Session, p: list[str]) -> None:
            name = one(p, "parameter").strip().strip("\"'").upper()
            if name not in PARAMETERS:
                raise ScpiError(-224, f"parameter {name[:20]!r}: use S11, S21, S12 or S22")
            self.definitions[s.suffix] = name

        def defined(s: Session, p: list[str]) -> str:
            none(p)
            return self.definitions.get(s.suffix, "NONE")

        tree.add("MEASure:DEFine", set=define, query=defined, max_suffix=MEASUREMENTS)

        def values(s: Session, p: list[str]) -> bytes | str:
            none(p)
            name = self.definitions.get(s.suffix)
            if name is None:
                n = s.suffix
                raise ScpiError(ERR_NOT_DEFINED, f"MEASure{n}: send MEASure{n}:DEFine first")
            if self.last is None:
                raise ScpiError(ERR_NO_DATA, "no sweep since power-on; send RUN:SINGle first")
            self._values_ready(s)
            data_format = s.data_format if s.data_format in ("ASCII", "REAL32") else "ASCII"
            return self.last.encoded(name, data_format, s.byte_order)

        tree.add("MEASure:VALues", query=values, max_suffix=MEASUREMENTS)

        def error_next(s: Session, p: list[str]) -> str:
            none(p)
            return s.pop_error()

        tree.add("DIAGnostic:ERRor", query=error_next)
        nodes.action("RUN:ABORt", self.abort)

    def wait_idle(self, session: Session) -> None:
        # *OPC? and *WAI do not wait for a sweep here: it is not an overlapped command in
        # this dialect. Reading values still waits for the data they need.
        return None

    def _values_ready(self, session: Session) -> None:
        Analyzer.wait_idle(self, session)
