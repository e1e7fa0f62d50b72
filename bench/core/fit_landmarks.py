"""Landmarks of a fit: the model's, merged with the measured points' (docs/design.md §4).

Every landmark the model defines is given, with its source: from the measured points
where they hold it, from the fitted model otherwise (:func:`merge_landmarks`); the
model's are looked for up to :data:`LANDMARK_REACH` decades beyond the sweep
(:func:`model_landmarks`). Also the warnings that say where a landmark is the model's
extrapolation rather than a measurement. No I/O.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray

from bench.core.fit_network import KEEP_POINTS, compiled
from bench.core.fit_select import Trial
from bench.core.landmark_slopes import landmark_slopes
from bench.core.landmarks import MAX_POINTS, Landmarks, landmarks_for
from bench.core.models.network import network_impedance
from bench.units import format_si

# The element holding an inductor's or bead's parallel (winding) capacitance, by family.
PARALLEL_CAPACITANCE = ("Cp", "C")
# Change of Re Z across the lowest third of a decade beyond which ``r_dc`` is no DC
# value (common practice, no source).
RDC_FLATNESS = 0.1
# Decades beyond the measured band over which the model's landmarks are still looked
# for when the data cannot give them.
LANDMARK_REACH = 2.0


def model_impedance(trial: Trial, f: NDArray[np.float64]) -> NDArray[np.complex128]:
    """The impedance of the fitted ``trial`` at ``f`` (Hz), from its network compiled for
    ``f`` (the fit's own grid is compiled already, and its last evaluation kept): read
    only, the array may be the network's own. A grid of more than
    :data:`~bench.core.fit_network.KEEP_POINTS` points takes the tree walk."""
    if np.size(f) > KEEP_POINTS:
        # A whole long sweep: the tree walk, whose arrays do not outlive the call.
        return network_impedance(trial.node, f, trial.values)
    return compiled(trial.node, f).impedance(trial.q)


def landmark_uncertainties(
    trial: Trial, cov: NDArray[np.float64], kind: str, f, marks: Landmarks
) -> dict[str, float | None]:
    """One-sigma uncertainty of each model landmark, propagated from the element
    covariance through the landmark's derivatives in the log element values: from the
    compiled network's Jacobian followed through each landmark's reading
    (:func:`bench.core.landmark_slopes.landmark_slopes`), or where a landmark is read
    another way, by reading it again at each value moved a little
    (:func:`landmark_gradients_by_steps`)."""
    names = trial.family.element_names(trial.order)
    slopes: dict = {}
    if np.size(f) <= MAX_POINTS:  # longer sweeps are binned: read again at moved values
        net = compiled(trial.node, f)
        with np.errstate(all="ignore"):
            z = net.impedance(trial.q)
            slopes = landmark_slopes(kind, f, z, net.jacobian(trial.q))
    by_steps = None
    out: dict[str, float | None] = {}
    for key, value in marks.items():
        if key == "c_par" and value is not None and kind == "inductor":
            # The fitted element itself (model_landmarks): its own one-sigma error.
            cp = next((n for n in PARALLEL_CAPACITANCE if n in trial.values), None)
            i = names.index(cp) if cp is not None else None
            out[key] = None if i is None else float(value * np.sqrt(max(cov[i, i], 0.0)))
            continue
        g = slopes.get(key)
        if value is None:
            out[key] = None
            continue
        if g is None:
            if by_steps is None:
                by_steps = landmark_gradients_by_steps(trial, kind, f, marks)
            g = by_steps.get(key)
            if g is None:
                out[key] = None
                continue
        out[key] = float(np.sqrt(max(float(g @ cov @ g), 0.0)))
    return out


def landmark_gradients_by_steps(
    trial: Trial, kind: str, f, marks: Landmarks, step: float = 1e-4
) -> dict[str, NDArray[np.float64] | None]:
    """Each landmark's derivative in the log element values by finite differences: the
    landmarks read again with each value moved by ``step`` (in ln); None where a moved
    reading gives none."""
    names = trial.family.element_names(trial.order)
    moved = []
    for name in names:
        values = dict(trial.values)
        values[name] *= math.exp(step)
        moved.append(landmarks_for(kind, f, network_impedance(trial.node, f, values)))
    out: dict[str, NDArray[np.float64] | None] = {}
    for key, value in marks.items():
        if value is None or any(m.get(key) is None for m in moved):
            out[key] = None
        else:
            out[key] = np.array([(m[key] - value) / step for m in moved])
    return out


def resonance_warnings(
    kind: str,
    f: NDArray[np.float64],
    inside: NDArray[np.bool_],
    model_marks: Landmarks,
    data_marks: Landmarks,
) -> list[str]:
    srf = model_marks.get("srf")
    what = "series resonance" if kind == "capacitor" else "parallel resonance"
    out = []
    if srf is None or not f[0] <= srf <= f[-1]:
        out.append(
            f"the model's {what} lies outside the sweep "
            f"({format_si(f[0], 'Hz')} to {format_si(f[-1], 'Hz')}); "
            + (
                "srf is not given"
                if srf is None
                else f"srf ({format_si(srf, 'Hz')}) is the model's extrapolation"
            )
        )
        return out
    nearest = int(np.argmin(np.abs(np.log(f / srf))))
    if not inside[nearest] or data_marks.get("srf") is None:
        out.append(
            f"the {what} near {format_si(srf, 'Hz')} lies outside the measurable window; "
            "srf and the value at resonance come from the model, not from measured points"
        )
    return out


def low_frequency_warnings(
    kind: str,
    f: NDArray[np.float64],
    z: NDArray[np.complex128],
    sigma: NDArray[np.float64],
    used: NDArray[np.bool_],
    model_marks: Landmarks,
    some_excluded: bool = False,
) -> list[str]:
    """Say so when the DC resistance of an inductor or bead was not measured.

    ``r_dc`` is read over the lowest third of a decade of the sweep (see
    :func:`bench.core.landmarks.inductor_landmarks`). When most of those points lie
    outside the measurable window, or the resistance is lost in the uncertainty of the
    (reactive) impedance there, the value is the model's extrapolation, not a
    measurement: a 1.5 mΩ winding behind 499 Ω port resistors, for example.
    """
    r_dc = model_marks.get("r_dc")
    if kind != "inductor" or r_dc is None or f.size < 2:
        return []
    band = f <= f[0] * 10 ** (1 / 3)
    if np.count_nonzero(band) < 3:
        band = np.arange(f.size) < 3
    seen = band & used
    note = (
        f"r_dc ({format_si(r_dc, 'Ω', 3)}) comes from the model, not from measured points: "
        f"{{why}}; measure it with a set-up whose window reaches it (no series "
        f"resistors, a narrower IF bandwidth) or with a DC ohmmeter"
    )
    if np.count_nonzero(seen) < max(3, np.count_nonzero(band) // 2):
        return [
            note.format(
                why=f"the points below {format_si(f[band][-1], 'Hz')} "
                + (
                    "were not used (outside the measurable window or left out)"
                    if some_excluded
                    else "lie outside the measurable window"
                )
            )
        ]
    # Standard error of the band's median of Re Z: about 1.25·σ/√n, with σ the RMS of
    # one component of the complex error, |Z|·u/√2.
    spread = np.abs(z[seen]) * sigma[seen] / np.sqrt(2.0)
    standard_error = 1.25 * float(np.median(spread)) / np.sqrt(np.count_nonzero(seen))
    if r_dc < 3.0 * standard_error:
        return [
            note.format(
                why="it is below three times its standard error there "
                f"({format_si(standard_error, 'Ω', 2)})"
            )
        ]
    # A resistance that still changes across the band is not yet the DC value: core or
    # skin loss adds to it there (a bead swept from 1 MHz, say).
    idx = np.flatnonzero(seen)
    half = idx.size // 2
    if half >= 3:
        lower = float(np.median(z.real[idx[:half]]))
        upper = float(np.median(z.real[idx[-half:]]))
        change = upper / lower - 1 if lower > 0 else math.inf
        if abs(change) > RDC_FLATNESS and abs(upper - lower) > 3.0 * math.sqrt(2) * standard_error:
            return [
                f"r_dc ({format_si(r_dc, 'Ω', 3)}) is the resistance at the bottom of the "
                f"sweep ({format_si(f[0], 'Hz')}), not the DC value: it still changes by "
                f"{100 * change:+.0f} % up to {format_si(f[idx[-1]], 'Hz')} (core or skin "
                "loss); sweep lower or measure it with a DC ohmmeter"
            ]
    return []


def model_landmarks(kind: str, f: NDArray[np.float64], trial: Trial) -> Landmarks:
    """Landmarks of the fitted model: on the measured grid, and where the grid cannot
    give one, on a grid reaching :data:`LANDMARK_REACH` decades beyond it; a capacitance
    or inductance still missing is the model's low-frequency value (the slope of its
    reactance far below the band). An inductor's ``c_par`` is its fitted parallel
    capacitance element (None when that element dropped out: the data do not see it)."""
    marks = landmarks_for(kind, f, model_impedance(trial, f))
    if kind == "inductor":
        cp = next((n for n in PARALLEL_CAPACITANCE if n in trial.values), None)
        marks["c_par"] = None if cp is None or cp in trial.dropped else trial.values[cp]
    if all(v is not None for v in marks.values()):
        return marks
    reach = 10**LANDMARK_REACH
    wide = np.geomspace(f[0] / reach, f[-1] * reach, 60 * int(2 * LANDMARK_REACH + 1) + f.size)
    more = landmarks_for(kind, wide, model_impedance(trial, wide))
    out = {
        key: (value if value is not None or key == "c_par" else more.get(key))
        for key, value in marks.items()
    }
    f_low = np.array([f[0] / reach])
    z_low = network_impedance(trial.node, f_low, trial.values)[0]
    w_low = 2 * np.pi * float(f_low[0])
    if kind == "capacitor" and out.get("c_low") is None and z_low.imag < 0:
        out["c_low"] = float(-1.0 / (w_low * z_low.imag))
    if kind == "inductor" and out.get("l_low") is None and z_low.imag > 0:
        out["l_low"] = float(z_low.imag / w_low)
    return out


# A landmark of the model within this fraction of the same landmark read from the
# measured points is given as the model's: it agrees with the data and uses the whole
# band, so it is steadier than a reading from a few noisy points (a low-Q resonance, say).
# A model further off misses the data there, and the data's value is given: a landmark
# never follows a poor model choice (common practice, no source).
MODEL_AGREEMENT = 0.05
# Values at resonance are read from a few points of a small real part: noisier, so a
# model within this much of them agrees with them.
MODEL_AGREEMENT_AT_RESONANCE = {"esr_at_srf": 0.15, "z_at_srf": 0.15}
# Landmarks read from the measured points over a whole low decade, with noise well
# averaged: the measured value is always given where there is one.
DATA_FIRST = ("c_low", "l_low")
# Landmarks read at the bottom or the top of the sweep (``bench.core.landmarks``): when
# the screening cut that edge off, the measured points no longer hold them.
BOTTOM_LANDMARKS = ("c_low", "l_low", "r_dc")
TOP_LANDMARKS = ("esl",)


def merge_landmarks(
    data: Landmarks, model: Landmarks, cut: tuple[bool, bool] = (False, False)
) -> tuple[Landmarks, dict[str, str | None]]:
    """Each landmark with its source (``"data"``, ``"model"``, or None where neither gives
    one): the model's where the measured points give none, or where it agrees with theirs
    within :data:`MODEL_AGREEMENT`; else the measured points'. ``cut`` says whether the
    bottom and the top of the band were left out as band edges (the points then no longer
    hold the landmarks read there)."""
    order = list(model) + [k for k in data if k not in model]
    lost = (BOTTOM_LANDMARKS if cut[0] else ()) + (TOP_LANDMARKS if cut[1] else ())
    marks: Landmarks = {}
    sources: dict[str, str | None] = {}
    for key in order:
        d, m = data.get(key), model.get(key)
        agrees = (
            key not in DATA_FIRST
            and m is not None
            and d is not None
            and abs(m / d - 1) <= MODEL_AGREEMENT_AT_RESONANCE.get(key, MODEL_AGREEMENT)
        )
        if d is not None and not (key in lost and m is not None) and not agrees:
            marks[key], sources[key] = data[key], "data"
        elif model.get(key) is not None:
            marks[key], sources[key] = model[key], "model"
        else:
            marks[key], sources[key] = None, None
    return marks, sources
