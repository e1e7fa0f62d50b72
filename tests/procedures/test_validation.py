"""Procedure validation: every malformed file gives file:line, key and a fix."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest
from click.testing import CliRunner

from bench.cli import cli
from bench.errors import ProcedureError
from bench.procedure.loader import parse_text, validate_document
from bench.procedure.plan import build_plan, load_plan
from bench.procedure.schema import PROCEDURE_SCHEMA, parse_duration

REPO = Path(__file__).resolve().parents[2]
SHIPPED = sorted((REPO / "procedures").glob("*.yaml"))

GOOD = """\
name: t
sweep:
  start: 100 Hz
  stop: 100 MHz
  points: 201
fixture:
  positions: 8
  bias_tee_rating: 25 V
  dc_block_rating: 50 V
instruments:
  dc_source: {max_voltage: 20 V, max_current: 20 mA}
parts:
  - name: P1
    kind: mlcc
    nominal: 4.7u
    rated_voltage: 10 V
    samples: 3
    bias: [0 V, 5 V]
"""


def _write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "proc.yaml"
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def _errors(tmp_path: Path, text: str) -> list[ProcedureError]:
    path = _write(tmp_path, text)
    try:
        load_plan(path)
    except ProcedureError as exc:
        return list(getattr(exc, "errors", [exc]))
    return []


def _replace(old: str, new: str) -> str:
    assert old in GOOD
    return GOOD.replace(old, new)


# (description, procedure text, expected line, expected key, words in the message)
BAD = [
    (
        "unknown key",
        _replace("  points: 201", "  points: 201\n  pionts: 3"),
        6,
        "sweep.pionts",
        "unknown key",
    ),
    (
        "missing sweep",
        GOOD.replace("sweep:\n  start: 100 Hz\n  stop: 100 MHz\n  points: 201\n", ""),
        1,
        "sweep",
        "required",
    ),
    ("missing points", _replace("  points: 201\n", ""), 2, "sweep.points", "required"),
    ("wrong unit", _replace("stop: 100 MHz", "stop: 100 V"), 4, "sweep.stop", "not Hz"),
    ("not a number", _replace("start: 100 Hz", "start: lots"), 3, "sweep.start", "cannot read"),
    (
        "start above stop",
        _replace("start: 100 Hz", "start: 200 MHz"),
        4,
        "sweep.stop",
        "must be above start",
    ),
    (
        "too many points",
        _replace("points: 201", "points: 50001"),
        5,
        "sweep.points",
        "more than the analyser allows",
    ),
    (
        "bias above rating",
        _replace("bias: [0 V, 5 V]", "bias: [0 V, 12 V]"),
        18,
        "parts[0].bias[1]",
        "above the limit 10 V",
    ),
    (
        "bias above bias tee",
        _replace("bias_tee_rating: 25 V", "bias_tee_rating: 4 V"),
        18,
        "parts[0].bias[1]",
        "above the limit 4 V",
    ),
    (
        "bias without ratings",
        _replace("  bias_tee_rating: 25 V\n", ""),
        17,
        "parts[0].bias",
        "bias_tee_rating",
    ),
    (
        "position outside fixture",
        _replace("  positions: 8\n", "  positions: 8\n  use_positions: [1, 9]\n"),
        8,
        "fixture.use_positions[1]",
        "not on a 8-position fixture",
    ),
    ("bad kind", _replace("kind: mlcc", "kind: resistor"), 14, "parts[0].kind", "not allowed"),
    (
        "power too high",
        _replace("  points: 201", "  points: 201\n  power: 15 dBm"),
        6,
        "sweep.power",
        "outside the allowed",
    ),
    (
        "duplicate key",
        _replace("  points: 201", "  points: 201\n  points: 101"),
        6,
        "sweep.points",
        "given twice",
    ),
    ("bad yaml", _replace("  points: 201", "  points: [201"), None, None, "not valid YAML"),
    (
        "tolerance above one",
        _replace("    samples: 3", "    tolerance: 150 %\n    samples: 3"),
        17,
        "parts[0].tolerance",
        "between 0 and 1",
    ),
    (
        "steps out of order",
        GOOD + "steps: [measure, calibrate]\n",
        19,
        "steps[1]",
        "cannot come after",
    ),
    (
        "fit without measure",
        GOOD + "steps: [calibrate, fit]\n",
        19,
        "steps[1]",
        "needs a 'measure'",
    ),
    (
        "measure without calibrate",
        GOOD + "steps: [measure, fit]\n",
        19,
        "steps[0]",
        "needs a 'calibrate'",
    ),
    (
        "open mount without calibrate",
        GOOD + "steps: [mount_open, mount_short]\n",
        19,
        "steps[0]",
        "'mount_open' needs a 'calibrate'",
    ),
    (
        "open mount after the short",
        GOOD + "steps: [calibrate, mount_short, mount_open, measure]\n",
        19,
        "steps[2]",
        "'mount_open' cannot come after 'mount_short'",
    ),
    (
        "misspelt open step",
        GOOD + "steps: [calibrate, mount_opne, measure]\n",
        19,
        "steps[1]",
        "not allowed",
    ),
    (
        "hybrid without crossover",
        GOOD + "calibration: {method: hybrid}\n",
        19,
        "calibration.method",
        "crossover",
    ),
    (
        "bias on an inductor",
        _replace("kind: mlcc", "kind: inductor").replace("4.7u", "470n"),
        18,
        "parts[0].bias",
        "only applied to capacitors",
    ),
]


@pytest.mark.parametrize(("what", "text", "line", "key", "words"), BAD, ids=[b[0] for b in BAD])
def test_malformed_procedure_names_file_line_and_key(tmp_path, what, text, line, key, words):
    errors = _errors(tmp_path, text)
    assert errors, f"{what}: no error raised"
    matching = [e for e in errors if words in str(e)]
    assert matching, f"{what}: {words!r} not in {[str(e) for e in errors]}"
    error = matching[0]
    message = str(error)
    assert message.startswith(str(tmp_path / "proc.yaml")), message
    if line is not None:
        assert error.line == line, message
        assert f"proc.yaml:{line}:" in message
    if key is not None:
        assert error.key == key, message
    assert "fix:" in message, "every error says how to fix it"


def test_all_errors_are_reported_at_once(tmp_path):
    text = _replace("stop: 100 MHz", "stop: 100 V").replace("kind: mlcc", "kind: resistor")
    errors = _errors(tmp_path, text)
    keys = {e.key for e in errors}
    assert {"sweep.stop", "parts[0].kind"} <= keys


def test_good_procedure_resolves_to_si_values(tmp_path):
    plan = load_plan(_write(tmp_path, GOOD))
    assert plan.sweep.start == 100.0
    assert plan.sweep.stop == 100e6
    part = plan.part("P1")
    assert part.spec.nominal == pytest.approx(4.7e-6, rel=1e-15)
    assert part.samples == ("s1", "s2", "s3")
    assert part.bias == (0.0, 5.0)
    # min(part 10 V, bias tee 25 V, DC block 50 V, source 20 V) = 10 V
    assert plan.bias_limit(part) == 10.0
    ids = [s.id for s in plan.steps]
    assert ids[0] == "calibrate/through"
    assert "mount_short/p3" in ids and "mount_short/p4" not in ids
    assert ids.index("measure/P1/s1/0V") < ids.index("measure/P1/s1/5V") < ids.index("fit")


def test_open_mount_step_is_optional_and_per_position(tmp_path):
    # Without a steps list the open capture is not taken (it is optional).
    plain = load_plan(_write(tmp_path, GOOD))
    assert not any(s.kind == "mount_open" for s in plain.steps)
    plan = load_plan(
        _write(tmp_path, GOOD + "steps: [calibrate, mount_open, mount_short, measure]\n")
    )
    ids = [s.id for s in plan.steps]
    opens = [i for i in ids if i.startswith("mount_open/")]
    # One per used position, after the calibration and before the shorts.
    assert opens == ["mount_open/p1", "mount_open/p2", "mount_open/p3"]
    assert ids.index("calibrate/through") < ids.index("mount_open/p1")
    assert ids.index("mount_open/p3") < ids.index("mount_short/p1")
    assert plan.estimated_seconds() > plain.estimated_seconds() - 1.0
    assert plan.resolved["steps"] == ["calibrate", "mount_open", "mount_short", "measure"]


def test_check_command_shows_the_open_mount_step(tmp_path, capsys):
    result = CliRunner().invoke(cli, ["check", str(REPO / "procedures" / "series_resistors.yaml")])
    assert result.exit_code == 0, result.output
    assert "mount_open ×4" in result.output and "mount_short ×4" in result.output
    bad = _write(tmp_path, GOOD + "steps: [mount_open, measure]\n")
    from bench.cli import main

    assert main(["check", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "proc.yaml:19" in err and "'mount_open' needs a 'calibrate'" in err


def test_batches_fill_the_fixture_in_order(tmp_path):
    text = _replace("samples: 3", "samples: 11").replace("  positions: 8\n", "  positions: 4\n")
    plan = load_plan(_write(tmp_path, text))
    assert [len(b) for b in plan.batches] == [4, 4, 3]
    assert [p.position for p in plan.batches[2]] == [1, 2, 3]
    assert plan.batches[1][0].sample == "s5"


def test_schema_forbids_unknown_keys_everywhere():
    def walk(node, where):
        if isinstance(node, dict):
            if node.get("type") == "object":
                assert node.get("additionalProperties") is False, where
            for key, value in node.items():
                walk(value, f"{where}.{key}")
        elif isinstance(node, list):
            for i, value in enumerate(node):
                walk(value, f"{where}[{i}]")

    walk(PROCEDURE_SCHEMA, "schema")


def test_line_numbers_follow_the_text():
    doc = parse_text(
        "name: a\nsweep:\n  start: 1\n  stop: 2\nparts:\n  - name: x\n    kind: mlcc\n"
    )
    assert doc.line_of(("sweep", "stop")) == 4
    assert doc.line_of(("parts", 0, "kind")) == 7
    assert validate_document(doc)[0].key == "sweep.points"


def test_durations():
    assert parse_duration("250 ms") == pytest.approx(0.25)
    assert parse_duration("10 min") == 600.0
    assert parse_duration("8 h") == 28800.0
    assert parse_duration(3) == 3.0


@pytest.mark.parametrize("path", SHIPPED, ids=[p.name for p in SHIPPED])
def test_shipped_procedures_validate(path):
    plan = load_plan(path)
    assert plan.steps
    assert plan.estimated_seconds() > 0


def test_shipped_set_covers_the_ways_of_working():
    plans = {p.stem: load_plan(p) for p in SHIPPED}
    assert plans["demo"].mode == "unattended" and plans["demo"].fixture.positions == 8
    assert plans["guided_single_part"].mode == "guided"
    assert len(plans["guided_single_part"].fixture.use_positions) == 1
    assert plans["mlcc_dc_bias"].biased
    assert plans["series_resistors"].fixture.series_r == 499.0
    assert len(plans["unattended_lot"].parts) > 1


def test_check_command_prints_plan_and_exit_codes(tmp_path):
    runner = CliRunner()
    result = runner.invoke(cli, ["check", str(REPO / "procedures" / "demo.yaml")])
    assert result.exit_code == 0, result.output
    # mount_short: 8 positions, the two single mounts, the gain-phase analyser's two.
    for words in ("batches", "MC4U7-10V", "0, 2.5, 5 V", "estimated", "mount_short ×12"):
        assert words in result.output

    from bench.cli import main

    bad = _write(tmp_path, _replace("stop: 100 MHz", "stop: 100 V"))
    assert main(["check", str(bad)]) == 2


def test_build_plan_is_pure(tmp_path):
    # Building the plan twice from the same document gives the same steps.
    doc = parse_text(GOOD, "x.yaml")
    assert [s.id for s in build_plan(doc).steps] == [s.id for s in build_plan(doc).steps]
