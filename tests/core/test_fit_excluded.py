"""Points left out for a reason other than the window (``excluded``) are dropped from the
fit but not counted, or warned about, as outside the measurable window."""

from __future__ import annotations

import numpy as np
import pytest

from bench.core.fitting import fit_impedance
from bench.errors import InputError


def _series_rlc(f):
    # 10 µF / 0.5 nH / 5 mΩ (docs/references.md §3 check part, derived: f0 = 2.2508 MHz)
    w = 2 * np.pi * f
    return 5e-3 + 1j * w * 0.5e-9 + 1 / (1j * w * 10e-6)


def test_excluded_points_are_dropped_but_not_counted_outside_the_window():
    f = np.logspace(2, 8, 201)
    z = _series_rlc(f)
    below_loop = f < 2e3
    fit = fit_impedance(f, z, model="series-rlc", excluded=below_loop)
    assert fit.quality.points_used == 201 - int(below_loop.sum())
    assert fit.quality.points_outside_window == 0
    assert not any("outside the measurable window" in w for w in fit.warnings)
    assert fit.elements["C"] == pytest.approx(10e-6, rel=1e-6)

    outside = np.ones(f.size, bool)
    outside[:5] = False
    both = fit_impedance(f, z, model="series-rlc", valid=outside, excluded=below_loop)
    # Outside the window is a fact about a point, whether or not it was also excluded.
    assert both.quality.points_outside_window == 5
    assert both.quality.points_used == fit.quality.points_used


def test_excluded_marks_must_match_the_grid():
    f = np.logspace(2, 8, 51)
    with pytest.raises(InputError, match="one True/False mark per frequency"):
        fit_impedance(f, _series_rlc(f), model="series-rlc", excluded=np.zeros(3, bool))
