"""A capacitor swept only above its series resonance reads as an inductor: its reactance
at the bottom of the sweep falls short of an inductance's by ``1/(ωC)``, which
``bench.core.landmarks.series_capacitance_below`` finds and the fit reports.

The check values are the series R-L-C reactance ``X = ωL − 1/(ωC)`` (handbook formula,
docs/references.md §3) of invented parts; the inductors and the bead must give nothing,
whether swept from well below their parallel resonance or close to it.
"""

from __future__ import annotations

import numpy as np
import pytest

from bench.core.fit_result import ModelMismatchError
from bench.core.fitting import fit_impedance
from bench.core.landmarks import series_capacitance_below

NOISE = 2e-3


def noisy(z, seed: int):
    rng = np.random.default_rng(seed)
    return z * (1 + NOISE * (rng.normal(size=z.size) + 1j * rng.normal(size=z.size)))


def mlcc(f, c=22e-6, esl=0.5e-9, esr=3e-3):
    """An invented 22 µF MLCC: conductor loss rising as √f above 50 MHz, a dielectric
    loss tangent of 0.02 (series resonance 1.52 MHz)."""
    w = 2 * np.pi * f
    return esr * (1 + np.sqrt(f / 50e6)) + 1j * w * esl + 1 / (1j * w * c * (1 - 0.02j))


def inductor(f, inductance=1e-6, r_dc=8e-3, c_par=8e-12):
    """An invented 1 µH wound inductor: skin loss above 1 MHz, 8 pF across (parallel
    resonance 56 MHz)."""
    w = 2 * np.pi * f
    winding = r_dc * (1 + np.sqrt(f / 1e6)) + 1j * w * inductance
    return 1 / (1 / winding + 1j * w * c_par)


def bead(f):
    """An invented ferrite bead: permeability relaxing above 20 MHz (its inductance
    falls), 150 Ω of ferrite loss and 1 pF across."""
    w = 2 * np.pi * f
    ferrite = 1 / (1 / (1j * w * 1e-6 / (1 + 1j * f / 20e6)) + 1 / 150.0 + 1j * w * 1e-12)
    return 0.05 + ferrite


@pytest.mark.parametrize("start", [3e6, 5e6])
def test_a_capacitor_swept_above_resonance_shows_its_capacitance(start):
    f = np.geomspace(start, 1e9, 401)
    found = series_capacitance_below(f, noisy(mlcc(f), 3), np.full(f.size, NOISE))
    assert found is not None
    c, f_res = found
    # X = ωL − 1/(ωC) (docs/references.md §3): C and f_res = 1/(2π√(LC)) of the part, the
    # loss tangent of 0.02 moving the reactance by 0.02 %.
    assert c == pytest.approx(22e-6, rel=0.03)
    assert f_res == pytest.approx(1 / (2 * np.pi * np.sqrt(0.5e-9 * 22e-6)), rel=0.03)


@pytest.mark.parametrize(
    ("name", "part", "start"),
    [
        ("inductor from 10 kHz", inductor, 1e4),
        ("inductor from 1 MHz", inductor, 1e6),
        ("inductor from 20 MHz, near its resonance", inductor, 2e7),
        ("bead from 100 kHz", bead, 1e5),
        ("bead from 10 MHz", bead, 1e7),
    ],
)
def test_inductors_show_no_capacitance(name, part, start):
    f = np.geomspace(start, 1e9, 401)
    for seed in range(4):
        z = noisy(part(f), seed)
        assert series_capacitance_below(f, z, np.full(f.size, NOISE)) is None, (name, seed)


def test_the_fit_says_the_part_may_be_a_capacitor():
    f = np.geomspace(5e6, 1e9, 401)
    z = noisy(mlcc(f), 3)
    result = fit_impedance(f, z, rel_uncertainty=np.full(f.size, NOISE))
    note = [w for w in result.warnings if "may be a capacitor" in w]
    assert len(note) == 1
    assert "22 µF" in note[0] and "1.5 MHz" in note[0] and "sweep from below 151 kHz" in note[0]
    # Asked for a capacitor model, the refusal says why the data read as an inductor.
    with pytest.raises(ModelMismatchError, match=r"so it is an inductor .*about 22 µF in series"):
        fit_impedance(f, z, rel_uncertainty=np.full(f.size, NOISE), model="series-rlc")


def test_a_true_inductor_fit_says_nothing_of_a_capacitor():
    f = np.geomspace(1e4, 1e9, 401)
    result = fit_impedance(f, noisy(inductor(f), 1), rel_uncertainty=np.full(f.size, NOISE))
    assert not [w for w in result.warnings if "capacitor" in w]
