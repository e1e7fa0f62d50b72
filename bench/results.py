"""What a run hands to its exports and report: parts as the procedure names them, and
one result per measured sample and bias point.

The runner (:mod:`bench.procedure`) builds these from the run store; the exports and
the report (:mod:`bench.exports`, :mod:`bench.report`) only read them. No I/O here.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Literal

if TYPE_CHECKING:
    from bench.core.fitting import FitResult
    from bench.core.impedance import ImpedanceData

PartKind = Literal["mlcc", "bulk", "inductor", "bead"]


@dataclass(frozen=True)
class PartSpec:
    """A part as the procedure describes it.

    ``nominal`` is the nominal capacitance (F) for ``mlcc``/``bulk`` and inductance (H)
    for ``inductor``; for a ``bead`` it is the nominal impedance magnitude (Ω) at
    ``nominal_at_hz``. ``tolerance`` is a fraction (0.1 for ±10 %).
    """

    name: str
    kind: PartKind
    nominal: float | None = None
    tolerance: float | None = None
    nominal_at_hz: float | None = None
    model: str = "auto"
    rated_voltage: float | None = None
    description: str = ""


@dataclass(frozen=True)
class SampleResult:
    """One measured sample at one bias point, after fixture removal, with its fit."""

    part: str
    sample: str
    data: ImpedanceData
    fit: FitResult | None
    bias_v: float = 0.0
    position: int | None = None
    raw_file: str | None = None
    corrected_s: Any = None  # (nfreq, 2, 2) calibrated S-parameters, when kept
    fit_error: str | None = None
    warnings: tuple[str, ...] = ()
    #: Each set-up the sample was measured with, ``(method, data)`` with the data's own
    #: window, when it was measured on a single mount or several ways (then ``data`` is
    #: the stitched curve); empty for a sample measured shunt-through alone.
    setups: tuple[tuple[str, ImpedanceData], ...] = ()
    #: The family the sample's own ``auto`` fit chose, when the lot's family replaced it
    #: (``bench.procedure.lot_family``); None when ``fit`` is the sample's own choice.
    own_family: str | None = None

    @property
    def label(self) -> str:
        """Stable label such as ``MC22-6V3_s1`` or ``MC4U7-10V_s2_4V``."""
        text = f"{self.part}_{self.sample}"
        if self.bias_v:
            text += f"_{self.bias_v:g}V"
        return text


@dataclass(frozen=True)
class RunSummary:
    """Everything the exports and the report need about one run."""

    run_id: str
    procedure_name: str
    parts: tuple[PartSpec, ...]
    samples: tuple[SampleResult, ...]
    setup: dict[str, Any] = field(default_factory=dict)
    calibration: dict[str, Any] = field(default_factory=dict)
    ground_loop: dict[str, Any] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    software_version: str = ""

    def part(self, name: str) -> PartSpec:
        for spec in self.parts:
            if spec.name == name:
                return spec
        raise KeyError(name)
