"""A fixture mode at the top of a sweep is named, not silently taken for the part.

A passive mode of the fixture (here the ground return's inductance ringing with a stray
capacitance near the top of the band) adds to the part's impedance like one more branch
of the part: a model with a second branch follows it, and nothing in the data alone
tells the two apart. The fit says so when its model resonates again near the top of the
fitted band (docs/design.md §4).

The part is a closed-form capacitor with a constant loss tangent, an ESR and an ESL; the
measurement shunt-through with 0.1 % complex noise. Invented values.
"""

from __future__ import annotations

import re

import numpy as np
import pytest

from bench.core.conversions import shunt_through_s21
from bench.core.fitting import fit_impedance
from bench.core.impedance import impedance_from_shunt_through

F = np.geomspace(100.0, 1e9, 801)
MODE_HZ = 700e6


def capacitor(f):
    w = 2 * np.pi * f
    return 3e-3 + 1.0 / (1j * w * 10e-6 * (1 - 0.02j)) + 1j * w * 400e-12


def fixture_mode(f):
    # 50 pH of ground return resonating at MODE_HZ with a Q of 20.
    x = f / MODE_HZ
    return 1j * 2 * np.pi * f * 50e-12 / (1 - x**2 + 1j * x / 20)


def measured(z, seed=3):
    rng = np.random.default_rng(seed)
    s21 = shunt_through_s21(z, 50.0, 0.0)
    noise = (rng.normal(size=F.size) + 1j * rng.normal(size=F.size)) / np.sqrt(2)
    data = impedance_from_shunt_through(
        F, s21 * (1 + 1e-3 * noise), noise_floor_db=-100.0, trace_noise_db=0.01
    )
    return fit_impedance(
        data.f, data.z, rel_uncertainty=data.rel_uncertainty, valid=data.inside_window
    )


def edge_warnings(result):
    return [w for w in result.warnings if "resonates again" in w]


def test_a_fixture_mode_at_the_band_edge_is_named():
    result = measured(capacitor(F) + fixture_mode(F))
    (warning,) = edge_warnings(result)
    near = re.search(r"near ([0-9.]+) MHz", warning)
    assert near is not None
    # The model's |Z| turns near the mode (its peak lies a little below MODE_HZ).
    assert float(near.group(1)) * 1e6 == pytest.approx(MODE_HZ, rel=0.15)
    assert "mount short" in warning


def test_fitting_below_the_mode_as_advised_leaves_the_part_alone():
    result = measured(capacitor(F) + fixture_mode(F))
    below = float(re.search(r"fit below ([0-9.]+) MHz", edge_warnings(result)[0]).group(1))
    keep = np.less_equal(F, below * 1e6)
    rng = np.random.default_rng(3)
    z = capacitor(F[keep]) + fixture_mode(F[keep])
    noise = (rng.normal(size=z.size) + 1j * rng.normal(size=z.size)) / np.sqrt(2)
    again = fit_impedance(F[keep], z * (1 + 1e-3 * noise), rel_uncertainty=np.full(z.size, 1e-3))
    assert not edge_warnings(again)
    # The mode's inductance below its resonance is in series with the part's ESL.
    assert again.landmarks["esl"] == pytest.approx(450e-12, rel=0.03)


def test_a_part_without_a_fixture_mode_gets_no_such_warning():
    assert not edge_warnings(measured(capacitor(F)))
