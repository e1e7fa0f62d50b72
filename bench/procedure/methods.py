"""Processing of the single mounts (series-through and reflection) and the stitching of a
part measured several ways.

Each method has its calibration (the through-normalised or corrected S21 for the two-port
methods, a three-term one-port correction of S11 for reflection), its conversion and
window (:mod:`bench.core.impedance`), and its fixture removal from the mount's own
captures: the empty gap (or open) and the zero-ohm strap. A part measured by several
methods becomes one curve by inverse-variance stitching (:func:`bench.core.stitch.stitch`),
each set-up kept with its own window.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from bench.core.conversions import reflection_z, series_through_z
from bench.core.impedance import (
    ImpedanceData,
    impedance_from_reflection,
    impedance_from_series_through,
)
from bench.core.window import floor_on_through_db
from bench.procedure.plan import SINGLE_MOUNT_METHODS, Analysis, Plan
from bench.runstore import DONE, RunStore

#: What each single mount's captures are called, for messages.
CAPTURE_WORDS = {
    ("series-through", "mount_open"): "empty gap",
    ("series-through", "mount_short"): "zero-ohm strap",
    ("reflection", "mount_open"): "open",
    ("reflection", "mount_short"): "strap (short)",
}


@dataclass(frozen=True)
class MountCaptures:
    """A single mount's measured impedances (Ω, on the sweep grid): the strap and the
    empty gap or open; None where not captured."""

    method: str
    short: np.ndarray | None = None
    open: np.ndarray | None = None

    def removal_text(self) -> str:
        words = [
            CAPTURE_WORDS[(self.method, kind)]
            for kind, value in (("mount_short", self.short), ("mount_open", self.open))
            if value is not None
        ]
        return " and ".join(words) if words else "none"


def method_z(
    plan: Plan, corrector: Any, method: str, f: np.ndarray, s_raw: np.ndarray, *, quick: bool
) -> np.ndarray:
    """The measured impedance (Ω, nothing removed) of a single-mount sweep."""
    z0 = plan.fixture.z0
    if method == "reflection":
        return reflection_z(corrector.one_port(f, s_raw), z0)
    s21 = corrector.quick(f, s_raw) if quick else corrector.correct(f, s_raw)
    return series_through_z(s21[:, 1, 0], z0)


def captures(
    plan: Plan, corrector: Any, store: RunStore, method: str, *, quick: bool = False
) -> MountCaptures:
    """The strap and empty captures of ``method``'s mount that are stored and done."""
    found: dict[str, np.ndarray | None] = {"mount_short": None, "mount_open": None}
    ids = {s.id for s in plan.steps}
    for kind in found:
        step_id = f"{kind}/{method}"
        if step_id in ids and store.step_state(step_id) == DONE:
            from bench.procedure.processing import averaged

            f, s = averaged(store, step_id)
            found[kind] = method_z(plan, corrector, method, f, s, quick=quick)
    return MountCaptures(method, short=found["mount_short"], open=found["mount_open"])


def single_mount_impedance(
    plan: Plan,
    analysis: Analysis,
    corrector: Any,
    method: str,
    f: np.ndarray,
    s_raw: np.ndarray,
    mount: MountCaptures,
    *,
    quick: bool = False,
) -> ImpedanceData:
    """The part's impedance on a single mount with the mount removed by its own captures,
    with the method's window and per-point uncertainty."""
    if method not in SINGLE_MOUNT_METHODS:
        raise ValueError(f"not a single-mount method: {method!r}")
    z0 = plan.fixture.z0
    common = {
        "z0": z0,
        "noise_floor_db": floor_on_through_db(analysis.noise_floor_db, z0, 0.0),
        "trace_noise_db": analysis.trace_noise_db,
        "tolerance": analysis.tolerance,
    }
    if method == "reflection":
        gamma = corrector.one_port(f, s_raw)
        admittance = None
        if mount.open is not None:
            z_open = mount.open - (mount.short if mount.short is not None else 0.0)
            admittance = 1.0 / z_open
        return impedance_from_reflection(
            f, gamma, mount_short=mount.short, open_admittance=admittance, **common
        )
    s21 = corrector.quick(f, s_raw) if quick else corrector.correct(f, s_raw)
    return impedance_from_series_through(
        f, s21[:, 1, 0], mount_short=mount.short, mount_open=mount.open, **common
    )


def capture_result(method: str, kind: str, f: np.ndarray, z: np.ndarray) -> str:
    """The live line of a single mount's capture: the strap's inductance, the gap's or
    open's capacitance, from the median over the sweep's upper decade."""
    from bench.units import format_si

    w = 2 * np.pi * f
    top = f >= f[-1] / 10
    if kind == "mount_short":
        inductance = float(np.median(z.imag[top] / w[top]))
        return f"{CAPTURE_WORDS[(method, kind)]}: {format_si(inductance, 'H', 3)} (upper decade)"
    with np.errstate(divide="ignore", invalid="ignore"):
        capacitance = float(np.median(-1.0 / (w[top] * z.imag[top])))
    return f"{CAPTURE_WORDS[(method, kind)]}: {format_si(capacitance, 'F', 3)} (upper decade)"


def gain_phase_short(plan: Plan, store: RunStore, position: int) -> np.ndarray | None:
    """The gain-phase analyser's reading of ``position``'s strap (Ω, receiver B's input
    removed, on its own sweep's grid), or None when it was not captured."""
    from bench.core.conversions import gain_phase_z
    from bench.procedure.plan import GAIN_PHASE
    from bench.procedure.processing import averaged

    step_id = f"mount_short/{GAIN_PHASE}/p{position}"
    g = plan.gain_phase
    if g is None or step_id not in {s.id for s in plan.steps}:
        return None
    if store.step_state(step_id) != DONE:
        return None
    f, s = averaged(store, step_id)
    return gain_phase_z(s[:, 1, 0], r_ref=g.reference_resistor, z_in=g.input_impedance(f))


def gain_phase_impedance(
    plan: Plan, analysis: Analysis, f: np.ndarray, ratio: np.ndarray, z_short: Any
) -> ImpedanceData:
    """A part's impedance from the gain-phase analyser's ratio B/A, receiver B's input
    and the position's strap removed, with the set-up's window (the divider's, on twice
    the reference resistor: :func:`bench.core.gain_phase.impedance_from_gain_phase`)."""
    from bench.core.gain_phase import impedance_from_gain_phase

    g = plan.gain_phase
    if g is None:
        raise ValueError("the procedure has no gain_phase section")
    if z_short is not None and np.shape(z_short) != np.shape(f):
        z_short = None  # a strap swept on another grid (an edited sweep) is not used
    return impedance_from_gain_phase(
        f,
        ratio,
        r_ref=g.reference_resistor,
        z_in=g.input_impedance(f),
        mount_short=z_short,
        noise_floor_db=g.noise_floor_db,
        tolerance=analysis.tolerance,
    )


def stitch_setups(setups: list[tuple[str, ImpedanceData]]) -> tuple[ImpedanceData, tuple[str, ...]]:
    """One curve from a part's set-ups (inverse-variance weighted where they overlap) and
    the sentences naming any band where they disagree beyond their uncertainties."""
    if len(setups) == 1:
        return setups[0][1], ()
    from bench.core.stitch import stitch

    stitched = stitch([d for _, d in setups], [label for label, _ in setups])
    return stitched.data, tuple(stitched.warnings)
