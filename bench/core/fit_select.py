"""Choosing among fitted candidates (docs/design.md §4).

Each family and order fitted is a :class:`Trial`. :func:`select` takes the one with the
lowest Bayesian information criterion among those the data support: a trial with an
element pinned at a bound of its range or not determined (one sigma above 100 %) has more
elements than the data can tell apart and is passed over for a simpler one. No I/O.
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


@dataclass(frozen=True)
class Trial:
    """One family and order fitted: its elements (``values``, log values ``q``), χ², criterion,
    rms log error, elements at a bound and each element's relative one-sigma uncertainty."""

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

    @property
    def undetermined(self) -> tuple[str, ...]:
        return tuple(n for n, s in self.rel_sigma.items() if not s <= UNDETERMINED)

    @property
    def supported(self) -> bool:
        return not self.pinned and not self.undetermined

    @property
    def weakness(self) -> dict[str, float]:
        """Relative one-sigma uncertainty of each element, ``inf`` where it is pinned."""
        return {n: (math.inf if n in self.pinned else s) for n, s in self.rel_sigma.items()}


def lowest_bic(trials: list[Trial]) -> Trial:
    """The trial with the lowest BIC, except that more elements must earn their place.

    A candidate with more elements replaces a simpler one only when it lowers the BIC by
    more than :data:`BIC_MARGIN` ("strong" evidence on the usual BIC scale, common
    practice, no source); otherwise near-equal fits would pick redundant elements.
    """
    ordered = sorted(trials, key=lambda t: (t.q.size, t.bic))
    best = ordered[0]
    for trial in ordered[1:]:
        margin = 0.0 if trial.q.size == best.q.size else BIC_MARGIN
        if trial.bic < best.bic - margin:
            best = trial
    return best


def select(trials: list[Trial], quality_bound: float) -> tuple[Trial, bool]:
    """The chosen trial: :func:`lowest_bic` among the trials the data support.

    A trial with an element pinned at a bound or not determined (see
    :attr:`Candidate.supported`) has more elements than the data can tell apart, however
    low its criterion; the simplest trials (fewest elements) stay eligible whatever their
    state, as the base the others must improve on. Only when no eligible trial meets the
    quality bound is an unsupported one that meets it taken (its undetermined elements
    are then named in the warnings). Returns the trial and whether it is such a one.
    """
    fewest = min(t.q.size for t in trials)
    eligible = [t for t in trials if t.supported or t.q.size == fewest]
    best = lowest_bic(eligible)
    if best.rms <= quality_bound:
        return best, False
    good = [t for t in eligible if t.rms <= quality_bound]
    if good:
        return lowest_bic(good), False
    good = [t for t in trials if t.rms <= quality_bound]
    if good:
        return lowest_bic(good), True
    return best, False
