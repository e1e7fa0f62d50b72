"""Accuracy of the whole flow: do the models zbench hands over match the measured parts?

The shipped demo procedure and the 499 Ω series-resistor procedure run unattended
against the simulated bench over real sockets (small sweeps, compressed time): software
calibration from the stored standards, mount short, shunt-through conversion, fixture
removal, window and fit. Each sample's fitted landmarks are then compared with the same
landmarks (``bench.core.landmarks``) read off the sample's *true* circuit on the same
frequency grid, noise-free.

What each comparison is against:
- the truth is our own invented part (``simulated_instruments.parts``, the sample drawn
  from the scenario's lot), not a published value;
- the method that links the two is the shunt-through relation
  ``Z = ((Z0 + Rs)/2)·S21n/(1 − S21n)`` and the fixture removal ``Zm − Zs``, or
  ``(Zm − Zs)/(1 − (Zm − Zs)·Yo)`` with an open capture (docs/design.md §4, docs/references.md §1
  and §4, derived); the tolerances are the recovery targets
  of the numeric core's specification: C 2 %, ESL 5 %, SRF 3 %, ESR at SRF 15 %,
  L 3 %, Rdc 10 %, Z at SRF 20 %;
- fit quality: every model meets the fitter's own bound, RMS complex-log error
  ``<= 0.1`` (about 10 % in magnitude and 6° in phase, docs/design.md §3).

The pads' capacitance (0.24–0.33 pF in the demo fixture) sits across the part. It
moves an inductor's parallel resonance by about 6 %, so the series-resistor procedure
captures the empty mounts and zbench removes the fitted pads: its parts are compared
with the bare part. The demo captures no open (beside its capacitors the pads are
negligible), so its parts are compared with the part as the mount presents it
(part ‖ pad capacitance). A position whose open was not usable is compared that way too.

A known limit of the flow, asserted as such rather than hidden:
- a landmark the set-up cannot see must be said to be unmeasured: a 1.5 mΩ winding
  behind 499 Ω resistors lies far below the window's floor, so its ``r_dc`` must carry
  the fitter's "comes from the model" warning instead of a number held to 10 %.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import yaml

from bench.commands.run import new_store, with_resources
from bench.core.fitting import DEFAULT_QUALITY_BOUND
from bench.core.landmarks import landmarks_for
from bench.procedure.display import PlainDisplay
from bench.procedure.instruments import open_instruments
from bench.procedure.operators import ScriptedOperator
from bench.procedure.plan import load_plan
from bench.procedure.runner import Runner
from simulated_instruments.server import start_bench

PROCEDURES = Path(__file__).resolve().parents[2] / "procedures"
# Simulated sweep, relay and charging times are compressed 1000 times; the physics is not.
TIME_SCALE = 0.001
# The demo scenario's own seed: the bench `zbench demo` measures. Below the hybrid's
# crossover the through normalisation leaves the analyser's raw port match in S21
# (about −(e11 + e22), 1.5 to 3 % on this simulator's error-box draws); this bench's
# draw puts most of it in phase (0.9°) and 0.4 % in magnitude, inside the C target.
SEED = None

# Recovery targets of the numeric core (relative), see the module docstring.
TOLERANCE = {
    "c_low": 0.02,
    "esl": 0.05,
    "srf": 0.03,
    "esr_at_srf": 0.15,
    "l_low": 0.03,
    "r_dc": 0.10,
    "z_at_srf": 0.20,
    "c_par": 0.20,  # the winding capacitance; held to the looser of the two families
    "z_at_nominal": 0.20,  # a bead's |Z| where it is specified, to the Z-at-SRF target
}
CAPACITOR_MARKS = ("c_low", "esl", "srf", "esr_at_srf")
# Of an inductor's landmarks, those the pads' capacitance moves (see the module doc).
RESONANCE_MARKS = ("srf", "z_at_srf", "c_par")
# The fitted pads against the scenario's true pad capacitance: the open is measured
# only near the window's ceiling, where each point carries about 10 to 50 % (the
# window's own uncertainty), so the fit over a few dozen points (about 5 % one sigma)
# is held to three sigmas, 15 %.
PAD_TOLERANCE = 0.15


def _shrunk(name: str, edit: dict[str, Any]) -> str:
    """A shipped procedure with quicker waits and without its export and report steps."""
    data = yaml.safe_load((PROCEDURES / name).read_text(encoding="utf-8"))
    for key, value in edit.items():
        data.setdefault(key, {}).update(value)
    steps = data.get("steps", ["calibrate", "mount_short", "measure", "fit"])
    data["steps"] = [s for s in steps if s not in ("export", "report")]
    return yaml.safe_dump(data, sort_keys=False)


PROCEDURE_EDITS = {
    # The bias waits are real time on our side; the simulator compresses the charging.
    "demo.yaml": {"bias": {"ramp_dwell": "1 ms", "settle": "5 ms", "discharge": "5 ms"}},
    # 201 points instead of 401: still 38 per decade, enough for every landmark.
    "series_resistors.yaml": {"sweep": {"points": 201}},
}


@dataclass(frozen=True)
class Outcome:
    """One run: its summary, and the truth the simulated bench knew."""

    summary: Any
    scenario: Any


def _run(tmp: Path, name: str) -> Outcome:
    path = tmp / name
    path.write_text(_shrunk(name, PROCEDURE_EDITS[name]), encoding="utf-8")
    plan = load_plan(path)
    store = new_store(plan, path, tmp / "runs")
    with start_bench("demo", time_scale=TIME_SCALE, seed=SEED) as sim:
        plan = with_resources(plan, sim.resources)
        with open_instruments(plan, scripted=True) as instruments:
            hands = ScriptedOperator(instruments.bench)
            display = PlainDisplay(lambda _: None)
            runner = Runner(plan, store, instruments, hands, display, assume_yes=True)
            runner.run()
        scenario = sim.state.scenario
    assert runner.summary is not None
    return Outcome(runner.summary, scenario)


_OUTCOMES: dict[str, Outcome] = {}


@pytest.fixture(scope="module")
def outcome(tmp_path_factory):
    """Each procedure runs once per module; the tests read its samples."""

    def get(name: str) -> Outcome:
        if name not in _OUTCOMES:
            _OUTCOMES[name] = _run(tmp_path_factory.mktemp(name.split(".")[0]), name)
        return _OUTCOMES[name]

    yield get
    _OUTCOMES.clear()


def _samples(name: str) -> list[tuple[str, str, str, float]]:
    plan = load_plan(PROCEDURES / name)
    out = []
    for step in plan.steps:
        if step.kind == "measure" and step.placement is not None:
            p = step.placement
            case = (name, p.part, p.sample, step.bias_v)
            if case not in out:  # a part measured several ways is one stitched sample
                out.append(case)
    return out


CASES = _samples("demo.yaml") + _samples("series_resistors.yaml")
IDS = [f"{part}/{sample}@{bias:g}V" for _, part, sample, bias in CASES]


def _find(result: Outcome, part: str, sample: str, bias: float) -> Any:
    for s in result.summary.samples:
        if s.part == part and s.sample == sample and s.bias_v == pytest.approx(bias):
            return s
    raise AssertionError(f"{part}/{sample} at {bias} V is not in the run's results")


def _pads_removed(result: Outcome, position: int) -> bool:
    """Whether the run fitted and removed the pads of ``position`` (an open capture)."""
    record = result.summary.setup.get("mount_open", {}).get(str(position), {})
    return record.get("capacitance_f") is not None


def _truth(result: Outcome, sample: Any, f: Any = None) -> tuple[np.ndarray, np.ndarray, str]:
    """The sample's true impedance on the measured grid (or on ``f``); the impedance the
    flow should deliver (the bare part where the pads were removed, else part ‖ pad
    capacitance, as the mount presents it); and its kind."""
    part = result.scenario.parts[f"{sample.part}/{sample.sample}"]
    f = sample.data.f if f is None else f
    z = part.impedance(f, sample.bias_v)
    # A single mount (series-through, reflection) is removed by its own empty capture.
    if sample.position is None or _pads_removed(result, sample.position):
        return z, z, part.kind
    pad = result.scenario.mounts[sample.position - 1].open_capacitance
    mounted = 1.0 / (1.0 / z + 2j * np.pi * f * pad)
    return z, mounted, part.kind


def _close(fitted: float | None, true: float | None, key: str) -> None:
    assert true is not None, f"{key}: the true circuit shows no {key} on this sweep"
    assert fitted is not None, f"{key}: the fit gives none (true {true:.4g})"
    error = fitted / true - 1.0
    assert abs(error) <= TOLERANCE[key], (
        f"{key}: fitted {fitted:.4g}, true {true:.4g} ({error:+.1%}, "
        f"tolerance {TOLERANCE[key]:.0%})"
    )


@pytest.mark.parametrize(("procedure", "part", "sample", "bias"), CASES, ids=IDS)
def test_fitted_landmarks_match_the_true_part(outcome, procedure, part, sample, bias):
    result = outcome(procedure)
    s = _find(result, part, sample, bias)
    assert s.fit is not None, s.fit_error
    fit = s.fit
    # Fit quality: the fitter's own bound (docs/design.md §3), on every sample.
    assert fit.quality.rms_log_error <= DEFAULT_QUALITY_BOUND, fit.warnings
    # And within 1.5 times what the points' noise predicts (the project's target, common
    # practice, no source): the model misses nothing the data show.
    assert fit.quality.noise_ratio <= 1.5, fit.quality
    z_true, z_expected, kind = _truth(result, s)
    assert fit.kind == kind
    f = s.data.f
    true_marks = landmarks_for(kind, f, z_true)
    # A causal dielectric's capacitance, and a ferrite's permeability, fall slowly with
    # frequency (docs/references.md §9), so c_low and l_low depend on the band they are
    # read over: read the truth on the points the fit read its own from. (A bead's
    # lowest points lie below the window: its l_low read from 100 Hz is 3 % above the
    # one read where the fit sees it.)
    used = np.asarray(fit.point_status) == "used"
    assert used.shape == f.shape
    true_used = landmarks_for(kind, f, z_true, used)
    if kind == "capacitor":
        for key in CAPACITOR_MARKS:
            _close(fit.landmarks[key], true_used[key], key)
        return
    _close(fit.landmarks["l_low"], true_used["l_low"], "l_low")
    # Rdc: held to 10 % where the set-up's window reaches it, else it must be flagged.
    unmeasured = [w for w in fit.warnings if w.startswith("r_dc") and "from the model" in w]
    if true_marks["r_dc"] < s.data.window.z_min:
        assert unmeasured, f"r_dc {true_marks['r_dc']:.3g} ohm is below the window yet unflagged"
    else:
        assert not unmeasured, unmeasured
        _close(fit.landmarks["r_dc"], true_marks["r_dc"], "r_dc")
    expected_marks = landmarks_for(kind, f, z_expected)
    if expected_marks["srf"] is None:
        # The bead resonates above 200 MHz: no SRF in the truth; the fit's is the model's
        # extrapolation beyond the sweep, and says so.
        assert fit.landmark_sources["srf"] == "model"
        assert fit.landmarks["srf"] > f[-1]
        # Instead |Z| at the frequency the bead is specified at, to the Z-at-SRF target.
        spec = next(p for p in result.summary.parts if p.name == part)
        at = np.array([spec.nominal_at_hz])
        z_true_at = abs(result.scenario.parts[f"{part}/{sample}"].impedance(at)[0])
        _close(float(abs(fit.impedance(at)[0])), float(z_true_at), "z_at_nominal")
        return
    if expected_marks["c_par"] is None:
        # The sweep stops short of the capacitive slope well above the resonance: read
        # the true c_par on the same curve continued a decade and a half upward.
        wide = np.geomspace(f[0], f[-1] * 30, 3 * f.size)
        expected_marks["c_par"] = landmarks_for(kind, wide, _truth(result, s, wide)[1])["c_par"]
    for key in RESONANCE_MARKS:
        _close(fit.landmarks[key], expected_marks[key], key)


# The inductor on the switched fixture's pads (the demo's is on the series-through and
# reflection mounts, which their own captures remove: see test_methods.py).
INDUCTORS = [c for c in CASES if c[1] == "PL530N" and c[0] == "series_resistors.yaml"]


@pytest.mark.parametrize(
    ("procedure", "part", "sample", "bias"),
    INDUCTORS,
    ids=[f"{c[1]}/{c[2]}" for c in INDUCTORS],
)
def test_inductor_resonance_matches_the_bare_part(outcome, procedure, part, sample, bias):
    # With the open capture the pads leave the data: the SRF is the bare part's, within
    # the core's 3 % target; without it the pads would lower it by about 6 %.
    result = outcome(procedure)
    s = _find(result, part, sample, bias)
    assert s.fit is not None, s.fit_error
    assert _pads_removed(result, s.position), result.summary.setup.get("mount_open")
    z_true, _, kind = _truth(result, s)
    true_marks = landmarks_for(kind, s.data.f, z_true)
    _close(s.fit.landmarks["srf"], true_marks["srf"], "srf")
    # The comparison has teeth: left in, the pads would put the SRF outside the target.
    pad = result.scenario.mounts[s.position - 1].open_capacitance
    with_pads = 1.0 / (1.0 / z_true + 2j * np.pi * s.data.f * pad)
    assert (
        landmarks_for(kind, s.data.f, with_pads)["srf"] < (1 - TOLERANCE["srf"]) * true_marks["srf"]
    )


def test_fitted_pads_match_the_mounts(outcome):
    # The open capture's fitted C against the scenario's own pad capacitance (our
    # invented fixture), for every position the series-resistor procedure used.
    result = outcome("series_resistors.yaml")
    records = result.summary.setup["mount_open"]
    assert records, "the procedure captures the empty mounts"
    for position, record in records.items():
        true = result.scenario.mounts[int(position) - 1].open_capacitance
        assert record["capacitance_f"] is not None, record["note"]
        error = record["capacitance_f"] / true - 1.0
        assert abs(error) <= PAD_TOLERANCE, (position, record)
        assert record["points"] >= 5 and record["to_hz"] > record["from_hz"]
    assert "open" in result.summary.setup["fixture_removal"]


@pytest.mark.parametrize("procedure", ["demo.yaml", "series_resistors.yaml"])
def test_impedance_inside_the_window_follows_the_true_part(outcome, procedure):
    # The data themselves, before any fit: over the points inside the window, the
    # median complex-log distance to the part (as delivered: bare where the pads were
    # removed, else as mounted) stays within the window's own
    # accuracy target (the procedures' 10 % tolerance).
    result = outcome(procedure)
    for s in result.summary.samples:
        _, z_expected, _ = _truth(result, s)
        inside = np.asarray(s.data.inside_window, dtype=bool)
        # An inductor's lowest decades (its milliohms) lie below every method's floor.
        share = 3 if s.setups else 2
        assert np.count_nonzero(inside) > len(inside) // share
        error = np.abs(np.log(s.data.z[inside] / z_expected[inside]))
        assert float(np.median(error)) < s.data.window.tolerance, (s.part, s.sample)


def test_solt_with_resistors_is_put_back_on_the_z0_plus_rs_scale():
    # A SOLT taken through the port resistors moves the reference plane past them, so
    # its S21 is 2Z/(2Z + Z0); a through normalisation taken with them fitted gives
    # 2Z/(2Z + Z0 + Rs) (docs/references.md §1, derived). Both from scikit-rf's network algebra
    # (a shunt Z between two series resistors, ABCD cascaded and converted with a2s).
    from skrf.network import a2s

    from bench.core.conversions import shunt_through_rereference

    f = np.geomspace(1e3, 1e9, 31)
    z = 0.05 + 2j * np.pi * f * 470e-9 + 1.0 / (1.0 / 3e3 + 2j * np.pi * f * 2e-12)
    one, zero = np.ones_like(f, dtype=complex), np.zeros_like(f, dtype=complex)
    shunt = np.stack([np.stack([one, zero], -1), np.stack([1.0 / z, one], -1)], -2)
    resistor = np.stack([np.stack([one, 499.0 * one], -1), np.stack([zero, one], -1)], -2)
    at_plane = a2s(shunt, 50.0)[:, 1, 0]
    with_resistors = a2s(resistor @ shunt @ resistor, 50.0)[:, 1, 0]
    through = a2s(resistor @ resistor, 50.0)[:, 1, 0]
    expected = with_resistors / through
    assert np.allclose(shunt_through_rereference(at_plane, 50.0, 549.0), expected, rtol=1e-12)


HYBRID_WITH_RESISTORS = """\
name: hybrid-resistors
mode: unattended
instruments:
  analyzer: {max_power: 0 dBm, timeout: 2 s}
sweep: {start: 10 kHz, stop: 200 MHz, points: 121, if_bandwidth: 10 Hz}
fixture: {positions: 8, series_resistor: 499 ohm, isolation_transformer: true}
calibration: {method: hybrid, crossover: 1 MHz}
analysis: {noise_floor: -120 dB, mount: fitted}
parts:
  - {name: FB137, kind: bead, nominal: 137 ohm, nominal_at: 100 MHz, samples: 1,
     method: shunt-through}
steps: [calibrate, mount_short, measure]
"""


def test_hybrid_calibration_with_resistors_keeps_the_impedance(tmp_path):
    # Above the crossover SOLT has calibrated the resistors out; read with Z0 + Rs those
    # points would come out (Z0 + Rs)/Z0 = 11 times too high. The bead's data on both
    # sides of the crossover must follow its true circuit (as mounted).
    from bench.procedure.processing import build_summary

    path = tmp_path / "hybrid.yaml"
    path.write_text(HYBRID_WITH_RESISTORS, encoding="utf-8")
    plan = load_plan(path)
    store = new_store(plan, path, tmp_path / "runs")
    with start_bench("demo", time_scale=TIME_SCALE, seed=SEED) as sim:
        plan = with_resources(plan, sim.resources)
        with open_instruments(plan, scripted=True) as instruments:
            display = PlainDisplay(lambda _: None)
            hands = ScriptedOperator(instruments.bench)
            Runner(plan, store, instruments, hands, display, assume_yes=True).run()
        scenario = sim.state.scenario
    summary = build_summary(store, plan, fit=False)
    (sample,) = summary.samples
    _, z_mounted, _ = _truth(Outcome(summary, scenario), sample)
    f = sample.data.f
    inside = np.asarray(sample.data.inside_window, dtype=bool)
    for band in (f < 1e6, f >= 1e6):
        use = band & inside
        assert np.count_nonzero(use) > 10
        error = np.abs(np.log(sample.data.z[use] / z_mounted[use]))
        assert float(np.median(error)) < 0.05
    assert any("SOLT with port series resistors" in w for w in summary.warnings)


def test_demo_mlcc_esr_is_followed_from_the_lowest_point_to_resonance(outcome):
    # The run's own fits of the 22 µF part at 0 V: the model's ESR (Re Z) within 20 % of
    # the true part's over the points the fit used below the series resonance, where the
    # dielectric's constant loss tangent makes it fall as 1/f (docs/references.md §9;
    # the 20 % is the recovery target, common practice, no source).
    result = outcome("demo.yaml")
    checked = 0
    for s in result.summary.samples:
        if s.part != "MC22-6V3" or s.bias_v != 0 or s.fit is None:
            continue
        z_true, _, _ = _truth(result, s)
        used = np.asarray(s.fit.point_status) == "used"
        below = used & (s.data.f < s.fit.landmarks["srf"])
        assert s.data.f[below][0] < 300.0  # the band reaches down to the lossy region
        ratio = s.fit.impedance(s.data.f[below]).real / z_true[below].real
        assert np.max(np.abs(ratio - 1)) < 0.2, (s.sample, ratio.min(), ratio.max())
        checked += 1
    assert checked >= 2
