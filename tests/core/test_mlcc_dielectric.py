"""The simulated MLCC's causal constant-loss dielectric, and the fit following its ESR.

docs/references.md §9 [derived]: a constant loss tangent is causal only as the
constant-phase form, so the simulator's capacitance falls slowly with frequency and is the
nominal one at its reference frequency (1 kHz). The fitter's ``lossy-rlc`` family (element
``D``, the wideband Debye ladder) must follow the ESR this gives, from 100 Hz to resonance.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import yaml

from bench import api
from bench.core.fitting import fit_impedance
from bench.core.landmarks import landmarks_for
from simulated_instruments.parts import Mlcc, constant_loss_capacitance, part_from_dict

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "simulated_instruments" / "scenarios" / "demo.yaml"
EXAMPLES = ROOT / "examples"
F = np.logspace(2, np.log10(2e8), 201)
# The model's ESR within 20 % of the true part's below resonance (issue target, common
# practice for an equivalent-circuit model's ESR, no source).
ESR_TOLERANCE = 0.20


def test_constant_loss_capacitance_check_values():
    # docs/references.md §9 [derived]: n = (2/π)·atan(tanδ); tanδ = 0.03 -> n = 0.019093,
    # capacitance factor 10^(−n) = 0.95699 per decade (4.30 % less per decade, about
    # (2/π)·tanδ·ln 10 = 4.40 % to first order).
    f = np.array([1e2, 1e3, 1e4, 1e6])
    c = constant_loss_capacitance(f, 22e-6, 0.03, 1e3)
    assert c.real[1] == pytest.approx(22e-6, rel=1e-12)  # nominal at the reference
    assert -c.imag / c.real == pytest.approx(np.full(4, 0.03), rel=1e-12)  # tanδ constant
    assert c.real[2] / c.real[1] == pytest.approx(0.95699, rel=1e-5)
    assert c.real[1] / c.real[0] == pytest.approx(0.95699, rel=1e-5)
    # Causal: Ĉ ∝ (jω)^(−n), analytic for Re s > 0; the same function of s = jω.
    n = (2 / np.pi) * np.arctan(0.03)
    s = 1j * 2 * np.pi * f
    cpe = 22e-6 / np.cos(np.arctan(0.03)) * (s / (2 * np.pi * 1e3)) ** (-n)
    assert c == pytest.approx(cpe, rel=1e-12)


def test_mlcc_loss_tangent_is_the_same_at_every_frequency_below_resonance():
    part = Mlcc(capacitance=10e-6, esl=1e-15, esr=1e-12, skin_corner=1e15, loss_tangent=0.03)
    f = np.logspace(2, 5, 7)
    z = part.impedance(f)
    # Re Z / −Im Z of the dielectric alone is tanδ (docs/references.md §9, derived).
    assert z.real / -z.imag == pytest.approx(np.full(f.size, 0.03), rel=1e-3)
    c_series = -1 / (2 * np.pi * f * z.imag)
    assert np.all(np.diff(c_series) < 0)  # falls with frequency


def _noisy(z, u, seed):
    rng = np.random.default_rng(seed)
    e = rng.standard_normal(z.size) + 1j * rng.standard_normal(z.size)
    return z * (1 + u * e / np.sqrt(2))


def _assert_esr_followed(fit, f, z_true):
    srf = landmarks_for("capacitor", f, z_true)["srf"]
    below = f < srf
    ratio = fit.impedance(f[below]).real / z_true[below].real
    worst = np.max(np.abs(ratio - 1))
    assert worst < ESR_TOLERANCE, (f[below][np.argmax(np.abs(ratio - 1))], ratio.min())


def test_demo_22uF_mlcc_esr_is_followed_from_100_hz_to_resonance():
    circuit = yaml.safe_load(DEMO.read_text())["parts"]["MC22-6V3"]["circuit"]
    part = part_from_dict(circuit)
    z_true = part.impedance(F)
    # ESR at 100 Hz ≈ tanδ/(ωC): 0.03/(2π·100·23 µF) ≈ 2.08 Ω (X5R default tanδ).
    assert z_true.real[0] == pytest.approx(2.08, rel=0.02)
    u = 0.005
    fit = fit_impedance(F, _noisy(z_true, u, seed=11), rel_uncertainty=np.full(F.size, u))
    assert fit.model == "lossy-rlc"
    _assert_esr_followed(fit, F, z_true)


def test_example_22uF_file_esr_is_followed_from_100_hz_to_resonance():
    # The part of examples/make_examples.py (mlcc_22u.s2p), fitted with its mount removed.
    part = Mlcc(name="ZBEX-C22U", capacitance=22e-6, esl=0.42e-9, esr=2.6e-3, rated_voltage=6.3)
    fit = api.fit(EXAMPLES / "mlcc_22u.s2p", mount=EXAMPLES / "mount_short.s2p")
    f = np.logspace(2, np.log10(2e8), 401)
    _assert_esr_followed(fit, f, part.impedance(f))
