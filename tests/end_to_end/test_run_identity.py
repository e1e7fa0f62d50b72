"""A run keeps its identity: the plan it started with (a digest in the manifest), and, on
the simulated bench, its seed, so an interrupted and resumed run equals an uninterrupted
one."""

from __future__ import annotations

import json

import pytest
from click.testing import CliRunner

from bench.cli import cli, main
from bench.commands.run import check_plan_unchanged, resumed
from bench.errors import InputError, RunError
from bench.procedure.operators import ScriptedOperator
from bench.runstore import plan_digest
from simulated_instruments.server import start_bench

# Sweeps only: the comparison is of raw data, and fits would only cost time.
STEPS = "steps: [calibrate, mount_short, measure, fit, export]"


def _lean(kit) -> str:
    text = kit.SMALL.replace(STEPS, "steps: [calibrate, mount_short, measure]")
    return text.replace("points: 101", "points: 41")


def test_the_manifest_holds_the_digest_of_the_resolved_plan(tmp_path, kit):
    plan, store = kit.start_run(tmp_path, _lean(kit))
    assert store.manifest["plan_digest"] == plan_digest(plan.resolved)
    assert store.manifest["plan_digest"].startswith("sha256:")


def test_resume_refuses_an_edited_procedure_unless_told(tmp_path, kit, capsys):
    # Before: 101 points became 51 and the run failed later on "different frequency
    # grids"; a changed current limit was used while the manifest kept the old one.
    _plan, store = kit.start_run(tmp_path, _lean(kit))
    copy = store.root / "procedure.yaml"
    copy.write_text(
        copy.read_text(encoding="utf-8")
        .replace("points: 41", "points: 21")
        .replace("current_limit: 10 mA", "current_limit: 5 mA"),
        encoding="utf-8",
    )
    assert main(["run", "--resume", str(store.root)]) == 2
    message = capsys.readouterr().err
    assert "changed after the run started" in message
    assert "sweep.points" in message and "bias.current_limit" in message
    assert "--accept-changed-plan" in message

    again, plan2 = resumed(store.root)
    check_plan_unchanged(again, plan2, accept_changed_plan=True)
    manifest = json.loads((store.root / "manifest.json").read_text(encoding="utf-8"))
    # What is really used from here on is what the manifest says.
    assert manifest["procedure"]["sweep"]["points"] == 21
    assert manifest["procedure"]["bias"]["current_limit"] == pytest.approx(5e-3)
    assert manifest["plan_digest"] == plan_digest(plan2.resolved)
    assert manifest["plan_changes"][0]["changed"] == ["bias.current_limit", "sweep.points"]
    # Once accepted, the next resume goes on without asking again.
    check_plan_unchanged(again, plan2, accept_changed_plan=False)


def test_accept_changed_plan_goes_only_with_resume(tmp_path, kit, capsys):
    path = kit.write_procedure(tmp_path, _lean(kit))
    assert main(["run", str(path), "--accept-changed-plan"]) == 2
    assert "goes with --resume" in capsys.readouterr().err


class _Cut(ScriptedOperator):
    """Hands that make the analyser's link drop once the parts are in."""

    def load_parts(self, placements):
        super().load_parts(placements)
        if not getattr(self, "armed", False):
            self.armed = True
            self.bench.write_checked("FAULt:DROP analyzer,2")


def _data_lines(store) -> dict[str, list[str]]:
    """Each raw sweep's data lines (the comments hold times, which differ)."""
    return {
        p.name: [line for line in p.read_text().splitlines() if not line.startswith("!")]
        for p in sorted((store.root / "raw").glob("*.s2p"))
    }


def test_interrupted_and_resumed_equals_uninterrupted_with_one_seed(tmp_path, kit):
    # Before: the simulator's noise was one stream restarted on resume, so the resumed
    # sweeps differed from those of an uninterrupted run.
    text = _lean(kit)
    seed = 4242
    plan, whole = kit.start_run(tmp_path / "a", text)
    with start_bench("demo", time_scale=kit.TIME_SCALE, seed=seed) as sim:
        kit.run_on(sim, plan, whole)
    plan, cut = kit.start_run(tmp_path / "b", text)
    with (
        start_bench("demo", time_scale=kit.TIME_SCALE, seed=seed) as sim,
        pytest.raises(RunError),
    ):
        kit.run_on(sim, plan, cut, operator=_Cut)
    plan2, cut2 = kit.reopen(cut)
    assert cut2.first_incomplete() is not None and cut2.first_incomplete().startswith("measure/")
    # A new process's simulator, as `zbench run --resume` starts, with the run's seed.
    with start_bench("demo", time_scale=kit.TIME_SCALE, seed=seed) as sim:
        kit.run_on(sim, plan2, cut2)
    assert cut2.manifest["state"] == "complete"
    expected, got = _data_lines(whole), _data_lines(cut2)
    assert sorted(got) == sorted(expected)
    for name in expected:
        assert got[name] == expected[name], name
    # The comparison has teeth: another seed gives other noise.
    plan3, other = kit.start_run(tmp_path / "c", text)
    with start_bench("demo", time_scale=kit.TIME_SCALE, seed=seed + 1) as sim:
        kit.run_on(sim, plan3, other)
    assert _data_lines(other)["cal_through.s2p"] != expected["cal_through.s2p"]


def test_seed_option_is_recorded_and_reused_on_resume(tmp_path, kit, capsys):
    path = kit.write_procedure(tmp_path, _lean(kit).replace("points: 41", "points: 11"))
    out = tmp_path / "runs"
    args = ["run", str(path), "--sim", "--yes", "--quiet", "--out", str(out)]
    result = CliRunner().invoke(cli, [*args, "--seed", "77", "--time-scale", "0.001"])
    assert result.exit_code == 0, result.output
    (folder,) = out.glob("*-small")
    manifest = json.loads((folder / "manifest.json").read_text(encoding="utf-8"))
    assert manifest["simulated"]["seed"] == 77
    assert main(["run", str(path), "--seed", "77"]) == 2
    assert "--seed goes with --sim" in capsys.readouterr().err


def test_a_run_folder_from_before_the_digest_still_resumes(tmp_path, kit):
    _plan, store = kit.start_run(tmp_path, _lean(kit))
    del store.manifest["plan_digest"]
    store.save()
    again, plan2 = resumed(store.root)
    check_plan_unchanged(again, plan2, accept_changed_plan=False)
    assert again.manifest["plan_digest"] == plan_digest(plan2.resolved)
    with pytest.raises(InputError):
        again.manifest["plan_digest"] = "sha256:0"
        check_plan_unchanged(again, plan2, accept_changed_plan=False)
