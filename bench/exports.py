"""Files a run hands over: SPICE models, Touchstone data, the summary table, lot figures.

:func:`write_exports` writes, inside a run folder (every write atomic):

- ``models/<label>.sub``: one SPICE subcircuit per fitted sample and bias point;
- ``models/<part>.lib``: every subcircuit of a part plus ``<part>_typ``, the sample whose
  main landmark is the median of the part's samples (at the part's lowest bias point);
- ``models/<part>_bias.csv``: capacitance versus DC bias, for parts measured at several
  bias points;
- ``corrected/<label>.s1p``: the fixture-removed impedance as a one-port Touchstone Z
  file, and ``corrected/<label>.s2p``: the calibrated S-parameters when they were kept;
- ``summary.csv``: one row per sample and bias point (landmarks, fit quality, points
  outside the window, pass/fail against the procedure's nominal value and tolerance);
- ``lot_statistics.csv``: mean, standard deviation, minimum and maximum of each
  landmark over the samples of a part, per bias point.

The *main landmark* of a part is what its tolerance is stated on: ``c_low`` (F) for
capacitors, ``l_low`` (H) for inductors, and for beads |Z| (Ω) at ``nominal_at_hz``,
read from the measurement (log-log interpolation) when that frequency lies inside the
sweep, else from the model. A sample passes when its main landmark lies within
nominal × (1 ± tolerance); the verdict is blank when the procedure gives no nominal
value or no tolerance, and at DC bias points (a nominal value is stated without bias;
the deviation is still given, and ``change_from_0v`` gives the change from the same
sample at 0 V). All values in the CSV files are SI (F, H, Hz, Ω, V); deviations
and tolerances are fractions.

The pure functions :func:`summary_rows`, :func:`lot_statistics`, :func:`bias_table` and
:func:`main_landmark` compute the same tables without writing anything.
"""

from __future__ import annotations

import csv
import io
import math
import re
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np

from bench.errors import ZbenchError
from bench.files import atomic_write_text
from bench.results import PartSpec, RunSummary, SampleResult
from bench.units import LANDMARK_UNITS

CAPACITOR_KINDS = ("mlcc", "bulk")
CAPACITOR_LANDMARKS = ("c_low", "esl", "srf", "esr_at_srf")
INDUCTOR_LANDMARKS = ("l_low", "r_dc", "srf", "z_at_srf", "c_par")
#: Units as written in the CSV files (ASCII, so every spreadsheet reads them).
CSV_UNITS = {key: unit.replace("Ω", "ohm") for key, unit in LANDMARK_UNITS.items()}
ALL_LANDMARKS = ("c_low", "esl", "srf", "esr_at_srf", "l_low", "r_dc", "z_at_srf", "c_par")

SUMMARY_COLUMNS = (
    "part",
    "sample",
    "bias_v",
    "position",
    "kind",
    "model",
    *ALL_LANDMARKS,
    "rms_log_error",
    "max_abs_log_error",
    "points_used",
    "points_outside_window",
    "main_landmark",
    "unit",
    "measured",
    "nominal",
    "tolerance",
    "nominal_at_hz",
    "deviation",
    "change_from_0v",
    "result",
    "reason",
    "df",
    "df_at_hz",
    "drive_v",
    "fit_error",
    "warnings",
)

#: Units of the ``summary.csv`` columns (ASCII). ``measured`` and ``nominal`` take the
#: unit of the main landmark, given in the ``unit`` column; fractions say so.
_COLUMN_UNITS = {
    "bias_v": "V",
    **CSV_UNITS,
    "rms_log_error": "1",
    "max_abs_log_error": "1",
    "tolerance": "fraction",
    "nominal_at_hz": "Hz",
    "deviation": "fraction",
    "change_from_0v": "fraction",
    "df": "1",
    "df_at_hz": "Hz",
    "drive_v": "V rms",
}


def csv_header(column: str) -> str:
    """Header text of a ``summary.csv`` column: its name and unit, ``srf [Hz]``."""
    unit = _COLUMN_UNITS.get(column)
    return f"{column} [{unit}]" if unit else column


def csv_column(header: str) -> str:
    """The column name of a ``summary.csv`` header (the inverse of :func:`csv_header`)."""
    return header.split(" [", 1)[0]


# --------------------------------------------------------------------------- names


def safe_filename(text: str) -> str:
    """``text`` with every character outside ``A-Z a-z 0-9 . _ + -`` replaced by ``_``."""
    cleaned = re.sub(r"[^A-Za-z0-9._+\-]", "_", text).strip(".")
    return cleaned or "_"


def spice_name(text: str) -> str:
    """The subcircuit name SPICE gets for ``text``: ``MC-1_s1_4.5V`` → ``MC_1_s1_4p5V``.

    A decimal point between digits becomes ``p`` (as SPICE users write 4p7), then the
    core's rule applies (:func:`bench.core.spice.spice_name`: letters, digits and ``_``).
    """
    from bench.core.spice import spice_name as core_spice_name

    return core_spice_name(re.sub(r"(?<=\d)\.(?=\d)", "p", text))


def sample_spice_name(sample: SampleResult) -> str:
    """Subcircuit name of a sample: its label, made a SPICE token."""
    return spice_name(sample.label)


def typical_spice_name(part: str) -> str:
    """Subcircuit name of a part's typical model: ``<part>_typ``."""
    return spice_name(f"{part}_typ")


# --------------------------------------------------------------------------- landmarks


def part_kind(spec: PartSpec) -> str:
    """``"capacitor"`` for MLCCs and bulk capacitors, else ``"inductor"``."""
    return "capacitor" if spec.kind in CAPACITOR_KINDS else "inductor"


def main_landmark(spec: PartSpec, sample: SampleResult) -> tuple[str, float | None]:
    """Name and value (SI) of the landmark the part's tolerance is stated on.

    ``c_low`` for capacitors and ``l_low`` for inductors (the shown landmarks of
    :func:`bench.verdicts.shown_landmarks`: from the data where they hold, else the fit);
    for a bead with ``nominal_at_hz``, ``z_at_nominal_hz``: |Z| there, from the
    measurement when the frequency is inside the sweep, else from the model; for a
    bead without it, ``z_at_srf``. The value is None when it cannot be had (no fit).
    """
    from bench.verdicts import kind_of, magnitude_at, screened_out, shown_landmarks

    landmarks = shown_landmarks(sample, kind_of(spec)) if sample.fit is not None else {}
    if spec.kind in CAPACITOR_KINDS:
        return "c_low", _finite(landmarks.get("c_low"))
    if spec.kind == "bead":
        if spec.nominal_at_hz:
            # From every measured point but those screened out (a glitch is no reading).
            value = magnitude_at(
                sample.data.f, sample.data.z, spec.nominal_at_hz, ~screened_out(sample)
            )
            if value is None and sample.fit is not None:
                zm = sample.fit.impedance(np.array([spec.nominal_at_hz], dtype=float))
                value = float(np.abs(zm[0]))
            return "z_at_nominal_hz", _finite(value)
        return "z_at_srf", _finite(landmarks.get("z_at_srf"))
    return "l_low", _finite(landmarks.get("l_low"))


def _finite(value: Any) -> float | None:
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def verdict(spec: PartSpec, value: float | None, bias_v: float = 0.0) -> tuple[float | None, str]:
    """(deviation from nominal as a fraction, ``"pass"``/``"fail"``/``""``).

    Pass when ``|value/nominal − 1| ≤ tolerance``. Blank verdict when the procedure
    gives no nominal value or no tolerance, or the value could not be had. A nominal
    value is stated without DC bias, so at a bias point (``bias_v`` ≠ 0 V) the deviation
    is given but the verdict is left blank: a class II ceramic losing capacitance under
    bias is not out of tolerance.
    """
    if value is None or not spec.nominal:
        return None, ""
    deviation = value / spec.nominal - 1.0
    if spec.tolerance is None or bias_v:
        return deviation, ""
    # A hair of slack so a value printed exactly at the limit is not failed by rounding.
    return deviation, "pass" if abs(deviation) <= spec.tolerance * (1 + 1e-12) else "fail"


# --------------------------------------------------------------------------- tables


def zero_bias_values(summary: RunSummary) -> dict[tuple[str, str], float]:
    """Main landmark of each (part, sample) at 0 V, where it was measured and fitted (SI)."""
    values = {}
    for sample in summary.samples:
        if sample.bias_v:
            continue
        _, value = main_landmark(summary.part(sample.part), sample)
        if value is not None:
            values[(sample.part, sample.sample)] = value
    return values


def change_from_zero_bias(
    sample: SampleResult, value: float | None, references: dict[tuple[str, str], float]
) -> float | None:
    """Fractional change of ``value`` from the same sample at 0 V; None at 0 V or unknown."""
    reference = references.get((sample.part, sample.sample))
    if not sample.bias_v or value is None or not reference:
        return None
    return value / reference - 1.0


def summary_rows(summary: RunSummary) -> list[dict[str, Any]]:
    """One row per sample and bias point, keyed by :data:`SUMMARY_COLUMNS` (SI values).

    ``change_from_0v`` (fraction) is given at DC-bias points: the main landmark against
    the same sample's at 0 V, the figure that replaces a verdict under bias.
    """
    from bench.verdicts import (
        dissipation_factor,
        judge,
        kind_of,
        plausibility_notes,
        sample_drive,
        shown_landmarks,
    )

    rows = []
    references = zero_bias_values(summary)
    plausibility = plausibility_notes(summary.warnings)
    for sample in summary.samples:
        spec = summary.part(sample.part)
        fit = sample.fit
        landmarks = shown_landmarks(sample, kind_of(spec)) if fit is not None else {}
        name, value = main_landmark(spec, sample)
        deviation, judged = judge(spec, sample, value, summary.warnings, plausibility)
        df, df_at = dissipation_factor(sample, spec)
        quality = fit.quality if fit is not None else None
        outside = (
            quality.points_outside_window
            if quality is not None
            else int(np.count_nonzero(~np.asarray(sample.data.inside_window, dtype=bool)))
        )
        warnings = list(sample.warnings) + (list(fit.warnings) if fit is not None else [])
        row: dict[str, Any] = {
            "part": sample.part,
            "sample": sample.sample,
            "bias_v": sample.bias_v,
            "position": sample.position,
            "kind": spec.kind,
            "model": fit.model if fit is not None else None,
            **{key: _finite(landmarks.get(key)) for key in ALL_LANDMARKS},
            "rms_log_error": quality.rms_log_error if quality is not None else None,
            "max_abs_log_error": quality.max_abs_log_error if quality is not None else None,
            "points_used": quality.points_used if quality is not None else None,
            "points_outside_window": outside,
            "main_landmark": name,
            "unit": CSV_UNITS.get(name, ""),
            "measured": value,
            "nominal": spec.nominal,
            "tolerance": spec.tolerance,
            "nominal_at_hz": spec.nominal_at_hz if spec.kind == "bead" else None,
            "deviation": deviation,
            "change_from_0v": change_from_zero_bias(sample, value, references),
            "result": judged.result,
            "reason": judged.reason,
            "df": df,
            "df_at_hz": df_at,
            "drive_v": sample_drive(summary, sample),
            "fit_error": sample.fit_error,
            "warnings": "; ".join(dict.fromkeys(warnings)),
        }
        rows.append(row)
    return rows


@dataclass(frozen=True)
class LandmarkStats:
    """Lot statistics of one landmark (SI units). ``std`` uses n − 1 (NaN for n < 2)."""

    n: int
    mean: float
    std: float
    min: float
    max: float


def _stats(values: list[float]) -> LandmarkStats:
    array = np.asarray(values, dtype=float)
    std = float(np.std(array, ddof=1)) if array.size >= 2 else math.nan
    return LandmarkStats(
        n=int(array.size),
        mean=float(np.mean(array)),
        std=std,
        min=float(np.min(array)),
        max=float(np.max(array)),
    )


def lot_statistics(summary: RunSummary) -> dict[str, dict[float, dict[str, LandmarkStats]]]:
    """Per part and bias point, statistics of each landmark over the fitted samples.

    Returns ``{part: {bias_v: {landmark: LandmarkStats}}}``. Landmarks are those of
    the shown ones (:func:`bench.verdicts.shown_landmarks`, as in ``summary.csv``), plus
    ``z_at_nominal_hz`` for beads with a nominal frequency. Samples without a fit, and
    non-finite values, are left out of the statistics.
    """
    from bench.verdicts import shown_landmarks

    values: dict[str, dict[float, dict[str, list[float]]]] = {}
    for sample in summary.samples:
        spec = summary.part(sample.part)
        if sample.fit is None:
            continue
        bucket = values.setdefault(sample.part, {}).setdefault(float(sample.bias_v), {})
        for key, value in shown_landmarks(sample, part_kind(spec)).items():
            finite = _finite(value)
            if finite is not None:
                bucket.setdefault(key, []).append(finite)
        if spec.kind == "bead" and spec.nominal_at_hz:
            name, main = main_landmark(spec, sample)
            if main is not None:
                bucket.setdefault(name, []).append(main)
    return {
        part: {
            bias: {key: _stats(vals) for key, vals in sorted(landmarks.items())}
            for bias, landmarks in sorted(by_bias.items())
        }
        for part, by_bias in values.items()
    }


@dataclass(frozen=True)
class BiasPoint:
    """Capacitance of one sample at one DC bias (V, F); ``change`` is the fraction
    relative to the same sample at its lowest measured bias."""

    sample: str
    bias_v: float
    c_low: float
    change: float


def bias_table(summary: RunSummary) -> dict[str, tuple[BiasPoint, ...]]:
    """Capacitance versus DC bias for every capacitor part measured at several bias points.

    Returns ``{part: (BiasPoint, ...)}`` sorted by sample, then bias; parts with a single
    bias point are left out. Samples without a fitted ``c_low`` are skipped.
    """
    by_part: dict[str, dict[str, dict[float, float]]] = {}
    for sample in summary.samples:
        spec = summary.part(sample.part)
        if spec.kind not in CAPACITOR_KINDS or sample.fit is None:
            continue
        _, c_low = main_landmark(spec, sample)  # the shown c_low, as summary.csv gives it
        if c_low is None:
            continue
        by_part.setdefault(sample.part, {}).setdefault(sample.sample, {})[float(sample.bias_v)] = (
            c_low
        )
    table: dict[str, tuple[BiasPoint, ...]] = {}
    for part, samples in by_part.items():
        biases = {bias for points in samples.values() for bias in points}
        if len(biases) < 2:
            continue
        points = []
        for sample_name in sorted(samples):
            curve = samples[sample_name]
            reference = curve[min(curve)]
            for bias in sorted(curve):
                points.append(
                    BiasPoint(sample_name, bias, curve[bias], curve[bias] / reference - 1.0)
                )
        table[part] = tuple(points)
    return table


#: An element whose one-sigma uncertainty exceeds this fraction of its value makes a fit
#: poorly determined for the typical model (common practice, no source).
TYPICAL_MAX_UNCERTAINTY = 0.5


@dataclass(frozen=True)
class Typical:
    """A part's typical model: the sample it stands for and the fit it exports.

    ``fit`` is the sample's own fit, or a refit of its data with the lot's majority
    family when its own family differs (``refitted``). ``warnings`` name poorly
    determined elements and any fall-back taken.
    """

    sample: SampleResult
    fit: Any
    family: str
    refitted: bool
    basis: str
    warnings: tuple[str, ...] = ()


def poorly_determined(fit: Any, limit: float = TYPICAL_MAX_UNCERTAINTY) -> list[str]:
    """Elements of ``fit`` whose one-sigma uncertainty exceeds ``limit`` of their value
    (not those that dropped out of the fit: the circuit is the one without them)."""
    out = []
    sigma = dict(getattr(fit, "uncertainties", {}) or {})
    dropped = set(getattr(fit, "dropped", ()) or ())
    for key, value in fit.elements.items():
        error = sigma.get(key)
        if key in dropped:
            continue
        if error is None or not value or not math.isfinite(error):
            continue
        if error / abs(value) > limit:
            out.append(f"{key} ±{100 * error / abs(value):.0f} %")
    return out


def typical_model(summary: RunSummary, part: str) -> Typical | None:
    """The typical model of ``part``: the median sample among well-determined fits.

    Only fitted samples at the part's lowest bias point with a main landmark take part.
    Well determined: the fit meets its quality bound and no element is uncertain by
    more than :data:`TYPICAL_MAX_UNCERTAINTY`; when no fit is, all take part, with a
    warning. The family is the lot's most common one (the first in run order on a tie);
    a median sample fitted with another family is refitted with it. With an even count
    the lower of the two middle samples is taken (a real sample, not an average).
    """
    from collections import Counter

    spec = summary.part(part)
    candidates = [s for s in summary.samples if s.part == part and s.fit is not None]
    if not candidates:
        return None
    lowest = min(s.bias_v for s in candidates)
    valued = []
    for sample in candidates:
        if sample.bias_v != lowest:
            continue
        _, value = main_landmark(spec, sample)
        if value is not None:
            valued.append((value, sample))
    if not valued:
        return None
    warnings: list[str] = []
    families = Counter(s.fit.model for _, s in valued)
    family = max(families, key=lambda name: (families[name], -list(families).index(name)))
    if len(families) > 1:
        listed = ", ".join(f"{name} ×{n}" for name, n in families.items())
        warnings.append(
            f"the lot was fitted with several families ({listed}); typical uses {family}"
        )
    good = [(v, s) for v, s in valued if s.fit.meets_quality and not poorly_determined(s.fit)]
    if good:
        basis = f"median of {len(good)} well-determined fit{'s' if len(good) != 1 else ''}"
    else:
        good = valued
        basis = f"median of {len(valued)} fits, none well determined"
        warnings.append("no sample's fit is well determined; the typical model is uncertain")
    good.sort(key=lambda item: item[0])
    sample = good[(len(good) - 1) // 2][1]
    fit, refitted = sample.fit, False
    if fit.model != family:
        try:
            fit = _refit(sample, family)
            refitted = True
        except ZbenchError as exc:  # a failed refit keeps the sample's own fit
            warnings.append(
                f"refit of {sample.label} with {family} failed ({exc}); kept {fit.model}"
            )
            fit = sample.fit
    weak = poorly_determined(fit)
    if weak:
        warnings.append(
            f"typical model {typical_spice_name(part)}: poorly determined element"
            f"{'s' if len(weak) != 1 else ''} {', '.join(weak)} (above "
            f"{100 * TYPICAL_MAX_UNCERTAINTY:g} %)"
        )
    return Typical(sample, fit, fit.model, refitted, basis, tuple(warnings))


def _refit(sample: SampleResult, family: str) -> Any:
    from bench.core.fitting import fit_impedance

    data = sample.data
    bound = getattr(sample.fit, "quality_bound", None)
    kwargs = {} if bound is None else {"quality_bound": bound}
    return fit_impedance(
        data.f,
        data.z,
        model=family,
        rel_uncertainty=data.rel_uncertainty,
        valid=data.inside_window,
        **kwargs,
    )


def typical_sample(summary: RunSummary, part: str) -> SampleResult | None:
    """The sample the typical model of ``part`` stands for (see :func:`typical_model`)."""
    typical = typical_model(summary, part)
    return None if typical is None else typical.sample


# --------------------------------------------------------------------------- writing


def _cell(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return "" if not math.isfinite(value) else f"{value:.9g}"
    return str(value)


def _csv_text(columns: tuple[str, ...] | list[str], rows: list[dict[str, Any]]) -> str:
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(columns)
    for row in rows:
        writer.writerow([_cell(row.get(column)) for column in columns])
    return buffer.getvalue()


def summary_csv_text(summary: RunSummary) -> str:
    """Text of ``summary.csv``: headers carry their units (:func:`csv_header`)."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow([csv_header(column) for column in SUMMARY_COLUMNS])
    for row in summary_rows(summary):
        writer.writerow([_cell(row.get(column)) for column in SUMMARY_COLUMNS])
    return buffer.getvalue()


def lot_statistics_csv_text(summary: RunSummary) -> str:
    """Text of ``lot_statistics.csv``: part, bias_v, landmark, unit, n, mean, std, min, max."""
    rows = []
    for part, by_bias in lot_statistics(summary).items():
        for bias, landmarks in by_bias.items():
            for key, stats in landmarks.items():
                rows.append(
                    {
                        "part": part,
                        "bias_v": bias,
                        "landmark": key,
                        "unit": CSV_UNITS.get(key, ""),
                        "n": stats.n,
                        "mean": stats.mean,
                        "std": stats.std,
                        "min": stats.min,
                        "max": stats.max,
                    }
                )
    columns = ("part", "bias_v", "landmark", "unit", "n", "mean", "std", "min", "max")
    return _csv_text(columns, rows)


def bias_csv_text(points: tuple[BiasPoint, ...]) -> str:
    """Text of ``<part>_bias.csv``: sample, bias_v (V), c_low (F), change (fraction)."""
    rows = [
        {"sample": p.sample, "bias_v": p.bias_v, "c_low": p.c_low, "change": p.change}
        for p in points
    ]
    return _csv_text(("sample", "bias_v", "c_low", "change"), rows)


def run_date(summary: RunSummary) -> str:
    """Date of the run for provenance: ``setup`` key started, created or date, else now (UTC)."""
    for key in ("started", "created", "date"):
        value = summary.setup.get(key)
        if value:
            return str(value)
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def provenance(
    summary: RunSummary, sample: SampleResult, *, date: str | None = None
) -> dict[str, str]:
    """Provenance comments of a sample's subcircuit."""
    return {
        "run": summary.run_id,
        "procedure": summary.procedure_name,
        "part": sample.part,
        "sample": sample.sample,
        "bias": f"{sample.bias_v:g} V",
        "raw file": sample.raw_file or "(not recorded)",
        "software": f"zbench {summary.software_version}".strip(),
        "date": date or run_date(summary),
    }


def run_series_r(summary: RunSummary) -> float | None:
    """The port series resistance (Ω) of the run's fixture, from its set-up record."""
    fixture = summary.setup.get("fixture")
    value = fixture.get("series_r") if isinstance(fixture, dict) else None
    if value is None:
        value = summary.setup.get("series_r_ohm", summary.setup.get("series_r"))
    return float(value) if isinstance(value, (int, float)) else None


def _write_touchstone(run_dir: Path, sample: SampleResult, series_r: float | None) -> list[Path]:
    from bench.core.window import METHODS
    from bench.touchstone import method_comment, write_touchstone_s, write_touchstone_z

    stem = safe_filename(sample.label)
    # The set-up goes with the data: ``zbench fit`` reads these lines, so a re-fit of an
    # S file from a run with series resistors computes Z with them, by the same method.
    setup = [] if series_r is None else [f"port series resistors: {series_r:g} ohm each"]
    method = getattr(getattr(sample.data, "window", None), "method", None)
    if method in METHODS:
        setup.append(method_comment(method))
    comments = [
        f"zbench: {sample.part} sample {sample.sample}, bias {sample.bias_v:g} V",
        "fixture-removed impedance (ohm)",
        *setup,
    ]
    f = np.asarray(sample.data.f, dtype=float)
    z = np.asarray(sample.data.z, dtype=complex)
    finite = np.isfinite(z)
    if not finite.all():
        # Touchstone has no "missing" value: keep the finite points and say so.
        comments.append(f"{int((~finite).sum())} points with a non-finite impedance left out")
    z_path = run_dir / "corrected" / f"{stem}.s1p"
    paths = (
        [Path(write_touchstone_z(z_path, f[finite], z[finite], comments))] if finite.any() else []
    )
    if sample.corrected_s is not None:
        comments = [comments[0], "calibrated S-parameters, mount not removed", *setup]
        s = np.asarray(sample.corrected_s, dtype=complex)
        paths.append(
            Path(
                write_touchstone_s(
                    run_dir / "corrected" / f"{stem}.s2p", sample.data.f, s, comments=comments
                )
            )
        )
    return paths


def write_exports(run_dir: Path, summary: RunSummary) -> dict[str, list[Path]]:
    """Write every export of a run into ``run_dir`` (see the module notes).

    Returns the paths written by category: ``spice`` (per-sample ``.sub``), ``library``
    (per-part ``.lib``), ``touchstone``, ``summary``, ``lot``, ``bias``. Samples whose fit
    failed get Touchstone files and a summary row, but no subcircuit.
    """
    from bench.core.spice import library_text, on_mount_subckt_text, removed_mount, subckt_text
    from bench.verdicts import shown_fit

    run_dir = Path(run_dir)
    written: dict[str, list[Path]] = {
        key: [] for key in ("spice", "library", "touchstone", "summary", "lot", "bias")
    }
    date = run_date(summary)
    texts: dict[str, list[str]] = {}
    series_r = run_series_r(summary)
    for sample in summary.samples:
        written["touchstone"].extend(_write_touchstone(run_dir, sample, series_r))
        if sample.fit is None:
            continue
        # The comments state the run's shown landmarks (bench.verdicts), as every output does.
        fit = shown_fit(sample, part_kind(summary.part(sample.part)))
        text = subckt_text(
            fit, sample_spice_name(sample), provenance=provenance(summary, sample, date=date)
        )
        path = run_dir / "models" / f"{safe_filename(sample.label)}.sub"
        atomic_write_text(path, text)
        written["spice"].append(path)
        texts.setdefault(sample.part, []).append(text)
        # The same part on its mount (mount included), for a schematic with ideal wiring.
        data = sample.data
        mount = removed_mount(data.f, data.z_measured, data.z, data.inside_window)
        if mount is not None:
            text = on_mount_subckt_text(
                fit,
                sample_spice_name(sample),
                *mount,
                provenance=provenance(summary, sample, date=date),
            )
            path = run_dir / "models" / f"{safe_filename(sample.label)}_on_mount.sub"
            atomic_write_text(path, text)
            written["spice"].append(path)
            texts[sample.part].append(text)
    for spec in summary.parts:
        subckts = texts.get(spec.name)
        if not subckts:
            continue
        typical = typical_model(summary, spec.name)
        if typical is not None:
            origin = provenance(summary, typical.sample, date=date)
            origin["typical of"] = (
                f"{typical.basis} by {main_landmark(spec, typical.sample)[0]}: "
                f"{typical.sample.label}"
                + (f", refitted as {typical.family}" if typical.refitted else "")
            )
            subckts = [
                *subckts,
                subckt_text(
                    shown_fit(typical.sample, part_kind(spec), typical.fit),
                    typical_spice_name(spec.name),
                    provenance=origin,
                ),
            ]
        title = f"{spec.name}: {spec.description or spec.kind}, run {summary.run_id}"
        path = run_dir / "models" / f"{safe_filename(spec.name)}.lib"
        atomic_write_text(path, library_text(subckts, title=title))
        written["library"].append(path)
    for part, points in bias_table(summary).items():
        path = run_dir / "models" / f"{safe_filename(part)}_bias.csv"
        atomic_write_text(path, bias_csv_text(points))
        written["bias"].append(path)
    path = run_dir / "summary.csv"
    atomic_write_text(path, summary_csv_text(summary))
    written["summary"].append(path)
    path = run_dir / "lot_statistics.csv"
    atomic_write_text(path, lot_statistics_csv_text(summary))
    written["lot"].append(path)
    return written
