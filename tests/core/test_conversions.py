"""Shunt-through, series-through and reflection conversions, checked against
scikit-rf's own network algebra and the worked values of docs/references.md §1."""

from __future__ import annotations

import numpy as np
import pytest
import skrf
from hypothesis import given
from hypothesis import strategies as st

from bench.core.conversions import (
    reflection_s11,
    reflection_z,
    series_through_s21,
    series_through_z,
    shunt_through_s21,
    shunt_through_z,
    through_normalise,
)

RNG = np.random.default_rng(20240611)
# Impedances over twelve decades, with every phase a passive part can have.
Z = 10.0 ** RNG.uniform(-4, 4, 64) * np.exp(1j * RNG.uniform(-np.pi / 2, np.pi / 2, 64))


def _s_from_abcd(abcd: np.ndarray, z0: float) -> np.ndarray:
    return skrf.network.a2s(abcd, z0)


def test_shunt_element_against_scikit_rf_abcd() -> None:
    # Source: scikit-rf network algebra (skrf.network.a2s) of a shunt admittance,
    # ABCD = [[1, 0], [1/Z, 1]] (published textbook two-port matrix).
    abcd = np.zeros((Z.size, 2, 2), complex)
    abcd[:, 0, 0] = 1.0
    abcd[:, 1, 0] = 1.0 / Z
    abcd[:, 1, 1] = 1.0
    s = _s_from_abcd(abcd, 50.0)
    s21 = shunt_through_s21(Z, 50.0)
    np.testing.assert_allclose(s[:, 1, 0], s21, rtol=1e-12, atol=1e-15)
    # Derived (docs/references.md §1): an ideal shunt element has S11 = S21 - 1.
    np.testing.assert_allclose(s[:, 0, 0], s21 - 1.0, rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(shunt_through_z(s[:, 1, 0], 50.0), Z, rtol=1e-9)


def test_series_element_against_scikit_rf_abcd() -> None:
    # Source: scikit-rf network algebra (skrf.network.a2s) of a series impedance,
    # ABCD = [[1, Z], [0, 1]].
    abcd = np.zeros((Z.size, 2, 2), complex)
    abcd[:, 0, 0] = 1.0
    abcd[:, 0, 1] = Z
    abcd[:, 1, 1] = 1.0
    s = _s_from_abcd(abcd, 50.0)
    np.testing.assert_allclose(s[:, 1, 0], series_through_s21(Z, 50.0), rtol=1e-12)
    np.testing.assert_allclose(series_through_z(s[:, 1, 0], 50.0), Z, rtol=1e-8)


def test_shunt_through_with_series_resistors_against_scikit_rf_cascade() -> None:
    # Source: scikit-rf cascade of series Rs, the shunt part, series Rs (ABCD product),
    # then divided by the same cascade without the part (the through with resistors).
    rs = 450.0
    series = np.array([[1.0, rs], [0.0, 1.0]], complex)
    n = Z.size
    shunt = np.zeros((n, 2, 2), complex)
    shunt[:, 0, 0] = shunt[:, 1, 1] = 1.0
    shunt[:, 1, 0] = 1.0 / Z
    dut = _s_from_abcd(series @ shunt @ series, 50.0)[:, 1, 0]
    thru = _s_from_abcd(np.broadcast_to(series @ series, (n, 2, 2)).copy(), 50.0)[:, 1, 0]
    # Derived (docs/references.md §1): the raw through falls to Z0/(Z0 + Rs) = 50/500 = 0.1.
    np.testing.assert_allclose(thru, 0.1, rtol=1e-12)
    s21n = through_normalise(dut, thru)
    np.testing.assert_allclose(s21n, shunt_through_s21(Z, 50.0, rs), rtol=1e-12)
    np.testing.assert_allclose(shunt_through_z(s21n, 50.0, rs), Z, rtol=1e-8)


@pytest.mark.parametrize(
    ("z", "s21", "db"),
    [
        # Derived (docs/references.md §1): S21 = 2Z/(2Z + 50).
        (1e-3, 3.99984e-5, -87.959),  # 2e-3/50.002
        (1.0, 0.0384615, -28.299),  # 2/52
        (25.0, 0.5, None),  # 50/100
        (250.0, 0.90909, -0.828),  # 500/550
    ],
)
def test_reference_check_values(z: float, s21: float, db: float | None) -> None:
    value = shunt_through_s21(z, 50.0)
    assert abs(value) == pytest.approx(s21, rel=2e-5)
    if db is not None:
        assert 20 * np.log10(abs(value)) == pytest.approx(db, abs=1e-3)
    assert shunt_through_z(value, 50.0) == pytest.approx(z, rel=1e-12)


def test_plain_25_ohm_approximation_is_low_by_3_85_percent() -> None:
    # Derived (docs/references.md §1): for 1 ohm, 25·S21 = 0.9615 ohm, 3.85 % low.
    s21 = shunt_through_s21(1.0, 50.0).real
    assert 25 * s21 == pytest.approx(0.9615, abs=1e-4)
    assert 1 - 25 * s21 == pytest.approx(0.0385, abs=1e-4)


def test_series_resistor_check_value() -> None:
    # Derived (docs/references.md §1): Rs = 450 ohm, S21n = 0.5 <->
    # Z = ((50+450)/2)·0.5/0.5 = 250 ohm.
    assert shunt_through_z(0.5, 50.0, 450.0) == pytest.approx(250.0, rel=1e-12)
    assert shunt_through_s21(250.0, 50.0, 450.0) == pytest.approx(0.5, rel=1e-12)


def test_noise_floor_of_minus_120_db_is_25_micro_ohm() -> None:
    # Derived (docs/references.md §1): S21 = 1e-6 (-120 dB) -> Z = 25·1e-6/(1 - 1e-6) = 25 µΩ.
    assert shunt_through_z(1e-6, 50.0).real == pytest.approx(25e-6, rel=1e-5)


def test_reflection_round_trip_and_known_points() -> None:
    np.testing.assert_allclose(reflection_z(reflection_s11(Z, 50.0), 50.0), Z, rtol=1e-8)
    # Common practice, no source: short -1, matched load 0, open +1.
    assert reflection_s11(0.0, 50.0) == pytest.approx(-1.0)
    assert reflection_s11(50.0, 50.0) == pytest.approx(0.0)
    assert reflection_s11(np.inf, 50.0) == pytest.approx(1.0)
    # Against scikit-rf's z2s for a one-port.
    np.testing.assert_allclose(
        skrf.network.z2s(Z.reshape(-1, 1, 1), 50.0)[:, 0, 0], reflection_s11(Z, 50.0), rtol=1e-12
    )


def test_singular_points_do_not_warn() -> None:
    # Warnings are errors in this suite, so these would fail if numpy warned.
    assert not np.isfinite(shunt_through_z(1.0 + 0j))
    assert not np.isfinite(series_through_z(0.0 + 0j))
    assert not np.isfinite(reflection_z(1.0 + 0j))


def test_vectorised_shapes_are_kept() -> None:
    s = shunt_through_s21(Z.reshape(8, 8), 50.0)
    assert s.shape == (8, 8)
    assert s.dtype == np.complex128


@pytest.mark.parametrize(("z0", "rs"), [(0.0, 0.0), (-50.0, 0.0), (50.0, -1.0), (np.nan, 0.0)])
def test_bad_reference_is_refused(z0: float, rs: float) -> None:
    with pytest.raises(ValueError, match=r"z0|series_r"):
        shunt_through_z(0.5, z0, rs)


def test_through_normalise_refuses_a_dead_through() -> None:
    with pytest.raises(ValueError, match="through"):
        through_normalise(np.ones(4), np.array([1, 0, 1, 1], complex))
    with pytest.raises(ValueError, match="same frequency grid"):
        through_normalise(np.ones(4), np.ones(5))


@given(
    log_mag=st.floats(min_value=-5, max_value=5),
    phase=st.floats(min_value=-np.pi / 2, max_value=np.pi / 2),
    rs=st.sampled_from([0.0, 10.0, 450.0, 499.0]),
)
def test_round_trips_for_any_passive_impedance(log_mag: float, phase: float, rs: float) -> None:
    z = 10.0**log_mag * np.exp(1j * phase)
    assert shunt_through_z(shunt_through_s21(z, 50.0, rs), 50.0, rs) == pytest.approx(z, rel=1e-7)
    assert series_through_z(series_through_s21(z, 50.0, rs), 50.0, rs) == pytest.approx(z, rel=1e-6)
    # A passive part never gives |S21n| > 1 in shunt-through (derived: |2Z| <= |2Z + Ze|
    # when Re Z >= 0).
    assert abs(shunt_through_s21(z, 50.0, rs)) <= 1.0 + 1e-12
