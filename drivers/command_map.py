"""Analyser command maps: an instrument's SCPI dialect described in YAML, not in code.

A map (``drivers/command_maps/<name>.yaml``) is validated on load against
``command_map.schema.yaml`` (JSON Schema, every object closed) and then checked for what
a schema cannot say: templates with exactly the fields they need, ranges with min below
max. The result is a frozen :class:`CommandMap`. Errors name the map file and the key.
"""

from __future__ import annotations

import string
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import jsonschema
import yaml

from drivers.errors import CommandMapError

MAPS_DIR = Path(__file__).parent / "command_maps"
SCHEMA_PATH = MAPS_DIR / "command_map.schema.yaml"

SETTING_KEYS = ("start_hz", "stop_hz", "points", "spacing", "ifbw_hz", "power_dbm")


@dataclass(frozen=True)
class Setting:
    """One instrument setting: a ``set`` template with ``{value}``, and its ``query``.

    ``choices`` (enumerated settings only) maps our names (``"linear"``, ``"on"``) to
    the mnemonics the instrument accepts; the first is the one sent.
    """

    set: str
    query: str
    choices: dict[str, tuple[str, ...]] | None = None

    def command(self, value: Any) -> str:
        """The set command for ``value`` (a number, or one of :attr:`choices`' keys)."""
        if self.choices is not None:
            return self.set.format(value=self.choices[value][0])
        return self.set.format(value=format_number(value))

    def parse_choice(self, answer: str) -> str | None:
        """Our name for an instrument's answer to :attr:`query`, or None if unknown."""
        if self.choices is None:
            return None
        for name, mnemonics in self.choices.items():
            if any(mnemonic_matches(answer, m) for m in mnemonics):
                return name
        return None


@dataclass(frozen=True)
class Range:
    """Closed interval ``[min, max]`` in the unit of its key."""

    min: float
    max: float

    def __contains__(self, value: float) -> bool:
        return self.min <= value <= self.max


@dataclass(frozen=True)
class Limits:
    """Analyser limits: frequency (Hz), points, source power (dBm), IF bandwidth (Hz)."""

    frequency_hz: Range
    points: Range
    power_dbm: Range
    ifbw_hz: Range


@dataclass(frozen=True)
class CommandMap:
    """A validated analyser command map (see ``command_maps/default.yaml``)."""

    name: str
    description: str
    path: str
    identity: str
    reset: tuple[str, ...]
    error_query: str
    no_error_code: int
    max_errors_per_drain: int
    operation_complete: str
    settings: dict[str, Setting]
    correction: Setting
    sweep_time_query: str
    trigger: str
    complete: str
    timeout_factor: float
    timeout_margin_s: float
    encoding: str
    format_commands: tuple[str, ...]
    datatype: str
    big_endian: bool
    block_terminated: bool
    frequency_query: str
    trace_query: str
    parameters: tuple[str, ...]
    limits: Limits

    def trace_command(self, parameter: str) -> str:
        """The query of one S-parameter trace, e.g. ``TRACe:DATA? S21``."""
        return self.trace_query.format(parameter=parameter)


def format_number(value: Any) -> str:
    """A number as sent to an instrument, exactly: integers plain, other floats in the
    shortest form that reads back to the same float (never rounded, so a value at a
    limit is never sent as one just above it)."""
    if isinstance(value, bool):
        raise TypeError("a boolean is not a number for a SCPI setting")
    if isinstance(value, int):
        return str(value)
    number = float(value)
    if number.is_integer() and abs(number) < 1e15:
        return str(int(number))
    return repr(number)


def mnemonic_matches(answer: str, mnemonic: str) -> bool:
    """True when ``answer`` is the short or long form of ``mnemonic`` (SCPI-99 rule).

    The short form is the upper-case part of the mnemonic (``LIN`` of ``LINear``);
    matching is case-insensitive and ignores surrounding quotes and blanks.
    """
    answer = answer.strip().strip('"').strip().upper()
    short = "".join(ch for ch in mnemonic if not ch.islower()).upper()
    return answer in (mnemonic.upper(), short)


def available_command_maps() -> list[str]:
    """Names of the maps shipped in ``drivers/command_maps``."""
    return sorted(p.stem for p in MAPS_DIR.glob("*.yaml") if not p.name.endswith(".schema.yaml"))


def load_command_map(name_or_path: str | Path = "default") -> CommandMap:
    """Load and validate a command map, by shipped name (``"default"``) or by file path.

    Raises :class:`~drivers.errors.CommandMapError` naming the file and the key.
    """
    path = _resolve(name_or_path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise CommandMapError(
            str(path),
            "",
            f"cannot read the command map ({exc.strerror})",
            hint=f"give a readable file, or one of the shipped maps: {available_command_maps()}",
        ) from exc
    try:
        raw = yaml.safe_load(text)
    except yaml.YAMLError as exc:
        where = getattr(exc, "problem_mark", None)
        line = f" at line {where.line + 1}" if where is not None else ""
        raise CommandMapError(
            str(path),
            "",
            f"not valid YAML{line}: {getattr(exc, 'problem', exc)}",
            hint="fix the YAML syntax (indentation, quotes, colons)",
        ) from exc
    return parse_command_map(raw, str(path))


def parse_command_map(raw: Any, path: str = "<command map>") -> CommandMap:
    """Validate an already-parsed map (a dict as from YAML) and build a :class:`CommandMap`."""
    validator = jsonschema.Draft202012Validator(_schema())
    errors = sorted(validator.iter_errors(raw), key=lambda e: (len(e.path), list(map(str, e.path))))
    if errors:
        first = errors[0]
        key = ".".join(str(p) for p in first.absolute_path) or "<top level>"
        more = f" ({len(errors) - 1} more problem(s) after this one)" if len(errors) > 1 else ""
        raise CommandMapError(
            path,
            key,
            f"{first.message}{more}",
            hint="compare with drivers/command_maps/default.yaml; unknown keys are not allowed",
        )
    common, sweep, data, trigger = raw["common"], raw["sweep"], raw["data"], raw["trigger"]

    settings: dict[str, Setting] = {}
    for key in SETTING_KEYS:
        settings[key] = _setting(sweep[key], path, f"sweep.{key}")
    correction = _setting(raw["correction"], path, "correction")
    _check_fields(data["trace_query"], {"parameter"}, path, "data.trace_query")
    for key, text in (
        ("common.identity", common["identity"]),
        ("common.error_query", common["error_query"]),
        ("data.frequency_query", data["frequency_query"]),
        ("sweep.time_query", sweep["time_query"]),
    ):
        _check_fields(text, set(), path, key)

    limits = {}
    for key, bounds in raw["limits"].items():
        if not bounds["min"] <= bounds["max"]:
            raise CommandMapError(
                path,
                f"limits.{key}",
                f"min {bounds['min']} is above max {bounds['max']}",
                hint="swap the two values",
            )
        limits[key] = Range(float(bounds["min"]), float(bounds["max"]))
    if limits["points"].min < 2:
        raise CommandMapError(
            path,
            "limits.points.min",
            f"a sweep needs at least 2 points, got {limits['points'].min}",
            hint="set limits.points.min to 2 or more",
        )

    return CommandMap(
        name=raw["name"],
        description=raw["description"],
        path=path,
        identity=common["identity"],
        reset=tuple(common["reset"]),
        error_query=common["error_query"],
        no_error_code=int(common.get("no_error_code", 0)),
        max_errors_per_drain=int(common.get("max_errors_per_drain", 32)),
        operation_complete=common["operation_complete"],
        settings=settings,
        correction=correction,
        sweep_time_query=sweep["time_query"],
        trigger=trigger["single"],
        complete=trigger["complete"],
        timeout_factor=float(trigger.get("timeout_factor", 2.0)),
        timeout_margin_s=float(trigger.get("timeout_margin_s", 10.0)),
        encoding=data["encoding"],
        format_commands=tuple(data["format_commands"]),
        datatype=data.get("datatype", "d"),
        big_endian=data.get("byte_order", "big") == "big",
        block_terminated=bool(data.get("block_terminated", True)),
        frequency_query=data["frequency_query"],
        trace_query=data["trace_query"],
        parameters=tuple(data["parameters"]),
        limits=Limits(**limits),
    )


# -- helpers -------------------------------------------------------------------------


def _resolve(name_or_path: str | Path) -> Path:
    text = str(name_or_path)
    if isinstance(name_or_path, Path) or "/" in text or "\\" in text or text.endswith(".yaml"):
        return Path(name_or_path)
    path = MAPS_DIR / f"{text}.yaml"
    if not path.is_file():
        raise CommandMapError(
            text,
            "",
            "no shipped command map of that name",
            hint=f"use one of {available_command_maps()} or give the path of a .yaml map",
        )
    return path


_SCHEMA_CACHE: dict[str, Any] = {}


def _schema() -> dict[str, Any]:
    if "schema" not in _SCHEMA_CACHE:
        _SCHEMA_CACHE["schema"] = yaml.safe_load(SCHEMA_PATH.read_text(encoding="utf-8"))
    return _SCHEMA_CACHE["schema"]


def _setting(raw: dict[str, Any], path: str, key: str) -> Setting:
    _check_fields(raw["set"], {"value"}, path, f"{key}.set")
    _check_fields(raw["query"], set(), path, f"{key}.query")
    choices = None
    if "values" in raw:
        choices = {name: tuple(mnemonics) for name, mnemonics in raw["values"].items()}
    return Setting(set=raw["set"], query=raw["query"], choices=choices)


def _check_fields(template: str, wanted: set[str], path: str, key: str) -> None:
    """A template must hold exactly the ``{fields}`` in ``wanted`` (literal braces: ``{{``)."""
    try:
        parts = string.Formatter().parse(template)
        found = {field for _, field, _, _ in parts if field is not None}
    except ValueError as exc:
        raise CommandMapError(
            path,
            key,
            f"bad template {template!r}: {exc}",
            hint="write literal braces as '{{' and '}}'",
        ) from exc
    if found != wanted:
        expected = ", ".join("{" + w + "}" for w in sorted(wanted)) or "no {fields}"
        got = ", ".join("{" + f + "}" for f in sorted(found)) or "none"
        raise CommandMapError(
            path,
            key,
            f"template {template!r} must contain {expected}, found {got}",
            hint="use only the field names shown in drivers/command_maps/default.yaml",
        )
