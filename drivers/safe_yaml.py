"""YAML read with bounds: every YAML file zbench reads (procedures, scenarios, command maps).

PyYAML's safe loader refuses arbitrary objects, but not everything else a hostile or
careless file can do. Here, on top of it:

- the file is at most :data:`MAX_BYTES` long;
- nesting is at most :data:`MAX_DEPTH` levels, checked while composing, before PyYAML's
  recursive composer can run out of stack (thousands of ``[`` or nested mappings);
- an alias may not point into the node that holds it (``a: &a [*a]``);
- the document, with every alias expanded, has at most :data:`MAX_NODES` nodes, counted
  as it is composed (linear in the file), so an alias chain that doubles at every level
  (the "billion laughs" shape) is refused before anything walks it;
- only the plain YAML tags (``!!str``, ``!!int``, ``!!float``, ``!!bool``, ``!!null``,
  ``!!seq``, ``!!map``) are accepted: ``!!python/...`` and the like are refused by name;
- merge keys (``<<:``) are refused with a hint to write the keys out.

A refusal is a :class:`YamlRefusedError` with the line (1-based) where the problem starts and
a hint. Its message never quotes the file's text beyond a tag or an anchor name.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import yaml

MAX_BYTES = 128_000
MAX_DEPTH = 50
MAX_NODES = 20_000

_PLAIN_TAGS = frozenset(
    f"tag:yaml.org,2002:{name}" for name in ("str", "int", "float", "bool", "null", "seq", "map")
)
_MERGE_TAG = "tag:yaml.org,2002:merge"


class YamlRefusedError(ValueError):
    """A YAML file refused: ``message``, ``line`` (1-based or None) and ``hint``."""

    def __init__(self, message: str, *, line: int | None = None, hint: str | None = None):
        super().__init__(message)
        self.message = message
        self.line = line
        self.hint = hint


def _line(mark: Any) -> int | None:
    return mark.line + 1 if mark is not None else None


class _BoundedLoader(yaml.SafeLoader):
    """SafeLoader whose composer counts depth and expanded size, and vets tags and aliases."""

    def __init__(self, stream: str):
        super().__init__(stream)
        self._depth = 0
        self._open_anchors: set[str] = set()
        self._sizes: dict[int, tuple[yaml.Node, int]] = {}
        self._total = 0

    def fetch_flow_collection_start(self, TokenClass: Any) -> None:
        # The scanner keeps a possible key per open bracket and revisits them all for each
        # token: thousands of '[' would cost quadratic time before any node is composed.
        if self.flow_level >= MAX_DEPTH:
            raise YamlRefusedError(
                f"nested more than {MAX_DEPTH} levels deep",
                line=_line(self.get_mark()),
                hint="a zbench file needs only a few levels; flatten the structure",
            )
        super().fetch_flow_collection_start(TokenClass)

    def compose_node(self, parent: Any, index: Any) -> yaml.Node:
        if self.check_event(yaml.AliasEvent):
            event = self.peek_event()
            if event.anchor in self._open_anchors:
                raise YamlRefusedError(
                    f"the alias *{event.anchor} refers to the node that contains it",
                    line=_line(event.start_mark),
                    hint="an alias may only repeat a node that is complete; remove the loop",
                )
            node = super().compose_node(parent, index)
            self._count(self._size(node), node)
            return node
        event = self.peek_event()
        if self._depth >= MAX_DEPTH:
            raise YamlRefusedError(
                f"nested more than {MAX_DEPTH} levels deep",
                line=_line(event.start_mark),
                hint="a zbench file needs only a few levels; flatten the structure",
            )
        tag = getattr(event, "tag", None)
        if tag is not None and tag != "!" and tag not in _PLAIN_TAGS:
            shown = tag.replace("tag:yaml.org,2002:", "!!")[:60]
            raise YamlRefusedError(
                f"the tag {shown} is not allowed",
                line=_line(event.start_mark),
                hint="remove the tag: zbench reads plain text, numbers, lists and mappings",
            )
        anchor = getattr(event, "anchor", None)
        if anchor is not None:
            self._open_anchors.add(anchor)
        self._depth += 1
        try:
            node = super().compose_node(parent, index)
        finally:
            self._depth -= 1
            if anchor is not None:
                self._open_anchors.discard(anchor)
        size = 1
        if isinstance(node, yaml.MappingNode):
            for key, value in node.value:
                if key.tag == _MERGE_TAG:
                    raise YamlRefusedError(
                        "merge keys ('<<') are not supported",
                        line=_line(key.start_mark),
                        hint="write the keys out in this mapping instead of merging another one",
                    )
                size += self._size(key) + self._size(value)
        elif isinstance(node, yaml.SequenceNode):
            size += sum(self._size(item) for item in node.value)
        self._count(1, node)
        self._sizes[id(node)] = (node, size)
        return node

    def _count(self, added: int, node: yaml.Node) -> None:
        """Add to the expanded size of the whole document; refuse past :data:`MAX_NODES`."""
        self._total += added
        if self._total > MAX_NODES:
            raise YamlRefusedError(
                f"the document expands to more than {MAX_NODES} values (through its aliases)",
                line=_line(node.start_mark),
                hint="repeat fewer values through aliases (&name / *name), or write them out",
            )

    def _size(self, node: yaml.Node) -> int:
        known = self._sizes.get(id(node))
        return known[1] if known is not None and known[0] is node else 1


def _refusal_from(exc: yaml.YAMLError) -> YamlRefusedError:
    """A YAML syntax error as a refusal, without the snippet of the file PyYAML adds."""
    mark = getattr(exc, "problem_mark", None) or getattr(exc, "context_mark", None)
    problem = getattr(exc, "problem", None) or getattr(exc, "context", None)
    if problem is None:
        problem = type(exc).__name__
    return YamlRefusedError(
        f"not valid YAML: {problem}",
        line=_line(mark),
        hint="check the indentation and the quoting on that line",
    )


def compose_text(text: str) -> yaml.Node | None:
    """Compose ``text`` into a node graph within the bounds; None for an empty document."""
    if len(text) > MAX_BYTES:
        raise YamlRefusedError(
            f"the file is larger than {MAX_BYTES // 1000} kB",
            hint="a zbench YAML file is a few kilobytes; check that this is the right file",
        )
    loader = _BoundedLoader(text)
    try:
        return loader.get_single_node()
    except RecursionError:  # pragma: no cover - the depth bound comes first
        raise YamlRefusedError(
            "nested too deeply", hint="a zbench file needs only a few levels"
        ) from None
    except yaml.YAMLError as exc:
        raise _refusal_from(exc) from None
    finally:
        loader.dispose()


def construct_scalar(node: yaml.ScalarNode) -> Any:
    """The Python value of a scalar node as the safe loader reads it."""
    try:
        return yaml.SafeLoader("").construct_object(node, deep=True)
    except (yaml.YAMLError, ValueError, OverflowError) as exc:
        raise YamlRefusedError(
            f"cannot read this value ({type(exc).__name__})",
            line=_line(node.start_mark),
            hint="write a plain number or text",
        ) from None


def load_text(text: str) -> Any:
    """Like ``yaml.safe_load`` within the bounds above (None for an empty document)."""
    node = compose_text(text)
    if node is None:
        return None
    loader = yaml.SafeLoader("")
    try:
        return loader.construct_document(node)
    except (yaml.YAMLError, ValueError, OverflowError) as exc:
        mark = getattr(exc, "problem_mark", None)
        raise YamlRefusedError(
            f"cannot read a value ({type(exc).__name__})",
            line=_line(mark),
            hint="write plain numbers, text, lists and mappings",
        ) from None


def read_text(path: str | Path) -> str:
    """A YAML file's text, refusing one larger than :data:`MAX_BYTES` before reading it.

    Raises ``OSError`` and ``UnicodeDecodeError`` as ``Path.read_text`` does.
    """
    path = Path(path)
    if path.exists() and not path.is_file():
        # A folder, a FIFO or a device: opening a FIFO would wait for a writer forever.
        raise YamlRefusedError(
            "not a regular file",
            hint="give the path of a YAML file (a folder, a pipe or a "
            "device cannot be read as one)",
        )
    with path.open("rb") as handle:
        data = handle.read(MAX_BYTES + 1)
    if len(data) > MAX_BYTES:
        raise YamlRefusedError(
            f"the file is larger than {MAX_BYTES // 1000} kB",
            hint="a zbench YAML file is a few kilobytes; check that this is the right file",
        )
    return data.decode("utf-8")


def schema_error_words(error: Any) -> str:
    """A jsonschema ``ValidationError`` in words that never quote the checked value.

    jsonschema's own message repeats the value (``'root:x:0:0' is not of type
    'object'``); a file read by mistake may be private, so the message says only what
    was expected.
    """
    kind = error.validator
    expected = error.validator_value
    if kind == "additionalProperties":
        allowed = set(error.schema.get("properties", {}))
        extra = sorted(str(k) for k in error.instance if k not in allowed)
        # A key is named only when it looks like one (a misspelt key): any other text
        # may be a line of a file that is not a map at all.
        named = [k for k in extra if re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]{0,30}", k)]
        return f"unknown key {named[0]!r}" if named else "unknown key"
    if kind == "required":
        instance = error.instance if isinstance(error.instance, dict) else {}
        missing = [k for k in expected if k not in instance]
        return f"missing key {missing[0]!r}" if missing else "a key is missing"
    if kind == "type":
        found = type(error.instance).__name__
        wanted = " or ".join(expected) if isinstance(expected, list) else expected
        return f"expected {wanted}, found a {found}"
    if kind == "enum":
        return f"expected one of {', '.join(map(str, expected))[:200]}"
    if kind in ("minimum", "maximum", "exclusiveMinimum", "exclusiveMaximum"):
        return f"the value breaks its bound ({kind} {expected})"
    if kind in ("pattern", "minLength", "maxLength", "format"):
        return f"the text does not have the expected form ({kind})"
    if kind in ("minItems", "maxItems", "uniqueItems"):
        return f"the list does not have the expected entries ({kind})"
    return f"does not match the schema ({kind})"
