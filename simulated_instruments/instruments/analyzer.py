"""The simulated two-port network analyser (SCPI nodes of docs/design.md §8).

Single sweeps only: ``INITiate[:IMMediate]`` takes the four S-parameters of the state
the bench is in at that moment and the sweep then lasts ``SWEep:TIME?`` (times
``time_scale``); ``*OPC?``, ``*WAI`` and ``TRACe?`` wait for it. A new message that
arrives while ``*OPC?`` is waiting interrupts it (``-410``), as IEEE 488.2 §6.3.2.3 asks
of a query whose answer is overtaken. ``TRACe?`` before any sweep is ``-230``.
``FORMat`` is kept per client connection.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass, field

import numpy as np

from simulated_instruments.instruments.nodes import (
    Nodes,
    none,
    one,
    sweep_frequencies,
    wait_for_sweep,
)
from simulated_instruments.scpi import (
    CommandTree,
    Instrument,
    ScpiError,
    Session,
    format_block,
    format_number,
    parse_choice,
    parse_integer,
)
from simulated_instruments.state import BenchState, SweepPlan

PARAMETERS = {"S11": (0, 0), "S21": (1, 0), "S12": (0, 1), "S22": (1, 1)}


@dataclass
class Sweep:
    """A finished (or running) sweep: frequencies, data (n, 2, 2), end time (monotonic)."""

    f: np.ndarray
    s: np.ndarray
    done_at: float
    _encoded: dict[tuple[str, str, str], bytes | str] = field(default_factory=dict)

    def encoded(self, what: str, data_format: str, byte_order: str) -> bytes | str:
        key = (what, data_format, byte_order)
        cached = self._encoded.get(key)
        if cached is None:
            if what == "FREQ":
                values = self.f
            else:
                i, j = PARAMETERS[what]
                values = np.ascontiguousarray(self.s[:, i, j]).view(float)  # re, im pairs
            cached = encode_values(values, data_format, byte_order)
            self._encoded[key] = cached
        return cached


# SCPI's number for not-a-number (SCPI-99 vol. 1; from memory): what an analyser sends
# for a point it could not measure.
SCPI_NAN = 9.91e37


def encode_values(values: np.ndarray, data_format: str, byte_order: str) -> bytes | str:
    """Values as ASCII (full precision, comma-separated), a REAL,64 or a REAL,32 block;
    a point not measured (NaN) as SCPI's not-a-number, 9.91E37."""
    values = np.asarray(values, dtype=float)
    if not np.all(np.isfinite(values)):
        values = np.where(np.isfinite(values), values, SCPI_NAN)
    if data_format in ("REAL", "REAL32"):
        size = "f8" if data_format == "REAL" else "f4"
        dtype = (">" if byte_order == "NORMAL" else "<") + size
        return format_block(np.ascontiguousarray(values, dtype=dtype).tobytes())
    return ",".join(map(format_number, np.asarray(values, dtype=float).tolist()))


class Analyzer(Instrument):
    name = "analyzer"

    def __init__(self, state: BenchState):
        self.state = state
        self.spec = state.scenario.analyzer
        self.lock = threading.Lock()
        self.last: Sweep | None = None
        self.reset()
        super().__init__()

    def identity(self) -> str:
        return self.spec.identity

    def reset(self) -> None:
        with self.lock:
            self.start = max(self.spec.f_min, min(100e3, self.spec.f_max / 10))
            self.stop = self.spec.f_max
            self.points = min(max(201, self.spec.points_min), self.spec.points_max)
            self.spacing = "LINEAR"
            self.if_bandwidth = min(max(1e3, self.spec.ifbw_min), self.spec.ifbw_max)
            self.power = min(max(0.0, self.spec.power_min), self.spec.power_max)
            self.corrected = False

    # --- sweep plan --------------------------------------------------------------------
    def frequencies(self) -> np.ndarray:
        return sweep_frequencies(self.start, self.stop, self.points, self.spacing)

    def sweep_time(self) -> float:
        """Modelled sweep time (s): overhead + 2 directions × points × (per-point time +
        IF settling of ``settle_cycles`` periods of the IF bandwidth)."""
        s = self.spec
        return s.sweep_overhead + 2 * self.points * (
            s.sweep_per_point + s.settle_cycles / self.if_bandwidth
        )

    def trigger(self) -> None:
        with self.lock:
            if not self.start < self.stop:
                raise ScpiError(-221, f"start {self.start:g} Hz not below stop {self.stop:g} Hz")
            f = self.frequencies()
            plan = SweepPlan(f, self.power, self.if_bandwidth, self.corrected)
            duration = self.state.real_seconds(self.sweep_time())
        s = self.state.sweep(plan)
        self.last = Sweep(f, s, time.monotonic() + duration)

    def wait_idle(self, session: Session) -> None:
        sweep = self.last
        if sweep is not None:
            wait_for_sweep(sweep.done_at, self.state.stopping, session)

    def abort(self) -> None:
        """End the wait for the running sweep now."""
        if self.last is not None:
            self.last.done_at = min(self.last.done_at, time.monotonic())

    # --- nodes --------------------------------------------------------------------------
    def build(self, tree: CommandTree) -> None:
        spec = self.spec
        nodes = Nodes(tree, self)
        nodes.numeric(
            "[SENSe:]FREQuency:STARt", "start", "HZ", spec.f_min, spec.f_max, default=spec.f_min
        )
        nodes.numeric(
            "[SENSe:]FREQuency:STOP", "stop", "HZ", spec.f_min, spec.f_max, default=spec.f_max
        )
        nodes.numeric(
            "[SENSe:]BANDwidth[:RESolution]",
            "if_bandwidth",
            "HZ",
            spec.ifbw_min,
            spec.ifbw_max,
            default=1e3,
        )
        nodes.numeric(
            "SOURce:POWer[:LEVel][:IMMediate][:AMPLitude]",
            "power",
            "DBM",
            spec.power_min,
            spec.power_max,
            default=0.0,
        )
        nodes.integer("[SENSe:]SWEep:POINts", "points", spec.points_min, spec.points_max)
        nodes.choice("[SENSe:]SWEep:SPACing", "spacing", ("LINear", "LOGarithmic"), name="spacing")
        nodes.query("[SENSe:]SWEep:TIME", lambda: format_number(self.sweep_time()))
        nodes.boolean("[SENSe:]CORRection[:STATe]", "corrected", name="correction")
        nodes.action("INITiate[:IMMediate]", self.trigger)

        def set_format(s: Session, p: list[str]) -> None:
            if not p:
                raise ScpiError(-109, "format")
            kind = parse_choice(p[0], ("ASCii", "REAL"), name="format")
            if kind == "REAL":
                if len(p) > 2:
                    raise ScpiError(-108, p[2][:40])
                if len(p) == 2 and parse_integer(p[1], name="length") != 64:
                    raise ScpiError(-224, "only REAL,64 is supported")
                s.data_format = "REAL"
            else:
                if len(p) > 2:
                    raise ScpiError(-108, p[2][:40])
                s.data_format = "ASCII"

        tree.add(
            "FORMat[:DATA]",
            set=set_format,
            query=lambda s, p: (none(p), "REAL,64" if s.data_format == "REAL" else "ASC,0")[1],
        )

        def set_border(s: Session, p: list[str]) -> None:
            s.byte_order = parse_choice(one(p, "byte order"), ("NORMal", "SWAPped"))

        tree.add(
            "FORMat:BORDer",
            set=set_border,
            query=lambda s, p: (none(p), s.byte_order[:4])[1],
        )

        def frequency_data(s: Session, p: list[str]) -> bytes | str:
            none(p)
            with self.lock:
                f = self.frequencies()
            return encode_values(f, s.data_format, s.byte_order)

        tree.add("[SENSe:]FREQuency:DATA", query=frequency_data)

        def trace(s: Session, p: list[str]) -> bytes | str:
            name = one(p, "parameter").strip().strip("\"'").upper()
            if name not in PARAMETERS:
                raise ScpiError(-224, f"parameter {name[:20]!r}: use S11, S21, S12 or S22")
            if self.last is None:
                raise ScpiError(-230, "no sweep since power-on; send INITiate first")
            self.wait_idle(s)
            return self.last.encoded(name, s.data_format, s.byte_order)

        tree.add("TRACe[:DATA]", query=trace)

        nodes.action("ABORt", self.abort)
