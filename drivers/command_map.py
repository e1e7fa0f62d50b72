"""Analyser command maps: an instrument's SCPI dialect described in YAML, not in code.

A map (``drivers/command_maps/<name>.yaml``) is validated on load against
``command_map.schema.yaml`` (JSON Schema, every object closed) and then checked for what
a schema cannot say: templates with exactly the fields they need, ranges with min below
max. The result is a frozen :class:`CommandMap`. Errors name the map file and the key.
"""

from __future__ import annotations

import string
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import jsonschema
import yaml

from drivers.errors import CommandMapError
from drivers.safe_yaml import YamlRefusedError, load_text, read_text, schema_error_words

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
class Sync:
    """How the end of a sweep is awaited (``trigger.sync`` of a map).

    ``method`` ``"opc"``: one blocking ``query`` answering 1. ``"poll"``: ``query`` reads
    an integer register every ``interval_s`` until ``value & mask`` is non-zero.
    ``before``: commands sent before the trigger.
    """

    method: str
    query: str
    mask: int = 0
    interval_s: float = 0.05
    before: tuple[str, ...] = ()


@dataclass(frozen=True)
class Traces:
    """How a trace is set up and read (``data.traces`` of a map)."""

    select_by: str
    query: str
    define: str | None = None
    select: str | None = None
    name: str | None = None
    numbers: dict[str, int] | None = None

    def number_of(self, parameter: str, position: int) -> int:
        """The trace or channel number of ``parameter``, read ``position``-th (0-based)."""
        if self.numbers and parameter in self.numbers:
            return self.numbers[parameter]
        return position + 1

    def fields(self, parameter: str, position: int) -> dict[str, Any]:
        number = self.number_of(parameter, position)
        name = self.name.format(parameter=parameter, number=number) if self.name else parameter
        return {"parameter": parameter, "number": number, "name": name}


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
    sync: Sync
    timeout_factor: float
    timeout_margin_s: float
    data_format: str
    format_commands: tuple[str, ...]
    big_endian: bool
    block_terminated: bool
    frequency_query: str | None
    traces: Traces
    parameters: tuple[str, ...]
    limits: Limits
    error_codes: dict[int, tuple[str, str | None]] = field(default_factory=dict)
    kind: str = "network"

    @property
    def encoding(self) -> str:
        """``"ascii"`` or ``"binary"`` (a REAL,32 or REAL,64 block)."""
        return "ascii" if self.data_format == "ascii" else "binary"

    @property
    def datatype(self) -> str:
        """The :mod:`struct` code of a block's values: ``"f"`` (REAL,32) or ``"d"``."""
        return "f" if self.data_format == "real32" else "d"

    def trace_commands(self, parameter: str, position: int = 0) -> tuple[list[str], str]:
        """The set-up commands (define, select) and the query of one trace."""
        fields = self.traces.fields(parameter, position)
        setup = [t.format(**fields) for t in (self.traces.define, self.traces.select) if t]
        return setup, self.traces.query.format(**fields)

    def trace_command(self, parameter: str, position: int = 0) -> str:
        """The query of one S-parameter trace, e.g. ``TRACe:DATA? S21``."""
        return self.trace_commands(parameter, position)[1]

    def explain_error(self, code: int) -> str:
        """The map's words for an instrument error code ('' when the map has none)."""
        if code not in self.error_codes:
            return ""
        meaning, fix = self.error_codes[code]
        return meaning + (f"; {fix}" if fix else "")


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
        text = read_text(path)
    except OSError as exc:
        raise CommandMapError(
            str(path),
            "",
            f"cannot read the command map ({exc.strerror})",
            hint=f"give a readable file, or one of the shipped maps: {available_command_maps()}",
        ) from None
    except UnicodeDecodeError:
        raise CommandMapError(
            str(path), "", "not a UTF-8 text file", hint="give a command map YAML file"
        ) from None
    except YamlRefusedError as exc:
        raise CommandMapError(str(path), "", exc.message, hint=exc.hint) from None
    try:
        # Bounded: size, nesting, alias expansion, tags and merge keys (drivers.safe_yaml).
        raw = load_text(text)
    except YamlRefusedError as exc:
        line = f" at line {exc.line}" if exc.line is not None else ""
        raise CommandMapError(
            str(path), "", f"{exc.message}{line}", hint=exc.hint or "fix the YAML syntax"
        ) from None
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
            f"{schema_error_words(first)}{more}",
            hint="compare with drivers/command_maps/default.yaml and the guide "
            "drivers/command_maps/README.md; unknown keys are not allowed",
        )
    common, sweep, data, trigger = raw["common"], raw["sweep"], raw["data"], raw["trigger"]

    settings: dict[str, Setting] = {}
    for key in SETTING_KEYS:
        settings[key] = _setting(sweep[key], path, f"sweep.{key}")
    correction = _setting(raw["correction"], path, "correction")
    plain = [
        ("common.identity", common["identity"]),
        ("common.error_query", common["error_query"]),
        ("sweep.time_query", sweep["time_query"]),
        ("trigger.sync.query", trigger["sync"]["query"]),
    ]
    if "frequency_query" in data:
        plain.append(("data.frequency_query", data["frequency_query"]))
    for key, text in plain:
        _check_fields(text, set(), path, key)
    traces = _traces(data["traces"], path)
    sync_raw = trigger["sync"]
    sync = Sync(
        method=sync_raw["method"],
        query=sync_raw["query"],
        mask=int(sync_raw.get("mask", 0)),
        interval_s=float(sync_raw.get("interval_s", 0.05)),
        before=tuple(sync_raw.get("before", ())),
    )
    error_codes: dict[int, tuple[str, str | None]] = {}
    for i, entry in enumerate(common.get("error_codes", [])):
        if entry["code"] in error_codes:
            raise CommandMapError(
                path,
                f"common.error_codes.{i}.code",
                f"code {entry['code']} is listed twice",
                hint="keep one entry per code",
            )
        error_codes[int(entry["code"])] = (entry["meaning"], entry.get("fix"))

    kind = raw.get("kind", "network")
    wrong = [p for p in data["parameters"] if (p == "RATIO") != (kind == "gain_phase")]
    if wrong:
        raise CommandMapError(
            path,
            "data.parameters",
            f"{wrong} do not belong to a map of kind {kind!r}",
            hint="a network analyser reads S11, S21, S12, S22; a gain-phase analyser RATIO",
        )

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
        sync=sync,
        timeout_factor=float(trigger.get("timeout_factor", 2.0)),
        timeout_margin_s=float(trigger.get("timeout_margin_s", 10.0)),
        data_format=data["format"],
        format_commands=tuple(data["format_commands"]),
        big_endian=data.get("byte_order", "big") == "big",
        block_terminated=bool(data.get("block_terminated", True)),
        frequency_query=data.get("frequency_query"),
        traces=traces,
        parameters=tuple(data["parameters"]),
        limits=Limits(**limits),
        error_codes=error_codes,
        kind=raw.get("kind", "network"),
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


_TRACE_FIELDS = {
    "name": ({"parameter"}, {"parameter", "name"}),
    "number": ({"number"}, {"parameter", "number", "name"}),
    "channel": ({"number"}, {"parameter", "number", "name"}),
}


def _traces(raw: dict[str, Any], path: str) -> Traces:
    """Check the trace templates: each must say which trace it means, with known fields."""
    mode = raw["select_by"]
    needed, allowed = _TRACE_FIELDS[mode]
    if mode == "channel" and "define" in raw:
        raise CommandMapError(
            path,
            "data.traces.define",
            "a trace implied by its channel has no define command",
            hint="remove define, or use select_by: number",
        )
    if "name" in raw:
        _check_subset(raw["name"], set(), {"parameter", "number"}, path, "data.traces.name")
    for key in ("define", "select", "query"):
        if key in raw:
            _check_subset(raw[key], needed, allowed, path, f"data.traces.{key}")
    numbers = raw.get("numbers")
    if numbers and len(set(numbers.values())) != len(numbers):
        raise CommandMapError(
            path,
            "data.traces.numbers",
            f"two parameters share a number: {numbers}",
            hint="give each parameter its own trace or channel number",
        )
    return Traces(
        select_by=mode,
        query=raw["query"],
        define=raw.get("define"),
        select=raw.get("select"),
        name=raw.get("name"),
        numbers=dict(numbers) if numbers else None,
    )


def _fields_of(template: str, path: str, key: str) -> set[str]:
    try:
        parts = string.Formatter().parse(template)
        return {field for _, field, _, _ in parts if field is not None}
    except ValueError as exc:
        raise CommandMapError(
            path,
            key,
            f"bad template {template!r}: {exc}",
            hint="write literal braces as '{{' and '}}'",
        ) from exc


def _check_subset(template: str, needed: set[str], allowed: set[str], path: str, key: str):
    """A template must hold one of ``needed`` (when any) and nothing outside ``allowed``."""
    found = _fields_of(template, path, key)
    unknown = found - allowed
    if unknown or (needed and not found & needed):
        want = " or ".join("{" + n + "}" for n in sorted(needed)) if needed else "no field"
        may = ", ".join("{" + a + "}" for a in sorted(allowed)) or "none"
        raise CommandMapError(
            path,
            key,
            f"template {template!r} must contain {want} (allowed: {may}), "
            f"found {', '.join('{' + f + '}' for f in sorted(found)) or 'none'}",
            hint="see 'Trace set-up' in drivers/command_maps/README.md",
        )


def _check_fields(template: str, wanted: set[str], path: str, key: str) -> None:
    """A template must hold exactly the ``{fields}`` in ``wanted`` (literal braces: ``{{``)."""
    found = _fields_of(template, path, key)
    if found != wanted:
        expected = ", ".join("{" + w + "}" for w in sorted(wanted)) or "no {fields}"
        got = ", ".join("{" + f + "}" for f in sorted(found)) or "none"
        raise CommandMapError(
            path,
            key,
            f"template {template!r} must contain {expected}, found {got}",
            hint="use only the field names shown in drivers/command_maps/default.yaml",
        )
