"""The three measuring methods: windows, per-point uncertainty and the impedance chain.

Published and derived check values are those of docs/references.md §9 (series-through
and reflection) and §1 (shunt-through).
"""

from __future__ import annotations

import numpy as np
import pytest
import skrf

from bench.core.conversions import (
    reflection_s11,
    reflection_z,
    series_through_s21,
    series_through_z,
)
from bench.core.impedance import (
    estimate_scatter,
    impedance_as_given,
    impedance_from_reflection,
    impedance_from_series_through,
    impedance_from_shunt_through,
)
from bench.core.window import (
    METHODS,
    inside_window,
    measurable_window,
    relative_uncertainty,
)
from bench.errors import InputError


def test_series_through_floor_and_ceiling_match_the_published_derivation() -> None:
    # docs/references.md §9 [derived]: ε = 0.1 dB (1.16 %), 10 % target -> floor
    # 2·Z0·ε/(0.1 − ε) ≈ 13 Ω; additive floor 1e-5 -> ceiling ≈ 2·Z0·0.1/n = 1 MΩ.
    w = measurable_window(method="series-through", trace_noise_db=0.0, through_drift_db=0.1)
    eps = 10 ** (0.1 / 20) - 1
    assert w.z_min == pytest.approx(100 * eps / (0.1 - eps), rel=1e-6)
    assert w.z_min == pytest.approx(13.2, rel=0.01)
    assert w.z_max == pytest.approx(1e6, rel=0.02)


def test_reflection_window_matches_the_published_derivation() -> None:
    # docs/references.md §9 [derived]: |dΓ| = 0.005, 10 % -> Z/Z0 + Z0/Z <= 38,
    # i.e. about 1.3 Ω to 1.9 kΩ at 50 Ω; best at Z = Z0 with dZ/Z = 2·dΓ.
    w = measurable_window(method="reflection", trace_noise_db=0.0, noise_floor_db=-140.0)
    x_hi = (38 + np.sqrt(38**2 - 4)) / 2
    assert w.z_min == pytest.approx(50 / x_hi, rel=1e-4)
    assert w.z_max == pytest.approx(50 * x_hi, rel=1e-4)
    assert (round(w.z_min, 1), round(w.z_max, -2)) == (1.3, 1900.0)
    assert w.z_best == pytest.approx(50.0, rel=1e-4)
    assert w.best_uncertainty == pytest.approx(0.01, rel=1e-4)


def test_ranges_follow_common_practice() -> None:
    # Common practice, no source beyond docs/references.md §9's remark: shunt-through
    # for the lowest impedances, reflection near Z0, series-through for the highest.
    shunt, series, refl = (measurable_window(method=m) for m in METHODS)
    assert shunt.z_min < refl.z_min < series.z_min
    assert shunt.z_max < refl.z_max < series.z_max
    assert refl.z_min < 50.0 < refl.z_max and refl.z_best == pytest.approx(50.0, rel=1e-3)


@pytest.mark.parametrize("method", ["shunt-through", "series-through"])
def test_two_port_uncertainty_matches_a_seeded_noise_experiment(method: str) -> None:
    # Additive complex noise of RMS N and a complex gain error of RMS ε on S21n, as the
    # window model states; the scatter of Z must equal the predicted uncertainty.
    rng = np.random.default_rng(11)
    w = measurable_window(
        method=method, noise_floor_db=-80.0, trace_noise_db=0.05, through_drift_db=0.0
    )
    n = 40000
    to_s, to_z = {
        "shunt-through": (
            lambda z: 2 * z / (2 * z + 50.0),
            lambda s: 25.0 * s / (1 - s),
        ),
        "series-through": (series_through_s21, series_through_z),
    }[method]
    for z_true in (w.z_min, w.z_best, w.z_max):
        s = to_s(z_true)
        noise = w.noise_floor * (rng.normal(size=n) + 1j * rng.normal(size=n)) / np.sqrt(2)
        gain = 1 + w.multiplicative_error * (rng.normal(size=n) + 1j * rng.normal(size=n)) / 2**0.5
        z = to_z(s * gain + noise)
        scatter = np.sqrt(np.mean(np.abs(z - z_true) ** 2)) / z_true
        assert scatter == pytest.approx(float(relative_uncertainty(z_true, w)), rel=0.05)


def test_reflection_uncertainty_matches_a_seeded_noise_experiment() -> None:
    rng = np.random.default_rng(12)
    w = measurable_window(method="reflection", trace_noise_db=0.0, noise_floor_db=-140.0)
    n = 40000
    for z_true in (w.z_min, 50.0, w.z_max):
        g = reflection_s11(z_true)
        d = w.reflection_uncertainty * (rng.normal(size=n) + 1j * rng.normal(size=n)) / 2**0.5
        z = reflection_z(g + d)
        scatter = np.sqrt(np.mean(np.abs(z - z_true) ** 2)) / z_true
        assert scatter == pytest.approx(float(relative_uncertainty(z_true, w)), rel=0.05)


def test_series_resistors_do_not_apply_to_a_reflection() -> None:
    with pytest.raises(InputError, match="do not apply to a reflection"):
        measurable_window(method="reflection", series_r=499.0)
    with pytest.raises(InputError, match="choose one of"):
        measurable_window(method="through-shunt")


F = np.logspace(4, 9, 201)
# A power inductor with winding capacitance: 2.2 µH, 40 mΩ, 1.5 pF (invented values).
Z_IND = 1 / (1 / (0.04 + 2j * np.pi * F * 2.2e-6) + 2j * np.pi * F * 1.5e-12)


def test_series_through_chain_recovers_the_part_and_marks_the_window() -> None:
    # The series element's S21 from scikit-rf network algebra (skrf.network.a2s of
    # ABCD = [[1, Z], [0, 1]]), then through the chain.
    abcd = np.zeros((F.size, 2, 2), complex)
    abcd[:, 0, 0] = abcd[:, 1, 1] = 1.0
    abcd[:, 0, 1] = Z_IND
    s21 = skrf.network.a2s(abcd, 50.0)[:, 1, 0]
    data = impedance_from_series_through(F, s21)
    np.testing.assert_allclose(data.z, Z_IND, rtol=1e-9)
    assert data.window.method == "series-through"
    expected = np.abs(Z_IND) > 14.0  # resistive floor ≈ 13 Ω; reactive points near it
    assert np.array_equal(data.inside_window[np.abs(Z_IND) > 20], expected[np.abs(Z_IND) > 20])
    assert not data.inside_window[np.abs(Z_IND) < 5].any()


def test_series_through_removes_strap_and_gap() -> None:
    strap = 0.01 + 2j * np.pi * F * 0.3e-9
    y_gap = 2j * np.pi * F * 0.1e-12
    z_seen = strap + 1 / (1 / Z_IND + y_gap)
    s21 = series_through_s21(z_seen)
    data = impedance_from_series_through(F, s21, mount_short=strap, mount_open=strap + 1 / y_gap)
    np.testing.assert_allclose(data.z, Z_IND, rtol=1e-6)


def test_reflection_chain_against_a_scikit_rf_one_port_load() -> None:
    # A one-port load's reflection from scikit-rf (skrf.network.z2s).
    gamma = skrf.network.z2s(Z_IND.reshape(-1, 1, 1), 50.0)[:, 0, 0]
    data = impedance_from_reflection(F, gamma)
    np.testing.assert_allclose(data.z, Z_IND, rtol=1e-9)
    assert np.array_equal(data.inside_window, inside_window(Z_IND, data.window))
    assert data.window.method == "reflection"


def test_shunt_through_chain_is_unchanged() -> None:
    s21 = 2 * Z_IND / (2 * Z_IND + 50.0)
    data = impedance_from_shunt_through(F, s21)
    np.testing.assert_allclose(data.z, Z_IND, rtol=1e-9)
    assert data.window.method == "shunt-through" and data.window.z_max < 200


def test_as_given_estimates_its_own_scatter() -> None:
    rng = np.random.default_rng(3)
    f = np.logspace(3, 8, 801)
    z = 1 / (2j * np.pi * f * 1e-6) + 0.01 + 2j * np.pi * f * 1e-9
    noisy = z * (1 + 0.01 * (rng.normal(size=f.size) + 1j * rng.normal(size=f.size)) / 2**0.5)
    data = impedance_as_given(f, noisy)
    assert data.inside_window.all() and not data.window.bounded
    assert float(np.median(data.rel_uncertainty)) == pytest.approx(0.01, rel=0.25)
    # A clean curve gets the floor, not zero (zero would be an infinite weight).
    assert estimate_scatter(z).min() > 0
    given = impedance_as_given(f, z, rel_uncertainty=0.02)
    assert np.all(given.rel_uncertainty == 0.02)


def _noisy(z: np.ndarray, window, rng: np.random.Generator) -> np.ndarray:
    """``z`` with complex noise of a third of each point's predicted uncertainty."""
    u = relative_uncertainty(z, window)
    return z * (1 + u / 3 * (rng.normal(size=z.size) + 1j * rng.normal(size=z.size)) / 2**0.5)


def _resonance(part, f_lo: float, f_hi: float) -> tuple[float, float]:
    f = np.logspace(np.log10(f_lo), np.log10(f_hi), 200001)
    z = part(f)
    i = int(np.flatnonzero(np.diff(np.sign(z.imag)) < 0)[0])
    return float(f[i]), float(abs(z[i]))


def _inductor(l_h: float, r_core: float, c_w: float):
    """An invented inductor richer than the fit models: √f winding loss (40 mΩ at DC,
    doubling at 1 MHz), a core-loss resistance and a winding capacitance."""

    def z(f: np.ndarray) -> np.ndarray:
        jw = 2j * np.pi * f
        winding = 0.04 * (1 + np.sqrt(f / 1e6)) + jw * l_h
        return 1 / (1 / winding + 1 / r_core + jw * c_w)

    return z


@pytest.mark.parametrize(
    ("method", "part", "band", "l_h"),
    [
        # Series-through: a 2.2 µH inductor peaking near 5 kΩ, far above shunt-through.
        ("series-through", _inductor(2.2e-6, 5e3, 1.5e-12), (2e6, 1e9), 2.2e-6),
        # Reflection: a 470 nH inductor peaking near 1 kΩ, inside 1.3 Ω to 1.9 kΩ.
        ("reflection", _inductor(470e-9, 1e3, 1.0e-12), (1e6, 1e9), 470e-9),
    ],
)
def test_each_method_recovers_an_inductor_inside_its_window(method, part, band, l_h) -> None:
    from bench.core.fitting import fit_impedance

    rng = np.random.default_rng(21)
    f = np.logspace(np.log10(band[0]), np.log10(band[1]), 301)
    window = measurable_window(method=method)
    z = _noisy(part(f), window, rng)
    if method == "series-through":
        data = impedance_from_series_through(f, series_through_s21(z))
    else:
        data = impedance_from_reflection(f, reflection_s11(z))
    assert data.inside_window.mean() > 0.9
    result = fit_impedance(
        data.f, data.z, rel_uncertainty=data.rel_uncertainty, valid=data.inside_window
    )
    srf, z_srf = _resonance(part, band[0], band[1])
    # Tolerances of the recovery tests: L 2 %, SRF 2 %, |Z| at SRF 5 %.
    assert result.landmarks["l_low"] == pytest.approx(l_h, rel=0.02)
    assert result.landmarks["srf"] == pytest.approx(srf, rel=0.02)
    assert result.landmarks["z_at_srf"] == pytest.approx(z_srf, rel=0.05)


def test_shunt_through_recovers_a_capacitor_with_dielectric_loss() -> None:
    from bench.core.fitting import fit_impedance

    rng = np.random.default_rng(22)
    f = np.logspace(2, 8, 301)
    jw = 2j * np.pi * f
    # Invented MLCC: 4.7 µF with a constant loss tangent of 0.02, √f ESR, 0.6 nH.
    z_true = 1 / (jw * 4.7e-6 * (1 - 0.02j)) + 3e-3 * (1 + np.sqrt(f / 1e6)) + jw * 0.6e-9
    window = measurable_window()
    z = _noisy(z_true, window, rng)
    data = impedance_from_shunt_through(f, 2 * z / (2 * z + 50.0))
    result = fit_impedance(
        data.f, data.z, rel_uncertainty=data.rel_uncertainty, valid=data.inside_window
    )
    # C within 1 % (recovery tolerance); |1 − j·tanδ| moves |C| by 0.02 %.
    assert result.landmarks["c_low"] == pytest.approx(4.7e-6, rel=0.01)
