"""Measurable window and per-point uncertainty against the trade's rule of thumb and
the derived sensitivity relations of docs/references.md §1."""

from __future__ import annotations

import numpy as np
import pytest

from bench.core.conversions import shunt_through_s21, shunt_through_z
from bench.core.window import (
    db_to_relative,
    inside_window,
    measurable_window,
    relative_uncertainty,
)
from bench.errors import InputError


def test_plain_50_ohm_window_matches_rule_of_thumb() -> None:
    w = measurable_window()
    # Common practice, no single source (docs/references.md §1): a plain 50 ohm set-up with
    # about 100 dB of dynamic range measures about 1 mΩ to about 225 Ω. "About" is
    # taken as within a factor of 3 at the floor and 25 % at the ceiling.
    assert 1e-3 / 3 < w.z_min < 3e-3
    assert 150.0 < w.z_max < 260.0
    assert w.dynamic_range_db == pytest.approx(100.0)


def test_ceiling_hand_check_0_1_db_and_10_percent() -> None:
    # Derived (docs/references.md §1): eps = 10**(0.1/20) - 1 = 1.16 %; dZ/Z = eps·(1 + 2Z/50)
    # = 0.1 gives 1 + 2Z/50 = 8.6, Z ≈ 190 Ω. Only the multiplicative error acts there.
    assert db_to_relative(0.1) == pytest.approx(0.0116, abs=1e-4)
    w = measurable_window(trace_noise_db=0.1, through_drift_db=0.0, noise_floor_db=-160.0)
    assert w.z_max == pytest.approx(25.0 * (0.1 / db_to_relative(0.1) - 1.0), rel=1e-6)
    assert w.z_max == pytest.approx(190.0, rel=0.01)


def test_floor_follows_the_noise_floor() -> None:
    # Derived: for S21n -> 0, dZ/Z = N/S21n = N·Ze/(2Z), so Z_min = N·25/tol when the
    # multiplicative error is negligible: -100 dB, 10 % -> 1e-5·25/0.1 = 2.5 mΩ.
    w = measurable_window(trace_noise_db=0.0, through_drift_db=0.0, noise_floor_db=-100.0)
    assert w.z_min == pytest.approx(2.5e-3, rel=1e-3)
    # Derived (docs/references.md §1): a -120 dB floor corresponds to 25 µΩ at SNR 1, so at 10 %
    # the floor is ten times that.
    w120 = measurable_window(trace_noise_db=0.0, through_drift_db=0.0, noise_floor_db=-120.0)
    assert w120.z_min == pytest.approx(250e-6, rel=1e-3)


def test_series_resistors_scale_the_window_by_549_over_50() -> None:
    # Derived (docs/references.md §1): the window scales by (Z0 + Rs)/Z0 = 549/50 = 10.98 for
    # 499 Ω at each port. Common practice: about 11 mΩ to about 2.5 kΩ.
    plain = measurable_window()
    w = measurable_window(series_r=499.0)
    assert w.z_min / plain.z_min == pytest.approx(549 / 50, rel=1e-6)
    assert w.z_max / plain.z_max == pytest.approx(549 / 50, rel=1e-6)
    assert w.ze == pytest.approx(549.0)
    assert 11e-3 / 3 < w.z_min < 33e-3
    assert 1.6e3 < w.z_max < 2.9e3


def test_uncertainty_equals_sensitivity_relations() -> None:
    w = measurable_window(noise_floor_db=-90.0, trace_noise_db=0.05, through_drift_db=0.02)
    z = np.array([1e-3, 0.1, 3.0, 50.0, 400.0]) * np.exp(1j * np.array([0, 0.3, -1.2, 1.5, 0]))
    s = shunt_through_s21(z, 50.0)
    # Derived (docs/references.md §1): dZ/Z = dS21/(S21(1 - S21));
    # eps multiplicative -> eps/(1 - S21).
    additive = 10 ** (-90 / 20) / np.abs(s * (1 - s))
    multiplicative = w.multiplicative_error / np.abs(1 - s)
    np.testing.assert_allclose(relative_uncertainty(z, w), np.hypot(additive, multiplicative))
    eps = np.hypot(db_to_relative(0.05), db_to_relative(0.02))
    assert w.multiplicative_error == pytest.approx(eps)


def test_uncertainty_matches_a_seeded_noise_experiment() -> None:
    # Build the truth, add the noise the window describes, and compare the scatter of Z.
    rng = np.random.default_rng(7)
    w = measurable_window(noise_floor_db=-80.0, trace_noise_db=0.05, through_drift_db=0.0)
    n = 40000
    for z_true in (2e-3, 0.5, 120.0):
        s = shunt_through_s21(z_true, 50.0)
        noise = w.noise_floor * (rng.normal(size=n) + 1j * rng.normal(size=n)) / np.sqrt(2)
        gain = 1 + w.multiplicative_error * (rng.normal(size=n) + 1j * rng.normal(size=n)) / 2**0.5
        z = shunt_through_z(s * gain + noise, 50.0)
        scatter = np.sqrt(np.mean(np.abs(z - z_true) ** 2)) / z_true
        assert scatter == pytest.approx(relative_uncertainty(z_true, w), rel=0.05)


def test_bounds_are_inside_and_beyond_is_outside() -> None:
    w = measurable_window()
    z = np.array([w.z_min, w.z_max, w.z_min * 0.8, w.z_max * 1.2, w.z_best, np.nan])
    assert inside_window(z, w).tolist() == [True, True, False, False, True, False]
    u = relative_uncertainty([w.z_min, w.z_max], w)
    np.testing.assert_allclose(u, w.tolerance, rtol=1e-8)


def test_to_dict_has_the_json_keys() -> None:
    d = measurable_window(series_r=10.0).to_dict()
    for key in ("z_min", "z_max", "z0", "series_r", "noise_floor_db", "tolerance"):
        assert isinstance(d[key], float)
    assert d["series_r"] == 10.0


@pytest.mark.parametrize(
    ("kwargs", "key"),
    [
        ({"z0": 0.0}, "z0"),
        ({"series_r": -5.0}, "series_r"),
        ({"noise_floor_db": 3.0}, "noise_floor_db"),
        ({"tolerance": 0.0}, "tolerance"),
        ({"tolerance": 1.5}, "tolerance"),
        ({"trace_noise_db": -0.1}, "trace_noise_db"),
    ],
)
def test_bad_settings_are_refused_by_name(kwargs: dict, key: str) -> None:
    with pytest.raises(InputError, match=key):
        measurable_window(**kwargs)


def test_impossible_tolerance_says_what_to_do() -> None:
    with pytest.raises(InputError, match="no impedance can be measured"):
        measurable_window(tolerance=0.005)


@pytest.mark.parametrize("method", ["shunt-through", "series-through", "reflection"])
@pytest.mark.parametrize(("floor", "noise", "tolerance"), [(-80, 0.01, 0.1), (-130, 0.1, 0.02)])
def test_window_edges_are_scipys_roots(method, floor, noise, tolerance) -> None:
    # The window's own search is numpy only (start-up); scipy's bounded minimiser and
    # Brent's root finder on the same uncertainty are the outside reference.
    import math

    from scipy.optimize import brentq, minimize_scalar

    from bench.core.window import _uncertainty

    w = measurable_window(
        method=method, noise_floor_db=floor, trace_noise_db=noise, tolerance=tolerance
    )

    def rel(log_z: float) -> float:
        z = np.array([10.0**log_z + 0j])
        return float(
            _uncertainty(
                z, w.ze, w.noise_floor, w.multiplicative_error, method, w.reflection_uncertainty
            )[0]
        )

    lo, hi = math.log10(w.ze) - 16, math.log10(w.ze) + 16
    best = minimize_scalar(rel, bounds=(lo, hi), method="bounded", options={"xatol": 1e-10})
    low = brentq(lambda x: rel(x) - tolerance, lo, best.x, xtol=1e-12)
    high = brentq(lambda x: rel(x) - tolerance, best.x, hi, xtol=1e-12)
    assert math.log10(w.z_min) == pytest.approx(low, abs=1e-10)
    assert math.log10(w.z_max) == pytest.approx(high, abs=1e-10)
    assert w.best_uncertainty == pytest.approx(best.fun, rel=1e-8)
