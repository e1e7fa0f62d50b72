"""A gain-phase analyser's receiver ratio as an :class:`ImpedanceData`, for stitching.

The ratio B/A of the divider ``H = Zp/(Zp + r_ref)`` has the form of a shunt-through
transmission ``S21n = Z/(Z + Ze/2)`` with ``Ze = 2·r_ref`` (docs/references.md §1
[derived]). Its measurable window and per-point uncertainty are therefore those of
:func:`bench.core.window.measurable_window` on ``z0 = 2·r_ref``, with the analyser's
ratio noise (relative to ``|H| = 1``) as the floor and its ratio accuracy as the
multiplicative error. Receiver B's input impedance is removed first (it sits across the
fixture's terminals), then the mount.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from bench.core.conversions import gain_phase_z
from bench.core.fixture import Mount, remove_fixture
from bench.core.impedance import ImpedanceData
from bench.core.window import inside_window, measurable_window, relative_uncertainty


def impedance_from_gain_phase(
    f: ArrayLike,
    ratio: ArrayLike,
    *,
    r_ref: float,
    z_in: ArrayLike | None = None,
    mount_short: ArrayLike | Mount | None = None,
    noise_floor_db: float = -110.0,
    ratio_noise_db: float = 0.005,
    ratio_drift_db: float = 0.02,
    tolerance: float = 0.1,
) -> ImpedanceData:
    """The part's impedance from a gain-phase analyser's ratio ``ratio`` = B/A.

    ``f`` in Hz (1-D, increasing), ``r_ref`` the reference resistor (Ω), ``z_in`` receiver
    B's input impedance (Ω, scalar or per point; None: ideal), ``mount_short`` the shorted
    mount (Ω on the same grid, or a fitted :class:`Mount`). ``noise_floor_db`` is the ratio
    noise relative to a ratio of 1, ``ratio_noise_db`` and ``ratio_drift_db`` the ratio's
    random and systematic relative errors, ``tolerance`` the window's bound.
    """
    ff = np.asarray(f, dtype=float)
    h = np.asarray(ratio, dtype=complex)
    if ff.ndim != 1 or h.shape != ff.shape:
        raise ValueError(f"f and ratio must be 1-D of one length, got {ff.shape} and {h.shape}")
    window = measurable_window(
        z0=2.0 * r_ref,
        noise_floor_db=noise_floor_db,
        trace_noise_db=ratio_noise_db,
        tolerance=tolerance,
        through_drift_db=ratio_drift_db,
    )
    z_measured = gain_phase_z(h, r_ref=r_ref, z_in=z_in)
    z = z_measured if mount_short is None else remove_fixture(z_measured, mount_short, f=ff)
    # The uncertainty follows the divider the ratio measures (before z_in is removed).
    z_divider = gain_phase_z(h, r_ref=r_ref)
    return ImpedanceData(
        f=ff,
        z=z,
        rel_uncertainty=relative_uncertainty(z_divider, window),
        inside_window=inside_window(z_divider, window),
        window=window,
        z_measured=z_measured,
    )
