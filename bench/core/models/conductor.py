"""The conductor element ``K`` (a resistance with a skin corner) as a ladder of R‖L
sections: its impedance per ohm, the derivative in its corner and its SPICE ladder
(docs/references.md §17; see :func:`bench.core.models.network.K`). No I/O.
"""

from __future__ import annotations

import functools

import numpy as np
from numpy.typing import NDArray

ComplexArray = NDArray[np.complex128]

# R‖L sections per decade of the conductor ladder: four keep it within 0.4 % of
# R·√(1 + jω/ωc) [derived numerically, see the tests].
CONDUCTOR_PER_DECADE = 4.0


@functools.lru_cache(maxsize=64)
def _conductor_parts(band: tuple[float, float]) -> tuple[NDArray[np.float64], ...]:
    """``(g, rho, tail)``: per ohm of DC resistance, the sections' resistances ``g``, their
    corners ``rho`` as multiples of ωc, and the inductance ``tail`` (times 1/ωc) standing
    for the sections above the ladder's top.

    ``√(1 + x) = 1 + ∫₁^∞ (√(λ − 1)/(π·λ))·x/(λ + x) dλ`` (a Stieltjes form; the density
    is ``Im √(1 − λ)/π`` on the branch cut) [derived]: a resistor and a continuum of R‖L
    sections ``r·s/(λ·ωc + s)``, ``r = R·√(λ − 1)/(π·λ)·dλ``. Cells of equal width in
    ln λ from 1 to ``band[1]/band[0]``; each cell's section matches the cell's resistance
    ``∫√(λ−1)/(πλ) dλ = [2t − 2·atan t]/π`` and its inductance
    ``∫√(λ−1)/(πλ²) dλ = [atan t − t/(1 + t²)]/π`` (t = √(λ − 1)), its corner their
    ratio; the tail above the top is its inductance alone, so the low-frequency
    inductance is exactly ``R/(2ωc)`` [derived].
    """
    top = band[1] / band[0]
    n = max(2, int(np.ceil(CONDUCTOR_PER_DECADE * np.log10(top))))
    t = np.sqrt(np.exp(np.linspace(0.0, np.log(top), n + 1)) - 1.0)
    g = np.diff(2 * t - 2 * np.arctan(t)) / np.pi
    h = np.diff(np.arctan(t) - t / (1 + t * t)) / np.pi
    tail = (np.pi / 2 - np.arctan(t[-1]) + t[-1] / (1 + t[-1] ** 2)) / np.pi
    out = (g, g / h, np.array(tail))
    for a in out:
        a.flags.writeable = False  # kept per band (a fit asks for them at every step)
    return out


def _conductor_shape(
    jw: ComplexArray, corner: float, band: tuple[float, float]
) -> tuple[ComplexArray, ComplexArray]:
    """Impedance per ohm of a ``K`` element with corner ``corner`` (Hz), its ladder
    itself, and its derivative with respect to ``ln ωc``.

    ``jw`` is imaginary (``jω``), so each section ``jx/(1 + jx)`` (``x = ω/u``, ``u`` its
    corner) is taken in real arithmetic: with ``a = 1/(1 + x²)`` it is ``x²a + j·x·a``,
    and its derivative with respect to ``ln ωc`` (``dx = −x``), ``−jx/(1 + jx)²``, is
    ``−2x²a² − j·x·a·(a − x²a)`` [derived]; the same ladder, about ten times faster
    than complex division per section.
    """
    z, terms = conductor_terms(jw, corner, band)
    return z, conductor_slope(terms)


def conductor_terms(
    jw: ComplexArray, corner: float, band: tuple[float, float]
) -> tuple[ComplexArray, tuple]:
    """The impedance per ohm of :func:`_conductor_shape` and the terms its derivative is
    made of (:func:`conductor_slope`), which a fitter's step without a Jacobian skips.

    The sections whose corners lie far above the grid (``x = ω/u`` at most
    :data:`SERIES_X` at every point) are summed as the first terms of their power
    series, ``x²a = x² − x⁴ + x⁶ − …`` and ``xa = x − x³ + x⁵ − …`` [derived], from sums
    of ``g·ρ^(−m)`` kept per band: above the grid most of a wide band's sections are
    such, and the series costs a few operations on the grid instead of one per section
    (the terms left out are below 1e-17 of the shape)."""
    g, rho, tail = _conductor_parts(band)
    wc = 2 * np.pi * corner
    w = jw.imag
    split = g.size
    if g.size * w.size >= SERIES_MIN and w.size:
        split = int(np.searchsorted(rho, float(w.max()) / (SERIES_X * wc)))
        if (g.size - split) * w.size < SERIES_MIN:
            split = g.size  # too few sections in series to pay for the series
    series = split < g.size
    if series:
        g = g[:split]
        rho = rho[:split]
    x = (1.0 / (rho * wc))[:, None] * w[None, :]
    a = 1.0 / (1.0 + x * x)
    xa = x * a
    x2a = x * xa  # 1 − a, without the cancellation
    w_tail = (tail / wc) * w
    if not series:
        return (1.0 + g @ x2a) + 1j * (g @ xa + w_tail), (g, a, xa, x2a, w_tail, None)
    s = _series_sums(band)[:, split]
    y = w / wc
    y2 = y * y
    re = (1.0 + g @ x2a) + y2 * (s[1] - y2 * (s[3] - y2 * s[5]))
    im = (g @ xa + w_tail) + y * (s[0] - y2 * (s[2] - y2 * s[4]))
    return re + 1j * im, (g, a, xa, x2a, w_tail, (y, y2, s))


def conductor_slope(terms: tuple) -> ComplexArray:
    """The derivative of a ``K`` element's shape in ``ln ωc`` from :func:`conductor_terms`
    (``−2·x²a² − j·x·a·(a − x²a)`` per section, ``x²/(1 + x²)² = x² − 2x⁴ + 3x⁶ − …``
    and ``x(1 − x²)/(1 + x²)² = x − 3x³ + 5x⁵ − …`` for those in series [derived])."""
    g, a, xa, x2a, w_tail, high = terms
    if high is None:
        return -2.0 * (g @ (x2a * a)) - 1j * (g @ (xa * (a - x2a)) + w_tail)
    y, y2, s = high
    re = -2.0 * (g @ (x2a * a)) - 2.0 * y2 * (s[1] - y2 * (2.0 * s[3] - 3.0 * y2 * s[5]))
    im = (g @ (xa * (a - x2a)) + w_tail) + y * (s[0] - y2 * (3.0 * s[2] - 5.0 * y2 * s[4]))
    return re - 1j * im


# A section with ``x = ω/u`` at most this at every point of a grid is summed in series
# (:func:`conductor_terms`): the first terms left out are ``x⁷`` and ``x⁸`` of it.
SERIES_X = 1e-3
# The series is used when it replaces at least this many section-points (each section
# costs a few array operations on the grid; the series a dozen, whatever their number).
SERIES_MIN = 8000


@functools.lru_cache(maxsize=64)
def _series_sums(band: tuple[float, float]) -> NDArray[np.float64]:
    """``S[m − 1, k] = Σ_{i ≥ k} g_i·ρ_i^(−m)``, m = 1..6, of the sections of
    :func:`_conductor_parts` (a last column of zeros)."""
    g, rho, _ = _conductor_parts(band)
    powers = g[None, :] * rho[None, :] ** -np.arange(1.0, 7.0)[:, None]
    out = np.zeros((6, g.size + 1))
    out[:, :-1] = np.cumsum(powers[:, ::-1], axis=1)[:, ::-1]
    out.flags.writeable = False
    return out


def conductor_continuum(jw: ComplexArray, corner: float) -> ComplexArray:
    """``√(1 + jω/ωc)``: impedance per ohm of the continuous conductor form (skin effect
    above the corner ``corner`` Hz; docs/references.md §9, from memory)."""
    return np.sqrt(1 + jw / (2 * np.pi * corner))


def conductor_ladder(
    value: float, corner: float, band: tuple[float, float]
) -> tuple[float, list[tuple[float, float]], float]:
    """``(R, [(R, L), ...], L)``: the series resistor, the R‖L sections and the tail
    inductor that stand for a ``K`` element of ``value`` Ω and corner ``corner`` Hz."""
    g, rho, tail = _conductor_parts(band)
    wc = 2 * np.pi * corner
    sections = [
        (float(value * gk), float(value * gk / (rk * wc))) for gk, rk in zip(g, rho, strict=True)
    ]
    return float(value), sections, float(value * tail / wc)
