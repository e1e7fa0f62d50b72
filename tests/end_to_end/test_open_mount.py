"""The open-mount capture in a run, and the runner's ground-loop notes agreeing with
processing (real sockets, the simulated bench)."""

from __future__ import annotations

import pytest

from bench.procedure.operators import ConsoleOperator, OperatorStop, ScriptedOperator
from bench.procedure.processing import build_summary

# One inductor behind 499 ohm resistors, guided, in one position: the pads' kilohms
# reach the window near the top of the sweep.
GUIDED_OPEN = """\
name: open-guided
mode: guided
instruments:
  analyzer: {max_power: 0 dBm, timeout: 2 s}
  switch: {timeout: 1 s}
  bench: {timeout: 1 s}
sweep: {start: 10 kHz, stop: 200 MHz, points: 101, if_bandwidth: 100 Hz}
fixture: {positions: 8, use_positions: [3], series_resistor: 499 ohm, isolation_transformer: true}
calibration: {method: through}
analysis: {noise_floor: -110 dB, mount: fitted}
parts:
  - {name: PL530N, kind: inductor, nominal: 530n, model: inductor, samples: 1,
     method: shunt-through}
steps: [calibrate, mount_open, mount_short, measure]
"""


def test_guided_open_capture_shows_the_fitted_pads(tmp_path, sim, kit):
    seen: list[tuple[str, str]] = []

    def decide(label: str, result: str) -> str:
        seen.append((label, result))
        return "continue"

    plan, store = kit.start_run(tmp_path, GUIDED_OPEN)
    hands: list[ScriptedOperator] = []

    def operator(bench):
        hands.append(ScriptedOperator(bench, guided=True, decide=decide))
        return hands[-1]

    kit.run_on(sim, plan, store, operator=operator)
    result = next(res for lab, res in seen if lab == "open mount 3")
    assert result.startswith("position 3: pads") and "fF" in result
    assert "emptied mount in position 3" in hands[0].actions
    # The scenario's own pads at position 3 (our invented fixture): 0.24 pF.
    true = sim.state.scenario.mounts[2].open_capacitance
    record = store.manifest["mount_open"]["3"]
    assert record["capacitance_f"] == pytest.approx(true, rel=0.15)
    # Reprocessing from the stored raw sweeps finds the same pads and removes them.
    summary = build_summary(store, plan, fit=False)
    assert summary.setup["mount_open"]["3"]["capacitance_f"] == pytest.approx(
        record["capacitance_f"], rel=1e-9
    )
    assert "open" in summary.setup["fixture_removal"]


def test_console_prompt_for_the_open_capture():
    said: list[str] = []
    answers = iter(["", "stop"])
    console = ConsoleOperator(ask=lambda prompt: next(answers), say=said.append)
    console.empty_mounts([1, 2])
    assert said[-1].startswith("Empty the mounts in positions 1, 2:")
    assert "no strap, no part" in said[-1]
    with pytest.raises(OperatorStop):
        console.empty_mounts([4])
    assert said[-1].startswith("Empty the mount in position 4:")


LOOP = """\
name: loop
mode: unattended
instruments:
  analyzer: {max_power: 0 dBm, timeout: 2 s}
  switch: {timeout: 1 s}
  bench: {timeout: 1 s}
sweep: {start: 100 Hz, stop: 100 MHz, points: 101, if_bandwidth: 1 kHz}
fixture: {positions: 8, use_positions: [1], isolation_transformer: false}
calibration: {method: through}
analysis: {mount: MOUNT}
parts:
  - {name: MC22-6V3, kind: mlcc, nominal: 22u, samples: 1}
steps: [calibrate, mount_short, measure, fit]
"""


@pytest.mark.parametrize("mount", ["measured", "fitted"])
def test_ground_loop_notes_agree_with_processing(tmp_path, sim, kit, mount):
    # The cable-shield loop's error is in series in both the short and the part
    # (docs/references.md §2, first-order model), so a measured short removes it and every
    # point is kept; a fitted Rm + jωLm cannot follow it, so those points are dropped.
    # The run's note, the live line and processing must say the same.
    plan, store = kit.start_run(tmp_path, LOOP.replace("MOUNT", mount))
    lines: list[str] = []
    runner = kit.run_on(sim, plan, store, lines=lines)
    assert store.manifest["ground_loop"]["1"]["detected"]
    notes = [w for w in store.manifest["warnings"] if w.startswith("position 1: ground loop")]
    assert notes and any(n in lines for n in notes), "the note is shown as well as stored"
    (sample,) = runner.summary.samples
    if mount == "measured":
        assert all("removed with it" in n for n in notes)
        assert not any("not used" in n or "invalid" in n for n in notes)
        assert any("all points kept" in w for w in sample.warnings)
        # Every point kept by the mount step is used, unless the fitter's screening left
        # it out (negative resistance, a glitch), which it reports.
        quality = sample.fit.quality
        assert (
            quality.points_used + quality.points_excluded
            == len(sample.data.f) - sample.data.points_outside_window
        )
    else:
        assert all("not used" in n for n in notes)
        assert any("not used" in w for w in sample.warnings)
        assert (
            sample.fit.quality.points_used < len(sample.data.f) - sample.data.points_outside_window
        )
