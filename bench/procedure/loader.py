"""Read a procedure file keeping the line of every key, and validate it against the schema.

PyYAML's composer gives nodes with start marks; the document is built from them here
so that each value's path (``("parts", 2, "bias", 0)``) maps to the line it was written
on. Every schema error then names file:line and key, and says how to fix it.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import yaml
from jsonschema.exceptions import ValidationError

from bench.errors import ProcedureError
from bench.procedure.schema import PROCEDURE_SCHEMA, validator
from drivers.safe_yaml import YamlRefusedError, compose_text, construct_scalar, read_text

PathKey = tuple[Any, ...]


@dataclass(frozen=True)
class SourceDocument:
    """A parsed procedure: the plain data, where it came from, and the line of each path."""

    data: Any
    path: str
    lines: dict[PathKey, int]

    def line_of(self, key_path: PathKey) -> int | None:
        """Line (1-based) of ``key_path`` or of its nearest written parent."""
        probe = tuple(key_path)
        while probe:
            if probe in self.lines:
                return self.lines[probe]
            probe = probe[:-1]
        return self.lines.get((), None)

    def error(self, key_path: PathKey, message: str, hint: str | None = None) -> ProcedureError:
        """A :class:`ProcedureError` located at ``key_path``."""
        return ProcedureError(
            message, path=self.path, line=self.line_of(key_path), key=dotted(key_path), hint=hint
        )


def dotted(key_path: PathKey) -> str:
    """``("parts", 2, "bias")`` -> ``parts[2].bias``."""
    text = ""
    for part in key_path:
        if isinstance(part, int):
            text += f"[{part}]"
        else:
            text += f".{part}" if text else str(part)
    return text or "<top>"


def _build(node: yaml.Node, path: PathKey, lines: dict[PathKey, int], source: str) -> Any:
    lines.setdefault(path, node.start_mark.line + 1)
    if isinstance(node, yaml.MappingNode):
        result: dict[Any, Any] = {}
        for key_node, value_node in node.value:
            key = _build(key_node, (*path, "<key>"), {}, source)
            if not isinstance(key, str):
                raise ProcedureError(
                    f"keys must be words, found {key!r}",
                    path=source,
                    line=key_node.start_mark.line + 1,
                    key=dotted(path),
                    hint="write the key as plain text",
                )
            if key in result:
                raise ProcedureError(
                    "this key is given twice",
                    path=source,
                    line=key_node.start_mark.line + 1,
                    key=dotted((*path, key)),
                    hint="keep one of the two entries",
                )
            lines[(*path, key)] = key_node.start_mark.line + 1
            result[key] = _build(value_node, (*path, key), lines, source)
        return result
    if isinstance(node, yaml.SequenceNode):
        return [_build(item, (*path, i), lines, source) for i, item in enumerate(node.value)]
    # Scalars: the resolver already chose the tag (int, float, bool, str ...).
    try:
        return construct_scalar(node)
    except YamlRefusedError as exc:
        raise ProcedureError(
            exc.message, path=source, line=exc.line, key=dotted(path), hint=exc.hint
        ) from None


def parse_text(text: str, source: str = "<procedure>") -> SourceDocument:
    """Parse YAML ``text`` into a :class:`SourceDocument` (no schema check yet)."""
    try:
        # Bounded: size, nesting, alias expansion, tags and merge keys (drivers.safe_yaml).
        node = compose_text(text)
    except YamlRefusedError as exc:
        raise ProcedureError(exc.message, path=source, line=exc.line, hint=exc.hint) from None
    if node is None:
        raise ProcedureError(
            "the file is empty", path=source, hint="start from one of the files in procedures/"
        )
    lines: dict[PathKey, int] = {}
    data = _build(node, (), lines, source)
    return SourceDocument(data=data, path=source, lines=lines)


def _schema_at(schema_path: list[Any]) -> dict[str, Any]:
    node: Any = PROCEDURE_SCHEMA
    for part in schema_path:
        node = node[part]
    return node


def _describe(error: ValidationError, doc: SourceDocument) -> ProcedureError:
    path = tuple(error.absolute_path)
    kind = error.validator
    if kind == "additionalProperties":
        allowed = sorted(error.schema.get("properties", {}))
        extra = sorted(set(error.instance) - set(allowed))
        key = extra[0] if extra else "?"
        return doc.error(
            (*path, key),
            "unknown key",
            hint=f"remove it or use one of: {', '.join(allowed)}",
        )
    if kind == "required":
        missing = [k for k in error.validator_value if k not in error.instance]
        key = missing[0] if missing else "?"
        where = dotted(path) if path else "the top level"
        return ProcedureError(
            "is required but missing",
            path=doc.path,
            line=doc.line_of(path),
            key=dotted((*path, key)),
            hint=f"add '{key}:' under {where}",
        )
    if kind == "enum":
        choices = ", ".join(str(c) for c in error.validator_value)
        return doc.error(path, f"{error.instance!r} is not allowed", hint=f"use one of: {choices}")
    if kind == "type":
        wanted = error.validator_value
        wanted = " or ".join(wanted) if isinstance(wanted, list) else wanted
        return doc.error(
            path,
            f"expected {wanted}, found {type(error.instance).__name__} {error.instance!r}",
            hint=_type_hint(error),
        )
    if kind in ("minimum", "maximum", "minItems", "maxItems", "minLength"):
        bound = error.validator_value
        words = {
            "minimum": f"must be at least {bound}",
            "maximum": f"must be at most {bound}",
            "minItems": f"needs at least {bound} entr{'y' if bound == 1 else 'ies'}",
            "maxItems": f"takes at most {bound} entries",
            "minLength": "must not be empty",
        }[kind]
        return doc.error(path, f"{words}, found {error.instance!r}", hint="change the value")
    if kind == "pattern":
        return doc.error(
            path,
            f"{error.instance!r} is not a usable name",
            hint="use letters, digits, '.', '_' or '-', starting with a letter or digit",
        )
    if kind == "uniqueItems":
        return doc.error(path, "entries must not repeat", hint="remove the repeated entry")
    if kind == "unit":
        unit = error.validator_value
        example = {
            "Hz": "'100 Hz', '200 MHz'",
            "V": "'6.3 V'",
            "A": "'10 mA'",
            "ohm": "'499 ohm'",
            "dB": "'-100 dB'",
            "dBm": "'0 dBm'",
            "duration": "'250 ms', '10 min', '8 h'",
        }.get(unit, "a number")
        return doc.error(path, error.message, hint=f"write it like {example}")
    if kind == "oneOf":
        return doc.error(
            path,
            f"{error.instance!r} is neither a count nor a list of names",
            hint="write a number of samples (3) or their names ([s1, s2, s3])",
        )
    return doc.error(path, error.message, hint="see the schema in bench/procedure/schema.py")


def _type_hint(error: ValidationError) -> str:
    unit = error.schema.get("unit") if isinstance(error.schema, dict) else None
    if unit:
        return f"give a number or a value with its unit ({unit})"
    return "change the value to the expected type"


def validate_document(doc: SourceDocument) -> list[ProcedureError]:
    """Every schema error of ``doc``, first by line."""
    found = sorted(
        validator().iter_errors(doc.data),
        key=lambda e: (doc.line_of(tuple(e.absolute_path)) or 0, list(e.absolute_path).__repr__()),
    )
    errors = []
    for error in found:
        # oneOf reports its sub-errors as context; the best one is usually the most specific.
        errors.append(_describe(error, doc))
    return errors


def load_document(path: str | Path) -> SourceDocument:
    """Read and schema-check a procedure file; raise the first error (all are in ``errors``)."""
    source = Path(path)
    try:
        text = read_text(source)
    except FileNotFoundError:
        raise ProcedureError(
            "no such procedure file", path=str(source), hint="check the path"
        ) from None
    except YamlRefusedError as exc:
        raise ProcedureError(exc.message, path=str(source), hint=exc.hint) from None
    except OSError as exc:
        raise ProcedureError(
            f"cannot read the procedure file ({exc.strerror or type(exc).__name__})",
            path=str(source),
            hint="check the path and its permissions",
        ) from None
    except UnicodeDecodeError:
        raise ProcedureError(
            "not a UTF-8 text file", path=str(source), hint="save the procedure as UTF-8 text"
        ) from None
    doc = parse_text(text, str(source))
    errors = validate_document(doc)
    if errors:
        raise ProcedureErrors(errors)
    return doc


class ProcedureErrors(ProcedureError):  # noqa: N818 (a list of ProcedureError)
    """Several procedure errors at once; the message lists all of them."""

    def __init__(self, errors: list[ProcedureError]):
        self.errors = errors
        first = errors[0]
        Exception.__init__(self, "\n".join(str(e) for e in errors))
        self.path = first.path
        self.line = first.line
        self.key = first.key
        self.hint = first.hint
