"""The physical state of one simulated bench, shared by its instruments.

The analyser sees what the switch selects, what the operator has placed or connected,
the DC bias, the isolation transformer and the series resistors; all of it lives here,
behind one lock. :meth:`BenchState.sweep` composes the physics of
:mod:`simulated_instruments.physics` into the raw S-parameters of one sweep.

Signal path, port 1 to port 2: ``error box 1 · resistor board · [what the cables meet] ·
resistor board · error box 2`` where the cables meet a calibration standard on each end,
the through adapter, the series-through mount (``traces + (element ‖ gap capacitance)``
in series between the cable ends), the reflection mount (port 1 only: ``pad + (element ‖
pad capacitance)`` to ground, the port-2 cable left open), or the switched fixture: the
selected position's shunt element, ``mount pads + (part ‖ pad capacitance) + ground-loop
error`` (the ground-loop term only for the fixture, which is where the two cable shields
close a loop through the DUT's ground). While the fixture is on the gain-phase analyser
(cables ``GAINPHASE``) the network analyser's cable ends are open. The analyser's
``CORRection ON`` returns the same path without its error boxes (as if its own
calibration had been made at the cable ends).
"""

from __future__ import annotations

import math
import threading
import time
import weakref
import zlib
from dataclasses import dataclass

import numpy as np

from simulated_instruments import physics
from simulated_instruments.dc_bias import OPEN, DcBias, DcLoad
from simulated_instruments.faults import INSTRUMENTS, FaultState
from simulated_instruments.scenario import Scenario
from simulated_instruments.scpi import Session

SHORT = "SHORT"
EMPTY = "EMPTY"
CABLE_STATES = (
    "SHORT",
    "OPEN",
    "LOAD",
    "THROUGH",
    "FIXTURE",
    "SERIES",
    "REFLECTION",
    "GAINPHASE",
)
#: The fixture on the gain-phase analyser: the network analyser's cables are off it (open).
GAIN_PHASE_CABLES = "GAINPHASE"
#: The single mounts the cables can be moved to, besides the switched shunt fixture.
SINGLE_MOUNTS = ("SERIES", "REFLECTION")


@dataclass(frozen=True)
class SweepPlan:
    """Frequencies (Hz), source power (dBm), IF bandwidth (Hz), correction state."""

    f: np.ndarray
    power_dbm: float
    if_bandwidth: float
    corrected: bool


class BenchState:
    """Everything physical on the simulated bench (thread-safe through :attr:`lock`)."""

    def __init__(self, scenario: Scenario, *, time_scale: float = 1.0):
        if not (time_scale > 0 and math.isfinite(time_scale)):
            raise ValueError(f"time_scale must be a positive number, got {time_scale!r}")
        self.scenario = scenario
        self.time_scale = float(time_scale)
        self.lock = threading.RLock()
        # Set when the bench stops, so no thread waits on a sweep that will never be read.
        self.stopping = threading.Event()
        self._t0 = time.monotonic()
        seed = scenario.seed
        #: How many sweeps of each set-up this bench has taken (see :meth:`sweep_rng`).
        self._sweep_counts: dict[int, int] = {}
        box_rng = np.random.default_rng([seed, 2])
        spec = scenario.analyzer
        self.box_terms = tuple(
            physics.draw_error_box_terms(
                box_rng,
                directivity_db=spec.directivity_db,
                source_match_db=spec.source_match_db,
                cable_loss_db_at_1ghz=spec.cable_loss_db_at_1ghz,
                cable_delay=spec.cable_delay,
            )
            for _ in range(2)
        )
        self._box_cache: dict[bytes, tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]] = {}
        self.faults = FaultState()
        self.sessions: dict[str, weakref.WeakSet[Session]] = {
            name: weakref.WeakSet() for name in INSTRUMENTS
        }
        self.bias = DcBias(
            max_voltage=scenario.dc_max_voltage,
            max_current=scenario.dc_max_current,
            series_resistance=scenario.dc_series_resistance,
        )
        self.reset_physical()
        self._apply_scenario_faults()

    # --- clock --------------------------------------------------------------------------
    def now(self) -> float:
        """Simulated time (s): real time divided by ``time_scale``."""
        return (time.monotonic() - self._t0) / self.time_scale

    def real_seconds(self, simulated: float) -> float:
        """Real seconds that ``simulated`` seconds take on this bench."""
        return simulated * self.time_scale

    # --- the operator's world -----------------------------------------------------------
    def reset_physical(self) -> None:
        """Put the bench in the scenario's starting state."""
        init = self.scenario.initial
        with self.lock:
            self.cables = str(init.get("cables", "fixture")).upper()
            self.transformer = bool(init.get("transformer", False))
            self.resistors = float(init.get("resistors", 0.0))
            self.closed: int | None = init.get("closed")
            self.placements: dict[int, str] = {
                p: EMPTY for p in range(1, self.scenario.positions + 1)
            }
            for pos, item in init.get("placements", {}).items():
                self.placements[int(pos)] = item.upper() if item.upper() in (SHORT, EMPTY) else item
            #: What sits in the series-through and the reflection mount.
            self.mounted: dict[str, str] = {name: EMPTY for name in SINGLE_MOUNTS}
            self.refresh_load()

    def _apply_scenario_faults(self) -> None:
        for fault in self.scenario.faults:
            kind = fault["type"]
            inst = fault.get("instrument", "analyzer")
            if kind == "delay":
                self.faults.set_delay(inst, float(fault.get("seconds", 1.0)), fault.get("count", 1))
            elif kind == "drop":
                self.faults.set_drop(inst, int(fault.get("after", 0)))
            elif kind == "corrupt_block":
                self.faults.set_corrupt_blocks(inst, int(fault.get("count", 1)))
            elif kind == "error":
                self.faults.add_pending_error(
                    inst, int(fault.get("code", -240)), str(fault.get("text", "injected"))
                )
            elif kind == "missing":
                self.faults.set_missing(int(fault["position"]), True)

    def push_error(self, instrument: str, code: int, text: str) -> None:
        """Put an error into every open session of ``instrument`` (or the next one)."""
        sessions = list(self.sessions[instrument])
        if not sessions:
            self.faults.add_pending_error(instrument, code, text)
        for session in sessions:
            session.push_error(code, text)

    def register_session(self, instrument: str, session: Session) -> None:
        self.sessions[instrument].add(session)
        for code, text in self.faults.take_pending_errors(instrument):
            session.push_error(code, text)

    def unregister_session(self, instrument: str, session: Session) -> None:
        self.sessions[instrument].discard(session)

    def set_cables(self, state: str) -> None:
        with self.lock:
            self.cables = state
            self.refresh_load()

    def set_closed(self, position: int | None) -> None:
        with self.lock:
            self.closed = position
            self.refresh_load()

    def place(self, position: int, item: str) -> None:
        with self.lock:
            self.placements[position] = item
            self.refresh_load()

    def mount(self, which: str, item: str) -> None:
        """Put ``item`` (SHORT: the strap, EMPTY: the gap or open, or a part) in the
        ``SERIES`` or ``REFLECTION`` mount."""
        with self.lock:
            self.mounted[which] = item
            self.refresh_load()

    def single_mount(self, which: str) -> physics.Mount:
        return self.scenario.series_mount if which == "SERIES" else self.scenario.reflection_mount

    def mount_impedance(self, which: str, f: np.ndarray) -> np.ndarray:
        """Impedance (Ω) at the terminals of the ``SERIES`` or ``REFLECTION`` mount, as the
        cable end(s) see it: traces + (what is mounted ‖ the gap's or pad's capacitance)."""
        mount = self.single_mount(which)
        item = self.mounted[which]
        if item == EMPTY:
            return mount.with_element(f, None)
        if item == SHORT:
            return mount.with_element(f, mount.strap(f))
        return mount.with_element(f, self.scenario.parts[item].impedance(f, 0.0))

    def set_missing(self, position: int, missing: bool) -> None:
        with self.lock:
            self.faults.set_missing(position, missing)
            self.refresh_load()

    def element_at(self, position: int) -> str:
        """What is really in ``position`` (EMPTY where a part is reported missing)."""
        item = self.placements[position]
        if item not in (SHORT, EMPTY) and self.faults.is_missing(position):
            return EMPTY
        return item

    # --- DC path ------------------------------------------------------------------------
    def dc_load(self) -> DcLoad:
        """What the bias source sees now (the selected position, when on the fixture)."""
        if self.cables != "FIXTURE" or self.closed is None:
            return OPEN
        pos = self.closed
        mount = self.scenario.mounts[pos - 1]
        item = self.element_at(pos)
        if item == EMPTY:
            return OPEN
        if item == SHORT:
            return DcLoad("resistor", mount.resistance + mount.strap_resistance, key=f"{pos}:short")
        part = self.scenario.parts[item]
        key = f"{pos}:{item}"
        if part.kind == "capacitor":
            leak = getattr(part, "insulation_resistance", None) or getattr(
                part, "leakage_resistance", math.inf
            )
            return DcLoad("capacitor", float(leak), float(part.capacitance_at(0.0)), key=key)
        return DcLoad("resistor", mount.resistance + float(part.r_dc), key=key)

    def refresh_load(self) -> None:
        with self.lock:
            self.bias.connect(self.now(), self.dc_load())

    def bias_voltage(self) -> float:
        """DC voltage (V) across the selected part now."""
        with self.lock:
            return self.bias.load_voltage(self.now())

    # --- RF path ------------------------------------------------------------------------
    def error_boxes(self, f: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(S box 1, S box 2, ABCD box 1, ABCD box 2 turned to face port 2) on ``f``.

        Cached per frequency grid, so repeated sweeps of one plan cost only the DUT.
        """
        key = f.tobytes()
        cached = self._box_cache.get(key)
        if cached is None:
            s1 = physics.error_box(f, self.box_terms[0])
            s2 = physics.error_box(f, self.box_terms[1])
            cached = (s1, s2, physics.s_to_abcd(s1), physics.flip_abcd(physics.s_to_abcd(s2)))
            if len(self._box_cache) > 16:
                self._box_cache.clear()
            self._box_cache[key] = cached
        return cached

    def ground_loop(self, f: np.ndarray) -> np.ndarray:
        """Series error impedance (Ω) of the cable shields' loop, with or without the
        isolation transformer fitted."""
        sc = self.scenario
        choke = sc.transformer_inductance if self.transformer else 0.0
        return physics.ground_loop_impedance(f, sc.shield_resistance, sc.shield_cutoff, choke)

    def position_impedance(self, position: int, f: np.ndarray, bias_v: float = 0.0) -> np.ndarray:
        """Impedance (Ω) of fixture ``position`` as the cable ends see it shunting the line:
        mount + (element ‖ pad capacitance) + ground-loop error."""
        mount = self.scenario.mounts[position - 1]
        item = self.element_at(position)
        if item == EMPTY:
            z = mount.with_element(f, None)
        elif item == SHORT:
            z = mount.with_element(f, mount.strap(f))
        else:
            z = mount.with_element(f, self.scenario.parts[item].impedance(f, bias_v))
        return z + self.ground_loop(f)

    def cable_end_two_port(self, f: np.ndarray) -> tuple[str, object]:
        """What the cable ends (inside the resistor boards) meet: ``("reflect", (Γ1, Γ2))``
        for two uncoupled one-ports, or ``("abcd", M)`` for a two-port."""
        kit = self.scenario.kit
        if self.cables in ("SHORT", "OPEN", "LOAD"):
            g = kit.reflection(self.cables, f)
            return "reflect", (g, g)
        if self.cables == "THROUGH":
            return "abcd", physics.series_abcd(np.zeros(len(f), dtype=complex))
        if self.cables == "SERIES":
            return "abcd", physics.series_abcd(self.mount_impedance("SERIES", f))
        if self.cables == "REFLECTION":
            g1 = physics.reflection(self.mount_impedance("REFLECTION", f))
            c = self.scenario.open_line_capacitance
            return "reflect", (g1, physics.reflection(1 / (2j * np.pi * f * c)))
        if self.closed is None or self.cables == GAIN_PHASE_CABLES:
            c = self.scenario.open_line_capacitance
            g = physics.reflection(1 / (2j * np.pi * f * c))
            return "reflect", (g, g)
        z = self.position_impedance(self.closed, f, self.bias.load_voltage(self.now()))
        return "abcd", physics.shunt_abcd(z)

    def _path(self, f: np.ndarray) -> tuple[str, object]:
        """:meth:`cable_end_two_port` seen through the resistor boards, if fitted."""
        sc = self.scenario
        kind, value = self.cable_end_two_port(f)
        if self.resistors <= 0:
            return kind, value
        z_res = physics.resistor_board_impedance(
            f, self.resistors, sc.resistor_inductance, sc.resistor_capacitance
        )
        if kind == "reflect":
            board = physics.abcd_to_s(physics.series_abcd(z_res))
            g1, g2 = value  # type: ignore[misc]
            return kind, (physics.terminate(board, g1), physics.terminate(board, g2))
        r = physics.series_abcd(z_res)
        return kind, physics.cascade(r, value, r)  # type: ignore[arg-type]

    def true_s(self, f: np.ndarray) -> np.ndarray:
        """S-parameters (n, 2, 2) at the cable ends, resistor boards included, no error
        boxes and no noise: what a perfect calibration at the cable ends would show."""
        with self.lock:
            kind, value = self._path(f)
        if kind == "abcd":
            return physics.abcd_to_s(value)  # type: ignore[arg-type]
        s = np.zeros((len(f), 2, 2), dtype=complex)
        s[:, 0, 0], s[:, 1, 1] = value  # type: ignore[misc]
        return s

    def raw_s(self, f: np.ndarray, corrected: bool = False) -> np.ndarray:
        """Noise-free S-parameters at the analyser's ports (behind its error boxes), or
        at the cable ends with ``corrected``."""
        if corrected:
            return self.true_s(f)
        with self.lock:
            kind, value = self._path(f)
        s1, s2, a1, a2f = self.error_boxes(f)
        if kind == "abcd":
            t = physics.abcd_to_s(physics.cascade(a1, value, a2f))  # type: ignore[arg-type]
            return physics.apply_switch_terms(
                t,
                physics.switch_term(f, self.box_terms[1]),
                physics.switch_term(f, self.box_terms[0]),
            )
        g1, g2 = value  # type: ignore[misc]
        out = np.zeros((len(f), 2, 2), dtype=complex)
        out[:, 0, 0] = physics.terminate(s1, g1)
        out[:, 1, 1] = physics.terminate(s2, g2)
        return out

    def sweep(self, plan: SweepPlan) -> np.ndarray:
        """One sweep's measured S-parameters (n, 2, 2): the physics plus noise."""
        spec = self.scenario.analyzer
        floor, trace = physics.noise_levels(
            floor_db=spec.noise_floor_db,
            trace_noise_db=spec.trace_noise_db,
            if_bandwidth=plan.if_bandwidth,
            power_dbm=plan.power_dbm,
        )
        with self.lock:
            s = self.raw_s(plan.f, plan.corrected)
            if not plan.corrected:
                # The floor is specified relative to the raw through level.
                s1, s2, _, _ = self.error_boxes(plan.f)
                floor = floor * np.abs(s1[:, 1, 0] * s2[:, 0, 1])
            rng = self.sweep_rng(plan)
            s = physics.add_noise(s, rng, floor, trace)
            s = physics.add_glitches(s, rng, spec.glitch_rate, spec.glitch_size)
            return physics.add_unmeasured(s, rng, spec.unmeasured_rate, spec.unmeasured_sweep_rate)

    def sweep_rng(self, plan: SweepPlan) -> np.random.Generator:
        """The noise of one sweep, drawn from the seed, what is measured and how often.

        Not one stream for the bench's life: a run stopped and resumed on a new bench
        (same seed) then sees, for each sweep it takes again, the noise the uninterrupted
        run saw, so the two give the same raw data. The set-up is what the analyser
        looks at (cables, the closed position and its content, the single mounts, series
        resistors, transformer, bias set-point) and the sweep's settings; the n-th sweep
        of one set-up gets the n-th draw.
        """
        setup = (
            self.cables,
            self.closed,
            self.placements.get(self.closed) if self.closed is not None else None,
            tuple(sorted(getattr(self, "mounted", {}).items())),
            self.resistors,
            self.transformer,
            round(float(self.bias.setpoint), 9) if self.bias.output else 0.0,
            plan.power_dbm,
            plan.if_bandwidth,
            plan.corrected,
        )
        # The grid in single precision: a frequency computed on another processor may
        # differ in its last bits (numpy's vectorised log and power differ between
        # instruction sets), and the same sweep must draw the same noise on every machine.
        grid = np.ascontiguousarray(plan.f, dtype=np.float32).tobytes()
        key = zlib.crc32(repr(setup).encode() + grid)
        count = self._sweep_counts.get(key, 0)
        self._sweep_counts[key] = count + 1
        return np.random.default_rng([self.scenario.seed, 1, key, count])
