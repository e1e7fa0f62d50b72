"""``lossy-rlc``: a capacitor whose loss follows the band: ``Z_K(R, fcR) + jωL + Z_Q(C, tanC)``.

Loss across the band, docs/references.md §9 and §16.

``C`` is a capacitance with a constant loss tangent ``tanC`` (element kind ``Q``, the
constant-phase element ``Y = jω·C·(jω/ωc)^(−n)/cos(nπ/2)``, ``tan δ = tan(nπ/2)``;
Jonscher's "universal" dielectric response, from memory): its capacitance falls as
``ω^(−n)`` and its ESR as ``1/f`` times it below resonance, as class II dielectrics do;
``C`` is its capacitance at the geometric centre of the element's band. Its SPICE form
is a Debye ladder whose weights follow that power law (after the wideband Debye model of
Djordjevic, Biljić, Likar-Smiljanić and Sarkar, IEEE Trans. EMC 43(4), 2001, cited from
memory, whose equal weights give a constant loss instead of a constant loss tangent).
At order 1 the resistor ``R`` is a conductor with a skin corner (element kind ``K``):
``R·√(1 + j f/fcR)``, R at DC rising as √f above the fitted corner ``fcR`` (an R‖L
ladder, after Kim and Neikirk, 1996, from memory; docs/references.md §17). Order 2 has
``R + S`` instead, ``S`` the conductor loss rising as √f (an R-L ladder), whose two free
values also take up a residual delay's bend of Re Z at the top of the band, and adds a
weak second series R-L-C branch in parallel, for a stack's higher mode. The loss
elements span the measured band with a margin, so they are passive and become ladders of
ideal R, L, C in SPICE (see ``bench.core.models.network``).

Orders: 0 = R, L, C, tanC; 1 = R with its corner fcR, L, C, tanC; 2 = R, S, L, C, tanC
and R2, L2, C2.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from bench.core.models import two_branch
from bench.core.models.network import (
    SKIN_REFERENCE_HZ,
    C,
    K,
    L,
    ModelFamily,
    Q,
    R,
    S,
    corner_name,
    landmark,
    parallel,
    series,
    wide_bounds,
)

# The loss elements reach this far beyond the measured band (factors on f_lo and f_hi):
# the continuous Debye and skin forms flatten near their band edges.
DIELECTRIC_MARGIN = (10.0, 10.0)
SKIN_MARGIN = (100.0, 100.0)
# Band of a circuit built without data (only for element names and orders).
DEFAULT_BAND = (1e2, 1e9)


def _bands(band):
    lo, hi = band
    return (
        (lo / DIELECTRIC_MARGIN[0], hi * DIELECTRIC_MARGIN[1]),
        (lo / SKIN_MARGIN[0], hi * SKIN_MARGIN[1]),
    )


def network(order: int, band: tuple[float, float] = DEFAULT_BAND):
    dband, sband = _bands(band)
    if order == 1:
        return series(K("R", sband), L("L"), Q("C", dband))
    main = [R("R")]
    if order >= 2:
        main.append(S("S", sband))
    main += [L("L"), Q("C", dband)]
    if order < 2:
        return series(*main)
    return parallel(series(*main), series(R("R2"), L("L2"), C("C2")))


def circuit(order: int = 0):
    return network(order)


def bounds(order: int, f, landmarks: Mapping[str, Any]) -> dict[str, tuple[float, float]]:
    """Wide bounds, the skin corner inside the conductor element's band."""
    out = wide_bounds(FAMILY.element_names(order))
    if order >= 1:
        f = np.asarray(f, dtype=float)
        out[corner_name("R")] = _bands((float(np.min(f)), float(np.max(f))))[1]
    return out


def _corner_from(r: float, s: float) -> float:
    """The corner where ``R·√(f/2fc)`` equals ``S·√(f/1 MHz)`` [derived]."""
    return float(r * r * SKIN_REFERENCE_HZ / (2 * max(s, 1e-12) ** 2))


def reduce(order: int, values: Mapping[str, float], weakness: Mapping[str, float]):
    """Start values of the next lower order: the mode dropped and R + S read as a corner
    (order 2), or the corner dropped (order 1)."""
    del weakness
    out = {k: float(values[k]) for k in ("R", "L", "C", "tanC")}
    if order == 2:
        out["fcR"] = _corner_from(values["R"], values["S"])
    return out


def _loss_estimates(f, z, c: float, esr: float, srf: float) -> tuple[float, float]:
    """Loss tangent from Re Z below resonance, skin resistance at 1 MHz from above it."""
    w = 2 * np.pi * f
    low = (f < srf / 5) & (z.imag < 0)
    tan_delta = 0.01
    if np.count_nonzero(low) >= 3:
        ratio = (z.real[low] - esr) / np.abs(z.imag[low])
        tan_delta = float(np.clip(np.median(ratio), 1e-4, 0.3))
    high = f > 3 * srf
    s = 1e-3 * esr
    if np.count_nonzero(high) >= 3:
        rise = float(np.median(z.real[high]) - esr)
        f_mid = float(np.median(f[high]))
        if rise > 0:
            s = rise / np.sqrt(f_mid / 1e6)
    del w
    return tan_delta, max(s, 1e-9)


def starts(order, f, z, landmarks: Mapping[str, Any], previous=None) -> list[dict[str, float]]:
    f = np.asarray(f, dtype=float)
    z = np.asarray(z, dtype=complex)
    c = landmark(landmarks, "c_low", 1e-6)
    srf = landmark(landmarks, "srf", np.sqrt(f[0] * f[-1]))
    esl = landmark(landmarks, "esl", 1.0 / ((2 * np.pi * srf) ** 2 * c))
    esr = landmark(landmarks, "esr_at_srf", float(np.min(np.abs(z))))
    tan_delta, s = _loss_estimates(f, z, c, esr, srf)
    dband, _ = _bands((f[0], f[-1]))
    # The capacitance falls as ω^(−n) from where c_low is read (the lowest decade) to
    # the band's centre, where the element's C is given.
    n = (2 / np.pi) * np.arctan(tan_delta)
    c_centre = c * (np.sqrt(dband[0] * dband[1]) / (f[0] * np.sqrt(10))) ** (-n)
    base = {"R": esr, "L": esl, "C": c_centre, "tanC": tan_delta}
    out: list[dict[str, float]] = []
    if order == 0:
        return [base, {**base, "tanC": tan_delta * 0.2, "R": esr * 0.8}]
    # The corner where R·√(f/2fc) (the conductor well above its corner) gives the rise
    # read as s·√(f/1 MHz) [derived], and one at the resonance.
    fc = float(np.clip(_corner_from(esr, s), f[0], f[-1]))
    if order == 1:
        if previous is not None:
            out.append({**previous, "fcR": fc, "R": previous["R"] * 0.9})
        out.append({**base, "fcR": fc, "R": esr * 0.8})
        out.append({**base, "fcR": srf, "R": esr * 0.8})
        return out
    seed = {**base, "S": s, "R": esr * 0.5}
    if previous is not None:
        # The conductor of order 1 as R + S: its rise R·√(f/2fc) read at 1 MHz [derived].
        seed = {k: v for k, v in previous.items() if k != "fcR"}
        seed["S"] = previous["R"] * np.sqrt(SKIN_REFERENCE_HZ / (2 * previous["fcR"]))
    for feature in (
        two_branch._mode_start(f, z, srf, c, esr),
        two_branch._step_start(f, z, srf, c, esr),
    ):
        if feature is not None:
            out.append({**seed, "L": feature["L1"], **{k: feature[k] for k in ("R2", "L2", "C2")}})
    top = max(f[-1], 4 * srf)
    for ratio in (0.3, 0.08):
        f2 = srf * (top / srf) ** ratio * 1.5
        l2 = esl * 5
        out.append(
            {
                **seed,
                "L": esl * 1.25,
                "R2": esr * 5,
                "L2": l2,
                "C2": 1 / ((2 * np.pi * f2) ** 2 * l2),
            }
        )
    return out


FAMILY = ModelFamily(
    name="lossy-rlc",
    kind="capacitor",
    orders=(0, 1, 2),
    description="series R, L, C with dielectric loss (constant tan d), conductor "
    "loss (sqrt f above a corner) and a second mode",
    circuit=circuit,
    starts=starts,
    bounds=bounds,
    reduce=reduce,
    network=network,
)
