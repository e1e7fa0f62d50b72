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
    # The record says which kit definitions corrected the standards (ideal when none given).
    assert first.manifest["calibration"]["kit"]["short_inductance"] == 0.0
    assert any("calibration reused" in line for line in lines)

    # Other sweep settings: the stored calibration does not fit, so a new one is taken.
    other = text.replace("points: 101", "points: 121")
    plan3, third = kit.start_run(tmp_path / "c", other)
    lines = []
    kit.run_on(sim, plan3, third, lines=lines)
    assert "reused_from" not in third.step_info("calibrate/through")
    assert any("not reused" in line and "sweep.points" in line for line in lines)


def test_runs_in_one_folder_reuse_the_last_calibration_by_name(tmp_path, sim, kit):
    # A lot measured run after run into one folder: the first run finds no calibration
    # and takes one; the folder's last-calibration link then names it for the next run.
    out = tmp_path / "runs"
    text = kit.SMALL.replace(
        "calibration: {method: through}",
        f"calibration:\n  method: through\n  reuse: {{run: '{out / 'last-calibration'}', "
        "max_age: 1 h}",
    )
    plan, first = kit.start_run(tmp_path, text)  # run folders under tmp_path/runs
    lines: list[str] = []
    kit.run_on(sim, plan, first, lines=lines)
    assert any("no earlier calibration found" in line for line in lines)
    link = out / "last-calibration"
    assert link.is_symlink() and link.resolve() == first.root.resolve()

    plan2, second = kit.start_run(tmp_path, text)
    kit.run_on(sim, plan2, second)
    assert second.step_info("calibrate/through")["reused_from"] == str(link)
    # The link still names the run whose standards were swept, so the age stays honest.
    assert link.resolve() == first.root.resolve()


def test_live_progress_display_runs_unattended(tmp_path, kit):
    path = kit.write_procedure(tmp_path, kit.SMALL.replace("samples: 2}", "samples: 1}"))
    args = ["run", str(path), "--sim", "--yes", "--out", str(tmp_path / "runs")]
    args += ["--time-scale", str(kit.TIME_SCALE)]
    result = CliRunner().invoke(cli, args)
    assert result.exit_code == 0, result.output + repr(result.exception)
    assert "MC22-6V3/s1" in result.output
    root = next((tmp_path / "runs").iterdir())
    assert json.loads((root / "manifest.json").read_text())["state"] == "complete"


def test_open_mount_step_resumes_with_its_sweeps_kept(tmp_path, sim, kit):
    # A guided session stopped by the operator after the second open capture: the
    # first open's sweep is kept as it was, the second's too (it was stored before the
    # question), and the resumed session asks again to empty the mounts (physical state
    # is never trusted across sessions) and goes on to the shorts and the parts.
    text = kit.SMALL.replace(
        "steps: [calibrate, mount_short, measure, fit, export]",
        "steps: [calibrate, mount_open, mount_short, measure, fit]",
    )
    plan, store = kit.start_run(tmp_path, text)

    # Answers after each sweep: the through, open 1, then stop at open 2.
    def first(bench):
        return ScriptedOperator(bench, guided=True, decisions=["continue"] * 2 + ["stop"])

    with pytest.raises(RunError, match="stopped"):
        kit.run_on(sim, plan, store, operator=first)
    plan2, store2 = kit.reopen(store)
    assert store2.step_state("mount_open/p1") == DONE
    assert store2.first_incomplete() == "mount_open/p2"
    kept = kit.raw_files(store2)
    assert {"open_p1.s2p", "open_p2.s2p"} <= set(kept)
    assert "1" in store2.manifest["mount_open"]

    hands: list[ScriptedOperator] = []

    def second(bench):
        hands.append(ScriptedOperator(bench))
        return hands[-1]

    runner = kit.run_on(sim, plan2, store2, operator=second)
    assert store2.manifest["state"] == "complete"
    after = kit.raw_files(store2)
    assert all(after[k] == v for k, v in kept.items()), "stored sweeps are not taken again"
    assert any(a.startswith("emptied mount") and "2" in a for a in hands[0].actions)
    assert set(store2.manifest["mount_open"]) == {"1", "2", "3"}
    # A plain 50 ohm set-up cannot reach a fraction of a pF (docs/references.md §1: its window
    # ends near 200 ohm): the open is recorded as not used, and said so, not guessed.
    summary = runner.summary
    assert summary is not None
    records = summary.setup["mount_open"]
    assert all(r["capacitance_f"] is None for r in records.values())
    assert any("open not used" in w and "reach" in w for w in summary.warnings)
    assert summary.setup["fixture_removal"].startswith("mount short")
