"""Choosing among fitted candidates (docs/design.md §4).

Each family and order fitted is a :class:`Trial`. :func:`select` takes the one with the
lowest Bayesian information criterion among those the data support: a trial with an
element pinned at a bound of its range or not determined (one sigma above 100 %) has more
elements than the data can tell apart and is passed over for a simpler one. An element
that drops out (pinned where it harmlessly vanishes, or not determined even on its own)
is not counted: the trial is then the smaller circuit without it, and still supported
when the family marks that element optional (a bead's winding capacitance above the
measured band, say); a section that dropped out was not needed. No I/O.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from bench.core.models import ModelFamily
from bench.core.models.network import Node

BIC_MARGIN = 6.0
# An element whose one-sigma uncertainty exceeds its value (100 %) is not determined by
# the data: its confidence interval reaches from nothing to double.
UNDETERMINED = 1.0


def relative_spread(value: float | None, sigma: float | None) -> float | None:
    """``|sigma/value|``, a value's one-sigma uncertainty as a fraction of it; None when
    either is unknown (None, NaN) or the value is zero."""
    if value is None or sigma is None or not value or math.isnan(sigma) or math.isnan(value):
        return None
    return abs(sigma / value)


def undetermined(relative: float | None) -> bool:
    """Whether a relative one-sigma uncertainty says the data do not determine the value
    (beyond :data:`UNDETERMINED`); False when it is unknown."""
    return relative is not None and not relative <= UNDETERMINED


@dataclass(frozen=True)
class Trial:
    """One family and order fitted: its elements (``values``, log values ``q``), χ², criterion,
    rms log error, elements at a bound, each element's relative one-sigma uncertainty and
    the elements that dropped out (``dropped``: not seen by the data)."""

    family: ModelFamily
    order: int
    node: Node
    values: dict[str, float]
    q: NDArray[np.float64]
    chi2: float
    bic: float
    rms: float
    at_bound: tuple[str, ...]
    pinned: tuple[str, ...] = ()
    rel_sigma: dict[str, float] = field(default_factory=dict)
    dropped: tuple[str, ...] = ()
    # The valleys its scouts refined, ``(grid key, cost, log values)`` on the thinned grid
    # (``fitting._fit_order``): a restart of this order that reaches one ends there.
    valleys: tuple = ()

    @property
    def size(self) -> int:
        """The number of elements the data see (those that dropped out not counted)."""
        return self.q.size - len(self.dropped)

    @property
    def undetermined(self) -> tuple[str, ...]:
        return tuple(
            n for n, s in self.rel_sigma.items() if not s <= UNDETERMINED and n not in self.dropped
        )

    @property
    def supported(self) -> bool:
        """No element strained at a bound of its range, none the data see undetermined,
        and only elements the family marks optional dropped out (a section of the
        order that dropped out was not needed)."""
        return (
            not self.at_bound
            and not self.undetermined
            and set(self.dropped) <= set(self.family.optional)
        )

    @property
    def weakness(self) -> dict[str, float]:
        """Relative one-sigma uncertainty of each element, ``inf`` where it is pinned."""
        return {n: (math.inf if n in self.pinned else s) for n, s in self.rel_sigma.items()}


def dropped_elements(
    names: tuple[str, ...],
    jm: NDArray[np.float64],
    chi2: float,
    pinned: tuple[str, ...],
    at_bound: tuple[str, ...],
) -> tuple[str, ...]:
    """The elements that dropped out: pinned at a bound where they harmlessly vanish
    (in ``pinned`` but not in ``at_bound``), or not determined even with every other
    element held (their own column of the weighted Jacobian ``jm``, residuals by log
    elements, gives a one-sigma error above :data:`UNDETERMINED` at the residual
    variance χ²/(m − k)): the data do not see them."""
    m, k = jm.shape
    scale = chi2 / max(m - k, 1)
    seen = np.sum(jm**2, axis=0)
    return tuple(
        n
        for n, s in zip(names, seen, strict=True)
        if (n in pinned and n not in at_bound) or not s * UNDETERMINED**2 > scale
    )


def covariance(
    jm: NDArray[np.float64], chi2: float, names: tuple[str, ...], dropped: tuple[str, ...]
) -> NDArray[np.float64]:
    """Covariance of the log element values from the weighted Jacobian ``jm``, scaled by
    the residual variance χ²/(m − k) (k the elements the data see). The elements the data
    see are taken on their own, so one that dropped out (whose log value the data leave
    free) does not spread its freedom into theirs; a dropped element keeps its own
    variance, that of its own column with the others held (huge: the data leave it
    free)."""
    m, k = jm.shape
    keep = [i for i, n in enumerate(names) if n not in dropped]
    scale = chi2 / max(m - len(keep), 1)
    with np.errstate(all="ignore"):
        normal = jm.T @ jm
    if len(keep) == k:
        return _pseudo_inverse(normal) * scale
    out = np.zeros((k, k))
    if keep:
        rows = np.ix_(keep, keep)
        out[rows] = _pseudo_inverse(normal[rows]) * scale
    for i, n in enumerate(names):
        if n in dropped:
            out[i, i] = scale / max(float(normal[i, i]), 1e-300)
    return out


def _pseudo_inverse(normal: NDArray[np.float64]) -> NDArray[np.float64]:
    """Pseudo-inverse of the symmetric normal matrix ``jmᵀ·jm``, from its
    eigen-decomposition (as ``numpy.linalg.pinv`` would give, cheaper)."""
    if not np.isfinite(normal).all():
        return np.full(normal.shape, np.inf)
    w, v = np.linalg.eigh(normal)
    cut = 1e-15 * np.abs(w).max()
    inv = np.zeros_like(w)
    keep = np.abs(w) > cut
    inv[keep] = 1.0 / w[keep]
    return (v * inv) @ v.T


def lowest_bic(trials: list[Trial]) -> Trial:
    """The trial with the lowest BIC, except that more elements must earn their place.

    A candidate with more elements replaces a simpler one only when it lowers the BIC by
    more than :data:`BIC_MARGIN` ("strong" evidence on the usual BIC scale, common
    practice, no source); otherwise near-equal fits would pick redundant elements.
    """
    ordered = sorted(trials, key=lambda t: (t.size, t.bic, t.q.size))
    best = ordered[0]
    for trial in ordered[1:]:
        margin = 0.0 if trial.size == best.size else BIC_MARGIN
        if trial.bic < best.bic - margin:
            best = trial
    return best


def select(trials: list[Trial], quality_bound: float) -> tuple[Trial, bool]:
    """The chosen trial: :func:`lowest_bic` among the trials the data support.

    A trial with an element pinned at a bound or not determined (see
    :attr:`Trial.supported`) has more elements than the data can tell apart, however
    low its criterion; the simplest trials (fewest elements) stay eligible whatever their
    state, as the base the others must improve on. Only when no eligible trial meets the
    quality bound is an unsupported one that meets it taken (its undetermined elements
    are then named in the warnings). Returns the trial and whether it is such a one.
    """
    fewest = min(t.q.size for t in trials)
    eligible = [t for t in trials if t.supported or t.q.size == fewest]
    best = lowest_bic(eligible)
    if not best.supported:
        # Nothing the data support beats the simplest, which they do not support either
        # (its inductance beyond the measured band, say): then no trial is better
        # founded than another, and the criterion decides among those not strained at a
        # bound; the warnings name what is not determined.
        unstrained = [t for t in trials if not t.at_bound]
        best = lowest_bic(unstrained) if unstrained else best
    if best.rms <= quality_bound:
        return best, False
    good = [t for t in eligible if t.rms <= quality_bound]
    if good:
        return lowest_bic(good), False
    good = [t for t in trials if t.rms <= quality_bound]
    if good:
        return lowest_bic(good), True
    return best, False
