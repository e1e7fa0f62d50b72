"""Conversions between measured S-parameters and the impedance of the part.

Three set-ups, each with its inverse, on complex numpy arrays of any shape
(frequencies in Hz, impedances in ohms):

* two-port shunt-through: the part shunts the line between the ports
  (Novak & Miller 2007, ch. 5). With a series resistor ``Rs`` at each port and the
  through normalisation taken with the resistors fitted, each port sees
  ``Ze = Z0 + Rs`` and ``S21n = 2Z / (2Z + Ze)``, so ``Z = (Ze/2)·S21n / (1 − S21n)``.
* two-port series-through: the part sits in series between the ports,
  ``S21n = 2Ze / (2Ze + Z)``, so ``Z = 2Ze·(1/S21n − 1)``.
* one-port reflection: ``Z = Z0·(1 + S11) / (1 − S11)``.

The singular points (``S21n = 1`` for shunt-through, ``S21n = 0`` for series-through,
``S11 = 1`` for reflection) give complex infinities or NaN, not warnings: a caller
that feeds such points is told by the window, not by numpy.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

ComplexArray = NDArray[np.complex128]


def _check_reference(z0: float, series_r: float) -> float:
    """Return ``Ze = z0 + series_r`` after checking both are sensible."""
    if not np.isfinite(z0) or z0 <= 0:
        raise ValueError(f"z0 must be a positive reference impedance in ohms, got {z0!r}")
    if not np.isfinite(series_r) or series_r < 0:
        raise ValueError(
            f"series_r must be a port series resistance >= 0 ohms (0 without resistors), "
            f"got {series_r!r}"
        )
    return float(z0) + float(series_r)


def effective_port_impedance(z0: float = 50.0, series_r: float = 0.0) -> float:
    """``Ze = Z0 + Rs`` (Ω): what each port presents to the part, resistor included."""
    return _check_reference(z0, series_r)


def shunt_through_z(s21n: ArrayLike, z0: float = 50.0, series_r: float = 0.0) -> ComplexArray:
    """Impedance (Ω) of a shunt part from its through-normalised S21.

    ``s21n`` is S21 divided by the through measured with the same cables and series
    resistors (or a fully corrected S21 when ``series_r`` is 0). ``z0`` > 0 Ω is the
    reference impedance, ``series_r`` >= 0 Ω the resistor at each port.
    ``Z = (Ze/2)·S21n / (1 − S21n)`` with ``Ze = z0 + series_r``.
    """
    ze = _check_reference(z0, series_r)
    s = np.asarray(s21n, dtype=complex)
    with np.errstate(divide="ignore", invalid="ignore"):
        return (ze / 2.0) * s / (1.0 - s)


def shunt_through_s21(z: ArrayLike, z0: float = 50.0, series_r: float = 0.0) -> ComplexArray:
    """Through-normalised S21 of a shunt part of impedance ``z`` (Ω): ``2Z / (2Z + Ze)``."""
    ze = _check_reference(z0, series_r)
    zz = np.asarray(z, dtype=complex)
    with np.errstate(divide="ignore", invalid="ignore"):
        return 2.0 * zz / (2.0 * zz + ze)


def series_through_z(s21n: ArrayLike, z0: float = 50.0, series_r: float = 0.0) -> ComplexArray:
    """Impedance (Ω) of a series part from its through-normalised S21: ``2Ze·(1/S21n − 1)``.

    The source and load seen by the part are each ``Ze = z0 + series_r``; with plain
    50 Ω ports this is Duffy's ``(Zs + Zl)(1/S21 − 1)``.
    """
    ze = _check_reference(z0, series_r)
    s = np.asarray(s21n, dtype=complex)
    with np.errstate(divide="ignore", invalid="ignore"):
        return 2.0 * ze * (1.0 / s - 1.0)


def series_through_s21(z: ArrayLike, z0: float = 50.0, series_r: float = 0.0) -> ComplexArray:
    """Through-normalised S21 of a series part of impedance ``z`` (Ω): ``2Ze / (2Ze + Z)``."""
    ze = _check_reference(z0, series_r)
    zz = np.asarray(z, dtype=complex)
    with np.errstate(divide="ignore", invalid="ignore"):
        return 2.0 * ze / (2.0 * ze + zz)


def reflection_z(s11: ArrayLike, z0: float = 50.0) -> ComplexArray:
    """Impedance (Ω) terminating a port from its reflection: ``Z0·(1 + S11)/(1 − S11)``."""
    _check_reference(z0, 0.0)
    s = np.asarray(s11, dtype=complex)
    with np.errstate(divide="ignore", invalid="ignore"):
        return z0 * (1.0 + s) / (1.0 - s)


def reflection_s11(z: ArrayLike, z0: float = 50.0) -> ComplexArray:
    """Reflection of an impedance ``z`` (Ω) on a ``z0`` port: ``(Z − Z0)/(Z + Z0)``."""
    _check_reference(z0, 0.0)
    zz = np.asarray(z, dtype=complex)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = (zz - z0) / (zz + z0)
    # An open (Z = inf) reflects +1; (inf - z0)/(inf + z0) would give NaN.
    return np.where(np.isinf(zz), 1.0 + 0.0j, out)


def through_normalise(s21_raw: ArrayLike, s21_through: ArrayLike) -> ComplexArray:
    """Divide a raw S21 by the through measured with the same cables and resistors.

    Removes the transmission tracking (cable loss and delay, and the fall of the
    through level to ``Z0/(Z0 + Rs)`` when series resistors are fitted), not the
    mismatch. Both arrays must broadcast; a through that is zero anywhere is refused,
    since that point carries no information.
    """
    raw = np.asarray(s21_raw, dtype=complex)
    thru = np.asarray(s21_through, dtype=complex)
    try:
        fits = np.broadcast_shapes(raw.shape, thru.shape) == raw.shape
    except ValueError:
        fits = False
    if not fits:
        raise ValueError(
            f"the through has shape {thru.shape} but the measurement has {raw.shape}; "
            f"measure both on the same frequency grid"
        )
    if np.any(thru == 0) or not np.all(np.isfinite(thru)):
        raise ValueError(
            "the through measurement is zero or not finite at some frequencies; "
            "check the through adapter and re-measure the through"
        )
    return raw / thru


def shunt_through_rereference(s21: ArrayLike, from_ze: ArrayLike, to_ze: ArrayLike) -> ComplexArray:
    """The transmission of the same shunt part seen from ports of another impedance.

    ``s21`` is ``2Z / (2Z + from_ze)`` for some shunt ``Z``; the result is
    ``2Z / (2Z + to_ze)``. With ``2Z = from_ze·S/(1 − S)`` this is
    ``from_ze·S / (from_ze·S + to_ze·(1 − S))`` [derived], which stays finite where
    ``S → 1`` (an open). Used where a SOLT calibration has moved the reference plane
    past the port series resistors (each port then presents ``Z0``, not ``Z0 + Rs``)
    and the data are put back on the set-up's ``Z0 + Rs`` scale. Impedances in Ω (> 0),
    scalars or arrays that broadcast with ``s21``.
    """
    s = np.asarray(s21, dtype=complex)
    a = np.asarray(from_ze, dtype=complex)
    b = np.asarray(to_ze, dtype=complex)
    with np.errstate(divide="ignore", invalid="ignore"):
        return a * s / (a * s + b * (1.0 - s))


# -- gain-phase analyser ---------------------------------------------------------------
# A gain-phase analyser returns the ratio of two receivers, not a calibrated S21. In the
# set-up zbench uses, its source (any source impedance) drives receiver A's node, a
# reference resistor ``r_ref`` joins it to the part, and receiver B sits across the part
# with its own input impedance ``z_in`` (e.g. 1 MΩ ‖ 30 pF) in parallel. The ratio is the
# voltage divider H = B/A = Zp / (Zp + r_ref) with Zp = Z ‖ z_in, so
# Zp = r_ref·H/(1 − H) and Z = Zp·z_in/(z_in − Zp). The source impedance sets the level
# at A, not the ratio. (Divider and ABCD algebra: docs/references.md §13 [derived].)


def gain_phase_z(h: ArrayLike, *, r_ref: float, z_in: ArrayLike | None = None) -> ComplexArray:
    """The part's impedance (Ω) from a gain-phase analyser's receiver ratio ``h`` = B/A.

    ``r_ref`` (Ω, > 0) is the reference resistor between receiver A's node and the part;
    ``z_in`` (Ω, scalar or per point) is receiver B's input impedance in parallel with the
    part, or None for an ideal (infinite) input. ``h = 1`` gives an infinite impedance.
    """
    if not r_ref > 0:
        raise ValueError(f"r_ref must be > 0 Ω, got {r_ref!r}")
    hh = np.asarray(h, dtype=complex)
    with np.errstate(divide="ignore", invalid="ignore"):
        zp = r_ref * hh / (1.0 - hh)
        if z_in is None:
            return zp
        zi = np.asarray(z_in, dtype=complex)
        return zp * zi / (zi - zp)


def gain_phase_ratio(z: ArrayLike, *, r_ref: float, z_in: ArrayLike | None = None) -> ComplexArray:
    """The receiver ratio B/A a gain-phase analyser reads on a part of impedance ``z``
    (the inverse of :func:`gain_phase_z`)."""
    if not r_ref > 0:
        raise ValueError(f"r_ref must be > 0 Ω, got {r_ref!r}")
    zz = np.asarray(z, dtype=complex)
    with np.errstate(divide="ignore", invalid="ignore"):
        zp = zz if z_in is None else zz * np.asarray(z_in) / (zz + np.asarray(z_in))
        return zp / (zp + r_ref)
