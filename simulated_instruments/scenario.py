"""Scenarios: YAML descriptions of invented benches, validated strictly into typed objects.

A scenario names the analyser's limits and noise, the cables, transformer and series
resistor boards, the calibration kit, the fixture (one shunt mount per position of the
switched board, plus one series-through and one reflection mount the cables can be
moved to), the DC source, the parts of the lot with their samples, the starting state and faults.
``load_scenario`` accepts a name under ``simulated_instruments/scenarios/``, a path or a
mapping. Every object is closed (unknown keys are errors naming the key).
"""

from __future__ import annotations

import zlib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import jsonschema
import numpy as np

from bench.errors import InputError
from bench.units import QuantityError, parse_quantity
from drivers.safe_yaml import YamlRefusedError, load_text, read_text
from simulated_instruments.parts import (
    DEFAULT_SPREAD,
    Part,
    PartError,
    part_from_dict,
    with_spread,
)
from simulated_instruments.physics import CalibrationKit, Mount

SCENARIO_DIR = Path(__file__).parent / "scenarios"

# The analyser's command dialects; each has a command map of the same name in
# drivers/command_maps/.
ANALYZER_DIALECTS = ("default", "meas_stim")
# How deep ``extends:`` may chain (a scenario extending one that extends another...).
MAX_EXTENDS = 4

_Q = {"type": ["number", "string"]}


def _obj(properties: dict[str, Any], required: tuple[str, ...] = ()) -> dict[str, Any]:
    return {
        "type": "object",
        "additionalProperties": False,
        "properties": properties,
        "required": list(required),
    }


def _range() -> dict[str, Any]:
    return _obj({"min": _Q, "max": _Q}, ("min", "max"))


_FAULT_SCHEMA = _obj(
    {
        "type": {"enum": ["delay", "drop", "corrupt_block", "error", "missing"]},
        "instrument": {"enum": ["analyzer", "switch", "dc_source", "bench", "gain_phase"]},
        "seconds": _Q,
        "count": {"type": "integer", "minimum": 0},
        "after": {"type": "integer", "minimum": 0},
        "code": {"type": "integer"},
        "text": {"type": "string"},
        "position": {"type": "integer", "minimum": 1},
    },
    ("type",),
)

SCHEMA: dict[str, Any] = _obj(
    {
        "name": {"type": "string"},
        "description": {"type": "string"},
        "seed": {"type": "integer"},
        "analyzer": _obj(
            {
                "identity": {"type": "string"},
                "dialect": {"enum": list(ANALYZER_DIALECTS)},
                "frequency": _range(),
                "points": _range(),
                "power": _range(),
                "if_bandwidth": _range(),
                "noise_floor_db": {"type": "number"},
                "trace_noise_db": {"type": "number", "minimum": 0},
                "glitches": _obj(
                    {
                        "rate": {"type": "number", "minimum": 0, "maximum": 0.05},
                        "size": {"type": "number", "exclusiveMinimum": 0, "maximum": 3},
                    }
                ),
                "unmeasured": _obj(
                    {
                        "rate": {"type": "number", "minimum": 0, "maximum": 0.05},
                        "sweep_rate": {"type": "number", "minimum": 0, "maximum": 1},
                    }
                ),
                "sweep_time": _obj({"overhead": _Q, "per_point": _Q, "settle_cycles": _Q}),
                "error_boxes": _obj(
                    {
                        "directivity_db": {"type": "number"},
                        "source_match_db": {"type": "number"},
                        "cable_loss_db_at_1ghz": {"type": "number", "minimum": 0},
                        "cable_delay": _Q,
                    }
                ),
            }
        ),
        "gain_phase": _obj(
            {
                "identity": {"type": "string"},
                "frequency": _range(),
                "source_impedance": _Q,
                "reference_resistor": _Q,
                "input_resistance": _Q,
                "input_capacitance": _Q,
                "receiver_floor": _Q,
            }
        ),
        "cables": _obj({"shield_resistance": _Q, "shield_cutoff": _Q}),
        "transformer": _obj({"inductance": _Q}),
        "series_resistors": _obj(
            {"inductance": _Q, "parallel_capacitance": _Q, "max_resistance": _Q}
        ),
        "calibration_kit": _obj(
            {
                "short_inductance": _Q,
                "open_capacitance": _Q,
                "load_resistance": _Q,
                "load_inductance": _Q,
            }
        ),
        "fixture": _obj(
            {
                "positions": {"type": "integer", "minimum": 1, "maximum": 64},
                "mounts": {
                    "type": "array",
                    "items": _obj(
                        {"resistance": _Q, "inductance": _Q, "open_capacitance": _Q},
                        ("resistance", "inductance"),
                    ),
                },
                "strap": _obj({"resistance": _Q, "inductance": _Q}),
                "open_line_capacitance": _Q,
                "series_mount": _obj(
                    {
                        "resistance": _Q,
                        "inductance": _Q,
                        "gap_capacitance": _Q,
                        "strap_resistance": _Q,
                        "strap_inductance": _Q,
                    }
                ),
                "reflection_mount": _obj(
                    {"resistance": _Q, "inductance": _Q, "open_capacitance": _Q}
                ),
            },
            ("positions",),
        ),
        "switch": _obj({"identity": {"type": "string"}, "settle_time": _Q}),
        "dc_source": _obj(
            {
                "identity": {"type": "string"},
                "max_voltage": _Q,
                "max_current": _Q,
                "series_resistance": _Q,
            }
        ),
        "bench": _obj({"identity": {"type": "string"}}),
        "parts": {
            "type": "object",
            "additionalProperties": _obj(
                {
                    "samples": {"type": "integer", "minimum": 1, "maximum": 100},
                    "spread": {"type": "object"},
                    "circuit": {"type": "object"},
                },
                ("circuit",),
            ),
        },
        "initial": _obj(
            {
                "cables": {
                    "enum": ["short", "open", "load", "through", "fixture", "series", "reflection"]
                },
                "transformer": {"type": "boolean"},
                "resistors": _Q,
                "closed": {"type": "integer", "minimum": 1},
                "placements": {
                    "type": "object",
                    "patternProperties": {r"^[0-9]+\Z": {"type": "string"}},
                    "additionalProperties": False,
                },
            }
        ),
        "faults": {"type": "array", "items": _FAULT_SCHEMA},
    },
    ("name", "fixture", "parts"),
)


@dataclass(frozen=True)
class AnalyzerSpec:
    """Limits, noise and timing of the simulated network analyser (SI units, dB, dBm)."""

    identity: str = "zbench,simulated network analyser,SIM-VNA-0001,0.1"
    dialect: str = "default"
    f_min: float = 10.0
    f_max: float = 500e6
    points_min: int = 2
    points_max: int = 20001
    power_min: float = -30.0
    power_max: float = 10.0
    ifbw_min: float = 1.0
    ifbw_max: float = 100e3
    noise_floor_db: float = -100.0
    trace_noise_db: float = 0.01
    #: The chance that a point of a sweep is a glitch (a trigger slip, a relay bounce,
    #: a spur), and its size: the whole S-matrix of the point times ``exp(size·e^jθ)``,
    #: θ drawn at random (so a change of magnitude, of phase, or both).
    glitch_rate: float = 0.0
    glitch_size: float = 0.3
    #: The chance that a point of a sweep is not measured (sent as SCPI's not-a-number),
    #: in a sweep that has such points at all (chance ``unmeasured_sweep_rate``: below 1,
    #: an overload that comes and goes).
    unmeasured_rate: float = 0.0
    unmeasured_sweep_rate: float = 1.0
    sweep_overhead: float = 5e-3
    sweep_per_point: float = 25e-6
    settle_cycles: float = 1.2
    directivity_db: float = -32.0
    source_match_db: float = -22.0
    cable_loss_db_at_1ghz: float = 0.8
    cable_delay: float = 5e-9


@dataclass(frozen=True)
class GainPhaseSpec:
    """Limits, set-up and noise of the simulated gain-phase analyser (SI units, dBm)."""

    identity: str = "zbench,simulated gain-phase analyser GP-30,SIM-GPA-0001,0.1"
    f_min: float = 10.0
    f_max: float = 30e6
    points_max: int = 4001
    level_min: float = -40.0
    level_max: float = 13.0
    bandwidth_min: float = 1.0
    bandwidth_max: float = 10e3
    source_impedance: float = 50.0
    reference_resistor: float = 1.0
    input_resistance: float = 1e6
    input_capacitance: float = 30e-12
    receiver_floor: float = 2e-7
    per_point: float = 2e-3


@dataclass(frozen=True)
class Scenario:
    """A validated scenario; ``parts`` maps ``"<part>/<sample>"`` to its true circuit."""

    name: str
    description: str
    seed: int
    analyzer: AnalyzerSpec
    shield_resistance: float
    shield_cutoff: float
    transformer_inductance: float
    resistor_inductance: float
    resistor_capacitance: float
    max_series_resistance: float
    kit: CalibrationKit
    mounts: tuple[Mount, ...]
    open_line_capacitance: float
    #: The series-through mount: traces in series (R, L) and the gap's capacitance
    #: across the part (``open_capacitance``); the zero-ohm strap bridges the gap.
    series_mount: Mount
    #: The one-port reflection mount: pad and via in series (R, L), the pad's
    #: capacitance to ground across the part; the strap shorts it.
    reflection_mount: Mount
    switch_identity: str
    switch_settle: float
    dc_identity: str
    dc_max_voltage: float
    dc_max_current: float
    dc_series_resistance: float
    bench_identity: str
    parts: dict[str, Part]
    part_names: tuple[str, ...]
    initial: dict[str, Any] = field(default_factory=dict)
    faults: tuple[dict[str, Any], ...] = ()
    gain_phase: GainPhaseSpec | None = None

    @property
    def positions(self) -> int:
        return len(self.mounts)


def _q(section: Mapping[str, Any], key: str, unit: str | None, default: float, where: str):
    if key not in section:
        return float(default)
    try:
        return parse_quantity(section[key], unit, name=f"{where}.{key}")
    except QuantityError as exc:
        raise InputError(str(exc), hint="write a number, optionally with an SI prefix") from exc


def _merged(base: dict[str, Any], over: Mapping[str, Any]) -> dict[str, Any]:
    """``over`` laid on ``base``: mappings merge key by key, anything else replaces."""
    out = dict(base)
    for key, value in over.items():
        if isinstance(value, Mapping) and isinstance(out.get(key), Mapping):
            out[key] = _merged(dict(out[key]), value)
        else:
            out[key] = value
    return out


def _read_source(
    scenario: str | Path | Mapping[str, Any], depth: int = 0
) -> tuple[dict[str, Any], str]:
    """The scenario's mapping and where it came from; ``extends: <name>`` takes another
    scenario as the base and lays this one's keys on it."""
    data, where = _read_one(scenario)
    base_name = data.pop("extends", None)
    if base_name is None:
        return data, where
    if not isinstance(base_name, str) or depth >= MAX_EXTENDS:
        raise InputError(
            f"extends: {base_name!r} is not a scenario name, or the chain is deeper than "
            f"{MAX_EXTENDS}",
            path=where,
            hint="name one scenario to extend, e.g. 'extends: demo'",
        )
    base, _ = _read_source(base_name, depth + 1)
    return _merged(base, data), where


def _read_one(scenario: str | Path | Mapping[str, Any]) -> tuple[dict[str, Any], str]:
    if isinstance(scenario, Mapping):
        return dict(scenario), "<scenario>"
    path = Path(scenario)
    if not path.suffix and not path.is_file():
        path = SCENARIO_DIR / f"{scenario}.yaml"
    if not path.is_file():
        names = sorted(p.stem for p in SCENARIO_DIR.glob("*.yaml"))
        raise InputError(
            f"no scenario {str(scenario)!r}",
            hint=f"give a path to a scenario YAML or one of: {', '.join(names)}",
        )
    try:
        # Bounded: size, nesting, alias expansion, tags and merge keys (drivers.safe_yaml).
        data = load_text(read_text(path))
    except YamlRefusedError as exc:
        line = f" (line {exc.line})" if exc.line is not None else ""
        raise InputError(f"{exc.message}{line}", path=str(path), hint=exc.hint) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(
            f"cannot read the scenario ({type(exc).__name__})",
            path=str(path),
            hint="give a readable UTF-8 YAML file",
        ) from None
    if not isinstance(data, dict):
        raise InputError("a scenario must be a mapping", path=str(path))
    return data, str(path)


def load_scenario(
    scenario: str | Path | Mapping[str, Any] = "demo", *, seed: int | None = None
) -> Scenario:
    """Read and validate a scenario; ``seed`` overrides the scenario's own seed.

    Raises :class:`InputError` naming the file and key on any problem.
    """
    data, where = _read_source(scenario)
    validator = jsonschema.Draft202012Validator(SCHEMA)
    errors = sorted(validator.iter_errors(data), key=lambda e: list(e.absolute_path))
    if errors:
        err = errors[0]
        key = ".".join(str(p) for p in err.absolute_path) or "<top>"
        raise InputError(
            f"{key}: {err.message}",
            path=where,
            hint="see simulated_instruments/README.md for the scenario keys",
        )
    seed = int(data.get("seed", 0) if seed is None else seed)

    a = data.get("analyzer", {})
    d = AnalyzerSpec()

    def rng_pair(key: str, lo: float, hi: float, unit: str | None) -> tuple[float, float]:
        r = a.get(key)
        if r is None:
            return lo, hi
        return (
            _q(r, "min", unit, lo, f"analyzer.{key}"),
            _q(r, "max", unit, hi, f"analyzer.{key}"),
        )

    f_min, f_max = rng_pair("frequency", d.f_min, d.f_max, "Hz")
    p_min, p_max = rng_pair("points", d.points_min, d.points_max, None)
    pw_min, pw_max = rng_pair("power", d.power_min, d.power_max, "dBm")
    bw_min, bw_max = rng_pair("if_bandwidth", d.ifbw_min, d.ifbw_max, "Hz")
    st = a.get("sweep_time", {})
    eb = a.get("error_boxes", {})
    analyzer = AnalyzerSpec(
        identity=a.get("identity", d.identity),
        dialect=a.get("dialect", d.dialect),
        f_min=f_min,
        f_max=f_max,
        points_min=int(p_min),
        points_max=int(p_max),
        power_min=pw_min,
        power_max=pw_max,
        ifbw_min=bw_min,
        ifbw_max=bw_max,
        noise_floor_db=float(a.get("noise_floor_db", d.noise_floor_db)),
        trace_noise_db=float(a.get("trace_noise_db", d.trace_noise_db)),
        glitch_rate=float(a.get("glitches", {}).get("rate", d.glitch_rate)),
        glitch_size=float(a.get("glitches", {}).get("size", d.glitch_size)),
        unmeasured_rate=float(a.get("unmeasured", {}).get("rate", d.unmeasured_rate)),
        unmeasured_sweep_rate=float(
            a.get("unmeasured", {}).get("sweep_rate", d.unmeasured_sweep_rate)
        ),
        sweep_overhead=_q(st, "overhead", "s", d.sweep_overhead, "analyzer.sweep_time"),
        sweep_per_point=_q(st, "per_point", "s", d.sweep_per_point, "analyzer.sweep_time"),
        settle_cycles=_q(st, "settle_cycles", None, d.settle_cycles, "analyzer.sweep_time"),
        directivity_db=float(eb.get("directivity_db", d.directivity_db)),
        source_match_db=float(eb.get("source_match_db", d.source_match_db)),
        cable_loss_db_at_1ghz=float(eb.get("cable_loss_db_at_1ghz", d.cable_loss_db_at_1ghz)),
        cable_delay=_q(eb, "cable_delay", "s", d.cable_delay, "analyzer.error_boxes"),
    )
    if not (0 < f_min < f_max and 2 <= p_min <= p_max and bw_min > 0 and pw_min <= pw_max):
        raise InputError(
            "analyzer limits must have 0 < frequency.min < frequency.max, 2 ≤ points.min ≤ "
            "points.max, if_bandwidth.min > 0",
            path=where,
        )

    cables = data.get("cables", {})
    kit_d = data.get("calibration_kit", {})
    default_kit = CalibrationKit()
    kit = CalibrationKit(
        short_inductance=_q(
            kit_d, "short_inductance", "H", default_kit.short_inductance, "calibration_kit"
        ),
        open_capacitance=_q(
            kit_d, "open_capacitance", "F", default_kit.open_capacitance, "calibration_kit"
        ),
        load_resistance=_q(
            kit_d, "load_resistance", "ohm", default_kit.load_resistance, "calibration_kit"
        ),
        load_inductance=_q(
            kit_d, "load_inductance", "H", default_kit.load_inductance, "calibration_kit"
        ),
    )

    fixture = data["fixture"]
    positions = int(fixture["positions"])
    strap = fixture.get("strap", {})
    strap_r = _q(strap, "resistance", "ohm", 20e-6, "fixture.strap")
    strap_l = _q(strap, "inductance", "H", 8e-12, "fixture.strap")
    mount_list = fixture.get("mounts", [])
    if mount_list and len(mount_list) != positions:
        raise InputError(
            f"fixture.mounts has {len(mount_list)} entries for {positions} positions",
            path=where,
            hint="give one mount per position, or none for the default mount",
        )
    mounts = []
    for i in range(positions):
        m = mount_list[i] if mount_list else {}
        key = f"fixture.mounts.{i}"
        mounts.append(
            Mount(
                resistance=_q(m, "resistance", "ohm", 0.2e-3, key),
                inductance=_q(m, "inductance", "H", 120e-12, key),
                open_capacitance=_q(m, "open_capacitance", "F", 0.25e-12, key),
                strap_resistance=strap_r,
                strap_inductance=strap_l,
            )
        )

    sm = fixture.get("series_mount", {})
    series_mount = Mount(
        resistance=_q(sm, "resistance", "ohm", 0.3e-3, "fixture.series_mount"),
        inductance=_q(sm, "inductance", "H", 0.4e-9, "fixture.series_mount"),
        open_capacitance=_q(sm, "gap_capacitance", "F", 0.08e-12, "fixture.series_mount"),
        strap_resistance=_q(sm, "strap_resistance", "ohm", 0.5e-3, "fixture.series_mount"),
        strap_inductance=_q(sm, "strap_inductance", "H", 0.3e-9, "fixture.series_mount"),
    )
    rm = fixture.get("reflection_mount", {})
    reflection_mount = Mount(
        resistance=_q(rm, "resistance", "ohm", 0.2e-3, "fixture.reflection_mount"),
        inductance=_q(rm, "inductance", "H", 0.25e-9, "fixture.reflection_mount"),
        open_capacitance=_q(rm, "open_capacitance", "F", 0.15e-12, "fixture.reflection_mount"),
        strap_resistance=strap_r,
        strap_inductance=strap_l,
    )

    parts: dict[str, Part] = {}
    part_names: list[str] = []
    for name, entry in data["parts"].items():
        try:
            base = part_from_dict({"name": name, **entry["circuit"]})
        except PartError as exc:
            raise InputError(f"parts.{name}.circuit: {exc}", path=where) from exc
        kind = entry["circuit"].get("type")
        spread = entry.get("spread", DEFAULT_SPREAD.get(kind, {}))
        # One stream per part name, so adding a part does not change the others' samples.
        rng = np.random.default_rng([seed, zlib.crc32(name.encode())])
        part_names.append(name)
        for k in range(1, int(entry.get("samples", 1)) + 1):
            try:
                parts[f"{name}/s{k}"] = with_spread(base, rng, spread)
            except PartError as exc:
                raise InputError(f"parts.{name}.spread: {exc}", path=where) from exc

    sw = data.get("switch", {})
    dc = data.get("dc_source", {})
    sr = data.get("series_resistors", {})
    initial = dict(data.get("initial", {}))
    initial["resistors"] = _q(initial, "resistors", "ohm", 0.0, "initial")
    if "closed" in initial and not 1 <= initial["closed"] <= positions:
        raise InputError(
            f"initial.closed: no position {initial['closed']} on a {positions}-position fixture",
            path=where,
        )
    for pos, item in initial.get("placements", {}).items():
        if not 1 <= int(pos) <= positions:
            raise InputError(f"initial.placements: no position {pos}", path=where)
        if item.upper() not in ("SHORT", "EMPTY") and item not in parts:
            raise InputError(
                f"initial.placements.{pos}: unknown item {item!r}",
                path=where,
                hint="use SHORT, EMPTY or '<part>/s<k>' of a part in this scenario",
            )
    return Scenario(
        name=str(data["name"]),
        description=str(data.get("description", "")),
        seed=seed,
        analyzer=analyzer,
        shield_resistance=_q(cables, "shield_resistance", "ohm", 13e-3, "cables"),
        shield_cutoff=_q(cables, "shield_cutoff", "Hz", 2e3, "cables"),
        transformer_inductance=_q(
            data.get("transformer", {}), "inductance", "H", 1e-3, "transformer"
        ),
        resistor_inductance=_q(sr, "inductance", "H", 0.6e-9, "series_resistors"),
        resistor_capacitance=_q(sr, "parallel_capacitance", "F", 0.1e-12, "series_resistors"),
        max_series_resistance=_q(sr, "max_resistance", "ohm", 10e3, "series_resistors"),
        kit=kit,
        mounts=tuple(mounts),
        open_line_capacitance=_q(fixture, "open_line_capacitance", "F", 0.5e-12, "fixture"),
        series_mount=series_mount,
        reflection_mount=reflection_mount,
        switch_identity=sw.get("identity", "zbench,simulated fixture switch,SIM-SW-0001,0.1"),
        switch_settle=_q(sw, "settle_time", "s", 5e-3, "switch"),
        dc_identity=dc.get("identity", "zbench,simulated DC bias source,SIM-DC-0001,0.1"),
        dc_max_voltage=_q(dc, "max_voltage", "V", 20.0, "dc_source"),
        dc_max_current=_q(dc, "max_current", "A", 0.1, "dc_source"),
        dc_series_resistance=_q(dc, "series_resistance", "ohm", 2.0, "dc_source"),
        bench_identity=data.get("bench", {}).get(
            "identity", "zbench,simulated bench control,SIM-BENCH-0001,0.1"
        ),
        parts=parts,
        part_names=tuple(part_names),
        initial=initial,
        faults=tuple(data.get("faults", [])),
        gain_phase=_gain_phase(data["gain_phase"], where) if "gain_phase" in data else None,
    )


def _gain_phase(g: Mapping[str, Any], where: str) -> GainPhaseSpec:
    """The ``gain_phase`` section: the simulated gain-phase analyser, if the bench has one."""
    d = GainPhaseSpec()
    band = g.get("frequency", {})
    spec = GainPhaseSpec(
        identity=g.get("identity", d.identity),
        f_min=_q(band, "min", "Hz", d.f_min, "gain_phase.frequency"),
        f_max=_q(band, "max", "Hz", d.f_max, "gain_phase.frequency"),
        source_impedance=_q(g, "source_impedance", "ohm", d.source_impedance, "gain_phase"),
        reference_resistor=_q(g, "reference_resistor", "ohm", d.reference_resistor, "gain_phase"),
        input_resistance=_q(g, "input_resistance", "ohm", d.input_resistance, "gain_phase"),
        input_capacitance=_q(g, "input_capacitance", "F", d.input_capacitance, "gain_phase"),
        receiver_floor=_q(g, "receiver_floor", "V", d.receiver_floor, "gain_phase"),
    )
    if not (0 < spec.f_min < spec.f_max and spec.reference_resistor > 0):
        raise InputError(
            "gain_phase: need 0 < frequency.min < frequency.max and reference_resistor > 0",
            path=where,
        )
    return spec
