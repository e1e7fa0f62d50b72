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

from bench.core.models.network import (
    C,
    L,
    ModelFamily,
    R,
    element_names,
    landmark,
    parallel,
    series,
    wide_bounds,
)


def circuit(order: int = 1):
    parts = [R("Rdc"), parallel(L("L"), R("R"), series(C("C"), R("Rc")))]
    for k in range(2, order + 1):
        parts.append(parallel(L(f"L{k}"), R(f"R{k}")))
    return series(*parts)


def _top_capacitance(f, z, l_low: float) -> float | None:
    """The capacitance the top third of a decade of points shows beyond the inductance:
    the median of ``Im(1/Z)/ω + 1/(ω²·l_low)`` there, None when not positive. A start
    value for C when the resonance lies above the sweep (the capacitance still adds its
    susceptance below it)."""
    top = f >= f[-1] / 10 ** (1 / 3)
    if np.count_nonzero(top) < 3:
        return None
    w = 2 * np.pi * f[top]
    c = float(np.median((1.0 / z[top]).imag / w + 1.0 / (w**2 * l_low)))
    return c if c > 0 else None


def starts(order, f, z, landmarks: Mapping[str, Any], previous=None) -> list[dict[str, float]]:
    f = np.asarray(f, dtype=float)
    z = np.asarray(z, dtype=complex)
    l_low = landmark(landmarks, "l_low", 1e-6)
    r_dc = landmark(landmarks, "r_dc", float(np.min(np.abs(z.real))) or 1e-3)
    srf = landmark(landmarks, "srf", f[-1] * 3)
    c_top = _top_capacitance(f, z, l_low)
    c_par = landmark(landmarks, "c_par", c_top or 1.0 / ((2 * np.pi * srf) ** 2 * l_low))
    z_srf = landmark(landmarks, "z_at_srf", float(np.max(np.abs(z))))
    base = {"Rdc": r_dc, "L": l_low, "R": z_srf, "C": c_par, "Rc": 1e-3 * z_srf}
    if order == 1:
        return [
            base,
            {**base, "R": z_srf * 1.5, "C": c_par * 0.8, "Rc": 0.03 * z_srf},
            # A lossy capacitance: R(f) of the ferrite falling above the peak.
            {**base, "R": z_srf * 1.2, "C": c_par * 1.5, "Rc": 3.0 * z_srf},
        ]
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


def bounds(order, f, landmarks: Mapping[str, Any]) -> dict[str, tuple[float, float]]:
    """Wide bounds, except that the loss of the winding capacitance stays below ten
    times the largest reactance the inductance reaches in the band: a larger Rc only
    opens the capacitance's branch, which C alone can do (and an open branch with both
    free is a plateau the solver would wander onto). Where the measured points hold no
    parallel resonance, Rc is held at its low end (absent): below the resonance the
    capacitance's loss cannot be told from the ferrite's own, and a free Rc would buy a
    better fit in the band with a capacitance that no longer resonates beyond it."""
    out = wide_bounds(element_names(circuit(order)))
    if landmarks.get("srf") is None:
        out["Rc"] = (out["Rc"][0], 10 * out["Rc"][0])
        return out
    l_low = landmark(landmarks, "l_low", 1e-6)
    top = 10.0 * max(2 * np.pi * float(np.max(f)) * l_low, landmark(landmarks, "z_at_srf", 0.0))
    out["Rc"] = (out["Rc"][0], float(np.clip(top, 10 * out["Rc"][0], out["Rc"][1])))
    return out


FAMILY = ModelFamily(
    name="bead",
    kind="inductor",
    orders=(1, 2, 3),
    description="Rdc in series with L ‖ R ‖ (C + Rc), optionally one or two further L ‖ R",
    circuit=circuit,
    starts=starts,
    bounds=bounds,
    # The winding capacitance and its loss may sit above the measured band, unseen.
    optional=("C", "Rc"),
)
