"""The DC resistance of an inductor or bead: which value a fit gives, and when it says
that the points cannot hold it (docs/design.md §4, landmarks of a fit).

The parts are invented ferrite beads: a winding resistance Rdc in series with a core
whose permeability relaxes in the Cole-Cole form ``μ0/(1 + (j f/fc)^(1−α))`` (Cole and
Cole 1941, from memory), a winding capacitance across both. They are measured by
one-port reflection on 50 Ω, where a resistance of a tenth of an ohm beside an ohm or
two of reactance carries tens of milliohms of noise per point: the noise is added to
Γ (``dZ/Z = dΓ·(Z + Z0)²/(2Z·Z0)``, docs/design.md §4), with one glitched point.
Tolerance on a measured r_dc: the project's 5 % (common practice, no source).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from bench.core.conversions import reflection_s11
from bench.core.fit_landmarks import (
    MEDIAN_STANDARD_ERROR,
    MODEL_AGREEMENT,
    READING_AGREEMENT,
    merge_landmarks,
    r_dc_reading_error,
)
from bench.core.fitting import fit_impedance
from bench.core.impedance import impedance_from_reflection
from bench.core.landmarks import dc_band, landmarks_for

RDC = 0.08
NOT_DC = "not the DC value"
FROM_MODEL = "comes from the model"


def bead(f, *, l0=1e-6, fc=30e6, alpha=0.3, rdc=RDC, cp=1.2e-12):
    """Rdc + a Cole-Cole ferrite core of low-frequency inductance ``l0``, ``cp`` across."""
    w = 2 * np.pi * f
    core = 1j * w * l0 / (1 + (1j * f / fc) ** (1 - alpha))
    return 1 / (1 / (rdc + core) + 1j * w * cp)


def reflected(f, z, d_gamma, seed, tolerance=0.1):
    """The part measured by reflection with noise ``d_gamma`` on Γ (the calibration's
    residual stated as the same, so the points' uncertainty is the noise they carry) and
    one glitched point in the middle of the band."""
    rng = np.random.default_rng(seed)
    e = rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)
    gamma = reflection_s11(z) + d_gamma * e / math.sqrt(2)
    gamma[f.size // 2] *= 1.05 * np.exp(0.05j)
    return impedance_from_reflection(
        f,
        gamma,
        reflection_uncertainty=d_gamma,
        trace_noise_db=0.0,
        noise_floor_db=-110.0,
        tolerance=tolerance,
    )


def fitted(data):
    return fit_impedance(
        data.f, data.z, rel_uncertainty=data.rel_uncertainty, valid=data.inside_window
    )


def r_dc_warnings(result):
    return [w for w in result.warnings if w.startswith("r_dc")]


# Reading of the band and its standard error ---------------------------------------------


def test_r_dc_is_read_over_the_dc_band():
    f = np.geomspace(1e4, 1e9, 401)
    band = dc_band(f)
    assert f[band][-1] <= 1e4 * 10 ** (1 / 3) < f[np.count_nonzero(band)]
    z = bead(f)
    assert landmarks_for("inductor", f, z)["r_dc"] == pytest.approx(np.median(z.real[band]))
    # A sparse grid: the lowest three points.
    sparse = np.geomspace(1e4, 1e9, 6)
    assert list(dc_band(sparse)) == [True, True, True, False, False, False]


def test_the_reading_error_is_the_standard_error_of_its_median():
    # √(π/2)·σ/√n (docs/references.md §11), σ = |Z|·u/√2 for one component.
    assert round(MEDIAN_STANDARD_ERROR, 4) == 1.2533
    f = np.geomspace(1e4, 1e9, 401)
    z = np.full(f.size, RDC + 0.5j)  # a flat resistance
    u = np.full(f.size, 0.04)
    used = np.ones(f.size, bool)
    n = np.count_nonzero(dc_band(f))
    expected = 1.2533 * abs(z[0]) * 0.04 / math.sqrt(2) / math.sqrt(n)
    assert r_dc_reading_error(f, z, u, used, z) == pytest.approx(expected, rel=1e-4)
    # Taken over the used points' band, from the first used point.
    later = f >= 2e4
    n_later = np.count_nonzero(dc_band(f[later]))
    assert r_dc_reading_error(f, z, u, later, z) == pytest.approx(
        expected * math.sqrt(n / n_later), rel=1e-4
    )


def test_no_reading_error_where_the_model_is_not_flat_over_the_band():
    f = np.geomspace(1e6, 1e9, 401)
    z = bead(f)  # the ferrite's loss rises across the band from 1 MHz
    band = dc_band(f)
    assert z.real[band][-1] / z.real[band][0] > 1.5
    assert r_dc_reading_error(f, z, np.full(f.size, 0.04), np.ones(f.size, bool), z) is None


# The merge ---------------------------------------------------------------------------------


def test_a_model_within_twice_the_readings_standard_error_stands_for_it():
    data, model = {"r_dc": 0.134}, {"r_dc": 0.126}
    assert abs(model["r_dc"] / data["r_dc"] - 1) > MODEL_AGREEMENT
    assert READING_AGREEMENT == 2.0
    cases = [(None, "data"), ({"r_dc": None}, "data"), ({"r_dc": 0.003}, "data")]
    cases += [({"r_dc": 0.0041}, "model"), ({"r_dc": 0.015}, "model")]
    for error, source in cases:
        marks, sources = merge_landmarks(data, model, reading_error=error)
        assert sources["r_dc"] == source, error
        assert marks["r_dc"] == (model if source == "model" else data)["r_dc"]


def test_the_reading_error_moves_no_other_landmark():
    data, model = {"l_low": 1.0e-6, "srf": 100e6}, {"l_low": 1.1e-6, "srf": 110e6}
    marks, sources = merge_landmarks(data, model, reading_error={"r_dc": 1.0})
    assert sources == {"l_low": "data", "srf": "data"}
    assert marks == data


def test_points_that_agree_with_the_model_give_the_models_value():
    data, model = {"r_dc": 0.080}, {"r_dc": 0.081}
    assert merge_landmarks(data, model)[1]["r_dc"] == "model"
    assert merge_landmarks(data, model, reading_error={"r_dc": 1e-5})[1]["r_dc"] == "model"


# Whole fits of invented beads ----------------------------------------------------------


@pytest.mark.parametrize(("d_gamma", "seed"), [(1e-4, 1), (2.5e-4, 2)])
def test_swept_from_10_khz_r_dc_is_measured(d_gamma, seed):
    # From 10 kHz the ferrite adds under 1 mΩ to the bottom third of a decade: r_dc is
    # the winding's, within 5 %, nothing is said, and the points hold it (quiet, and
    # with each point's uncertainty near the window's 10 %).
    f = np.geomspace(1e4, 1e9, 401)
    data = reflected(f, bead(f), d_gamma, seed)
    assert np.all(data.inside_window[dc_band(f)])
    result = fitted(data)
    assert r_dc_warnings(result) == []
    assert result.landmarks["r_dc"] == pytest.approx(RDC, rel=0.05)
    measured = landmarks_for("inductor", data.f, data.z, data.inside_window)["r_dc"]
    assert measured == pytest.approx(RDC, rel=0.05)  # the points agree with the model


@pytest.mark.parametrize(("d_gamma", "seed"), [(1e-4, 3), (2e-3, 4)])
def test_swept_from_1_mhz_where_core_loss_dominates_it_is_named(d_gamma, seed):
    # From 1 MHz the 1 µH core's loss is most of Re Z and rises by three quarters over
    # the bottom third of a decade: r_dc is no DC value, quiet or noisy.
    f = np.geomspace(1e6, 1e9, 401)
    result = fitted(reflected(f, bead(f), d_gamma, seed))
    named = r_dc_warnings(result)
    assert len(named) == 1 and NOT_DC in named[0], result.warnings
    assert result.landmarks["r_dc"] > 5 * RDC


def small_bead(f, fc):
    """220 nH: about 1.4 Ω of reactance at 1 MHz, the core relaxing at ``fc``."""
    return bead(f, l0=0.22e-6, fc=fc, alpha=0.2)


@pytest.mark.parametrize("seed", [5, 8, 12])
def test_a_trend_the_model_holds_is_named_though_noise_hides_it_in_the_points(seed):
    # Core loss relaxing at 1 GHz adds 5 to 21 mΩ over the bottom third of a decade from
    # 1 MHz (true Re Z 85 to 101 mΩ, Rdc 80 mΩ): a real rise of 18 %. Per point the
    # reflection carries about 35 mΩ of noise on Re Z, so the points' halves alone do not
    # resolve it; the model, following the whole band, does, and the points do not
    # contradict it.
    f = np.geomspace(1e6, 1e9, 401)
    z_true = small_bead(f, 1e9)
    band = dc_band(f)
    assert z_true.real[band][-1] / z_true.real[band][0] - 1 == pytest.approx(0.18, abs=0.01)
    result = fitted(reflected(f, z_true, 2e-3, seed))
    named = r_dc_warnings(result)
    assert len(named) == 1 and NOT_DC in named[0], result.warnings


@pytest.mark.parametrize("points", [121, 401])
def test_noise_alone_is_not_named_and_the_model_stands_for_the_reading(points):
    # The same bead without core loss in the band: Re Z is 80 mΩ throughout, the noisy
    # points' halves differ by chance only. Nothing is said, and r_dc is the model's,
    # which follows the whole band: over twenty measurements it lies nearer the truth
    # than the points' median (rms), each within three of the reading's standard errors.
    f = np.geomspace(1e6, 1e9, points)
    z_true = small_bead(f, 1e13)
    model_error, reading_error = [], []
    for seed in range(100, 120):
        data = reflected(f, z_true, 2e-3, seed)
        result = fitted(data)
        assert r_dc_warnings(result) == [], (seed, result.warnings)
        used = np.array([s == "used" for s in result.point_status])
        error = r_dc_reading_error(f, data.z, data.rel_uncertainty, used, result.impedance(f))
        assert error is not None  # the model is flat over the band
        assert result.landmarks["r_dc"] == pytest.approx(RDC, abs=3 * error)
        measured = landmarks_for("inductor", f[used], data.z[used])["r_dc"]
        model = landmarks_for("inductor", f, result.impedance(f))["r_dc"]
        if abs(model - measured) <= READING_AGREEMENT * error:
            assert result.landmark_sources["r_dc"] == "model", seed
            assert result.landmarks["r_dc"] == pytest.approx(model, rel=1e-9)
        model_error.append(result.landmarks["r_dc"] / RDC - 1)
        reading_error.append(measured / RDC - 1)
    rms = [float(np.sqrt(np.mean(np.square(e)))) for e in (model_error, reading_error)]
    assert rms[0] < 0.75 * rms[1], rms


@pytest.mark.parametrize("seed", [8, 9])
def test_r_dc_the_points_do_not_hold_is_the_models_as_the_fit_says(seed):
    # From 10 kHz the 80 mΩ winding lies below a 30 % window on this reflection: most
    # points of the bottom third of a decade are outside it, and the few inside are
    # those the noise lifted. The fit says r_dc comes from the model, and gives the
    # model's value, not a reading from the points higher up (here 30 % and more too
    # high).
    f = np.geomspace(1e4, 1e9, 401)
    data = reflected(f, small_bead(f, 1e13), 2e-3, seed, tolerance=0.3)
    assert np.count_nonzero(data.inside_window[dc_band(f)]) < np.count_nonzero(dc_band(f)) / 2
    result = fitted(data)
    named = r_dc_warnings(result)
    assert len(named) == 1 and FROM_MODEL in named[0], result.warnings
    assert result.landmark_sources["r_dc"] == "model"
    model = landmarks_for("inductor", f, result.impedance(f))["r_dc"]
    assert result.landmarks["r_dc"] == pytest.approx(model, rel=1e-9)
    measured = landmarks_for("inductor", data.f, data.z, data.inside_window)["r_dc"]
    assert measured > 1.3 * RDC
    assert abs(result.landmarks["r_dc"] - RDC) < 0.5 * abs(measured - RDC)


def test_esl_from_the_model_alone_is_said_when_no_point_above_resonance_is_used():
    # A capacitor measured only below its series resonance (reflection on a low-ESR part,
    # say): the ESL, like the SRF, is the model's extrapolation and the warning says so.
    import numpy as np

    from bench.core.fitting import fit_impedance

    f = np.geomspace(1e3, 100e6, 301)
    w = 2 * np.pi * f
    z = 5e-3 + 1j * w * 0.5e-9 + 1 / (1j * w * 1e-6)  # SRF 7.1 MHz
    below = f < 7.1e6 / 5
    fit = fit_impedance(f, z, model="series-rlc", valid=below)
    said = [w for w in fit.warnings if "lies outside the measurable window" in w]
    assert said and "and esl come from the model" in said[0], fit.warnings
    whole = fit_impedance(f, z, model="series-rlc")
    assert not any("esl come from the model" in w for w in whole.warnings)
