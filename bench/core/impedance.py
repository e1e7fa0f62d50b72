"""The impedance chain: corrected S21 → Z → fixture removal → window and uncertainty.

The window and the per-point uncertainty are judged on the measured impedance, before
the mount is removed, because that is what the analyser sees: a 1 mΩ part on a 0.2 mΩ
mount is measured as 1.2 mΩ against the noise floor, and removing the mount does not
lower the noise on it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from bench.core.conversions import shunt_through_z
from bench.core.fixture import Mount, remove_fixture
from bench.core.window import (
    DEFAULT_THROUGH_DRIFT_DB,
    DEFAULT_TRACE_NOISE_DB,
    Window,
    inside_window,
    measurable_window,
    relative_uncertainty,
)


@dataclass(frozen=True, eq=False)
class ImpedanceData:
    """A part's impedance on a frequency grid with its measurement quality.

    ``f`` (Hz, increasing), ``z`` (Ω, fixture removed), ``rel_uncertainty`` (one-sigma
    fraction of |Z| per point, from the measured impedance), ``inside_window`` (bool per
    point), ``window`` (the set-up's :class:`Window`), ``z_measured`` (Ω, before fixture
    removal; equal to ``z`` when nothing was removed).
    """

    f: NDArray[np.float64]
    z: NDArray[np.complex128]
    rel_uncertainty: NDArray[np.float64]
    inside_window: NDArray[np.bool_]
    window: Window
    z_measured: NDArray[np.complex128] | None = None

    @property
    def points_outside_window(self) -> int:
        """Number of points whose uncertainty exceeds the window's tolerance."""
        return int(np.count_nonzero(~self.inside_window))

    def __len__(self) -> int:
        return int(self.f.size)


def impedance_from_shunt_through(
    f: ArrayLike,
    s21n: ArrayLike,
    *,
    z0: float = 50.0,
    series_r: float = 0.0,
    mount_short: ArrayLike | Mount | None = None,
    open_admittance: ArrayLike | None = None,
    noise_floor_db: float = -100.0,
    trace_noise_db: float = DEFAULT_TRACE_NOISE_DB,
    tolerance: float = 0.1,
    through_drift_db: float = DEFAULT_THROUGH_DRIFT_DB,
) -> ImpedanceData:
    """Impedance of a shunt part from its through-normalised (or corrected) S21.

    ``f`` in Hz (1-D, strictly increasing), ``s21n`` complex on the same grid, ``z0`` > 0
    and ``series_r`` >= 0 in Ω. ``mount_short`` is the shorted mount's impedance on the
    same grid (Ω) or a fitted :class:`Mount`; ``open_admittance`` the empty mount's
    shunt admittance (S). Window arguments as in :func:`bench.core.window.measurable_window`.
    """
    ff = np.asarray(f, dtype=float)
    s = np.asarray(s21n, dtype=complex)
    if ff.ndim != 1 or s.shape != ff.shape:
        raise ValueError(
            f"f and s21n must be 1-D arrays of the same length, got {ff.shape} and {s.shape}"
        )
    if ff.size >= 2 and not np.all(np.diff(ff) > 0):
        raise ValueError("the frequencies must be strictly increasing")
    window = measurable_window(
        z0=z0,
        series_r=series_r,
        noise_floor_db=noise_floor_db,
        trace_noise_db=trace_noise_db,
        tolerance=tolerance,
        through_drift_db=through_drift_db,
    )
    z_measured = shunt_through_z(s, z0, series_r)
    if mount_short is None and open_admittance is None:
        z = z_measured
    else:
        short = 0.0 if mount_short is None else mount_short
        z = remove_fixture(z_measured, short, open_admittance, f=ff)
    rel = relative_uncertainty(z_measured, window)
    inside = inside_window(z_measured, window)
    return ImpedanceData(
        f=ff,
        z=z,
        rel_uncertainty=rel,
        inside_window=inside,
        window=window,
        z_measured=z_measured,
    )
