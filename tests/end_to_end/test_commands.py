"""The run, demo, reprocess and report commands, as a user calls them."""

from __future__ import annotations

import json
import re
from pathlib import Path

import click
import pytest
from click.testing import CliRunner

from bench.cli import cli, main
from bench.errors import RunError
from bench.procedure.operators import ScriptedOperator

GUIDED = """\
name: guided-test
mode: guided
instruments:
  analyzer: {max_power: 0 dBm, timeout: 2 s}
sweep: {start: 100 Hz, stop: 100 MHz, points: 101, if_bandwidth: 1 kHz}
fixture: {positions: 1, isolation_transformer: true}
calibration: {method: through}
parts:
  - {name: MC22-6V3, kind: mlcc, nominal: 22u, tolerance: 20 %, rated_voltage: 6.3 V, samples: 1}
steps: [calibrate, mount_short, measure, fit]
"""


def _manifest(root: Path) -> dict:
    return json.loads((root / "manifest.json").read_text())


def _run_folder(output: str) -> Path:
    line = next(x for x in output.splitlines() if x.startswith("run folder: "))
    return Path(line.removeprefix("run folder: "))


def test_guided_run_on_the_simulator_answered_on_stdin(tmp_path, kit):
    path = kit.write_procedure(tmp_path, GUIDED)
    args = ["run", str(path), "--sim", "bench_single", "--out", str(tmp_path / "runs")]
    args += ["--quiet", "--time-scale", str(kit.TIME_SCALE)]
    # After each sweep: through ok, mount short ok, part: repeat once, then ok.
    result = CliRunner().invoke(cli, args, input="\n\nr\n\n")
    assert result.exit_code == 0, result.output + repr(result.exception)
    root = _run_folder(result.output)
    manifest = _manifest(root)
    assert manifest["state"] == "complete"
    assert "(r)epeat" in result.output
    assert "MC22-6V3/s1" in result.output and "C " in result.output
    rejected = [p.name for p in (root / "raw" / "rejected").glob("*.s2p")]
    assert rejected == ["MC22-6V3_s1_0V.1.s2p"]
    assert (root / "models" / "MC22-6V3_s1.fit.json").is_file()


def test_guided_stop_on_stdin_leaves_a_resumable_run(tmp_path, kit):
    path = kit.write_procedure(tmp_path, GUIDED)
    args = ["run", str(path), "--sim", "bench_single", "--out", str(tmp_path / "runs")]
    args += ["--quiet", "--time-scale", str(kit.TIME_SCALE)]
    result = CliRunner().invoke(cli, args, input="\nq\n")
    assert isinstance(result.exception, RunError)
    assert "zbench run --resume" in str(result.exception)
    root = _run_folder(result.output)
    assert _manifest(root)["state"] == "stopped"
    # The hint has no --sim: a resume goes back to the simulated bench the run was
    # started on, never to the instruments the procedure names.
    result = CliRunner().invoke(cli, ["run", "--resume", str(root), "--quiet"], input="\n" * 4)
    assert result.exit_code == 0, result.output + repr(result.exception)
    assert "simulated bench 'bench_single'; resuming there" in result.output
    assert _manifest(root)["state"] == "complete"


class _CutAfterPlacing(ScriptedOperator):
    def load_parts(self, placements):
        super().load_parts(placements)
        self.bench.write_checked("FAULt:DROP analyzer,3")


def test_resume_reprocess_and_report_commands(tmp_path, sim, kit):
    plan, store = kit.start_run(tmp_path, kit.SMALL)
    with pytest.raises(RunError):
        kit.run_on(sim, plan, store, operator=_CutAfterPlacing)
    kept = kit.raw_files(store)
    sim.stop()

    # Resume on a new simulated bench, unattended.
    code = main(
        ["run", "--resume", str(store.root), "--sim", "--yes", "--quiet", "--time-scale", "0.01"]
    )
    assert code == 0
    manifest = _manifest(store.root)
    assert manifest["state"] == "complete"
    after = kit.raw_files(store)
    assert all(after[k] == v for k, v in kept.items())

    before = {
        p.relative_to(store.root): p.read_bytes()
        for p in store.root.rglob("*")
        if p.is_file() and p.name not in ("manifest.json", "log")
    }
    result = CliRunner().invoke(
        cli, ["reprocess", str(store.root), "--model", "series-rlc", "--tolerance", "10%"]
    )
    # A series R-L-C cannot follow these parts to the bound: exit 3, counted, never 0.
    bad = re.search(r"(\d+) fitted, (\d+) missed the quality bound", result.output)
    assert bad, result.output
    assert result.exit_code == (3 if int(bad.group(2)) else 0), result.output
    assert "3 samples" in result.output
    (first,) = (store.root / "reprocess").iterdir()
    assert first.name.endswith("model-series-rlc_tolerance-10pct")
    fit = json.loads((first / "models" / "MC22-6V3_s1.fit.json").read_text())
    assert fit["model"] == "series-rlc"
    settings = json.loads((first / "settings.json").read_text())
    assert (first / settings["raw"]).resolve() == (store.root / "raw").resolve()
    assert settings["settings"]["analysis"]["tolerance"] == pytest.approx(0.1)
    # The report names the settings used, not the procedure's.
    text = (first / "report.html").read_text(encoding="utf-8")
    assert "<th>model requested</th><td>series-rlc</td>" in text
    assert "<th>changed on the command line</th><td>model, tolerance</td>" in text
    # Nothing of the run's own results changed.
    for relative, data in before.items():
        assert (store.root / relative).read_bytes() == data, relative
    # A second reprocess makes a second result set; the first stays as it was.
    kept = {p: p.read_bytes() for p in first.rglob("*") if p.is_file()}
    result = CliRunner().invoke(cli, ["reprocess", str(store.root)])
    assert result.exit_code in (0, 3), result.output + repr(result.exception)
    assert len(list((store.root / "reprocess").iterdir())) == 2
    assert all(p.read_bytes() == data for p, data in kept.items())
    listed = _manifest(store.root)["reprocessed"]
    assert [entry["model"] for entry in listed] == ["series-rlc", None]

    result = CliRunner().invoke(cli, ["report", str(store.root)])
    assert result.exit_code == 0, result.output + repr(result.exception)
    report = store.root / "report.html"
    assert report.is_file() and "MC22-6V3" in report.read_text(encoding="utf-8")


def test_run_needs_resources_without_sim(tmp_path, kit):
    path = kit.write_procedure(tmp_path, GUIDED)
    assert main(["run", str(path), "--out", str(tmp_path / "runs"), "--quiet"]) == 2


def test_resume_of_a_folder_that_is_not_a_run(tmp_path):
    assert main(["run", "--resume", str(tmp_path)]) == 2
    assert main(["report", str(tmp_path)]) == 2


@pytest.mark.slow
def test_demo_command_writes_the_report(tmp_path):
    out = tmp_path / "runs"
    result = CliRunner().invoke(cli, ["demo", "--out", str(out), "--quiet"])
    assert result.exit_code == 0, result.output + repr(result.exception)
    root = _run_folder(result.output)
    assert f"report: {root / 'report.html'}" in result.output
    manifest = _manifest(root)
    assert manifest["state"] == "complete"
    assert manifest["calibration"]["method"] == "hybrid"
    # 4 standards + 8 mount shorts + 11 samples, three of them at 3 bias points; then an
    # inductor and a bead on each single mount (its empty and strap captures first); the
    # gain-phase analyser on the bulk capacitor's two positions' straps and two samples.
    assert len(list((root / "raw").glob("*.s2p"))) == 4 + 8 + 11 + 6 + 2 * (2 + 2) + 2 + 2
    assert len(list((root / "raw").glob("*gain-phase*.s2p"))) == 4
    for name in ("summary.csv", "report.html", "log", "procedure.yaml"):
        assert (root / name).is_file(), name
    assert list((root / "models").glob("*.lib"))
    assert (root / "models" / "MC4U7-10V_bias.csv").is_file()


def test_bad_procedure_stops_before_anything_is_touched(tmp_path, kit):
    path = kit.write_procedure(tmp_path, GUIDED.replace("points: 101", "points: 101, pionts: 3"))
    out = tmp_path / "runs"
    # No simulator is started and no run folder is made: validation comes first.
    assert main(["run", str(path), "--sim", "--out", str(out), "--quiet"]) == 2
    assert not out.exists()


def test_check_describes_a_bias_procedure_in_plain_words():
    repo = Path(__file__).resolve().parents[2]
    result = CliRunner().invoke(cli, ["check", str(repo / "procedures" / "mlcc_dc_bias.yaml")])
    assert result.exit_code == 0, result.output
    text = re.sub(r"\n +", " ", result.output)  # wrapped lines joined
    assert "no series resistors" in text and "ohm" not in text
    assert "no averaging" in text and "(s)" not in text
    # docs/design.md §7: ramp, output off with a discharge wait, a caution that defers to local
    # safety rules and the instruments' manuals.
    assert "ramped in 0.5\u00a0V steps" in text
    assert "output off and a 2\u00a0s discharge wait" in text
    assert "local safety rules and the instruments' manuals take precedence" in text
    assert "limit 10\u00a0V (the lowest of the part, bias-tee, DC-block and source ratings)" in text
    assert all(len(line) <= 100 for line in result.output.splitlines())


def test_check_counts_every_sweep_step_and_states_a_bead_frequency():
    repo = Path(__file__).resolve().parents[2]
    path = repo / "procedures" / "series_resistors.yaml"
    result = CliRunner().invoke(cli, ["check", str(path)])
    assert result.exit_code == 0, result.output
    assert "137 Ω ±25 % at 100 MHz" in result.output
    steps = re.search(r"^  steps +(.*)$", result.output, re.M).group(1).split(", ")
    counts = {}
    for entry in steps:
        name, _, n = entry.partition(" ×")
        counts[name] = int(n or 1)
    swept = sum(counts.get(k, 0) for k in ("calibrate", "mount_open", "mount_short", "measure"))
    averages = re.search(r"(\d+) sweeps averaged", result.output)
    expected = swept * (int(averages.group(1)) if averages else 1)
    assert re.search(rf"^  sweeps +{expected}$", result.output, re.M)


@pytest.mark.slow
def test_demo_runs_on_the_second_dialect(tmp_path):
    out = tmp_path / "runs"
    args = ["demo", "--out", str(out), "--quiet", "--dialect", "meas_stim"]
    result = CliRunner().invoke(cli, args)
    assert result.exit_code == 0, result.output + repr(result.exception)
    root = _run_folder(result.output)
    manifest = _manifest(root)
    assert manifest["state"] == "complete"
    assert manifest["simulated"]["scenario"] == "demo_meas_stim"
    assert manifest["instruments"]["analyzer"]["command_map"] == "meas_stim"
    assert "SIM-VNA-0002" in manifest["instruments"]["analyzer"]["identity"]
    # the stored procedure names the map, so a resume speaks the same dialect
    assert "command_map: meas_stim" in (root / "procedure.yaml").read_text(encoding="utf-8")
    assert len(list((root / "raw").glob("*.s2p"))) == 4 + 8 + 11 + 6 + 2 * (2 + 2) + 2 + 2


def test_reprocess_reads_options_with_units_and_refuses_nonsense(tmp_path):
    from bench.commands.options import Fraction, Quantity

    assert Fraction().convert("10%", None, None) == pytest.approx(0.1)
    assert Fraction().convert("0.05", None, None) == pytest.approx(0.05)
    assert Quantity("dB", "-110").convert("-110 dB", None, None) == -110.0
    with pytest.raises(click.BadParameter, match="between 0 and 1"):
        Fraction().convert("150%", None, None)
    result = CliRunner().invoke(cli, ["reprocess", str(tmp_path), "--tolerance", "ten"])
    assert result.exit_code == 2 and "0.1 or 10%" in result.output
