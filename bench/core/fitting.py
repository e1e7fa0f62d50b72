"""Fitting equivalent circuits to a measured impedance.

``fit_impedance(f, z, model=..., rel_uncertainty=..., valid=...)`` returns a frozen
:class:`FitResult`. The method (docs/design.md §4):

- residuals are the real and imaginary parts of ``ln Zmodel − ln Zmeasured`` (the complex
  log counts magnitude and phase alike over many decades of |Z|), each divided by the
  point's relative uncertainty (with a small floor for model error, so no point
  dominates because its noise happens to be tiny);
- parameters are the logarithms of the element values, bounded, so every element stays
  positive and the model passive;
- start values come from the landmarks; each family gives a few deterministic starts
  and the best result is kept; higher orders also start from the next lower order's fit;
- points no passive part gives, isolated glitches and band edges taken over by a
  fixture mode are found and left out (``bench.core.robust``), and the chosen model is
  solved once more with a soft-L1 loss so that a few bad points cannot move it;
- the Jacobian is analytic: ``d ln Z/d ln p = p·(dZ/dp)/Z`` from the network tree;
- the order of ``ladder``, ``inductor`` and ``bead``, and the family under ``auto``, is
  chosen by the Bayesian information criterion ``χ² + k·ln(m)`` (χ² weighted by the
  point uncertainties, m residuals, k elements), among the fits the data support: a fit
  with an element pinned at a bound of its range or not determined (one sigma above
  100 %) has more elements than the data can tell apart and is passed over for a
  simpler one, and its fit, without the unsupported section, restarts the lower order;
- element uncertainties come from the Jacobian, the covariance scaled by the residual
  variance ``χ²/(m − k)``.

Points outside the measurable window (``valid`` False) are dropped and counted. No I/O.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from bench.core import robust
from bench.core.fit_landmarks import (
    edge_resonance_warnings,
    landmark_uncertainties,
    low_frequency_warnings,
    merge_landmarks,
    model_impedance,
    model_landmarks,
    negative_inductance_note,
    r_dc_measured,
    r_dc_reading_error,
    resonance_warnings,
    series_capacitance_note,
)
from bench.core.fit_result import (
    DEFAULT_QUALITY_BOUND,
    Candidate,
    FitQuality,
    FitResult,
    ModelMismatchError,
)
from bench.core.fit_select import (
    BIC_MARGIN,
    Trial,
    covariance,
    dropped_elements,
    lowest_bic,
    select,
)
from bench.core.fit_solve import (
    Objective,
    SameValleyError,
    SoftL1,
    log_ratio,
    same_valley_watch,
    solve,
)
from bench.core.landmarks import Landmarks, classify, landmarks_for
from bench.core.model_registry import MODEL_NAMES, auto_candidates
from bench.core.models import FAMILIES, ModelFamily
from bench.core.models.network import (
    clip_to_bounds,
    vanishing_sides,
)
from bench.errors import FitError, InputError
from bench.units import format_si

# Relative model-error floor added in quadrature to each point's uncertainty: no circuit
# of a few elements follows a real part to better than a few per cent everywhere, and
# without it the points with the least noise (far from resonance) would outweigh the
# resonance, where ESR is read.
MODEL_ERROR_FLOOR = 0.02
# The floor adapts to the fit once made: it becomes the error the chosen model leaves
# beyond the points' own noise (never above MODEL_ERROR_FLOOR, never below this fraction
# of it), so a model that follows the part far better than 2 % is weighed by the points'
# own uncertainties and a richer model that removes a real 0.4 % misfit can win; the
# candidates are then solved again, each from where it ended. Only a floor below
# MODEL_ERROR_FLOOR / FLOOR_CHANGE, on a fit that misses the noise target, is worth the
# second pass.
# A fit within the noise target (1.5 times the noise, common practice, no source) is not
# weighed again: its excess error is at most sqrt(1.5² − 1) times the noise.
MIN_FLOOR_FRACTION = 0.1
FLOOR_CHANGE = 1.5
NOISE_TARGET_EXCESS = math.sqrt(1.5**2 - 1)
MIN_POINTS = 10
# A longer sweep is fitted on this many of its points, spread evenly in log f (quality is
# still measured on every point): the cost of a fit then stays bounded whatever the file.
MAX_FIT_POINTS = 4000
# Points of the thinned grid on which every start is first run to convergence.
SCOUT_POINTS = 160
# Relative tolerances (sum of squares, parameters) of the scouts on the thinned grid and
# of the refinement on every point: a scout need only find its valley, a refinement
# give each candidate's criterion to far better than the selection's margin, and the
# chosen fit is solved once more to the end (:func:`_robust_refine`). (A refinement to
# 1e-6 chose the same model, order and landmarks to 0.1 % on 52 measurements, at 6 %
# more of a fit's time.)
SCOUT_TOLERANCE = 1e-5
REFINE_TOLERANCE = 1e-5
# Model evaluations a scout may take, per element and one more: a scout still moving
# after that is crawling along a flat valley (an element the data hardly see); it ends
# where it is, and the refinement on every point goes on from there (twice the budget).
# (On 124 measurements, 6 of 607 scouts reached it, and no choice or landmark changed.)
SCOUT_EVALUATIONS = 10
# A family whose fit leaves this many times the χ² another fit reaches with no more
# elements than this family's next order gets no higher orders: that order would have to
# cut χ² more than tenfold in one step only to draw level at its size (a heuristic,
# common practice, no source; tests/core/test_fit_shortcuts.py checks the choice).
HOPELESS_FACTOR = 10.0
# A family's climb ends at an order that lowers its criterion by no more than this: the
# margin the selection asks of a larger candidate (fit_select.lowest_bic): the order could
# not be chosen over the one below, and higher orders are taken not to pay either, as
# after an order whose criterion rises (tests/core/test_fit_shortcuts.py checks the choice).
CLIMB_MARGIN = BIC_MARGIN
# An element within this distance (natural log) of a bound is pinned at it.
PINNED_LOG = 1e-3

# Soft-L1 scale of the final robust solve (docs/references.md §11), in units of a
# point's uncertainty: points
# within a few sigma count as in least squares, beyond it their pull grows only linearly
# (scipy's ``least_squares(loss="soft_l1")``; the scale is common practice, no source).
ROBUST_SCALE = 3.0


def _check_inputs(f: Any, z: Any, rel_uncertainty: Any, valid: Any):
    f = np.asarray(f, dtype=float)
    z = np.asarray(z, dtype=complex)
    if f.ndim != 1 or z.shape != f.shape:
        raise InputError(
            f"frequencies and impedances must be 1-D arrays of one length; "
            f"got shapes {f.shape} and {z.shape}",
            hint="pass one impedance value per frequency point",
        )
    if not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise InputError(
            "frequencies must be finite and above 0 Hz",
            hint="remove points at 0 Hz or with missing frequencies",
        )
    if f.size > 1 and np.any(np.diff(f) <= 0):
        raise InputError(
            "frequencies must increase strictly from point to point",
            hint="sort the sweep and remove repeated frequencies",
        )
    sigma = np.ones(f.size) * 0.01
    if rel_uncertainty is not None:
        sigma = np.asarray(rel_uncertainty, dtype=float)
        if sigma.shape != f.shape:
            raise InputError(
                f"rel_uncertainty must have one value per point ({f.size}), got shape {sigma.shape}"
            )
    inside = np.ones(f.size, dtype=bool)
    if valid is not None:
        inside = np.asarray(valid, dtype=bool)
        if inside.shape != f.shape:
            raise InputError(
                f"valid must have one flag per point ({f.size}), got shape {inside.shape}"
            )
    return f, z, sigma, inside


def _fit_order(
    family: ModelFamily,
    order: int,
    f: NDArray[np.float64],
    z: NDArray[np.complex128],
    weight: NDArray[np.float64],
    landmarks: Landmarks,
    previous: Mapping[str, float] | None,
    starts: list[dict[str, float]] | None = None,
    known: tuple = (),
) -> Trial | None:
    """The fit of ``family``/``order``: every start scouted on the thinned grid, the best
    valleys refined on all points. ``known`` are valleys of an earlier fit of this order
    (:attr:`Trial.valleys`): a scout that reaches one is dropped (that fit has it
    already), and when every scout is, there is nothing new and the result is None."""
    node = family.circuit_for(order, f)
    names = family.element_names(order)
    limits = family.element_bounds(order, f, landmarks)
    lo = np.log([limits[n][0] for n in names])
    hi = np.log([limits[n][1] for n in names])
    k = len(names)

    # Every start runs to convergence on a thinned grid (every few points, at most
    # SCOUT_POINTS), which finds the right valley at a fraction of the cost; the two best
    # distinct results are then refined on the full grid.
    step = max(1, int(np.ceil(f.size / SCOUT_POINTS)))
    coarse = Objective(node, f[::step], z[::step], weight[::step])
    fine = coarse if step == 1 else Objective(node, f, z, weight)
    scouts: list[tuple[float, NDArray[np.float64]]] = []
    grid = hash((coarse.inv_z.tobytes(), coarse.weight.tobytes(), node))
    seen = [(cost, q) for key, cost, q in known if key == grid]
    # Where the scouts so far ended (the same-valley watch's view): an earlier fit's
    # valleys by their values alone (a restart is made to find a better valley beside
    # one, which a model as close to it as the data tell may still be heading for), this
    # fit's scouts with their residuals too.
    ends: list[tuple] = list(seen)
    if starts is None:
        starts = family.starts(order, f, z, landmarks, previous)
    tried: list[NDArray[np.float64]] = []
    for start in starts:
        clipped = clip_to_bounds(start, limits)
        q0 = np.log([clipped[n] for n in names])
        if any(np.array_equal(q0, q) for q in tried):
            continue  # the same start again (an order without sections): the same scout
        tried.append(q0)
        with np.errstate(all="ignore"):
            r0 = coarse.residuals(q0)
        if not np.all(np.isfinite(r0)):
            continue
        try:
            result = solve(
                coarse,
                q0,
                lo,
                hi,
                SCOUT_EVALUATIONS * (k + 1),
                SCOUT_TOLERANCE,
                same_valley_watch(ends),
            )
        except SameValleyError as same:
            if any(same.end is end for end in seen):
                continue  # a valley the earlier fit refined
            scouts.append(same.end[:2])
            continue
        if not np.isfinite(result[0]):
            continue
        scouts.append(result)
        with np.errstate(all="ignore"):
            # The residuals of the solve's last evaluation (the objective keeps them).
            ends.append((*result, coarse.residuals(result[1]).copy()))
    if not scouts and seen:
        return None
    if not scouts:
        raise FitError(f"model {family.name} (order {order}): no start value gave a finite model")
    scouts.sort(key=lambda t: t[0])
    # The runner-up too, unless it sits in the same valley (costs within 1 %).
    chosen = scouts[:1] + [t for t in scouts[1:2] if t[0] > 1.01 * scouts[0][0]]
    valleys = tuple((grid, cost, q) for cost, q in chosen)
    if step == 1:
        best = scouts[0]  # the scouts ran on the full grid already
        valleys = valleys[:1]
    else:
        refined = [
            solve(fine, q_scout, lo, hi, 20 * (k + 1), REFINE_TOLERANCE) for _, q_scout in chosen
        ]
        refined = [r for r in refined if np.isfinite(r[0])]
        if not refined:
            raise FitError(f"model {family.name} (order {order}): the fit did not converge")
        best = min(refined, key=lambda r: r[0])
    return _make_trial(family, order, node, best[1], lo, hi, fine, valleys)


def _make_trial(family, order, node, q, lo, hi, obj: Objective, valleys=()) -> Trial:
    """The trial of ``family``/``order`` at log values ``q`` (fitted with the objective
    ``obj``), with its criterion, the elements at a bound, those the data do not see
    (:func:`fit_select.dropped_elements`) and the relative uncertainty of every element."""
    names = family.element_names(order)
    m = 2 * obj.n
    values = dict(zip(names, (float(v) for v in np.exp(q)), strict=True))
    with np.errstate(all="ignore"):
        r = obj.residuals(q)
        chi2 = float(r @ r)
        err = np.hypot(r[: obj.n], r[obj.n :]) / obj.weight
    vanish = _vanishing_sides(node)
    at_bound = tuple(
        n
        for n, qi, a, b in zip(names, q, lo, hi, strict=True)
        if (qi - a < PINNED_LOG and "low" not in vanish[n])
        or (b - qi < PINNED_LOG and "high" not in vanish[n])
    )
    # Pinned at any bound, also where the element harmlessly drops out.
    pinned = tuple(
        n
        for n, qi, a, b in zip(names, q, lo, hi, strict=True)
        if qi - a < PINNED_LOG or b - qi < PINNED_LOG
    )
    with np.errstate(all="ignore"):
        jm = obj.jacobian(q)
    dropped = dropped_elements(names, jm, chi2, pinned, at_bound)
    # Known-variance form: the weights are the points' uncertainties (with the model-error
    # floor), so χ² is on an absolute scale and each element the data see must lower it
    # by ln(m); an element that dropped out is not counted (the circuit is the smaller one).
    bic = chi2 + (len(names) - len(dropped)) * math.log(m)
    cov = covariance(jm, chi2, names, dropped)
    sigma_log = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    rel = {n: float(s) for n, s in zip(names, sigma_log, strict=True)}
    rms = float(np.sqrt(np.mean(err**2)))
    return Trial(
        family,
        order,
        node,
        values,
        q,
        chi2,
        bic,
        rms,
        at_bound,
        pinned,
        rel_sigma=rel,
        dropped=dropped,
        valleys=valleys,
    )


@functools.lru_cache(maxsize=64)
def _vanishing_sides(node) -> dict[str, set[str]]:
    """:func:`~bench.core.models.network.vanishing_sides` of ``node``, once per circuit."""
    return vanishing_sides(node)


def _robust_refine(trial: Trial, f, z, weight, landmarks: Landmarks) -> Trial:
    """The chosen trial solved once more with a soft-L1 loss (:class:`SoftL1`, scale
    :data:`ROBUST_SCALE` in units of a point's uncertainty), so that a few points
    the screening let through cannot pull the fit; kept only when it stays as good in
    plain least squares within the noise (χ² up by less than the number of elements)."""
    family, order = trial.family, trial.order
    names = family.element_names(order)
    limits = family.element_bounds(order, f, landmarks)
    lo = np.log([limits[n][0] for n in names])
    hi = np.log([limits[n][1] for n in names])
    obj = Objective(trial.node, f, z, weight)
    cost, q = solve(SoftL1(obj, ROBUST_SCALE), trial.q, lo, hi, 20 * (len(names) + 1))
    if not np.isfinite(cost) or not np.all(np.isfinite(q)):
        return trial
    refined = _make_trial(family, order, trial.node, q, lo, hi, obj)
    # A sanity bound only: on clean data the two solutions agree to the noise.
    if not np.isfinite(refined.chi2) or refined.rms > 1.5 * trial.rms + 1e-12:
        return trial
    return refined


def _covariance(obj: Objective, trial: Trial) -> NDArray[np.float64]:
    """Covariance of the log element values of ``trial``, from the Jacobian at its
    solution, scaled by the residual variance χ²/(m − k) (:func:`fit_select.covariance`)."""
    with np.errstate(all="ignore"):
        jm = obj.jacobian(trial.q)
    names = trial.family.element_names(trial.order)
    return covariance(jm, trial.chi2, names, trial.dropped)


def _uncertainties(trial: Trial, cov: NDArray[np.float64]) -> dict[str, float]:
    names = trial.family.element_names(trial.order)
    sigma_log = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    return {n: float(trial.values[n] * s) for n, s in zip(names, sigma_log, strict=True)}


def _candidates(
    model: str, kind: str, order: int | None
) -> list[tuple[ModelFamily, tuple[int, ...]]]:
    if model == "auto":
        return [(FAMILIES[name], orders) for name, orders in auto_candidates(kind)]
    family = FAMILIES[model]
    if order is not None:
        if order not in family.orders:
            raise InputError(
                f"model {model} has orders {', '.join(map(str, family.orders))}; got {order}",
                hint="leave the order out to let the fit choose it",
            )
        return [(family, (order,))]
    return [(family, family.orders)]


def _spread_in_log(f: NDArray[np.float64], most: int) -> NDArray[np.intp] | slice:
    """Indices of at most about ``most`` points of the increasing grid ``f``, spread evenly
    in log f (every point of a sparse stretch is kept); all points when there are few."""
    if f.size <= most:
        return slice(None)
    targets = np.geomspace(f[0], f[-1], most)
    return np.unique(np.clip(np.searchsorted(f, targets), 0, f.size - 1))


def cannot_win(
    family: ModelFamily,
    order: int,
    m: int,
    trials: list[Trial],
    quality_bound: float,
    fewest: int | None,
) -> bool:
    """True when ``family``/``order`` on ``m`` residuals cannot be chosen by
    :func:`bench.core.fit_select.select` beside ``trials``, whatever its fit.

    ``fewest`` is the fewest elements of any candidate, None while a candidate of that
    size is still to be fitted (those stay eligible whatever their state, so they are
    always fitted). A supported candidate has at least ``k`` elements the data see (its
    elements less those the family marks optional), so its criterion is at least
    ``k·ln m`` (χ² ≥ 0). When the choice among ``trials`` so far
    (:func:`~bench.core.fit_select.lowest_bic` of the eligible) is supported, meets the
    quality bound, sees no more than ``k`` elements and has a criterion at or below
    ``k·ln m`` (``k·ln m`` + :data:`~bench.core.fit_select.BIC_MARGIN` when it sees fewer
    than ``k``), the candidate can never replace it: ``lowest_bic`` takes a later trial
    only with a lower criterion, lower by the margin when it has more elements (and any
    trial that replaced the choice in between is lower still), an unsupported one is not
    eligible, and the fall-backs for unsupported or poor choices are not reached.
    """
    names = family.element_names(order)
    if fewest is None or not trials or len(names) <= fewest:
        return False
    smallest = min(t.q.size for t in trials)
    best = lowest_bic([t for t in trials if t.supported or t.q.size == smallest])
    k = len(names) - len(set(names) & set(family.optional))
    # More elements than the choice must also clear lowest_bic's margin.
    reach = k * math.log(m) + (BIC_MARGIN if best.size < k else 0.0)
    return best.supported and best.rms <= quality_bound and best.size <= k and best.bic <= reach


@dataclass
class _Climb:
    """Where the order climb of a family stopped because the next order could not win:
    the order it would have tried next and the fit below it (None at the lowest)."""

    family: ModelFamily
    orders: tuple[int, ...]
    lower: Trial | None


# A restart within this distance (natural log, every element) of the fit it would
# restart is that fit: it starts in its minimum and cannot leave it.
SAME_POINT_LOG = 1e-3


def _at(trial: Trial, values: Mapping[str, float]) -> bool:
    """True when ``values`` are ``trial``'s own fitted values within :data:`SAME_POINT_LOG`."""
    names = trial.family.element_names(trial.order)
    with np.errstate(all="ignore"):
        q = np.log([float(values.get(n, np.nan)) for n in names])
    return bool(np.all(np.abs(q - trial.q) < SAME_POINT_LOG))


def _fit_family(
    family: ModelFamily,
    orders: tuple[int, ...],
    f: NDArray[np.float64],
    z: NDArray[np.complex128],
    weight: NDArray[np.float64],
    data_marks: Landmarks,
    others: list[Trial],
    n_used: int,
    quality_bound: float,
    fewest: int | None,
    lower: Trial | None = None,
) -> tuple[list[Trial], _Climb | None]:
    """Fit the orders of one family, lowest first, until a higher one stops paying.

    An order the data do not support (an element pinned or not determined) ends the
    climb: a higher order adds elements to a circuit that already has too many. Its fit
    is not wasted: without the unsupported section it starts the next lower order again,
    which finds that order's best valley when its own starts missed it (a section that
    dropped out to a bound leaves a better lower-order fit behind). An order whose
    penalty alone puts it out of reach (:func:`cannot_win`) is not fitted, nor any above
    it; the returned :class:`_Climb` says where to go on should the others fare worse
    (on screened points). ``lower``, when given, is this family's fit of the order below
    ``orders``, which the climb goes on from (returned first, maybe replaced).
    """
    out: list[Trial] = [] if lower is None else [lower]
    previous = None if lower is None else lower.values
    best_bic = math.inf if lower is None else lower.bic
    for i, o in enumerate(orders):
        k = len(family.element_names(o))
        if 2 * n_used <= k + 1:
            break
        if cannot_win(family, o, 2 * f.size, [*others, *out], quality_bound, fewest):
            return out, _Climb(family, orders[i:], out[-1] if out else None)
        trial = _fit_order(family, o, f, z, weight, data_marks, previous)
        out.append(trial)
        previous = trial.values
        if not trial.supported and len(out) > 1:
            start = family.reduced_start(o, trial.values, trial.weakness)
            lower = out[-2]
            if start is not None and not _at(lower, start):
                again = _fit_order(
                    family,
                    lower.order,
                    f,
                    z,
                    weight,
                    data_marks,
                    None,
                    starts=[start],
                    known=lower.valleys,
                )
                if again is not None and again.chi2 < lower.chi2:
                    out[-2] = again
            break
        if trial.bic > best_bic - CLIMB_MARGIN:
            break  # the criterion has turned; higher orders will not pay
        best_bic = min(best_bic, trial.bic)
        # Compared with fits of no more elements than this family's next order: one of
        # another family may fit far better, and that order could catch up only by a
        # tenfold step (a higher order of another family is no bar).
        reach = len(family.element_names(orders[i + 1])) if i + 1 < len(orders) else k
        overall = min(t.chi2 for t in [*others, *out] if t.q.size <= reach)
        if trial.chi2 > HOPELESS_FACTOR * overall:
            break  # another family fits far better; more orders of this one will not catch up
    return out, None


def _refit(
    trials: list[Trial],
    climbs: list[_Climb],
    f: NDArray[np.float64],
    z: NDArray[np.complex128],
    weight: NDArray[np.float64],
    data_marks: Landmarks,
    n_used: int,
    quality_bound: float,
) -> list[Trial]:
    """The candidates again on screened points, each from where it ended (one start),
    smallest first, leaving out those that can no longer win; then the climbs that
    stopped short go on where the others now fare worse."""
    fewest = min(t.q.size for t in trials)
    done: dict[int, Trial] = {}
    for i in sorted(range(len(trials)), key=lambda i: trials[i].q.size):
        t = trials[i]
        if cannot_win(t.family, t.order, 2 * f.size, list(done.values()), quality_bound, fewest):
            continue
        done[i] = _fit_order(t.family, t.order, f, z, weight, data_marks, None, starts=[t.values])
    out = [done[i] for i in sorted(done)]
    return _go_on(out, climbs, f, z, weight, data_marks, n_used, quality_bound, fewest)


def _go_on(
    out: list[Trial],
    climbs: list[_Climb],
    f: NDArray[np.float64],
    z: NDArray[np.complex128],
    weight: NDArray[np.float64],
    data_marks: Landmarks,
    n_used: int,
    quality_bound: float,
    fewest: int,
) -> list[Trial]:
    """The ``climbs`` that stopped short go on where the trials ``out`` now fare worse."""
    out = list(out)
    for climb in climbs:
        if cannot_win(climb.family, climb.orders[0], 2 * f.size, out, quality_bound, fewest):
            continue
        lower = None
        if climb.lower is not None:
            lower = next(
                (t for t in out if (t.family, t.order) == (climb.family, climb.lower.order)),
                None,
            )
            if lower is None:
                continue  # the order below can no longer win, so neither can this one
            out.remove(lower)
        more, _ = _fit_family(
            climb.family,
            climb.orders,
            f,
            z,
            weight,
            data_marks,
            out,
            n_used,
            quality_bound,
            fewest,
            lower=lower,
        )
        out += more
    return out


def fit_impedance(
    f: Any,
    z: Any,
    *,
    model: str = "auto",
    rel_uncertainty: Any = None,
    valid: Any = None,
    quality_bound: float = DEFAULT_QUALITY_BOUND,
    order: int | None = None,
    excluded: Any = None,
) -> FitResult:
    """Fit an equivalent circuit to the impedance ``z`` (Ω, complex) at ``f`` (Hz).

    ``model`` is a family name (``series-rlc``, ``two-branch``, ``ladder``, ``inductor``,
    ``bead``) or ``auto`` (family and order by information criterion). ``rel_uncertainty``
    is the relative uncertainty of each point (fraction, e.g. 0.01) and weights the fit;
    ``valid`` marks points inside the measurable window (others are dropped and counted).
    ``quality_bound`` is the largest ``rms_log_error`` that ``meets_quality`` accepts.
    ``order`` fixes the order of a family with several. ``excluded`` marks points inside
    the window that are not to be used for another reason (below a ground-loop corner,
    say): they are dropped but not counted as outside the window.

    Raises :class:`InputError` for malformed arrays or an unknown model,
    :class:`ModelMismatchError` when the model's kind (capacitor or inductor) is not the
    data's, and :class:`FitError` when too few usable points remain.
    """
    if model not in MODEL_NAMES:
        raise InputError(f"unknown model {model!r}", hint=f"choose one of {', '.join(MODEL_NAMES)}")
    f, z, sigma, inside = _check_inputs(f, z, rel_uncertainty, valid)
    left_out = np.zeros(f.shape, bool) if excluded is None else np.asarray(excluded, bool)
    if left_out.shape != f.shape:
        raise InputError(
            f"excluded has {left_out.size} marks for {f.size} frequencies",
            hint="give one True/False mark per frequency point",
        )
    finite = np.isfinite(z) & (z != 0) & np.isfinite(sigma)
    candidates_ok = finite & inside & ~left_out
    # Left out: below zero beyond the threshold for as many points judged together.
    # Evidence for a band edge (_screen): any point 3 sigma below zero.
    z_ok, sigma_ok = np.where(finite, z, 0), np.where(finite, sigma, 0)
    below = candidates_ok & robust.negative_resistance(z_ok, sigma_ok)
    negative = below & robust.negative_resistance(
        z_ok, sigma_ok, robust.negative_threshold(int(np.count_nonzero(candidates_ok)))
    )
    used = candidates_ok & ~negative
    lone = robust.isolated(f, z, sigma, used, finite)
    if np.count_nonzero(used & ~lone) >= MIN_POINTS:
        used &= ~lone
    else:
        lone[:] = False
    warnings: list[str] = []
    n_unusable = int(np.count_nonzero(~finite))
    if n_unusable:
        warnings.append(
            f"{n_unusable} point{'' if n_unusable == 1 else 's'} with missing, zero or "
            f"infinite values {'was' if n_unusable == 1 else 'were'} not used"
        )
    n_outside = int(np.count_nonzero(finite & ~inside))
    if n_outside:
        warnings.append(
            f"{n_outside} of {f.size} points lie outside the measurable window and were not used"
        )
    n_used = int(np.count_nonzero(used))
    if n_used < MIN_POINTS:
        raise FitError(
            f"only {n_used} of {f.size} points are usable (inside the measurable window, "
            f"finite, no negative resistance); a fit needs at least {MIN_POINTS}. Widen the "
            "sweep, raise the signal, or fit series resistors to move the window onto the part"
        )
    # The kind is read from the runs of the band, not from a point or two standing apart
    # (a glitch far below the rest, inside the window only by its own error, would
    # otherwise decide it), unless nothing else is left.
    in_runs = used & ~robust.apart(used)
    kind = classify(*((f[in_runs], z[in_runs]) if np.any(in_runs) else (f[used], z[used])))
    u_all = np.clip(np.where(finite, sigma, 1.0), 1e-6, None)
    if model != "auto" and FAMILIES[model].kind != kind:
        fits = [name for name, fam in FAMILIES.items() if fam.kind == kind]
        # A capacitor swept above its resonance reads as an inductor: say so.
        note = series_capacitance_note(kind, f[used], z[used], u_all[used])
        raise ModelMismatchError(
            f"model {model!r} describes {FAMILIES[model].kind}s, but the data is "
            f"{'capacitive' if kind == 'capacitor' else 'inductive'} at its lowest "
            f"frequencies, so it is {'an' if kind == 'inductor' else 'a'} {kind}"
            + (f" ({note})" if note else "")
            + f"; use --model auto or one of {', '.join(fits)}"
        )
    all_weight = 1.0 / np.hypot(u_all, MODEL_ERROR_FLOOR)

    def choose(mask):
        fu, zu, weight = f[mask], z[mask], all_weight[mask]
        marks = landmarks_for(kind, fu, zu)
        n = int(np.count_nonzero(mask))
        # The fit runs on at most MAX_FIT_POINTS of the points (all of them, usually).
        pick = _spread_in_log(fu, MAX_FIT_POINTS)
        fs, zs, ws = fu[pick], zu[pick], weight[pick]
        trials: list[Trial] = []
        climbs: list[_Climb] = []
        candidates = _candidates(model, kind, order)
        sizes = [len(family.element_names(orders[0])) for family, orders in candidates]
        for i, (family, orders) in enumerate(candidates):
            # Pruning waits until every candidate of the fewest elements is fitted.
            fewest = None if min(sizes) in sizes[i + 1 :] else min(sizes)
            more, climb = _fit_family(
                family, orders, fs, zs, ws, marks, trials, n, quality_bound, fewest
            )
            trials += more
            if climb is not None:
                climbs.append(climb)
        if not trials:
            raise FitError(f"too few points ({n}) for any order of model {model!r}")
        return trials, climbs, marks, select(trials, quality_bound)

    # Lone points whose neighbours are noise cannot be judged on the sweep: each is
    # judged against the model of the rest of the band, and left out as isolated when
    # it lies more than GLITCH_LEVEL of its uncertainties off it (a fit made with it
    # could bend to it unseen). Those in line with that model are used after all.
    doubtful = robust.unvouched(sigma, used, finite)
    probe = used & ~doubtful
    if np.any(doubtful) and np.count_nonzero(probe) >= MIN_POINTS:
        trials, climbs, data_marks, (best, unsupported) = choose(probe)
        idx = np.flatnonzero(doubtful)
        with np.errstate(all="ignore"):
            off = np.abs(log_ratio(model_impedance(best, f[idx]), z[idx])) * all_weight[idx]
        out_of_line = np.zeros(f.size, bool)
        out_of_line[idx] = ~(off <= robust.GLITCH_LEVEL)
        lone |= out_of_line
        used &= ~out_of_line
        n_used = int(np.count_nonzero(used))
        if n_used > np.count_nonzero(probe):  # some fit the band's model: fitted with it
            trials, climbs, data_marks, (best, unsupported) = choose(used)
    else:
        trials, climbs, data_marks, (best, unsupported) = choose(used)
    glitch, edge = _screen(f, z, candidates_ok & ~lone, negative, below, all_weight, best)
    screened = used & ~glitch & ~edge
    if np.count_nonzero(screened) < n_used:
        # A glitch left out may leave a point beside it standing alone: judged as such.
        newly = robust.isolated(f, z, sigma, screened, finite)
        if np.count_nonzero(screened & ~newly) >= MIN_POINTS:
            lone |= newly
            screened &= ~newly
    if np.count_nonzero(screened) < n_used and np.count_nonzero(screened) >= MIN_POINTS:
        # The candidates again on the screened points, from where they ended: one start.
        used = screened
        n_used = int(np.count_nonzero(used))
        fu, zu, weight = f[used], z[used], all_weight[used]
        data_marks = landmarks_for(kind, fu, zu)
        pick = _spread_in_log(fu, MAX_FIT_POINTS)
        fs, zs, ws = fu[pick], zu[pick], weight[pick]
        trials = _refit(trials, climbs, fs, zs, ws, data_marks, n_used, quality_bound)
        best, unsupported = select(trials, quality_bound)
    else:
        glitch[:] = False
        edge[:] = False
    fu, zu = f[used], z[used]
    pick = _spread_in_log(fu, MAX_FIT_POINTS)
    floor = adapted_floor(best, fu, zu, u_all[used])
    if floor < MODEL_ERROR_FLOOR / FLOOR_CHANGE and floor > NOISE_TARGET_EXCESS * np.sqrt(
        np.mean(u_all[used] ** 2)
    ):
        all_weight = 1.0 / np.hypot(u_all, floor)
        ws = all_weight[used][pick]
        fs, zs = fu[pick], zu[pick]
        trials = _refit(trials, [], fs, zs, ws, data_marks, n_used, quality_bound)
        climbs = _open_climbs(trials, _candidates(model, kind, order))
        fewest = min(t.q.size for t in trials)
        trials = _go_on(trials, climbs, fs, zs, ws, data_marks, n_used, quality_bound, fewest)
        best, unsupported = select(trials, quality_bound)
    weight = all_weight[used]
    fs, zs, ws = fu[pick], zu[pick], weight[pick]
    best = _robust_refine(best, fs, zs, ws, data_marks)

    status = np.full(f.size, "used", dtype=object)
    status[~finite] = "unusable"
    status[finite & ~inside] = "outside-window"
    status[finite & inside & left_out] = "left-out"
    status[negative] = "negative-resistance"
    status[lone] = "isolated"
    status[glitch] = "glitch"
    status[edge] = "band-edge"
    excluded = tuple(
        e
        for e in (robust.exclusion(reason, f, status == reason) for reason in robust.REASONS)
        if e is not None
    )
    for e in excluded:
        where = (
            f"at {format_si(e.f_lo, 'Hz')}"
            if e.f_lo == e.f_hi
            else f"{format_si(e.f_lo, 'Hz')} to {format_si(e.f_hi, 'Hz')}"
        )
        points = "1 point" if e.count == 1 else f"{e.count} points"
        warnings.append(f"{points} left out as {e.reason} ({where})")

    zm = model_impedance(best, fu)
    err = np.abs(log_ratio(zm, zu))
    u = u_all[used]
    k = best.size
    quality = FitQuality(
        rms_log_error=float(np.sqrt(np.mean(err**2))),
        max_abs_log_error=float(np.max(err)),
        points_used=n_used,
        points_outside_window=n_outside,
        noise_ratio=float(np.sqrt(np.mean(err**2) / np.mean(u**2))),
        chi2_reduced=float(np.sum((err / u) ** 2) / max(n_used - k / 2, 1.0)),
        points_excluded=int(sum(e.count for e in excluded)),
    )
    model_marks = model_landmarks(kind, f, best)
    cut = (bool(np.any(edge & (f < fu[0]))), bool(np.any(edge & (f > fu[-1]))))
    z_model = model_impedance(best, f) if kind == "inductor" else None
    reading_error = (
        {"r_dc": r_dc_reading_error(f, z, sigma, used, z_model)} if z_model is not None else None
    )
    lost = ("r_dc",) if z_model is not None and not r_dc_measured(f, used) else ()
    marks, sources = merge_landmarks(data_marks, model_marks, cut, reading_error, lost)
    warnings += resonance_warnings(kind, f, used, model_marks, data_marks)
    warnings += edge_resonance_warnings(fu, best, model_marks.get("srf"))
    note = series_capacitance_note(kind, f[used], z[used], u_all[used])
    if note is not None:
        warnings.append(f"the part may be a capacitor: {note}")
    note = negative_inductance_note(kind, f[used], z[used], u_all[used])
    if note is not None:
        warnings.append(f"fixture over-removed: {note}")
    if z_model is not None:
        warnings += low_frequency_warnings(
            kind, f, z, sigma, used, marks, left_out.any(), z_model=z_model
        )
    if best.at_bound:
        warnings.append(
            f"elements {', '.join(best.at_bound)} ended at the edge of their allowed range; "
            "the data may not determine them"
        )
    # Elements that dropped out: a resistor of an optional part is simply absent, a
    # capacitor or inductor the data cannot see leaves its landmarks to a placeholder.
    unseen = [n for n in best.dropped if n not in best.family.optional or n[0] in "LC"]
    if unseen:
        warnings.append(
            f"elements {', '.join(unseen)} are not seen by the data (not determined even "
            "with every other element held: they dropped out of the fit); their values "
            "are placeholders"
            + ("; no model with fewer elements met the quality bound" if unsupported else "")
        )
    loose = [n for n in best.undetermined if n not in best.at_bound]
    if loose:
        warnings.append(
            f"elements {', '.join(loose)} are not determined by the data (one-sigma "
            "uncertainty above 100 %)"
            + ("; no model with fewer elements met the quality bound" if unsupported else "")
        )
    if quality.rms_log_error > quality_bound:
        warnings.append(
            f"rms log error {quality.rms_log_error:.3g} exceeds the quality bound "
            f"{quality_bound:.3g}; try another model or check the measurement"
        )
    cov = _covariance(Objective(best.node, fs, zs, ws), best)
    return FitResult(
        model=best.family.name,
        kind=kind,
        elements=dict(best.values),
        uncertainties=_uncertainties(best, cov),
        landmark_uncertainties=landmark_uncertainties(best, cov, kind, f, model_marks),
        landmarks=marks,
        landmark_sources=sources,
        quality=quality,
        warnings=tuple(warnings),
        order=best.order,
        quality_bound=float(quality_bound),
        f_range=(float(fu[0]), float(fu[-1])),
        candidates=tuple(
            Candidate(t.family.name, t.order, float(t.bic), t.rms, t.supported) for t in trials
        ),
        excluded=excluded,
        point_status=tuple(status.tolist()),  # already str (an object array of them)
        circuit=best.node,
        dropped=best.dropped,
    )


def _open_climbs(trials: list[Trial], candidates) -> list[_Climb]:
    """Each family's climb from its highest order fitted, where that order has the
    family's lowest criterion, is supported and has orders above it left to try."""
    out = []
    for family, orders in candidates:
        own = [t for t in trials if t.family is family]
        if not own:
            continue
        top = max(own, key=lambda t: t.order)
        rest = tuple(o for o in orders if o > top.order)
        if rest and top.supported and top.bic <= min(t.bic for t in own):
            out.append(_Climb(family, rest, top))
    return out


def adapted_floor(best: Trial, f, z, u) -> float:
    """The model-error floor for the weights, from the fit ``best`` on the points ``f``,
    ``z`` with relative uncertainties ``u``: the RMS error it leaves beyond what the
    noise predicts, ``sqrt(mean|e|² − mean u²)``, within ``MIN_FLOOR_FRACTION`` ·
    MODEL_ERROR_FLOOR and MODEL_ERROR_FLOOR."""
    err = np.abs(log_ratio(model_impedance(best, f), z))
    excess = math.sqrt(max(float(np.mean(err**2) - np.mean(u**2)), 0.0))
    return min(max(excess, MIN_FLOOR_FRACTION * MODEL_ERROR_FLOOR), MODEL_ERROR_FLOOR)


def _screen(f, z, candidates, negative, below, weight, best: Trial):
    """Glitches and band edges (``bench.core.robust``) on the residuals of ``best`` over
    the ``candidates`` points (negative-resistance points count as infinitely far off;
    a run at an edge holding a point of ``below``, 3 sigma below zero, is no part)."""
    idx = np.flatnonzero(candidates)
    with np.errstate(all="ignore"):
        zm = model_impedance(best, f[idx])
        residual = np.abs(log_ratio(zm, z[idx])) * weight[idx]
    neg = negative[idx]
    glitch = np.zeros(f.size, bool)
    edge = np.zeros(f.size, bool)
    edge[idx] = robust.band_edges(np.where(neg, np.inf, residual), below[idx])
    glitch[idx] = robust.glitches(np.where(neg, 0.0, residual)) & ~neg
    return glitch & ~edge, edge
