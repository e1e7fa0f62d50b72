"""One broadband impedance from several set-ups of one part (stitching).

Each set-up (a method, a series-resistor board, an analyser) gives an
:class:`~bench.core.impedance.ImpedanceData` with its own window and per-point
uncertainty. :func:`stitch` puts them on the union of their frequency grids and, at each
frequency, averages the complex log impedance of the set-ups whose point lies inside
their window, each weighted by the inverse of its variance (``1/u²``, ``u`` the relative
one-sigma uncertainty, which is the sigma of Re and Im of ln Z; docs/references.md §10).
The merged uncertainty is ``1/√Σ(1/u²)``.

Where two set-ups overlap they must agree within their uncertainties: a run of at least
``min_points`` consecutive common points (gaps of up to two points bridged) where
``|ln Za − ln Zb|`` exceeds ``threshold`` times ``√(ua² + ub²)`` is reported as a
:class:`Disagreement` naming its band, its size (the median ``|Za/Zb − 1|`` there)
and the two set-ups. Values are still merged there: the report says which to trust.

A constant offset between two set-ups over their whole overlap (one analyser's gain or a
fixture differing by a few per cent) can stay inside every point's uncertainty and still
be plain: the weighted mean of ``ln Za − ln Zb`` over the overlap is known to its standard
error, ``1/√Σ(1/(ua² + ub²))``. A mean beyond :data:`OFFSET_SIGMAS` standard errors (taken
√2 larger, since the points of two interleaved grids are interpolated and not all
independent) and beyond :data:`OFFSET_FLOOR` of the points' own median uncertainty (a
systematic part of that uncertainty does not average away) is reported as a
:class:`Disagreement` over the whole overlap with ``systematic`` set.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from bench.core.impedance import ImpedanceData
from bench.core.window import Window

#: A gap larger than this many combined sigmas counts as a disagreement.
DEFAULT_THRESHOLD = 2.0
#: Fewest consecutive disagreeing points reported as a band (single points are noise).
DEFAULT_MIN_POINTS = 3
#: A constant offset over an overlap is reported beyond this many standard errors of its
#: mean (a difference beyond chance, common practice, no source) ...
OFFSET_SIGMAS = 5.0
#: ... and beyond this fraction of the points' median combined uncertainty.
OFFSET_FLOOR = 0.5


@dataclass(frozen=True)
class Disagreement:
    """Two set-ups that differ beyond their uncertainties over ``f_lo`` … ``f_hi`` (Hz).

    ``size`` is the median relative difference ``|Za/Zb − 1|`` over the band (a fraction),
    ``labels`` the two set-ups, ``points`` the number of points in the band.
    """

    f_lo: float
    f_hi: float
    size: float
    labels: tuple[str, str]
    points: int
    #: A constant offset over the whole overlap (``size`` its magnitude, ``sigmas`` how
    #: many standard errors of its mean), rather than a band beyond the points' own.
    systematic: bool = False
    sigmas: float = 0.0

    def describe(self) -> str:
        """One line for a person: band, size and the set-ups."""
        if self.systematic:
            return (
                f"{self.labels[0]} and {self.labels[1]} differ by {100 * self.size:.3g} % "
                f"throughout their overlap, {self.f_lo:.4g} Hz to {self.f_hi:.4g} Hz "
                f"({self.points} points, {self.sigmas:.3g} standard errors): a constant "
                "offset, within each point's uncertainty but not by chance; check the "
                "calibration, the fixture or the gain of one of them"
            )
        return (
            f"{self.labels[0]} and {self.labels[1]} differ by {100 * self.size:.3g} % "
            f"from {self.f_lo:.4g} Hz to {self.f_hi:.4g} Hz ({self.points} points), "
            "more than their uncertainties allow"
        )


@dataclass(frozen=True, eq=False)
class Stitched:
    """The merged impedance, what disagreed, and the set-ups it came from."""

    data: ImpedanceData
    disagreements: tuple[Disagreement, ...]
    segments: tuple[ImpedanceData, ...]
    labels: tuple[str, ...]

    @property
    def warnings(self) -> tuple[str, ...]:
        """Each disagreement as a sentence."""
        return tuple(d.describe() for d in self.disagreements)


def _on_grid(
    seg: ImpedanceData, grid: NDArray[np.float64]
) -> tuple[NDArray[np.complex128], NDArray[np.float64], NDArray[np.bool_], NDArray[np.bool_]]:
    """Log impedance, uncertainty, inside-window and covered masks of ``seg`` on ``grid``."""
    f = np.asarray(seg.f, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        lz = np.log(np.asarray(seg.z, dtype=complex))
    u = np.asarray(seg.rel_uncertainty, dtype=float)
    good = np.asarray(seg.inside_window, dtype=bool) & np.isfinite(lz) & np.isfinite(u) & (u > 0)
    covered = (grid >= f[0] * (1 - 1e-12)) & (grid <= f[-1] * (1 + 1e-12))
    lf, lg = np.log(f), np.log(grid)
    # Bad points are bridged for interpolation only; the mask below keeps them out.
    usable = np.isfinite(lz) & np.isfinite(u)
    if np.count_nonzero(usable) < 2:
        n = grid.size
        return (
            np.zeros(n, complex),
            np.full(n, np.inf),
            np.zeros(n, bool),
            covered,
        )
    re = np.interp(lg, lf[usable], lz.real[usable])
    im = np.interp(lg, lf[usable], lz.imag[usable])
    uu = np.interp(lg, lf[usable], u[usable])
    # A grid point is inside when every source point next to it is inside.
    inside = np.interp(lg, lf, good.astype(float)) >= 1.0 - 1e-9
    return re + 1j * im, uu, inside & covered, covered


def _runs(mask: NDArray[np.bool_], bridge: int = 2) -> list[tuple[int, int]]:
    """``[start, stop)`` index pairs of consecutive True values; runs separated by at
    most ``bridge`` False values are one run (noise splits a real offset otherwise)."""
    edges = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    runs: list[tuple[int, int]] = []
    for start, stop in zip(np.flatnonzero(edges == 1), np.flatnonzero(edges == -1), strict=True):
        if runs and start - runs[-1][1] <= bridge:
            runs[-1] = (runs[-1][0], int(stop))
        else:
            runs.append((int(start), int(stop)))
    return runs


def stitch(
    segments: Sequence[ImpedanceData],
    labels: Sequence[str] | None = None,
    *,
    threshold: float = DEFAULT_THRESHOLD,
    min_points: int = DEFAULT_MIN_POINTS,
) -> Stitched:
    """Merge several set-ups of one part into one impedance (see the module doc).

    ``segments`` (at least one) are the set-ups' data, ``labels`` their names (default
    ``setup 1``, ``setup 2`` …). Points no set-up measures inside its window are taken
    from the set-up with the smallest uncertainty there and marked outside the window.
    """
    segs = tuple(segments)
    if not segs:
        raise ValueError("stitch needs at least one set-up")
    names = (
        tuple(labels) if labels is not None else tuple(f"setup {i + 1}" for i in range(len(segs)))
    )
    if len(names) != len(segs):
        raise ValueError(f"{len(segs)} set-ups but {len(names)} labels")
    grid = np.unique(np.concatenate([np.asarray(s.f, dtype=float) for s in segs]))
    parts = [_on_grid(s, grid) for s in segs]
    lz = np.array([p[0] for p in parts])
    u = np.array([p[1] for p in parts])
    inside = np.array([p[2] for p in parts])
    covered = np.array([p[3] for p in parts])

    with np.errstate(divide="ignore", invalid="ignore"):
        weight = np.where(inside, 1.0 / u**2, 0.0)
        total = weight.sum(axis=0)
        merged_lz = (weight * lz).sum(axis=0) / total
        merged_u = 1.0 / np.sqrt(total)
    any_inside = total > 0
    # Outside every window: the least uncertain set-up that covers the point.
    fallback_u = np.where(covered, u, np.inf)
    best = np.argmin(fallback_u, axis=0)
    cols = np.arange(grid.size)
    merged_lz = np.where(any_inside, merged_lz, lz[best, cols])
    merged_u = np.where(any_inside, merged_u, u[best, cols])

    found: list[Disagreement] = []
    for i in range(len(segs)):
        for j in range(i + 1, len(segs)):
            both = inside[i] & inside[j]
            if not both.any():
                continue
            gap = np.abs(lz[i] - lz[j])
            sigma = np.hypot(u[i], u[j])
            flagged = both & (gap > threshold * sigma)
            for start, stop in _runs(flagged):
                band = np.zeros(grid.size, dtype=bool)
                band[start:stop] = True
                band &= flagged
                if np.count_nonzero(band) < min_points:
                    continue
                size = float(np.median(np.abs(np.exp(lz[i, band] - lz[j, band]) - 1)))
                found.append(
                    Disagreement(
                        f_lo=float(grid[start]),
                        f_hi=float(grid[stop - 1]),
                        size=size,
                        labels=(names[i], names[j]),
                        points=int(np.count_nonzero(band)),
                    )
                )
            # Also where bands were found: chance breaks an offset into bands of noise.
            offset = _offset(grid, lz[i] - lz[j], sigma, both, (names[i], names[j]), min_points)
            if offset is not None:
                found.append(offset)
    z = np.exp(merged_lz)
    data = ImpedanceData(
        f=grid,
        z=z,
        rel_uncertainty=merged_u,
        inside_window=any_inside,
        window=_union_window(segs),
        z_measured=z,
    )
    return Stitched(data=data, disagreements=tuple(found), segments=segs, labels=names)


def _offset(
    grid: NDArray[np.float64],
    difference: NDArray[np.complex128],
    sigma: NDArray[np.float64],
    both: NDArray[np.bool_],
    labels: tuple[str, str],
    min_points: int = DEFAULT_MIN_POINTS,
) -> Disagreement | None:
    """The constant offset of two set-ups over their overlap ``both`` (module doc), or
    None when their mean difference is within chance or within the points' own floor.
    ``difference`` is ``ln Za − ln Zb``, ``sigma`` its one-sigma per point (of Re and Im
    alike)."""
    n = int(np.count_nonzero(both))
    if n < min_points:
        return None
    d, s = difference[both], sigma[both]
    w = 1.0 / s**2
    mean = complex(np.sum(w * d) / np.sum(w))
    error = math.sqrt(2.0) / math.sqrt(float(np.sum(w)))
    sigmas = abs(mean) / error
    if sigmas <= OFFSET_SIGMAS or abs(mean) <= OFFSET_FLOOR * float(np.median(s)):
        return None
    idx = np.flatnonzero(both)
    return Disagreement(
        f_lo=float(grid[idx[0]]),
        f_hi=float(grid[idx[-1]]),
        size=abs(complex(np.exp(mean)) - 1.0),
        labels=labels,
        points=n,
        systematic=True,
        sigmas=sigmas,
    )


def _union_window(segs: tuple[ImpedanceData, ...]) -> Window:
    """A window spanning every set-up's window (method ``stitched``)."""
    lows = [s.window.z_min for s in segs]
    highs = [s.window.z_max for s in segs]
    first = segs[0].window
    return Window(
        z_min=float(min(lows)),
        z_max=float(max(highs)),
        z0=first.z0,
        series_r=first.series_r,
        noise_floor_db=first.noise_floor_db,
        trace_noise_db=first.trace_noise_db,
        tolerance=max(s.window.tolerance for s in segs if math.isfinite(s.window.tolerance)),
        through_drift_db=first.through_drift_db,
        noise_floor=first.noise_floor,
        method="stitched",
    )
