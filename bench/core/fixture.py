"""Removing the fixture: the mount's series impedance (from a shorted mount) and,
optionally, its shunt admittance (from an empty, open mount).

In shunt-through the mount sits in series with the part, so a short in the mount
measures the mount alone, ``Zs``; with an open-mount admittance ``Yo`` the part is
``Zdut = (Zm − Zs) / (1 − (Zm − Zs)·Yo)`` (impedance-measurement handbooks; REFERENCES
§4), and without it ``Zdut = Zm − Zs``. The short may be used point by point, or as a
fitted ``Rm + jωLm`` that carries no measurement noise into the part's data.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.optimize import least_squares

TWO_PI = 2.0 * math.pi


@dataclass(frozen=True)
class Mount:
    """A fitted mount: series resistance ``r`` (Ω, >= 0) and inductance ``l`` (H, >= 0)."""

    r: float
    l: float  # noqa: E741 - the engineer's name for it

    def impedance(self, f: ArrayLike) -> NDArray[np.complex128]:
        """``r + j·2πf·l`` (Ω) at frequencies ``f`` (Hz)."""
        ff = np.asarray(f, dtype=float)
        return self.r + 1j * TWO_PI * ff * self.l


def _robust_scale(residual: NDArray[np.float64]) -> float:
    """Median absolute deviation as a standard deviation, never zero."""
    mad = float(np.median(np.abs(residual - np.median(residual)))) * 1.4826
    return mad if mad > 0 else max(float(np.max(np.abs(residual))), 1e-300) * 1e-3 + 1e-300


def fit_mount(f: ArrayLike, z_short: ArrayLike, valid: ArrayLike | None = None) -> Mount:
    """Fit ``Rm + jωLm`` to a shorted-mount capture.

    ``f`` in Hz (> 0, at least 3 points used), ``z_short`` the measured complex
    impedance of the shorted mount (Ω), ``valid`` an optional boolean mask of the points
    to use (e.g. those above a ground-loop corner). Re Z and Im Z/ω are each fitted with
    a soft-L1 robust loss scaled by their median absolute deviation, so a few points
    lifted by noise, a ground loop or a resonance do not drag the result. Im Z is fitted
    as ``ω·Lm`` with residuals scaled by ω, so the noisy low-frequency reactance (a few µΩ)
    counts as little as it should. Both values are bounded at zero.
    """
    ff = np.asarray(f, dtype=float)
    zz = np.asarray(z_short, dtype=complex)
    if ff.shape != zz.shape or ff.ndim != 1:
        raise ValueError(
            f"f and z_short must be 1-D arrays of the same length, got {ff.shape} and {zz.shape}"
        )
    use = np.isfinite(zz) & np.isfinite(ff) & (ff > 0)
    if valid is not None:
        use &= np.asarray(valid, dtype=bool)
    if np.count_nonzero(use) < 3:
        raise ValueError(
            f"fit_mount needs at least 3 usable points of the mount short, "
            f"got {int(np.count_nonzero(use))}; widen the valid range or re-measure the short"
        )
    ff, zz = ff[use], zz[use]
    omega = TWO_PI * ff

    def robust_location(values: NDArray[np.float64], weights: NDArray[np.float64]) -> float:
        # Minimise sum rho(w·(v − x)/s) for x >= 0, starting from the weighted median.
        start = max(float(np.median(values)), 0.0)
        scale = _robust_scale(weights * (values - start))
        result = least_squares(
            lambda x: weights * (values - x[0]) / scale,
            x0=[start],
            bounds=([0.0], [np.inf]),
            loss="soft_l1",
        )
        return max(float(result.x[0]), 0.0)

    r = robust_location(zz.real, np.ones_like(ff))
    # Im Z / ω with weight ω: the same as fitting Im Z = ω·L in ohms.
    l_est = robust_location(zz.imag / omega, omega / np.max(omega))
    return Mount(r=r, l=l_est)


def _as_short(
    z_short: ArrayLike | Mount, shape: tuple[int, ...], f: ArrayLike | None
) -> NDArray[np.complex128]:
    if isinstance(z_short, Mount):
        if f is None:
            raise ValueError("a fitted Mount needs the frequencies: pass f=... (Hz)")
        return z_short.impedance(f)
    zs = np.asarray(z_short, dtype=complex)
    if zs.shape != shape and zs.shape != ():
        raise ValueError(
            f"the mount short has {zs.shape} points but the measurement has {shape}; "
            f"capture both on the same frequency grid or interpolate the short first"
        )
    return zs


def remove_fixture(
    z_measured: ArrayLike,
    z_short: ArrayLike | Mount,
    open_admittance: ArrayLike | None = None,
    *,
    f: ArrayLike | None = None,
) -> NDArray[np.complex128]:
    """The part's impedance (Ω) with the mount removed.

    ``z_measured`` is the impedance seen with the part in the mount (Ω), ``z_short`` the
    shorted mount on the same grid (Ω) or a fitted :class:`Mount` (then ``f`` in Hz is
    required), ``open_admittance`` the empty mount's shunt admittance ``Yo`` (S) or None.
    Returns ``(Zm − Zs) / (1 − (Zm − Zs)·Yo)``, or ``Zm − Zs`` without an open.
    """
    zm = np.asarray(z_measured, dtype=complex)
    series = zm - _as_short(z_short, zm.shape, f)
    if open_admittance is None:
        return series
    yo = np.asarray(open_admittance, dtype=complex)
    if yo.shape != zm.shape and yo.shape != ():
        raise ValueError(
            f"the open admittance has {yo.shape} points but the measurement has {zm.shape}; "
            f"capture both on the same frequency grid"
        )
    with np.errstate(divide="ignore", invalid="ignore"):
        return series / (1.0 - series * yo)


def open_admittance_from_z(z_open: ArrayLike) -> NDArray[np.complex128]:
    """Shunt admittance (S) of an empty mount from its measured impedance (Ω): ``1/Zopen``."""
    zo = np.asarray(z_open, dtype=complex)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(zo == 0, np.inf + 0j, 1.0 / zo)
