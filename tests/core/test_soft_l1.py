"""The robust one-value fits of the mount and the pads (``soft_l1_nonnegative``) against
scipy's ``least_squares`` with the same soft-L1 loss and bound (a general-purpose
reference library; scipy.optimize documentation, ``loss="soft_l1"``), and against the
minimum's own condition: the cost is convex, so where its slope is zero, or positive at
the bound 0, is the answer [derived].
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import brentq, least_squares

from bench.core.fit_solve import soft_l1_nonnegative


def _cost(a, b, x):
    r = a * x - b
    return float(np.sum(2 * (np.sqrt(1 + r * r) - 1)))


def _slope(a, b, x):
    r = a * x - b
    return float(np.sum(2 * a * r / np.sqrt(1 + r * r)))


def _root(a, b, size):
    """Where the cost's slope is zero (the convex cost's minimum), to 1e-14."""
    return brentq(lambda t: _slope(a, b, t), 0.01 * size, 100 * size, xtol=1e-14 * size)


def _case(seed, true_x, size):
    rng = np.random.default_rng(seed)
    a = rng.uniform(0.2, 1.0, 200) / size
    b = a * true_x + rng.normal(size=200)
    b[rng.integers(0, 200, 8)] += rng.choice([-1, 1], 8) * 50.0  # glitches
    return a, b


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("size", [1e-11, 1e-3, 1.0, 1e3])
def test_the_minimum_of_a_value_of_any_size_agrees_with_scipy(seed, size):
    a, b = _case(seed, 7.0 * size, size)
    start = max(float(np.median(b / a)), 0.0)
    x = soft_l1_nonnegative(a, b, start, size)
    reference = least_squares(
        lambda p: a * p[0] - b,
        x0=[start],
        bounds=([0.0], [np.inf]),
        loss="soft_l1",
        x_scale=[size],
        xtol=1e-12,
        ftol=1e-12,
    ).x[0]
    assert x == pytest.approx(reference, rel=1e-6)
    assert x == pytest.approx(_root(a, b, size), rel=1e-6)


def test_a_value_whose_minimum_lies_below_zero_stops_at_zero():
    a, b = _case(11, -3.0, 1.0)
    x = soft_l1_nonnegative(a, b, 0.0, 1.0)
    assert x == pytest.approx(0.0, abs=1e-9)
    assert _slope(a, b, 0.0) > 0  # the cost rises from the bound


def test_a_start_at_zero_still_reaches_a_positive_minimum():
    a, b = _case(12, 5.0, 1.0)
    x = soft_l1_nonnegative(a, b, 0.0, 1.0)
    assert x == pytest.approx(5.0, rel=0.1)
    assert x == pytest.approx(_root(a, b, 1.0), rel=1e-6)
    assert _cost(a, b, x) < _cost(a, b, 0.0)
