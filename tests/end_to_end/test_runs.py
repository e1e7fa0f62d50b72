"""Whole runs over real sockets against the simulated bench: unattended, guided, biased."""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest

from bench.errors import RunError
from bench.procedure.operators import REPEAT, SKIP, STOP, ScriptedOperator
from bench.procedure.processing import build_summary, with_analysis
from bench.runstore import DONE, SKIPPED


def test_unattended_run_stores_every_sweep_and_fits(tmp_path, sim, kit):
    plan, store = kit.start_run(tmp_path, kit.SMALL)
    lines: list[str] = []
    runner = kit.run_on(sim, plan, store, lines=lines)
    manifest = json.loads((store.root / "manifest.json").read_text())
    assert manifest["state"] == "complete"
    assert all(s["state"] == DONE for s in manifest["steps"])
    # One raw file per sweep: 1 through + 3 mount shorts + 3 samples.
    assert len(kit.raw_files(store)) == 7
    assert manifest["instruments"]["analyzer"]["points"] == 101
    assert manifest["calibration"]["method"] == "through"
    assert manifest["software_version"]
    summary = runner.summary
    assert summary is not None and len(summary.samples) == 3
    # The simulated MC22-6V3 is invented as a 22 µF part; its measured C must fall inside
    # the tolerance the procedure states (20 %), and the model must follow the data.
    for sample in summary.samples:
        assert sample.fit is not None, sample.fit_error
        if sample.part == "MC22-6V3":
            assert sample.fit.landmarks["c_low"] == pytest.approx(22e-6, rel=0.2)
        assert sample.fit.quality.rms_log_error < 0.3
    rows = list(csv.DictReader((store.root / "summary.csv").read_text().splitlines()))
    assert {r["part"] for r in rows} == {"MC22-6V3", "PB345-7V1"}
    assert any("MC22-6V3/s1" in line and "C " in line for line in lines), "live result line"
    assert (store.root / "models" / "MC22-6V3.lib").is_file()


def test_guided_session_repeat_skip_and_stop(tmp_path, sim, kit):
    text = (
        kit.SMALL.replace("mode: unattended", "mode: guided")
        .replace("  positions: 8\n", "  positions: 8\n  use_positions: [1]\n")
        .replace("samples: 2}", "samples: [s1, s2, s3]}")
    )
    plan, store = kit.start_run(tmp_path, text)
    # After each sweep: calibration repeated once, then continue; mount short ok;
    # s1 ok, s2 skipped, then stop at s3.
    answers = [REPEAT, "continue", "continue", "continue", SKIP, STOP]

    def hands(bench):
        return ScriptedOperator(bench, guided=True, decisions=answers)

    with pytest.raises(RunError, match="zbench run --resume"):
        kit.run_on(sim, plan, store, operator=hands)
    _, again = kit.reopen(store)
    assert again.manifest["state"] == "stopped"
    assert again.step_state("measure/MC22-6V3/s1/0V") == DONE
    assert again.step_state("measure/MC22-6V3/s2/0V") == SKIPPED
    assert again.first_incomplete() == "measure/MC22-6V3/s3/0V"
    rejected = list((store.root / "raw" / "rejected").glob("*.s2p"))
    assert [p.name for p in rejected] == ["cal_through.1.s2p"], "a repeated sweep is kept aside"
    kept = kit.raw_files(store)

    # Resume: the scripted hands re-place the part; the rest completes.
    plan2, store2 = kit.reopen(store)
    kit.run_on(sim, plan2, store2, operator=lambda bench: ScriptedOperator(bench, guided=True))
    assert store2.manifest["state"] == "complete"
    after = kit.raw_files(store2)
    assert all(after[name] == data for name, data in kept.items()), "no stored sweep changed"
    assert "MC22-6V3_s3_0V.s2p" in after
    assert store2.step_state("measure/MC22-6V3/s2/0V") == SKIPPED, "a skip survives the resume"
    plan3, store3 = kit.reopen(store2)
    names = {(s.part, s.sample) for s in build_summary(store3, plan3, fit=False).samples}
    assert ("MC22-6V3", "s2") not in names and ("MC22-6V3", "s3") in names


def test_guided_ground_loop_without_transformer_stops_with_advice(tmp_path, sim, kit):
    text = (
        kit.SMALL.replace("mode: unattended", "mode: guided")
        .replace("isolation_transformer: true", "isolation_transformer: false")
        .replace("  positions: 8\n", "  positions: 8\n  use_positions: [1]\n")
    )
    plan, store = kit.start_run(tmp_path, text)
    hands = lambda bench: ScriptedOperator(bench, guided=True)  # noqa: E731
    with pytest.raises(RunError) as info:
        kit.run_on(sim, plan, store, operator=hands)
    message = str(info.value)
    assert "ground loop" in message and "isolation transformer" in message
    _, again = kit.reopen(store)
    assert again.first_incomplete() == "mount_short/p1"
    assert list((store.root / "raw" / "rejected").glob("short_p1*.s2p")), "sweep kept aside"


def test_unattended_ground_loop_is_detected_and_warned(tmp_path, sim, kit):
    text = kit.SMALL.replace("isolation_transformer: true", "isolation_transformer: false")
    plan, store = kit.start_run(tmp_path, text)
    runner = kit.run_on(sim, plan, store)
    loops = store.manifest["ground_loop"]
    assert any(v["detected"] for v in loops.values())
    assert any("ground loop" in w for w in store.manifest["warnings"])
    summary = runner.summary
    assert summary is not None
    sample = next(
        s for s in summary.samples if s.position is not None and loops[str(s.position)]["detected"]
    )
    assert any("ground loop" in w for w in sample.warnings)


def test_bias_sweep_keeps_limits_and_leaves_output_off(tmp_path, sim, kit):
    text = kit.SMALL.replace("samples: 2}", "samples: 2, bias: [0 V, 3 V, 6.3 V]}")
    text = "\n".join(line for line in text.splitlines() if "PB345" not in line) + "\n"
    plan, store = kit.start_run(tmp_path, text)
    seen = _watch_bias(sim)
    runner = kit.run_on(sim, plan, store)
    assert sim.state.bias.output is False
    assert max(seen) <= 6.3 + 1e-12  # the part's rating is the lowest limit here
    assert max(seen) == pytest.approx(6.3)
    summary = runner.summary
    c = {s.bias_v: s.fit.landmarks["c_low"] for s in summary.samples if s.sample == "s1"}
    # Class II ceramics lose capacitance under DC bias (docs/references.md §5, published: Fortunato
    # 2012; Prymak et al. 2010): C must fall monotonically with bias.
    assert c[0.0] > c[3.0] > c[6.3]
    assert (store.root / "models" / "MC22-6V3_bias.csv").is_file()


def _watch_bias(sim):
    """Record every setpoint the simulated source holds while its output is on."""
    seen: list[float] = [0.0]
    bias = sim.state.bias
    original = bias.change

    def change(now, **settings):
        original(now, **settings)
        if bias.output:
            seen.append(bias.setpoint)

    bias.change = change
    return seen


def test_reprocess_with_other_settings_uses_only_stored_data(tmp_path, sim, kit):
    plan, store = kit.start_run(tmp_path, kit.SMALL)
    kit.run_on(sim, plan, store)
    sim.stop()  # nothing may touch an instrument from here on
    plan2, store2 = kit.reopen(store)
    analysis = with_analysis(plan2, tolerance=0.02, mount="fitted")
    summary = build_summary(store2, plan2, analysis=analysis, model_override="series-rlc")
    assert all(s.fit is None or s.fit.model == "series-rlc" for s in summary.samples)
    # Fitted on all cores or one at a time: the same samples, in order, the same fits.
    serial = build_summary(store2, plan2, analysis=analysis, model_override="series-rlc", jobs=1)
    assert [s.label for s in serial.samples] == [s.label for s in summary.samples]
    assert [s.fit and s.fit.elements for s in serial.samples] == [
        s.fit and s.fit.elements for s in summary.samples
    ]
    assert [s.warnings for s in serial.samples] == [s.warnings for s in summary.samples]
    first = summary.samples[0]
    # A tighter accuracy target narrows the window: at least as many points fall outside.
    base = build_summary(store2, plan2, fit=False).samples[0]
    assert first.data.points_outside_window >= base.data.points_outside_window
    assert np.all(np.isfinite(first.data.z))


RESISTORS = """\
name: resistors
mode: unattended
instruments:
  analyzer: {max_power: 0 dBm, timeout: 2 s}
sweep: {start: 10 kHz, stop: 100 MHz, points: 101, if_bandwidth: 1 kHz}
fixture: {positions: 8, series_resistor: 499 ohm, isolation_transformer: true}
calibration: {method: through}
analysis: {mount: fitted}
parts:
  - {name: PL530N, kind: inductor, nominal: 530n, tolerance: 20 %, samples: 1,
     method: shunt-through}
  - {name: FB137, kind: bead, nominal: 137 ohm, nominal_at: 100 MHz, samples: 1,
     method: shunt-through}
steps: [calibrate, mount_short, measure]
"""


def test_series_resistors_raise_the_window_and_keep_the_impedance(tmp_path, sim, kit):
    plan, store = kit.start_run(tmp_path, RESISTORS)
    kit.run_on(sim, plan, store)
    summary = build_summary(store, plan, fit=False)
    window = summary.samples[0].data.window
    # Window floor and ceiling scale by (Z0 + Rs)/Z0 = 549/50 (docs/references.md §1, derived):
    # about 1 mΩ … 225 Ω at 50 Ω becomes about 11 mΩ … 2.5 kΩ (common practice).
    assert 1.5e3 < window.z_max < 4e3
    inductor = next(s for s in summary.samples if s.part == "PL530N")
    f = inductor.data.f
    i = int(np.argmin(abs(f - 10e6)))
    # |Z| of 530 nH at 10 MHz: 2π · 10e6 · 530e-9 = 33.3 Ω (derived); the invented part's
    # true circuit adds winding resistance and parallel capacitance, so allow 15 %.
    assert abs(inductor.data.z[i]) == pytest.approx(2 * np.pi * f[i] * 530e-9, rel=0.15)
    bead = next(s for s in summary.samples if s.part == "FB137")
    j = int(np.argmin(abs(bead.data.f - 100e6)))
    # The bead is invented as 137 Ω at 100 MHz with a ±25 % spread of samples.
    assert abs(bead.data.z[j]) == pytest.approx(137.0, rel=0.3)
