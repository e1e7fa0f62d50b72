"""Round trip: model -> S21 by shunt-through -> noisy S21 -> Z -> fit recovers the model.

The conversions are the core's own (``bench.core.conversions``); the fitted model must
reproduce the true model's impedance and landmarks from S21 with a little noise, for
element values drawn by hypothesis over the range of power-delivery passives.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from bench.core.conversions import shunt_through_s21, shunt_through_z
from bench.core.fitting import fit_impedance
from bench.core.landmarks import landmarks_for
from bench.core.models import FAMILIES

SETTINGS = settings(
    max_examples=5,
    deadline=None,
    derandomize=True,
    database=None,
    suppress_health_check=[HealthCheck.too_slow],
)


def log_uniform(lo: float, hi: float):
    return st.floats(np.log10(lo), np.log10(hi)).map(lambda x: float(10**x))


def round_trip(family_name, values, f, seed, series_r=0.0):
    family = FAMILIES[family_name]
    z_true = family.impedance(f, values)
    rng = np.random.default_rng(seed)
    s21 = shunt_through_s21(z_true, 50.0, series_r)
    noise = rng.normal(size=(2, f.size))
    # 1e-4 relative trace noise and a -120 dB floor.
    s21n = s21 * (1 + 1e-4 * (noise[0] + 1j * noise[1])) + 1e-6 * (
        rng.normal(size=f.size) + 1j * rng.normal(size=f.size)
    )
    z = shunt_through_z(s21n, 50.0, series_r)
    result = fit_impedance(f, z, model=family_name)
    err = np.abs(np.log(result.impedance(f) / z_true))
    return result, z_true, err


@SETTINGS
@given(
    c=log_uniform(1e-7, 1e-4),
    ind=log_uniform(0.2e-9, 3e-9),
    # ESR from 3 mΩ keeps Q = √(L/C)/R below about 60, so the dip spans grid points.
    r=log_uniform(3e-3, 50e-3),
    seed=st.integers(0, 2**16),
)
def test_series_rlc_round_trip(c, ind, r, seed):
    values = {"R": r, "L": ind, "C": c}
    # Start where |Z| is below about 50 Ω so the measurement resolves the capacitance.
    f = np.logspace(np.log10(max(1e3, 1 / (2 * np.pi * c * 50))), np.log10(300e6), 201)
    result, _, err = round_trip("series-rlc", values, f, seed)
    # A sharp resonance falls between grid points and its dip, a few mΩ, sees a per cent
    # or two of noise at the floor: ESR is the least determined element.
    assert np.max(err) < 0.05
    for key, tol in {"R": 0.05, "L": 0.02, "C": 0.02}.items():
        assert result.elements[key] == pytest.approx(values[key], rel=tol), key


@SETTINGS
@given(
    c1=log_uniform(1e-7, 1e-4),
    l1=log_uniform(0.2e-9, 2e-9),
    r1=log_uniform(2e-3, 30e-3),
    c_ratio=log_uniform(2e-3, 2e-2),
    l_ratio=st.floats(2.0, 8.0),
    q2=st.floats(2.0, 20.0),
    seed=st.integers(0, 2**16),
)
def test_two_branch_round_trip(c1, l1, r1, c_ratio, l_ratio, q2, seed):
    # The second branch is a damped mode (quality factor q2 = √(L2/C2)/R2 from 2 to 20),
    # as the higher modes of a ceramic stack are; an undamped one would be a spike
    # between grid points that no measurement resolves.
    l2, c2 = l1 * l_ratio, c1 * c_ratio
    values = {"R1": r1, "L1": l1, "C1": c1, "R2": np.sqrt(l2 / c2) / q2, "L2": l2, "C2": c2}
    f = np.logspace(np.log10(max(1e3, 1 / (2 * np.pi * c1 * 50))), np.log10(1e9), 201)
    result, z_true, err = round_trip("two-branch", values, f, seed)
    # As for the series R-L-C: a sharp first resonance is the least determined point.
    assert np.max(err) < 0.05
    truth = landmarks_for("capacitor", f, z_true)
    for key, tol in {"c_low": 0.01, "srf": 0.01, "esl": 0.02, "esr_at_srf": 0.05}.items():
        assert result.landmarks[key] == pytest.approx(truth[key], rel=tol), key


@SETTINGS
@given(
    ind=log_uniform(0.1e-6, 5e-6),
    r=log_uniform(100.0, 1000.0),
    c=log_uniform(0.3e-12, 3e-12),
    rdc=log_uniform(10e-3, 300e-3),
    seed=st.integers(0, 2**16),
)
def test_bead_round_trip(ind, r, c, rdc, seed):
    values = {"Rdc": rdc, "L": ind, "R": r, "C": c, "Rc": 1e-3}  # Rc: a negligible loss
    f = np.logspace(3, np.log10(2e9), 201)
    # 450 Ω series resistors at each port keep the peak inside the window.
    result, _, err = round_trip("bead", values, f, seed, series_r=450.0)
    assert np.max(err) < 0.02
    for key in ("L", "R", "C", "Rdc"):
        assert result.elements[key] == pytest.approx(values[key], rel=0.05), key
