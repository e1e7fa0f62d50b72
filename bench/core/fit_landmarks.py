"""Landmarks of a fit: the model's, merged with the measured points' (docs/design.md §4).

Every landmark the model defines is given, with its source: from the measured points
where they hold it, from the fitted model otherwise (:func:`merge_landmarks`); the
model's are looked for up to :data:`LANDMARK_REACH` decades beyond the sweep
(:func:`model_landmarks`). Also the warnings that say where a landmark is the model's
extrapolation rather than a measurement. No I/O.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
from numpy.typing import NDArray

from bench.core.fit_network import KEEP_POINTS, compiled
from bench.core.fit_select import Trial
from bench.core.landmark_slopes import landmark_slopes
from bench.core.landmarks import (
    MAX_POINTS,
    Landmarks,
    dc_band,
    landmarks_for,
    negative_inductance_above,
    series_capacitance_below,
)
from bench.core.models.network import network_impedance
from bench.units import format_si

# The element holding an inductor's or bead's parallel (winding) capacitance, by family.
PARALLEL_CAPACITANCE = ("Cp", "C")
# Change of Re Z across the lowest third of a decade beyond which ``r_dc`` is no DC
# value (common practice, no source).
RDC_FLATNESS = 0.1
# Standard error of the median of n normal values with standard deviation σ:
# √(π/2)·σ/√n ≈ 1.2533·σ/√n for large n (docs/references.md §11).
MEDIAN_STANDARD_ERROR = math.sqrt(math.pi / 2)
# Standard deviation of normal values from their median absolute deviation
# (docs/references.md §11).
MAD_TO_SIGMA = 1.4826
# A change of resistance across the band is resolved above the points' noise when it
# exceeds this many standard errors of the difference (common practice, no source).
RESOLVED = 3.0
# Decades beyond the measured band over which the model's landmarks are still looked
# for when the data cannot give them.
LANDMARK_REACH = 2.0
# A landmark that changes by less than this fraction of itself per unit change of the
# logarithm of an element that dropped out of the fit does not rest on that element
# (:func:`landmark_uncertainties` holds it).
DROPPED_NEGLIGIBLE = 1e-3


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
    (:func:`landmark_gradients_by_steps`). An element that dropped out of the fit is
    held at its value for a landmark it barely moves (:data:`DROPPED_NEGLIGIBLE`)."""
    names = trial.family.element_names(trial.order)
    slopes: dict = {}
    if np.size(f) <= MAX_POINTS:  # longer sweeps are binned: read again at moved values
        net = compiled(trial.node, f)
        with np.errstate(all="ignore"):
            z = net.impedance(trial.q)
            slopes = landmark_slopes(kind, f, z, net.jacobian(trial.q))
    by_steps = None
    # An element that dropped out (not seen by the data) may keep a huge variance of its
    # own (fit_select.covariance): a landmark it barely moves (by a finite-difference
    # step's rounding) is read with the element held, so as not to take that variance
    # on; one it does move takes it, and is then as undetermined as the element.
    dropped = [names.index(n) for n in trial.dropped if n in names]
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
        held = [i for i in dropped if abs(g[i]) <= DROPPED_NEGLIGIBLE * abs(value)]
        if held:
            g = np.array(g, dtype=float)
            g[held] = 0.0
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
    for i, name in enumerate(names):
        values = dict(trial.values)
        values[name] *= math.exp(step)
        q = trial.q.copy()
        q[i] += step
        # Read as the model's landmarks were (model_landmarks): a resonance or a
        # low-frequency value the sweep does not reach is read beyond it again, so an
        # extrapolated landmark carries the uncertainty of the elements it rests on.
        moved.append(model_landmarks(kind, f, dataclasses.replace(trial, values=values, q=q)))
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
    # What the points above the resonance give (a capacitor's ESL, an inductor's winding
    # capacitance) is the model's extrapolation too when none is used there.
    above = "esl" if kind == "capacitor" else "c_par"
    out = []
    if srf is None or not f[0] <= srf <= f[-1]:
        out.append(
            f"the model's {what} lies outside the sweep "
            f"({format_si(f[0], 'Hz')} to {format_si(f[-1], 'Hz')}); "
            + (
                "srf is not given"
                if srf is None
                else f"srf ({format_si(srf, 'Hz')}) "
                + (f"and {above} are" if srf > f[-1] else "is")
                + " the model's extrapolation"
            )
        )
        return out
    nearest = int(np.argmin(np.abs(np.log(f / srf))))
    if not inside[nearest] or data_marks.get("srf") is None:
        beyond = "" if np.any(inside & (f > srf)) else f" and {above}"
        out.append(
            f"the {what} near {format_si(srf, 'Hz')} lies outside the measurable window; "
            f"srf, the value at resonance{beyond} come from the model, not from measured "
            "points"
        )
    return out


# A resonance of the model other than its main one, within this factor of the top of the
# fitted band, is reported: a fixture mode at the band edge looks the same (common
# practice, no source).
EDGE_RESONANCE_FACTOR = 2.0
# Points per decade of the grid the model's resonances are looked for on.
EDGE_RESONANCE_DENSITY = 200


def edge_resonance_warnings(
    f_fitted: NDArray[np.float64], trial: Trial, srf: float | None
) -> list[str]:
    """A warning when the model resonates (a local extremum of |Z|) within
    :data:`EDGE_RESONANCE_FACTOR` of the top of the fitted band ``f_fitted`` besides its
    main resonance (the extremum nearest ``srf``): a passive fixture mode (a ground
    return, a launch) near the top of a sweep is taken into the model as another branch
    of the part, and only a mount short or a narrower fit tells the two apart."""
    lo, hi = float(f_fitted[0]), float(f_fitted[-1])
    if not hi > lo > 0:
        return []
    n = min(int(EDGE_RESONANCE_DENSITY * math.log10(hi / lo)) + 2, 4000)
    grid = np.geomspace(lo, hi, n)
    with np.errstate(all="ignore"):
        slope = np.diff(np.log(np.abs(network_impedance(trial.node, grid, trial.values))))
    if not np.all(np.isfinite(slope)):
        return []
    turns = grid[np.flatnonzero(np.sign(slope[1:]) * np.sign(slope[:-1]) < 0) + 1]
    if srf is not None and turns.size:
        turns = np.delete(turns, np.argmin(np.abs(np.log(turns / srf))))
    near = turns[turns >= hi / EDGE_RESONANCE_FACTOR]
    if not near.size:
        return []
    return [
        f"the model resonates again near {format_si(float(near[0]), 'Hz')}, within a factor "
        f"{EDGE_RESONANCE_FACTOR:g} of the top of the fitted band ({format_si(hi, 'Hz')}): "
        "a fixture mode near the band edge looks the same; subtract the mount short, or "
        f"fit below {format_si(float(near[0]) / EDGE_RESONANCE_FACTOR, 'Hz')}, to tell "
        "whether it belongs to the part"
    ]


def series_capacitance_note(kind: str, f, z, sigma) -> str | None:
    """What inductive data's bottom says when it holds a series capacitance
    (:func:`bench.core.landmarks.series_capacitance_below`): a capacitor swept above its
    series resonance reads as an inductor. None when it holds none, and for data of
    ``kind`` capacitor."""
    found = series_capacitance_below(f, z, sigma) if kind == "inductor" else None
    if found is None:
        return None
    c, f_res = found
    return (
        f"its reactance at the bottom of the sweep falls short of an inductance's as a "
        f"capacitance of about {format_si(c, 'F', 2)} in series would make it: a capacitor "
        f"swept above its series resonance (about {format_si(f_res, 'Hz', 2)}) reads as an "
        f"inductor; if this part is a capacitor, sweep from below "
        f"{format_si(f_res / 10, 'Hz', 2)} to measure its capacitance"
    )


def negative_inductance_note(kind: str, f, z, sigma) -> str | None:
    """What capacitive data's top says when it shows a negative inductance
    (:func:`bench.core.landmarks.negative_inductance_above`): no part has one, so the
    fixture's inductance was removed more than the part's own. None when it shows none,
    and for data of ``kind`` inductor."""
    found = negative_inductance_above(f, z, sigma) if kind == "capacitor" else None
    if found is None:
        return None
    return (
        f"the reactance at the top of the sweep falls faster than a capacitance's, as an "
        f"inductance of about {format_si(found, 'H', 2)} in series would make it; no part "
        f"has a negative inductance: more inductance was removed than the fixture adds "
        f"(a mount short of another mount, a strap longer than the part, or the fixture "
        f"removed twice); check the mount short and the de-embedding, then fit again"
    )


def low_frequency_warnings(
    kind: str,
    f: NDArray[np.float64],
    z: NDArray[np.complex128],
    sigma: NDArray[np.float64],
    used: NDArray[np.bool_],
    model_marks: Landmarks,
    some_excluded: bool = False,
    *,
    z_model: NDArray[np.complex128],
) -> list[str]:
    """Say so when the DC resistance of an inductor or bead was not measured.

    ``r_dc`` is read over the lowest third of a decade of the sweep
    (:func:`bench.core.landmarks.dc_band`). When most of those points lie outside the
    measurable window, or the resistance is lost in the uncertainty of the (reactive)
    impedance there, the value is the model's extrapolation, not a measurement: a 1.5 mΩ
    winding behind 499 Ω port resistors, for example. When the resistance still changes
    across that band (core or skin loss), it is no DC value: the change is judged on the
    measured points against their own scatter about the fitted model ``z_model`` (Ω at
    ``f``), and on the model's own Re Z across the band, so that a trend either shows
    is reported and the noise of a few points is not.
    """
    r_dc = model_marks.get("r_dc")
    if kind != "inductor" or r_dc is None or f.size < 2:
        return []
    band = dc_band(f)
    seen = band & used
    note = (
        f"r_dc ({format_si(r_dc, 'Ω', 3)}) comes from the model, not from measured points: "
        f"{{why}}; measure it with a set-up whose window reaches it (no series "
        f"resistors, a narrower IF bandwidth) or with a DC ohmmeter"
    )
    if not r_dc_measured(f, used):
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
    standard_error = _median_error(z[seen], sigma[seen])
    if r_dc < 3.0 * standard_error:
        return [
            note.format(
                why="it is below three times its standard error there "
                f"({format_si(standard_error, 'Ω', 2)})"
            )
        ]
    change = resistance_trend(f, z, used, z_model)
    if change is not None:
        # A resistance that still changes across the band is not yet the DC value: core
        # or skin loss adds to it there (a bead swept from 1 MHz, say).
        top = f[np.flatnonzero(seen)[-1]]
        return [
            f"r_dc ({format_si(r_dc, 'Ω', 3)}) is the resistance at the bottom of the "
            f"sweep ({format_si(f[0], 'Hz')}), not the DC value: it still changes by "
            f"{100 * change:+.0f} % up to {format_si(top, 'Hz')} (core or skin "
            "loss); sweep lower or measure it with a DC ohmmeter"
        ]
    return []


def r_dc_measured(f: NDArray[np.float64], used: NDArray[np.bool_]) -> bool:
    """Whether the ``used`` points hold ``r_dc``: at least three of them, and half of
    the points of :func:`~bench.core.landmarks.dc_band` of the sweep ``f``. Where they
    do not, a reading from the used points starts higher up the band (where the few
    points inside the window are those the noise lifted, say), and ``r_dc`` is the
    model's (:func:`merge_landmarks`, ``lost``)."""
    band = dc_band(f)
    return np.count_nonzero(band & used) >= max(3, np.count_nonzero(band) // 2)


def _median_error(z: NDArray[np.complex128], sigma: NDArray[np.float64]) -> float:
    """Standard error of the median of Re ``z`` from the points' relative uncertainty
    ``sigma``: σ of one component of the complex error is |Z|·u/√2."""
    spread = np.abs(z) * sigma / np.sqrt(2.0)
    return MEDIAN_STANDARD_ERROR * float(np.median(spread)) / math.sqrt(z.size)


def _relative_change(lower: float, upper: float) -> float:
    return upper / lower - 1 if lower > 0 else math.inf


def resistance_trend(
    f: NDArray[np.float64],
    z: NDArray[np.complex128],
    used: NDArray[np.bool_],
    z_model: NDArray[np.complex128],
) -> float | None:
    """The relative change of Re Z across the band ``r_dc`` is read from, where it is
    real; None where the resistance there is flat or its change is noise.

    The used points of the band are split into a lower and an upper half and the
    medians of Re Z compared. The points' change counts when it exceeds
    :data:`RDC_FLATNESS` and :data:`RESOLVED` times its standard error, from their own
    scatter about ``z_model`` (median absolute deviation); the model's change (from the
    band's first point to its last) counts when it exceeds :data:`RDC_FLATNESS` and the
    points do not contradict it (the change of their halves within that many standard
    errors of the same halves of the model).
    The points' change is given where it counts, else the model's.
    """
    idx = np.flatnonzero(dc_band(f) & used)
    half = idx.size // 2
    if half < 3:
        return None
    lo, hi = idx[:half], idx[-half:]
    lower, upper = float(np.median(z.real[lo])), float(np.median(z.real[hi]))
    m_lower, m_upper = float(np.median(z_model.real[lo])), float(np.median(z_model.real[hi]))
    residual = (z.real - z_model.real)[idx]
    scatter = MAD_TO_SIGMA * float(np.median(np.abs(residual - np.median(residual))))
    error = math.sqrt(2.0) * MEDIAN_STANDARD_ERROR * scatter / math.sqrt(half)
    change = _relative_change(lower, upper)
    if abs(change) > RDC_FLATNESS and abs(upper - lower) > RESOLVED * error:
        return change
    model_change = _model_change(z_model, idx)
    contradicted = abs((upper - lower) - (m_upper - m_lower)) > RESOLVED * error
    if abs(model_change) > RDC_FLATNESS and not contradicted:
        return model_change
    return None


def r_dc_reading_error(
    f: NDArray[np.float64],
    z: NDArray[np.complex128],
    sigma: NDArray[np.float64],
    used: NDArray[np.bool_],
    z_model: NDArray[np.complex128],
) -> float | None:
    """One-sigma standard error of the measured ``r_dc`` (Ω): the median of Re Z over
    :func:`~bench.core.landmarks.dc_band` of the ``used`` points, from their relative
    uncertainty ``sigma``; within :data:`READING_AGREEMENT` times it the model's value
    stands for the reading (:func:`merge_landmarks`). None where the model's Re Z
    (``z_model``, Ω at ``f``) is not flat over that band (changes by more than
    :data:`RDC_FLATNESS` from its first point to its last): the band is then no DC
    value, whichever reads it, and :func:`low_frequency_warnings` says so."""
    idx = np.flatnonzero(used)
    if idx.size < 4:
        return None
    idx = idx[dc_band(f[idx])]
    if abs(_model_change(z_model, idx)) > RDC_FLATNESS:
        return None
    return _median_error(z[idx], sigma[idx])


def _model_change(z_model: NDArray[np.complex128], idx: NDArray[np.intp]) -> float:
    """The relative change of the model's Re Z from the first to the last point of
    ``idx`` (the model has no noise: its end points say it)."""
    return _relative_change(float(z_model.real[idx[0]]), float(z_model.real[idx[-1]]))


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
# The model's ``r_dc`` stands for the measured reading when the two differ by at most
# this many of the reading's standard errors (and the model's Re Z is flat over the
# reading's band, :func:`r_dc_reading_error`): a reading from a few noisy points
# scatters that far by chance, and the model follows the whole band (common practice,
# no source).
READING_AGREEMENT = 2.0
# Landmarks read from the measured points over a whole low decade, with noise well
# averaged: the measured value is always given where there is one.
DATA_FIRST = ("c_low", "l_low")
# Landmarks read at the bottom or the top of the sweep (``bench.core.landmarks``): when
# the screening cut that edge off, the measured points no longer hold them.
BOTTOM_LANDMARKS = ("c_low", "l_low", "r_dc")
TOP_LANDMARKS = ("esl",)


def merge_landmarks(
    data: Landmarks,
    model: Landmarks,
    cut: tuple[bool, bool] = (False, False),
    reading_error: dict[str, float | None] | None = None,
    lost: tuple[str, ...] = (),
) -> tuple[Landmarks, dict[str, str | None]]:
    """Each landmark with its source (``"data"``, ``"model"``, or None where neither gives
    one): the model's where the measured points give none, or where it agrees with theirs
    within :data:`MODEL_AGREEMENT`, or within :data:`READING_AGREEMENT` times the
    reading's standard error given in ``reading_error`` (by landmark, in its unit:
    ``r_dc`` from :func:`r_dc_reading_error`); else the measured points'. ``cut`` says
    whether the bottom and the top of the band were left out as band edges (the points
    then no longer hold the landmarks read there); ``lost`` names other landmarks the
    points do not hold (``r_dc`` where :func:`r_dc_measured` says so)."""
    errors = reading_error or {}
    order = list(model) + [k for k in data if k not in model]
    lost = (BOTTOM_LANDMARKS if cut[0] else ()) + (TOP_LANDMARKS if cut[1] else ()) + tuple(lost)
    marks: Landmarks = {}
    sources: dict[str, str | None] = {}
    for key in order:
        d, m = data.get(key), model.get(key)
        agrees = (
            key not in DATA_FIRST
            and m is not None
            and d is not None
            and (
                abs(m / d - 1) <= MODEL_AGREEMENT_AT_RESONANCE.get(key, MODEL_AGREEMENT)
                or abs(m - d) <= READING_AGREEMENT * (errors.get(key) or 0.0)
            )
        )
        if d is not None and not (key in lost and m is not None) and not agrees:
            marks[key], sources[key] = data[key], "data"
        elif model.get(key) is not None:
            marks[key], sources[key] = model[key], "model"
        else:
            marks[key], sources[key] = None, None
    return marks, sources
