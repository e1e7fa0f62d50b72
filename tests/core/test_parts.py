"""The simulator's true parts: physics limits, published check values, YAML reading, spread."""

from __future__ import annotations

import numpy as np
import pytest

from simulated_instruments.parts import (
    DEFAULT_SPREAD,
    BulkCapacitor,
    FerriteBead,
    Mlcc,
    PartError,
    PowerInductor,
    de_levie_line,
    part_from_dict,
    with_spread,
)

F = np.logspace(2, 9, 301)
ALL_PARTS = [
    Mlcc(),
    Mlcc(dielectric="C0G", capacitance=10e-9, mode_c_ratio=0.0),
    BulkCapacitor(),
    BulkCapacitor(technology="electrolytic", capacitance=1e-3, line_resistance=0.2),
    PowerInductor(),
    FerriteBead(),
    FerriteBead(inductance2=0.4e-6, resistance2=150.0),
]


@pytest.mark.parametrize("part", ALL_PARTS, ids=lambda p: type(p).__name__)
def test_parts_are_passive_and_finite(part):
    z = part.impedance(F)
    assert z.shape == F.shape
    assert np.all(np.isfinite(z))
    # A passive one-port has Re Z >= 0 at every frequency.
    assert np.all(z.real > 0)


def test_mlcc_dc_bias_matches_published_0805_point():
    # docs/references.md §5 [published]: a 4.7 µF 16 V X7R 0805 keeps 1.5 µF at 12 V (EE Times
    # 2012). [derived] heuristic C0/(1+(V/V50)^2) with V50 = 8.22 V: 4.7/(1+(12/8.22)^2) = 1.501 µF.
    part = Mlcc(capacitance=4.7e-6, dielectric="X7R", rated_voltage=16.0)
    assert part.capacitance_at(12.0) == pytest.approx(1.5e-6, rel=0.01)
    assert part.capacitance_at(0.0) == pytest.approx(4.7e-6)
    # Class I dielectric: no DC-bias dependence.
    c0g = Mlcc(capacitance=1e-9, dielectric="C0G", rated_voltage=50.0)
    assert c0g.capacitance_at(40.0) == c0g.capacitance


def test_mlcc_bias_lowers_low_frequency_capacitance():
    part = Mlcc(capacitance=10e-6, dielectric="X5R", rated_voltage=6.3)
    f = np.array([1e3])
    c0 = -1 / (2 * np.pi * f * part.impedance(f, 0.0).imag)
    c4 = -1 / (2 * np.pi * f * part.impedance(f, 4.0).imag)
    assert c4[0] < 0.8 * c0[0]
    assert c4[0] == pytest.approx(1.003 * part.capacitance_at(4.0), rel=0.01)  # + weak mode


def test_simple_mlcc_is_a_series_rlc_at_resonance():
    # docs/references.md §3 [derived]: f0 = 1/(2π√(LC)); 10 µF / 0.5 nH -> 2.2508 MHz.
    part = Mlcc(
        capacitance=10e-6,
        esl=0.5e-9,
        esr=5e-3,
        mode_c_ratio=0.0,
        loss_tangent=0.0,
        skin_corner=1e12,
        dielectric="C0G",
    )
    f = np.array([2.2508e6])
    z = part.impedance(f)
    assert abs(z[0].imag) < 1e-3 * 5e-3 * 10
    assert z[0].real == pytest.approx(5e-3, rel=1e-3)


def test_de_levie_line_check_values():
    # docs/references.md §3 [derived] for R = 0.3 Ω, C = 100 µF (RC = 30 µs):
    # ωRC = 1e-3 -> Re Z = 0.100000 (R/3); ωRC = 1 -> Re Z = 0.09937, Ceff = 97.85 µF;
    # ωRC = 100 -> Re Z = 0.02121, Ceff = 14.14 µF, phase -45.00°.
    r, c = 0.3, 100e-6
    f = np.array([1e-3, 1.0, 100.0]) / (2 * np.pi * r * c)
    z = de_levie_line(f, r, c)
    ceff = -1 / (2 * np.pi * f * z.imag)
    assert z.real == pytest.approx([0.100000, 0.09937, 0.02121], rel=2e-4)
    assert ceff[1:] == pytest.approx([97.85e-6, 14.14e-6], rel=2e-4)
    assert np.degrees(np.angle(z[2])) == pytest.approx(-45.00, abs=0.01)


def test_bulk_capacitor_low_frequency_resistance_is_esr_plus_third_of_line():
    part = BulkCapacitor(esr=8e-3, line_resistance=30e-3, leakage_resistance=1e12)
    z = part.impedance(np.array([10.0]))
    # de Levie low-frequency limit R/3 (docs/references.md §3, derived): 8 mΩ + 30/3 mΩ = 18 mΩ.
    assert z[0].real == pytest.approx(18e-3, rel=1e-3)


def test_inductor_parallel_resonance_near_lc():
    part = PowerInductor(inductance=1e-6, winding_capacitance=10e-12, core_loss_resistance=1e5)
    f = np.linspace(45e6, 55e6, 20001)
    z = part.impedance(f)
    f_peak = f[np.argmax(np.abs(z))]
    # docs/references.md §3 [derived]: 1 µH with 10 pF -> 50.33 MHz; losses move it slightly.
    assert f_peak == pytest.approx(50.33e6, rel=0.01)


def test_inductor_skin_effect_raises_resistance_as_sqrt_f():
    # Negligible winding capacitance and core loss, so Re Z is the winding resistance.
    part = PowerInductor(
        r_dc=10e-3, skin_corner=10e3, winding_capacitance=1e-18, core_loss_resistance=1e15
    )
    z = part.impedance(np.array([1.0, 1e6, 4e6]))
    assert z[0].real == pytest.approx(10e-3, rel=1e-6)
    # Skin effect (docs/references.md §3: δ ∝ 1/√f): quadrupling f far above the corner doubles R.
    assert z[2].real / z[1].real == pytest.approx(2.0, rel=1e-2)


def test_bead_matches_derived_values_without_extra_loss():
    # Invented element values, derived by hand (docs/references.md §3 [derived]):
    # L = 15 µH, C = 1.2 pF, R = 1.3 kΩ in parallel, Y = 1/R + j(ωC − 1/(ωL)).
    # 10 MHz: Y = 7.692e-4 − j9.856e-4 S -> Z = 492.1 + j630.5 Ω, |Z| = 799.8 Ω;
    # 100 MHz: Y = 7.692e-4 + j6.479e-4 S -> Z = 760.5 − j640.5 Ω, |Z| = 994.3 Ω.
    bead = FerriteBead(
        r_dc=1e-9, inductance=15e-6, resistance=1300.0, capacitance=1.2e-12, loss_exponent=0.0
    )
    z = bead.impedance(np.array([10e6, 100e6]))
    assert abs(z[0]) == pytest.approx(799.8, rel=1e-3)
    assert z[0].real == pytest.approx(492.1, rel=1e-3)
    assert z[0].imag == pytest.approx(630.5, rel=1e-3)
    assert abs(z[1]) == pytest.approx(994.3, rel=1e-3)
    assert z[1].imag == pytest.approx(-640.5, rel=1e-3)


def test_part_from_dict_reads_si_strings():
    part = part_from_dict(
        {
            "type": "mlcc",
            "name": "MC22",
            "capacitance": "22u",
            "esl": "0.4 nH",
            "esr": "3m",
            "rated_voltage": "6.3 V",
            "dielectric": "X5R",
        }
    )
    assert isinstance(part, Mlcc)
    assert part.capacitance == pytest.approx(22e-6)
    assert part.esl == pytest.approx(0.4e-9)
    assert part.esr == pytest.approx(3e-3)
    bead = part_from_dict({"type": "bead", "inductance": "1.5u", "resistance": "800"})
    assert isinstance(bead, FerriteBead)
    assert bead.resistance == 800.0
    assert isinstance(part_from_dict({"type": "bulk", "capacitance": "470u"}), BulkCapacitor)
    assert isinstance(part_from_dict({"type": "inductor", "inductance": 1e-6}), PowerInductor)


@pytest.mark.parametrize(
    ("spec", "needle"),
    [
        ({"type": "resistor"}, "part type"),
        ({"type": "mlcc", "capacitence": "1u"}, "capacitence"),
        ({"type": "mlcc", "capacitance": "1 V"}, "capacitance"),
        ({"type": "mlcc", "esr": -1.0}, "esr"),
        ({"type": "mlcc", "dielectric": "Y5V"}, "dielectric"),
        ({"type": "bead", "inductance2": "1u"}, "resistance2"),
    ],
)
def test_part_from_dict_errors_name_the_key(spec, needle):
    with pytest.raises(PartError, match=needle):
        part_from_dict(spec)


def test_with_spread_is_seeded_and_positive():
    base = Mlcc()
    a = [with_spread(base, np.random.default_rng(7), DEFAULT_SPREAD["mlcc"]) for _ in range(2)]
    assert a[0] == a[1]
    rng = np.random.default_rng(3)
    lot = [with_spread(base, rng, {"capacitance": "5%", "esr": 0.1}) for _ in range(200)]
    caps = np.array([p.capacitance for p in lot])
    assert np.all(caps > 0)
    assert np.std(np.log(caps)) == pytest.approx(0.05, rel=0.2)
    assert all(p.esl == base.esl for p in lot)
    with pytest.raises(PartError, match="dielectric"):
        with_spread(base, rng, {"dielectric": 0.1})


def test_negative_frequency_rejected():
    with pytest.raises(PartError, match="frequencies"):
        Mlcc().impedance(np.array([0.0, 1e3]))
