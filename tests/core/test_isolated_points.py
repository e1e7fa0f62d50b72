"""Lone points inside the window, a decade from any other usable point (docs/design.md §4).

A fit bends to a lone point at no cost to the rest of the band, so its residual cannot
show a glitch there: the point is judged against the sweep's own points beside it
(outside the window, so known less well, but measured). The parts here are written out
in the test, not taken from the simulator:

- a 2.2 µF class II MLCC (constant loss tangent 0.025 in the constant-phase form,
  docs/references.md §9; 6 mΩ, 380 pH) measured by one-port reflection on 50 Ω, where
  only its low-frequency reactance lies inside the window; a phase slip of 0.4 rad on Γ
  at one high frequency turns a milliohm reading into ten ohms, inside the window;
- a parallel R-L-C tank whose sharp resonance peak reaches into the window at one or
  two points: real, and in line with its neighbours (its phase swings through it).

The thresholds are the screening's own (a few sigma, common practice, no source).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from bench.core import robust
from bench.core.conversions import reflection_s11
from bench.core.fitting import fit_impedance
from bench.core.impedance import impedance_from_reflection
from bench.units import format_si

F = np.geomspace(1e4, 2e7, 331)
SLIP = int(np.argmin(np.abs(F - 8.6e6)))
D_GAMMA = 2e-3


def class_ii_mlcc(f, c=2.2e-6, tan_delta=0.025, esr=6e-3, esl=380e-12):
    w = 2 * np.pi * f
    n = (2 / np.pi) * np.arctan(tan_delta)  # tan(nπ/2) = tan δ
    y = 1j * w * c * (1j * w / (2 * np.pi * 1e3)) ** (-n)
    return esr + 1j * w * esl + 1 / y


def reflected(gamma):
    return impedance_from_reflection(
        F, gamma, reflection_uncertainty=D_GAMMA, trace_noise_db=0.0, noise_floor_db=-110.0
    )


def fitted(data):
    return fit_impedance(
        data.f, data.z, rel_uncertainty=data.rel_uncertainty, valid=data.inside_window
    )


@pytest.fixture(params=[1, 5, 8])
def mlcc_by_reflection(request):
    # Without the check, the fit of seeds 1 and 8 bent through the slip (a resonance
    # near 540 kHz, where the part's is near 5.7 MHz), while the others' residual
    # screening caught it: whether it is caught must not depend on the noise.
    rng = np.random.default_rng(request.param)
    e = rng.standard_normal(F.size) + 1j * rng.standard_normal(F.size)
    clean = reflection_s11(class_ii_mlcc(F)) + D_GAMMA * e / math.sqrt(2)
    slipped = clean.copy()
    slipped[SLIP] *= np.exp(0.4j)
    return reflected(clean), reflected(slipped)


def test_a_phase_slip_landing_in_the_window_is_left_out_and_changes_nothing(mlcc_by_reflection):
    clean, slipped = mlcc_by_reflection
    inside = np.flatnonzero(slipped.inside_window)
    assert slipped.inside_window[SLIP] and not clean.inside_window[SLIP]  # the trap
    assert F[inside[-2]] < F[SLIP] / 50  # every other usable point lies far below
    reference, result = fitted(clean), fitted(slipped)
    assert result.point_status[SLIP] == "isolated"
    assert {
        "reason": "isolated",
        "count": 1,
        "f_lo": F[SLIP],
        "f_hi": F[SLIP],
        "frequencies": [F[SLIP]],
    } in result.to_json()["excluded"]
    assert f"1 point left out as isolated (at {format_si(F[SLIP], 'Hz')})" in result.warnings
    assert result.f_range[1] < F[SLIP] / 50
    # The fit is the one made without the glitch: same points, same model, same values.
    assert result.quality.points_used == reference.quality.points_used
    assert (result.model, result.order) == (reference.model, reference.order)
    for name, value in reference.elements.items():
        assert result.elements[name] == pytest.approx(value, rel=1e-6), name
    # Nothing near the resonance is measured, and the warning says so.
    assert result.landmarks == reference.landmarks
    assert result.landmark_sources["c_low"] == "data"
    assert any(
        "series resonance" in w and ("outside the sweep" in w or "from the model" in w)
        for w in result.warnings
    ), result.warnings


def tank(f, f0=1e6, q=50.0, r=200.0):
    """A parallel R-L-C: |Z| peaks at ``r`` at ``f0``, its phase passing through 0."""
    x = q * (f / f0 - f0 / f)
    return r / (1 + 1j * x)


def peak_case(points_in: int):
    """A tank swept 10 kHz to 100 MHz: a low band used, the peak's top points used (the
    window's lower edge just below them), everything between outside."""
    f = np.geomspace(1e4, 1e8, 401)
    z = tank(f)
    top = np.argsort(-np.abs(z))[:points_in]
    edge = np.abs(z[top]).min() * 0.99
    used = np.zeros(f.size, bool)
    used[:40] = True
    used[top] = True
    u = np.where(np.abs(z) >= edge, 0.01, 0.05)
    return f, z, u, used, top


@pytest.mark.parametrize("points_in", [1, 2])
def test_a_resonance_peak_reaching_into_the_window_is_kept(points_in):
    f, z, u, used, _top = peak_case(points_in)
    assert np.all(np.diff(np.flatnonzero(used)[-points_in:]) == 1)
    assert not robust.isolated(f, z, u, used, np.ones(f.size, bool)).any()


@pytest.mark.parametrize("factor", [30.0, 1 / 30.0, 3 * np.exp(1.2j)])
def test_a_spike_where_the_sweep_is_smooth_is_found(factor):
    f, z, u, used, _top = peak_case(1)
    z = z.copy()
    spike = 300  # 10 MHz, where the tank's impedance falls smoothly
    z[spike] *= factor
    used[spike] = True
    found = robust.isolated(f, z, u, used, np.ones(f.size, bool))
    assert np.flatnonzero(found).tolist() == [spike]


def test_a_spike_at_the_end_of_the_sweep_is_judged_on_the_line_before_it():
    f, z, u, used, top = peak_case(1)
    z = z.copy()
    used[top] = False
    used[-1] = True
    z[-1] *= 20
    found = robust.isolated(f, z, u, used, np.ones(f.size, bool))
    assert np.flatnonzero(found).tolist() == [f.size - 1]
    z[-1] /= 20  # in line with the points before it: kept
    assert not robust.isolated(f, z, u, used, np.ones(f.size, bool)).any()


def test_only_lone_points_are_judged_and_only_against_measured_neighbours():
    f, z, u, used, _top = peak_case(1)
    z = z.copy()
    z[300] *= 30
    near = used.copy()
    near[43] = True  # three points from the low band: the residual screening's to judge
    z[43] *= 30
    assert not robust.isolated(f, z, u, near, np.ones(f.size, bool))[43]
    three = used.copy()
    three[299:302] = True  # a run of three is a feature, not a glitch
    assert not robust.isolated(f, z, u, three, np.ones(f.size, bool)).any()
    alone = used.copy()
    alone[300] = True
    assert robust.isolated(f, z, u, alone, np.ones(f.size, bool))[300]
    unmeasured = np.ones(f.size, bool)
    unmeasured[41:300] = unmeasured[301:] = False  # nothing to judge it against
    assert not robust.isolated(f, z, u, alone, unmeasured)[300]
    # Far outside the window a reading is the floor's noise, nine times the reading (one
    # sigma) here: a tenfold spike is within it and stays; a thirtyfold one lies 4.5
    # sigmas off the line between them and goes, as a glitch landing in the window below
    # the floor would.
    vague = np.where(alone, u, 9.0)
    assert robust.isolated(f, z, vague, alone, np.ones(f.size, bool))[300]
    z[300] /= 3
    assert not robust.isolated(f, z, vague, alone, np.ones(f.size, bool))[300]


def test_the_kind_is_read_from_the_band_not_from_a_lone_glitch_below_it():
    """An invented 1 µH power inductor (10 mΩ winding, 3 pF) swept from 100 Hz, where
    everything below 50 kHz lies under the window's floor and is known to a factor of
    ten at best, as glitches of their own leave it. One glitch at 300 Hz reads 0.1 − 0.2j
    Ω: capacitive, inside the window, and within the noise of neighbours too vague to
    show it out of line.
    It is the only point in the lowest quarter of the used band; the kind must come from
    the band above it."""
    f = np.geomspace(100.0, 2e8, 201)
    w = 2 * np.pi * f
    z = 1 / (1 / (10e-3 + 1j * w * 1e-6) + 1j * w * 3e-12)
    rng = np.random.default_rng(2)
    z = z * (1 + 0.005 * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)))
    lone = int(np.argmin(np.abs(f - 300.0)))
    z[lone] = 0.1 - 0.2j
    inside = (f > 5e4) | (np.arange(f.size) == lone)
    u = np.where(inside, 0.005, 9.0)
    assert not robust.isolated(f, z, u, inside, np.ones(f.size, bool)).any()  # the trap
    result = fit_impedance(f, z, rel_uncertainty=u, valid=inside)
    assert result.kind == "inductor"
    assert result.point_status[lone] != "used"
    # An inductor's low-frequency inductance is Im Z / ω (handbook definition).
    assert result.landmarks["l_low"] == pytest.approx(1e-6, rel=0.03)
