"""Ctrl-C, a crash, and calibration reuse from an earlier run."""

from __future__ import annotations

import json

import pytest
from click.testing import CliRunner

from bench.cli import cli
from bench.errors import RunError
from bench.procedure.operators import ScriptedOperator
from bench.runstore import DONE


class _Interrupting(ScriptedOperator):
    """Hands that press Ctrl-C (or crash) when the parts go in."""

    def __init__(self, bench, exc):
        super().__init__(bench)
        self.exc = exc

    def load_parts(self, placements):
        super().load_parts(placements)
        if self.exc is not None:
            exc, self.exc = self.exc, None
            raise exc


@pytest.mark.parametrize("exc", [KeyboardInterrupt(), RuntimeError("bug")], ids=["ctrl-c", "crash"])
def test_interrupted_run_resumes(tmp_path, sim, kit, exc):
    plan, store = kit.start_run(tmp_path, kit.SMALL)
    expected = RunError if isinstance(exc, KeyboardInterrupt) else RuntimeError
    with pytest.raises(expected):
        kit.run_on(sim, plan, store, operator=lambda bench: _Interrupting(bench, exc))
    plan2, store2 = kit.reopen(store)
    assert store2.manifest["state"] == "stopped"
    assert store2.first_incomplete() == "measure/MC22-6V3/s1/0V"
    kept = kit.raw_files(store2)
    kit.run_on(sim, plan2, store2)
    assert store2.manifest["state"] == "complete"
    assert all(kit.raw_files(store2)[k] == v for k, v in kept.items())


def test_calibration_reused_within_its_age_and_settings(tmp_path, sim, kit):
    plan, first = kit.start_run(tmp_path / "a", kit.SMALL)
    kit.run_on(sim, plan, first)
    text = kit.SMALL.replace(
        "calibration: {method: through}",
        f"calibration:\n  method: through\n  reuse: {{run: '{first.root}', max_age: 1 h}}",
    )
    plan2, second = kit.start_run(tmp_path / "b", text)
    lines: list[str] = []
    kit.run_on(sim, plan2, second, lines=lines)
    info = second.step_info("calibrate/through")
    assert info["state"] == DONE and info["reused_from"] == str(first.root)
    assert (second.root / "raw" / "cal_through.s2p").read_bytes() == (
        first.root / "raw" / "cal_through.s2p"
    ).read_bytes()
    assert second.manifest["calibration"]["reused_from"] == str(first.root)
    assert any("calibration reused" in line for line in lines)

    # Other sweep settings: the stored calibration does not fit, so a new one is taken.
    other = text.replace("points: 101", "points: 121")
    plan3, third = kit.start_run(tmp_path / "c", other)
    lines = []
    kit.run_on(sim, plan3, third, lines=lines)
    assert "reused_from" not in third.step_info("calibrate/through")
    assert any("not reused" in line and "sweep.points" in line for line in lines)


def test_live_progress_display_runs_unattended(tmp_path, kit):
    path = kit.write_procedure(tmp_path, kit.SMALL.replace("samples: 2}", "samples: 1}"))
    args = ["run", str(path), "--sim", "--yes", "--out", str(tmp_path / "runs")]
    args += ["--time-scale", str(kit.TIME_SCALE)]
    result = CliRunner().invoke(cli, args)
    assert result.exit_code == 0, result.output + repr(result.exception)
    assert "MC22-6V3/s1" in result.output
    root = next((tmp_path / "runs").iterdir())
    assert json.loads((root / "manifest.json").read_text())["state"] == "complete"
