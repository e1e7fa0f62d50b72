"""The landmarks' first-order slopes (``bench.core.landmark_slopes``) against reading the
landmarks again with each element value moved (finite differences, the way the fitter's
landmark uncertainties were computed before): the chain rule through the same reading
must agree with the moved readings [derived; an internal consistency check]."""

from __future__ import annotations

import math

import numpy as np
import pytest

from bench.core.fit_network import CompiledNetwork
from bench.core.fitting import fit_impedance
from bench.core.landmark_slopes import landmark_slopes
from bench.core.landmarks import landmarks_for
from bench.core.models.network import network_impedance
from simulated_instruments.parts import BulkCapacitor, FerriteBead, Mlcc, PowerInductor
from tests.core.test_fitting import measure

F = np.logspace(3, np.log10(200e6), 401)
STEP = 1e-4  # in ln of an element value: the step the finite differences take
# Agreement of a slope with the finite difference, relative to the landmark's largest
# slope: the difference's own error is of the order of the step (1e-4), so 1 % leaves
# room for a reading that bends, and far less than a wrong chain rule would give.
AGREEMENT = 0.01

PARTS = [
    (Mlcc(name="MC10U", capacitance=10e-6, esl=0.45e-9, esr=4e-3), 0.0),
    (BulkCapacitor(name="PB330", capacitance=330e-6, line_resistance=30e-3), 0.0),
    (
        PowerInductor(
            name="PL1U",
            inductance=1e-6,
            r_dc=8e-3,
            core_loss_resistance=150.0,
            winding_capacitance=10e-12,
        ),
        450.0,
    ),
    (FerriteBead(name="FB600", inductance2=0.4e-6, resistance2=120.0), 450.0),
]


@pytest.mark.parametrize(("part", "series_r"), PARTS, ids=lambda p: getattr(p, "name", ""))
def test_slopes_match_moved_readings_at_a_fit(part, series_r):
    data = measure(part, 7, f=F, series_r=series_r)
    result = fit_impedance(
        data.f, data.z, rel_uncertainty=data.rel_uncertainty, valid=data.inside_window
    )
    net = CompiledNetwork(result.circuit, F)
    q = np.log([result.elements[n] for n in net.names])
    z = net.impedance(q)
    slopes = landmark_slopes(result.kind, F, z, net.jacobian(q))
    base = landmarks_for(result.kind, F, z)
    moved = []
    for name in net.names:
        values = dict(result.elements)
        values[name] *= math.exp(STEP)
        moved.append(landmarks_for(result.kind, F, network_impedance(result.circuit, F, values)))
    # Every landmark the model gives on the grid has a slope (c_par aside: the fitter
    # takes the fitted element for it), so no reading falls back to the moved readings.
    given = [k for k, v in base.items() if v is not None and k != "c_par"]
    assert given
    for key in given:
        slope = slopes[key]
        assert slope is not None, key
        steps = np.array([(m[key] - base[key]) / STEP for m in moved])
        scale = np.max(np.abs(steps))
        assert scale > 0, key
        assert np.max(np.abs(slope - steps)) <= AGREEMENT * scale, (key, slope, steps)


def test_no_slope_where_the_trace_is_not_plain():
    f = np.logspace(3, 8, 50)
    z = 0.01 + 1j * 2 * np.pi * f * 1e-9 + 1 / (2j * np.pi * f * 1e-6)
    z[10] = np.nan  # a reading that drops points is not followed
    slopes = landmark_slopes("capacitor", f, z, np.ones((2, f.size), complex))
    assert all(v is None for v in slopes.values())
