"""Parameter recovery under seeded noise, on invented parts richer than every fit model.

Each true part comes from the simulator's physics (skin-effect conductors, dielectric
loss, a weak second mode, a distributed RC line, frequency-dependent core and ferrite
loss). Its impedance goes through the shunt-through measurement: S21 with trace noise
and a noise floor, back to Z with the per-point uncertainty and window marks of
``bench.core.impedance``. The fit's landmarks (from the fitted model) must match the
true part's landmarks (the same landmark rules on its noise-free impedance) within the
project's tolerances: C 2 %, ESL 5 %, SRF 3 %, ESR at SRF 15 %, L 3 %, Rdc 10 %,
Z at SRF 20 %.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from bench.core.conversions import shunt_through_s21
from bench.core.fit_select import BIC_MARGIN
from bench.core.fitting import FitResult, ModelMismatchError, fit_impedance
from bench.core.impedance import impedance_from_shunt_through
from bench.core.landmarks import landmarks_for
from bench.errors import FitError, InputError
from simulated_instruments.parts import BulkCapacitor, FerriteBead, Mlcc, PowerInductor

F = np.logspace(np.log10(1e3), np.log10(200e6), 301)
TOLERANCE = {
    "c_low": 0.02,
    "esl": 0.05,
    "srf": 0.03,
    "esr_at_srf": 0.15,
    "l_low": 0.03,
    "r_dc": 0.10,
    "z_at_srf": 0.20,
    # c_par: the part's winding capacitance, 10 % (the looser end of the resonance
    # landmarks, common practice, no source).
    "c_par": 0.10,
}


def measure(part, seed: int, *, f=F, series_r: float = 0.0, noise_floor_db: float = -120.0):
    """Shunt-through measurement of ``part``: noisy S21n -> ImpedanceData."""
    rng = np.random.default_rng(seed)
    s21 = shunt_through_s21(part.impedance(f), 50.0, series_r)
    trace = 10 ** (0.01 / 20) - 1  # 0.01 dB trace noise as a relative one-sigma
    floor = 10 ** (noise_floor_db / 20)
    noise = (rng.normal(size=f.size) + 1j * rng.normal(size=f.size)) / np.sqrt(2)
    noise2 = (rng.normal(size=f.size) + 1j * rng.normal(size=f.size)) / np.sqrt(2)
    s21n = s21 * (1 + trace * noise) + floor * noise2
    return impedance_from_shunt_through(
        f, s21n, series_r=series_r, noise_floor_db=noise_floor_db, trace_noise_db=0.01
    )


def check_landmarks(result: FitResult, part, f=F, keys=None) -> None:
    truth = landmarks_for(part.kind, f, part.impedance(f))
    if truth.get("c_par", 0) is None:
        # The grid stops short of the capacitive slope well above the SRF: the truth is
        # the part's own winding capacitance.
        truth["c_par"] = getattr(part, "capacitance", None) or part.winding_capacitance
    for key in keys or truth:
        assert truth[key] is not None, f"true {key} undefined on this grid"
        assert result.landmarks[key] is not None, f"fitted {key} missing"
        assert result.landmarks[key] == pytest.approx(truth[key], rel=TOLERANCE[key]), key


# Invented parts, each richer than the model fitted to it.
MLCC = Mlcc(name="MC10U", capacitance=10e-6, esl=0.45e-9, esr=4e-3, dielectric="X5R")
MLCC_SIMPLE = Mlcc(
    name="MC2U2",
    capacitance=2.2e-6,
    esl=0.6e-9,
    esr=8e-3,
    dielectric="X7R",
    loss_tangent=0.01,
    mode_c_ratio=0.0,
    skin_corner=50e6,
)
BULK = BulkCapacitor(name="PB330", capacitance=330e-6, line_resistance=30e-3, esr=8e-3)
INDUCTOR = PowerInductor(
    name="PL1U",
    inductance=1e-6,
    r_dc=8e-3,
    skin_corner=300e3,
    core_loss_resistance=150.0,
    winding_capacitance=10e-12,
)
BEAD = FerriteBead(name="FB600", inductance2=0.4e-6, resistance2=120.0)


@pytest.mark.parametrize(
    ("part", "model", "seed", "series_r"),
    [
        (MLCC_SIMPLE, "series-rlc", 1, 0.0),
        (MLCC, "two-branch", 2, 0.0),
        (BULK, "ladder", 3, 0.0),
        # Series resistors raise the window's ceiling over the parallel resonance.
        (INDUCTOR, "inductor", 4, 450.0),
        (BEAD, "bead", 5, 450.0),
    ],
    ids=["series-rlc", "two-branch", "ladder", "inductor", "bead"],
)
def test_recovery_of_landmarks_under_noise(part, model, seed, series_r):
    data = measure(part, seed, series_r=series_r)
    # Precondition: the whole response lies in the window, so every point is used.
    assert data.points_outside_window == 0
    result = fit_impedance(
        data.f, data.z, model=model, rel_uncertainty=data.rel_uncertainty, valid=data.inside_window
    )
    assert result.model == model
    assert result.kind == part.kind
    assert result.meets_quality, result.quality
    assert result.quality.points_used == F.size
    assert result.quality.points_outside_window == 0
    check_landmarks(result, part)
    assert all(v > 0 for v in result.elements.values())
    assert all(np.isfinite(v) and v >= 0 for v in result.uncertainties.values())
    # The fit error within 1.5 times the noise (the project's target, common practice, no
    # source), where the named family holds the part's physics. Two-branch is not held to
    # it: it has no dielectric loss for the MLCC's causal constant-loss dielectric (it ends
    # near 3.7); the family that has it, lossy-rlc, which auto chooses, meets the target on
    # the very same points (test_the_family_with_the_physics_meets_the_noise).
    if model != "two-branch":
        assert result.quality.noise_ratio <= 1.5, result.quality


def test_the_family_with_the_physics_meets_the_noise():
    # The two-branch recovery's points: lossy-rlc holds the dielectric's constant loss
    # tangent (the Q element) and auto chooses it; its error is within 1.5 times the noise
    # (the project's target, common practice, no source).
    data = measure(MLCC, 2)
    forced = fit_impedance(data.f, data.z, model="two-branch", rel_uncertainty=data.rel_uncertainty)
    chosen = fit_impedance(data.f, data.z, rel_uncertainty=data.rel_uncertainty)
    assert chosen.model == "lossy-rlc"
    assert chosen.quality.noise_ratio <= 1.5, chosen.quality
    assert forced.quality.noise_ratio > 1.5  # the forced family lacks the loss
    check_landmarks(chosen, MLCC)


def test_inductor_meets_the_noise_where_its_core_loss_is_constant():
    # The inductor recovery's part with its core loss held constant (exponent 0): the
    # family's Rp is then the part's own physics, and its error is within 1.5 times the
    # noise (the project's target, common practice, no source), as it is with the
    # recovery test's growing (causal, constant-phase) core loss.
    part = PowerInductor(
        name="PL1U0",
        inductance=1e-6,
        r_dc=8e-3,
        skin_corner=300e3,
        core_loss_resistance=150.0,
        core_loss_exponent=0.0,
        winding_capacitance=10e-12,
    )
    data = measure(part, 4, series_r=450.0)
    result = fit_impedance(
        data.f,
        data.z,
        model="inductor",
        rel_uncertainty=data.rel_uncertainty,
        valid=data.inside_window,
    )
    assert result.quality.noise_ratio <= 1.5, result.quality
    check_landmarks(result, part)


def test_ladder_follows_distributed_line_better_than_series_rlc():
    data = measure(BULK, 11)
    ladder = fit_impedance(data.f, data.z, model="ladder", rel_uncertainty=data.rel_uncertainty)
    simple = fit_impedance(data.f, data.z, model="series-rlc", rel_uncertainty=data.rel_uncertainty)
    assert ladder.order >= 2
    assert ladder.quality.rms_log_error < 0.5 * simple.quality.rms_log_error
    # The ladder's low-frequency resistance carries the line's R/3 (de Levie limit,
    # docs/references.md §3, derived): ESR + R/3 = 8 + 10 = 18 mΩ at 1 kHz.
    assert ladder.impedance(np.array([1e3]))[0].real == pytest.approx(18e-3, rel=0.1)


@pytest.mark.parametrize(
    ("part", "kind", "models"),
    [
        # lossy-rlc order 2 is two-branch with the loss across the band added.
        (MLCC, "capacitor", {"two-branch", "lossy-rlc"}),
        (BULK, "capacitor", {"ladder"}),
        (INDUCTOR, "inductor", {"inductor", "bead"}),
        (BEAD, "inductor", {"bead"}),
    ],
    ids=["mlcc", "bulk", "inductor", "bead"],
)
def test_auto_chooses_kind_and_family(part, kind, models):
    data = measure(part, 21, series_r=450.0 if kind == "inductor" else 0.0)
    result = fit_impedance(
        data.f, data.z, rel_uncertainty=data.rel_uncertainty, valid=data.inside_window
    )
    assert result.kind == kind
    assert result.model in models
    assert result.meets_quality
    assert len(result.candidates) >= 3
    chosen = [c for c in result.candidates if (c.model, c.order) == (result.model, result.order)]
    # The lowest criterion among the candidates the data support wins, unless a simpler
    # one is within the margin; a candidate with an element pinned or not determined is
    # passed over.
    assert chosen[0].supported
    supported = [c.bic for c in result.candidates if c.supported]
    assert chosen[0].bic <= min(supported) + BIC_MARGIN


def test_peak_above_window_is_counted_and_warned():
    # Invented inductor whose parallel resonance peak (several kΩ) is above the ceiling
    # of a plain 50 Ω set-up (about 225 Ω, docs/references.md §1, common practice).
    part = PowerInductor(name="PL2U2", inductance=2.2e-6, core_loss_resistance=3e3)
    data = measure(part, 31)
    assert data.points_outside_window > 0
    assert np.all(data.inside_window[data.f < 1e6])
    result = fit_impedance(
        data.f,
        data.z,
        model="inductor",
        rel_uncertainty=data.rel_uncertainty,
        valid=data.inside_window,
    )
    assert result.quality.points_outside_window == data.points_outside_window
    assert result.quality.points_used == F.size - data.points_outside_window
    assert any("outside the measurable window" in w for w in result.warnings)
    assert any("resonance" in w for w in result.warnings)
    # Below resonance, inside the window, the model still follows the part.
    check_landmarks(result, part, keys=("l_low", "r_dc"))


def test_series_resistors_widen_window_for_the_peak():
    part = PowerInductor(name="PL2U2", inductance=2.2e-6, core_loss_resistance=3e3)
    data = measure(part, 32, series_r=450.0)
    plain = measure(part, 32)
    assert data.points_outside_window < plain.points_outside_window


def test_outside_points_do_not_disturb_the_fit():
    data = measure(MLCC, 41)
    valid = data.inside_window.copy()
    z = data.z.copy()
    z[-20:] *= 5.0  # garbage where the window is declared closed
    valid[-20:] = False
    result = fit_impedance(
        data.f, z, model="two-branch", rel_uncertainty=data.rel_uncertainty, valid=valid
    )
    assert result.quality.points_outside_window == 20
    check_landmarks(result, MLCC, keys=("c_low", "srf", "esr_at_srf"))


def test_json_object_is_plain_and_finite():
    data = measure(BEAD, 51)
    result = fit_impedance(data.f, data.z, rel_uncertainty=data.rel_uncertainty)
    obj = result.to_json()
    text = json.dumps(obj, allow_nan=False)
    back = json.loads(text)
    assert back["model"] == result.model
    assert set(back["elements"]) == set(result.elements)
    assert set(back["quality"]) >= {
        "rms_log_error",
        "max_abs_log_error",
        "points_used",
        "points_outside_window",
    }
    assert set(back["landmarks"]) == {"l_low", "r_dc", "srf", "z_at_srf", "c_par"}
    assert back["meets_quality"] is True


def test_quality_bound_flags_a_poor_fit():
    data = measure(BULK, 61)
    result = fit_impedance(data.f, data.z, model="series-rlc", quality_bound=0.01)
    assert not result.meets_quality
    assert any("quality bound" in w for w in result.warnings)


def test_model_of_the_wrong_kind_is_refused():
    data = measure(MLCC, 71)
    with pytest.raises(ModelMismatchError, match="capacitor") as info:
        fit_impedance(data.f, data.z, model="inductor")
    assert info.value.exit_code == 2
    data = measure(BEAD, 72)
    with pytest.raises(ModelMismatchError, match="inductor"):
        fit_impedance(data.f, data.z, model="two-branch")


def test_too_few_valid_points_is_a_fit_error():
    data = measure(MLCC, 81)
    valid = np.zeros(F.size, dtype=bool)
    valid[:5] = True
    with pytest.raises(FitError, match="at least"):
        fit_impedance(data.f, data.z, valid=valid)


@pytest.mark.parametrize(
    ("kwargs", "needle"),
    [
        ({"f": F[:10], "z": np.ones(11)}, "one length"),
        ({"f": F[::-1], "z": np.ones(F.size)}, "increase"),
        ({"f": F, "z": np.ones(F.size), "model": "spline"}, "unknown model"),
        ({"f": F, "z": np.ones(F.size), "rel_uncertainty": np.ones(3)}, "rel_uncertainty"),
    ],
)
def test_bad_input_is_an_input_error(kwargs, needle):
    f = kwargs.pop("f")
    z = kwargs.pop("z")
    with pytest.raises(InputError, match=needle):
        fit_impedance(f, z, **kwargs)


def test_nan_points_are_dropped_with_a_warning():
    data = measure(MLCC_SIMPLE, 91)
    z = data.z.copy()
    z[[10, 50, 90]] = np.nan
    result = fit_impedance(data.f, z, model="series-rlc")
    assert result.quality.points_used == F.size - 3
    assert any("missing" in w for w in result.warnings)


def test_fit_is_deterministic():
    data = measure(MLCC, 101)
    a = fit_impedance(data.f, data.z, rel_uncertainty=data.rel_uncertainty)
    b = fit_impedance(data.f, data.z, rel_uncertainty=data.rel_uncertainty)
    assert a.elements == b.elements
    assert a.model == b.model


def test_landmark_uncertainties_are_small_positive_and_follow_the_noise():
    quiet = measure(MLCC, 121, noise_floor_db=-130.0)
    noisy = measure(MLCC, 121, noise_floor_db=-100.0)
    a = fit_impedance(quiet.f, quiet.z, model="two-branch", rel_uncertainty=quiet.rel_uncertainty)
    b = fit_impedance(noisy.f, noisy.z, model="two-branch", rel_uncertainty=noisy.rel_uncertainty)
    for result in (a, b):
        assert set(result.landmark_uncertainties) == set(result.landmarks)
        for key, sigma in result.landmark_uncertainties.items():
            assert sigma is not None and 0 < sigma < 0.05 * result.landmarks[key], key
    assert b.landmark_uncertainties["esr_at_srf"] > a.landmark_uncertainties["esr_at_srf"]


def test_uncertainties_shrink_with_less_noise():
    quiet = measure(MLCC_SIMPLE, 111, noise_floor_db=-130.0)
    noisy = measure(MLCC_SIMPLE, 111, noise_floor_db=-100.0)
    a = fit_impedance(quiet.f, quiet.z, model="series-rlc", rel_uncertainty=quiet.rel_uncertainty)
    b = fit_impedance(noisy.f, noisy.z, model="series-rlc", rel_uncertainty=noisy.rel_uncertainty)
    assert a.uncertainties["R"] / a.elements["R"] < b.uncertainties["R"] / b.elements["R"]


def test_resonance_beyond_the_sweep_still_fits_and_says_so():
    f = np.logspace(2, 5, 151)  # a 22 µF part resonates near 2 MHz, far above 100 kHz
    part = Mlcc(name="MC22U", capacitance=22e-6, esl=0.45e-9, esr=3e-3)
    data = measure(part, 131, f=f)
    result = fit_impedance(data.f, data.z, rel_uncertainty=data.rel_uncertainty)
    assert result.kind == "capacitor"
    assert result.meets_quality
    # Every landmark the model defines is given; this one is the model's extrapolation.
    assert result.landmarks["srf"] is not None
    assert result.landmark_sources["srf"] == "model"
    assert result.landmark_sources["c_low"] == "data"
    assert result.landmarks["c_low"] == pytest.approx(
        landmarks_for("capacitor", f, part.impedance(f))["c_low"], rel=TOLERANCE["c_low"]
    )
    assert any("outside the sweep" in w for w in result.warnings)
    # The ESL is read above the resonance: beyond the sweep too, and said so.
    assert any("and esl are the model's extrapolation" in w for w in result.warnings)
