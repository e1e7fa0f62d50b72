"""``two-branch``: two series R-L-C branches in parallel (MLCCs with a second mode).

Branch 1 carries the capacitance and the main resonance; branch 2, smaller, places a
second resonance and anti-resonance above the first, as the stack's higher modes do
(two parallel branches for MLCCs are common practice, REFERENCES §3).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from bench.core.models.network import C, L, ModelFamily, R, landmark, parallel, series, wide_bounds

NAMES = ("R1", "L1", "C1", "R2", "L2", "C2")


def circuit(order: int = 1):
    return parallel(series(R("R1"), L("L1"), C("C1")), series(R("R2"), L("L2"), C("C2")))


def starts(order, f, z, landmarks: Mapping[str, Any], previous=None) -> list[dict[str, float]]:
    f = np.asarray(f, dtype=float)
    c = landmark(landmarks, "c_low", 1e-6)
    srf = landmark(landmarks, "srf", np.sqrt(f[0] * f[-1]))
    esl = landmark(landmarks, "esl", 1.0 / ((2 * np.pi * srf) ** 2 * c))
    esr = landmark(landmarks, "esr_at_srf", float(np.min(np.abs(z))))
    out = []
    # The second resonance somewhere between the first and the top of the sweep.
    top = max(f[-1], 4 * srf)
    for ratio, l_ratio in ((0.3, 5.0), (0.08, 5.0), (0.5, 2.0), (0.02, 10.0)):
        f2 = srf * (top / srf) ** ratio * 1.5
        l2 = esl * l_ratio
        l1 = esl * l_ratio / (l_ratio - 1.0)  # so that L1 ‖ L2 = ESL
        c2 = 1.0 / ((2 * np.pi * f2) ** 2 * l2)
        out.append(
            {"R1": esr, "L1": l1, "C1": max(c - c2, 0.5 * c), "R2": esr * 5, "L2": l2, "C2": c2}
        )
    return out


def bounds(order, f, landmarks) -> dict[str, tuple[float, float]]:
    return wide_bounds(NAMES)


FAMILY = ModelFamily(
    name="two-branch",
    kind="capacitor",
    orders=(1,),
    description="two series R-L-C branches in parallel",
    circuit=circuit,
    starts=starts,
    bounds=bounds,
)
