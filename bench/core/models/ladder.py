"""``ladder``: bulk capacitors, ``Z = R + jωL + 1/(jωC) + Σ_k (R_k ‖ C_k)``, k = 1..N.

This is the partial-fraction (Foster) form of a lossy distributed RC line: the de Levie
porous electrode ``sqrt(R/(jωC))·coth(sqrt(jωRC))`` expands exactly into ``1/(jωC)`` plus
sections ``R_k = 2R/(k²π²)`` in parallel with ``C_k = C/2`` [derived from the partial
fractions of coth]. Their resistances fall with the section's frequency, so the sum adds
``R/3`` at low frequency and fades above the line's corner. The order N (1..5) is chosen
by the fitter with an information criterion. Every section conducts at DC; only the main
capacitor blocks DC, so the SPICE export adds the bleed resistor across the pins.

The series R and a section R are separable: R is the resistance left at high frequency,
the sections carry the part that falls with frequency.
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

MAX_ORDER = 5


def names(order: int) -> tuple[str, ...]:
    out = ("R", "L", "C")
    for k in range(1, order + 1):
        out += (f"R{k}", f"C{k}")
    return out


def circuit(order: int = 1):
    sections = [parallel(R(f"R{k}"), C(f"C{k}")) for k in range(1, order + 1)]
    return series(R("R"), L("L"), C("C"), *sections)


def _resistance_steps(f: np.ndarray, z: np.ndarray) -> tuple[float, float, float]:
    """High-frequency resistance, low-frequency excess and the frequency at half excess."""
    re = z.real
    n = f.size
    r_high = float(np.median(re[f >= f[-1] / 10])) if n else 1e-3
    r_low = float(np.median(re[f <= f[0] * 10 ** (1 / 3)])) if n else 2e-3
    r_high = max(min(r_high, float(np.min(re[re > 0])) * 3 if np.any(re > 0) else r_high), 1e-6)
    excess = max(r_low - r_high, 0.05 * r_high)
    half = re - r_high < excess / 2
    f_half = float(f[np.argmax(half)]) if np.any(half) else float(np.sqrt(f[0] * f[-1]))
    return r_high, excess, f_half


def starts(order, f, z, landmarks: Mapping[str, Any], previous=None) -> list[dict[str, float]]:
    f = np.asarray(f, dtype=float)
    z = np.asarray(z, dtype=complex)
    c = landmark(landmarks, "c_low", 1e-4)
    srf = landmark(landmarks, "srf", np.sqrt(f[0] * f[-1]))
    esl = landmark(landmarks, "esl", 1.0 / ((2 * np.pi * srf) ** 2 * c))
    r_high, excess, f_half = _resistance_steps(f, z)
    out: list[dict[str, float]] = []
    if previous is not None and order > 1:
        # Keep the lower-order fit and add one faster section with a small share of R.
        values = dict(previous)
        r_last, c_last = values[f"R{order - 1}"], values[f"C{order - 1}"]
        values[f"R{order}"] = r_last / 4
        values[f"C{order}"] = c_last
        out.append(values)
        values = dict(previous)
        values[f"R{order}"] = r_last / 2
        values[f"C{order}"] = c_last / 8
        out.append(values)
    norm = sum(1.0 / k**2 for k in range(1, order + 1))
    # From scratch: three spreads of the time constants, also when a lower order exists:
    # a lower order whose extra section collapsed (shorted, unseen by the data) seeds the
    # next one in the same trap, where a spread over the band finds every section (a
    # dielectric relaxing over two decades needs three or four; tests/core/
    # test_fit_artefacts.py).
    for shift in (1.0, 0.25, 4.0):
        tau1 = shift / (2 * np.pi * f_half)
        values = {"R": r_high, "L": esl, "C": c}
        for k in range(1, order + 1):
            r_k = excess / (norm * k**2)
            values[f"R{k}"] = r_k
            values[f"C{k}"] = tau1 / k**2 / r_k
        out.append(values)
    return out


def reduce(order, values, weakness) -> dict[str, float]:
    """The fit of ``order`` without its least determined section, as a start one order down."""
    return drop_section(order, values, weakness, ("R", "C"))


FAMILY = ModelFamily(
    name="ladder",
    kind="capacitor",
    orders=tuple(range(1, MAX_ORDER + 1)),
    description="series R, L and C with N parallel R-C sections (bulk capacitors)",
    circuit=circuit,
    starts=starts,
    reduce=reduce,
)
