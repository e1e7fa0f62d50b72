"""The procedure schema: a JSON-schema document (draft 2020-12) and its validator.

Every object sets ``additionalProperties: false`` so a misspelt key is an error, not a
silently ignored setting. Physical values are written as engineers write them
(``100 Hz``, ``4.7n``, ``6.3 V``); the schema's own keyword ``unit`` names the unit each
value must be in, and the validator checks it with :func:`bench.units.parse_quantity`.
Checks that relate several values (start < stop, bias below every rating) live in
:mod:`bench.procedure.plan`, after the schema has passed. ``zbench check --schema``
prints the schema.

The keys, in brief (``procedures/*.yaml`` are worked examples):

- ``name`` (required), ``description``, ``mode``: ``guided`` (default) or ``unattended``.
- ``instruments``: ``analyzer``, ``switch``, ``dc_source``, ``bench`` (the simulated
  bench's hands), ``gain_phase`` (a low-frequency gain-phase analyser, map
  ``gain_phase``), each with ``resource`` (VISA), ``command_map`` (analyser; ``default``),
  ``timeout``; ``analyzer.max_power`` (dBm, default 10 dBm); ``dc_source.max_voltage``
  and ``max_current`` (the source's own hard limits).
- ``sweep`` (required): ``start``, ``stop`` (Hz), ``points`` (≥ 10, ≤ the command
  map's limit), ``spacing`` ``log``/``linear``, ``if_bandwidth`` (Hz), ``power`` (dBm),
  ``averages`` (sweeps averaged per measurement, each stored).
- ``gain_phase`` (needed by a part measured ``gain-phase``): the gain-phase analyser's own
  sweep ``start``, ``stop``, ``points``, ``spacing``, ``bandwidth`` (Hz), ``level`` (dBm),
  and its set-up: ``reference_resistor`` (Ω, required), receiver B's
  ``input_resistance`` (Ω) and ``input_capacitance`` (F), ``noise_floor`` (dB, the
  ratio's noise relative to 1).
- ``fixture``: ``positions`` (count), ``use_positions`` (subset), ``series_resistor``
  (Ω at each port), ``isolation_transformer`` (bool), ``bias_tee_rating`` and
  ``dc_block_rating`` (V), ``z0`` (Ω).
- ``calibration``: ``method`` ``through``/``solt``/``hybrid``, ``crossover`` (Hz, hybrid),
  ``reuse: {run: RUNDIR, max_age: 8 h}``, ``kit`` (the standards' definitions from the
  kit's data sheet, each optional and ideal when absent: ``short_inductance`` H,
  ``open_capacitance`` F, ``load_resistance`` Ω (default z0), ``load_inductance`` H,
  one-way offset delays ``short_delay``, ``open_delay``, ``load_delay``,
  ``through_delay`` in s, e.g. ``12 ps``).
- ``analysis``: ``noise_floor``, ``trace_noise`` (dB), ``tolerance`` (accuracy target of
  the window), ``mount`` ``measured``/``fitted``.
- ``bias``: ``ramp_step`` (V), ``ramp_dwell``, ``settle``, ``discharge`` (durations),
  ``current_limit`` (A).
- ``parts`` (required): ``name``, ``kind`` (``mlcc``, ``bulk``, ``inductor``, ``bead``),
  ``nominal`` (F, H, or Ω for a bead at ``nominal_at`` Hz), ``tolerance`` (``10 %``),
  ``rated_voltage`` (V), ``model`` (a family or ``auto``), ``samples`` (a count or
  names), ``bias`` (list of V, capacitors only, shunt-through only), ``method``
  (``shunt-through``, ``series-through``, ``reflection``, ``gain-phase``, or a list of
  them, stitched into one curve; default: capacitors shunt-through, inductors and beads
  series-through). Shunt-through parts go in the switched fixture's positions; the
  series-through and reflection mounts take one sample at a time, and their own
  captures (the empty gap or open, the zero-ohm strap) remove them. A ``gain-phase``
  part sits in a fixture position too (at 0 V): the gain-phase analyser sweeps it there,
  and its own sweep of the position's strap removes the mount.
- ``steps``: a subset, in order, of calibrate, mount_open, mount_short, measure, fit,
  export, report (default: all but the optional mount_open). ``mount_open`` captures
  each used position's empty mount, so the pads' capacitance is removed from the parts
  (it matters for high-impedance parts: inductors and beads).
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import jsonschema
from jsonschema import Draft202012Validator
from jsonschema.exceptions import ValidationError

from bench.core.model_registry import FAMILY_NAMES
from bench.units import QuantityError, parse_quantity

STEP_NAMES = ("calibrate", "mount_open", "mount_short", "measure", "fit", "export", "report")
#: The steps of a procedure that lists none: every step but the optional open capture.
DEFAULT_STEPS = tuple(name for name in STEP_NAMES if name != "mount_open")
#: The ways a part is measured (each with its mount, calibration and fixture removal).
METHOD_NAMES = ("shunt-through", "series-through", "reflection", "gain-phase")
#: ``auto`` and every family of the one registry of model families.
MODEL_NAMES = ("auto", *FAMILY_NAMES)
PART_KINDS = ("mlcc", "bulk", "inductor", "bead")
# A name used in file names, step ids and SCPI lines. ``\Z``, not ``$``: jsonschema
# searches with Python's ``re``, where ``$`` also matches before a final newline.
NAME_PATTERN = r"^[A-Za-z0-9][A-Za-z0-9._-]*\Z"


def _quantity(unit: str | None, description: str) -> dict[str, Any]:
    return {"type": ["number", "string"], "unit": unit, "description": description}


def _duration(description: str) -> dict[str, Any]:
    return {"type": ["number", "string"], "unit": "duration", "description": description}


_INSTRUMENT = {
    "type": "object",
    "additionalProperties": False,
    "properties": {
        "resource": {"type": "string", "minLength": 1, "description": "VISA resource string"},
        "command_map": {
            "type": "string",
            "minLength": 1,
            "description": "command map name or file",
        },
        "timeout": _duration("I/O timeout (s)"),
    },
}

_DC_SOURCE = {
    "type": "object",
    "additionalProperties": False,
    "properties": {
        **_INSTRUMENT["properties"],
        "max_voltage": _quantity("V", "highest voltage the source may ever be set to"),
        "max_current": _quantity("A", "current limit programmed into the source"),
    },
}

_PART = {
    "type": "object",
    "additionalProperties": False,
    "required": ["name", "kind"],
    "properties": {
        "name": {"type": "string", "pattern": NAME_PATTERN},
        "kind": {"enum": list(PART_KINDS)},
        "nominal": _quantity(None, "F for mlcc/bulk, H for inductor, ohm for bead"),
        "tolerance": {"type": ["number", "string"], "description": "fraction or percent"},
        "nominal_at": _quantity("Hz", "frequency of a bead's nominal impedance"),
        "rated_voltage": _quantity("V", "the part's rated DC voltage"),
        "model": {"enum": list(MODEL_NAMES)},
        "method": {
            "description": "how the part is measured; several are stitched into one curve",
            "oneOf": [
                {"enum": list(METHOD_NAMES)},
                {
                    "type": "array",
                    "minItems": 1,
                    "uniqueItems": True,
                    "items": {"enum": list(METHOD_NAMES)},
                },
            ],
        },
        "description": {"type": "string"},
        "samples": {
            "oneOf": [
                {"type": "integer", "minimum": 1, "maximum": 1000},
                {
                    "type": "array",
                    "minItems": 1,
                    "uniqueItems": True,
                    "items": {"type": "string", "pattern": NAME_PATTERN},
                },
            ]
        },
        "bias": {
            "type": "array",
            "minItems": 1,
            "items": _quantity("V", "DC bias point"),
        },
    },
}

PROCEDURE_SCHEMA: dict[str, Any] = {
    "$schema": "https://json-schema.org/draft/2020-12/schema",
    "title": "zbench procedure",
    "type": "object",
    "additionalProperties": False,
    "required": ["name", "sweep", "parts"],
    "properties": {
        "name": {"type": "string", "pattern": NAME_PATTERN},
        "description": {"type": "string"},
        "mode": {"enum": ["guided", "unattended"]},
        "instruments": {
            "type": "object",
            "additionalProperties": False,
            "properties": {
                "analyzer": {
                    "type": "object",
                    "additionalProperties": False,
                    "properties": {
                        **_INSTRUMENT["properties"],
                        "max_power": _quantity("dBm", "highest source power allowed"),
                    },
                },
                "switch": _INSTRUMENT,
                "dc_source": _DC_SOURCE,
                "bench": _INSTRUMENT,
                "gain_phase": _INSTRUMENT,
            },
        },
        "gain_phase": {
            "type": "object",
            "additionalProperties": False,
            "required": ["start", "stop", "points", "reference_resistor"],
            "description": "the gain-phase analyser's own sweep and its set-up",
            "properties": {
                "start": _quantity("Hz", "first frequency"),
                "stop": _quantity("Hz", "last frequency"),
                "points": {"type": "integer", "minimum": 10},
                "spacing": {"enum": ["log", "linear"]},
                "bandwidth": _quantity("Hz", "receiver bandwidth"),
                "level": _quantity("dBm", "source level into a matched 50 ohm load"),
                "reference_resistor": _quantity("ohm", "resistor between receiver A and the part"),
                "input_resistance": _quantity("ohm", "receiver B's input resistance"),
                "input_capacitance": _quantity("F", "receiver B's input capacitance"),
                "noise_floor": _quantity("dB", "ratio noise relative to a ratio of 1"),
            },
        },
        "sweep": {
            "type": "object",
            "additionalProperties": False,
            "required": ["start", "stop", "points"],
            "properties": {
                "start": _quantity("Hz", "first frequency"),
                "stop": _quantity("Hz", "last frequency"),
                "points": {"type": "integer", "minimum": 10},
                "spacing": {"enum": ["log", "linear"]},
                "if_bandwidth": _quantity("Hz", "IF (resolution) bandwidth"),
                "power": _quantity("dBm", "source power"),
                "averages": {"type": "integer", "minimum": 1, "maximum": 100},
            },
        },
        "fixture": {
            "type": "object",
            "additionalProperties": False,
            "properties": {
                "positions": {"type": "integer", "minimum": 1, "maximum": 64},
                "use_positions": {
                    "type": "array",
                    "minItems": 1,
                    "uniqueItems": True,
                    "items": {"type": "integer"},
                },
                "series_resistor": _quantity("ohm", "resistor in series at each port"),
                "isolation_transformer": {"type": "boolean"},
                "bias_tee_rating": _quantity("V", "bias tee DC rating"),
                "dc_block_rating": _quantity("V", "DC block rating"),
                "z0": _quantity("ohm", "reference impedance of the ports"),
            },
        },
        "calibration": {
            "type": "object",
            "additionalProperties": False,
            "properties": {
                "method": {"enum": ["through", "solt", "hybrid"]},
                "crossover": _quantity("Hz", "hybrid: through below, SOLT above"),
                "kit": {
                    "type": "object",
                    "additionalProperties": False,
                    "description": "the standards' definitions (all optional, ideal if absent)",
                    "properties": {
                        "short_inductance": _quantity("H", "inductance of the short"),
                        "open_capacitance": _quantity("F", "fringing capacitance of the open"),
                        "load_resistance": _quantity("ohm", "resistance of the load"),
                        "load_inductance": _quantity("H", "series inductance of the load"),
                        "short_delay": _duration("one-way offset delay of the short (s)"),
                        "open_delay": _duration("one-way offset delay of the open (s)"),
                        "load_delay": _duration("one-way offset delay of the load (s)"),
                        "through_delay": _duration("one-way delay of the through (s)"),
                    },
                },
                "reuse": {
                    "type": "object",
                    "additionalProperties": False,
                    "required": ["run"],
                    "properties": {
                        "run": {"type": "string", "minLength": 1},
                        "max_age": _duration("oldest calibration accepted"),
                    },
                },
            },
        },
        "analysis": {
            "type": "object",
            "additionalProperties": False,
            "properties": {
                "noise_floor": _quantity("dB", "analyser noise floor of S21"),
                "trace_noise": _quantity("dB", "trace noise of S21"),
                "tolerance": {"type": ["number", "string"], "description": "target accuracy"},
                "mount": {"enum": ["measured", "fitted"]},
            },
        },
        "bias": {
            "type": "object",
            "additionalProperties": False,
            "properties": {
                "ramp_step": _quantity("V", "largest voltage step of a ramp"),
                "ramp_dwell": _duration("time at each ramp step"),
                "settle": _duration("wait after reaching a bias point"),
                "discharge": _duration("wait with output off before touching the part"),
                "current_limit": _quantity("A", "current limit during biased steps"),
            },
        },
        "parts": {"type": "array", "minItems": 1, "items": _PART},
        "steps": {
            "type": "array",
            "minItems": 1,
            "uniqueItems": True,
            "items": {"enum": list(STEP_NAMES)},
        },
    },
}

_DURATION_UNITS = {"s": 1.0, "sec": 1.0, "ms": 1e-3, "min": 60.0, "h": 3600.0, "d": 86400.0}


def parse_duration(value: object, *, name: str = "value") -> float:
    """Parse a duration such as ``30``, ``"250 ms"``, ``"10 min"``, ``"8 h"`` into seconds."""
    if isinstance(value, str):
        text = value.strip()
        for suffix in sorted(_DURATION_UNITS, key=len, reverse=True):
            if text.lower().endswith(suffix) and suffix not in ("s", "ms"):
                number = text[: -len(suffix)].strip()
                try:
                    return float(number) * _DURATION_UNITS[suffix]
                except ValueError:
                    break
    seconds = parse_quantity(value, "s", name=name)
    if seconds < 0:
        raise QuantityError(f"{name}: a duration cannot be negative, got {value!r}")
    return seconds


def _unit_keyword(
    validator: Any, unit: str | None, instance: Any, schema: dict[str, Any]
) -> Iterator[ValidationError]:
    if unit is None or not isinstance(instance, (int, float, str)) or isinstance(instance, bool):
        return  # no unit named: the plan checks it against the part's kind
    try:
        if unit == "duration":
            parse_duration(instance)
        else:
            parse_quantity(instance, unit)
    except QuantityError as exc:
        text = str(exc).removeprefix("value: ")
        yield ValidationError(text)


ProcedureValidator = jsonschema.validators.extend(Draft202012Validator, {"unit": _unit_keyword})


def validator() -> Any:
    """A validator for :data:`PROCEDURE_SCHEMA` that also checks units."""
    return ProcedureValidator(PROCEDURE_SCHEMA)
