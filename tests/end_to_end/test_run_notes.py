"""What a run tells the person watching it: result lines under bias, a bead's line, the
progress count, calibration reuse on a first run, ground-loop notes and point counts."""

from __future__ import annotations

import re

import numpy as np
import pytest

from bench.exports import summary_rows
from bench.procedure.display import PlainDisplay
from bench.procedure.operators import REPEAT, ScriptedOperator
from bench.procedure.processing import build_summary, with_analysis

ONE_MLCC = """\
name: notes
mode: unattended
instruments:
  analyzer: {max_power: 0 dBm, timeout: 2 s}
  dc_source: {max_voltage: 20 V, max_current: 20 mA, timeout: 1 s}
  switch: {timeout: 1 s}
  bench: {timeout: 1 s}
sweep: {start: 100 Hz, stop: 100 MHz, points: 101, if_bandwidth: 1 kHz, power: 0 dBm}
fixture:
  positions: 8
  use_positions: [1]
  isolation_transformer: true
  bias_tee_rating: 25 V
  dc_block_rating: 50 V
calibration: {method: through}
bias: {ramp_step: 2 V, ramp_dwell: 1 ms, settle: 5 ms, discharge: 5 ms, current_limit: 10 mA}
parts:
  - {name: MC22-6V3, kind: mlcc, nominal: 22u, tolerance: 20 %, rated_voltage: 6.3 V, samples: 1}
steps: [calibrate, mount_short, measure, fit]
"""


def _line(lines: list[str], label: str) -> str:
    """The result line of ``label`` (its label column, then at least two spaces)."""
    found = [line for line in lines if re.match(re.escape(label) + r" {2,}\S", line)]
    assert len(found) == 1, f"one result line of {label!r} expected in {lines}"
    return found[0]


def test_bias_lines_give_the_change_from_zero_volts_and_no_verdict(tmp_path, sim, kit):
    text = ONE_MLCC.replace("samples: 1}", "samples: 1, bias: [0 V, 3 V]}")
    plan, store = kit.start_run(tmp_path, text)
    lines: list[str] = []
    runner = kit.run_on(sim, plan, store, lines=lines)
    live_zero = _line(lines, "MC22-6V3/s1")
    live_bias = _line(lines, "MC22-6V3/s1 3V")
    assert "vs nominal" in live_zero
    # A nominal value is stated without bias (the exports give no verdict there either):
    # the bias line gives the change from the same sample at 0 V instead.
    assert "vs nominal" not in live_bias and "inside" not in live_bias
    assert "OUTSIDE" not in live_bias
    assert re.search(r"[+-]\d+\.\d % vs 0 V, no verdict under bias", live_bias)
    fit_bias = _line(lines, "fit MC22-6V3_s1_3V")
    assert "vs nominal" not in fit_bias
    # The fit line's change is the one the exports compute from the same summary.
    (row,) = [r for r in summary_rows(runner.summary) if r["bias_v"]]
    assert f"{row['change_from_0v'] * 100:+.1f} % vs 0 V, no verdict under bias" in fit_bias
    # A class II ceramic loses capacitance under DC bias (common practice, no source);
    # the simulated part is built that way.
    assert row["change_from_0v"] < 0


def test_a_bead_line_leads_with_its_impedance_at_the_stated_frequency(tmp_path, sim, kit):
    text = ONE_MLCC.replace(
        "  - {name: MC22-6V3, kind: mlcc, nominal: 22u, tolerance: 20 %, rated_voltage: 6.3 V, "
        "samples: 1}",
        "  - {name: FB137, kind: bead, nominal: 137 ohm, tolerance: 25 %, nominal_at: 100 MHz, "
        "samples: 1, method: shunt-through}",
    ).replace("stop: 100 MHz, points: 101", "stop: 200 MHz, points: 121")
    plan, store = kit.start_run(tmp_path, text)
    lines: list[str] = []
    runner = kit.run_on(sim, plan, store, lines=lines)
    for line in (_line(lines, "FB137/s1"), _line(lines, "fit FB137_s1")):
        assert "|Z|@100MHz" in line and "vs nominal" in line
    (row,) = summary_rows(runner.summary)
    fit_line = _line(lines, "fit FB137_s1")
    # The fit line judges the value the exports judge.
    assert f"{row['deviation'] * 100:+.1f} % vs nominal" in fit_line


class CountingDisplay(PlainDisplay):
    """Records the progress total and every advance."""

    def __init__(self, say):
        super().__init__(say)
        self.total: int | None = None
        self.count = 0
        self.highest = 0

    def start(self, total: int, estimated_s: float) -> None:
        super().start(total, estimated_s)
        self.total = total

    def advance(self, n: int = 1) -> None:
        self.count += n
        self.highest = max(self.highest, self.count)


def test_a_repeated_sweep_keeps_the_progress_count_within_its_total(tmp_path, sim, kit):
    from bench.commands.run import with_resources
    from bench.procedure.instruments import open_instruments
    from bench.procedure.runner import Runner

    text = ONE_MLCC.replace("mode: unattended", "mode: guided")
    plan, store = kit.start_run(tmp_path, text)
    answers = iter([REPEAT, "continue", REPEAT, "continue", "continue"])
    results: list[tuple[str, str]] = []

    def decide(label: str, result: str) -> str:
        results.append((label, result))
        return next(answers, "continue")

    lines: list[str] = []
    display = CountingDisplay(lines.append)
    plan = with_resources(plan, sim.resources)
    with open_instruments(plan, scripted=True) as instruments:
        hands = ScriptedOperator(instruments.bench, guided=True, decide=decide)
        Runner(plan, store, instruments, hands, display, assume_yes=True).run()
    assert store.manifest["state"] == "complete"
    # through, mount short, one sample: three sweeps, two of them taken twice.
    assert display.total == 3
    assert display.highest == display.count == 3
    # The mount short's value reads as an engineer writes it (SI prefix, Ω).
    short = next(result for label, result in results if label.startswith("mount short"))
    assert re.search(r"\|Z\| [\d.]+ [mµ]?Ω \(median\)", short), short
    assert "Ohm" not in short and "ohm" not in short


def test_first_reuse_says_none_was_found_and_a_refused_one_says_why(tmp_path, sim, kit):
    missing = tmp_path / "runs" / "last-calibration"
    text = ONE_MLCC.replace(
        "calibration: {method: through}",
        f"calibration:\n  method: through\n  reuse: {{run: '{missing}', max_age: 1 h}}",
    )
    plan, store = kit.start_run(tmp_path / "a", text)
    lines: list[str] = []
    kit.run_on(sim, plan, store, lines=lines)
    assert any(line.startswith("no earlier calibration found at") for line in lines), lines
    assert not any("not reused" in line or "not a run folder" in line for line in lines)
    assert store.manifest["state"] == "complete"

    # A folder that exists but holds no run is refused, with the precise reason.
    missing.mkdir(parents=True)
    plan, store = kit.start_run(tmp_path / "b", text)
    lines = []
    kit.run_on(sim, plan, store, lines=lines)
    refused = [line for line in lines if line.startswith("calibration not reused")]
    assert refused and "not a run folder" in refused[0] and str(missing) in refused[0]


LOOP = ONE_MLCC.replace("isolation_transformer: true", "isolation_transformer: false")


def _loop_notes(warnings) -> list[str]:
    return [w for w in warnings if w.startswith("position 1: ground loop")]


@pytest.mark.parametrize("mount", ["measured", "fitted"])
def test_one_ground_loop_note_per_position_saying_what_happened(tmp_path, sim, kit, mount):
    # docs/references.md §2 (first-order model): the loop's series error is in the short as much
    # as in the part, so a measured short removes it; a fitted Rm + jωLm cannot.
    text = LOOP.replace(
        "calibration: {method: through}",
        f"calibration: {{method: through}}\nanalysis: {{mount: {mount}}}",
    )
    plan, store = kit.start_run(tmp_path, text)
    lines: list[str] = []
    runner = kit.run_on(sim, plan, store, lines=lines)
    summary = runner.summary
    assert summary.ground_loop["1"]["detected"]
    notes = _loop_notes(summary.warnings)
    assert len(notes) == 1, notes
    assert notes[0] in lines, "the note shown during the run is the one the summary keeps"
    if mount == "measured":
        assert "removed with it" in notes[0] and "all points kept" in notes[0]
    else:
        assert "points below are not used" in notes[0]

    # Reprocessed with the other mount setting: still one note, the new judgement.
    other = "fitted" if mount == "measured" else "measured"
    again = build_summary(store, plan, analysis=with_analysis(plan, mount=other), fit=False)
    (note,) = _loop_notes(again.warnings)
    assert ("removed with it" in note) == (other == "measured")


def test_points_left_out_for_a_ground_loop_are_not_counted_outside_the_window(tmp_path, sim, kit):
    text = LOOP.replace(
        "calibration: {method: through}",
        "calibration: {method: through}\nanalysis: {mount: fitted}",
    )
    plan, store = kit.start_run(tmp_path, text)
    runner = kit.run_on(sim, plan, store)
    (sample,) = runner.summary.samples
    corner = runner.summary.ground_loop["1"]["valid_above_hz"]
    f = np.asarray(sample.data.f)
    inside = np.asarray(sample.data.inside_window, dtype=bool)
    below = int(np.count_nonzero(inside & (f < corner)))
    assert below > 0, "the loop's corner lies inside the sweep"
    quality = sample.fit.quality
    assert quality.points_outside_window == sample.data.points_outside_window
    # Every point is accounted for once: used, outside the window, below the corner, or
    # left out by the fitter's screening (negative resistance, a glitch).
    assert (
        quality.points_used + quality.points_outside_window + below + quality.points_excluded
        == f.size
    )
    counts = [w for w in sample.fit.warnings if "outside the measurable window and" in w]
    outside = sample.data.points_outside_window
    assert counts == (
        [f"{outside} of {f.size} points lie outside the measurable window and were not used"]
        if outside
        else []
    )
    assert any(w.startswith(f"ground loop: {below} point") for w in sample.warnings)
    (row,) = summary_rows(runner.summary)
    assert row["points_outside_window"] == outside


def test_a_refused_calibration_names_its_settings_with_units():
    from bench.procedure.runner import calibration_mismatch

    old = {"sweep": {"if_bandwidth": 1000.0, "power": 0.0}, "fixture": {"series_r": 0.0}}
    new = {"sweep": {"if_bandwidth": 10.0, "power": -10.0}, "fixture": {"series_r": 499.0}}
    problems = calibration_mismatch(old, new)
    assert "sweep.if_bandwidth was 1 kHz, the plan has 10 Hz" in problems
    assert "sweep.power was 0 dBm, the plan has -10 dBm" in problems
    assert "fixture.series_r was 0 Ω, the plan has 499 Ω" in problems
