"""A part measured with the gain-phase analyser in a procedure: its sweep and set-up,
its steps on the fixture, what is refused with which message, and `zbench check`."""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from bench.cli import cli
from bench.errors import ProcedureError
from bench.procedure.instruments import needed_roles
from bench.procedure.plan import load_plan

SECTION = """\
gain_phase:
  start: 10 Hz
  stop: 1 MHz
  points: 41
  reference_resistor: 1 ohm
  input_resistance: 1 Mohm
  input_capacitance: 30 pF
"""
RATINGS = "bias_tee_rating: 25 V, dc_block_rating: 50 V"
BASE = """\
name: t
mode: unattended
sweep: {start: 100 kHz, stop: 100 MHz, points: 101}
fixture: {positions: 4}
calibration: {method: through}
parts:
  - {name: C1, kind: mlcc, nominal: 1u, samples: 1}
  - {name: P1, kind: bulk, nominal: 300u, samples: 2, method: [gain-phase, shunt-through]}
  - {name: P2, kind: bulk, nominal: 300u, samples: 1, method: gain-phase}
"""


def _plan(tmp_path: Path, text: str):
    path = tmp_path / "proc.yaml"
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return load_plan(path)


def _errors(tmp_path: Path, text: str) -> list[ProcedureError]:
    with pytest.raises(ProcedureError) as info:
        _plan(tmp_path, text)
    return list(getattr(info.value, "errors", [info.value]))


def test_gain_phase_parts_sit_in_the_fixture_with_their_own_steps(tmp_path):
    plan = _plan(tmp_path, BASE + SECTION)
    g = plan.gain_phase
    assert (g.start, g.stop, g.points, g.reference_resistor) == (10.0, 1e6, 41, 1.0)
    assert [(p.part, p.sample, p.position) for b in plan.batches for p in b] == [
        ("C1", "s1", 1),
        ("P1", "s1", 2),
        ("P1", "s2", 3),
        ("P2", "s1", 4),
    ]
    ids = [s.id for s in plan.steps]
    # The gain-phase analyser's own sweep of each strapped position it uses, after the
    # network analyser's shorts; a gain-phase-only part has no network-analyser sweep.
    assert ids[ids.index("mount_short/p4") + 1 :][:3] == [
        "mount_short/gain-phase/p2",
        "mount_short/gain-phase/p3",
        "mount_short/gain-phase/p4",
    ]
    # A batch's gain-phase sweeps come first, then its network-analyser sweeps, so the
    # fixture moves from one analyser to the other once per batch.
    measures = [i for i in ids if i.startswith("measure/")]
    assert measures == [
        "measure/P1/s1/gain-phase",
        "measure/P1/s2/gain-phase",
        "measure/P2/s1/gain-phase",
        "measure/C1/s1/0V",
        "measure/P1/s1/0V",
        "measure/P1/s2/0V",
    ]
    assert "measure/P2/s1/gain-phase" in ids and "measure/P2/s1/0V" not in ids
    assert plan.calibration.standards == ("through",)
    assert needed_roles(plan, scripted=False) == ["analyzer", "gain_phase", "switch"]
    assert plan.instruments["gain_phase"].command_map == "gain_phase"
    assert plan.resolved["gain_phase"]["reference_resistor"] == 1.0
    # Receiver B's input, 1 MΩ ∥ 30 pF: the admittance of the two in parallel.
    z = g.input_impedance(np.array([1e3]))
    assert 1 / z[0] == pytest.approx(1e-6 + 2j * np.pi * 1e3 * 30e-12)


def test_a_plan_without_gain_phase_parts_needs_no_section_nor_analyser(tmp_path):
    text = BASE.split("  - {name: P1")[0]
    plan = _plan(tmp_path, text)
    assert plan.gain_phase is None and "gain_phase" not in plan.resolved
    assert "gain_phase" not in needed_roles(plan, scripted=False)


@pytest.mark.parametrize(
    ("text", "key", "words"),
    [
        (BASE, "parts[1].method", "needs the gain-phase analyser's sweep and set-up"),
        (
            BASE + SECTION.replace("stop: 1 MHz", "stop: 50 MHz"),
            "gain_phase.start",
            "not an increasing band inside the analyser's 10 Hz",
        ),
        (
            BASE + SECTION.replace("reference_resistor: 1 ohm", "reference_resistor: 0 ohm"),
            "gain_phase.reference_resistor",
            "must be above 0",
        ),
        (
            BASE + SECTION + "  bandwidth: 1 MHz\n",
            "gain_phase.bandwidth",
            "outside the analyser's",
        ),
        (
            BASE.replace(
                "samples: 1, method: gain-phase}",
                "samples: 1, rated_voltage: 10 V, bias: [0 V, 2 V], method: gain-phase}",
            ).replace("{positions: 4}", "{positions: 4, " + RATINGS + "}")
            + "instruments: {dc_source: {max_voltage: 20 V, max_current: 20 mA}}\n"
            + SECTION,
            "parts[2].method",
            "measures a part at 0 V only",
        ),
    ],
)
def test_what_the_gain_phase_set_up_cannot_do_is_refused(tmp_path, text, key, words):
    errors = _errors(tmp_path, text)
    found = [e for e in errors if words in str(e)]
    assert found, [str(e) for e in errors]
    assert found[0].key == key and "fix:" in str(found[0])


def test_check_prints_the_gain_phase_sweep_and_the_method(tmp_path):
    path = tmp_path / "proc.yaml"
    path.write_text(BASE + SECTION, encoding="utf-8")
    result = CliRunner().invoke(cli, ["check", str(path)])
    assert result.exit_code == 0, result.output
    assert "gain-phase analyser 10 Hz to 1 MHz, 41 points log" in result.output
    assert "reference resistor 1 Ω" in result.output
    assert "method gain-phase + shunt-through (stitched into one curve)" in result.output
