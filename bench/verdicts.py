"""What a result means: the landmarks shown, the verdict, the drive level, DF and |Z| at
chosen frequencies. Pure functions on :mod:`bench.results`; no I/O.

*Shown landmarks* (:func:`shown_landmarks`) are the one source the console, the summary
and the report all print: each landmark read from the measured points inside the window
where the data give it (a band of points, :mod:`bench.core.landmarks`), else the fitted
model's. The main landmark of a part (``c_low``, ``l_low`` or a bead's |Z| at its stated
frequency) is judged on the same value.

The *verdict* (:func:`judge`) combines the tolerance, the fit's quality and the set-up:

- ``FAIL``: the main landmark lies outside nominal × (1 ± tolerance) and nothing casts
  doubt on the measurement;
- ``CHECK``: something does (the fit missed its quality bound, no model could be made, the
  mount short of the sample's position was skipped, the part read at the floor, a
  plausibility check on a standard failed); the reason says what, and whether the value
  would pass;
- ``PASS``: inside the tolerance with none of the above;
- blank: no nominal value or tolerance and no doubt, or a DC-bias point without doubt (a
  nominal value is stated at 0 V; the change from 0 V is given instead).
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from bench.results import PartSpec, RunSummary, SampleResult

CAPACITOR_KINDS = ("mlcc", "bulk")

#: Frequencies (Hz) where the results table gives |Z| when they lie inside the sweep
#: (decades a power-integrity engineer reads a target impedance at; our choice).
Z_AT_HZ = (1e6, 1e7, 1e8)

#: The dissipation factor is stated at 120 Hz for bulk (electrolytic, polymer) parts and
#: at 1 kHz for ceramics (common practice, no source); the first one inside the
#: measurable window is used.
DF_AT_HZ = {"bulk": (120.0, 1e3), "mlcc": (1e3, 120.0)}

#: A part "at the floor": at least this share of its points lies outside the window
#: (common practice, no source).
FLOOR_SHARE = 0.9


@dataclass(frozen=True)
class Verdict:
    """``result`` is ``"PASS"``, ``"FAIL"``, ``"CHECK"`` or ``""``; ``reason`` says why."""

    result: str
    reason: str = ""


def _finite(value: Any) -> float | None:
    if value is None:
        return None
    try:
        value = float(value)
    except (TypeError, ValueError):
        return None
    return value if math.isfinite(value) else None


def kind_of(spec: PartSpec) -> str:
    return "capacitor" if spec.kind in CAPACITOR_KINDS else "inductor"


#: Landmarks already read from data in this process, by a digest of the curve: the
#: console, summary.csv, the fit JSON, the report's tables and figures all ask for the
#: same sample's. Bounded: the oldest entries go first.
_READ: dict[bytes, dict[str, float | None]] = {}
_READ_KEPT = 512


def screened_out(sample: SampleResult) -> np.ndarray:
    """The points of the sample that its fit's screening left out (a glitch, a lone
    point out of line, negative resistance, a band edge): no reading of the part, so
    nothing read from the data uses them. None marked when the fit does not say."""
    from bench.core.robust import screened

    return screened(getattr(sample.fit, "point_status", None), np.size(sample.data.f))


def readable(sample: SampleResult) -> np.ndarray:
    """The points values are read from: inside the window, not screened out."""
    return np.asarray(sample.data.inside_window, dtype=bool) & ~screened_out(sample)


def data_landmarks(sample: SampleResult, kind: str) -> dict[str, float | None]:
    """Landmarks read straight from the points inside the window ({} if none can be),
    but for those the sample's fit screened out (a glitch is no reading of the part)."""
    import hashlib

    from bench.core.landmarks import landmarks_for

    inside = readable(sample)
    if inside.sum() < 3:
        return {}
    f = np.ascontiguousarray(sample.data.f, dtype=float)
    z = np.ascontiguousarray(sample.data.z, dtype=complex)
    digest = hashlib.blake2b(kind.encode(), digest_size=16)
    for array in (f, z, inside):
        digest.update(array.tobytes())
    key = digest.digest()
    if key not in _READ:
        try:
            read = dict(landmarks_for(kind, f, z, inside))
        except (ValueError, FloatingPointError):
            read = {}
        while len(_READ) >= _READ_KEPT:
            del _READ[next(iter(_READ))]
        _READ[key] = read
    return dict(_READ[key])


def shown(
    sample: SampleResult, kind: str, fit: Any = None
) -> tuple[dict[str, float | None], dict[str, str | None]]:
    """(values, sources) of the shown landmarks: each from the data where the data give
    it (source ``"data"``), else from the model (``"model"``). ``fit`` stands in for the
    sample's own fit (a typical model refitted with the lot's family, say)."""
    fit = sample.fit if fit is None else fit
    model = dict(fit.landmarks) if fit is not None else {}
    spread = dict(getattr(fit, "landmark_uncertainties", None) or {}) if fit is not None else {}
    data = data_landmarks(sample, kind)
    values: dict[str, float | None] = {}
    sources: dict[str, str | None] = {}
    for key in dict.fromkeys([*model, *data]):
        measured = _finite(data.get(key))
        values[key] = measured if measured is not None else _finite(model.get(key))
        sources[key] = "data" if measured is not None else "model"
        if values[key] is None:
            sources[key] = None  # neither gives it (the fitter's convention)
        elif measured is None and _undetermined(values[key], spread.get(key)):
            # The model's value, known to worse than ±100 % (a resonance resting on an
            # element the data barely see): no number to print, judge or average.
            values[key], sources[key] = None, NOT_DETERMINED
    return values, sources


#: The source of a shown landmark the model gives to worse than ±100 % (no value shown).
NOT_DETERMINED = "not determined"


def _undetermined(value: float, sigma: Any) -> bool:
    from bench.core.fit_select import relative_spread, undetermined

    return undetermined(relative_spread(value, sigma))


def shown_landmarks(sample: SampleResult, kind: str, fit: Any = None) -> dict[str, float | None]:
    """Each landmark from the data where the data give it, else from the model."""
    return shown(sample, kind, fit)[0]


def landmark_sources(sample: SampleResult, kind: str, fit: Any = None) -> dict[str, str | None]:
    """``"data"`` or ``"model"`` per shown landmark (None where neither gives one)."""
    return shown(sample, kind, fit)[1]


def shown_fit(sample: SampleResult, kind: str, fit: Any = None) -> Any:
    """The sample's fit (or ``fit``) carrying the shown landmarks and their sources.

    What a run hands to everything that prints a fit's landmarks (the figures' SRF line
    and label, the SPICE comments, the fit JSON), so they state the values the console,
    ``summary.csv`` and the report state. The fitter's own merge
    (``bench.core.fit_landmarks.merge_landmarks``, which prefers the model's value where
    it agrees with the data's within a few per cent) stays on ``sample.fit``."""
    import dataclasses

    fit = sample.fit if fit is None else fit
    if fit is None:
        return None
    values, sources = shown(sample, kind, fit)
    return dataclasses.replace(fit, landmarks=values, landmark_sources=sources)


def fit_record(sample: SampleResult, kind: str) -> dict[str, Any]:
    """A run sample's fit JSON (``models/<sample>.fit.json``) without its set-ups.

    ``landmarks`` and ``landmark_sources`` are the shown ones (the values every other
    output of the run gives); ``fit_landmarks`` and ``fit_landmark_sources`` keep the
    fitter's merge, which ``zbench fit`` gives as its ``landmarks``."""
    record = shown_fit(sample, kind).to_json()
    record["fit_landmarks"] = dict(sample.fit.landmarks)
    record["fit_landmark_sources"] = dict(sample.fit.landmark_sources)
    return record


def magnitude_at(f: Any, z: Any, at_hz: float, valid: Any = None) -> float | None:
    """|Z| at ``at_hz`` by log-log interpolation of the (valid) points; None outside."""
    f = np.asarray(f, dtype=float)
    mag = np.abs(np.asarray(z, dtype=complex))
    good = (f > 0) & (mag > 0) & np.isfinite(mag)
    if valid is not None:
        good &= np.asarray(valid, dtype=bool)
    if good.sum() < 2 or not (f[good][0] <= at_hz <= f[good][-1]):
        return None
    return float(np.exp(np.interp(math.log(at_hz), np.log(f[good]), np.log(mag[good]))))


def dissipation_factor(sample: SampleResult, spec: PartSpec) -> tuple[float | None, float | None]:
    """(DF, frequency Hz) of a capacitor: Re Z / |Im Z| at 120 Hz or 1 kHz.

    Read from the points inside the window (linear interpolation of Re and Im on log f);
    (None, None) for inductors and beads or when neither frequency is measured there.
    """
    if spec.kind not in CAPACITOR_KINDS:
        return None, None
    f = np.asarray(sample.data.f, dtype=float)
    z = np.asarray(sample.data.z, dtype=complex)
    inside = readable(sample) & np.isfinite(z)
    if inside.sum() < 2:
        return None, None
    fi, zi = f[inside], z[inside]
    for at in DF_AT_HZ[spec.kind]:
        if not fi[0] <= at <= fi[-1]:
            continue
        x = math.log(at)
        re = float(np.interp(x, np.log(fi), zi.real))
        im = float(np.interp(x, np.log(fi), zi.imag))
        if im < 0:  # capacitive there
            return re / -im, at
    return None, None


def z_at_frequencies(sample: SampleResult, spec: PartSpec) -> dict[float, float | None]:
    """|Z| (Ω) at :data:`Z_AT_HZ` and a bead's stated frequency, where inside the sweep."""
    freqs = list(Z_AT_HZ)
    if spec.nominal_at_hz and spec.nominal_at_hz not in freqs:
        freqs.append(spec.nominal_at_hz)
    out = {}
    valid = readable(sample)
    for at in sorted(freqs):
        value = magnitude_at(sample.data.f, sample.data.z, at, valid)
        if value is not None:
            out[at] = value
    return out


# --------------------------------------------------------------------------- drive level


def drive_voltage(
    z_part: Any,
    *,
    power_dbm: float,
    z0: float = 50.0,
    series_r: float = 0.0,
    method: str = "shunt-through",
) -> np.ndarray:
    """RMS voltage (V) across the part for an analyser source of ``power_dbm``.

    The source is an EMF E behind Z0 whose available power is the set power:
    E = sqrt(4·Z0·P) (rms). Each port adds its series resistor, Ze = Z0 + Rs.
    Shunt-through: the part sits across the port-2 termination Ze, fed through Ze,
    V = E·(Zp‖Ze)/(Ze + Zp‖Ze). Series-through: V = E·Zp/(Zp + 2·Ze). Reflection:
    V = E·Zp/(Zp + Ze). (Derived: voltage dividers of a Thevenin source; standard
    circuit analysis, docs/references.md §1 for the shunt-through relation.)
    """
    zp = np.asarray(z_part, dtype=complex)
    emf = math.sqrt(4.0 * z0 * 10.0 ** (power_dbm / 10.0) * 1e-3)
    ze = z0 + series_r
    with np.errstate(divide="ignore", invalid="ignore"):
        if method == "series-through":
            v = emf * zp / (zp + 2 * ze)
        elif method == "reflection":
            v = emf * zp / (zp + z0)
        else:
            par = zp * ze / (zp + ze)
            v = emf * par / (ze + par)
    return np.abs(v)


def sample_drive(summary: RunSummary, sample: SampleResult) -> float | None:
    """Largest RMS voltage (V) across the part over the sweep, or None if unknown."""
    sweep = summary.setup.get("sweep")
    power = sweep.get("power") if isinstance(sweep, dict) else None
    if not isinstance(power, (int, float)):
        return None
    fixture = summary.setup.get("fixture")
    fixture = fixture if isinstance(fixture, dict) else {}
    series_r = _finite(fixture.get("series_r")) or 0.0
    z0 = _finite(fixture.get("z0")) or 50.0
    method = str(summary.setup.get("method") or fixture.get("method") or "shunt-through")
    z = sample.data.z_measured if getattr(sample.data, "z_measured", None) is not None else None
    z = sample.data.z if z is None else z
    z = np.asarray(z, dtype=complex)
    z = z[np.isfinite(z)]
    if z.size == 0:
        return None
    v = drive_voltage(z, power_dbm=float(power), z0=z0, series_r=series_r, method=method)
    v = v[np.isfinite(v)]
    return float(v.max()) if v.size else None


# --------------------------------------------------------------------------- verdict

_NO_SHORT = re.compile(r"no mount short for position (\d+)")


def skipped_shorts(warnings: Iterable[str]) -> set[int]:
    """Positions whose mount short was skipped, from the run's warnings."""
    return {int(m.group(1)) for w in warnings for m in [_NO_SHORT.search(w)] if m}


def at_floor(sample: SampleResult) -> bool:
    """Whether the part read at the set-up's limits: most points outside the window."""
    inside = np.asarray(sample.data.inside_window, dtype=bool)
    return inside.size > 0 and (1.0 - inside.mean()) >= FLOOR_SHARE


def doubts(
    sample: SampleResult, run_warnings: Sequence[str] = (), plausibility: Sequence[str] = ()
) -> list[str]:
    """Reasons to doubt a sample's result (empty when none)."""
    reasons = []
    if sample.fit is None:
        reasons.append(f"no model ({sample.fit_error or 'the fit failed'})")
    elif not sample.fit.meets_quality:
        q = sample.fit.quality
        reasons.append(
            f"fit missed its quality bound (RMS log error {q.rms_log_error:.3g} > "
            f"{sample.fit.quality_bound:g})"
        )
    if sample.position is not None and sample.position in skipped_shorts(run_warnings):
        reasons.append(f"mount short of position {sample.position} skipped: ESL includes the mount")
    if at_floor(sample):
        reasons.append("part read at the limits of the set-up (most points outside the window)")
    reasons.extend(plausibility)
    return reasons


#: A tolerance is judged on a value the model gives (none of the data) only when this
#: many of its standard uncertainties fit inside the tolerance: the expanded uncertainty
#: with coverage factor 2 (about 95 %, JCGM 100:2008 §6, docs/references.md §11).
GUARD_FACTOR = 2.0


def model_spread(spec: PartSpec, sample: SampleResult) -> tuple[str, float] | None:
    """(name, relative one-sigma uncertainty) of the landmark a part's tolerance is stated
    on, when the shown value is the fitted model's (the data do not give it) and the fit
    states its uncertainty; None otherwise. A bead's |Z| at a stated frequency is a
    reading of the data wherever it can be, and is not covered."""
    from bench.core.fit_select import relative_spread
    from bench.exports import main_landmark

    fit = sample.fit
    if fit is None:
        return None
    name, value = main_landmark(spec, sample)
    if landmark_sources(sample, kind_of(spec)).get(name) != "model":
        return None  # read from the data, or a bead's |Z| at its frequency
    sigma = (getattr(fit, "landmark_uncertainties", None) or {}).get(name)
    relative = relative_spread(value, _finite(sigma))
    return None if relative is None else (name, relative)


def judge(
    spec: PartSpec,
    sample: SampleResult,
    value: float | None,
    run_warnings: Sequence[str] = (),
    plausibility: Sequence[str] = (),
) -> tuple[float | None, Verdict]:
    """(deviation from nominal as a fraction, :class:`Verdict`) of one sample."""
    deviation = None
    tolerance_text = ""
    outcome = ""
    if value is not None and spec.nominal:
        deviation = value / spec.nominal - 1.0
        if spec.tolerance is not None and not sample.bias_v:
            inside = abs(deviation) <= spec.tolerance * (1 + 1e-12)
            outcome = "PASS" if inside else "FAIL"
            tolerance_text = (
                f"{100 * deviation:+.1f} % vs nominal, "
                f"{'inside' if inside else 'outside'} ±{100 * spec.tolerance:g} %"
            )
    reasons = doubts(sample, run_warnings, plausibility)
    unjudged = value is None and spec.nominal and spec.tolerance is not None
    if unjudged and not sample.bias_v and sample.fit is not None:
        reasons.append(
            "no value to judge: neither the data nor the model give the value the "
            "tolerance is stated on (a resonance beyond the sweep, or a model value "
            "known to worse than ±100 %); sweep where it is"
        )
    if tolerance_text:
        spread = model_spread(spec, sample)
        if spread is not None and GUARD_FACTOR * spread[1] > spec.tolerance:
            name, relative = spread
            reasons.append(
                f"{name} is the model's value, not a reading of the data, known to "
                f"±{100 * relative:.2g} % (one sigma): too loosely for a ±"
                f"{100 * spec.tolerance:g} % tolerance; sweep where the data give it"
            )
    if reasons:
        text = "; ".join(reasons)
        if tolerance_text:
            text += f" ({tolerance_text})"
        return deviation, Verdict("CHECK", text)
    return deviation, Verdict(outcome, tolerance_text)


#: Run warnings that start with this come from a plausibility check on a standard or a
#: capture (a through far from 0 dB, say) and put every result of the run in doubt.
PLAUSIBILITY_PREFIX = "implausible "


def plausibility_notes(warnings: Iterable[str]) -> list[str]:
    """The run's plausibility failures, from its warnings."""
    return [w for w in warnings if w.startswith(PLAUSIBILITY_PREFIX)]
