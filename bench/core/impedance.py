"""The impedance chain: corrected S21 or S11 → Z → fixture removal → window and uncertainty.

One entry point per measuring method (shunt-through, series-through, reflection), and
:func:`impedance_as_given` for an impedance someone else measured (an impedance
analyser's file): no window cut, its weights from its own scatter unless given.

The window and the per-point uncertainty are judged on the measured impedance, before
the mount is removed, because that is what the analyser sees: a 1 mΩ part on a 0.2 mΩ
mount is measured as 1.2 mΩ against the noise floor, and removing the mount does not
lower the noise on it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from bench.core.conversions import reflection_z, series_through_z, shunt_through_z
from bench.core.fixture import Mount, open_admittance_from_z, remove_fixture
from bench.core.window import (
    DEFAULT_REFLECTION_UNCERTAINTY,
    DEFAULT_THROUGH_DRIFT_DB,
    DEFAULT_TRACE_NOISE_DB,
    Window,
    inside_window,
    measurable_window,
    relative_uncertainty,
    unbounded_window,
)

#: Smallest relative uncertainty :func:`estimate_scatter` gives a point (0.1 %).
SCATTER_FLOOR = 1e-3


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
    ff, s = _grid(f, s21n, "s21n")
    window = measurable_window(
        z0=z0,
        series_r=series_r,
        noise_floor_db=noise_floor_db,
        trace_noise_db=trace_noise_db,
        tolerance=tolerance,
        through_drift_db=through_drift_db,
    )
    return _finish(ff, shunt_through_z(s, z0, series_r), window, mount_short, open_admittance)


def _grid(f: ArrayLike, values: ArrayLike, name: str) -> tuple[NDArray, NDArray]:
    ff = np.asarray(f, dtype=float)
    v = np.asarray(values, dtype=complex)
    if ff.ndim != 1 or v.shape != ff.shape:
        raise ValueError(
            f"f and {name} must be 1-D arrays of the same length, got {ff.shape} and {v.shape}"
        )
    if ff.size >= 2 and not np.all(np.diff(ff) > 0):
        raise ValueError("the frequencies must be strictly increasing")
    return ff, v


def _finish(
    ff: NDArray[np.float64],
    z_measured: NDArray[np.complex128],
    window: Window,
    mount_short: ArrayLike | Mount | None,
    open_admittance: ArrayLike | None,
) -> ImpedanceData:
    if mount_short is None and open_admittance is None:
        z = z_measured
    else:
        short = 0.0 if mount_short is None else mount_short
        z = remove_fixture(z_measured, short, open_admittance, f=ff)
    return ImpedanceData(
        f=ff,
        z=z,
        rel_uncertainty=relative_uncertainty(z_measured, window),
        inside_window=inside_window(z_measured, window),
        window=window,
        z_measured=z_measured,
    )


def impedance_from_series_through(
    f: ArrayLike,
    s21n: ArrayLike,
    *,
    z0: float = 50.0,
    series_r: float = 0.0,
    mount_short: ArrayLike | Mount | None = None,
    mount_open: ArrayLike | None = None,
    open_admittance: ArrayLike | None = None,
    noise_floor_db: float = -100.0,
    trace_noise_db: float = DEFAULT_TRACE_NOISE_DB,
    through_drift_db: float = DEFAULT_THROUGH_DRIFT_DB,
    tolerance: float = 0.1,
) -> ImpedanceData:
    """Impedance of a series part from its through-normalised (or corrected) S21.

    ``Z = 2Ze·(1/S21n − 1)``. The series mount's own captures remove the fixture:
    ``mount_short`` is the zero-ohm strap's impedance (Ω, same grid, or a :class:`Mount`),
    ``mount_open`` the empty gap's impedance (Ω, same grid; its admittance is the gap's
    capacitance across the part; the strap's impedance is taken off it first, as in the
    usual open-short compensation) or, equivalently, ``open_admittance`` (S). Other
    arguments as in :func:`impedance_from_shunt_through`.
    """
    ff, s = _grid(f, s21n, "s21n")
    if mount_open is not None:
        if open_admittance is not None:
            raise ValueError("give the empty gap as mount_open or open_admittance, not both")
        z_open = np.asarray(mount_open, dtype=complex)
        if mount_short is not None:
            z_open = remove_fixture(z_open, mount_short, None, f=ff)
        open_admittance = open_admittance_from_z(z_open)
    window = measurable_window(
        z0=z0,
        series_r=series_r,
        noise_floor_db=noise_floor_db,
        trace_noise_db=trace_noise_db,
        tolerance=tolerance,
        through_drift_db=through_drift_db,
        method="series-through",
    )
    return _finish(ff, series_through_z(s, z0, series_r), window, mount_short, open_admittance)


def impedance_from_reflection(
    f: ArrayLike,
    gamma: ArrayLike,
    *,
    z0: float = 50.0,
    mount_short: ArrayLike | Mount | None = None,
    open_admittance: ArrayLike | None = None,
    reflection_uncertainty: float = DEFAULT_REFLECTION_UNCERTAINTY,
    noise_floor_db: float = -100.0,
    trace_noise_db: float = DEFAULT_TRACE_NOISE_DB,
    tolerance: float = 0.1,
) -> ImpedanceData:
    """Impedance of a part on a one-port from its corrected reflection ``gamma`` (S11).

    ``Z = Z0·(1 + Γ)/(1 − Γ)``. ``reflection_uncertainty`` is the one-port calibration's
    residual on |Γ| (a fraction, e.g. 0.005); ``mount_short`` (Ω or a :class:`Mount`) and
    ``open_admittance`` (S) remove the mount as for the two-port methods.
    """
    ff, g = _grid(f, gamma, "gamma")
    window = measurable_window(
        z0=z0,
        noise_floor_db=noise_floor_db,
        trace_noise_db=trace_noise_db,
        tolerance=tolerance,
        method="reflection",
        reflection_uncertainty=reflection_uncertainty,
    )
    return _finish(ff, reflection_z(g, z0), window, mount_short, open_admittance)


def estimate_scatter(z: ArrayLike, *, width: int = 21) -> NDArray[np.float64]:
    """Relative one-sigma scatter of each point of a smooth impedance curve, a fraction.

    From the second difference of ln Z along the points: for white noise of sigma s on
    each point it has sigma ``s·√6``, while a curve sampled densely adds little. A running
    median of its magnitude over ``width`` points (``median |N(0, 1)| = 0.6745``) makes
    it robust to a few glitches and to the sharp bend of a resonance: each bad point
    spoils three second differences, so three of them clustered at a resonance (where
    calibration residue turns Re Z negative) still leave the median of 21 clean (of 11
    they would not). Floored at :data:`SCATTER_FLOOR`.
    """
    lz = np.log(np.asarray(z, dtype=complex))
    n = lz.size
    if n < 3 or not np.all(np.isfinite(lz)):
        return np.full(n, np.nan if n else 0.0)
    d2 = lz[:-2] - 2.0 * lz[1:-1] + lz[2:]
    mag = np.sqrt((d2.real**2 + d2.imag**2) / 2.0)
    mag = np.concatenate([mag[:1], mag, mag[-1:]])
    w = max(1, min(width, n))
    half = w // 2
    padded = np.pad(mag, (half, w - 1 - half), mode="edge")
    local = np.median(np.lib.stride_tricks.sliding_window_view(padded, w), axis=1)
    return np.maximum(local / 0.6745 / np.sqrt(6.0), SCATTER_FLOOR)


def impedance_as_given(
    f: ArrayLike, z: ArrayLike, *, rel_uncertainty: ArrayLike | None = None
) -> ImpedanceData:
    """An impedance (Ω) measured elsewhere, taken as given: no window cut.

    Every finite point is inside (the window is :func:`unbounded_window`); the weights
    come from ``rel_uncertainty`` (a fraction per point, or one number) when given,
    otherwise from the data's own scatter (:func:`estimate_scatter`).
    """
    ff, zz = _grid(f, z, "z")
    if rel_uncertainty is None:
        rel = estimate_scatter(zz)
    else:
        rel = np.broadcast_to(np.asarray(rel_uncertainty, dtype=float), ff.shape).copy()
        if not np.all(rel > 0):
            raise ValueError("rel_uncertainty must be a positive fraction at every point")
    return ImpedanceData(
        f=ff,
        z=zz,
        rel_uncertainty=rel,
        inside_window=np.isfinite(zz),
        window=unbounded_window(),
        z_measured=zz,
    )
