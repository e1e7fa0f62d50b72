"""Mount-short and open removal, and the fitted mount, against REFERENCES §4."""

from __future__ import annotations

import numpy as np
import pytest

from bench.core.conversions import shunt_through_s21, shunt_through_z
from bench.core.fixture import Mount, fit_mount, open_admittance_from_z, remove_fixture
from bench.core.ground_loop import check_ground_loop, ground_loop_error

TWO_PI = 2 * np.pi


def test_handbook_compensation_check_at_10_mhz() -> None:
    # Published in impedance-measurement handbooks, check values derived (REFERENCES §4):
    # 10 MHz, Zs = 1 mΩ + 100 pH, Yo = 0.5 pF, DUT = 0.01 + j0.0125664 Ω gives
    # Zm = 0.0110000079 + j0.0188495577, and the formula recovers the DUT to ~1e-13.
    f = 10e6
    zs = 1e-3 + 1j * TWO_PI * f * 100e-12
    yo = 1j * TWO_PI * f * 0.5e-12
    dut = 0.01 + 0.0125664j
    zm = zs + dut / (1 + dut * yo)
    assert zm.real == pytest.approx(0.0110000079, abs=1e-10)
    assert zm.imag == pytest.approx(0.0188495577, abs=1e-6)
    recovered = remove_fixture(np.array([zm]), np.array([zs]), np.array([yo]))[0]
    assert abs(recovered - dut) < 1e-13


def _zero_crossing(f: np.ndarray, x: np.ndarray) -> float:
    k = int(np.nonzero(np.diff(np.sign(x)) > 0)[0][0])
    # Linear interpolation of the reactance between the two points around zero.
    return float(f[k] - x[k] * (f[k + 1] - f[k]) / (x[k + 1] - x[k]))


def test_apparent_srf_of_a_capacitor_on_its_mount() -> None:
    # Derived (REFERENCES §4): a 10 nF / 0.5 nH / 5 mΩ part on a 0.2 mΩ + 150 pH mount
    # shows 1/(2π·sqrt(0.65 nH·10 nF)) = 62.43 MHz; the part alone 1/(2π·sqrt(0.5n·10n))
    # = 71.18 MHz.
    f = np.linspace(50e6, 90e6, 40001)
    w = TWO_PI * f
    part = 5e-3 + 1j * w * 0.5e-9 + 1 / (1j * w * 10e-9)
    mount = Mount(r=0.2e-3, l=150e-12)
    zm = shunt_through_z(shunt_through_s21(part + mount.impedance(f)))
    assert _zero_crossing(f, zm.imag) / 1e6 == pytest.approx(62.43, abs=0.01)
    cleaned = remove_fixture(zm, mount, f=f)
    assert _zero_crossing(f, cleaned.imag) / 1e6 == pytest.approx(71.18, abs=0.01)


def test_fit_mount_is_robust_to_noise_and_outliers() -> None:
    rng = np.random.default_rng(11)
    f = np.logspace(2, 8.3, 401)
    truth = Mount(r=0.2e-3, l=150e-12)
    z = truth.impedance(f)
    # Noise of a -110 dB floor, and a few points hit by a burst of interference.
    noise = 10 ** (-110 / 20) * (rng.normal(size=f.size) + 1j * rng.normal(size=f.size))
    z = shunt_through_z(shunt_through_s21(z) + noise / np.sqrt(2))
    hit = rng.choice(f.size, 12, replace=False)
    z[hit] += 5e-3 * (1 + 1j)
    m = fit_mount(f, z)
    assert m.l == pytest.approx(150e-12, rel=0.02)
    assert m.r == pytest.approx(0.2e-3, rel=0.05)


def test_fit_mount_above_a_ground_loop() -> None:
    f = np.logspace(2, 8.3, 401)
    truth = Mount(r=0.2e-3, l=150e-12)
    # A cable-shield loop lifts a third of the band; the ground-loop check tells the
    # caller where the short is clean, and the fit uses only those points.
    z = truth.impedance(f) + ground_loop_error(f, 13e-3, 2e3)
    check = check_ground_loop(f, z)
    assert check.detected
    m = fit_mount(f, z, valid=f >= check.valid_above_hz)
    assert m.r == pytest.approx(0.2e-3, rel=0.05)
    assert m.l == pytest.approx(150e-12, rel=0.01)


def test_fit_mount_refuses_too_few_points() -> None:
    f = np.logspace(3, 6, 10)
    with pytest.raises(ValueError, match="at least 3"):
        fit_mount(f, Mount(1e-3, 1e-10).impedance(f), valid=f > 5e5)


def test_remove_fixture_without_open_is_a_subtraction() -> None:
    f = np.logspace(3, 8, 20)
    zm = 0.01 + 1j * TWO_PI * f * 1e-9
    zs = Mount(1e-3, 200e-12)
    np.testing.assert_allclose(remove_fixture(zm, zs, f=f), zm - zs.impedance(f), rtol=1e-14)
    with pytest.raises(ValueError, match="needs the frequencies"):
        remove_fixture(zm, zs)
    with pytest.raises(ValueError, match="same frequency grid"):
        remove_fixture(zm, np.ones(3))


def test_open_admittance_from_an_open_capture() -> None:
    f = np.logspace(5, 8, 5)
    z_open = 1 / (1j * TWO_PI * f * 0.3e-12)
    np.testing.assert_allclose(open_admittance_from_z(z_open), 1j * TWO_PI * f * 0.3e-12)
