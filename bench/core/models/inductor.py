"""``inductor``: a wound inductor, ``(Rdc + jωL + Σ_k (Rs_k ‖ Ls_k)) ‖ Rp ‖ Cp``.

The R-L sections model the winding's frequency-dependent resistance (skin and proximity
effect): each adds inductance ``Ls_k`` below its corner ``Rs_k/(2π·Ls_k)`` and resistance
``Rs_k`` above it, so resistance rises and inductance falls with frequency. ``Rp`` is the
core loss and ``Cp`` the winding capacitance that sets the parallel resonance (SRF);
(Grandi et al. 2004, docs/references.md §3). The number of sections (0..2) is chosen by the
fitter. The winding gives the DC path.
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
    drop_section,
    landmark,
    parallel,
    series,
)

MAX_SECTIONS = 4


def names(order: int) -> tuple[str, ...]:
    out = ("Rdc", "L")
    for k in range(1, order + 1):
        out += (f"Rs{k}", f"Ls{k}")
    return (*out, "Rp", "Cp")


def circuit(order: int = 0):
    sections = [parallel(R(f"Rs{k}"), L(f"Ls{k}")) for k in range(1, order + 1)]
    winding = series(R("Rdc"), L("L"), *sections)
    return parallel(winding, R("Rp"), C("Cp"))


def starts(order, f, z, landmarks: Mapping[str, Any], previous=None) -> list[dict[str, float]]:
    f = np.asarray(f, dtype=float)
    z = np.asarray(z, dtype=complex)
    l_low = landmark(landmarks, "l_low", 1e-6)
    r_dc = landmark(landmarks, "r_dc", float(np.min(np.abs(z.real))) or 1e-3)
    srf = landmark(landmarks, "srf", f[-1] * 3)
    c_par = landmark(landmarks, "c_par", 1.0 / ((2 * np.pi * srf) ** 2 * l_low))
    z_srf = landmark(landmarks, "z_at_srf", float(np.max(np.abs(z))) * 2)
    out: list[dict[str, float]] = []
    if previous is not None and order > 0:
        values = dict(previous)
        values[f"Rs{order}"] = values["Rdc"] * 3.0 * 3**order
        values[f"Ls{order}"] = 0.01 * values["L"]
        out.append(values)
    top = min(f[-1], srf / 3)
    for share in (0.02, 0.1):
        values = {"Rdc": r_dc, "L": l_low * (1 - share * order)}
        for k in range(1, order + 1):
            ls = share * l_low
            corner = f[0] * (top / f[0]) ** (k / (order + 1))
            values[f"Rs{k}"] = 2 * np.pi * corner * ls
            values[f"Ls{k}"] = ls
        values["Rp"] = z_srf
        values["Cp"] = c_par
        out.append(values)
    return out


def reduce(order, values, weakness) -> dict[str, float]:
    """The fit of ``order`` without its least determined section, as a start one order down."""
    return drop_section(order, values, weakness, ("Rs", "Ls"))


FAMILY = ModelFamily(
    name="inductor",
    kind="inductor",
    orders=tuple(range(0, MAX_SECTIONS + 1)),
    description="winding Rdc, L and R-L sections, with core-loss Rp and winding Cp across",
    circuit=circuit,
    starts=starts,
    reduce=reduce,
    # The winding capacitance may sit above the measured band, where the data cannot see
    # it; the core loss may be too small beside the winding's to show (Rp open).
    optional=("Rp", "Cp"),
)
