"""The low-frequency ground loop of the two cable shields, seen on a mount short.

Below a few tens of kHz the shields of the two cables form a loop and part of the test
current returns through the receive cable's shield; the braid resistances then appear
in parallel with each other and in series with the part ("The 2-Port Shunt-Thru
Measurement and the Inherent Ground Loop", EDI CON USA 2018; docs/references.md §2). The
first-order model used here is ``Zerr = R1·R2 / (R1 + R2 + jω(L1 + L2 + Lcm))``; for
identical cables without a choke ``Zerr = (Rsh/2) / (1 + j f/fc)`` with the shield
cut-off ``fc = Rsh / (2π·Lsh)`` (Ott 2009, ch. 2).

A shorted mount should read ``Rm + jωLm`` with a flat real part. The check fits
``Rm + jωLm + R0/(1 + j f/fc)`` to the low-frequency part of the capture and reports a
loop when ``R0`` is both significant against the noise and larger than a threshold.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from bench.core.fit_solve import SoftL1, solve
from bench.units import format_si

TWO_PI = 2.0 * math.pi


def ground_loop_error(
    f: ArrayLike, r_shield: float, corner_hz: float, *, choke_h: float = 0.0
) -> NDArray[np.complex128]:
    """Series error (Ω) the shield loop of two identical cables adds to the part.

    ``r_shield`` is each cable's shield resistance (Ω, > 0), ``corner_hz`` its cut-off
    ``Rsh/(2π·Lsh)`` (Hz, > 0), ``choke_h`` a common-mode choke or isolation transformer
    in the loop (H, >= 0). ``R²/(2R + jω(2Lsh + Lcm))``, which is ``(R/2)/(1 + j f/fc)``
    without a choke (docs/references.md §2, derived).
    """
    if r_shield <= 0 or corner_hz <= 0 or choke_h < 0:
        raise ValueError(
            f"need r_shield > 0 ohm, corner_hz > 0 Hz, choke_h >= 0 H; "
            f"got {r_shield!r}, {corner_hz!r}, {choke_h!r}"
        )
    omega = TWO_PI * np.asarray(f, dtype=float)
    l_shield = r_shield / (TWO_PI * corner_hz)
    return r_shield**2 / (2.0 * r_shield + 1j * omega * (2.0 * l_shield + choke_h))


@dataclass(frozen=True)
class GroundLoopCheck:
    """Result of :func:`check_ground_loop`.

    ``excess_r_dc`` (Ω) is the fitted low-frequency excess resistance ``R0``,
    ``corner_hz`` (Hz) its corner, ``valid_above_hz`` (Hz) the frequency above which the
    loop's error stays below ``max(fraction·|Rm + jωLm|, abs_threshold)`` (the lowest
    frequency of the capture when nothing is detected; infinity when the error stays
    above the limit beyond 1000 times the top of the sweep). ``r_mount`` (Ω) and
    ``l_mount`` (H) are the fitted mount. ``message`` says what was found and what to do.
    """

    detected: bool
    excess_r_dc: float
    corner_hz: float
    valid_above_hz: float
    message: str
    r_mount: float = 0.0
    l_mount: float = 0.0
    excess_sigma: float = 0.0
    checked: bool = True

    def to_dict(self) -> dict[str, object]:
        """Plain values for a run manifest or a report."""
        return {
            "detected": self.detected,
            "excess_r_dc": self.excess_r_dc,
            "corner_hz": self.corner_hz,
            "valid_above_hz": self.valid_above_hz,
            "r_mount": self.r_mount,
            "l_mount": self.l_mount,
            "checked": self.checked,
            "message": self.message,
        }


def _noise_scale(values: NDArray[np.float64]) -> float:
    """Point-to-point noise (Ω) from differences of neighbours, robust to smooth trends."""
    if values.size < 3:
        return 0.0
    d = np.diff(values)
    return float(np.median(np.abs(d - np.median(d)))) * 1.4826 / math.sqrt(2.0)


def _model(p: NDArray[np.float64], f: NDArray[np.float64]) -> NDArray[np.complex128]:
    rm, lm, r0, log_fc = p
    return rm + 1j * TWO_PI * f * lm + r0 / (1.0 + 1j * f / 10.0**log_fc)


class _LoopResiduals:
    """Residuals (real and imaginary parts over the noise ``scale``) of the mount and
    loop model, and their Jacobian rows, as :func:`bench.core.fit_solve.solve` takes them.

    The parameters are divided by ``size`` (alike steps in every direction), and the
    three that cannot be negative (``Rm``, ``Lm``, ``R0``) are taken as their absolute
    values: a term may reach 0 and leave it again, where a bound would hold it there."""

    def __init__(self, f, z, scale: float, size: NDArray[np.float64]):
        self.f, self.z, self.scale, self.size = f, z, scale, size
        self.n = f.size
        self._jw = 1j * TWO_PI * f

    def values(self, x: NDArray[np.float64]) -> NDArray[np.float64]:
        """``(Rm, Lm, R0, log10 fc)`` at ``x``."""
        return np.concatenate([np.abs(x[:3]), x[3:]]) * self.size

    def residuals(self, x: NDArray[np.float64]) -> NDArray[np.float64]:
        d = _model(self.values(x), self.f) - self.z
        return np.concatenate([d.real, d.imag]) / self.scale

    def jacobian_rows(self, x: NDArray[np.float64]) -> NDArray[np.float64]:
        # Analytic derivatives of the model (a fifth of the cost of finite differences).
        _, _, r0, log_fc = self.values(x)
        g = 1.0 + 1j * self.f / 10.0**log_fc
        rows = np.stack(
            (
                np.ones_like(self._jw),
                self._jw,
                1.0 / g,
                r0 * 1j * self.f * math.log(10.0) / 10.0**log_fc / g**2,
            )
        )
        sign = np.where(x[:3] < 0, -1.0, 1.0)
        rows *= (np.concatenate([sign, [1.0]]) * self.size)[:, None]
        return np.concatenate([rows.real, rows.imag], axis=1) / self.scale


def check_ground_loop(
    f: ArrayLike,
    z_short: ArrayLike,
    *,
    fraction: float = 0.1,
    abs_threshold: float = 20e-6,
    min_excess: float = 50e-6,
    significance: float = 5.0,
    f_check_max: float = 2e6,
) -> GroundLoopCheck:
    """Look for the cable-shield ground loop in a mount-short capture.

    ``f`` in Hz (increasing), ``z_short`` the shorted mount's impedance (Ω). Only points
    up to ``f_check_max`` (Hz) are fitted, where the mount's own skin effect is small.
    A loop is reported when the fitted excess ``R0`` exceeds ``min_excess`` (Ω) and
    ``significance`` times its standard error, and its corner lies inside the fitted
    band. ``fraction`` (of the short's own ``|Rm + jωLm|``) and ``abs_threshold`` (Ω) set
    ``valid_above_hz``: the error must fall below the larger of the two.
    """
    ff = np.asarray(f, dtype=float)
    zz = np.asarray(z_short, dtype=complex)
    if ff.shape != zz.shape or ff.ndim != 1:
        raise ValueError(
            f"f and z_short must be 1-D arrays of the same length, got {ff.shape} and {zz.shape}"
        )
    use = np.isfinite(zz) & (ff > 0) & (ff <= f_check_max)
    f_low = float(ff[0]) if ff.size else 0.0
    if np.count_nonzero(use) < 8:
        return GroundLoopCheck(
            detected=False,
            excess_r_dc=0.0,
            corner_hz=float("nan"),
            valid_above_hz=f_low,
            checked=False,
            message=(
                f"ground loop not checked: the mount short has fewer than 8 points below "
                f"{format_si(f_check_max, 'Hz')}; sweep from 100 Hz or so to see it"
            ),
        )
    fu, zu = ff[use], zz[use]
    scale = max(_noise_scale(zu.real), _noise_scale(zu.imag), 1e-9)
    # Start values: the mount from the top of the band, the loop from its bottom.
    top = fu >= np.quantile(fu, 0.6)
    rm0 = max(float(np.median(zu.real[top])), 0.0)
    lm0 = max(float(np.median(zu.imag[top] / (TWO_PI * fu[top]))), 0.0)
    r00 = max(float(np.median(zu.real[:3])) - rm0, 0.0)
    lo_fc, hi_fc = math.log10(fu[0]) - 1.5, math.log10(fu[-1])

    # Solved in parameters divided by their sizes (the scale of the mount and loop terms,
    # a decade for the corner), with the soft-L1 loss of unit scale on residuals in units
    # of the noise: the points a glitch or a resonance of the mount moves weigh less.
    size = np.array([max(rm0, scale), max(lm0, 1e-15), max(r00, scale), 1.0])
    loop = _LoopResiduals(fu, zu, scale, size)
    robust = SoftL1(loop, 1.0)
    lo = np.array([-np.inf, -np.inf, -np.inf, lo_fc])
    hi = np.array([np.inf, np.inf, np.inf, hi_fc])
    best: tuple[float, NDArray[np.float64]] | None = None
    for log_fc0 in np.linspace(lo_fc + 0.25, hi_fc - 0.25, 6):
        x0 = np.array([rm0, lm0, r00, log_fc0]) / size
        cost, x = solve(robust, x0, lo, hi, 1000)
        if np.isfinite(cost) and (best is None or cost < best[0]):
            best = (cost, x)
    if best is None:
        return GroundLoopCheck(
            detected=False,
            excess_r_dc=0.0,
            corner_hz=float("nan"),
            valid_above_hz=f_low,
            checked=False,
            message="ground loop not checked: the mount short's points gave no finite fit",
        )
    rm, lm, r0, log_fc = (float(v) for v in loop.values(best[1]))
    fc = 10.0**log_fc
    # The residuals at the solution, and the Jacobian in the physical parameters with
    # each point weighed as the soft-L1 loss's Gauss-Newton Hessian weighs it,
    # √(ρ' + 2ρ''·r²) = (1 + r²)^(−3/4) for ρ(z) = 2(√(1 + z) − 1), z = r² [derived].
    fun = loop.residuals(best[1])
    jac = (loop.jacobian_rows(best[1]) * (1.0 + fun**2) ** -0.75).T / size
    # Standard error of R0 from the Jacobian, with the residual scale of the fit itself.
    dof = max(2 * fu.size - 4, 1)
    s2 = float(np.sum(fun**2)) / dof
    try:
        cov = np.linalg.pinv(jac.T @ jac) * s2
        sigma_r0 = math.sqrt(max(float(cov[2, 2]), 0.0))
    except np.linalg.LinAlgError:
        sigma_r0 = float("inf")
    # The robust loss reshapes the Jacobian, and with the mount terms at
    # 0 its covariance can claim a precision the data do not have (a
    # short buried 20 dB under the noise behind series resistors read as a "loop" of a
    # few mΩ at 5000 σ). The loop term alone, fitted linearly to points of noise
    # ``scale`` per component, cannot be known better than scale/sqrt(Σ|g|²) with
    # g = 1/(1 + j f/fc) [derived: the Fisher information of a linear amplitude].
    shape = 1.0 / (1.0 + 1j * fu / fc)
    sigma_r0 = max(sigma_r0, scale / math.sqrt(float(np.sum(np.abs(shape) ** 2))))
    corner_inside = lo_fc + 0.05 < log_fc < hi_fc - 0.05
    detected = bool(r0 > min_excess and r0 > significance * sigma_r0 and corner_inside)
    if not detected:
        return GroundLoopCheck(
            detected=False,
            excess_r_dc=r0 if corner_inside else 0.0,
            corner_hz=fc if corner_inside else float("nan"),
            valid_above_hz=f_low,
            message=(
                f"no ground loop seen: the shorted mount reads a flat "
                f"{format_si(rm, 'Ω')} + jω·{format_si(lm, 'H')} from "
                f"{format_si(fu[0], 'Hz')} up"
            ),
            r_mount=rm,
            l_mount=lm,
            excess_sigma=sigma_r0,
        )
    valid_above = _valid_above(ff, rm, lm, r0, fc, fraction, abs_threshold)
    where = (
        f"data below {format_si(valid_above, 'Hz')} should not be trusted for low-impedance parts"
        if math.isfinite(valid_above)
        else "the error stays large over the whole sweep"
    )
    message = (
        f"ground loop detected: the shorted mount reads {format_si(r0, 'Ω')} more at low "
        f"frequency, falling off above {format_si(fc, 'Hz')} (cable shields returning part of "
        f"the test current); {where}. Fit a common-mode isolation transformer, or enough "
        f"ferrite, on one port (port 2), keep the port-1 lead short, and capture the short again"
    )
    return GroundLoopCheck(
        detected=True,
        excess_r_dc=r0,
        corner_hz=fc,
        valid_above_hz=valid_above,
        message=message,
        r_mount=rm,
        l_mount=lm,
        excess_sigma=sigma_r0,
    )


def _valid_above(
    f: NDArray[np.float64],
    rm: float,
    lm: float,
    r0: float,
    fc: float,
    fraction: float,
    abs_threshold: float,
) -> float:
    """Lowest frequency from which the loop error stays below its limit."""
    grid = np.logspace(math.log10(f[0]), math.log10(f[-1]) + 3.0, 4000)
    err = r0 / np.sqrt(1.0 + (grid / fc) ** 2)
    limit = np.maximum(fraction * np.abs(rm + 1j * TWO_PI * grid * lm), abs_threshold)
    bad = np.nonzero(err > limit)[0]
    if bad.size == 0:
        return float(f[0])
    if bad[-1] == grid.size - 1:
        return float("inf")
    return float(grid[bad[-1] + 1])
