"""``calibration.kit`` in a procedure: SI values as engineers write them, ideal defaults,
and a clear error (file, line, key, fix) for every bad value."""

from __future__ import annotations

import textwrap
from dataclasses import asdict
from pathlib import Path

import pytest

from bench.core.calibration import CalibrationKit
from bench.errors import ProcedureError
from bench.procedure.plan import load_plan

PROCEDURE = """\
name: t
sweep: {{start: 100 Hz, stop: 100 MHz, points: 201}}
calibration:
  method: hybrid
  crossover: 1 MHz
{kit}
parts:
  - {{name: P1, kind: mlcc, nominal: 4.7u, samples: 1}}
"""


def _load(tmp_path: Path, kit: str):
    path = tmp_path / "proc.yaml"
    path.write_text(PROCEDURE.format(kit=textwrap.indent(kit, "  ")), encoding="utf-8")
    return load_plan(path)


def _errors(tmp_path: Path, kit: str) -> list[ProcedureError]:
    with pytest.raises(ProcedureError) as info:
        _load(tmp_path, kit)
    return list(getattr(info.value, "errors", [info.value]))


def test_kit_values_resolve_to_si(tmp_path):
    kit = _load(
        tmp_path,
        "kit:\n  short_inductance: 8 pH\n  open_capacitance: 15 fF\n"
        "  load_resistance: 50.2 ohm\n  load_inductance: 4p\n  open_delay: 12 ps\n",
    ).calibration.kit
    expected = {
        "short_inductance": 8e-12,
        "open_capacitance": 15e-15,
        "load_resistance": 50.2,
        "load_inductance": 4e-12,
        "short_delay": 0.0,
        "open_delay": 12e-12,
        "load_delay": 0.0,
        "through_delay": 0.0,
    }
    assert asdict(kit) == pytest.approx(expected, rel=1e-12, abs=0)
    assert isinstance(kit, CalibrationKit)


def test_no_kit_means_ideal_standards(tmp_path):
    plan = _load(tmp_path, "")
    assert plan.calibration.kit.is_ideal
    assert plan.calibration.kit.load_resistance is None  # the load is z0


def test_shipped_demo_gives_the_simulated_kit():
    # The demo procedure carries the simulated bench's kit definitions (its "data sheet":
    # simulated_instruments/scenarios/demo.yaml, calibration_kit).
    from simulated_instruments.scenario import load_scenario

    plan = load_plan(Path(__file__).resolve().parents[2] / "procedures" / "demo.yaml")
    sim = load_scenario("demo").kit
    kit = plan.calibration.kit
    assert kit.short_inductance == pytest.approx(sim.short_inductance)
    assert kit.open_capacitance == pytest.approx(sim.open_capacitance)
    assert kit.load_resistance == pytest.approx(sim.load_resistance)
    assert kit.load_inductance == pytest.approx(sim.load_inductance)


@pytest.mark.parametrize(
    ("kit", "key", "words"),
    [
        ("kit:\n  short_inductance: 8 pF\n", "calibration.kit.short_inductance", "H"),
        ("kit:\n  open_capacitance: -15 fF\n", "calibration.kit.open_capacitance", ">= 0"),
        ("kit:\n  load_resistance: 0 ohm\n", "calibration.kit.load_resistance", "> 0"),
        ("kit:\n  load_delay: -3 ps\n", "calibration.kit.load_delay", "negative"),
        ("kit:\n  open_inductance: 1 pH\n", "calibration.kit", "open_inductance"),
    ],
)
def test_bad_kit_value_names_line_key_and_fix(tmp_path, kit, key, words):
    errors = _errors(tmp_path, kit)
    assert len(errors) == 1, [str(e) for e in errors]
    (error,) = errors
    text = str(error)
    assert "proc.yaml" in text and words in text, text
    assert key in text, text
    assert error.line is not None and error.line >= 6, text


def test_every_bad_kit_value_is_reported_at_once(tmp_path):
    errors = _errors(tmp_path, "kit:\n  short_inductance: -1 pH\n  load_inductance: -2 pH\n")
    texts = [str(e) for e in errors]
    assert len(texts) == 2
    assert any("kit.short_inductance" in t and "-1 pH" in t for t in texts), texts
    assert any("kit.load_inductance" in t and "-2 pH" in t for t in texts), texts
