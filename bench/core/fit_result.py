"""What a fit returns (docs/design.md §3, §4): :class:`FitResult` with its
:class:`FitQuality` and the :class:`Candidate` families and orders tried. No I/O.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from bench.core.landmarks import Landmarks
from bench.core.models import FAMILIES, ModelFamily
from bench.core.models.network import Node, network_impedance, spice_lines
from bench.core.robust import Exclusion
from bench.errors import FitError

DEFAULT_QUALITY_BOUND = 0.1


class ModelMismatchError(FitError):
    """The model asked for describes another kind of part than the data shows (exit 2)."""

    exit_code = 2


@dataclass(frozen=True)
class FitQuality:
    """How well a model follows the measurement (docs/design.md §3).

    ``rms_log_error``: RMS over used points of ``|ln Zmodel − ln Zmeasured|`` (0.01 is
    about 1 % in magnitude and 0.6° in phase); ``max_abs_log_error`` its maximum.
    ``noise_ratio``: ``rms_log_error`` over the RMS of the points' relative uncertainty,
    the error the noise alone predicts (1 is a fit down to the noise; above about 1.5 the
    model misses something the data show). ``chi2_reduced``: ``Σ|e|²/u²`` over the
    degrees of freedom ``n − k/2`` (n points of two components, k elements).
    ``points_excluded``: points inside the window the screening left out.
    """

    rms_log_error: float
    max_abs_log_error: float
    points_used: int
    points_outside_window: int
    noise_ratio: float = math.nan
    chi2_reduced: float = math.nan
    points_excluded: int = 0

    def to_dict(self) -> dict[str, float | int | None]:
        return {
            "rms_log_error": self.rms_log_error,
            "max_abs_log_error": self.max_abs_log_error,
            "noise_ratio": None if math.isnan(self.noise_ratio) else self.noise_ratio,
            "chi2_reduced": None if math.isnan(self.chi2_reduced) else self.chi2_reduced,
            "points_used": self.points_used,
            "points_outside_window": self.points_outside_window,
            "points_excluded": self.points_excluded,
        }


@dataclass(frozen=True)
class Candidate:
    """One family and order tried by the fitter, with its criterion and quality.

    ``supported`` is False when an element of the fit is pinned at a bound or not
    determined (one sigma above 100 %): the data do not support that many elements, and
    the selection passes such a candidate over for a simpler one.
    """

    model: str
    order: int
    bic: float
    rms_log_error: float
    supported: bool = True


@dataclass(frozen=True)
class FitResult:
    """A fitted equivalent circuit.

    ``elements`` and ``uncertainties`` (one sigma) in SI units (Ω, H, F; ``D`` in F, ``S``
    in Ω at 1 MHz, a loss tangent ``tan<name>`` a plain number, see
    ``bench.core.models.network``); ``landmarks`` read from the measured points where they
    hold them and from the fitted model otherwise, as ``landmark_sources`` says (``"data"``
    or ``"model"``); ``landmark_uncertainties`` their one-sigma uncertainties propagated
    from the elements (None where a landmark is undefined); ``f_range`` (Hz) the span of the
    points used; ``candidates`` every family and order tried, with its criterion;
    ``excluded`` the points the screening left out (reason, count, band) and
    ``point_status`` the fate of every input point (``used``, ``outside-window``,
    ``left-out``, ``unusable``, ``negative-resistance``, ``isolated``, ``glitch``,
    ``band-edge``).
    ``meets_quality`` is ``rms_log_error <= quality_bound``. ``dropped`` names the
    elements that dropped out of the fit (not seen by the data; their values are
    placeholders and their uncertainties unbounded).
    """

    model: str
    kind: str
    elements: dict[str, float]
    uncertainties: dict[str, float]
    landmarks: Landmarks
    quality: FitQuality
    warnings: tuple[str, ...] = ()
    order: int = 1
    quality_bound: float = DEFAULT_QUALITY_BOUND
    f_range: tuple[float, float] = (math.nan, math.nan)
    candidates: tuple[Candidate, ...] = field(default=())
    landmark_uncertainties: dict[str, float | None] = field(default_factory=dict)
    landmark_sources: dict[str, str | None] = field(default_factory=dict)
    excluded: tuple[Exclusion, ...] = ()
    point_status: tuple[str, ...] = ()
    circuit: Node | None = None
    dropped: tuple[str, ...] = ()

    @property
    def meets_quality(self) -> bool:
        return bool(self.quality.rms_log_error <= self.quality_bound)

    @property
    def family(self) -> ModelFamily:
        return FAMILIES[self.model]

    def impedance(self, f: Any) -> NDArray[np.complex128]:
        """Model impedance (Ω) at ``f`` (Hz, > 0)."""
        if self.circuit is None:
            return self.family.impedance(np.asarray(f, dtype=float), self.elements)
        f = np.asarray(f, dtype=float)
        if np.any(~np.isfinite(f)) or np.any(f <= 0):
            raise ValueError(f"model {self.model}: frequencies must be finite and above 0 Hz")
        return network_impedance(self.circuit, f, self.elements)

    def spice_lines(self) -> list[str]:
        """SPICE element lines of the model between pins 1 and 2."""
        if self.circuit is None:
            return self.family.spice_lines(self.elements)
        return spice_lines(self.circuit, self.elements)

    def to_json(self) -> dict[str, Any]:
        """The object ``zbench fit --json`` prints (without ``spice``); SI units."""
        return {
            "model": self.model,
            "kind": self.kind,
            "order": self.order,
            "elements": dict(self.elements),
            "uncertainties": dict(self.uncertainties),
            "landmark_uncertainties": dict(self.landmark_uncertainties),
            "landmarks": dict(self.landmarks),
            "landmark_sources": dict(self.landmark_sources),
            "quality": self.quality.to_dict(),
            "excluded": [e.to_dict() for e in self.excluded],
            "quality_bound": self.quality_bound,
            "meets_quality": self.meets_quality,
            "dropped": list(self.dropped),
            "warnings": list(self.warnings),
        }


def noise_text(quality: FitQuality) -> str:
    """`` (0.84 × the noise)``: the fit error against what the points' uncertainty
    predicts, for the text beside ``rms_log_error``; empty where it is unknown."""
    ratio = quality.noise_ratio
    return "" if not math.isfinite(ratio) else f" ({ratio:.2g} × the noise)"
