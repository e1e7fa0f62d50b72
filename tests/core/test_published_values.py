"""zbench's models, parts and landmarks against the worked values of docs/references.md §3.

Each check names its source and tag as the references list gives it.
"""

from __future__ import annotations

import numpy as np
import pytest

from bench.core.landmarks import capacitor_landmarks, inductor_landmarks
from bench.core.models import FAMILIES
from simulated_instruments.parts import de_levie_line

MU0 = 4e-7 * np.pi
RHO_COPPER = 1.72e-8  # Ω·m, docs/references.md §3


def test_series_rlc_resonance_and_reactances():
    # docs/references.md §3 [derived]: 10 µF / 0.5 nH / 5 mΩ -> f0 = 2.2508 MHz,
    # X(1 kHz) = -15.9155 Ω, X(100 MHz) = 0.31400 Ω; |Z(f0)| = ESR.
    # Arithmetic: X = ωL - 1/(ωC); at 1 kHz 3.14e-6 - 15.9155 = -15.9155 Ω;
    # at 100 MHz 0.314159 - 0.000159 = 0.314000 Ω.
    values = {"R": 5e-3, "L": 0.5e-9, "C": 10e-6}
    family = FAMILIES["series-rlc"]
    z = family.impedance(np.array([1e3, 100e6, 2.2508e6]), values)
    assert z[0].imag == pytest.approx(-15.9155, abs=5e-5)
    assert z[1].imag == pytest.approx(0.31400, abs=5e-6)
    assert abs(z[2]) == pytest.approx(5e-3, rel=1e-3)
    f = np.logspace(4, 9, 401)
    assert capacitor_landmarks(f, family.impedance(f, values))["srf"] == pytest.approx(
        2.2508e6, rel=1e-4
    )


def test_small_capacitor_resonance():
    # docs/references.md §3 [derived]: 100 nF / 0.4 nH -> f0 = 25.16 MHz.
    f = np.logspace(5, 9, 401)
    z = FAMILIES["series-rlc"].impedance(f, {"R": 10e-3, "L": 0.4e-9, "C": 100e-9})
    assert capacitor_landmarks(f, z)["srf"] == pytest.approx(25.16e6, rel=2e-4)


def test_mlcc_near_50_mhz_implies_about_one_nanohenry():
    # docs/references.md §3 [published, via summary]: a 0.01 µF surface-mount part resonates near
    # 50 MHz (Ott 2009); [derived] L = 1/((2π·50 MHz)²·10 nF) = 1.013 nH.
    f = np.logspace(6, 9, 301)
    z = FAMILIES["series-rlc"].impedance(f, {"R": 50e-3, "L": 1.013e-9, "C": 10e-9})
    marks = capacitor_landmarks(f, z)
    assert marks["srf"] == pytest.approx(50e6, rel=2e-3)
    esl = 1 / ((2 * np.pi * marks["srf"]) ** 2 * marks["c_low"])
    assert esl == pytest.approx(1.01e-9, rel=5e-3)
    assert marks["esl"] == pytest.approx(1.01e-9, rel=5e-3)


def test_de_levie_line_limits_and_check_values():
    # docs/references.md §3 [derived]: porous-electrode line, low-frequency Re Z -> R/3, phase
    # -> -45° at high frequency. R = 0.3 Ω, C = 100 µF: ωRC = 1e-3 -> Re Z = 0.100000 Ω;
    # ωRC = 1 -> Re Z = 0.09937 Ω, Ceff = 97.85 µF; ωRC = 100 -> Re Z = 0.02121 Ω,
    # Ceff = 14.14 µF, phase -45.00°.
    r, c = 0.3, 100e-6
    wrc = np.array([1e-3, 1.0, 100.0])
    f = wrc / (2 * np.pi * r * c)
    z = de_levie_line(f, r, c)
    ceff = -1 / (2 * np.pi * f * z.imag)
    assert z.real[0] == pytest.approx(r / 3, rel=1e-5)
    assert z.real == pytest.approx([0.100000, 0.09937, 0.02121], rel=2e-4)
    assert ceff[1] == pytest.approx(97.85e-6, rel=2e-4)
    assert ceff[2] == pytest.approx(14.14e-6, rel=2e-4)
    assert np.degrees(np.angle(z[2])) == pytest.approx(-45.00, abs=0.01)


def test_ladder_sections_reproduce_the_de_levie_line():
    # [derived] partial fractions of coth: sqrt(R/(jωC))·coth(sqrt(jωRC)) =
    # 1/(jωC) + Σ_k 2R/(k²π² + jωRC), i.e. sections R_k = 2R/(k²π²) ‖ C_k = C/2.
    # Five sections leave the tail Σ_{k>5} 2R/(k²π²) = 2R/π²·(π²/6 - 1.4636) = 0.0363·R
    # at DC; the ladder's series R takes that tail, so the low-frequency match is close.
    r, c = 0.3, 100e-6
    values = {"R": 0.0, "L": 1e-18, "C": c}
    for k in range(1, 6):
        values[f"R{k}"] = 2 * r / (k**2 * np.pi**2)
        values[f"C{k}"] = c / 2
    tail = 2 * r / np.pi**2 * (np.pi**2 / 6 - sum(1 / k**2 for k in range(1, 6)))
    values["R"] = tail
    f = np.array([1e-3, 1e-1, 1.0]) / (2 * np.pi * r * c)
    ladder = FAMILIES["ladder"].impedance(f, values)
    line = de_levie_line(f, r, c)
    assert ladder.real[0] == pytest.approx(r / 3, rel=1e-4)
    np.testing.assert_allclose(ladder, line, rtol=2e-3)


def test_parallel_resonance_1uh_10pf():
    # docs/references.md §3 [derived]: 1 µH with 10 pF -> SRF 50.33 MHz.
    f = np.logspace(6, 9, 401)
    values = {"Rdc": 1e-3, "L": 1e-6, "Rp": 1e6, "Cp": 10e-12}
    marks = inductor_landmarks(f, FAMILIES["inductor"].impedance(f, values))
    assert marks["srf"] == pytest.approx(50.33e6, rel=2e-4)


def test_bead_check_values():
    # Invented element values, derived by hand (docs/references.md §3 [derived]):
    # L = 15 µH, C = 1.2 pF, R = 1.3 kΩ in parallel -> f0 = 1/(2π√(LC)) = 37.51 MHz,
    # |Z|max = R = 1300 Ω resistive; Y = 1/R + j(ωC − 1/(ωL)) gives |Z(10 MHz)| = 799.8 Ω
    # (R 492.1, X +630.5) and |Z(100 MHz)| = 994.3 Ω (X −640.5).
    values = {"Rdc": 1e-9, "L": 15e-6, "R": 1300.0, "C": 1.2e-12, "Rc": 1e-9}
    family = FAMILIES["bead"]
    z = family.impedance(np.array([10e6, 100e6]), values)
    assert abs(z[0]) == pytest.approx(799.8, rel=1e-4)
    assert z[0].real == pytest.approx(492.1, rel=1e-4)
    assert z[0].imag == pytest.approx(630.5, rel=1e-4)
    assert abs(z[1]) == pytest.approx(994.3, rel=1e-4)
    assert z[1].imag == pytest.approx(-640.5, rel=1e-4)
    f = np.logspace(6, 9, 401)
    marks = inductor_landmarks(f, family.impedance(f, values))
    assert marks["srf"] == pytest.approx(37.51e6, rel=1e-3)
    assert marks["z_at_srf"] == pytest.approx(1300.0, rel=1e-3)


@pytest.mark.parametrize(("f", "delta_um"), [(1e6, 66.0), (100e3, 208.7), (10e6, 20.9)])
def test_copper_skin_depth(f, delta_um):
    # docs/references.md §3 [derived]: δ = √(ρ/(π f μ0)), ρ = 1.72e-8 Ω·m -> 66.0 µm at 1 MHz,
    # 208.7 µm at 100 kHz, 20.9 µm at 10 MHz. The parts' skin terms grow as √f, as
    # R ∝ 1/δ does.
    delta = np.sqrt(RHO_COPPER / (np.pi * f * MU0))
    assert delta * 1e6 == pytest.approx(delta_um, rel=2e-3)


def test_skin_resistance_scales_as_inverse_skin_depth():
    # R ∝ 1/δ ∝ √f above the corner (docs/references.md §3, derived from the skin depth):
    # the inductor family's R-L section does the same only approximately, the true part
    # exactly: Re sqrt(1 + j f/fc) -> sqrt(f/(2 fc)).
    from simulated_instruments.parts import PowerInductor

    part = PowerInductor(
        r_dc=1e-2, skin_corner=1e3, winding_capacitance=1e-18, core_loss_resistance=1e15
    )
    f = np.array([100e3, 10e6])
    ratio = part.impedance(f).real[1] / part.impedance(f).real[0]
    d1, d2 = (np.sqrt(RHO_COPPER / (np.pi * fi * MU0)) for fi in f)
    assert ratio == pytest.approx(d1 / d2, rel=0.01)
