"""Mount-short and open removal, the fitted mount and the fitted open (docs/references.md §4)."""

from __future__ import annotations

import numpy as np
import pytest

from bench.core.conversions import shunt_through_s21, shunt_through_z
from bench.core.fixture import (
    Mount,
    MountOpen,
    OpenNotMeasurableError,
    fit_mount,
    fit_open,
    open_admittance_from_z,
    remove_fixture,
)
from bench.core.ground_loop import check_ground_loop, ground_loop_error
from bench.core.impedance import ImpedanceData, impedance_from_shunt_through

TWO_PI = 2 * np.pi


def test_handbook_compensation_check_at_10_mhz() -> None:
    # Derived from the mount's circuit, with its check values (docs/references.md §4):
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
    # Derived (docs/references.md §4): a 10 nF / 0.5 nH / 5 mΩ part on a 0.2 mΩ + 150 pH mount
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


# --- the open (empty) mount ------------------------------------------------------------


def _measured(z: np.ndarray, series_r: float, rng: np.random.Generator) -> ImpedanceData:
    """``z`` as a shunt-through set-up with ``series_r`` at each port measures it:
    0.01 dB-class multiplicative trace noise and a -99 dB floor on the through-normalised
    scale (a -120 dB analyser behind 499 ohm resistors), with the window's uncertainty."""
    n = z.size
    s = shunt_through_s21(z, 50.0, series_r)
    s = s * (1 + 1e-3 * (rng.normal(size=n) + 1j * rng.normal(size=n)) / np.sqrt(2))
    s = s + 10 ** (-99 / 20) * (rng.normal(size=n) + 1j * rng.normal(size=n)) / np.sqrt(2)
    return impedance_from_shunt_through(F_OPEN, s, series_r=series_r, noise_floor_db=-99.0)


F_OPEN = np.geomspace(1e3, 200e6, 201)
PADS = 0.27e-12
MOUNT = Mount(r=0.2e-3, l=120e-12)


def _empty_mount() -> np.ndarray:
    # The empty mount: its series pads and vias, then the pads' capacitance to ground.
    return MOUNT.impedance(F_OPEN) + 1 / (1j * TWO_PI * F_OPEN * PADS)


def test_fitted_open_recovers_the_pads_behind_series_resistors() -> None:
    # 0.27 pF is 2.9 kOhm at 200 MHz: with 499 ohm resistors (Ze = 549 ohm) the top two
    # octaves of the sweep reach it; the fit uses only those points.
    open_data = _measured(_empty_mount(), 499.0, np.random.default_rng(3))
    pads = fit_open(F_OPEN, open_data.z, rel_uncertainty=open_data.rel_uncertainty, z_short=MOUNT)
    assert pads.c == pytest.approx(PADS, rel=0.05)
    assert pads.c_sigma < 0.1 * PADS
    assert pads.g == 0.0, "no conductance the capture cannot tell from zero"
    assert 5 <= pads.points_used < F_OPEN.size // 2
    assert pads.f_max == pytest.approx(200e6) and pads.f_min > 10e6
    np.testing.assert_allclose(pads.admittance(F_OPEN), 1j * TWO_PI * F_OPEN * pads.c)


def test_fitted_open_finds_a_real_conductance() -> None:
    # 0.3 pF with 20 kOhm across it: G = 50 uS against wC = 377 uS at 200 MHz.
    f = np.geomspace(1e6, 200e6, 81)
    y = 1 / 20e3 + 1j * TWO_PI * f * 0.3e-12
    pads = fit_open(f, 1 / y, rel_uncertainty=np.full(f.size, 0.05))
    assert pads.g == pytest.approx(1 / 20e3, rel=1e-6)
    assert pads.c == pytest.approx(0.3e-12, rel=1e-6)


def test_open_out_of_reach_of_a_plain_50_ohm_set_up() -> None:
    # Without resistors the window ends near 190 ohm (docs/references.md §1, derived): a
    # 0.27 pF open is at best ~120 % uncertain per point, so it is not used at all.
    open_data = _measured(_empty_mount(), 0.0, np.random.default_rng(4))
    with pytest.raises(OpenNotMeasurableError, match="out of this set-up's reach"):
        fit_open(F_OPEN, open_data.z, rel_uncertainty=open_data.rel_uncertainty)


def test_open_capture_with_the_strap_left_in_is_refused() -> None:
    # A strap left in the mount: the "open" is the short again, which is well inside
    # the window but is no capacitance.
    strapped = _measured(MOUNT.impedance(F_OPEN) + 20e-6, 499.0, np.random.default_rng(5))
    with pytest.raises(ValueError, match="does not look like an empty mount"):
        fit_open(F_OPEN, strapped.z, rel_uncertainty=strapped.rel_uncertainty)


def test_open_removal_restores_an_inductor_on_a_simulated_mount() -> None:
    # Derived from docs/references.md §4: the mount presents Zs + (Zdut ‖ Yo), so
    # (Zm − Zs)/(1 − (Zm − Zs)·Yo) returns Zdut. A 470 nH / 1.7 pF inductor has its
    # parallel resonance at 1/(2π·sqrt(470n·1.7p)) = 178.0 MHz; with 0.27 pF of pads
    # across it, 1/(2π·sqrt(470n·1.97p)) = 165.4 MHz (7 % low).
    rng = np.random.default_rng(6)
    f = F_OPEN
    w = TWO_PI * f
    part = 1 / (1 / (0.05 + 1j * w * 470e-9) + 1j * w * 1.7e-12 + 1 / 3e3)
    mounted = MOUNT.impedance(f) + 1 / (1 / part + 1j * w * PADS)
    open_data = _measured(_empty_mount(), 499.0, rng)
    pads = fit_open(f, open_data.z, rel_uncertainty=open_data.rel_uncertainty, z_short=MOUNT)
    sample = _measured(mounted, 499.0, rng)

    def peak(z: np.ndarray) -> float:
        # The parallel resonance: where the reactance turns from inductive to capacitive.
        k = int(np.nonzero(np.diff(np.sign(z.imag)) < 0)[0][-1])
        return float(f[k] - z.imag[k] * (f[k + 1] - f[k]) / (z.imag[k + 1] - z.imag[k]))

    assert 1 / (TWO_PI * np.sqrt(470e-9 * 1.7e-12)) / 1e6 == pytest.approx(178.0, abs=0.1)
    short_only = remove_fixture(sample.z, MOUNT, f=f)
    assert peak(short_only) / 1e6 == pytest.approx(165.4, rel=0.02)
    both = remove_fixture(sample.z, MOUNT, pads.admittance(f), f=f)
    assert peak(both) / 1e6 == pytest.approx(178.0, rel=0.01)
    assert peak(part) / 1e6 == pytest.approx(178.0, rel=0.005)


def test_handbook_check_with_a_fitted_open() -> None:
    # docs/references.md §4 check (10 MHz; Zs = 1 mΩ + 100 pH; Yo = 0.5 pF) with the open given
    # as a MountOpen of 0.5 pF: the formula recovers the DUT to ~1e-13.
    f = np.array([10e6])
    zs = Mount(r=1e-3, l=100e-12)
    pads = MountOpen(c=0.5e-12)
    dut = 0.01 + 0.0125664j
    zm = zs.impedance(f) + dut / (1 + dut * pads.admittance(f))
    assert zm[0].real == pytest.approx(0.0110000079, abs=1e-10)
    assert zm[0].imag == pytest.approx(0.0188495577, abs=1e-6)
    assert abs(remove_fixture(zm, zs, pads.admittance(f), f=f)[0] - dut) < 1e-13
