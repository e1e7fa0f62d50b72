"""Landmarks of a measured impedance: the figures an engineer reads off the plot.

Capacitors (``capacitor_landmarks``): ``c_low`` (F), ``esl`` (H), ``srf`` (Hz, first
series resonance) and ``esr_at_srf`` (Ω). Inductors and beads (``inductor_landmarks``):
``l_low`` (H), ``r_dc`` (Ω), ``srf`` (Hz, first parallel resonance), ``z_at_srf`` (Ω) and
``c_par`` (F). A landmark that the data cannot give (a resonance beyond the sweep, too
few points in a band) is ``None``.

Every figure comes from a band of points, never from one point, so noise averages out:
- capacitance: least squares of the elastance ``-ωX`` (ESL-corrected) over the lowest
  decade of valid capacitive points (docs/references.md §3: C = -1/(ωX) well below f0);
- inductance: the same on ``Im(1/Y')/ω`` over the lowest decade where the reactance
  dominates, with the parallel capacitance taken out of ``Y``;
- resonances: the sign change of the reactance (admittance for parallel resonance) in a
  lightly smoothed trace, then a local least-squares line of ``ω·X`` against ``ω²``
  (exact for a series R-L-C, docs/references.md §3) over the points around it;
- values at resonance: a quadratic in ``log f`` through the neighbouring points, of
  Re Z at a series resonance and of Re(1/Z) at a parallel one (both vary slowly there);
- a sign change across a gap in the valid points is no resonance: it was not measured;
- a parallel resonance needs a real peak: inductive points below it and |Z| well above
  its low-frequency level (a noisy reactance near zero at the floor flips sign too).
Points outside the measurable window (``valid`` False) are ignored. A sweep of more than
:data:`MAX_POINTS` points is first averaged onto a logarithmic grid of bins (an empty bin
stays a gap), so the cost grows linearly with the points and the bands keep their width
in log f whatever the grid (a linear sweep has few points per decade at its low end and
thousands at its top).
"""

from __future__ import annotations

import functools
from typing import Any

import numpy as np
from numpy.typing import NDArray

Landmarks = dict[str, float | None]

# Above this many points a sweep is averaged onto LOG_BINS logarithmic bins first.
MAX_POINTS = 4000
LOG_BINS = 2000


def _prepare(f: Any, z: Any, valid: Any) -> tuple[NDArray[np.float64], NDArray[np.complex128]]:
    f = np.asarray(f, dtype=float)
    z = np.asarray(z, dtype=complex)
    if f.shape != z.shape or f.ndim != 1:
        raise ValueError(f"f and z must be 1-D arrays of one length, got {f.shape} and {z.shape}")
    keep = np.isfinite(f) & np.isfinite(z) & (f > 0) & (z != 0)
    if valid is not None:
        valid = np.asarray(valid, dtype=bool)
        if valid.shape != f.shape:
            raise ValueError(f"valid must have the shape of f {f.shape}, got {valid.shape}")
        keep &= valid
    order = np.argsort(f[keep])
    f, z = f[keep][order], z[keep][order]
    if f.size > MAX_POINTS:
        f, z = _log_binned(f, z)
    return f, z


def _log_binned(
    f: NDArray[np.float64], z: NDArray[np.complex128]
) -> tuple[NDArray[np.float64], NDArray[np.complex128]]:
    """Mean of the points in each of :data:`LOG_BINS` equal bins of log f (sorted input);
    a bin without points is left out. Linear in the number of points."""
    x = np.log(f)
    span = max(x[-1] - x[0], 1e-12)
    index = np.minimum(((x - x[0]) / span * LOG_BINS).astype(np.intp), LOG_BINS - 1)
    count = np.bincount(index, minlength=LOG_BINS)
    filled = count > 0
    n = count[filled]
    f_mean = np.exp(np.bincount(index, weights=x, minlength=LOG_BINS)[filled] / n)
    re = np.bincount(index, weights=z.real, minlength=LOG_BINS)[filled] / n
    im = np.bincount(index, weights=z.imag, minlength=LOG_BINS)[filled] / n
    return f_mean, re + 1j * im


def _smooth(y: NDArray[np.float64], width: int) -> NDArray[np.float64]:
    """Running median over ``width`` points (odd; edges repeated): keeps sign changes sharp.

    A small trace takes the median of a window view (a copy of ``size × width`` values);
    a large one scipy's median filter, whose time and memory stay linear in the points
    (imported only then: it costs a noticeable part of a one-file fit's start-up).
    """
    if width <= 1 or y.size < 3:
        return y
    half = width // 2
    if y.size * (2 * half + 1) > 2_000_000:
        from scipy.ndimage import median_filter

        return median_filter(y, size=2 * half + 1, mode="nearest")
    padded = np.concatenate([np.full(half, y[0]), y, np.full(half, y[-1])])
    # The middle of each sorted window: the median of an odd window, without np.median's
    # general machinery (several times slower on these small windows).
    windows = np.lib.stride_tricks.as_strided(
        padded, (y.size, 2 * half + 1), (padded.strides[0], padded.strides[0]), writeable=False
    )
    return np.sort(windows, axis=1)[:, half]


def _points_per_decade(f: NDArray[np.float64]) -> float:
    if f.size < 2:
        return 1.0
    return (f.size - 1) / max(np.log10(f[-1] / f[0]), 1e-9)


def _crossings(f: NDArray[np.float64], y: NDArray[np.float64], rising: bool):
    """Every frequency where ``y`` changes sign (− to + when ``rising``), refined, in
    order of frequency, with the index of the first point after it and the points of
    the refining line (None when the estimate is the interpolated one).

    The sign change is looked for in a running median (about 1/20 decade wide, at least
    3 points) so that noise near the zero does not make false crossings; a crossing must
    hold for a few points. The estimate is then refined by a straight line of ``ω·y``
    against ``ω²`` through the points within ±15 % of it (for ``y`` = X of a series
    R-L-C, ``ω·X = ω²L − 1/C`` exactly). A sign change across a gap in the points (a
    stretch outside the window) is skipped: the resonance itself was not measured.
    """
    if f.size < 4:
        return
    width = max(3, round(_points_per_decade(f) / 20) | 1)
    s = _smooth(y, width)
    sign = np.sign(s) if rising else -np.sign(s)
    hold = max(2, width // 2)
    steps = np.diff(np.log(f))
    typical_step = np.median(steps)
    for idx in np.flatnonzero((sign[:-1] < 0) & (sign[1:] > 0)) + 1:
        after = sign[idx : idx + hold]
        before = sign[max(0, idx - hold) : idx]
        if not (np.all(after > 0) and np.all(before < 0)):
            continue
        if steps[idx - 1] > 3 * typical_step:
            continue
        # Linear interpolation of the smoothed trace in log f for a first estimate.
        x0, x1 = np.log(f[idx - 1]), np.log(f[idx])
        y0, y1 = s[idx - 1], s[idx]
        guess = float(np.exp(x0 - y0 * (x1 - x0) / (y1 - y0)))
        near = (f > guess / 1.15) & (f < guess * 1.15)
        estimate, line = guess, None
        if np.count_nonzero(near) >= 3:
            w = 2 * np.pi * f[near]
            a, b = np.polyfit(w**2, w * y[near], 1)
            if a != 0 and -b / a > 0:
                refined = float(np.sqrt(-b / a) / (2 * np.pi))
                if guess / 1.15 < refined < guess * 1.15:
                    estimate, line = refined, near
        yield estimate, idx, line


def first_crossing(f: NDArray[np.float64], y: NDArray[np.float64], rising: bool) -> float | None:
    """First frequency where ``y`` changes sign (− to + when ``rising``), refined.

    See :func:`_crossings` for how noise and gaps are kept from making false crossings.
    """
    return _first_crossing(f, y, rising)[0]


def _first_crossing(f, y, rising: bool) -> tuple[float | None, NDArray[np.bool_] | None]:
    """:func:`first_crossing` and the points of its refining line (or None)."""
    for estimate, _, line in _crossings(f, y, rising):
        return estimate, line
    return None, None


# A parallel resonance must lift |Z| at least this far above its lowest value below the
# resonance: at the peak of L ‖ R ‖ C, |Z| = R, far above the winding's Rdc, while a
# sign flip of a noisy reactance near the floor (where |Z| ≈ Rdc) lifts nothing.
PEAK_RISE = 2.0


def _parallel_resonance(f: NDArray[np.float64], z: NDArray[np.complex128]) -> float | None:
    """The first parallel resonance with a real peak of |Z| (Hz), or None.
    (:func:`_parallel_resonance_line`, which also gives its refining line's points.)
    """
    return _parallel_resonance_line(f, z)[0]


def _parallel_resonance_line(
    f: NDArray[np.float64], z: NDArray[np.complex128]
) -> tuple[float | None, NDArray[np.bool_] | None]:
    """The first parallel resonance with a real peak of |Z| (Hz), or None, and the points
    of its refining line (None when it is the interpolated estimate).

    A candidate is where the susceptance rises through zero (− to +); for L‖R‖C,
    ``ω·Im Y = ω²C − 1/L`` is a straight line in ω², which the refinement uses. It counts
    only when the points below it are inductive in the main (the reactance was positive
    before it turned) and |Z| near it stands :data:`PEAK_RISE` times above the lowest
    |Z| below it (the smoothed traces, so one noisy point decides nothing).
    """
    if f.size < 4:
        return None, None
    width = max(3, round(_points_per_decade(f) / 20) | 1)
    magnitude = _smooth(np.abs(z), width)
    reactance = _smooth(z.imag, width)
    for estimate, idx, line in _crossings(f, (1.0 / z).imag, rising=True):
        below = np.arange(f.size) < idx
        if np.count_nonzero(below) < 3:
            continue  # no rise seen: the sweep starts at (or above) the resonance
        lead = below & (f >= estimate / 3)
        if np.count_nonzero(lead) < 3:
            lead = below & (np.arange(f.size) >= idx - 3)
        if np.count_nonzero(reactance[lead] > 0) <= np.count_nonzero(lead) / 2:
            continue
        near = (f > estimate / 1.12) & (f < estimate * 1.12)
        peak = float(np.max(magnitude[near])) if np.any(near) else float(magnitude[idx])
        if peak < PEAK_RISE * float(np.min(magnitude[below])):
            continue
        return estimate, line
    return None, None


def _value_at(f: NDArray[np.float64], y: NDArray[np.float64], f0: float) -> float | None:
    """``y`` at ``f0`` from a quadratic in log f through the neighbouring points
    (:func:`_value_window`)."""
    if f.size == 0:
        return None
    near = _value_window(f, f0)
    x = np.log(f[near] / f0)
    if np.count_nonzero(near) >= 3 and np.ptp(x) > 0:
        coeff = np.polyfit(x, y[near], 2)
        return float(np.polyval(coeff, 0.0))
    return float(np.mean(y[near]))


def _value_window(f: NDArray[np.float64], f0: float) -> NDArray[np.bool_]:
    """The points :func:`_value_at` reads ``f0``'s value from: within ±12 % of it, or
    the five nearest on a sparse grid."""
    near = (f > f0 / 1.12) & (f < f0 * 1.12)
    if np.count_nonzero(near) < 5:
        order = np.argsort(np.abs(np.log(f / f0)))[:5]
        near = np.zeros(f.size, dtype=bool)
        near[order] = True
    return near


def classify(f: Any, z: Any, valid: Any = None) -> str:
    """``"capacitor"`` when the low-frequency reactance is capacitive, else ``"inductor"``.

    Uses the sine of the phase over the lowest quarter (in log f) of the valid points, so
    a resistive, noisy start of an inductor does not read as a capacitor.
    """
    f, z = _prepare(f, z, valid)
    if f.size == 0:
        raise ValueError("no finite, valid points to classify")
    low = f <= f[0] * (f[-1] / f[0]) ** 0.25
    score = float(np.sum(z[low].imag / np.abs(z[low])))
    return "capacitor" if score < 0 else "inductor"


# A series capacitance below the sweep (:func:`series_capacitance_below`) is reported when
# its elastance lies this many standard errors above zero (common practice, no source),
# read from at least this many points.
SERIES_C_SIGMAS = 5.0
SERIES_C_MIN_POINTS = 8


def _quarter(f: Any, z: Any, rel_uncertainty: Any, *, top: bool):
    """``(f, ω, z, u)`` of the lowest (or the top) quarter in log f of the usable points
    (finite, positive frequency and uncertainty, non-zero impedance): ``f`` all of them,
    the others that quarter's. None with fewer than :data:`SERIES_C_MIN_POINTS` there."""
    f = np.asarray(f, dtype=float)
    z = np.asarray(z, dtype=complex)
    u = np.asarray(rel_uncertainty, dtype=float)
    ok = np.isfinite(f) & np.isfinite(z) & np.isfinite(u) & (f > 0) & (u > 0) & (z != 0)
    f, z, u = f[ok], z[ok], u[ok]
    if f.size < SERIES_C_MIN_POINTS:
        return None
    edge = f[0] * (f[-1] / f[0]) ** (0.75 if top else 0.25)
    part = f >= edge if top else f <= edge
    if np.count_nonzero(part) < SERIES_C_MIN_POINTS:
        return None
    return f, 2 * np.pi * f[part], z[part], u[part]


def _reactance_fit(w, z, u, columns) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Coefficients of ``ω·X`` in the basis ``columns`` by least squares weighted by the
    points' errors ``ω·u·|Z|``, and their covariance, scaled up by the fit's own scatter
    when that is larger than the errors say."""
    sigma = w * u * np.abs(z)
    a = np.stack(columns, axis=1) / sigma[:, None]
    y = w * z.imag / sigma
    coef, *_ = np.linalg.lstsq(a, y, rcond=None)
    r = y - a @ coef
    scatter = float(r @ r) / max(1, y.size - len(columns))
    with np.errstate(all="ignore"):
        cov = np.linalg.pinv(a.T @ a) * max(1.0, scatter)
    return coef, cov


def series_capacitance_below(f: Any, z: Any, rel_uncertainty: Any) -> tuple[float, float] | None:
    """``(C, f_res)`` when inductive data's reactance at the bottom of the sweep falls
    short of an inductance's as a capacitance ``C`` in series would make it: a capacitor
    swept above its series resonance ``f_res`` (Hz, below the sweep) reads as an inductor.
    None when the data show no such capacitance.

    Over the lowest quarter (in log f) of the points, ``ω·X`` is fitted by weighted least
    squares as ``−1/C + L·ω² + P·ω⁴``: a series R-L-C gives ``ω·X = L·ω² − 1/C`` exactly
    (docs/references.md §3), and the ``ω⁴`` term takes up the rise of an inductor's
    reactance toward a parallel resonance, so that its curvature is not read as a
    capacitance. ``1/C`` must lie :data:`SERIES_C_SIGMAS` standard errors above zero
    (the errors from ``rel_uncertainty``, the relative uncertainty of each point, scaled
    up by the fit's own scatter when that is larger) and ``f_res`` below the sweep.
    """
    quarter = _quarter(f, z, rel_uncertainty, top=False)
    if quarter is None:
        return None
    f, w, z_q, u_q = quarter
    x = (w / w[0]) ** 2  # ω² in units of the lowest point's, for a well-scaled solve
    coef, cov = _reactance_fit(w, z_q, u_q, [-np.ones_like(x), x, x * x])
    elastance, inductance = float(coef[0]), float(coef[1]) / float(w[0] ** 2)
    if not (elastance > SERIES_C_SIGMAS * np.sqrt(max(cov[0, 0], 0.0)) and inductance > 0):
        return None
    c = 1.0 / elastance
    f_res = 1.0 / (2 * np.pi * np.sqrt(inductance * c))
    return (c, f_res) if f_res < f[0] else None


# A negative inductance at the top of a capacitive sweep (:func:`negative_inductance_above`)
# is reported at this many standard errors below zero and at least this size: no smaller
# one changes a model a design uses (common practice, no source).
NEGATIVE_L_SIGMAS = 5.0
NEGATIVE_L_MIN = 5e-12


def negative_inductance_above(f: Any, z: Any, rel_uncertainty: Any) -> float | None:
    """The inductance (H, negative) that capacitive data's reactance at the top of the
    sweep shows, when it falls faster than a capacitance's as only a negative inductance
    in series would make it (a part whose fixture's inductance was removed more than it
    has). None when the top is not capacitive, or shows no such inductance.

    Over the top quarter (in log f) of the points, all capacitive in the main, ``ω·X`` is
    fitted by weighted least squares as ``−1/C + L·ω² + D·ln ω``: a series R-L-C gives
    ``ω·X = L·ω² − 1/C`` exactly (docs/references.md §3), and the ``ln ω`` term takes up a
    capacitance falling slowly with frequency (a dielectric's dispersion, docs/references.md
    §16), so that it is not read as an inductance. ``L`` must lie
    :data:`NEGATIVE_L_SIGMAS` standard errors below zero (errors as in
    :func:`series_capacitance_below`) and be at least :data:`NEGATIVE_L_MIN` in size.
    """
    quarter = _quarter(f, z, rel_uncertainty, top=True)
    if quarter is None or np.median(quarter[2].imag) >= 0:
        return None
    _, w, z_q, u_q = quarter
    x = (w / w[-1]) ** 2  # ω² in units of the highest point's, for a well-scaled solve
    coef, cov = _reactance_fit(w, z_q, u_q, [-np.ones_like(x), x, np.log(w / w[-1])])
    inductance = float(coef[1]) / float(w[-1] ** 2)
    error = float(np.sqrt(max(cov[1, 1], 0.0))) / float(w[-1] ** 2)
    if inductance < -NEGATIVE_L_SIGMAS * error and inductance < -NEGATIVE_L_MIN:
        return inductance
    return None


def _low_decade(f: NDArray[np.float64], mask: NDArray[np.bool_]) -> NDArray[np.bool_]:
    """The points of ``mask`` within a decade of the lowest one."""
    if not np.any(mask):
        return mask
    f_first = f[mask][0]
    return mask & (f <= 10 * f_first)


def capacitor_landmarks(f: Any, z: Any, valid: Any = None) -> Landmarks:
    """Landmarks of a capacitor: ``c_low`` (F), ``esl`` (H), ``srf`` (Hz), ``esr_at_srf`` (Ω).

    ``f`` in Hz (any positive range), ``z`` complex Ω, ``valid`` an optional bool mask of
    points inside the measurable window.
    """
    return _capacitor_reading(*_prepare(f, z, valid))[0]


def _remembered(read):
    """``read(f, z)`` remembering its last two readings: a fit reads its model's landmarks
    and then follows the same reading for their slopes (``bench.core.landmark_slopes``).
    The landmarks come back as a copy; the bands are shared, read only."""
    kept: list[tuple] = []

    @functools.wraps(read)
    def remembered(f: NDArray[np.float64], z: NDArray[np.complex128]):
        for f_kept, z_kept, marks, how in list(kept):
            if f_kept.shape == f.shape and np.array_equal(f_kept, f) and np.array_equal(z_kept, z):
                return dict(marks), how
        marks, how = read(f, z)
        kept[:] = [(f.copy(), z.copy(), dict(marks), how), *kept[:1]]
        return marks, how

    return remembered


@_remembered
def _capacitor_reading(
    f: NDArray[np.float64], z: NDArray[np.complex128]
) -> tuple[Landmarks, dict[str, Any]]:
    """:func:`capacitor_landmarks` on prepared points, and the points each landmark was
    read from (``bench.core.landmark_slopes`` follows them through a small change of z)."""
    out: Landmarks = {"c_low": None, "esl": None, "srf": None, "esr_at_srf": None}
    how: dict[str, Any] = {}
    if f.size < 4:
        return out, how
    w = 2 * np.pi * f
    x = z.imag
    srf, how["srf"] = _first_crossing(f, x, rising=True)
    out["srf"] = srf
    # ESL: least squares of X/ω over the top decade above 2·SRF (capacitance corrected).
    esl = None
    if srf is not None:
        high = (f > 2 * srf) & (x > 0)
        high &= f >= f[-1] / 10 if np.any(high & (f >= f[-1] / 10)) else high
        if np.count_nonzero(high) >= 3:
            esl = float(np.mean(x[high] / w[high]))
            how["high"] = high
    # Capacitance: elastance -ωX over the lowest decade well below the resonance.
    cap = (x < 0) & (f < srf / 2.5) if srf is not None else x < 0
    band = _low_decade(f, cap)
    if np.count_nonzero(band) < 3:
        band = _low_decade(f, x < 0)
    how["esl_in_c_low"] = esl is not None
    if np.count_nonzero(band) >= 3:
        elastance = np.mean(w[band] ** 2 * (esl or 0.0) - w[band] * x[band])
        c_low = float(1.0 / elastance) if elastance > 0 else None
        out["c_low"] = c_low
        how["band"] = band
        if esl is not None and c_low is not None and srf is not None:
            # Refine ESL with the low-frequency capacitance taken out.
            esl = float(np.mean((x[high] + 1.0 / (w[high] * c_low)) / w[high]))
            how["esl_refined"] = True
    out["esl"] = esl
    if srf is not None:
        out["esr_at_srf"] = _value_at(f, z.real, srf)
    return out, how


def dc_band(f: NDArray[np.float64]) -> NDArray[np.bool_]:
    """The points ``r_dc`` is read from (the median of their Re Z): those within a third
    of a decade of the lowest frequency, or the lowest three where fewer lie there.
    ``f`` in Hz, increasing."""
    f = np.asarray(f, dtype=float)
    lowest = f <= f[0] * 10 ** (1 / 3)
    if np.count_nonzero(lowest) < 3:
        lowest = np.arange(f.size) < 3
    return lowest


def inductor_landmarks(f: Any, z: Any, valid: Any = None) -> Landmarks:
    """Landmarks of an inductor or bead: ``l_low`` (H), ``r_dc`` (Ω), ``srf`` (Hz, parallel
    resonance), ``z_at_srf`` (Ω, magnitude) and ``c_par`` (F, from the capacitive slope of
    the points well above the resonance, :func:`_capacitive_slope`; None where the sweep
    stops short of that).

    ``f`` in Hz, ``z`` complex Ω, ``valid`` an optional bool mask of points inside the
    measurable window.
    """
    return _inductor_reading(*_prepare(f, z, valid))[0]


@_remembered
def _inductor_reading(
    f: NDArray[np.float64], z: NDArray[np.complex128]
) -> tuple[Landmarks, dict[str, Any]]:
    """:func:`inductor_landmarks` on prepared points, and the points each landmark was
    read from (as :func:`_capacitor_reading`)."""
    out: Landmarks = {"l_low": None, "r_dc": None, "srf": None, "z_at_srf": None, "c_par": None}
    how: dict[str, Any] = {}
    if f.size < 4:
        return out, how
    w = 2 * np.pi * f
    x = z.imag
    srf, how["srf"] = _parallel_resonance_line(f, z)
    out["srf"] = srf
    # DC resistance: median of Re Z over the lowest third of a decade.
    lowest = dc_band(f)
    r_dc = float(np.median(z.real[lowest]))
    out["r_dc"] = r_dc if r_dc > 0 else None
    how["lowest"] = lowest
    # Inductance over the lowest decade where the reactance dominates and well below SRF.
    inductive = (x > np.abs(z.real)) & (x > 0)
    if srf is not None:
        inductive &= f < srf / 3
    band = _low_decade(f, inductive)
    if np.count_nonzero(band) < 3:
        band = _low_decade(f, (x > 0) & ((f < srf / 3) if srf is not None else True))
    l_low = None
    c_par = 0.0
    if np.count_nonzero(band) >= 3:
        how["band"] = band
        how["rounds"] = 0
        y = 1.0 / z[band]
        for _ in range(3):
            # Take the parallel capacitance out of the admittance, then read L from the rest.
            zs = 1.0 / (y - 1j * w[band] * c_par)
            l_low = float(np.mean(zs.imag / w[band]))
            how["rounds"] += 1
            if srf is None or l_low <= 0:
                break
            c_par = 1.0 / ((2 * np.pi * srf) ** 2 * l_low)
    out["l_low"] = l_low if l_low is not None and l_low > 0 else None
    if srf is not None:
        # At the parallel resonance |Z| = 1/G; the conductance G = Re(1/Z) varies slowly
        # there, unlike |Z| at a sharp peak, so it is the one interpolated.
        conductance = _value_at(f, (1.0 / z).real, srf)
        out["z_at_srf"] = float(1.0 / conductance) if conductance and conductance > 0 else None
        out["c_par"] = _capacitive_slope(w, z, srf, out["l_low"])
    return out, how


# The parallel capacitance is read where the points lie at least this factor above the
# parallel resonance: there the winding capacitance carries most of the susceptance.
C_PAR_ABOVE_SRF = 3.0


def _capacitive_slope(w, z, srf: float, l_low: float | None) -> float | None:
    """Parallel capacitance (F) from the capacitive slope of the points above the SRF.

    Over the top third of a decade of the points at least :data:`C_PAR_ABOVE_SRF` times
    above ``srf`` and capacitive, the median of ``Im(1/Z)/ω + 1/(ω²·l_low)``: the
    susceptance per radian of the capacitance, with the inductance's own ``−1/(ωL)``
    put back [derived]. Not from ``srf`` and ``l_low`` (``1/((2π·srf)²·L)``): a
    dispersive ferrite's inductance has fallen well below ``l_low`` by its resonance,
    which that formula would read as a smaller capacitance. None where the points do
    not reach far enough above the resonance.
    """
    b = (1.0 / z).imag
    above = (w >= 2 * np.pi * srf * C_PAR_ABOVE_SRF) & (b > 0)
    if np.count_nonzero(above) < 3:
        return None
    top = above & (w >= w[above][-1] / 10 ** (1 / 3))
    if np.count_nonzero(top) < 3:
        top = above & (w >= np.sort(w[above])[-3])
    c = b[top] / w[top]
    if l_low is not None and l_low > 0:
        c = c + 1.0 / (w[top] ** 2 * l_low)
    value = float(np.median(c))
    return value if value > 0 else None


def landmarks_for(kind: str, f: Any, z: Any, valid: Any = None) -> Landmarks:
    """Capacitor or inductor landmarks by ``kind`` (``"capacitor"`` or ``"inductor"``)."""
    if kind == "capacitor":
        return capacitor_landmarks(f, z, valid)
    if kind == "inductor":
        return inductor_landmarks(f, z, valid)
    raise ValueError(f"kind must be 'capacitor' or 'inductor', got {kind!r}")
