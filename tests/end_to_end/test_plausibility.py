"""Plausibility checks on standards and captures in whole runs against the simulated bench:
a missing through stops an unattended run and asks a guided operator to repeat; an
unstrapped mount short is caught; a skipped mount short turns the verdict to CHECK."""

from __future__ import annotations

import numpy as np
import pytest

from bench import exports, plausibility
from bench.errors import RunError
from bench.procedure.operators import ScriptedOperator
from bench.procedure.processing import build_summary
from bench.runstore import DONE
from bench.units import format_si

ONE_PART = """\
name: one-part
mode: unattended
instruments:
  analyzer: {max_power: 0 dBm, timeout: 2 s}
  switch: {timeout: 1 s}
  bench: {timeout: 1 s}
sweep: {start: 100 Hz, stop: 100 MHz, points: 61, if_bandwidth: 1 kHz, power: 0 dBm}
fixture: {positions: 8, use_positions: [1], isolation_transformer: true}
calibration: {method: through}
parts:
  - {name: MC22-6V3, kind: mlcc, nominal: 22u, tolerance: 20 %, samples: 1}
steps: [calibrate, mount_short, measure, fit, export]
"""


class _NoThrough(ScriptedOperator):
    """Hands that leave the cable ends apart (open) when asked for the through."""

    def __init__(self, bench, *, forget: int = 99, **kwargs):
        super().__init__(bench, **kwargs)
        self.forget = forget

    def connect_standard(self, standard):
        if standard == "through" and self.forget > 0:
            self.forget -= 1
            self.bench.connect_standard("open")
            return
        super().connect_standard(standard)


class _NoStrap(ScriptedOperator):
    """Hands that leave the mount empty when asked for the shorting strap."""

    def strap_mounts(self, positions):
        for pos in positions:
            self.bench.place(pos, "empty")


def test_unattended_run_with_a_missing_through_stops_with_a_clear_message(tmp_path, sim, kit):
    plan, store = kit.start_run(tmp_path, ONE_PART)
    with pytest.raises(RunError, match=r"implausible calibration through: the through reads"):
        kit.run_on(sim, plan, store, operator=lambda bench: _NoThrough(bench))
    assert store.step_state("calibrate/through") != DONE
    # The implausible sweep is kept aside, not adopted by a resume.
    assert not list((store.root / "raw").glob("cal_through*.s2p"))
    assert list((store.root / "raw").rglob("*through*"))


def test_guided_operator_is_told_and_a_repeat_fixes_it(tmp_path, sim, kit):
    plan, store = kit.start_run(tmp_path, ONE_PART.replace("mode: unattended", "mode: guided"))
    seen = []

    def decide(label, result):
        seen.append((label, result))
        # Repeat once the problem is shown (the hands then join the cables).
        return "repeat" if result.startswith("IMPLAUSIBLE") else "continue"

    hands = lambda bench: _NoThrough(bench, forget=1, guided=True, decide=decide)  # noqa: E731
    runner = kit.run_on(sim, plan, store, operator=hands)
    through = [r for label, r in seen if label == "calibration through"]
    assert through[0].startswith("IMPLAUSIBLE: the through reads") and "Repeat" in through[0]
    assert not through[-1].startswith("IMPLAUSIBLE")
    assert not any(w.startswith("implausible") for w in store.manifest.get("warnings", []))
    (row,) = exports.summary_rows(runner.summary)
    assert row["result"] in ("PASS", "FAIL")


def test_unstrapped_mount_short_stops_an_unattended_run(tmp_path, sim, kit):
    plan, store = kit.start_run(tmp_path, ONE_PART)
    with pytest.raises(RunError, match=r"implausible mount short 1: .*shorting strap"):
        kit.run_on(sim, plan, store, operator=lambda bench: _NoStrap(bench))


def test_skipped_mount_short_makes_the_verdict_check(tmp_path, sim, kit):
    text = ONE_PART.replace("mode: unattended", "mode: guided")
    plan, store = kit.start_run(tmp_path, text)

    def decide(label, result):
        return "skip" if label.startswith("mount short") else "continue"

    hands = lambda bench: ScriptedOperator(bench, guided=True, decide=decide)  # noqa: E731
    kit.run_on(sim, plan, store, operator=hands)
    summary = build_summary(store, plan)
    (row,) = exports.summary_rows(summary)
    assert row["result"] == "CHECK"
    assert "mount short of position 1 skipped" in row["reason"]


def test_checks_on_invented_captures():
    f = np.logspace(2, 8, 61)
    s = np.zeros((f.size, 2, 2), dtype=complex)
    s[:, 1, 0] = s[:, 0, 1] = 1.0
    assert plausibility.check_through(f, s) is None
    # With 499 Ω resistors a through reads 20·log10(50/549) = −20.8 dB (derived).
    s_r = s * (50 / 549)
    assert plausibility.check_through(f, s_r, series_r=499.0) is None
    assert plausibility.check_through(f, s * 1e-5) is not None
    refl = np.zeros_like(s)
    refl[:, 0, 0] = refl[:, 1, 1] = -1.0
    assert plausibility.check_reflection("short", f, refl) is None
    assert "does not look like a load" in plausibility.check_reflection("load", f, refl)
    # A load on the cable where a short belongs reflects almost nothing.
    assert "a short" in plausibility.check_reflection("short", f, refl * 0.02)
    assert plausibility.check_mount_short(f, np.full(f.size, 1e-3 + 0j), 1) is None
    assert plausibility.check_mount_short(f, np.full(f.size, 1e4 + 0j), 1) is not None
    assert plausibility.check_part(np.zeros(10, bool), "A/s1") is not None
    assert plausibility.check_part(np.ones(10, bool), "A/s1") is None


def _screened(label, f, left_out):
    from types import SimpleNamespace

    status = np.full(f.size, "used", dtype=object)
    status[list(left_out)] = "glitch"
    return SimpleNamespace(
        label=label, data=SimpleNamespace(f=f), fit=SimpleNamespace(point_status=tuple(status))
    )


def test_a_point_screened_out_of_most_samples_is_blamed_on_a_shared_capture():
    f = np.geomspace(100.0, 2e8, 201)
    # A glitch in the calibration's through at point 120 shows in four of five samples;
    # each sample also has a glitch of its own.
    samples = [_screened(f"s{k}", f, [120, 10 + k]) for k in range(4)]
    samples.append(_screened("s4", f, [40]))
    note = plausibility.shared_screening(samples)
    assert note is not None
    assert f"at the same frequency: {format_si(f[120], 'Hz')} (4 of 5)" in note
    assert "calibration standard" in note
    # Two of five is no pattern; nor is one sample alone; nor samples without a fit.
    assert plausibility.shared_screening(samples[3:]) is None
    assert plausibility.shared_screening(samples[:1]) is None
    unfitted = [_screened(f"u{k}", f, [120]) for k in range(3)]
    for sample in unfitted:
        sample.fit = None
    assert plausibility.shared_screening(unfitted) is None
