"""The simulated low-frequency gain-phase analyser (10 Hz to 30 MHz by default).

It returns the ratio of its two receivers, B/A, not a calibrated S21. Its set-up on the
bench (scenario key ``gain_phase``): the source (EMF set by ``OUTPut:LEVel`` in dBm into
a matched load, source impedance ``source_impedance``) drives receiver A's node; a
reference resistor ``reference_resistor`` joins that node to the fixture position the
switch has selected, once the hands have moved the fixture to it (``OPERator:CABLes
GAINphase``; in any other cable state it sees an open); receiver B sits across the
position, its input impedance (``input_resistance`` ‖ ``input_capacitance``) in parallel
with the part. Its inputs are isolated, so the cable shields' ground loop is not in its
path. Each receiver adds its own noise (``receiver_floor``, volts RMS at a 1 kHz
bandwidth, scaling with √bandwidth); the ratio of the noisy voltages is what it reports.
A command tree of our own:

``SWEep:STARt|STOP|POINts|MODE LINear|LOGarithmic|DURation?|RUN``,
``RECeiver:BANDwidth``, ``RECeiver:CORRection ON|OFF`` (kept, has no effect here),
``OUTPut:LEVel`` (dBm), ``DATA:FORMat ASCii``, ``DATA:FREQuency?``,
``DATA:TRACe? RATio`` (re, im pairs), ``*OPC?`` waits for the sweep.
"""

from __future__ import annotations

import threading
import time

import numpy as np

from simulated_instruments.instruments.nodes import (
    Nodes,
    none,
    one,
    sweep_frequencies,
    wait_for_sweep,
)
from simulated_instruments.scenario import GainPhaseSpec
from simulated_instruments.scpi import (
    CommandTree,
    Instrument,
    ScpiError,
    Session,
    format_number,
    parse_choice,
)
from simulated_instruments.state import GAIN_PHASE_CABLES, BenchState

REFERENCE_BANDWIDTH = 1e3


class GainPhaseAnalyzer(Instrument):
    name = "gain_phase"

    def __init__(self, state: BenchState, spec: GainPhaseSpec):
        self.state = state
        self.spec = spec
        self.lock = threading.Lock()
        self.rng = np.random.default_rng([state.scenario.seed, 3])
        self.last: tuple[np.ndarray, np.ndarray, float] | None = None
        self.reset()
        super().__init__()

    def identity(self) -> str:
        return self.spec.identity

    def reset(self) -> None:
        with self.lock:
            self.start = max(self.spec.f_min, 100.0)
            self.stop = self.spec.f_max
            self.points = 101
            self.mode = "LOGARITHMIC"
            self.bandwidth = min(100.0, self.spec.bandwidth_max)
            self.level = 0.0
            self.corrected = False

    def frequencies(self) -> np.ndarray:
        return sweep_frequencies(self.start, self.stop, self.points, self.mode)

    def sweep_time(self) -> float:
        """Each point waits a few periods of the lower of its frequency and bandwidth."""
        f = self.frequencies()
        return float(np.sum(self.spec.per_point + 3.0 / np.minimum(f, self.bandwidth)))

    def input_impedance(self, f: np.ndarray) -> np.ndarray:
        s = self.spec
        return 1 / (1 / s.input_resistance + 2j * np.pi * f * s.input_capacitance)

    def measure(self, f: np.ndarray) -> np.ndarray:
        """Receiver ratio B/A with each receiver's noise, on the selected position."""
        s, state = self.spec, self.state
        with state.lock:
            pos = state.closed
            if state.cables != GAIN_PHASE_CABLES or pos is None:
                z = np.full(f.shape, 1e12 + 0j)  # not connected to the fixture: an open
            else:
                bias = state.bias.load_voltage(state.now())
                z = state.position_impedance(pos, f, bias) - state.ground_loop(f)
        zin = self.input_impedance(f)
        zp = z * zin / (z + zin)
        emf = 2 * np.sqrt(10 ** (self.level / 10) * 1e-3 * s.source_impedance)
        total = s.source_impedance + s.reference_resistor + zp
        v_a = emf * (s.reference_resistor + zp) / total
        v_b = emf * zp / total
        sigma = s.receiver_floor * np.sqrt(self.bandwidth / REFERENCE_BANDWIDTH) / np.sqrt(2)

        def noise() -> np.ndarray:
            return sigma * (
                self.rng.standard_normal(f.shape) + 1j * self.rng.standard_normal(f.shape)
            )

        return (v_b + noise()) / (v_a + noise())

    def wait_idle(self, session: Session) -> None:
        last = self.last
        if last is not None:
            wait_for_sweep(last[2], self.state.stopping, session)

    def run(self) -> None:
        """Start a sweep of the selected position; it lasts ``SWEep:DURation?``."""
        with self.lock:
            f = self.frequencies()
            duration = self.state.real_seconds(self.sweep_time())
        self.last = (f, self.measure(f), time.monotonic() + duration)

    def build(self, tree: CommandTree) -> None:
        spec = self.spec

        nodes = Nodes(tree, self)
        nodes.numeric("SWEep:STARt", "start", "HZ", spec.f_min, spec.f_max)
        nodes.numeric("SWEep:STOP", "stop", "HZ", spec.f_min, spec.f_max)
        nodes.numeric(
            "RECeiver:BANDwidth", "bandwidth", "HZ", spec.bandwidth_min, spec.bandwidth_max
        )
        nodes.numeric("OUTPut:LEVel", "level", "DBM", spec.level_min, spec.level_max)
        nodes.integer("SWEep:POINts", "points", 2, spec.points_max)
        nodes.choice("SWEep:MODE", "mode", ("LINear", "LOGarithmic"), name="mode")
        nodes.query("SWEep:DURation", lambda: format_number(self.sweep_time()))
        nodes.boolean("RECeiver:CORRection", "corrected", name="correction")
        nodes.action("SWEep:RUN", self.run)

        def set_format(s: Session, p: list[str]) -> None:
            parse_choice(one(p, "format"), ("ASCii",), name="format")
            s.data_format = "ASCII"

        tree.add("DATA:FORMat", set=set_format, query=lambda s, p: (none(p), "ASC")[1])

        def frequency_data(s: Session, p: list[str]) -> str:
            none(p)
            with self.lock:
                f = self.frequencies()
            return ",".join(map(format_number, f.tolist()))

        tree.add("DATA:FREQuency", query=frequency_data)

        def trace(s: Session, p: list[str]) -> str:
            parse_choice(one(p, "trace"), ("RATio",), name="trace")
            if self.last is None:
                raise ScpiError(-230, "no sweep since power-on; send SWEep:RUN first")
            self.wait_idle(s)
            values = np.ascontiguousarray(self.last[1]).view(float)
            return ",".join(map(format_number, values.tolist()))

        tree.add("DATA:TRACe", query=trace)
