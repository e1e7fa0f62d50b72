"""A procedure measures a bulk capacitor with the gain-phase analyser below 1 MHz and
shunt-through above, over sockets, and stitches the two set-ups into one curve."""

from __future__ import annotations

import json

import numpy as np
import pytest

from bench import exports
from bench.core.landmarks import landmarks_for
from tests.end_to_end.conftest import GAIN_PHASE


@pytest.fixture(scope="module")
def stitched(tmp_path_factory):
    from simulated_instruments.server import start_bench
    from tests.end_to_end.conftest import TIME_SCALE, run_on, start_run

    bench = start_bench("demo", time_scale=TIME_SCALE, seed=5)
    try:
        plan, store = start_run(tmp_path_factory.mktemp("gp"), GAIN_PHASE)
        lines: list[str] = []
        runner = run_on(bench, plan, store, lines=lines)
        truth = dict(bench.state.scenario.parts)
    finally:
        bench.stop()
    return plan, runner.summary, truth, store.root, lines


def test_the_plan_sweeps_straps_and_samples_with_the_gain_phase_analyser(stitched):
    plan, _, _, root, _ = stitched
    ids = [s.id for s in plan.steps]
    assert "mount_short/gain-phase/p1" in ids and "mount_short/gain-phase/p2" in ids
    assert ids.index("measure/PB345-7V1/s1/gain-phase") < ids.index("measure/PB345-7V1/s1/0V")
    header = (root / "raw" / "PB345-7V1_s1_gain-phase.s2p").read_text("utf-8")[:600]
    assert "receiver ratio B/A stored as S21 and S12" in header


def test_the_stitched_bulk_capacitor_recovers_its_true_capacitance(stitched):
    _, summary, truth, _, _ = stitched
    assert [s.sample for s in summary.samples] == ["s1", "s2"]
    for sample in summary.samples:
        assert [label for label, _ in sample.setups] == ["gain-phase", "shunt-through"]
        assert not [w for w in sample.warnings if "disagree" in w]
        d = sample.data
        assert d.f[0] == pytest.approx(10.0) and d.f[-1] == pytest.approx(100e6)
        part = truth[f"PB345-7V1/{sample.sample}"]
        true = landmarks_for("capacitor", d.f, part.impedance(d.f, 0.0), d.inside_window)
        # 2 %: the project's accuracy target for C (no outside source), against the
        # invented part's own impedance on the same points.
        name, value = exports.main_landmark(summary.part(sample.part), sample)
        assert name == "c_low"
        assert value == pytest.approx(true["c_low"], rel=0.02)
        assert sample.fit is not None and sample.fit.meets_quality
        measured = landmarks_for("capacitor", d.f, d.z, d.inside_window)
        assert measured["c_low"] == pytest.approx(true["c_low"], rel=0.02)
        assert measured["srf"] == pytest.approx(true["srf"], rel=0.02)


def test_the_gain_phase_set_up_alone_holds_inside_its_window(stitched):
    _, summary, truth, _, _ = stitched
    for sample in summary.samples:
        label, d = sample.setups[0]
        inside = np.asarray(d.inside_window)
        # The part's 46 Ω at 10 Hz is beyond the 2 Ω divider's window; the rest inside.
        assert inside.sum() >= 35, label
        assert d.window.z_max < 100.0 and d.window.z_min < 1e-3
        true = part_z = truth[f"PB345-7V1/{sample.sample}"].impedance(d.f, 0.0)
        np.testing.assert_allclose(abs(d.z[inside]), abs(part_z[inside]), rtol=0.05)
        c = landmarks_for("capacitor", d.f, d.z, inside)["c_low"]
        assert c == pytest.approx(landmarks_for("capacitor", d.f, true, inside)["c_low"], rel=0.02)


def test_summary_report_and_fit_json_show_the_stitched_part(stitched):
    _, _, _, root, lines = stitched
    csv = (root / "summary.csv").read_text("utf-8").splitlines()
    rows = [r for r in csv if r.startswith("PB345-7V1,")]
    assert len(rows) == 2 and all(",PASS," in r for r in rows)
    record = json.loads((root / "models" / "PB345-7V1_s1.fit.json").read_text("utf-8"))
    assert [s["method"] for s in record["setups"]] == ["gain-phase", "shunt-through"]
    html = (root / "report.html").read_text("utf-8")
    assert html.count("gain-phase: window") == 2 and html.count("shunt-through: window") == 2
    assert "SIM-GPA" in json.dumps(json.loads((root / "manifest.json").read_text())["instruments"])
    assert any(line.startswith("PB345-7V1/s1 gain-phase") and "C " in line for line in lines)
