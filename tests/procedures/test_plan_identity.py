"""A plan's identity: names that cannot split a line, one step per bias point, one writer
per file, and file names a file system can hold, all by ``check`` time."""

from __future__ import annotations

import re
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from bench.exports import safe_filename, spice_name
from bench.procedure.loader import ProcedureErrors
from bench.procedure.plan import plan_from_text
from bench.procedure.schema import PROCEDURE_SCHEMA
from bench.runstore import file_stem
from drivers.command_map import _schema as command_map_schema
from simulated_instruments.scenario import SCHEMA as SCENARIO_SCHEMA

HEAD = """\
name: identity
mode: unattended
sweep: {start: 1 kHz, stop: 10 MHz, points: 11}
"""
BIASED_HEAD = """\
name: identity
mode: unattended
instruments:
  dc_source: {max_voltage: 10 V, max_current: 50 mA}
sweep: {start: 1 kHz, stop: 10 MHz, points: 11}
fixture: {bias_tee_rating: 25 V, dc_block_rating: 50 V}
"""


def _plan(text: str):
    return plan_from_text(text, "identity.yaml")


def _patterns(node: Any) -> list[str]:
    found: list[str] = []
    if isinstance(node, dict):
        if isinstance(node.get("pattern"), str):
            found.append(node["pattern"])
        found.extend(node.get("patternProperties", {}))
        for value in node.values():
            found.extend(_patterns(value))
    elif isinstance(node, list):
        for value in node:
            found.extend(_patterns(value))
    return found


@pytest.mark.parametrize(
    "schema",
    [PROCEDURE_SCHEMA, command_map_schema(), SCENARIO_SCHEMA],
    ids=["procedure", "command map", "scenario"],
)
def test_every_schema_pattern_is_anchored_at_the_very_end(schema):
    # jsonschema searches with Python's re, where `$` also matches before a final "\n".
    patterns = _patterns(schema)
    assert patterns, "the schema has patterns to check"
    for pattern in patterns:
        assert pattern.startswith("^") and pattern.endswith("\\Z"), pattern
        assert re.search(pattern, "a\n") is None


@pytest.mark.parametrize(
    ("text", "key"),
    [
        (
            HEAD.replace("name: identity", 'name: "identity\\n"')
            + "parts: [{name: A, kind: mlcc}]\n",
            "name",
        ),
        (HEAD + 'parts: [{name: "A\\n", kind: mlcc}]\n', "parts[0].name"),
        (HEAD + 'parts: [{name: A, kind: mlcc, samples: ["s1\\n"]}]\n', "parts[0].samples"),
    ],
    ids=["procedure name", "part name", "sample name"],
)
def test_a_name_ending_in_a_newline_is_refused(text, key):
    with pytest.raises(ProcedureErrors) as info:
        _plan(text)
    assert info.value.key == key
    assert info.value.exit_code == 2


def test_bias_points_equal_after_unit_parsing_are_one_point():
    text = BIASED_HEAD + (
        "parts:\n  - {name: C, kind: mlcc, rated_voltage: 6.3 V, bias: [0 V, 2 V, 2000 mV]}\n"
    )
    with pytest.raises(ProcedureErrors) as info:
        _plan(text)
    assert info.value.key == "parts[0].bias[2]"
    assert "same bias point as bias[1]" in str(info.value)
    # Written once, the same part plans one step per point.
    plan = _plan(text.replace(", 2000 mV", ""))
    ids = [s.id for s in plan.steps if s.kind == "measure"]
    assert ids == ["measure/C/s1/0V", "measure/C/s1/2V"]


@pytest.mark.parametrize(
    ("parts", "words"),
    [
        (
            "[{name: A_s1, kind: mlcc, samples: [x]}, {name: A, kind: mlcc, samples: [s1_x]}]",
            "would both write raw/A_s1_x_0V.s2p",
        ),
        ("[{name: B, kind: mlcc, samples: [s1, S1]}]", "would both write raw/B_S1_0V.s2p"),
        ("[{name: M-1, kind: mlcc}, {name: M_1, kind: mlcc}]", "SPICE subcircuit name"),
    ],
    ids=["underscore join", "letter case", "spice name"],
)
def test_two_outputs_on_one_file_are_refused_at_check(parts, words):
    with pytest.raises(ProcedureErrors) as info:
        _plan(HEAD + f"parts: {parts}\n")
    assert words in str(info.value)
    assert info.value.line is not None


def test_a_name_too_long_for_a_file_system_is_refused_at_check():
    with pytest.raises(ProcedureErrors, match="too long for a file system") as info:
        _plan(HEAD + f"parts: [{{name: {'P' * 300}, kind: mlcc}}]\n")
    assert info.value.key == "parts[0].name"
    with pytest.raises(ProcedureErrors, match="run folder's name"):
        _plan(
            HEAD.replace("name: identity", f"name: {'n' * 250}")
            + "parts: [{name: A, kind: mlcc}]\n"
        )


# Names from a small alphabet so that collisions (by '_' joins, case, '.'/'-') are likely.
NAMES = st.text(alphabet="aAb_-.1", min_size=1, max_size=4).filter(lambda s: s[0].isalnum())
BIAS = st.sampled_from(["0 V", "1 V", "1000 mV", "1.5 V", "2 V", "0.5 V"])


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    parts=st.lists(
        st.tuples(NAMES, st.lists(NAMES, min_size=1, max_size=3), st.lists(BIAS, max_size=3)),
        min_size=1,
        max_size=4,
    )
)
def test_accepted_plans_never_map_two_outputs_to_one_file(parts):
    lines = []
    for name, samples, bias in parts:
        entry = f"{{name: '{name}', kind: mlcc, rated_voltage: 6.3 V, samples: {samples!r}"
        if bias:
            entry += f", bias: [{', '.join(bias)}]"
        lines.append(f"  - {entry}}}")
    text = BIASED_HEAD + "parts:\n" + "\n".join(lines) + "\n"
    try:
        plan = _plan(text)
    except ProcedureErrors:
        return  # refused with a message: nothing will be written
    # The names the run store, the exports and the report build, computed here with
    # their own functions, compared as a case-insensitive file system would.
    written: list[str] = []
    spice: list[str] = []
    for step in plan.steps:
        if step.kind in ("calibrate", "mount_open", "mount_short", "measure"):
            written.append(f"raw/{file_stem(step.id)}.s2p")
        if step.placement is not None:
            label = f"{step.placement.part}_{step.placement.sample}"
            label += f"_{step.bias_v:g}V" if step.bias_v else ""
            written += [
                f"corrected/{safe_filename(label)}.s1p",
                f"models/{safe_filename(label)}.sub",
            ]
            spice.append(spice_name(label))
    for part in plan.parts:
        written.append(f"models/{safe_filename(part.name)}.lib")
        spice.append(spice_name(f"{part.name}_typ"))
    folded = [w.casefold() for w in written]
    assert len(set(folded)) == len(folded)
    assert len({s.casefold() for s in spice}) == len(spice)
