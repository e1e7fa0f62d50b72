"""``series-rlc``: one series R-L-C, ``Z = R + jωL + 1/(jωC)``; the simplest capacitor."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from bench.core.models.network import (
    C,
    L,
    ModelFamily,
    R,
    landmark,
    series,
)


def circuit(order: int = 1):
    return series(R("R"), L("L"), C("C"))


def starts(order, f, z, landmarks: Mapping[str, Any], previous=None) -> list[dict[str, float]]:
    f = np.asarray(f, dtype=float)
    c = landmark(landmarks, "c_low", 1e-6)
    srf = landmark(landmarks, "srf", f[-1])
    esl = landmark(landmarks, "esl", 1.0 / ((2 * np.pi * srf) ** 2 * c))
    esr = landmark(landmarks, "esr_at_srf", float(np.min(np.abs(z))))
    return [
        {"R": esr, "L": esl, "C": c},
        {"R": esr * 2, "L": esl * 0.7, "C": c * 1.1},
    ]


FAMILY = ModelFamily(
    name="series-rlc",
    kind="capacitor",
    orders=(1,),
    description="series R-L-C (ESR, ESL, C)",
    circuit=circuit,
    starts=starts,
)
