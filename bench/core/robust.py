"""Finding the points a passive model must not follow: the fitter's screening.

Three kinds of point are left out of a fit and reported (reason, count, band):

- ``negative-resistance``: Re Z below zero by more than :data:`NEGATIVE_SIGMAS` times
  its uncertainty. No passive part gives it; a calibration residue (a through with a
  little delay left in it, a drifted load) does. Found before the fit.
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

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

NEGATIVE_SIGMAS = 3.0
GLITCH_LEVEL = 4.0
# A glitch stands this many times above the median residual of its neighbours.
GLITCH_CONTRAST = 4.0
GLITCH_NEIGHBOURS = 3
EDGE_LEVEL = 3.0
EDGE_SHARE = 0.2


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


def negative_resistance(
    z: NDArray[np.complex128], rel_uncertainty: NDArray[np.float64]
) -> NDArray[np.bool_]:
    """Points whose Re Z lies below zero by more than :data:`NEGATIVE_SIGMAS` times its
    one-sigma uncertainty ``|Z|·u/√2`` (``u`` the relative uncertainty of Z, shared by
    its two components)."""
    sigma = np.abs(z) * np.abs(rel_uncertainty) / np.sqrt(2.0)
    return z.real < -NEGATIVE_SIGMAS * sigma


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
