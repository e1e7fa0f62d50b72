"""Finding the points a passive model must not follow: the fitter's screening.

Four kinds of point are left out of a fit and reported (reason, count, band):

- ``negative-resistance``: Re Z below zero by more than :func:`negative_threshold`
  times its uncertainty (about 4 sigma for a sweep of hundreds of points). No passive
  part gives it; a calibration residue (a through with a little delay left in it, a
  drifted load) does. Found before the fit.
- ``isolated``: one or two points inside the window standing alone, more than
  :data:`GLITCH_NEIGHBOURS` sweep points from any other point the fit uses, that jump
  away from the measured points on either side of them (outside the window, so known
  less well, but measured) and back: a glitch that happened to land inside the window.
  A fit bends to a lone point at no cost to the rest, so its residual cannot show the
  glitch: a phase slip on a milliohm part measured by reflection gives ten ohms inside
  the window a decade above every other usable point, and the model's resonance follows
  it. Found before the fit, from the sweep alone (:func:`isolated`). A lone point in line
  with its neighbours (a resonance peak that just reaches into the window) stays.
- ``glitch``: an isolated point (one or two in a row) far off a fit that follows its
  neighbours: a trigger slip, a relay bounce, a spur. Found on the residuals.
- ``band-edge``: a run of points at the bottom or top of the band that the fit cannot
  follow while the rest of the band it follows, and which holds negative-resistance
  points: a fixture mode or a calibration residue taking over (a passive part cannot
  give them, so the run is not the part). At most :data:`EDGE_SHARE` of the points. A
  run the fit misses without such points is the model's shortfall and stays in the fit,
  where the quality figures show it.

Residuals here are ``|ln Zmodel − ln Zmeasured|`` over the point's weight (its
uncertainty with the model-error floor), so 1 is a typical point. The thresholds are
common practice for outlier screening (a few sigma, docs/references.md §11), no source.
No I/O.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from statistics import NormalDist
from typing import Any

import numpy as np
from numpy.typing import NDArray

NEGATIVE_SIGMAS = 3.0
# The chance that a clean sweep loses any point as negative resistance by its noise
# alone. Judged at NEGATIVE_SIGMAS each, one point in 740 would be (one-sided normal
# tail): on a low-loss inductor, where Re Z lies near zero against |Z| over most of the
# band, about a third of clean 801-point sweeps lost a point. Each point is judged
# instead at the Šidák threshold for the points judged together, 1 − (1 − α)^(1/n) per
# point (Šidák 1967, JASA 62, from memory; docs/references.md §11), never below
# NEGATIVE_SIGMAS: 4.2 sigma for 801 points. A calibration residue lies many sigma
# below zero and is still found; the band-edge test still takes any point 3 sigma below
# zero as evidence that the part is not what a run at the edge shows.
NEGATIVE_FALSE_ALARM = 0.01
GLITCH_LEVEL = 4.0
# A glitch stands this many times above the median residual of its neighbours.
GLITCH_CONTRAST = 4.0
GLITCH_NEIGHBOURS = 3
# A lone point is out of line when its distance from the line through the points beside
# it exceeds SPIKE_CONTRAST times the distance between those points (a spike out and
# back, not a step or a resonance swinging the phase through the point) and
# GLITCH_LEVEL times their joint uncertainty.
ISLAND_POINTS = 2
SPIKE_CONTRAST = 2.0
# A reading whose relative uncertainty is this or more is noise (within its own noise of
# zero): it neither vouches for a lone point beside it nor shows it out of line.
VAGUE = 1.0
EDGE_LEVEL = 3.0
EDGE_SHARE = 0.2

#: The reasons above, each a point's fate in ``FitResult.point_status``; the first
#: three leave out points inside the band the fit covers (a band edge shortens it).
REASONS = ("negative-resistance", "isolated", "glitch", "band-edge")
IN_BAND = REASONS[:3]


def screened(point_status: Any, size: int, reasons: tuple[str, ...] = REASONS) -> NDArray[np.bool_]:
    """The points a fit's ``point_status`` marks with one of ``reasons``: none when the
    status does not cover ``size`` points (no fit, or a fit made on other points)."""
    status = point_status or ()
    if len(status) != size:
        return np.zeros(size, dtype=bool)
    return np.isin(np.asarray(status, dtype=object), reasons)


@dataclass(frozen=True)
class Exclusion:
    """Points left out of a fit for one reason: how many, the band they span (Hz) and
    the frequencies (Hz) themselves (at most the first 20)."""

    reason: str
    count: int
    f_lo: float
    f_hi: float
    frequencies: tuple[float, ...] = ()

    def to_dict(self) -> dict[str, object]:
        return {
            "reason": self.reason,
            "count": self.count,
            "f_lo": self.f_lo,
            "f_hi": self.f_hi,
            "frequencies": list(self.frequencies),
        }


def exclusion(reason: str, f: NDArray[np.float64], mask: NDArray[np.bool_]) -> Exclusion | None:
    """An :class:`Exclusion` for the points of ``mask``, or None when it marks none."""
    if not np.any(mask):
        return None
    fs = f[mask]
    return Exclusion(reason, int(fs.size), float(fs[0]), float(fs[-1]), tuple(map(float, fs[:20])))


def negative_threshold(points: int) -> float:
    """The sigmas below zero at which one of ``points`` points judged together is left
    out as negative resistance: the Šidák threshold for :data:`NEGATIVE_FALSE_ALARM`,
    at least :data:`NEGATIVE_SIGMAS`."""
    if points <= 1:
        return NEGATIVE_SIGMAS
    per_point = -math.expm1(math.log1p(-NEGATIVE_FALSE_ALARM) / points)
    return max(NEGATIVE_SIGMAS, NormalDist().inv_cdf(1.0 - per_point))


def negative_resistance(
    z: NDArray[np.complex128],
    rel_uncertainty: NDArray[np.float64],
    sigmas: float = NEGATIVE_SIGMAS,
) -> NDArray[np.bool_]:
    """Points whose Re Z lies below zero by more than ``sigmas`` times its one-sigma
    uncertainty ``|Z|·u/√2`` (``u`` the relative uncertainty of Z, shared by its two
    components)."""
    sigma = np.abs(z) * np.abs(rel_uncertainty) / np.sqrt(2.0)
    return z.real < -sigmas * sigma


def _wrapped(d: NDArray[np.complex128]) -> NDArray[np.complex128]:
    """A difference of complex logarithms with its phase taken into (−π, π]."""
    return d.real + 1j * np.angle(np.exp(1j * d.imag))


def _lone_runs(used: NDArray[np.bool_]) -> tuple[NDArray[np.intp], NDArray[np.intp]]:
    """The first and last sweep index of each run of at most :data:`ISLAND_POINTS`
    points of ``used`` with more than :data:`GLITCH_NEIGHBOURS` sweep points to the next
    used point on each side (or the end of the sweep)."""
    n = used.size
    idx = np.flatnonzero(used)
    if idx.size == 0:
        return idx, idx
    # Runs of used points: their first and last sweep index, and the gaps between them.
    breaks = np.flatnonzero(np.diff(idx) > 1)
    starts = idx[np.r_[0, breaks + 1]]
    ends = idx[np.r_[breaks, idx.size - 1]]
    gap_before = np.r_[n, starts[1:] - ends[:-1] - 1]
    gap_after = np.r_[starts[1:] - ends[:-1] - 1, n]
    lone = (ends - starts < ISLAND_POINTS) & (np.minimum(gap_before, gap_after) > GLITCH_NEIGHBOURS)
    return starts[lone], ends[lone]


def _run_points(first: NDArray[np.intp], last: NDArray[np.intp]) -> NDArray[np.intp]:
    """Every index of the runs ``first[i]`` to ``last[i]`` (inclusive), in order."""
    size = last - first + 1
    return np.repeat(first, size) + np.arange(size.sum()) - np.repeat(np.cumsum(size) - size, size)


def apart(used: NDArray[np.bool_]) -> NDArray[np.bool_]:
    """The points of ``used`` in lone runs (see :func:`isolated`), in line with their
    neighbours or not: one or two points standing apart from the rest of the band."""
    out = np.zeros(used.size, bool)
    out[_run_points(*_lone_runs(used))] = True
    return out


def isolated(
    f: NDArray[np.float64],
    z: NDArray[np.complex128],
    rel_uncertainty: NDArray[np.float64],
    used: NDArray[np.bool_],
    measured: NDArray[np.bool_],
) -> NDArray[np.bool_]:
    """Lone used points out of line with the sweep beside them (``isolated`` above).

    A run of at most :data:`ISLAND_POINTS` points of ``used`` with more than
    :data:`GLITCH_NEIGHBOURS` sweep points to the next used point on each side (or the
    end of the sweep) is checked against the nearest ``measured`` points (finite, with a
    finite uncertainty) outside the run: ln Z of each of its points against the line in
    (ln f, ln Z) through the neighbours before and after it (through the last two
    on one side at an end of the sweep). It is out of line when its distance from that
    line exceeds :data:`SPIKE_CONTRAST` times the distance between the two neighbours
    and :data:`GLITCH_LEVEL` times the joint uncertainty (each point's relative
    uncertainty ``u`` taken as ``ln(1 + u)`` in ln Z, so that the wide uncertainty of
    points far outside the window stays finite). A run with no such neighbours cannot be
    checked and is kept."""
    n = f.size
    out = np.zeros(n, bool)
    first, last = _lone_runs(used)
    if first.size == 0:
        return out
    # Each lone point, with the first and last index of its run.
    size = last - first + 1
    p = _run_points(first, last)
    first, last = np.repeat(first, size), np.repeat(last, size)
    # Its neighbours: the nearest measured points before and after the run, or the two
    # nearest on one side at an end of the sweep.
    known = np.flatnonzero(measured)
    before = np.searchsorted(known, first) - 1
    after = np.searchsorted(known, last, side="right")
    both = (before >= 0) & (after < known.size)
    only_before = ~both & (before >= 1)
    only_after = ~both & ~only_before & (after + 1 < known.size)
    judged = both | only_before | only_after
    if not np.any(judged):
        return out
    last_known = max(known.size - 1, 0)
    a = np.where(both, before, np.where(only_before, before - 1, after + 1))
    b = np.where(both, after, np.where(only_before, before, after))
    p, a, b = (
        p[judged],
        known[np.clip(a[judged], 0, last_known)],
        known[np.clip(b[judged], 0, last_known)],
    )
    x = np.log(f)
    with np.errstate(all="ignore"):
        log_z = np.log(z[p]), np.log(z[a]), np.log(z[b])
    s = np.log1p(np.abs(rel_uncertainty))
    t = (x[p] - x[a]) / (x[b] - x[a])
    step = _wrapped(log_z[2] - log_z[1])
    off = np.abs(_wrapped(log_z[0] - (log_z[1] + t * step)))
    sigma = np.sqrt(s[p] ** 2 + ((1 - t) * s[a]) ** 2 + (t * s[b]) ** 2)
    # Beyond the neighbours (an end of the sweep) the line's change grows with the
    # distance from them.
    reach = np.maximum(1.0, np.maximum(np.abs(t), np.abs(1 - t)))
    in_log = (off > SPIKE_CONTRAST * reach * np.abs(step)) & (off > GLITCH_LEVEL * sigma)
    # The same in Z itself, against each point's absolute uncertainty u·|Z|: below the
    # window's floor a reading is the floor's noise, which adds to Z rather than scaling
    # it, and there ln(1 + u) makes neighbours of any reading look too vague to judge.
    # Only where the neighbours are near (a straight line in Z holds over a step or two).
    z_p, z_a, z_b = z[p], z[a], z[b]
    a_abs = np.abs(rel_uncertainty) * np.abs(z)
    off_z = np.abs(z_p - (z_a + t * (z_b - z_a)))
    sigma_z = np.sqrt(a_abs[p] ** 2 + ((1 - t) * a_abs[a]) ** 2 + (t * a_abs[b]) ** 2)
    in_z = (
        (reach <= 2.0)
        & (off_z > SPIKE_CONTRAST * reach * np.abs(z_b - z_a))
        & (off_z > GLITCH_LEVEL * sigma_z)
    )
    out[p] = in_log | in_z
    return out


def unvouched(
    rel_uncertainty: NDArray[np.float64],
    used: NDArray[np.bool_],
    measured: NDArray[np.bool_],
) -> NDArray[np.bool_]:
    """Points of lone runs of ``used`` (:func:`apart`) whose nearest ``measured``
    neighbours outside the run, on each side that has one, are all noise: relative
    uncertainty :data:`VAGUE` or more, a reading within its own noise of zero (or that
    have no measured neighbour at all). Such neighbours cannot vouch for the run, nor
    show it out of line (:func:`isolated`): the fitter judges it against the model of
    the rest of the band instead."""
    out = np.zeros(used.size, bool)
    first, last = _lone_runs(used)
    if first.size == 0:
        return out
    known = np.flatnonzero(measured)
    u = np.abs(np.asarray(rel_uncertainty, dtype=float))
    # The measured points' uncertainty, with an end of the sweep as noise.
    u_known = np.r_[np.inf, u[known], np.inf]
    before = np.searchsorted(known, first)  # in u_known: the neighbour before the run
    after = np.searchsorted(known, last, side="right") + 1
    vague = (u_known[before] >= VAGUE) & (u_known[after] >= VAGUE)
    out[_run_points(first[vague], last[vague])] = True
    return out


def glitches(residual: NDArray[np.float64]) -> NDArray[np.bool_]:
    """Isolated points far off the fit: above :data:`GLITCH_LEVEL` and
    :data:`GLITCH_CONTRAST` times the median of their neighbours (up to
    :data:`GLITCH_NEIGHBOURS` on each side, the point itself left out); a run of more
    than two such points is a feature, not a glitch."""
    n = residual.size
    out = np.zeros(n, bool)
    if n < 2 * GLITCH_NEIGHBOURS + 1:
        return out
    k = GLITCH_NEIGHBOURS
    padded = np.pad(residual, k, mode="reflect")
    windows = np.lib.stride_tricks.sliding_window_view(padded, 2 * k + 1)
    neighbours = np.delete(windows, k, axis=1)
    local = np.median(neighbours, axis=1)
    out = (residual > GLITCH_LEVEL) & (residual > GLITCH_CONTRAST * np.maximum(local, 0.5))
    # Runs longer than two are not isolated.
    idx = np.flatnonzero(out)
    if idx.size:
        runs = np.split(idx, np.flatnonzero(np.diff(idx) > 1) + 1)
        for run in runs:
            if run.size > 2:
                out[run] = False
    return out


def band_edges(residual: NDArray[np.float64], negative: NDArray[np.bool_]) -> NDArray[np.bool_]:
    """Runs at either end of the band taken over by something no model of the part
    follows. ``residual`` is ``inf`` at points left out as negative resistance."""
    n = residual.size
    out = np.zeros(n, bool)
    limit = int(EDGE_SHARE * n)
    for order in (np.arange(n), np.arange(n)[::-1]):
        high = residual[order] > EDGE_LEVEL
        length = int(np.argmin(high)) if not np.all(high) else n
        if length < 2 or length > limit:
            continue
        run = order[:length]
        if np.any(negative[run]):
            out[run] = True
    return out
