"""The simulator's pure physics functions against outside references (no sockets)."""

from __future__ import annotations

import numpy as np
import pytest
from skrf.network import a2s, s2a

from simulated_instruments import physics
from simulated_instruments.dc_bias import DcBias, DcLoad, capacitor_voltage

F = np.geomspace(10, 500e6, 301)


def test_abcd_conversions_agree_with_scikit_rf():
    """scikit-rf's a2s/s2a (skrf.network, 2.2.0 [published]) on random two-ports."""
    rng = np.random.default_rng(5)
    s = 0.4 * (rng.normal(size=(50, 2, 2)) + 1j * rng.normal(size=(50, 2, 2)))
    np.testing.assert_allclose(physics.s_to_abcd(s), s2a(s, 50.0), rtol=1e-12, atol=1e-12)
    abcd = physics.s_to_abcd(s)
    np.testing.assert_allclose(physics.abcd_to_s(abcd), a2s(abcd, 50.0), rtol=1e-12, atol=1e-12)
    # Turning a two-port round swaps its ports.
    np.testing.assert_allclose(
        physics.abcd_to_s(physics.flip_abcd(abcd)), physics.flip_s(s), rtol=1e-10, atol=1e-12
    )


@pytest.mark.parametrize(
    ("z", "s21"),
    # docs/references.md §1 check values [derived]: S21 = 2Z/(2Z + Z0).
    [(1e-3, 3.99984e-5), (1.0, 0.0384615), (25.0, 0.5), (250.0, 0.90909)],
)
def test_shunt_element_check_values(z, s21):
    s = physics.abcd_to_s(physics.shunt_abcd(np.array([z], dtype=complex)))
    assert s[0, 1, 0].real == pytest.approx(s21, rel=1e-5)
    # For an ideal shunt element S11 = S21 − 1 (docs/references.md §1, derived).
    assert s[0, 0, 0] == pytest.approx(s[0, 1, 0] - 1, abs=1e-15)


def test_series_resistors_through_level_and_window_scaling():
    """Rs = 450 Ω at each port: the raw through falls to 0.1 (−20 dB) and S21n = 0.5
    means Z = 250 Ω (docs/references.md §1, derived)."""
    r = physics.series_abcd(np.array([450.0 + 0j]))
    through = physics.abcd_to_s(physics.cascade(r, r))[0, 1, 0]
    assert through.real == pytest.approx(0.1, rel=1e-12)
    shunt = physics.abcd_to_s(physics.cascade(r, physics.shunt_abcd(np.array([250.0 + 0j])), r))
    assert (shunt[0, 1, 0] / through).real == pytest.approx(0.5, rel=1e-12)


def test_ground_loop_check_values():
    """docs/references.md §2 [derived; Rsh = 13 mΩ, fc = 2 kHz]: 5.81 mΩ at 1 kHz, 4.60 mΩ at
    2 kHz, 0.647 mΩ at 20 kHz, 0.130 mΩ at 100 kHz, 6.5 mΩ at DC; with a 1 mH choke
    268 µΩ at 100 Hz and 26.8 µΩ at 1 kHz."""
    f = np.array([1e3, 2e3, 20e3, 100e3, 1e-3])
    z = np.abs(physics.ground_loop_impedance(f, 13e-3, 2e3))
    np.testing.assert_allclose(z, [5.81e-3, 4.60e-3, 0.647e-3, 0.130e-3, 6.5e-3], rtol=3e-3)
    zc = np.abs(physics.ground_loop_impedance(np.array([100.0, 1e3]), 13e-3, 2e3, 1e-3))
    np.testing.assert_allclose(zc, [268e-6, 26.8e-6], rtol=3e-3)


def test_fixture_check_value():
    """docs/references.md §4 [derived]: 10 MHz, Zs = 1 mΩ + 100 pH, Yo = 0.5 pF,
    DUT = 0.01 + j0.0125664 Ω (10 mΩ + 200 pH) gives Zm = 0.0110000079 + j0.0188495577 Ω."""
    mount = physics.Mount(resistance=1e-3, inductance=100e-12, open_capacitance=0.5e-12)
    f = np.array([10e6])
    dut = 0.01 + 2j * np.pi * 10e6 * 200e-12
    zm = mount.with_element(f, np.array([dut]))[0]
    assert zm.real == pytest.approx(0.0110000079, rel=1e-8)
    assert zm.imag == pytest.approx(0.0188495577, rel=1e-8)


def test_error_boxes_are_smooth_and_seeded():
    rng = np.random.default_rng(9)
    kw = dict(directivity_db=-32, source_match_db=-22, cable_loss_db_at_1ghz=0.8, cable_delay=5e-9)
    terms = physics.draw_error_box_terms(rng, **kw)
    assert terms == physics.draw_error_box_terms(np.random.default_rng(9), **kw)
    f = np.linspace(1e6, 500e6, 1601)
    box = physics.error_box(f, terms)
    # Smooth: neighbouring points of a 1601-point sweep differ little in every term.
    assert np.max(np.abs(np.diff(box, axis=0))) < 0.02
    # Directivity and source match small, best at low frequency; through loss and delay.
    assert np.all(np.abs(box[:, 0, 0]) < 0.1) and np.all(np.abs(box[:, 1, 1]) < 0.25)
    assert np.abs(box[0, 1, 1]) < np.abs(box[-1, 1, 1])
    phase = np.unwrap(np.angle(box[:, 1, 0]))
    delay = -np.polyfit(2 * np.pi * f, phase, 1)[0]
    assert delay == pytest.approx(5e-9, rel=0.05)


def test_noise_levels_relation():
    floor, trace = physics.noise_levels(
        floor_db=-100, trace_noise_db=0.01, if_bandwidth=1e3, power_dbm=0
    )
    assert floor == pytest.approx(1e-5)
    # Per-component RMS of ε gives 0.01 dB RMS in 20·log10|S|: 8.686 × (10^(0.01/20) − 1).
    assert 20 / np.log(10) * trace / np.sqrt(2) == pytest.approx(0.01, rel=1e-3)
    floor2, trace2 = physics.noise_levels(
        floor_db=-100, trace_noise_db=0.01, if_bandwidth=10, power_dbm=10
    )
    assert floor2 == pytest.approx(1e-5 * 0.1 * 10 ** (-0.5))
    assert trace2 == pytest.approx(trace * 0.1)


def test_capacitor_charging_constant_current_then_rc():
    # 100 µF from 0 to 5 V through 2 Ω, limit 0.1 A: constant current until 4.8 V at
    # t1 = C(ΔV − IR)/I = 4.8 ms, then an RC tail of τ = 200 µs (derived).
    c, r, lim = 100e-6, 2.0, 0.1
    v, i = capacitor_voltage(2.4e-3, 0.0, 5.0, r, c, lim)
    assert (v, i) == pytest.approx((2.4, 0.1))
    v1, i1 = capacitor_voltage(4.8e-3, 0.0, 5.0, r, c, lim)
    assert (v1, i1) == pytest.approx((4.8, 0.1))
    v2, i2 = capacitor_voltage(4.8e-3 + 200e-6, 0.0, 5.0, r, c, lim)
    assert v2 == pytest.approx(5.0 - 0.2 * np.exp(-1))
    assert i2 == pytest.approx(0.1 * np.exp(-1))
    # A small step stays inside the limit: a plain RC charge.
    v3, _ = capacitor_voltage(200e-6, 4.9, 5.0, r, c, lim)
    assert v3 == pytest.approx(5.0 - 0.1 * np.exp(-1))


def test_dc_bias_loads():
    bias = DcBias(max_voltage=20, max_current=0.1, series_resistance=2.0)
    bias.change(0.0, setpoint=1.0, output=True)
    assert bias.measure(1.0) == (1.0, 0.0)  # open: set point, no current
    bias.connect(1.0, DcLoad("resistor", 8.0, key="r"))
    assert bias.measure(1.0) == pytest.approx((1.0, 0.1))  # 1 V / 10 Ω
    bias.change(1.0, current_limit=0.05)
    v, i = bias.measure(1.0)
    assert (v, i) == pytest.approx((0.5, 0.05))  # limited: 50 mA × 10 Ω
    assert bias.load_voltage(1.0) == pytest.approx(0.4)


def test_switch_terms():
    rng = np.random.default_rng(2)
    t = 0.3 * (rng.normal(size=(20, 2, 2)) + 1j * rng.normal(size=(20, 2, 2)))
    zero = np.zeros(20, dtype=complex)
    np.testing.assert_array_equal(physics.apply_switch_terms(t, zero, zero), t)
    # Forward sweep with port 2 terminated in Γ: b2/a1 = T21/(1 − T22·Γ) (signal-flow
    # algebra of a terminated two-port, derived).
    g = np.full(20, 0.05 + 0.02j)
    out = physics.apply_switch_terms(t, g, zero)
    np.testing.assert_allclose(out[:, 1, 0], t[:, 1, 0] / (1 - t[:, 1, 1] * g))
    np.testing.assert_allclose(out[:, 0, 0], physics.terminate(t, g))
    np.testing.assert_array_equal(out[:, 1, 1], t[:, 1, 1])
