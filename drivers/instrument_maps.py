"""Command maps of the fixture switch and the DC source: their dialects in YAML, not code.

``drivers/command_maps/switch/<name>.yaml`` and ``drivers/command_maps/dc_source/<name>.yaml``
hold the command forms of :class:`~drivers.switch.SwitchCommands` and
:class:`~drivers.dc_source.DcSourceCommands`. A map is read within the bounds of
:mod:`drivers.safe_yaml`, validated against the schema below (every key known, every
template with exactly the fields it needs) and becomes the frozen commands dataclass.
A procedure names one by ``instruments.switch.command_map`` or
``instruments.dc_source.command_map``: a shipped name, or a path to a file.

Errors are :class:`~drivers.errors.CommandMapError` naming the file and key; they never
quote the file's contents (a wrong path may point at a private file).
"""

from __future__ import annotations

import dataclasses
import string
from pathlib import Path
from typing import Any

import jsonschema

from drivers.dc_source import DcSourceCommands
from drivers.errors import CommandMapError
from drivers.safe_yaml import YamlRefusedError, load_text, read_text, schema_error_words
from drivers.switch import SwitchCommands

MAPS_DIR = Path(__file__).parent / "command_maps"

_COMMAND = {"type": "string", "minLength": 1, "maxLength": 200, "pattern": r"^[ -~]+\Z"}
_OPTIONAL = {"anyOf": [_COMMAND, {"type": "null"}]}

#: For each kind: its commands dataclass, and the fields each template must use.
KINDS: dict[str, tuple[type, dict[str, set[str]]]] = {
    "switch": (
        SwitchCommands,
        {"close": {"position"}, "close_query": {"position"}},
    ),
    "dc_source": (
        DcSourceCommands,
        {
            "voltage": {"value"},
            "current_limit": {"value"},
            "output": {"value"},
            "over_voltage": {"value"},
            "over_current": {"value"},
        },
    ),
}


def _schema(kind: str) -> dict[str, Any]:
    commands, _ = KINDS[kind]
    properties: dict[str, Any] = {"name": {"type": "string", "pattern": r"^[A-Za-z0-9_.-]+\Z"}}
    required = ["name"]
    for f in dataclasses.fields(commands):
        optional = f.default is None
        properties[f.name] = _OPTIONAL if optional else _COMMAND
        if not optional:
            required.append(f.name)
    return {
        "type": "object",
        "additionalProperties": False,
        "properties": properties,
        "required": required,
    }


def available_maps(kind: str) -> list[str]:
    """Names of the shipped maps of ``kind`` (``"switch"`` or ``"dc_source"``)."""
    return sorted(p.stem for p in (MAPS_DIR / kind).glob("*.yaml"))


def _resolve(kind: str, name_or_path: str | Path) -> Path:
    text = str(name_or_path)
    if text in available_maps(kind):
        return MAPS_DIR / kind / f"{text}.yaml"
    path = Path(text)
    if path.suffix not in (".yaml", ".yml"):
        raise CommandMapError(
            text[:80],
            "",
            f"no shipped {kind.replace('_', ' ')} map of this name, and not a .yaml file",
            hint=f"use one of {available_maps(kind)}, or the path of a .yaml map file",
        )
    return path


def load_instrument_map(kind: str, name_or_path: str | Path = "default") -> Any:
    """The commands of ``kind`` from a shipped map name or a map file path."""
    path = _resolve(kind, name_or_path)
    try:
        raw = load_text(read_text(path))
    except YamlRefusedError as exc:
        line = f" (line {exc.line})" if exc.line is not None else ""
        raise CommandMapError(str(path), "", f"{exc.message}{line}", hint=exc.hint) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise CommandMapError(
            str(path),
            "",
            f"cannot read the map ({getattr(exc, 'strerror', None) or type(exc).__name__})",
            hint=f"give a readable map file, or one of {available_maps(kind)}",
        ) from None
    return parse_instrument_map(kind, raw, str(path))


def parse_instrument_map(kind: str, raw: Any, path: str = "<map>") -> Any:
    """Validate an already-parsed map of ``kind`` and build its commands dataclass."""
    commands, fields_needed = KINDS[kind]
    validator = jsonschema.Draft202012Validator(_schema(kind))
    errors = sorted(validator.iter_errors(raw), key=lambda e: list(map(str, e.path)))
    if errors:
        first = errors[0]
        key = ".".join(str(p) for p in first.absolute_path) or "<top level>"
        raise CommandMapError(
            path,
            key,
            "a command must be one line of printable ASCII, at most 200 characters"
            if first.validator in ("pattern", "minLength", "maxLength")
            else schema_error_words(first),
            hint=f"compare with drivers/command_maps/{kind}/default.yaml",
        )
    values = {k: v for k, v in raw.items() if k != "name"}
    for key, text in values.items():
        if text is None:
            continue
        wanted = fields_needed.get(key, set())
        try:
            used = {f for _, f, _, _ in string.Formatter().parse(text) if f is not None}
        except ValueError:
            used = {"<unbalanced braces>"}
        if used != wanted:
            need = ", ".join(f"{{{w}}}" for w in sorted(wanted)) or "no {field}"
            raise CommandMapError(
                path, key, "the template has the wrong fields", hint=f"write it with {need}"
            )
    return commands(**values)
