"""The chain corrected S21 -> Z -> fixture removal -> window."""

from __future__ import annotations

import numpy as np
import pytest

from bench.core.conversions import shunt_through_s21
from bench.core.fixture import Mount
from bench.core.impedance import impedance_from_shunt_through
from bench.core.window import inside_window, measurable_window

F = np.logspace(2, 8.3, 301)


def _capacitor(f: np.ndarray, c: float, l: float, r: float) -> np.ndarray:  # noqa: E741
    w = 2 * np.pi * f
    return r + 1j * w * l + 1 / (1j * w * c)


def test_recovers_the_part_after_mount_removal() -> None:
    part = _capacitor(F, 10e-6, 0.5e-9, 5e-3)
    mount = Mount(r=0.2e-3, l=150e-12)
    s21n = shunt_through_s21(part + mount.impedance(F), 50.0)
    data = impedance_from_shunt_through(F, s21n, mount_short=mount)
    np.testing.assert_allclose(data.z, part, rtol=1e-8)
    # The same with the short given as an array on the grid.
    data2 = impedance_from_shunt_through(F, s21n, mount_short=mount.impedance(F))
    np.testing.assert_allclose(data2.z, part, rtol=1e-8)
    np.testing.assert_allclose(data.z_measured, part + mount.impedance(F), rtol=1e-8)


def test_window_is_judged_on_the_measured_impedance() -> None:
    part = np.full(F.shape, 1.5e-3 + 0j)
    mount = np.full(F.shape, 2.0e-3 + 0j)
    data = impedance_from_shunt_through(F, shunt_through_s21(part + mount), mount_short=mount)
    w = measurable_window()
    # 1.5 mΩ alone is below the 2.5 mΩ floor, but the analyser sees 3.5 mΩ.
    assert not inside_window(1.5e-3, w)
    assert data.inside_window.all()
    assert data.points_outside_window == 0


def test_series_resistors_and_points_outside_window() -> None:
    part = _capacitor(F, 100e-9, 1e-9, 20e-3)
    s21n = shunt_through_s21(part, 50.0, 499.0)
    data = impedance_from_shunt_through(F, s21n, series_r=499.0)
    np.testing.assert_allclose(data.z, part, rtol=1e-8)
    assert data.window.ze == pytest.approx(549.0)
    # At 100 Hz a 100 nF part is 15.9 kΩ, above the 499 Ω set-up's ~2 kΩ ceiling.
    assert not data.inside_window[0]
    assert data.points_outside_window == int(np.count_nonzero(~data.inside_window)) > 0
    assert data.rel_uncertainty.shape == F.shape
    assert len(data) == F.size


def test_open_admittance_is_applied() -> None:
    part = _capacitor(F, 1e-6, 0.8e-9, 10e-3)
    zs = Mount(1e-3, 100e-12).impedance(F)
    yo = 1j * 2 * np.pi * F * 0.5e-12
    # docs/references.md §4 (derived): Zm = Zs + Zdut/(1 + Zdut·Yo) inverts the removal formula.
    zm = zs + part / (1 + part * yo)
    data = impedance_from_shunt_through(
        F, shunt_through_s21(zm), mount_short=zs, open_admittance=yo
    )
    np.testing.assert_allclose(data.z, part, rtol=1e-9)


def test_bad_shapes_and_order_are_refused() -> None:
    with pytest.raises(ValueError, match="same length"):
        impedance_from_shunt_through(F, np.ones(3))
    with pytest.raises(ValueError, match="increasing"):
        impedance_from_shunt_through(F[::-1], np.full(F.shape, 0.5 + 0j))
