"""Stitching set-ups of one part: inverse-variance merge and disagreement reports."""

from __future__ import annotations

import numpy as np
import pytest

from bench.core.conversions import series_through_s21, shunt_through_s21
from bench.core.fitting import fit_impedance
from bench.core.impedance import (
    ImpedanceData,
    impedance_as_given,
    impedance_from_series_through,
    impedance_from_shunt_through,
)
from bench.core.stitch import stitch
from bench.core.window import measurable_window, relative_uncertainty


def _truth(f: np.ndarray) -> np.ndarray:
    """An invented power inductor richer than the fit models: 2.2 µH with √f winding
    loss (40 mΩ at DC, doubling at 1 MHz), 5 kΩ core loss and 1.5 pF winding capacitance."""
    jw = 2j * np.pi * f
    winding = 0.04 * (1 + np.sqrt(f / 1e6)) + jw * 2.2e-6
    core = 1 / (1 / winding + 1 / 5e3)
    return 1 / (1 / core + jw * 1.5e-12)


def _measure(
    f: np.ndarray, method: str, rng: np.random.Generator, *, drift: float = 0.1, scale=1.0
) -> ImpedanceData:
    window = measurable_window(method=method, through_drift_db=drift)
    z = _truth(f) * scale
    u = relative_uncertainty(z, window)
    noisy = z * (1 + 0.3 * u * (rng.normal(size=f.size) + 1j * rng.normal(size=f.size)) / 2**0.5)
    if method == "shunt-through":
        return impedance_from_shunt_through(f, shunt_through_s21(noisy), through_drift_db=drift)
    return impedance_from_series_through(f, series_through_s21(noisy), through_drift_db=drift)


def _true_resonance() -> tuple[float, float]:
    f = np.logspace(7, 9, 400001)
    z = _truth(f)
    i = int(np.flatnonzero(np.diff(np.sign(z.imag)) < 0)[0])
    return float(f[i]), float(abs(z[i]))


def test_two_set_ups_recover_the_part_across_both_windows() -> None:
    rng = np.random.default_rng(5)
    low = _measure(np.logspace(3, 8, 301), "shunt-through", rng)
    high = _measure(np.logspace(5.5, 9, 301), "series-through", rng)
    # Neither alone holds both the inductance and the resonance inside its window.
    assert not low.inside_window[low.f > 3e7].any()
    assert not high.inside_window[high.f < 4e5].any()
    joined = stitch([low, high], ["shunt-through", "series-through"])
    assert joined.disagreements == ()
    data = joined.data
    assert data.inside_window.all() and data.f[0] == 1e3 and data.f[-1] == 1e9
    result = fit_impedance(
        data.f, data.z, rel_uncertainty=data.rel_uncertainty, valid=data.inside_window
    )
    srf, z_srf = _true_resonance()
    marks = result.landmarks
    # Tolerances of the recovery tests (L 2 %, SRF 2 %, |Z| at SRF 5 %).
    assert marks["l_low"] == pytest.approx(2.2e-6, rel=0.02)
    assert marks["srf"] == pytest.approx(srf, rel=0.02)
    assert marks["z_at_srf"] == pytest.approx(z_srf, rel=0.05)


def test_merge_weights_each_point_by_inverse_variance() -> None:
    f = np.logspace(3, 6, 31)
    a = impedance_as_given(f, np.full(f.size, 10.0 + 0j), rel_uncertainty=0.01)
    b = impedance_as_given(f, np.full(f.size, 10.0 * np.exp(0.01) + 0j), rel_uncertainty=0.02)
    joined = stitch([a, b], ["a", "b"], threshold=10.0)
    # ln Z = (ln a/0.01² + ln b/0.02²)/(1/0.01² + 1/0.02²); u = 1/√(1/0.01² + 1/0.02²).
    expected = np.log(10.0) + 0.01 * (1 / 0.02**2) / (1 / 0.01**2 + 1 / 0.02**2)
    np.testing.assert_allclose(np.log(joined.data.z).real, expected, rtol=1e-12)
    np.testing.assert_allclose(joined.data.rel_uncertainty, (1e4 + 2500) ** -0.5, rtol=1e-12)


def test_a_five_percent_disagreement_in_the_overlap_is_reported() -> None:
    rng = np.random.default_rng(8)
    # A steadier bench (0.02 dB drift) so that 5 % is well beyond the uncertainties.
    low = _measure(np.logspace(3, 8, 301), "shunt-through", rng, drift=0.02)
    high = _measure(np.logspace(5.5, 9, 301), "series-through", rng, drift=0.02)
    assert stitch([low, high], ["low", "high"]).disagreements == ()
    off = _measure(np.logspace(5.5, 9, 301), "series-through", rng, drift=0.02, scale=1.05)
    joined = stitch([low, off], ["shunt board", "series board"])
    # Where the combined uncertainty nears 5 % (the overlap's edges) a band may break.
    assert len(joined.disagreements) >= 1
    assert all(d.size == pytest.approx(0.05, abs=0.01) for d in joined.disagreements)
    worst = max(joined.disagreements, key=lambda d: d.points)
    assert worst.labels == ("shunt board", "series board")
    assert worst.size == pytest.approx(0.05, abs=0.01)
    overlap = low.f[low.inside_window]
    assert overlap[-1] >= worst.f_hi > worst.f_lo >= 10**5.5
    assert worst.points > 100
    assert "shunt board and series board differ by" in joined.warnings[0]


def test_labels_must_match_and_something_must_be_given() -> None:
    f = np.logspace(3, 6, 31)
    a = impedance_as_given(f, np.full(f.size, 1.0 + 0j), rel_uncertainty=0.01)
    with pytest.raises(ValueError, match="labels"):
        stitch([a, a], ["only one"])
    with pytest.raises(ValueError, match="at least one"):
        stitch([], [])


def _as_given(f, z, u, rng):
    scatter = (rng.normal(size=f.size) + 1j * rng.normal(size=f.size)) / np.sqrt(2)
    return impedance_as_given(f, z * np.exp(u * scatter), rel_uncertainty=u)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_a_constant_offset_inside_every_points_uncertainty_is_still_reported(seed) -> None:
    # A low-frequency analyser reading 3 % high against the VNA over a decade of overlap,
    # each point of the VNA uncertain by 2.5 %: no point is off by twice the combined
    # uncertainty, but the mean of 100 points is known to about 0.3 %.
    rng = np.random.default_rng(seed)
    f_low, f_high = np.geomspace(10, 1e6, 201), np.geomspace(1e5, 1e9, 401)
    z = lambda f: 0.01 + 1 / (2j * np.pi * f * 330e-6)  # noqa: E731
    low = _as_given(f_low, 1.03 * z(f_low), 0.003, rng)
    high = _as_given(f_high, z(f_high), 0.025, rng)
    joined = stitch([low, high], ["analyser", "vna"])
    # Noise may push a few points beyond twice their uncertainty too (a band); the
    # offset is one report over the whole overlap.
    (offset,) = [d for d in joined.disagreements if d.systematic]
    assert offset.systematic and offset.labels == ("analyser", "vna")
    assert offset.size == pytest.approx(0.03, abs=0.006)
    assert offset.f_lo == pytest.approx(1e5) and offset.f_hi == pytest.approx(1e6)
    assert offset.sigmas > 5
    assert any("throughout their overlap" in w for w in joined.warnings)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_set_ups_that_agree_or_differ_below_their_own_floor_are_not_reported(seed) -> None:
    rng = np.random.default_rng(seed)
    f_low, f_high = np.geomspace(10, 1e6, 201), np.geomspace(1e5, 1e9, 401)
    z = lambda f: 0.01 + 1 / (2j * np.pi * f * 330e-6)  # noqa: E731
    for scale in (1.0, 1.005):  # no offset; one below half the points' uncertainty
        low = _as_given(f_low, scale * z(f_low), 0.003, rng)
        high = _as_given(f_high, z(f_high), 0.025, rng)
        assert stitch([low, high], ["analyser", "vna"]).disagreements == ()
