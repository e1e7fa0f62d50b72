"""The measurable impedance window of each measuring method, and per-point uncertainty.

Three methods (``METHODS``) share one error model: an additive receiver noise ``N`` and
a multiplicative error ``ε`` on the measured ratio, plus, for reflection, a residual of
the one-port calibration. The two-port methods are written on their through-normalised
transmission ``S21n``; the relative error it gives on Z is the same expression for both,
``dZ/Z = dS/(S·(1 − S))`` (derived from either conversion), so only ``S21n(Z)`` differs:

* shunt-through ``S21n = 2Z/(2Z + Ze)``: floor set by ``N``, ceiling by ``ε``;
* series-through ``S21n = 2Ze/(2Ze + Z)``: floor set by ``ε``
  (``m = ε·(2Ze + Z)/Z``), ceiling by ``N`` (``a ≈ N·Z/(2Ze)``);
  docs/references.md §9 (derived) gives about 13 Ω and 1 MΩ at 50 Ω, 0.1 dB, −100 dB, 10 %;
* one-port reflection ``Γ = (Z − Z0)/(Z + Z0)``: ``dZ/Z = dΓ·(Z + Z0)²/(2Z·Z0)``, with
  ``|dΓ|`` the root-sum-square of the calibration residual ``reflection_uncertainty``,
  the noise ``N`` and the trace noise on ``|Γ|``; best at ``Z = Z0`` (``2·dΓ``);
  docs/references.md §9 (derived) gives about 1.3 Ω to 1.9 kΩ at |dΓ| = 0.005, 10 %.
  Port series resistors do not apply to a reflection.

Definitions of the shunt-through window (docs/design.md §4, docs/references.md §1):

* ``Ze = z0 + series_r`` (Ω), the impedance each port presents to the part.
* ``S21n = 2Z / (2Z + Ze)``, the through-normalised transmission of a shunt part ``Z``.
* Additive noise ``N = 10**(noise_floor_db / 20)``: the RMS magnitude of the noise on
  S21, in dB relative to the through measured with the same cables and resistors
  (so it is already a level on the ``S21n`` scale). Its relative error on Z is
  ``a = N / |S21n·(1 − S21n)|`` (from ``dZ/Z = dS21 / (S21·(1 − S21))``).
* Multiplicative error ``ε``: the RMS sum of the trace noise
  ``10**(trace_noise_db/20) − 1`` and the drift of the through reference
  ``10**(through_drift_db/20) − 1`` (cable flexing, connector repeatability,
  temperature between the through and the measurement). A relative error ``ε`` on
  S21 gives ``m = ε / |1 − S21n|`` on Z, i.e. ``ε·(1 + 2Z/Ze)`` for a resistive part.
* ``relative_uncertainty = sqrt(a² + m²)`` (one sigma, a fraction of |Z|; the two
  sources are independent).
* The window ``[z_min, z_max]`` is the range of *resistive* Z whose relative
  uncertainty is at most ``tolerance``; the floor comes from ``N`` (S21n → 0), the
  ceiling from ``ε`` (S21n → 1). Both scale with ``Ze/z0``. A reactive point is judged
  by its own complex S21n in :func:`relative_uncertainty`, so it may fall slightly
  inside or outside a bound that is stated for a resistor.

Worked figures (derived, docs/references.md §1): a plain 50 Ω set-up, −100 dB floor, 0.1 dB
multiplicative error (ε = 1.16 %) and a 10 % target give ``z_max ≈ 25·(0.1/0.0116 − 1)
≈ 190 Ω`` and ``z_min ≈ 25·1e-5/0.1 = 2.5 mΩ``; the trade's rule of thumb quotes about
1 mΩ to about 225 Ω at about 100 dB of dynamic range (its floor corresponds to a looser
25 % target). 499 Ω resistors at each port scale both bounds by 549/50.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from bench.core.conversions import (
    effective_port_impedance,
    reflection_s11,
    series_through_s21,
    shunt_through_s21,
)
from bench.errors import InputError

#: The measuring methods, in the order the command line lists them.
METHODS = ("shunt-through", "series-through", "reflection")
#: Default residual of a one-port (open, short, load) calibration on |Γ|.
DEFAULT_REFLECTION_UNCERTAINTY = 0.005

#: Default RMS trace noise of a good analyser at a narrow IF bandwidth (dB).
DEFAULT_TRACE_NOISE_DB = 0.01
#: Default drift of the through reference between calibration and measurement (dB).
DEFAULT_THROUGH_DRIFT_DB = 0.1


def db_to_relative(db: float) -> float:
    """A magnitude ratio in dB as a relative error: ``10**(db/20) − 1`` (0.1 dB → 1.16 %)."""
    return float(10.0 ** (db / 20.0) - 1.0)


def floor_on_through_db(analyser_floor_db: float, z0: float = 50.0, series_r: float = 0.0) -> float:
    """The analyser's noise floor as a level on the through-normalised ``S21n`` scale (dB).

    An analyser's floor is a fixed receiver noise, stated relative to its own reference
    (a unit through, no resistors). Port series resistors ``series_r`` (Ω at each port)
    lower the through that S21 is normalised to, to ``Z0/(Z0 + Rs)`` of that reference
    (docs/references.md §1, derived), so relative to it the same noise stands
    ``20·log10((Z0 + Rs)/Z0)`` dB higher: 20.8 dB for 499 Ω on 50 Ω, so a −100 dB
    analyser gives −79.2 dB on the ``S21n`` scale. Without resistors the floor is unchanged.
    """
    ze = effective_port_impedance(z0, series_r)
    return float(analyser_floor_db + 20.0 * math.log10(ze / z0))


@dataclass(frozen=True)
class Window:
    """Measurable impedance window of one set-up (all impedances in Ω).

    ``z_min``/``z_max`` bound the resistive impedances measurable within
    ``tolerance``; ``z_best`` is where the relative uncertainty is smallest and
    ``best_uncertainty`` that uncertainty. ``noise_floor`` is the linear additive noise
    ``N`` and ``multiplicative_error`` the combined ``ε`` of the module docstring.
    """

    z_min: float
    z_max: float
    z0: float
    series_r: float
    noise_floor_db: float
    trace_noise_db: float
    tolerance: float
    through_drift_db: float = DEFAULT_THROUGH_DRIFT_DB
    ze: float = 50.0
    noise_floor: float = 1e-5
    multiplicative_error: float = 0.0
    z_best: float = float("nan")
    best_uncertainty: float = float("nan")
    method: str = "shunt-through"
    reflection_uncertainty: float = 0.0

    @property
    def bounded(self) -> bool:
        """False for data taken as given (no window cut: ``z_min`` 0, ``z_max`` inf)."""
        return math.isfinite(self.z_max) and self.z_min > 0

    @property
    def dynamic_range_db(self) -> float:
        """Distance from the through (0 dB) down to the noise floor, dB."""
        return -self.noise_floor_db

    @property
    def span_decades(self) -> float:
        """Width of the window in decades of impedance (inf when unbounded)."""
        if not self.bounded:
            return math.inf
        return math.log10(self.z_max / self.z_min)

    def to_dict(self) -> dict[str, float | str]:
        """Plain numbers (SI units), as ``zbench window --json`` prints them."""
        return {
            "method": self.method,
            "z_min": self.z_min,
            "z_max": self.z_max,
            "z0": self.z0,
            "series_r": self.series_r,
            "ze": self.ze,
            "noise_floor_db": self.noise_floor_db,
            "trace_noise_db": self.trace_noise_db,
            "through_drift_db": self.through_drift_db,
            "tolerance": self.tolerance,
            "multiplicative_error": self.multiplicative_error,
            "z_best": self.z_best,
            "best_uncertainty": self.best_uncertainty,
            "reflection_uncertainty": self.reflection_uncertainty,
        }


def _uncertainty(
    z: NDArray[np.complex128],
    ze: float,
    noise: float,
    eps: float,
    method: str = "shunt-through",
    reflection_uncertainty: float = 0.0,
) -> NDArray[np.float64]:
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        if method == "reflection":
            gamma = reflection_s11(z, ze)
            d_gamma = np.sqrt(reflection_uncertainty**2 + noise**2 + (eps * np.abs(gamma)) ** 2)
            out = d_gamma * np.abs((z + ze) ** 2 / (2.0 * z * ze))
        else:
            if method == "series-through":
                s = series_through_s21(z, ze, 0.0)
            else:
                s = shunt_through_s21(z, ze, 0.0)
            additive = noise / np.abs(s * (1.0 - s))
            multiplicative = eps / np.abs(1.0 - s)
            out = np.hypot(additive, multiplicative)
    # Z = 0 (a perfect short) and Z = inf (nothing) carry no information at all.
    return np.where(np.isfinite(out), out, np.inf)


def check_method(method: str) -> str:
    """``method`` normalised (lower case, ``_`` as ``-``), or :class:`InputError`."""
    name = str(method).strip().lower().replace("_", "-")
    if name not in METHODS:
        raise InputError(
            f"unknown measuring method {method!r}", hint=f"choose one of: {', '.join(METHODS)}"
        )
    return name


# A batch of files from one set-up asks for the same window for every file: the search
# below is about a hundred scalar evaluations, so its (frozen) result is kept.
@functools.lru_cache(maxsize=64)
def measurable_window(
    *,
    z0: float = 50.0,
    series_r: float = 0.0,
    noise_floor_db: float = -100.0,
    trace_noise_db: float = DEFAULT_TRACE_NOISE_DB,
    tolerance: float = 0.1,
    through_drift_db: float = DEFAULT_THROUGH_DRIFT_DB,
    method: str = "shunt-through",
    reflection_uncertainty: float = DEFAULT_REFLECTION_UNCERTAINTY,
) -> Window:
    """The measurable window of one set-up (definitions in the module doc).

    ``method`` one of :data:`METHODS`; ``z0`` > 0 Ω; ``series_r`` >= 0 Ω at each port
    (two-port methods only; a reflection refuses it); ``noise_floor_db`` < 0 dB relative
    to the through, or to a full reflection (typically −80 to −130); ``trace_noise_db``
    and ``through_drift_db`` >= 0 dB RMS (the drift is the through's, so a reflection
    does not use it: its calibration residual is ``reflection_uncertainty``, a fraction
    of |Γ| in [0, 1)); ``tolerance`` a fraction in (0, 1). Raises :class:`InputError`
    when a value is out of range or when no impedance can be measured within the
    tolerance.
    """
    method = check_method(method)
    if method == "reflection" and series_r:
        raise InputError(
            f"series_r = {series_r!r}: port series resistors do not apply to a reflection",
            hint="give series_r = 0 (or leave it out) for the reflection method",
        )
    if not (math.isfinite(reflection_uncertainty) and 0 <= reflection_uncertainty < 1):
        raise InputError(
            f"reflection_uncertainty = {reflection_uncertainty!r} is out of range",
            hint="give the calibration residual on |Γ| as a fraction, e.g. 0.005",
        )
    try:
        ze = effective_port_impedance(z0, series_r)
    except ValueError as exc:
        raise InputError(str(exc), hint="give z0 > 0 and series_r >= 0 in ohms") from exc
    checks = [
        (math.isfinite(noise_floor_db) and noise_floor_db < 0, "noise_floor_db", noise_floor_db,
         "a level below the through, e.g. -100 (dB)"),
        (math.isfinite(trace_noise_db) and trace_noise_db >= 0, "trace_noise_db", trace_noise_db,
         "an RMS level >= 0 dB, e.g. 0.01"),
        (math.isfinite(through_drift_db) and through_drift_db >= 0, "through_drift_db",
         through_drift_db, "an RMS level >= 0 dB, e.g. 0.1"),
        (math.isfinite(tolerance) and 0 < tolerance < 1, "tolerance", tolerance,
         "a fraction between 0 and 1, e.g. 0.1 for 10 %"),
    ]  # fmt: skip
    for ok, key, value, expected in checks:
        if not ok:
            raise InputError(f"{key} = {value!r} is out of range", hint=f"give {expected}")

    noise = 10.0 ** (noise_floor_db / 20.0)
    if method == "reflection":
        eps = db_to_relative(trace_noise_db)
        d_gamma = float(reflection_uncertainty)
    else:
        eps = math.hypot(db_to_relative(trace_noise_db), db_to_relative(through_drift_db))
        d_gamma = 0.0

    def rel(log_x: NDArray[np.float64]) -> NDArray[np.float64]:
        z = (10.0**log_x).astype(complex)
        return _uncertainty(z, ze, noise, eps, method, d_gamma)

    # The uncertainty of a resistor is convex in log Z with one minimum near the
    # geometric middle of the window; search for it, then for each crossing.
    lo, hi = math.log10(ze) - 16.0, math.log10(ze) + 16.0
    log_best = _narrowed(rel, lo, hi, 1e-10, lambda u: int(np.argmin(u)), minimum=True)
    u_best = float(rel(np.array([log_best]))[0])
    if u_best >= tolerance:
        raise InputError(
            f"no impedance can be measured within tolerance {tolerance:g}: the best "
            f"relative uncertainty of this set-up is {u_best:.3g} (at {10**log_best:.3g} ohm)",
            hint="raise the tolerance, lower the noise floor (narrower IF bandwidth, more "
            "power) or reduce the trace noise and through drift",
        )
    # The first point below the tolerance on the way up, the first above it beyond.
    log_min = _narrowed(rel, lo, log_best, 1e-12, lambda u: int(np.argmax(u < tolerance)))
    log_max = _narrowed(rel, log_best, hi, 1e-12, lambda u: int(np.argmax(u >= tolerance)))
    return Window(
        z_min=10.0**log_min,
        z_max=10.0**log_max,
        z0=float(z0),
        series_r=float(series_r),
        noise_floor_db=float(noise_floor_db),
        trace_noise_db=float(trace_noise_db),
        tolerance=float(tolerance),
        through_drift_db=float(through_drift_db),
        ze=ze,
        noise_floor=noise,
        multiplicative_error=eps,
        z_best=10.0**log_best,
        best_uncertainty=u_best,
        method=method,
        reflection_uncertainty=d_gamma,
    )


def _narrowed(
    fn: Callable[[NDArray[np.float64]], NDArray[np.float64]],
    a: float,
    b: float,
    xtol: float,
    pick: Callable[[NDArray[np.float64]], int],
    *,
    minimum: bool = False,
) -> float:
    """Where ``pick`` points on ``fn`` over [a, b], to within ``xtol``: a grid of 65
    points is evaluated at once and narrowed around the chosen point (the neighbours on
    both sides for a ``minimum`` of a one-valley function, else the step ending at the
    first point that crosses), 32 times narrower a round. Numpy only: ``scipy.optimize``
    costs a command half a second of start-up for this one search."""
    while b - a > xtol:
        x = np.linspace(a, b, 65)
        i = pick(fn(x))
        if minimum:
            a, b = x[max(i - 1, 0)], x[min(i + 1, x.size - 1)]
        else:
            a, b = x[max(i - 1, 0)], x[max(i, 1)]
    return 0.5 * (a + b)


def unbounded_window(tolerance: float = 1.0) -> Window:
    """The window of data taken as given: no cut (``z_min`` 0, ``z_max`` inf)."""
    return Window(
        z_min=0.0,
        z_max=math.inf,
        z0=50.0,
        series_r=0.0,
        noise_floor_db=-math.inf,
        trace_noise_db=0.0,
        tolerance=tolerance,
        through_drift_db=0.0,
        noise_floor=0.0,
        method="as-given",
    )


def relative_uncertainty(z: ArrayLike, window: Window) -> NDArray[np.float64]:
    """One-sigma relative uncertainty of each measured impedance ``z`` (Ω), a fraction.

    ``sqrt(a² + m²)`` with ``a = N/|S21n(1 − S21n)|`` and ``m = ε/|1 − S21n|`` as defined
    in the module docstring, ``S21n`` being the transmission this ``z`` gives on the
    window's set-up. NaN impedances give NaN; 0 and infinity give infinity.
    """
    zz = np.asarray(z, dtype=complex)
    if window.method not in METHODS:
        raise ValueError(
            f"a {window.method} window has no uncertainty model; the data carry their own"
        )
    out = _uncertainty(
        zz,
        window.ze,
        window.noise_floor,
        window.multiplicative_error,
        window.method,
        window.reflection_uncertainty,
    )
    return np.where(np.isnan(zz), np.nan, out)


def inside_window(z: ArrayLike, window: Window) -> NDArray[np.bool_]:
    """True where ``z`` (Ω) is measurable within the window's tolerance."""
    if window.method not in METHODS:
        return np.isfinite(np.asarray(z, dtype=complex))
    u = relative_uncertainty(z, window)
    with np.errstate(invalid="ignore"):
        # A hair of slack so a point exactly on a bound counts as inside.
        return np.asarray(u <= window.tolerance * (1.0 + 1e-9), dtype=bool)
