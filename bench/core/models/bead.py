"""``bead``: a ferrite bead, ``Rdc + (L ‖ R ‖ (C + Rc))``, optionally
``+ Σ (Lk ‖ Rk)``.

The parallel L-R-C is the common-practice bead model (docs/references.md §3): below the peak the
ferrite is inductive, at the peak resistive (``R``), above it the winding capacitance
takes over. ``Rc`` is the loss of that capacitance (the ferrite between the turns is a
lossy dielectric): above the peak the bead's resistance then falls less steeply than
``R ‖ C`` alone gives, toward ``R ‖ Rc`` [derived]; where the data do not show it, it
drops out (a short in series with C), and the fitter counts it as absent. Further L‖R
sections (orders 2 and 3) are the Foster form of the ferrite's permeability dispersion:
a first-order relaxation ``μ(f) = μ0/(1 + j f/fr)`` gives ``Z = jωL0/(1 + jω/ωr)``,
which is exactly ``L0 ‖ R`` with ``R = 2π·fr·L0`` [derived]; a spread of relaxation
times (the Cole-Cole form ``μ0/(1 + (j f/fr)^(1−α))``, from memory) is a sum of such
sections with spread corners. Rdc and the inductors give the DC path.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from bench.core.models.network import C, L, ModelFamily, R, landmark, parallel, series


def circuit(order: int = 1):
    parts = [R("Rdc"), parallel(L("L"), R("R"), series(C("C"), R("Rc")))]
    for k in range(2, order + 1):
        parts.append(parallel(L(f"L{k}"), R(f"R{k}")))
    return series(*parts)


def starts(order, f, z, landmarks: Mapping[str, Any], previous=None) -> list[dict[str, float]]:
    f = np.asarray(f, dtype=float)
    z = np.asarray(z, dtype=complex)
    l_low = landmark(landmarks, "l_low", 1e-6)
    r_dc = landmark(landmarks, "r_dc", float(np.min(np.abs(z.real))) or 1e-3)
    srf = landmark(landmarks, "srf", f[-1] * 3)
    c_par = landmark(landmarks, "c_par", 1.0 / ((2 * np.pi * srf) ** 2 * l_low))
    z_srf = landmark(landmarks, "z_at_srf", float(np.max(np.abs(z))))
    base = {"Rdc": r_dc, "L": l_low, "R": z_srf, "C": c_par, "Rc": 0.03 * z_srf}
    if order == 1:
        return [base, {**base, "R": z_srf * 1.5, "C": c_par * 0.8, "Rc": 0.003 * z_srf}]
    out = []
    if order == 3:
        if previous is not None:
            out.append({**previous, "L3": 0.05 * previous["L"], "R3": 0.1 * previous["R"]})
            out.append({**previous, "L3": 0.3 * previous["L"], "R3": 3.0 * previous["R"]})
        for share in (0.3, 0.1):
            out.append(
                {
                    **base,
                    "L": l_low * (1 - 2 * share),
                    "L2": l_low * share,
                    "R2": z_srf * 0.3,
                    "L3": l_low * share,
                    "R3": z_srf * 0.05,
                }
            )
        return out
    if previous is not None:
        out.append({**previous, "L2": 0.05 * previous["L"], "R2": 0.2 * previous["R"]})
    for share, r_share in ((0.3, 0.3), (0.1, 0.1)):
        out.append(
            {
                **base,
                "L": l_low * (1 - share),
                "R": z_srf * (1 - r_share),
                "L2": l_low * share,
                "R2": z_srf * r_share,
            }
        )
    return out


FAMILY = ModelFamily(
    name="bead",
    kind="inductor",
    orders=(1, 2, 3),
    description="Rdc in series with L ‖ R ‖ (C + Rc), optionally one or two further L ‖ R",
    circuit=circuit,
    starts=starts,
    # The winding capacitance and its loss may sit above the measured band, unseen.
    optional=("C", "Rc"),
)
