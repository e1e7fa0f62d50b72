"""Run bookkeeping as a user meets it: no folder for a run that never started, a resume
of a complete run that says so, an operator's stop recorded as stopped, and the console
told the bias is off and the part discharged after Ctrl-C under bias."""

from __future__ import annotations

import json

import pytest

from bench.cli import main
from bench.commands.run import with_resources
from bench.errors import RunError
from bench.procedure.display import PlainDisplay
from bench.procedure.instruments import open_instruments
from bench.procedure.operators import STOP, ScriptedOperator
from bench.procedure.runner import Runner
from bench.runstore import STOPPED


def test_a_run_that_never_starts_leaves_no_folder(tmp_path, kit, capsys):
    path = kit.write_procedure(tmp_path, kit.SMALL)
    out = tmp_path / "runs"
    code = main(["run", str(path), "--sim", "no-such-bench", "--out", str(out), "--quiet"])
    assert code == 2
    assert not out.exists() or not any(out.iterdir())
    assert "nothing was measured" in capsys.readouterr().err


def test_resume_of_a_complete_run_says_so_and_changes_nothing(tmp_path, sim, kit, capsys):
    plan, store = kit.start_run(tmp_path, kit.SMALL)
    kit.run_on(sim, plan, store)
    before = (store.root / "manifest.json").read_bytes()
    report = store.root / "summary.csv"
    summary = report.read_bytes()
    assert main(["run", "--resume", str(store.root), "--quiet"]) == 0
    assert "already complete" in capsys.readouterr().out
    assert (store.root / "manifest.json").read_bytes() == before
    assert report.read_bytes() == summary


def test_an_operators_stop_is_recorded_as_stopped(tmp_path, sim, kit):
    text = kit.SMALL.replace("mode: unattended", "mode: guided")
    plan, store = kit.start_run(tmp_path, text)
    hands = lambda bench: ScriptedOperator(bench, guided=True, decisions=[STOP])  # noqa: E731
    with pytest.raises(RunError, match="stopped"):
        kit.run_on(sim, plan, store, operator=hands)
    manifest = json.loads((store.root / "manifest.json").read_text())
    assert manifest["state"] == "stopped"
    states = [s["state"] for s in manifest["steps"]]
    assert STOPPED in states and "failed" not in states


class _CtrlCUnderBias(PlainDisplay):
    def step(self, text):
        super().step(text)
        if " at 3 V, position" in text:
            raise KeyboardInterrupt


def test_ctrl_c_under_bias_confirms_output_off_and_discharged(tmp_path, sim, kit):
    text = kit.SMALL.replace("samples: 2}", "samples: 1, bias: [0 V, 3 V]}")
    plan, store = kit.start_run(tmp_path, text)
    lines: list[str] = []
    plan = with_resources(plan, sim.resources)
    with open_instruments(plan, scripted=True) as instruments:
        runner = Runner(
            plan,
            store,
            instruments,
            ScriptedOperator(instruments.bench),
            _CtrlCUnderBias(lines.append),
            assume_yes=True,
        )
        with pytest.raises(RunError, match="interrupted"):
            runner.run()
    confirm = [line for line in lines if "DC bias output is OFF" in line]
    assert confirm and "discharged" in confirm[0]
    assert sim.state.bias.output is False  # the simulated source really is off


def test_console_summary_and_report_give_the_same_landmarks(tmp_path, sim, kit):
    """Every place a run shows a landmark states the same value: the console's fit line,
    summary.csv, the report's tables, the SRF label on the sample's figure (read from
    the figure the report queues, as drawn), the lot statistics, the SPICE comments and
    the fit JSON (the fitter's own merge kept beside it as ``fit_landmarks``). On this
    bench the fitter's merge takes the model's SRF of the MLCC samples (about 1 % from
    the data's), so a figure drawn from it would state another SRF."""
    from bench import exports
    from bench.report_sample import Figures, Plot, sample_section
    from bench.units import format_si

    plan, store = kit.start_run(tmp_path, kit.SMALL)
    lines: list[str] = []
    runner = kit.run_on(sim, plan, store, lines=lines)
    summary = runner.summary
    models = store.root / "models"
    for row, sample in zip(exports.summary_rows(summary), summary.samples, strict=True):
        label = f"fit {row['part']}_{row['sample']}"
        (line,) = [x for x in lines if x.startswith(label + " ")]
        for key, name, unit in (("c_low", "C", "F"), ("esl", "ESL", "H"), ("srf", "SRF", "Hz")):
            shown = format_si(row[key], unit, 3)
            assert f"{name} {shown}" in " ".join(line.split()), (line, key, shown)
        srf = format_si(row["srf"], "Hz", 4)
        # The report's section of the sample: its landmark table, and its figure's label.
        figs = Figures(tmp_path / "unused")
        section = sample_section(summary, summary.part(sample.part), sample, figs)
        assert f'<td>srf</td><td class="num">{srf}</td>' in section.replace("\n", "")
        plot = figs.queued[0]
        assert isinstance(plot, Plot)
        figure = plot.figure()
        labels = {t.get_text() for ax in figure.axes for t in ax.texts if "SRF" in t.get_text()}
        assert labels == {f"SRF {srf}"}, labels
        # The SPICE comment and the fit JSON.
        sub = (models / f"{sample.label}.sub").read_text(encoding="utf-8")
        assert f"srf = {format_si(row['srf'], 'Hz')}" in sub
        record = json.loads((models / f"{sample.label}.fit.json").read_text(encoding="utf-8"))
        assert record["landmarks"]["srf"] == pytest.approx(row["srf"], rel=1e-12)
        assert record["fit_landmarks"] == pytest.approx(
            {k: v for k, v in sample.fit.landmarks.items()}, rel=1e-12
        )
    # The lot statistics of a part of one sample: its shown values.
    (bulk,) = [r for r in exports.summary_rows(summary) if r["part"] == "PB345-7V1"]
    stats = exports.lot_statistics(summary)["PB345-7V1"][0.0]
    assert stats["srf"].mean == pytest.approx(bulk["srf"], rel=1e-12)
    assert stats["c_low"].mean == pytest.approx(bulk["c_low"], rel=1e-12)
    # The drive across each part: in the manifest as in summary.csv. At 0 dBm the source
    # EMF is sqrt(4·50 Ω·1 mW) = 0.447 V rms (derived), so a part never sees more.
    manifest = json.loads((store.root / "manifest.json").read_text())
    for row in exports.summary_rows(runner.summary):
        label = f"{row['part']}_{row['sample']}"
        assert manifest["drive_v_rms_max"][label] == pytest.approx(row["drive_v"])
        assert 0 < row["drive_v"] < 0.448
