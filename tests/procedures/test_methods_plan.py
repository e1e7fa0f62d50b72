"""Per-part methods in a procedure: defaults by kind, the steps and calibration each
method needs, what a method cannot be combined with, and `zbench check`'s account."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest
from click.testing import CliRunner

from bench.cli import cli
from bench.errors import ProcedureError
from bench.procedure.plan import load_plan

BASE = """\
name: t
mode: unattended
sweep: {start: 100 Hz, stop: 100 MHz, points: 101}
fixture: {positions: 4}
calibration: {method: through}
parts:
  - {name: C1, kind: mlcc, nominal: 1u, samples: 2}
  - {name: L1, kind: inductor, nominal: 1u, samples: 2}
  - {name: B1, kind: bead, samples: 1, method: [series-through, reflection]}
"""


def _plan(tmp_path: Path, text: str):
    path = tmp_path / "proc.yaml"
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return load_plan(path)


def test_method_defaults_follow_the_kind(tmp_path):
    plan = _plan(tmp_path, BASE)
    assert plan.part("C1").methods == ("shunt-through",)
    assert plan.part("L1").methods == ("series-through",)
    assert plan.part("B1").methods == ("series-through", "reflection")
    # Only the shunt-through part goes in the switched fixture.
    assert [(p.part, p.position) for b in plan.batches for p in b] == [("C1", 1), ("C1", 2)]


def test_each_single_mount_has_its_own_captures_then_its_samples(tmp_path):
    ids = [s.id for s in _plan(tmp_path, BASE).steps]
    assert ids[:4] == ["calibrate/short", "calibrate/open", "calibrate/load", "calibrate/through"]
    series = ids.index("mount_open/series-through")
    assert ids[series : series + 5] == [
        "mount_open/series-through",
        "mount_short/series-through",
        "measure/L1/s1/series-through",
        "measure/L1/s2/series-through",
        "measure/B1/s1/series-through",
    ]
    assert ids.index("measure/C1/s2/0V") < series < ids.index("mount_open/reflection")
    assert ids[ids.index("mount_open/reflection") :] == [
        "mount_open/reflection",
        "mount_short/reflection",
        "measure/B1/s1/reflection",
        "fit",
        "export",
        "report",
    ]


@pytest.mark.parametrize(
    ("methods", "standards"),
    [
        ("shunt-through", ("through",)),
        ("series-through", ("through",)),
        ("reflection", ("short", "open", "load")),
        ("[shunt-through, reflection]", ("short", "open", "load", "through")),
    ],
)
def test_calibration_follows_the_methods(tmp_path, methods, standards):
    text = BASE.split("parts:")[0] + f"parts:\n  - {{name: X, kind: bead, method: {methods}}}\n"
    assert _plan(tmp_path, text).calibration.standards == standards


@pytest.mark.parametrize(
    ("part", "key", "words"),
    [
        (
            "{name: C, kind: mlcc, rated_voltage: 10 V, bias: [0 V, 2 V], method: reflection}",
            "parts[0].method",
            "DC bias reaches a part only on the shunt-through fixture",
        ),
        ("{name: L, kind: inductor}", "parts[0].kind", "series-through (the default"),
    ],
)
def test_what_a_single_mount_cannot_do_is_refused(tmp_path, part, key, words):
    text = (
        BASE.split("parts:")[0].replace(
            "{positions: 4}",
            "{positions: 4, series_resistor: 499, bias_tee_rating: 25 V, dc_block_rating: 50 V}",
        )
        + "instruments: {dc_source: {max_voltage: 20 V, max_current: 20 mA}}\n"
    )
    with pytest.raises(ProcedureError) as info:
        _plan(tmp_path, text + f"parts:\n  - {part}\n")
    errors = getattr(info.value, "errors", [info.value])
    found = [e for e in errors if words in str(e)]
    assert found, [str(e) for e in errors]
    assert found[0].key == key and "fix:" in str(found[0])


def test_check_prints_the_method_of_every_part(tmp_path):
    path = tmp_path / "proc.yaml"
    path.write_text(BASE, encoding="utf-8")
    result = CliRunner().invoke(cli, ["check", str(path)])
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    for name, method in (
        ("C1", "method shunt-through"),
        ("L1", "method series-through"),
        ("B1", "method series-through + reflection (stitched into one curve)"),
    ):
        at = next(i for i, line in enumerate(lines) if line.strip().startswith(name))
        assert lines[at + 1].strip() == method
    assert "standards short, open, load, through" in result.output
    assert any(line.strip().startswith("reflection mount") and "B1/s1" in line for line in lines)
