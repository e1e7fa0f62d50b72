"""The least-squares machinery of the fitter (docs/design.md §4): residuals and Jacobian of
the log element values on one grid (:class:`Objective`, the network compiled for the
grid), MINPACK's Levenberg-Marquardt kept inside the bounds (:func:`solve`) and the
soft-L1 loss as plain least squares (:class:`SoftL1`). No I/O.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from bench.core.fit_network import compiled

# MINPACK's driver as scipy's leastsq calls it (see levenberg_marquardt), loaded without
# the rest of scipy.optimize (start-up); None on a scipy without it (leastsq then).
from bench.core.minpack import lmder as _lmder


def log_ratio(zm: NDArray[np.complex128], z: NDArray[np.complex128]) -> NDArray[np.complex128]:
    """``ln(zm/z)`` (principal value), computed as ``ln|ρ|`` and ``atan2``: numpy's complex
    log takes a slow, careful path for arguments near 1, which a fit's residuals are."""
    rho = zm / z
    re, im = rho.real, rho.imag
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        return 0.5 * np.log(re * re + im * im) + 1j * np.arctan2(im, re)


class Objective:
    """Residuals and Jacobian of the log parameters on one grid.

    The network is compiled for the grid (``bench.core.fit_network``); the Jacobian is
    asked for at the point whose residuals were just evaluated, which the compiled
    network keeps. Residuals are ``[Re, Im]`` of ``ln(Zmodel/Zmeasured)·weight``.
    """

    def __init__(self, node, f, z, weight):
        self.net = compiled(node, f)
        self.inv_z = 1.0 / z
        self.weight = np.ascontiguousarray(weight, dtype=float)
        self._weight2 = np.concatenate([self.weight, self.weight])
        self.n = f.size
        self._key = b""
        self._r = np.empty(0)

    def residuals(self, q: NDArray[np.float64]) -> NDArray[np.float64]:
        """The residuals at ``q`` (the same array again when asked at the same point
        twice in a row, as a solve's first and last steps do: not to be changed)."""
        key = np.asarray(q, dtype=float).tobytes()
        if key == self._key:
            return self._r
        # ln|ρ| from |ρ| (numpy's hypot), the phase from atan2: a few array operations
        # fewer than the squares, each a noticeable share of a step on a thinned grid.
        rho = self.net.impedance(q) * self.inv_z
        out = np.empty(2 * self.n)
        head, tail = out[: self.n], out[self.n :]
        np.log(np.abs(rho), out=head)
        np.arctan2(rho.imag, rho.real, out=tail)
        out *= self._weight2
        self._key, self._r = key, out
        return out

    def jacobian_rows(self, q: NDArray[np.float64]) -> NDArray[np.float64]:
        """The Jacobian transposed: one row of ``2n`` per parameter (MINPACK's column
        order, no copy)."""
        zm = self.net.impedance(q)
        d = self.net.jacobian(q) * (self.weight / zm)
        return np.concatenate([d.real, d.imag], axis=1)

    def jacobian(self, q: NDArray[np.float64]) -> NDArray[np.float64]:
        return self.jacobian_rows(q).T


def levenberg_marquardt(fun, jac, x0, max_nfev: int, tolerance: float) -> NDArray[np.float64]:
    """MINPACK's ``lmder`` on ``fun`` with the Jacobian ``jac`` in column order.

    scipy's compiled driver is called as ``leastsq`` calls it, without ``leastsq``'s
    checks (two extra model evaluations) and covariance, which cost as much as the
    solve on these small problems; should its private signature change, ``leastsq``
    does the same.
    """
    if _lmder is not None:
        try:
            return _lmder(
                fun,
                jac,
                x0,
                (),
                0,
                1,
                tolerance,
                tolerance,
                1e-7,
                max_nfev,
                100.0,
                np.ones(x0.size),
            )[0]
        except TypeError:
            pass
    from scipy.optimize import leastsq

    return leastsq(
        fun,
        x0,
        Dfun=jac,
        full_output=True,
        col_deriv=True,
        ftol=tolerance,
        xtol=tolerance,
        gtol=1e-7,
        maxfev=max_nfev,
        factor=100.0,
        diag=np.ones(x0.size),
    )[0]


def solve(
    obj: Objective, q0, lo, hi, max_nfev: int, tolerance: float = 1e-7, watch=None
) -> tuple[float, NDArray[np.float64]]:
    """Levenberg-Marquardt (MINPACK) in log parameters, kept inside the bounds.

    MINPACK's loop runs in compiled code, cheaper per step than the bounded
    trust-region method for these small problems (about twice as fast here). The bounds
    hold by evaluating the model at the clipped parameters: outside them the residuals
    stop changing, so the step is pushed back, and the result is clipped at the end.
    ``watch(q, r)``, when given, sees every point evaluated and its residuals, and may
    end the solve by raising.
    """

    def fun(q):
        q = np.minimum(np.maximum(q, lo), hi)
        r = obj.residuals(q)
        if watch is not None:
            watch(q, r)
        return r

    def jac(q):
        out = obj.jacobian_rows(np.minimum(np.maximum(q, lo), hi))
        outside = (q <= lo) | (q >= hi)
        if np.count_nonzero(outside):  # cheaper than .any() on a few values
            out[outside] = 0.0
        return out

    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        x = levenberg_marquardt(fun, jac, np.minimum(np.maximum(q0, lo), hi), max_nfev, tolerance)
        q = np.minimum(np.maximum(x, lo), hi)
        r = obj.residuals(q)
    return float(r @ r), q


class SoftL1:
    """The residuals of ``obj`` under a soft-L1 loss of scale ``s``, as plain least squares.

    scipy's soft-L1 cost is ``Σ s²·ρ(r²/s²)`` with ``ρ(x) = 2(√(1 + x) − 1)``; the
    residuals ``g(r) = sign(r)·s·√ρ(r²/s²)`` have the same sum of squares, so MINPACK
    minimises the very same cost (``g(r) ≈ r`` for small ``r``, ``√(2|r|s)`` for large).
    Their Jacobian is ``g'(r)·J`` with ``g'(r) = |r|·ρ'(r²/s²)/(s·√ρ)``, 1 at ``r = 0``.
    """

    def __init__(self, obj: Objective, scale: float):
        self.obj = obj
        self.scale = scale
        self.n = obj.n

    def _parts(self, q):
        r = self.obj.residuals(q)
        x = (r / self.scale) ** 2
        root = np.sqrt(1.0 + x)
        rho = 2.0 * (root - 1.0)
        sqrt_rho = np.sqrt(rho)
        with np.errstate(divide="ignore", invalid="ignore"):
            slope = np.where(x > 1e-12, np.abs(r) / (self.scale * sqrt_rho * root), 1.0)
        return r, sqrt_rho, slope

    def residuals(self, q):
        r, sqrt_rho, _ = self._parts(q)
        return np.copysign(self.scale * sqrt_rho, r)

    def jacobian_rows(self, q):
        _, _, slope = self._parts(q)
        return self.obj.jacobian_rows(q) * slope


# A scout that comes within this distance (natural log, every element) of where an
# earlier scout of the same candidate ended, at a cost within 1 % of that scout's, is in
# its valley and would end there too: it stops and counts as that scout.
SAME_VALLEY_LOG = 0.03
# So is a scout whose model comes within this fraction of each point's uncertainty (a
# residual) of that end's model at every point of the grid, at a cost within 1 %: the
# data cannot tell the two apart. It is the same circuit with its like sections in
# another order, or with an element the data do not see elsewhere.
SAME_VALLEY_RESIDUAL = 0.1


class SameValleyError(Exception):
    """Raised by :func:`same_valley_watch`: the scout reached ``end`` (one of the ends
    it was given), where an earlier scout ended."""

    def __init__(self, end: tuple):
        super().__init__()
        self.end = end


def same_valley_watch(ends: list[tuple]):
    """A ``watch`` for :func:`solve` that stops a scout at the end of an earlier one.

    ``ends`` are ``(cost, log values)`` or ``(cost, log values, residuals)``: with the
    residuals at that end, a scout whose own differ from them by less than
    :data:`SAME_VALLEY_RESIDUAL` everywhere is there too, whatever its values."""
    if not ends:
        return None

    def watch(q, r):
        cost = float(np.dot(r, r))
        for end in ends:
            if abs(cost - end[0]) > 0.01 * end[0]:
                continue
            if np.max(np.abs(q - end[1])) < SAME_VALLEY_LOG or (
                len(end) > 2 and np.max(np.abs(r - end[2])) < SAME_VALLEY_RESIDUAL
            ):
                raise SameValleyError(end)

    return watch


class _Line:
    """Residuals ``a·x − b`` of one value ``x = |u|·size`` (never negative, yet free to
    leave 0) and their Jacobian row in ``u``, as :func:`solve` takes them."""

    def __init__(self, a, b, size: float):
        self.a, self.b, self.size = a, b, size
        self.n = a.size

    def residuals(self, u):
        return self.a * (abs(float(u[0])) * self.size) - self.b

    def jacobian_rows(self, u):
        sign = -1.0 if u[0] < 0 else 1.0
        return (self.a * (sign * self.size))[None, :]


def soft_l1_nonnegative(a, b, start: float, size: float) -> float:
    """The ``x ≥ 0`` that minimises ``Σ ρ((a·x − b)²)`` with the soft-L1 loss
    ``ρ(z) = 2(√(1 + z) − 1)`` (unit scale: ``a`` and ``b`` in units of the noise), by
    MINPACK from ``start``, with steps in units of ``size`` (> 0). The cost is convex in
    ``x``, so the start only sets how many steps it takes."""
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    line = _Line(a, b, size)
    inf = np.array([np.inf])
    _, u = solve(SoftL1(line, 1.0), np.array([start / size]), -inf, inf, 200, 1e-12)
    return abs(float(u[0])) * size
