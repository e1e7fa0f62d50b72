"""Typed plan objects built from a schema-checked procedure, and the checks that relate values.

A :class:`Plan` is everything the runner needs, resolved to SI numbers: instruments,
sweep, fixture, calibration, analysis settings, bias limits, the parts with their
samples and bias points, the fixture batches, and the ordered list of :class:`Step`
whose ids the run store records so a stopped run resumes where it stopped.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

from bench.core.calibration import CalibrationKit
from bench.errors import ProcedureError
from bench.procedure.loader import ProcedureErrors, SourceDocument, load_document
from bench.procedure.schema import DEFAULT_STEPS, STEP_NAMES, parse_duration
from bench.results import PartSpec
from bench.units import QuantityError, format_si, parse_quantity

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

# Analyser limits used when the command map states none (a generic bench analyser).
DEFAULT_LIMITS = {"max_points": 10001, "min_hz": 1.0, "max_hz": 20e9, "power": (-60.0, 10.0)}
# The highest power a shunt-through set-up should put into the analyser's receivers
# without a statement from the procedure (common practice, no source: stay well below
# the usual +10 dBm receiver compression and damage levels).
DEFAULT_MAX_POWER_DBM = 10.0


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
        sweep = self.sweep.sweep_seconds() * self.sweep.averages
        total = 0.0
        handling = 20.0 if self.mode == "guided" else 0.0  # a person's hands per action
        for step in self.steps:
            if step.kind in SWEEP_STEPS:
                if step.method == GAIN_PHASE and self.gain_phase is not None:
                    total += self.gain_phase.sweep_seconds() * self.sweep.averages + 0.2
                else:
                    total += sweep + 0.2
                if step.kind == "calibrate" or self.mode == "guided":
                    total += handling
                if step.bias_v:
                    ramp = (
                        math.ceil(abs(step.bias_v) / self.bias.ramp_step) * self.bias.ramp_dwell_s
                    )
                    total += 2 * ramp + self.bias.settle_s + self.bias.discharge_s
            elif step.kind == "fit":
                total += 0.3 * sum(len(p.samples) * len(p.bias) for p in self.parts)
            else:
                total += 1.0
        total += handling * len(self.batches)
        return total


_MISSING = object()


def _lookup(data: Any, path: tuple[Any, ...]) -> Any:
    node = data
    for part in path:
        in_dict = isinstance(node, dict) and part in node
        if in_dict or (isinstance(node, list) and isinstance(part, int) and part < len(node)):
            node = node[part]
        else:
            return _MISSING
    return node


def _number(doc: SourceDocument, path: tuple[Any, ...], unit: str | None, default: Any) -> Any:
    node = _lookup(doc.data, path)
    if node is _MISSING:
        return default
    try:
        if unit == "duration":
            return parse_duration(node)
        return parse_quantity(node, unit)
    except QuantityError as exc:
        raise doc.error(
            path, str(exc).removeprefix("value: "), hint="write a number with its unit"
        ) from None


#: ``calibration.kit`` keys, their units and whether 0 is allowed (the load must be > 0).
_KIT_KEYS: tuple[tuple[str, str, bool], ...] = (
    ("short_inductance", "H", True),
    ("open_capacitance", "F", True),
    ("load_resistance", "ohm", False),
    ("load_inductance", "H", True),
    ("short_delay", "duration", True),
    ("open_delay", "duration", True),
    ("load_delay", "duration", True),
    ("through_delay", "duration", True),
)


def _kit(doc: SourceDocument, errors: list[ProcedureError]) -> CalibrationKit:
    """``calibration.kit`` as a :class:`CalibrationKit`; bad values are added to ``errors``
    (and left ideal) so every error of the file is reported at once."""
    values: dict[str, float] = {}
    for key, unit, zero_ok in _KIT_KEYS:
        path = ("calibration", "kit", key)
        try:
            value = _number(doc, path, unit, None)
        except ProcedureError as exc:
            errors.append(exc)
            continue
        if value is None:
            continue
        if not math.isfinite(value) or value < 0 or (value == 0 and not zero_ok):
            bound = ">= 0" if zero_ok else "> 0"
            shown = "s" if unit == "duration" else unit
            errors.append(
                doc.error(
                    path,
                    f"a kit's {key.replace('_', ' ')} must be {bound} {shown}, "
                    f"got {format_si(value, shown)}",
                    hint="copy the value from the calibration kit's data sheet; leave the "
                    "key out for an ideal standard",
                )
            )
            continue
        values[key] = value
    return CalibrationKit(**values)


def _fraction(doc: SourceDocument, path: tuple[Any, ...], default: float | None) -> float | None:
    node = _lookup(doc.data, path)
    if node is _MISSING:
        return default
    text = str(node).strip()
    try:
        value = float(text[:-1]) / 100.0 if text.endswith("%") else float(text)
    except ValueError:
        raise doc.error(
            path, f"cannot read {node!r} as a fraction", hint="write 0.1 or '10 %'"
        ) from None
    if not 0.0 < value < 1.0:
        raise doc.error(
            path,
            f"must lie between 0 and 1 (0 and 100 %), found {node!r}",
            hint="write 0.1 or '10 %'",
        )
    return value


def analyzer_limits(command_map: str) -> dict[str, Any]:
    """Limits the analyser's command map states (points, frequency, power, IF bandwidth)."""
    limits = dict(DEFAULT_LIMITS)
    try:
        from drivers.command_map import load_command_map

        stated = load_command_map(command_map).limits
    except Exception:  # the map is checked again, with its own message, when the run opens it
        return limits
    limits["max_points"] = int(stated.points.max)
    limits["min_hz"] = stated.frequency_hz.min
    limits["max_hz"] = stated.frequency_hz.max
    limits["power"] = (stated.power_dbm.min, stated.power_dbm.max)
    limits["ifbw"] = (stated.ifbw_hz.min, stated.ifbw_hz.max)
    return limits


def _command_map_errors(
    doc: SourceDocument, instruments: dict[str, Instrument]
) -> list[ProcedureError]:
    """Each named command map must load and validate, by ``check`` time.

    The message is the map loader's, which names the file and key and never quotes the
    file's contents (a mistyped path may point at any file).
    """
    from drivers.command_map import load_command_map
    from drivers.errors import CommandMapError
    from drivers.instrument_maps import load_instrument_map

    loaders = {
        "analyzer": load_command_map,
        "switch": lambda name: load_instrument_map("switch", name),
        "dc_source": lambda name: load_instrument_map("dc_source", name),
        "gain_phase": load_command_map,
    }
    errors = []
    for role, load in loaders.items():
        name = instruments[role].command_map
        if name == "default":
            continue
        try:
            load(name)
        except CommandMapError as exc:
            errors.append(
                doc.error(
                    ("instruments", role, "command_map"),
                    f"the command map does not load: {str(exc).splitlines()[0]}",
                    hint=exc.hint or "give a shipped map's name or a map file that validates",
                )
            )
    return errors


def build_plan(doc: SourceDocument) -> Plan:
    """Turn a schema-checked document into a :class:`Plan`, checking values against each other.

    Raises :class:`ProcedureErrors` listing every problem found, each with file:line and key.
    """
    errors: list[ProcedureError] = []
    data = doc.data

    def attempt(fn: Any, *args: Any) -> Any:
        try:
            return fn(*args)
        except ProcedureError as exc:
            errors.append(exc)
            return None

    inst_data = data.get("instruments", {})
    instruments: dict[str, Instrument] = {}
    for role in ("analyzer", "switch", "dc_source", "bench", "gain_phase"):
        entry = inst_data.get(role, {})
        instruments[role] = Instrument(
            role=role,
            resource=entry.get("resource", ""),
            command_map=entry.get(
                "command_map", "gain_phase" if role == "gain_phase" else "default"
            ),
            timeout_s=attempt(_number, doc, ("instruments", role, "timeout"), "duration", 10.0)
            or 10.0,
            max_voltage=attempt(_number, doc, ("instruments", role, "max_voltage"), "V", None),
            max_current=attempt(_number, doc, ("instruments", role, "max_current"), "A", None),
            max_power=attempt(_number, doc, ("instruments", role, "max_power"), "dBm", None),
        )

    errors.extend(_command_map_errors(doc, instruments))

    s = data["sweep"]
    sweep = Sweep(
        start=attempt(_number, doc, ("sweep", "start"), "Hz", None) or 0.0,
        stop=attempt(_number, doc, ("sweep", "stop"), "Hz", None) or 0.0,
        points=int(s["points"]),
        spacing=s.get("spacing", "log"),
        if_bandwidth=attempt(_number, doc, ("sweep", "if_bandwidth"), "Hz", 1e3) or 1e3,
        power=attempt(_number, doc, ("sweep", "power"), "dBm", 0.0) or 0.0,
        averages=int(s.get("averages", 1)),
    )
    limits = analyzer_limits(instruments["analyzer"].command_map)
    if sweep.start <= 0:
        errors.append(doc.error(("sweep", "start"), "must be above 0 Hz", hint="e.g. '100 Hz'"))
    if sweep.start >= sweep.stop:
        errors.append(
            doc.error(
                ("sweep", "stop"),
                f"stop ({format_si(sweep.stop, 'Hz')}) must be above "
                f"start ({format_si(sweep.start, 'Hz')})",
                hint="swap the two values or raise stop",
            )
        )
    if sweep.start > 0 and sweep.start < limits["min_hz"]:
        errors.append(
            doc.error(
                ("sweep", "start"),
                f"{format_si(sweep.start, 'Hz')} is below the analyser's lowest frequency "
                f"{format_si(limits['min_hz'], 'Hz')}",
                hint="raise start",
            )
        )
    if sweep.stop > limits["max_hz"]:
        errors.append(
            doc.error(
                ("sweep", "stop"),
                f"{format_si(sweep.stop, 'Hz')} is above the analyser's highest frequency "
                f"{format_si(limits['max_hz'], 'Hz')}",
                hint="lower stop",
            )
        )
    if sweep.points > limits["max_points"]:
        errors.append(
            doc.error(
                ("sweep", "points"),
                f"{sweep.points} points is more than the analyser allows ({limits['max_points']})",
                hint=f"use at most {limits['max_points']} points",
            )
        )
    low, high = limits["power"]
    max_power = instruments["analyzer"].max_power
    ceiling = min(high, max_power if max_power is not None else DEFAULT_MAX_POWER_DBM)
    if not low <= sweep.power <= ceiling:
        errors.append(
            doc.error(
                ("sweep", "power"),
                f"{sweep.power:g} dBm is outside the allowed {low:g} … {ceiling:g} dBm",
                hint="choose a source power inside the analyser's and the procedure's limits",
            )
        )
    ifbw_low, ifbw_high = limits.get("ifbw", (1e-3, 1e9))
    if not ifbw_low <= sweep.if_bandwidth <= ifbw_high:
        errors.append(
            doc.error(
                ("sweep", "if_bandwidth"),
                f"{format_si(sweep.if_bandwidth, 'Hz')} is outside the analyser's "
                f"{format_si(ifbw_low, 'Hz')} … {format_si(ifbw_high, 'Hz')}",
                hint="choose an IF bandwidth the analyser offers",
            )
        )

    f = data.get("fixture", {})
    positions = int(f.get("positions", 1))
    use_positions = tuple(f.get("use_positions", range(1, positions + 1)))
    for i, pos in enumerate(use_positions):
        if not 1 <= pos <= positions:
            errors.append(
                doc.error(
                    ("fixture", "use_positions", i),
                    f"position {pos} is not on a {positions}-position fixture",
                    hint=f"use positions 1 to {positions}",
                )
            )
    series_r = attempt(_number, doc, ("fixture", "series_resistor"), "ohm", 0.0) or 0.0
    if series_r < 0:
        errors.append(
            doc.error(("fixture", "series_resistor"), "cannot be negative", hint="0 or more")
        )
    z0 = attempt(_number, doc, ("fixture", "z0"), "ohm", 50.0) or 50.0
    fixture = Fixture(
        positions=positions,
        use_positions=use_positions,
        series_r=series_r,
        isolation_transformer=bool(f.get("isolation_transformer", False)),
        bias_tee_rating=attempt(_number, doc, ("fixture", "bias_tee_rating"), "V", None),
        dc_block_rating=attempt(_number, doc, ("fixture", "dc_block_rating"), "V", None),
        z0=z0,
    )

    c = data.get("calibration", {})
    reuse = c.get("reuse", {})
    calibration = Calibration(
        method=c.get("method", "through"),
        crossover_hz=attempt(_number, doc, ("calibration", "crossover"), "Hz", None),
        reuse_run=reuse.get("run"),
        max_age_s=attempt(_number, doc, ("calibration", "reuse", "max_age"), "duration", 28800.0)
        or 28800.0,
        kit=_kit(doc, errors),
    )
    if calibration.method == "hybrid":
        if calibration.crossover_hz is None:
            errors.append(
                doc.error(
                    ("calibration", "method"),
                    "a hybrid calibration needs a crossover frequency",
                    hint="add 'crossover: 1 MHz' under calibration",
                )
            )
        elif not sweep.start < calibration.crossover_hz < sweep.stop:
            errors.append(
                doc.error(
                    ("calibration", "crossover"),
                    f"{calibration.crossover_hz:g} Hz is not inside the sweep",
                    hint="choose a crossover between sweep.start and sweep.stop",
                )
            )

    analysis = Analysis(
        noise_floor_db=attempt(_number, doc, ("analysis", "noise_floor"), "dB", -100.0) or -100.0,
        trace_noise_db=attempt(_number, doc, ("analysis", "trace_noise"), "dB", 0.01) or 0.01,
        tolerance=attempt(_fraction, doc, ("analysis", "tolerance"), 0.1) or 0.1,
        mount=data.get("analysis", {}).get("mount", "measured"),
    )
    bias = Bias(
        ramp_step=attempt(_number, doc, ("bias", "ramp_step"), "V", 0.5) or 0.5,
        ramp_dwell_s=attempt(_number, doc, ("bias", "ramp_dwell"), "duration", 0.05) or 0.0,
        settle_s=attempt(_number, doc, ("bias", "settle"), "duration", 0.5) or 0.0,
        discharge_s=attempt(_number, doc, ("bias", "discharge"), "duration", 1.0) or 0.0,
        current_limit=attempt(_number, doc, ("bias", "current_limit"), "A", 0.01) or 0.01,
    )
    if bias.ramp_step <= 0:
        errors.append(doc.error(("bias", "ramp_step"), "must be above 0 V", hint="e.g. 0.5 V"))

    parts: list[PartPlan] = []
    names: set[str] = set()
    for i, p in enumerate(data["parts"]):
        kind = p["kind"]
        if p["name"] in names:
            errors.append(
                doc.error(
                    ("parts", i, "name"), f"part {p['name']!r} is listed twice", hint="merge them"
                )
            )
        names.add(p["name"])
        nominal = attempt(_number, doc, ("parts", i, "nominal"), NOMINAL_UNIT[kind], None)
        if nominal is not None and nominal <= 0:
            errors.append(
                doc.error(("parts", i, "nominal"), "must be above 0", hint="give the value")
            )
        nominal_at = attempt(_number, doc, ("parts", i, "nominal_at"), "Hz", None)
        if kind == "bead" and nominal is not None and nominal_at is None:
            errors.append(
                doc.error(
                    ("parts", i, "nominal"),
                    "a bead's nominal impedance needs its frequency",
                    hint="add 'nominal_at: 100 MHz'",
                )
            )
        rated = attempt(_number, doc, ("parts", i, "rated_voltage"), "V", None)
        spec = PartSpec(
            name=p["name"],
            kind=kind,
            nominal=nominal,
            tolerance=attempt(_fraction, doc, ("parts", i, "tolerance"), None),
            nominal_at_hz=nominal_at,
            model=p.get("model", DEFAULT_MODEL[kind]),
            rated_voltage=rated,
            description=p.get("description", ""),
        )
        samples_value = p.get("samples", 1)
        if isinstance(samples_value, int):
            samples = tuple(f"s{k}" for k in range(1, samples_value + 1))
        else:
            samples = tuple(samples_value)
        bias_points: list[float] = []
        tags: dict[str, int] = {}
        for j, _ in enumerate(p.get("bias", [0.0])):
            value = attempt(_number, doc, ("parts", i, "bias", j), "V", 0.0)
            value = 0.0 if value is None else value
            # Equal after unit parsing ([2 V, 2000 mV]), or equal in step ids and file
            # names (bias_tag keeps six digits): one step, so one entry.
            tag = bias_tag(value)
            if tag in tags:
                errors.append(
                    doc.error(
                        ("parts", i, "bias", j),
                        f"the same bias point as bias[{tags[tag]}] ({tag})",
                        hint="remove the repeated point",
                    )
                )
                continue
            tags[tag] = j
            bias_points.append(value)
        stated = p.get("method", DEFAULT_METHOD[kind])
        methods = (stated,) if isinstance(stated, str) else tuple(stated)
        if kind not in ("mlcc", "bulk"):
            bias_points_checked: list[float] = []  # _check_bias refuses them already
        else:
            bias_points_checked = bias_points
        _check_methods(doc, i, methods, bias_points_checked, series_r, errors, "method" in p)
        part = PartPlan(spec=spec, samples=samples, bias=tuple(bias_points), methods=methods)
        parts.append(part)

    plan_parts = tuple(parts)
    used = {m for part in plan_parts for m in part.methods}
    gain_phase = _gain_phase(doc, plan_parts, instruments, errors)
    calibration = Calibration(
        **{
            **calibration.__dict__,
            "two_port": bool(used - {"reflection", GAIN_PHASE}) or not used,
            "one_port": "reflection" in used,
        }
    )
    steps_list = tuple(data.get("steps", DEFAULT_STEPS))
    _check_steps(doc, steps_list, errors)
    mode = data.get("mode", "guided")

    batches = _batches(plan_parts, fixture.use_positions)
    provisional = Plan(
        name=data["name"],
        source=doc.path,
        description=data.get("description", ""),
        mode=mode,
        instruments=instruments,
        sweep=sweep,
        fixture=fixture,
        calibration=calibration,
        analysis=analysis,
        bias=bias,
        parts=plan_parts,
        batches=batches,
        steps=(),
        step_names=steps_list,
        gain_phase=gain_phase,
    )
    _check_bias(doc, provisional, errors)
    if errors:
        raise ProcedureErrors(errors)
    steps = _steps(provisional)
    resolved = _resolved(provisional)
    plan = Plan(**{**provisional.__dict__, "steps": steps, "resolved": resolved})
    from bench.procedure.outputs import output_errors

    clashes = output_errors(doc, plan)
    if clashes:
        raise ProcedureErrors(clashes)
    return plan


def _check_steps(doc: SourceDocument, steps: tuple[str, ...], errors: list[ProcedureError]) -> None:
    order = {name: i for i, name in enumerate(STEP_NAMES)}
    for i in range(1, len(steps)):
        if order[steps[i]] < order[steps[i - 1]]:
            errors.append(
                doc.error(
                    ("steps", i),
                    f"'{steps[i]}' cannot come after '{steps[i - 1]}'",
                    hint=f"keep the order {', '.join(STEP_NAMES)}",
                )
            )
    needs = {
        "mount_open": "calibrate",
        "mount_short": "calibrate",
        "measure": "calibrate",
        "fit": "measure",
        "export": "fit",
        "report": "fit",
    }
    for i, name in enumerate(steps):
        if name in needs and needs[name] not in steps:
            errors.append(
                doc.error(
                    ("steps", i),
                    f"'{name}' needs a '{needs[name]}' step",
                    hint=f"add '{needs[name]}' before it",
                )
            )


def _check_bias(doc: SourceDocument, plan: Plan, errors: list[ProcedureError]) -> None:
    max_current = plan.instruments["dc_source"].max_current
    if plan.biased and max_current is not None and plan.bias.current_limit > max_current:
        errors.append(
            doc.error(
                ("bias", "current_limit"),
                f"the current limit {format_si(plan.bias.current_limit, 'A')} is above "
                f"dc_source.max_current {format_si(max_current, 'A')}",
                hint="lower bias.current_limit, or state the source's real maximum",
            )
        )
    for i, part in enumerate(plan.parts):
        if not any(v != 0.0 for v in part.bias):
            continue
        if part.spec.kind != "mlcc" and part.spec.kind != "bulk":
            errors.append(
                doc.error(
                    ("parts", i, "bias"),
                    f"DC bias is only applied to capacitors, not a {part.spec.kind}",
                    hint="remove the bias points of this part",
                )
            )
            continue
        missing = []
        if part.spec.rated_voltage is None:
            missing.append((("parts", i, "rated_voltage"), "the part's rated_voltage"))
        if plan.fixture.bias_tee_rating is None:
            missing.append((("fixture", "bias_tee_rating"), "fixture.bias_tee_rating"))
        if plan.fixture.dc_block_rating is None:
            missing.append((("fixture", "dc_block_rating"), "fixture.dc_block_rating"))
        if plan.instruments["dc_source"].max_voltage is None:
            missing.append((("instruments", "dc_source", "max_voltage"), "dc_source.max_voltage"))
        if plan.instruments["dc_source"].max_current is None:
            # The current limit needs a bound as the voltage has: a source that can
            # deliver amperes would deliver them into a shorted or failing part.
            missing.append((("instruments", "dc_source", "max_current"), "dc_source.max_current"))
        if missing:
            for _, what in missing:
                errors.append(
                    doc.error(
                        ("parts", i, "bias"),
                        f"a biased part needs {what} so the bias can be bounded",
                        hint=f"state {what}",
                    )
                )
            continue
        limit = plan.bias_limit(part)
        for j, value in enumerate(part.bias):
            if value < 0:
                errors.append(
                    doc.error(
                        ("parts", i, "bias", j),
                        f"negative bias {value:g} V is not supported",
                        hint="use 0 V or above",
                    )
                )
            elif value > limit:
                errors.append(
                    doc.error(
                        ("parts", i, "bias", j),
                        f"{value:g} V is above the limit {limit:g} V "
                        "(the lowest of the part rating, bias tee, DC blocks and source maximum)",
                        hint=f"use at most {limit:g} V",
                    )
                )


def _check_methods(
    doc: SourceDocument,
    i: int,
    methods: tuple[str, ...],
    bias: list[float],
    series_r: float,
    errors: list[ProcedureError],
    stated: bool = True,
) -> None:
    """A part's methods against its bias points and the port resistors."""
    if GAIN_PHASE in methods and any(v != 0.0 for v in bias):
        errors.append(
            doc.error(
                ("parts", i, "method"),
                "the gain-phase analyser measures a part at 0 V only (no bias path)",
                hint="remove the bias points, or measure the biased part shunt-through alone",
            )
        )
    single = [m for m in methods if m in SINGLE_MOUNT_METHODS]
    if not single:
        return
    named = single[0] if stated else f"{single[0]} (the default for this kind of part)"
    where = ("parts", i, "method") if stated else ("parts", i, "kind")
    if any(v != 0.0 for v in bias):
        errors.append(
            doc.error(
                where,
                f"DC bias reaches a part only on the shunt-through fixture, not by {named}",
                hint="measure a biased part shunt-through, or remove its bias points",
            )
        )
    if series_r > 0:
        errors.append(
            doc.error(
                where,
                f"{named} is measured without port series resistors, but "
                f"fixture.series_resistor is {format_si(series_r, 'Ω')}",
                hint="add 'method: shunt-through' to measure the part on the resistor "
                "board, or use a separate procedure for the series-through mount",
            )
        )


def _batches(
    parts: tuple[PartPlan, ...], positions: tuple[int, ...]
) -> tuple[tuple[Placement, ...], ...]:
    batches: list[tuple[Placement, ...]] = []
    current: list[Placement] = []
    for part in parts:
        if not set(FIXTURE_METHODS) & set(part.methods):
            continue
        for sample in part.samples:
            if len(current) == len(positions):
                batches.append(tuple(current))
                current = []
            current.append(Placement(part.name, sample, positions[len(current)], len(batches)))
    if current:
        batches.append(tuple(current))
    return tuple(batches)


def _gain_phase(
    doc: SourceDocument,
    parts: tuple[PartPlan, ...],
    instruments: dict[str, Instrument],
    errors: list[ProcedureError],
) -> GainPhaseSweep | None:
    """The ``gain_phase`` section, checked against its analyser's command map; None when
    no part is measured with it."""
    users = [i for i, p in enumerate(parts) if GAIN_PHASE in p.methods]
    g = doc.data.get("gain_phase")
    if not users:
        return None
    if g is None:
        errors.append(
            doc.error(
                ("parts", users[0], "method"),
                "a part measured gain-phase needs the gain-phase analyser's sweep and set-up",
                hint="add a 'gain_phase:' section with start, stop, points and reference_resistor",
            )
        )
        return None

    def num(key: str, unit: str, default: Any) -> Any:
        try:
            return _number(doc, ("gain_phase", key), unit, default)
        except ProcedureError as exc:
            errors.append(exc)
            return default

    sweep = GainPhaseSweep(
        start=num("start", "Hz", 0.0) or 0.0,
        stop=num("stop", "Hz", 0.0) or 0.0,
        points=int(g["points"]),
        reference_resistor=num("reference_resistor", "ohm", 0.0) or 0.0,
        spacing=g.get("spacing", "log"),
        bandwidth=num("bandwidth", "Hz", 100.0) or 100.0,
        level=num("level", "dBm", 0.0) or 0.0,
        input_resistance=num("input_resistance", "ohm", None),
        input_capacitance=num("input_capacitance", "F", 0.0) or 0.0,
        noise_floor_db=num("noise_floor", "dB", -110.0) or -110.0,
    )
    if sweep.reference_resistor <= 0:
        errors.append(
            doc.error(
                ("gain_phase", "reference_resistor"),
                "must be above 0 Ω",
                hint="give the set-up's reference resistor, e.g. 1 ohm",
            )
        )
    limits = analyzer_limits(instruments["gain_phase"].command_map)
    if not limits["min_hz"] <= sweep.start < sweep.stop <= limits["max_hz"]:
        errors.append(
            doc.error(
                ("gain_phase", "start"),
                f"{format_si(sweep.start, 'Hz')} to {format_si(sweep.stop, 'Hz')} is not an "
                f"increasing band inside the analyser's {format_si(limits['min_hz'], 'Hz')} "
                f"… {format_si(limits['max_hz'], 'Hz')}",
                hint="choose start below stop, both inside the gain-phase analyser's range",
            )
        )
    if sweep.points > limits["max_points"]:
        errors.append(
            doc.error(
                ("gain_phase", "points"),
                f"{sweep.points} points is more than the analyser allows ({limits['max_points']})",
                hint=f"use at most {limits['max_points']} points",
            )
        )
    low, high = limits["power"]
    if not low <= sweep.level <= high:
        errors.append(
            doc.error(
                ("gain_phase", "level"),
                f"{sweep.level:g} dBm is outside the analyser's {low:g} … {high:g} dBm",
                hint="choose a source level the gain-phase analyser offers",
            )
        )
    ifbw_low, ifbw_high = limits.get("ifbw", (1e-3, 1e9))
    if not ifbw_low <= sweep.bandwidth <= ifbw_high:
        errors.append(
            doc.error(
                ("gain_phase", "bandwidth"),
                f"{format_si(sweep.bandwidth, 'Hz')} is outside the analyser's "
                f"{format_si(ifbw_low, 'Hz')} … {format_si(ifbw_high, 'Hz')}",
                hint="choose a receiver bandwidth the gain-phase analyser offers",
            )
        )
    return sweep


def bias_tag(volts: float) -> str:
    """``0.0`` -> ``0V``, ``2.5`` -> ``2.5V`` (for step ids and file names)."""
    return f"{volts:g}V"


def _steps(plan: Plan) -> tuple[Step, ...]:
    steps: list[Step] = []
    names = plan.step_names
    if "calibrate" in names:
        for std in plan.calibration.standards:
            steps.append(Step(id=f"calibrate/{std}", kind="calibrate", standard=std))
    used = sorted({p.position for batch in plan.batches for p in batch})
    gained = sorted(
        {
            p.position
            for batch in plan.batches
            for p in batch
            if GAIN_PHASE in plan.part(p.part).methods
        }
    )
    for kind in ("mount_open", "mount_short"):
        if kind in names:
            for pos in used:
                steps.append(Step(id=f"{kind}/p{pos}", kind=kind, position=pos))
            # The gain-phase analyser's own sweep of each strapped position it uses.
            if kind == "mount_short":
                for pos in gained:
                    steps.append(
                        Step(
                            id=f"mount_short/{GAIN_PHASE}/p{pos}",
                            kind=kind,
                            position=pos,
                            method=GAIN_PHASE,
                        )
                    )
    if "measure" in names:
        for batch in plan.batches:
            for placement in batch:
                part = plan.part(placement.part)
                if GAIN_PHASE in part.methods:
                    # Swept where it sits, before the network analyser's sweeps.
                    steps.append(
                        Step(
                            id=f"measure/{placement.part}/{placement.sample}/{GAIN_PHASE}",
                            kind="measure",
                            position=placement.position,
                            placement=placement,
                            method=GAIN_PHASE,
                        )
                    )
                if SHUNT not in part.methods:
                    continue
                for volts in part.bias:
                    steps.append(
                        Step(
                            id=f"measure/{placement.part}/{placement.sample}/{bias_tag(volts)}",
                            kind="measure",
                            position=placement.position,
                            placement=placement,
                            bias_v=volts,
                        )
                    )
    # Each single mount in turn: its own captures (the empty gap or open, then the strap),
    # then every sample measured on it, one at a time.
    for method in SINGLE_MOUNT_METHODS:
        parts = [p for p in plan.parts if method in p.methods]
        if not parts:
            continue
        for kind in ("mount_open", "mount_short"):
            if "mount_short" in names or "mount_open" in names:
                steps.append(Step(id=f"{kind}/{method}", kind=kind, method=method))
        if "measure" in names:
            for part in parts:
                for sample in part.samples:
                    steps.append(
                        Step(
                            id=f"measure/{part.name}/{sample}/{method}",
                            kind="measure",
                            placement=Placement(part.name, sample, 0, -1),
                            method=method,
                        )
                    )
    for name in ("fit", "export", "report"):
        if name in names:
            steps.append(Step(id=name, kind=name))
    return tuple(steps)


def _resolved(plan: Plan) -> dict[str, Any]:
    """The plan in plain SI numbers, as stored in the run manifest."""
    extra = {"gain_phase": asdict(plan.gain_phase)} if plan.gain_phase is not None else {}
    return {
        **extra,
        "name": plan.name,
        "source": plan.source,
        "description": plan.description,
        "mode": plan.mode,
        "instruments": {k: asdict(v) for k, v in plan.instruments.items()},
        "sweep": asdict(plan.sweep),
        "fixture": asdict(plan.fixture),
        "calibration": asdict(plan.calibration),
        "analysis": asdict(plan.analysis),
        "bias": asdict(plan.bias),
        "parts": [
            {
                **asdict(p.spec),
                "samples": list(p.samples),
                "bias": list(p.bias),
                "methods": list(p.methods),
            }
            for p in plan.parts
        ],
        "steps": list(plan.step_names),
    }


def load_plan(path: str | Path) -> Plan:
    """Read, validate and resolve a procedure file (nothing is touched on the bench)."""
    doc = load_document(path)
    return build_plan(doc)


__all__ = [
    "Analysis",
    "Bias",
    "Calibration",
    "Fixture",
    "GainPhaseSweep",
    "Instrument",
    "PartPlan",
    "Placement",
    "Plan",
    "ProcedureErrors",
    "Step",
    "Sweep",
    "bias_tag",
    "build_plan",
    "load_plan",
]


def plan_from_text(text: str, source: str) -> Plan:
    """Validate and resolve procedure ``text`` (as stored in a run folder) named ``source``."""
    from bench.procedure.loader import parse_text, validate_document

    doc = parse_text(text, source)
    errors = validate_document(doc)
    if errors:
        raise ProcedureErrors(errors)
    return build_plan(doc)
