"""Software calibration: random smooth error boxes, embed ideal standards and a DUT with
scikit-rf, correct, and compare (the method of scikit-rf's own calibration tests)."""

from __future__ import annotations

import numpy as np
import pytest
import skrf

from bench.core.calibration import (
    CalibrationSettings,
    RawStandards,
    calibrate,
    check_calibration_settings,
    ideal_standards,
    match_corrected,
    port_match,
    settings_differences,
    solt,
    through_response,
)
from bench.core.conversions import shunt_through_s21, shunt_through_z
from bench.errors import InputError

F = np.logspace(2, 8.3, 121)


def _net(s: np.ndarray) -> skrf.Network:
    return skrf.Network(frequency=skrf.Frequency.from_f(F, unit="Hz"), s=s, z0=50.0)


def _smooth(rng: np.random.Generator, scale: float) -> np.ndarray:
    # A low-order complex polynomial in log-frequency: smooth like a real cable's terms.
    x = (np.log10(F) - 2) / 6.3
    coeffs = scale * (rng.normal(size=3) + 1j * rng.normal(size=3))
    return coeffs[0] + coeffs[1] * x + coeffs[2] * x**2


def _error_box(rng: np.random.Generator, *, mismatch: float = 0.1) -> skrf.Network:
    delay = rng.uniform(2e-9, 6e-9)
    tracking = (0.8 + 0.1 * rng.uniform()) * np.exp(-2j * np.pi * F * delay)
    s = np.empty((F.size, 2, 2), complex)
    s[:, 0, 0] = _smooth(rng, mismatch)
    s[:, 1, 1] = _smooth(rng, mismatch)
    s[:, 0, 1] = s[:, 1, 0] = tracking * (1 + _smooth(rng, 0.02))
    return _net(s)


def _shunt_dut(z: np.ndarray) -> np.ndarray:
    s21 = shunt_through_s21(z, 50.0)
    s = np.empty((F.size, 2, 2), complex)
    s[:, 0, 1] = s[:, 1, 0] = s21
    s[:, 0, 0] = s[:, 1, 1] = s21 - 1
    return s


def _bench(seed: int, mismatch: float = 0.1):
    rng = np.random.default_rng(seed)
    x, y = _error_box(rng, mismatch=mismatch), _error_box(rng, mismatch=mismatch).flipped()
    ideal = ideal_standards(F)

    def measure(s: np.ndarray) -> np.ndarray:
        return (x ** _net(s) ** y).s

    standards = RawStandards(F, **{name: measure(ideal[name]) for name in ideal})
    w = 2 * np.pi * F
    z = 3e-3 + 1j * w * 0.6e-9 + 1 / (1j * w * 22e-6)
    dut = _shunt_dut(z)
    return standards, measure(dut), dut, z, measure


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_solt_recovers_the_dut(seed: int) -> None:
    standards, raw, dut, z, _ = _bench(seed)
    corrected = solt(F, raw, standards)
    # Published method (scikit-rf calibration tests; docs/references.md §8 measured ~1e-15).
    np.testing.assert_allclose(corrected, dut, atol=1e-9)
    np.testing.assert_allclose(shunt_through_z(corrected[:, 1, 0]), z, rtol=1e-6)


def test_solt_with_non_ideal_open_model() -> None:
    rng = np.random.default_rng(5)
    x, y = _error_box(rng), _error_box(rng).flipped()
    ideal = ideal_standards(F)
    # An open with 20 fF of fringing capacitance on both ports.
    gamma = skrf.network.z2s((1 / (1j * 2 * np.pi * F * 20e-15)).reshape(-1, 1, 1), 50.0)[:, 0, 0]
    ideal["open"] = np.zeros((F.size, 2, 2), complex)
    ideal["open"][:, 0, 0] = ideal["open"][:, 1, 1] = gamma
    standards = RawStandards(F, **{n: (x ** _net(ideal[n]) ** y).s for n in ideal})
    dut = _shunt_dut(np.full(F.size, 0.7 + 0.2j))
    raw = (x ** _net(dut) ** y).s
    np.testing.assert_allclose(
        solt(F, raw, standards, ideals={"open": ideal["open"]}), dut, atol=1e-9
    )
    # Taking the open as ideal leaves an error: the model matters.
    assert np.max(np.abs(solt(F, raw, standards) - dut)) > 1e-6


def test_through_response_removes_tracking_only() -> None:
    # Matched error boxes: only tracking, which the through response removes exactly.
    standards, raw, dut, _, _ = _bench(7, mismatch=0.0)
    corrected = through_response(raw, standards.thru)
    np.testing.assert_allclose(corrected[:, 1, 0], dut[:, 1, 0], rtol=1e-9)
    # With mismatch (docs/references.md §8: Normalization removes tracking only), an error
    # remains in S21 that SOLT removes.
    standards, raw, dut, _, _ = _bench(7, mismatch=0.1)
    s21 = through_response(raw, standards.thru)[:, 1, 0]
    assert np.max(np.abs(s21 - dut[:, 1, 0])) > 1e-3
    np.testing.assert_allclose(
        calibrate(F, raw, standards, "solt")[:, 1, 0], dut[:, 1, 0], atol=1e-9
    )
    # S11 and S22 are left raw.
    np.testing.assert_array_equal(through_response(raw, standards.thru)[:, 0, 0], raw[:, 0, 0])


def test_through_method_matches_scikit_rf_normalisation_of_s21() -> None:
    standards, raw, _, _, _ = _bench(9)
    # scikit-rf's element-wise network division is the textbook response calibration.
    expected = (_net(raw) / _net(standards.thru)).s[:, 1, 0]
    np.testing.assert_allclose(calibrate(F, raw, standards, "through")[:, 1, 0], expected)


def test_hybrid_switches_at_the_crossover() -> None:
    standards, raw, _, _, _ = _bench(4)
    low = F < 1e5
    out = calibrate(F, raw, standards, "hybrid", crossover_hz=1e5)
    # Default low band: the match-corrected through response.
    np.testing.assert_allclose(out[low], match_corrected(F, raw, standards)[low])
    np.testing.assert_allclose(out[~low], solt(F, raw, standards)[~low])
    plain = calibrate(F, raw, standards, "hybrid", crossover_hz=1e5, low_band="through")
    np.testing.assert_allclose(plain[low], through_response(raw, standards.thru)[low])
    np.testing.assert_allclose(plain[~low], solt(F, raw, standards)[~low])
    with pytest.raises(InputError, match="low band"):
        calibrate(F, raw, standards, "hybrid", low_band="smooth")


def _with_switch_terms(seed: int):
    """A bench whose analyser has switch terms: the twelve-term case, where the load
    match is not the error box's own port match."""
    _, _, dut, z, measure = _bench(seed)
    rng = np.random.default_rng(100 + seed)
    gamma_f, gamma_r = (
        skrf.Network(
            frequency=skrf.Frequency.from_f(F, unit="Hz"),
            s=_smooth(rng, 0.03).reshape(-1, 1, 1),
            z0=50.0,
        )
        for _ in range(2)
    )

    def switched(s: np.ndarray) -> np.ndarray:
        # scikit-rf's own switch-term termination (calibration.terminate).
        return skrf.calibration.terminate(_net(measure(s)), gamma_f, gamma_r).s

    ideal = ideal_standards(F)
    switched_standards = RawStandards(F, **{name: switched(ideal[name]) for name in ideal})
    return switched_standards, switched(dut), dut, z, switched


@pytest.mark.parametrize("seed", [1, 2, 3])
@pytest.mark.parametrize("switch_terms", [False, True], ids=["eight-term", "twelve-term"])
def test_match_correction_equals_scikit_rf_solt_on_a_shunt(seed: int, switch_terms: bool) -> None:
    # Published model: the twelve-term error model as scikit-rf's TwelveTerm/SOLT solves
    # it (Rehnmark); on a true shunt element (S11 = S22 = S21 − 1) the match correction
    # is that model's transmission equation, so it must agree with SOLT, noise-free.
    bench = _with_switch_terms(seed) if switch_terms else _bench(seed)
    standards, raw, dut, z, _ = bench
    corrected = match_corrected(F, raw, standards)
    reference = solt(F, raw, standards)
    np.testing.assert_allclose(corrected[:, 1, 0], reference[:, 1, 0], rtol=0, atol=1e-9)
    np.testing.assert_allclose(corrected[:, 0, 1], reference[:, 0, 1], rtol=0, atol=1e-9)
    np.testing.assert_allclose(corrected[:, 1, 0], dut[:, 1, 0], rtol=0, atol=1e-9)
    np.testing.assert_allclose(shunt_through_z(corrected[:, 1, 0]), z, rtol=1e-6)
    # Reflections are SOLT's.
    np.testing.assert_allclose(corrected[:, 0, 0], reference[:, 0, 0], atol=1e-12)


def test_match_correction_removes_the_bias_a_through_normalisation_leaves() -> None:
    # The DUT is a milliohm shunt (3 mOhm, 22 uF, 0.6 nH): S11 ≈ −1 where the through
    # shows ≈ 0, so the port match enters the through-normalised S21 at first order.
    standards, raw, _, z, _ = _with_switch_terms(5)
    terms = port_match(F, standards)
    s21n = through_response(raw, standards.thru)[:, 1, 0]
    plain = shunt_through_z(s21n)
    # Published: with unequal source and load impedances, Z = (Zs‖Zl)·S21′/(1 − S21′),
    # S21′ normalised to the through (O. Duffy, docs/references.md §1). With Zs, Zl from the
    # source and load match, (Zs‖Zl) = (Z0/2)(1 + ESF)(1 + ELF)/(1 − ESF·ELF) [derived:
    # Zs = Z0(1 + a)/(1 − a), Zl = Z0(1 + b)/(1 − b), ZsZl/(Zs + Zl) simplifies to it].
    zs_zl = terms.source_load_impedance(50.0)
    np.testing.assert_allclose(zs_zl * s21n / (1 - s21n), z, rtol=1e-9)
    # So the plain through normalisation, which converts with Z0/2, reads every Z off by
    # (Z0/2)/(Zs‖Zl) − 1 ≈ −(ESF + ELF) to first order [derived from the relation above].
    predicted = 25.0 / zs_zl - 1
    np.testing.assert_allclose(plain / z - 1, predicted, rtol=1e-9, atol=1e-12)
    a, b = terms.source_forward, terms.load_forward
    second_order = 2 * (np.abs(a) + np.abs(b)) ** 2
    assert np.all(np.abs(predicted + (a + b)) <= second_order)
    assert np.min(np.abs(predicted)) > 0.01
    # The match correction leaves none of it.
    corrected = match_corrected(F, raw, standards)[:, 1, 0]
    np.testing.assert_allclose(shunt_through_z(corrected), z, rtol=1e-9)


def test_match_correction_ignores_the_parts_reflection_noise() -> None:
    # Why SOLT is noisy behind port series resistors: the part's reflections are read
    # through a weak reflection tracking and enter SOLT's S21 through the source and
    # load match. Here a trace noise of 1e-3 on the raw S11 and S22 of the part only:
    # SOLT's S21 moves, the match-corrected S21 (built from S21 alone) does not.
    standards, raw, dut, _, _ = _bench(6, mismatch=0.3)
    rng = np.random.default_rng(8)
    noisy = raw.copy()
    for i in (0, 1):
        noisy[:, i, i] *= 1 + 1e-3 * (rng.normal(size=F.size) + 1j * rng.normal(size=F.size))
    moved = solt(F, noisy, standards)[:, 1, 0] - dut[:, 1, 0]
    assert np.max(np.abs(moved / dut[:, 1, 0])) > 1e-4
    np.testing.assert_allclose(
        match_corrected(F, noisy, standards)[:, 1, 0], dut[:, 1, 0], rtol=0, atol=1e-9
    )


def test_missing_standards_and_bad_method() -> None:
    standards, raw, _, _, _ = _bench(1)
    only_thru = RawStandards(F, thru=standards.thru)
    with pytest.raises(InputError, match="short, open, load"):
        calibrate(F, raw, only_thru, "solt")
    with pytest.raises(InputError, match="unknown calibration method"):
        calibrate(F, raw, standards, "trl")
    with pytest.raises(ValueError, match="shape"):
        RawStandards(F, thru=np.ones((3, 2, 2)))


def _settings(**kw) -> CalibrationSettings:
    base = {"f": np.logspace(2, 8, 201), "if_bandwidth_hz": 100.0, "power_dbm": 0.0}
    base.update(kw)
    return CalibrationSettings(**base)


def test_settings_check_says_what_differs() -> None:
    stored = _settings()
    assert settings_differences(stored, _settings()) == ()
    check_calibration_settings(stored, CalibrationSettings.from_dict(stored.to_dict()))
    planned = _settings(f=np.logspace(2, 8, 401), if_bandwidth_hz=1000.0, series_r=499.0)
    diffs = settings_differences(stored, planned)
    assert len(diffs) == 3
    assert any("frequency grid" in d and "201 points" in d and "401 points" in d for d in diffs)
    assert any("IF bandwidth" in d and "100 Hz" in d and "1000 Hz" in d for d in diffs)
    assert any("series resistors" in d and "499" in d for d in diffs)
    with pytest.raises(InputError, match="does not match") as info:
        check_calibration_settings(stored, planned, source="runs/cal-1/manifest.json")
    assert "runs/cal-1/manifest.json" in str(info.value)
    assert "calibrate again" in str(info.value)


def test_through_mismatch_bias_bound() -> None:
    from bench.core.calibration import through_mismatch_bias

    # Derived: −40 dB is |Γ| = 0.01 at each port, so (0.01 + 0.01)·50/50 = 2 %; with
    # 499 Ω resistors the analyser's match is diluted to 0.02·50/549 = 0.182 %.
    assert through_mismatch_bias(-40.0) == pytest.approx(0.02, rel=1e-12)
    assert through_mismatch_bias(-40.0, 50.0, 499.0) == pytest.approx(0.02 * 50 / 549, rel=1e-12)
    # Against the exact source-load impedance (docs/references.md §1, Duffy): Γ = 0.01 in phase
    # at both ports, Zs = Zl = Rs + 50·1.01/0.99; Zs‖Zl against (Z0 + Rs)/2.
    for series_r in (0.0, 499.0):
        zs = series_r + 50.0 * 1.01 / 0.99
        exact = (zs / 2) / ((50.0 + series_r) / 2) - 1
        assert through_mismatch_bias(-40.0, 50.0, series_r) == pytest.approx(exact, rel=0.02)
    with pytest.raises(ValueError, match="negative number of dB"):
        through_mismatch_bias(3.0)


# --- calibration-kit definitions ---------------------------------------------------------


def test_kit_standards_follow_the_one_port_formulas() -> None:
    from bench.core.calibration import CalibrationKit, kit_standards

    kit = CalibrationKit(
        short_inductance=8e-12,
        open_capacitance=15e-15,
        load_resistance=50.2,
        load_inductance=4e-12,
        short_delay=10e-12,
        through_delay=30e-12,
    )
    z0 = 50.0
    out = kit_standards(F, kit, z0)
    w = 2 * np.pi * F
    # Derived from Γ = (Z − Z0)/(Z + Z0) (Pozar §2.3, from memory): an open of C0 has
    # Z = 1/(jωC0), so Γ = (1/(jωC0) − Z0)/(1/(jωC0) + Z0) = (1 − jωC0Z0)/(1 + jωC0Z0).
    g_open = (1 - 1j * w * 15e-15 * z0) / (1 + 1j * w * 15e-15 * z0)
    # A short of L0 behind a lossless offset of one-way delay τ: the wave goes there and
    # back, so Γ = e^(−2jωτ)·(jωL0 − Z0)/(jωL0 + Z0) (derived, same source).
    g_short = np.exp(-2j * w * 10e-12) * (1j * w * 8e-12 - z0) / (1j * w * 8e-12 + z0)
    # The load R + jωL: at low frequency Γ → (50.2 − 50)/(50.2 + 50) = 1.996e-3 (derived).
    z_load = 50.2 + 1j * w * 4e-12
    g_load = (z_load - z0) / (z_load + z0)
    for name, g in (("open", g_open), ("short", g_short), ("load", g_load)):
        np.testing.assert_allclose(out[name][:, 0, 0], g, rtol=1e-12, err_msg=name)
        np.testing.assert_allclose(out[name][:, 1, 1], g, rtol=1e-12, err_msg=name)
        np.testing.assert_array_equal(out[name][:, 0, 1], 0)
    assert out["load"][0, 0, 0] == pytest.approx(0.2 / 100.2, rel=1e-6)
    # The through: a matched line of one-way delay τ, S21 = e^(−jωτ) (derived).
    np.testing.assert_allclose(out["thru"][:, 1, 0], np.exp(-1j * w * 30e-12), rtol=1e-12)
    np.testing.assert_array_equal(out["thru"][:, 0, 0], 0)


def test_default_kit_is_the_ideal_flush_standards() -> None:
    from bench.core.calibration import CalibrationKit, kit_standards

    kit = CalibrationKit()
    assert kit.is_ideal
    out, ideal = kit_standards(F, kit), ideal_standards(F)
    for name in ("short", "open", "load", "thru"):
        np.testing.assert_allclose(out[name], ideal[name], atol=1e-15, err_msg=name)
    # The default load is z0, whatever z0 is.
    assert np.all(kit_standards(F, kit, 75.0)["load"] == 0)


@pytest.mark.parametrize(
    "bad",
    [{"short_inductance": -1e-12}, {"load_resistance": 0.0}, {"open_delay": float("nan")}],
)
def test_kit_rejects_impossible_values(bad) -> None:
    from bench.core.calibration import CalibrationKit

    with pytest.raises(ValueError, match=next(iter(bad))):
        CalibrationKit(**bad)


@pytest.mark.parametrize("low_band", ["match", None])
def test_a_real_kit_is_corrected_only_when_its_definitions_are_given(low_band) -> None:
    # Embed non-ideal standards (the kit's own responses) behind the error boxes; SOLT
    # and the hybrid's match-corrected low band recover the DUT only when told the kit.
    from bench.core.calibration import CalibrationKit, kit_standards

    rng = np.random.default_rng(5)
    x, y = _error_box(rng), _error_box(rng).flipped()

    def measure(s: np.ndarray) -> np.ndarray:
        return (x ** _net(s) ** y).s

    kit = CalibrationKit(
        short_inductance=8e-12, open_capacitance=15e-15, load_resistance=50.2, load_delay=5e-12
    )
    truth = kit_standards(F, kit)
    standards = RawStandards(F, **{name: measure(truth[name]) for name in truth})
    w = 2 * np.pi * F
    z = 3e-3 + 1j * w * 0.6e-9 + 1 / (1j * w * 22e-6)
    raw = measure(_shunt_dut(z))
    method = "solt" if low_band is None else "hybrid"
    kwargs = {} if low_band is None else {"low_band": low_band}
    good = calibrate(F, raw, standards, method, ideals=truth, **kwargs)
    np.testing.assert_allclose(shunt_through_z(good[:, 1, 0]), z, rtol=1e-6)
    bare = calibrate(F, raw, standards, method, **kwargs)
    error = np.abs(shunt_through_z(bare[:, 1, 0]) / z - 1)
    # Derived: taking the 50.2 Ω load for 50 Ω puts the part on a 50/50.2 scale, so a
    # low-impedance part reads 0.40 % low at low frequency.
    assert error[F < 1e5] == pytest.approx(1 - 50 / 50.2, rel=0.05)
