"""``two-branch``: two series R-L-C branches in parallel (MLCCs with a second mode).

Branch 1 carries the capacitance and the main resonance; branch 2, smaller, places a
second resonance and anti-resonance above the first, as the stack's higher modes do
(two parallel branches for MLCCs are common practice, docs/references.md §3).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from bench.core.models.network import C, L, ModelFamily, R, landmark, parallel, series

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
    for feature in (_mode_start(f, z, srf, c, esr), _step_start(f, z, srf, c, esr)):
        if feature is not None:
            out.append(feature)
    top = max(f[-1], 4 * srf)
    for ratio, l_ratio in ((0.3, 5.0), (0.08, 5.0), (0.6, 2.0), (0.02, 10.0)):
        f2 = srf * (top / srf) ** ratio * 1.5
        l2 = esl * l_ratio
        l1 = esl * l_ratio / (l_ratio - 1.0)  # so that L1 ‖ L2 = ESL
        c2 = 1.0 / ((2 * np.pi * f2) ** 2 * l2)
        out.append(
            {"R1": esr, "L1": l1, "C1": max(c - c2, 0.5 * c), "R2": esr * 5, "L2": l2, "C2": c2}
        )
    return out


def _mode_start(f, z, srf: float, c: float, esr: float) -> dict[str, float] | None:
    """Start values from the second mode seen in the data, when there is one.

    Above the first resonance the apparent inductance X/ω rises to a peak at the
    anti-resonance ``fa`` and dips at the second branch's own resonance ``f2``. With
    branch 1 inductive and branch 2 a series L2-C2 [derived]: ``fa² = 1/(C2(L1+L2))`` and
    ``f2² = 1/(L2·C2)``, so ``L2/L1 = r/(1 − r)`` with ``r = (fa/f2)²``.
    """
    w = 2 * np.pi * f
    apparent = z.imag / w
    above = np.flatnonzero(f > 1.5 * srf)
    if above.size < 6:
        return None
    ia = above[np.argmax(apparent[above])]
    typical = np.median(apparent[above])
    if typical <= 0 or apparent[ia] < 1.3 * typical:
        return None
    below = above[f[above] < f[ia] / 1.3]
    l1 = float(np.median(apparent[below])) if below.size >= 2 else float(typical)
    if l1 <= 0:
        return None
    after = above[f[above] > f[ia]]
    fa = float(f[ia])
    l2 = 3.0 * l1
    if after.size >= 2:
        i2 = after[np.argmin(apparent[after])]
        if apparent[i2] < apparent[ia] / 1.3:
            ratio = (fa / float(f[i2])) ** 2
            if 0.05 < ratio < 0.95:
                l2 = l1 * ratio / (1 - ratio)
    c2 = 1.0 / ((2 * np.pi * fa) ** 2 * (l1 + l2))
    return {"R1": esr, "L1": l1, "C1": max(c - c2, 0.5 * c), "R2": esr * 3, "L2": l2, "C2": c2}


def _step_start(f, z, srf: float, c: float, esr: float) -> dict[str, float] | None:
    """Start values from a step in the inductance above the first resonance.

    A damped second mode shows no sharp peak, only the inductance falling from L1 (just
    above the first resonance, with 1/(ω²C) taken out) to L1 ‖ L2 at the top of the
    sweep; the second branch resonates where the inductance dips lowest, or else where
    it passes half-way.
    """
    w = 2 * np.pi * f
    inductance = (z.imag + 1.0 / (w * c)) / w
    above = np.flatnonzero(f > 2 * srf)
    if above.size < 8:
        return None
    low_band = above[f[above] < 3 * srf]
    if low_band.size < 2:
        low_band = above[:3]
    top_band = above[f[above] > f[-1] / 5]
    if low_band.size < 2 or top_band.size < 2:
        return None
    l1 = float(np.median(inductance[low_band]))
    l_high = float(np.median(inductance[top_band]))
    if not (l1 > 1.15 * l_high > 0):
        return None
    l2 = l1 * l_high / (l1 - l_high)
    i_dip = above[np.argmin(inductance[above])]
    if inductance[i_dip] < 0.9 * l_high:
        f2 = float(f[i_dip])
    else:
        mid = above[inductance[above] < 0.5 * (l1 + l_high)]
        f2 = float(f[mid[0]]) if mid.size else float(np.sqrt(srf * f[-1]))
    c2 = 1.0 / ((2 * np.pi * f2) ** 2 * l2)
    r2 = float(np.sqrt(l2 / c2)) / 3.0  # a damped mode: quality factor about 3
    return {"R1": esr, "L1": l1, "C1": max(c - c2, 0.5 * c), "R2": r2, "L2": l2, "C2": c2}


FAMILY = ModelFamily(
    name="two-branch",
    kind="capacitor",
    orders=(1,),
    description="two series R-L-C branches in parallel",
    circuit=circuit,
    starts=starts,
)
