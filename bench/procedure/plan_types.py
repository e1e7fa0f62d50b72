"""The typed plan: what a schema-checked procedure resolves to, in SI numbers.

A :class:`Plan` is everything the runner needs: instruments, sweep, fixture, calibration,
analysis settings, bias limits, the parts with their samples and bias points, the fixture
batches, and the ordered list of :class:`Step` whose ids the run store records so a
stopped run resumes where it stopped. Built by :func:`bench.procedure.plan.build_plan`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from bench.core.calibration import CalibrationKit
from bench.results import PartSpec

NOMINAL_UNIT = {"mlcc": "F", "bulk": "F", "inductor": "H", "bead": "ohm"}
DEFAULT_MODEL = {"mlcc": "auto", "bulk": "auto", "inductor": "auto", "bead": "auto"}
#: How each kind is measured unless the part says otherwise: low impedances shunt across
#: the line, high ones in series with it.
DEFAULT_METHOD = {
    "mlcc": "shunt-through",
    "bulk": "shunt-through",
    "inductor": "series-through",
    "bead": "series-through",
}
SHUNT = "shunt-through"
#: Measured by a low-frequency gain-phase analyser on a fixture position (0 V only).
GAIN_PHASE = "gain-phase"
#: Methods whose parts sit in the switched fixture's positions.
FIXTURE_METHODS = (SHUNT, GAIN_PHASE)
#: Methods measured on a single hand-loaded mount (one sample at a time, no switch).
SINGLE_MOUNT_METHODS = ("series-through", "reflection")

#: Step kinds that take sweeps (the rest compute from stored ones).
SWEEP_STEPS = ("calibrate", "mount_open", "mount_short", "measure")


@dataclass(frozen=True)
class Instrument:
    """One instrument as the procedure names it; ``resource`` may be empty until --sim fills it."""

    role: str
    resource: str = ""
    command_map: str = "default"
    timeout_s: float = 10.0
    max_voltage: float | None = None
    max_current: float | None = None
    max_power: float | None = None


@dataclass(frozen=True)
class Sweep:
    start: float
    stop: float
    points: int
    spacing: str = "log"
    if_bandwidth: float = 1e3
    power: float = 0.0
    averages: int = 1

    def sweep_seconds(self) -> float:
        """Rough sweep time (s): 1.2/IFBW per point plus set-up (common practice, no source)."""
        return self.points * 1.2 / self.if_bandwidth + 0.05


@dataclass(frozen=True)
class GainPhaseSweep:
    """The gain-phase analyser's own sweep and its set-up: the reference resistor between
    receiver A's node and the part, receiver B's input (``input_resistance`` None: ideal),
    and the ratio's noise floor relative to a ratio of 1 (dB)."""

    start: float
    stop: float
    points: int
    reference_resistor: float
    spacing: str = "log"
    bandwidth: float = 100.0
    level: float = 0.0
    input_resistance: float | None = None
    input_capacitance: float = 0.0
    noise_floor_db: float = -110.0

    def sweep_seconds(self) -> float:
        """Rough sweep time (s): three periods of the lower of each point's frequency and
        the bandwidth, plus set-up (common practice, no source)."""
        import numpy as np

        if self.spacing == "log":
            f = np.geomspace(self.start, self.stop, self.points)
        else:
            f = np.linspace(self.start, self.stop, self.points)
        return float(np.sum(3.0 / np.minimum(f, self.bandwidth))) + 0.05

    def input_impedance(self, f: Any) -> Any:
        """Receiver B's input impedance (Ω) at ``f`` (Hz); None for an ideal input."""
        import numpy as np

        if self.input_resistance is None and not self.input_capacitance:
            return None
        g = 0.0 if self.input_resistance is None else 1.0 / self.input_resistance
        return 1.0 / (g + 2j * np.pi * np.asarray(f, dtype=float) * self.input_capacitance)


@dataclass(frozen=True)
class Fixture:
    positions: int = 1
    use_positions: tuple[int, ...] = (1,)
    series_r: float = 0.0
    isolation_transformer: bool = False
    bias_tee_rating: float | None = None
    dc_block_rating: float | None = None
    z0: float = 50.0


@dataclass(frozen=True)
class Calibration:
    """``kit``: the standards' definitions (:class:`bench.core.calibration.CalibrationKit`,
    ideal flush standards unless the procedure gives ``calibration.kit``)."""

    method: str = "through"
    crossover_hz: float | None = None
    reuse_run: str | None = None
    max_age_s: float = 8 * 3600.0
    kit: CalibrationKit = field(default_factory=CalibrationKit)
    #: Whether a two-port method (shunt- or series-through) is used: it needs the through.
    two_port: bool = True
    #: Whether reflection is used: it needs short, open and load on port 1.
    one_port: bool = False

    @property
    def standards(self) -> tuple[str, ...]:
        """Standards to sweep: the through for the two-port methods (with short, open and
        load for SOLT and hybrid), short, open and load for reflection."""
        two = ("through",) if self.method == "through" else ("short", "open", "load", "through")
        if not self.two_port:
            return ("short", "open", "load")
        if self.one_port and "short" not in two:
            return ("short", "open", "load", *two)
        return two


@dataclass(frozen=True)
class Analysis:
    noise_floor_db: float = -100.0
    trace_noise_db: float = 0.01
    tolerance: float = 0.1
    mount: str = "measured"


@dataclass(frozen=True)
class Bias:
    ramp_step: float = 0.5
    ramp_dwell_s: float = 0.05
    settle_s: float = 0.5
    discharge_s: float = 1.0
    current_limit: float = 0.01


@dataclass(frozen=True)
class PartPlan:
    spec: PartSpec
    samples: tuple[str, ...]
    bias: tuple[float, ...] = (0.0,)
    #: How the part is measured, in the procedure's order (several are stitched).
    methods: tuple[str, ...] = (SHUNT,)

    @property
    def name(self) -> str:
        return self.spec.name


@dataclass(frozen=True)
class Placement:
    """A sample in a fixture position, in a batch of parts loaded together (on a single
    mount, series-through or reflection: position 0 and batch -1)."""

    part: str
    sample: str
    position: int
    batch: int


@dataclass(frozen=True)
class Step:
    """One resumable unit of work.

    ``kind`` is ``calibrate`` (one standard), ``mount_open`` or ``mount_short`` (one position,
    or a single mount's empty gap/open and strap), ``measure`` (one sample at one bias point,
    or on a single mount), ``fit``, ``export`` or ``report``. ``method`` says which mount.
    """

    id: str
    kind: str
    standard: str | None = None
    position: int | None = None
    placement: Placement | None = None
    bias_v: float = 0.0
    method: str = SHUNT


@dataclass(frozen=True)
class Plan:
    name: str
    source: str
    description: str
    mode: str
    instruments: dict[str, Instrument]
    sweep: Sweep
    fixture: Fixture
    calibration: Calibration
    analysis: Analysis
    bias: Bias
    parts: tuple[PartPlan, ...]
    batches: tuple[tuple[Placement, ...], ...]
    steps: tuple[Step, ...]
    step_names: tuple[str, ...]
    resolved: dict[str, Any] = field(default_factory=dict)
    #: The gain-phase analyser's sweep and set-up, when a part is measured with it.
    gain_phase: GainPhaseSweep | None = None

    def part(self, name: str) -> PartPlan:
        for part in self.parts:
            if part.name == name:
                return part
        raise KeyError(name)

    @property
    def biased(self) -> bool:
        return any(v != 0.0 for p in self.parts for v in p.bias)

    def bias_limit(self, part: PartPlan) -> float:
        """Highest bias (V) allowed on ``part``: min of its rating, bias tee, DC blocks, source."""
        ratings = [
            part.spec.rated_voltage,
            self.fixture.bias_tee_rating,
            self.fixture.dc_block_rating,
            self.instruments["dc_source"].max_voltage,
        ]
        known = [r for r in ratings if r is not None]
        return min(known) if known else 0.0

    def estimated_seconds(self) -> float:
        """Rough duration of the whole plan (s), for ``zbench check`` and progress bars."""
        from bench.procedure.plan_steps import estimated_seconds

        return estimated_seconds(self)


def bias_tag(volts: float) -> str:
    """``0.0`` -> ``0V``, ``2.5`` -> ``2.5V`` (for step ids and file names)."""
    return f"{volts:g}V"
