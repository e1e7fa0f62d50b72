"""How the landmarks of ``bench.core.landmarks`` move with a small change of the impedance.

A landmark is read from a few bands of points (a least-squares line, a mean, a median, a
quadratic in log f); for a small change ``dZ`` of a smooth trace those bands stay the
same, so each landmark is a smooth function of the points in them and its change is the
chain rule through the same reading [derived]. :func:`landmark_slopes` gives, for each
row of ``dz`` (say ``dZ/d ln p`` of every fitted element), the landmark's change to first
order, at the cost of one reading; the fitter's landmark uncertainties propagate the
element covariance through these slopes. A landmark read another way (an interpolated
resonance, a binned or filtered trace) has no slope here (None): the caller reads it
again at moved values instead. No I/O.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray

from bench.core.landmarks import (
    MAX_POINTS,
    _capacitor_reading,
    _inductor_reading,
    _value_window,
)

Slopes = dict[str, NDArray[np.float64] | None]


def landmark_slopes(
    kind: str, f: NDArray[np.float64], z: NDArray[np.complex128], dz: NDArray[np.complex128]
) -> Slopes:
    """First-order change of each landmark of ``z`` at ``f`` (increasing, Hz) per row of
    ``dz`` (shape ``(k, f.size)``): ``{key: array of k, or None}``; None where the
    landmark is not given or not read in a way followed here. ``c_par`` of an inductor
    is always None (the fitter gives its fitted element instead)."""
    f = np.asarray(f, dtype=float)
    z = np.asarray(z, dtype=complex)
    dz = np.atleast_2d(np.asarray(dz, dtype=complex))
    plain = (
        f.size <= MAX_POINTS
        and np.all(np.diff(f) > 0)
        and np.all(f > 0)
        and np.all(np.isfinite(z))
        and np.all(z != 0)
        and np.all(np.isfinite(dz))
    )
    if kind == "capacitor":
        return _capacitor_slopes(f, z, dz) if plain else dict.fromkeys(_CAPACITOR)
    if kind == "inductor":
        return _inductor_slopes(f, z, dz) if plain else dict.fromkeys(_INDUCTOR)
    raise ValueError(f"kind must be 'capacitor' or 'inductor', got {kind!r}")


_CAPACITOR = ("c_low", "esl", "srf", "esr_at_srf")
_INDUCTOR = ("l_low", "r_dc", "srf", "z_at_srf", "c_par")


def _least_squares(design: NDArray[np.float64]) -> NDArray[np.float64]:
    """The matrix taking data to least-squares coefficients of ``design``'s columns, each
    column scaled to unit norm first (as ``numpy.polyfit`` does: ω² and 1 differ by
    fifteen decades)."""
    scale = np.linalg.norm(design, axis=0)
    scale[scale == 0] = 1.0
    return np.linalg.pinv(design / scale) / scale[:, None]


def _line_root_slope(f, y, dy, line) -> NDArray[np.float64]:
    """Change of ``ln f0``, ``f0 = √(−b/a)/2π`` of the least-squares line ``ω·y = a·ω² + b``
    through the points ``line`` (``bench.core.landmarks._crossings``), per row of ``dy``."""
    w = 2 * np.pi * f[line]
    pinv = _least_squares(np.column_stack([w * w, np.ones(w.size)]))
    a, b = pinv @ (w * y[line])
    da, db = pinv @ (w * dy[:, line]).T
    return 0.5 * (db / b - da / a)


def _value_slope(f, y, dy, f0, dlog_f0) -> NDArray[np.float64]:
    """Change of ``bench.core.landmarks._value_at(f, y, f0)`` per row of ``dy``, with
    ``f0`` moving by ``dlog_f0`` (in ln f): the quadratic in ``ln(f/f0)`` refitted to the
    changed points is the old one shifted, so its value moves by its slope times the
    shift of ``f0`` plus the fit of the change [derived]."""
    near = _value_window(f, f0)
    x = np.log(f[near] / f0)
    if np.count_nonzero(near) >= 3 and np.ptp(x) > 0:
        pinv = _least_squares(np.vander(x, 3))
        slope = (pinv @ y[near])[1]
        return (pinv @ dy[:, near].T)[2] + slope * dlog_f0
    return np.mean(dy[:, near], axis=1)


def _capacitor_slopes(f, z, dz) -> Slopes:
    marks, how = _capacitor_reading(f, z)
    out: Slopes = dict.fromkeys(_CAPACITOR)
    w = 2 * np.pi * f
    x, dx = z.imag, dz.imag
    srf = marks["srf"]
    dlog_srf = None
    if srf is not None and how.get("srf") is not None:
        dlog_srf = _line_root_slope(f, x, dx, how["srf"])
        out["srf"] = srf * dlog_srf
    d_esl0 = 0.0
    if "high" in how:
        high = how["high"]
        d_esl0 = np.mean(dx[:, high] / w[high], axis=1)
    d_elastance = None
    if "band" in how:
        band = how["band"]
        d_esl_used = d_esl0 if how["esl_in_c_low"] else 0.0
        d_elastance = np.mean(
            w[band] ** 2 * np.asarray(d_esl_used).reshape(-1, 1) - w[band] * dx[:, band], axis=1
        )
        if marks["c_low"] is not None:
            out["c_low"] = -(marks["c_low"] ** 2) * d_elastance
    if marks["esl"] is not None:
        if how.get("esl_refined"):
            # esl = mean((X + elastance/ω)/ω) over the same points.
            out["esl"] = d_esl0 + float(np.mean(1.0 / w[how["high"]] ** 2)) * d_elastance
        else:
            out["esl"] = d_esl0
    if marks["esr_at_srf"] is not None and dlog_srf is not None:
        out["esr_at_srf"] = _value_slope(f, z.real, dz.real, srf, dlog_srf)
    return out


def _inductor_slopes(f, z, dz) -> Slopes:
    marks, how = _inductor_reading(f, z)
    out: Slopes = dict.fromkeys(_INDUCTOR)
    w = 2 * np.pi * f
    y = 1.0 / z
    dy = -dz * (y * y)
    srf = marks["srf"]
    dlog_srf = None
    if srf is not None and how.get("srf") is not None:
        dlog_srf = _line_root_slope(f, y.imag, dy.imag, how["srf"])
        out["srf"] = srf * dlog_srf
    if marks["r_dc"] is not None:
        # The median's point (or the mean of the middle two) moves with it.
        idx = np.flatnonzero(how["lowest"])
        order = idx[np.argsort(z.real[idx], kind="stable")]
        mid = order[(order.size - 1) // 2 : order.size // 2 + 1]
        out["r_dc"] = np.mean(dz.real[:, mid], axis=1)
    if marks["l_low"] is not None and (how["rounds"] == 1 or dlog_srf is not None):
        band = how["band"]
        wb = w[band]
        yb, dyb = y[band], dy[:, band]
        c_par, d_c_par = 0.0, np.zeros(dz.shape[0])
        for r in range(how["rounds"]):
            zs = 1.0 / (yb - 1j * wb * c_par)
            dzs = -(zs * zs) * (dyb - 1j * wb * d_c_par[:, None])
            l_low = float(np.mean(zs.imag / wb))
            d_l_low = np.mean(dzs.imag / wb, axis=1)
            if r < how["rounds"] - 1:
                c_par = 1.0 / ((2 * math.pi * srf) ** 2 * l_low)
                d_c_par = -c_par * (2 * dlog_srf + d_l_low / l_low)
        out["l_low"] = d_l_low
    if marks["z_at_srf"] is not None and dlog_srf is not None:
        conductance = 1.0 / marks["z_at_srf"]
        d_conductance = _value_slope(f, y.real, dy.real, srf, dlog_srf)
        out["z_at_srf"] = -d_conductance / conductance**2
    return out
