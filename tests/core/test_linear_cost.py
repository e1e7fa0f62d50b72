"""Long sweeps: landmarks and fits cost time and memory linear in the points.

A linear sweep of many points (an analyser's maximum, a long export) must not make the
running median or the fit grow with the square of the points, and must give the same
figures as a logarithmic sweep of the same part.
"""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap

import numpy as np
import pytest

from bench.core import landmarks
from bench.core.fitting import MAX_FIT_POINTS, _spread_in_log, fit_impedance
from bench.core.landmarks import capacitor_landmarks, inductor_landmarks
from bench.core.models import FAMILIES


def series_rlc(f, r, ind, c):
    w = 2 * np.pi * f
    return r + 1j * w * ind + 1 / (1j * w * c)


def noisy(z, rel, seed):
    rng = np.random.default_rng(seed)
    return z * (1 + rel * (rng.normal(size=z.size) + 1j * rng.normal(size=z.size)) / np.sqrt(2))


def test_linear_sweep_gives_the_landmarks_of_a_log_sweep():
    # docs/references.md §3 [derived]: 10 µF / 0.5 nH / 5 mΩ -> f0 = 1/(2π√(LC)) = 2.2508 MHz.
    linear = np.linspace(10e3, 100e6, 200_001)
    log = np.geomspace(10e3, 100e6, 801)
    marks = capacitor_landmarks(linear, noisy(series_rlc(linear, 5e-3, 0.5e-9, 10e-6), 0.01, 1))
    reference = capacitor_landmarks(log, series_rlc(log, 5e-3, 0.5e-9, 10e-6))
    assert marks["srf"] == pytest.approx(2.2508e6, rel=2e-3)
    assert marks["c_low"] == pytest.approx(reference["c_low"], rel=0.01)
    assert marks["esl"] == pytest.approx(reference["esl"], rel=0.02)
    assert marks["esr_at_srf"] == pytest.approx(5e-3, rel=0.05)


def test_linear_sweep_of_an_inductor_finds_its_parallel_resonance():
    # docs/references.md §3 [derived]: 1 µH with 10 pF -> SRF 50.33 MHz.
    f = np.linspace(10e3, 200e6, 100_001)
    values = {"Rdc": 10e-3, "L": 1e-6, "Rp": 5e3, "Cp": 10e-12}
    marks = inductor_landmarks(f, noisy(FAMILIES["inductor"].impedance(f, values), 0.01, 2))
    assert marks["srf"] == pytest.approx(50.33e6, rel=2e-3)
    assert marks["l_low"] == pytest.approx(1e-6, rel=0.02)


@pytest.mark.parametrize(("size", "width"), [(301, 21), (30_001, 201)])
def test_running_median_is_the_plain_median_with_edges_repeated(size, width):
    # Small traces and large ones (scipy's filter) give the same medians.
    rng = np.random.default_rng(3)
    y = rng.normal(size=size)
    half = width // 2
    padded = np.pad(y, half, mode="edge")
    plain = np.array([np.median(padded[i : i + width]) for i in range(0, y.size, 97)])
    np.testing.assert_array_equal(landmarks._smooth(y, width)[::97], plain)


def test_points_spread_in_log_keep_sparse_stretches_and_bound_the_rest():
    f = np.linspace(1e3, 100e6, 1_000_000)
    pick = _spread_in_log(f, MAX_FIT_POINTS)
    assert len(pick) <= MAX_FIT_POINTS
    chosen = f[pick]
    assert np.all(np.diff(chosen) > 0)
    assert chosen[0] == f[0] and chosen[-1] == f[-1]
    # Every point of the sparse low end is kept: below 30 kHz the linear grid (100 Hz
    # steps) has fewer points per decade than the log spread's 800.
    assert np.count_nonzero(chosen < 30e3) == np.count_nonzero(f < 30e3)
    small = np.geomspace(1e3, 1e8, 801)
    assert _spread_in_log(small, MAX_FIT_POINTS) == slice(None)


def test_long_linear_sweep_is_fitted_with_every_point_counted():
    f = np.linspace(10e3, 100e6, 200_000)
    z = noisy(series_rlc(f, 5e-3, 0.5e-9, 10e-6), 0.01, 4)
    result = fit_impedance(f, z, rel_uncertainty=np.full(f.size, 0.01))
    assert result.quality.points_used == f.size
    assert result.quality.rms_log_error < 0.03
    assert result.landmarks["srf"] == pytest.approx(2.2508e6, rel=0.01)
    assert result.landmarks["c_low"] == pytest.approx(10e-6, rel=0.02)


@pytest.mark.skipif(sys.platform != "linux", reason="address-space limit via RLIMIT_AS on Linux")
def test_million_point_landmarks_fit_in_bounded_memory():
    # With the address space capped at 1.5 GB, a million-point linear sweep's landmarks
    # (which once asked for tens of GiB in the running median) must still come out.
    script = textwrap.dedent(
        """
        import resource
        resource.setrlimit(resource.RLIMIT_AS, (1536 * 2**20, 1536 * 2**20))
        import numpy as np
        from bench.core.landmarks import capacitor_landmarks
        f = np.linspace(1e3, 100e6, 1_000_000)
        w = 2 * np.pi * f
        z = 5e-3 + 1j * w * 0.5e-9 + 1 / (1j * w * 10e-6)
        print(capacitor_landmarks(f, z)["srf"])
        """
    )
    env_threads = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1"}
    done = subprocess.run(
        [sys.executable, "-c", script],
        capture_output=True,
        text=True,
        timeout=120,
        env={**os.environ, **env_threads},
    )
    assert done.returncode == 0, done.stderr
    assert float(done.stdout) == pytest.approx(2.2508e6, rel=1e-3)


def test_file_with_too_many_points_is_refused_before_it_is_read(tmp_path):
    from bench.errors import InputError
    from bench.touchstone import MAX_POINTS, load_measurement

    path = tmp_path / "long.s1p"
    rows = np.column_stack(
        [np.arange(1, MAX_POINTS + 2), np.ones(MAX_POINTS + 1), np.zeros(MAX_POINTS + 1)]
    )
    with path.open("w") as stream:
        stream.write("! an invented long sweep\n# Hz Z RI R 50\n")
        np.savetxt(stream, rows, fmt="%d")
    with pytest.raises(InputError) as caught:
        load_measurement(path)
    text = str(caught.value)
    assert str(path) in text and f"{MAX_POINTS + 1} data rows" in text
    assert "fewer points" in caught.value.hint


def test_huge_file_is_refused_by_its_size(tmp_path):
    from bench.errors import InputError
    from bench.touchstone import load_measurement

    path = tmp_path / "huge.s2p"
    with path.open("wb") as stream:
        stream.truncate(300_000_000)  # sparse: nothing is written, nothing may be read
    with pytest.raises(InputError, match="286 MiB"):
        load_measurement(path)
