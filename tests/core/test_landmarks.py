"""Landmarks: exact on simple circuits, robust to noise, blind to points outside the window."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import brentq

from bench.core.landmarks import capacitor_landmarks, classify, inductor_landmarks
from bench.core.models import FAMILIES
from simulated_instruments.parts import BulkCapacitor, FerriteBead, Mlcc, PowerInductor

F = np.logspace(3, 9, 301)


def series_rlc(f, r, ind, c):
    w = 2 * np.pi * f
    return r + 1j * w * ind + 1 / (1j * w * c)


def noisy(z, rel, seed):
    rng = np.random.default_rng(seed)
    return z * (1 + rel * (rng.normal(size=z.size) + 1j * rng.normal(size=z.size)) / np.sqrt(2))


def test_series_rlc_landmarks_are_exact():
    # docs/references.md §3 [derived]: 10 µF / 0.5 nH / 5 mΩ -> f0 = 1/(2π√(LC)) = 2.2508 MHz,
    # |Z(f0)| = ESR; C = -1/(ωX) well below f0, L = X/ω well above.
    z = series_rlc(F, 5e-3, 0.5e-9, 10e-6)
    marks = capacitor_landmarks(F, z)
    assert marks["srf"] == pytest.approx(2.2508e6, rel=1e-4)
    assert marks["c_low"] == pytest.approx(10e-6, rel=1e-6)
    assert marks["esl"] == pytest.approx(0.5e-9, rel=1e-6)
    assert marks["esr_at_srf"] == pytest.approx(5e-3, rel=1e-6)


def test_parallel_resonance_landmarks_are_exact():
    # docs/references.md §3 [derived]: 1 µH with 10 pF -> SRF 50.33 MHz.
    values = {"Rdc": 10e-3, "L": 1e-6, "Rp": 5e3, "Cp": 10e-12}
    z = FAMILIES["inductor"].impedance(F, values)
    marks = inductor_landmarks(F, z)
    assert marks["srf"] == pytest.approx(50.33e6, rel=2e-4)
    assert marks["l_low"] == pytest.approx(1e-6, rel=1e-3)
    assert marks["r_dc"] == pytest.approx(10e-3, rel=1e-3)
    assert marks["c_par"] == pytest.approx(10e-12, rel=2e-3)
    # At resonance the tank is Rp in parallel with the winding's own Q·ωL ≈ 3.2 kΩ·Q.
    assert marks["z_at_srf"] == pytest.approx(np.max(np.abs(z)), rel=0.02)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_capacitor_landmarks_are_robust_to_noise(seed):
    part = Mlcc(capacitance=4.7e-6, esl=0.6e-9, esr=5e-3)
    z = part.impedance(F)
    clean = capacitor_landmarks(F, z)
    marks = capacitor_landmarks(F, noisy(z, 0.03, seed))
    # Noise of 3 % per point; bands of points keep each figure within a few per cent.
    assert marks["c_low"] == pytest.approx(clean["c_low"], rel=0.01)
    assert marks["esl"] == pytest.approx(clean["esl"], rel=0.02)
    assert marks["srf"] == pytest.approx(clean["srf"], rel=0.01)
    assert marks["esr_at_srf"] == pytest.approx(clean["esr_at_srf"], rel=0.1)


@pytest.mark.parametrize("seed", [4, 5, 6])
def test_inductor_landmarks_are_robust_to_noise(seed):
    part = FerriteBead(inductance=1.5e-6, resistance=700.0)
    z = part.impedance(F)
    clean = inductor_landmarks(F, z)
    marks = inductor_landmarks(F, noisy(z, 0.03, seed))
    for key, tol in {"l_low": 0.02, "r_dc": 0.03, "srf": 0.02, "z_at_srf": 0.05}.items():
        assert marks[key] == pytest.approx(clean[key], rel=tol), key


def test_points_outside_the_window_are_ignored():
    part = PowerInductor(inductance=2.2e-6)
    z = part.impedance(F)
    valid = np.abs(z) < 200.0  # a 50 Ω set-up's ceiling cuts the peak off
    garbage = z.copy()
    garbage[~valid] = 1e6 * np.exp(1j * np.linspace(-3, 3, np.count_nonzero(~valid)))
    clean = inductor_landmarks(F, z, valid)
    marks = inductor_landmarks(F, garbage, valid)
    assert marks == clean
    # The peak is outside: no resonance can be read from the measured points.
    assert marks["srf"] is None
    assert marks["z_at_srf"] is None
    assert marks["l_low"] == pytest.approx(2.2e-6, rel=0.01)


def test_resonance_beyond_the_sweep_is_none():
    f = np.logspace(2, 5, 100)
    marks = capacitor_landmarks(f, series_rlc(f, 5e-3, 1e-9, 10e-6))  # SRF 1.6 MHz
    assert marks["srf"] is None
    assert marks["esl"] is None
    assert marks["esr_at_srf"] is None
    assert marks["c_low"] == pytest.approx(10e-6, rel=1e-3)


def test_noise_spikes_near_resonance_do_not_make_false_crossings():
    z = series_rlc(F, 5e-3, 0.5e-9, 10e-6)
    spiky = z.copy()
    # An isolated sign flip of X below resonance, as noise at the floor might give.
    i = int(np.searchsorted(F, 1.5e6))
    spiky[i] = spiky[i].real - 1j * spiky[i].imag
    assert capacitor_landmarks(F, spiky)["srf"] == pytest.approx(2.2508e6, rel=2e-3)


def test_bulk_capacitor_landmarks():
    part = BulkCapacitor(capacitance=470e-6, line_resistance=40e-3, esr=6e-3, esl=3e-9)
    marks = capacitor_landmarks(F, part.impedance(F))
    # Low-frequency capacitance is the line's C; ESL the series L.
    assert marks["c_low"] == pytest.approx(470e-6, rel=0.02)
    assert marks["esl"] == pytest.approx(3e-9, rel=0.01)
    # The resonance is the zero of X, found here by root-finding on the true impedance;
    # the line's falling capacitance puts it above 1/(2π√(L·C)) = 134 kHz.
    f0 = brentq(lambda f: part.impedance(np.array([f]))[0].imag, 1e4, 1e7, xtol=1.0)
    assert f0 > 134e3
    assert marks["srf"] == pytest.approx(f0, rel=3e-3)


@pytest.mark.parametrize(
    ("part", "kind"),
    [
        (Mlcc(), "capacitor"),
        (BulkCapacitor(), "capacitor"),
        (PowerInductor(), "inductor"),
        (FerriteBead(), "inductor"),
    ],
)
def test_classify(part, kind):
    z = noisy(part.impedance(F), 0.02, 9)
    assert classify(F, z) == kind
