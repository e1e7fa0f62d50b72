"""Removing the fixture: the mount's series impedance (from a shorted mount) and,
optionally, its shunt admittance (from an empty, open mount).

In shunt-through the mount sits in series with the part, so a short in the mount
measures the mount alone, ``Zs``; with an open-mount admittance ``Yo`` the part is
``Zdut = (Zm − Zs) / (1 − (Zm − Zs)·Yo)`` (derived from the circuit; docs/references.md
§4), and without it ``Zdut = Zm − Zs``. The short may be used point by point, or as a
fitted ``Rm + jωLm`` that carries no measurement noise into the part's data. The open,
a fraction of a pF across the pads, is a very high impedance that a shunt-through
set-up sees only near its window's ceiling, so it is always used as a fitted
``G + jωC`` (:func:`fit_open`, :class:`MountOpen`) over the points it can measure.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from bench.core.fit_solve import soft_l1_nonnegative

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
        size = max(start, float(np.median(np.abs(values))), 1e-300)
        return soft_l1_nonnegative(weights / scale, weights * values / scale, start, size)

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


class OpenNotMeasurableError(ValueError):
    """The empty-mount capture has too few points inside its measurable window."""


@dataclass(frozen=True)
class MountOpen:
    """A fitted empty mount: shunt capacitance ``c`` (F, >= 0) and conductance ``g`` (S, >= 0)
    across the pads, fitted to the open capture over ``f_min``…``f_max`` (Hz).

    ``c_sigma``/``g_sigma`` are one-sigma uncertainties (F, S) from the fit; ``g`` is 0
    unless the capture shows a conductance above three of its sigmas; ``points_used`` is
    the number of points the fit used; ``residual`` the RMS of the fit's residuals in
    units of each point's own uncertainty (about 1 or less for a clean open).
    """

    c: float
    g: float = 0.0
    c_sigma: float = math.nan
    g_sigma: float = math.nan
    points_used: int = 0
    f_min: float = math.nan
    f_max: float = math.nan
    residual: float = math.nan

    def admittance(self, f: ArrayLike) -> NDArray[np.complex128]:
        """``g + j·2πf·c`` (S) at frequencies ``f`` (Hz)."""
        ff = np.asarray(f, dtype=float)
        return self.g + 1j * TWO_PI * ff * self.c


#: Largest one-sigma relative uncertainty of a point of the open capture that the open
#: fit uses. Looser than a part's window: the fit has two parameters over many points,
#: so points too uncertain for a part's landmark still pin the pad capacitance down.
OPEN_MAX_UNCERTAINTY = 0.5
#: Fewest points inside that bound for an open fit.
OPEN_MIN_POINTS = 5
#: Largest RMS residual (in units of each point's uncertainty) of an acceptable open fit;
#: above it the capture is not a small capacitance (a strap or part left in the mount).
OPEN_MAX_RESIDUAL = 5.0


def _robust_linear(
    x: NDArray[np.float64], y: NDArray[np.float64], sigma: NDArray[np.float64]
) -> tuple[float, float, NDArray[np.float64]]:
    """Fit ``y = p·x`` (p >= 0) weighted by ``1/sigma`` with a soft-L1 loss.

    Returns ``(p, sigma_p, normalised residuals)``; ``sigma_p`` from the weighted
    normal equation, scaled up by the residuals' spread when it exceeds the stated sigmas.
    """
    a = x / sigma
    b = y / sigma
    norm = float(np.dot(a, a))
    start = max(float(np.dot(a, b)) / norm, 0.0)
    sigma_p = 1.0 / math.sqrt(norm)
    p = soft_l1_nonnegative(a, b, start, max(abs(start), sigma_p))
    residual = a * p - b
    dof = max(residual.size - 1, 1)
    spread = math.sqrt(float(np.dot(residual, residual)) / dof)
    return p, sigma_p * max(1.0, spread), residual


def fit_open(
    f: ArrayLike,
    z_open: ArrayLike,
    *,
    rel_uncertainty: ArrayLike | None = None,
    z_short: ArrayLike | Mount | None = None,
    valid: ArrayLike | None = None,
    max_uncertainty: float = OPEN_MAX_UNCERTAINTY,
) -> MountOpen:
    """Fit the empty mount's shunt admittance ``Yo = G + jωC`` to an open capture.

    ``f`` in Hz (> 0), ``z_open`` the measured impedance of the empty mount (Ω),
    ``rel_uncertainty`` its one-sigma relative uncertainty per point (a fraction, from
    the window; None weighs every point alike and uses them all), ``z_short`` the mount's
    series impedance (Ω on the same grid, or a fitted :class:`Mount`; None: negligible),
    ``valid`` an optional mask of points allowed. ``Yo = 1/(Zopen − Zshort)``
    (derived from the circuit, docs/references.md §4).

    A fraction of a pF is a very high impedance, near the ceiling of a shunt-through
    window or above it, so only points whose uncertainty is at most ``max_uncertainty``
    (0 < … < 1) are used, each weighted by its own uncertainty: Im Yo is fitted as ωC,
    Re Yo as G. A fitted C carries no point-by-point noise into the part's data.

    Raises :class:`OpenNotMeasurableError` when fewer than ``OPEN_MIN_POINTS`` points are
    usable (the pads are out of this set-up's reach), and ``ValueError`` when the
    capture does not look like a small capacitance (a strap or part left in the mount).
    """
    ff = np.asarray(f, dtype=float)
    zo = np.asarray(z_open, dtype=complex)
    if ff.shape != zo.shape or ff.ndim != 1:
        raise ValueError(
            f"f and z_open must be 1-D arrays of the same length, got {ff.shape} and {zo.shape}"
        )
    if not 0.0 < max_uncertainty < 1.0:
        raise ValueError(f"max_uncertainty must lie in (0, 1), got {max_uncertainty!r}")
    series = zo if z_short is None else zo - _as_short(z_short, zo.shape, ff)
    with np.errstate(divide="ignore", invalid="ignore"):
        y = 1.0 / series
    if rel_uncertainty is None:
        rel = np.full(ff.shape, 0.1)
    else:
        rel = np.asarray(rel_uncertainty, dtype=float)
        if rel.shape != ff.shape:
            raise ValueError(
                f"rel_uncertainty has {rel.shape} points but the open capture {ff.shape}"
            )
    use = np.isfinite(y) & np.isfinite(rel) & (ff > 0) & (rel > 0)
    if rel_uncertainty is not None:
        use &= rel <= max_uncertainty
    if valid is not None:
        use &= np.asarray(valid, dtype=bool)
    n = int(np.count_nonzero(use))
    if n < OPEN_MIN_POINTS:
        best = float(np.nanmin(rel)) if np.any(np.isfinite(rel)) else math.inf
        raise OpenNotMeasurableError(
            f"the empty mount is out of this set-up's reach: {n} point(s) of the open "
            f"capture have an uncertainty of at most {max_uncertainty:.0%} (the best is "
            f"{best:.0%}), {OPEN_MIN_POINTS} are needed; port series resistors raise the "
            "window's ceiling, and pad capacitance matters little below it"
        )
    ff, y, rel = ff[use], y[use], rel[use]
    omega = TWO_PI * ff
    # The relative uncertainty of Z is that of Y = 1/Z (first order).
    sigma = rel * np.abs(y)
    c, c_sigma, res_c = _robust_linear(omega, y.imag, sigma)
    g, g_sigma, res_g = _robust_linear(np.ones_like(ff), y.real, sigma)
    if g < 3.0 * g_sigma:
        # A conductance the capture cannot tell from zero would only lower the peak of
        # a high-Q part: leave it out.
        g = 0.0
        res_g = -y.real / sigma
    residual = math.sqrt(float(np.mean(np.concatenate([res_c, res_g]) ** 2)))
    if c <= 0.0 or residual > OPEN_MAX_RESIDUAL:
        raise ValueError(
            f"the open capture does not look like an empty mount (a small capacitance): "
            f"fitted {c:.3g} F with residuals {residual:.1f} times the points' uncertainty; "
            "check that no strap or part was left in the mount and capture it again"
        )
    return MountOpen(
        c=c,
        g=g,
        c_sigma=c_sigma,
        g_sigma=g_sigma,
        points_used=n,
        f_min=float(ff.min()),
        f_max=float(ff.max()),
        residual=residual,
    )
