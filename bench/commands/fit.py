"""``zbench fit FILE...``: fit equivalent circuits to stored measurements (docs/design.md §3).

Each FILE is a Touchstone file or an impedance analyser's CSV (docs/design.md §9):
a 2-port S file is a shunt-through measurement unless ``--method series-through`` says
otherwise or its comments state the method (zbench writes ``measurement method: ...``);
a 1-port S file is a reflection; a Z file or a CSV is the impedance as given (judged
against ``--method``'s window when given, otherwise no window cut and weights from the
file's own scatter). ``--join`` fits all FILEs as set-ups of one part, stitched into one
broadband impedance (inverse-variance weighted; disagreeing overlaps are reported).
With ``--json`` one JSON object per file is printed, one per line (JSON Lines), SI units
throughout::

    {"file": ..., "model": ..., "elements": {...}, "landmarks": {...},
     "quality": {"rms_log_error": ..., "max_abs_log_error": ..., "points_used": N,
                 "points_outside_window": N}, "spice": "path or null"}

``--spice OUT``: with one FILE, OUT is the subcircuit file written (or, if OUT is an
existing folder, ``OUT/<file stem>.sub``). With several FILEs, OUT ending in ``.lib`` is
one library holding every subcircuit; any other OUT is a folder (created if needed)
receiving one ``<file stem>.sub`` per FILE. Subcircuit names are the file stems made
SPICE tokens.

Several files are fitted in parallel, on up to ``--jobs`` processes (default: all
cores), and reported in the order given; a bad file does not stop the others. Exit
code: 0 all fitted; 3 some fit did not meet its quality bound (its result is still
printed and written); 2 some input was bad (message on stderr naming the file and the
fix); 1 internal error. When several apply, 1 wins over 2, and 2 over 3.
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path
from typing import Any

import click

from bench.batch import (  # noqa: F401  (series_r_from_comments: this module's public name)
    FileOutcome,
    FitOptions,
    fit_files,
    impedance_of,
    meets_quality,
    series_r_contradiction,
    series_r_from_comments,
    unnormalised_hint,
    write_output,
)
from bench.errors import FitError, InputError, ZbenchError
from bench.units import LANDMARK_UNITS, format_si


class InternalError(ZbenchError):
    """An unexpected failure while fitting one of several files (exit 1)."""

    exit_code = 1


_UNIT_WORD = re.compile(r"^[kMGTmunpµ]?(?:Hz|ohms?|Ω|F|H|V|dB|dBm|%)$")


def check_stray_units(files: tuple[str, ...]) -> None:
    """Refuse a FILE that is the unit of an unquoted option value (``--fmin 10 MHz``)."""
    for name in files:
        if _UNIT_WORD.match(name) and not Path(name).exists():
            raise InputError(
                f"{name!r} is not a file: it looks like the unit of an option's value",
                hint=f"quote the value with its unit, e.g. --fmin '10 {name}', or join "
                f"them: --fmin 10{name}",
            )


def _jsonable(value: Any) -> Any:
    """Plain JSON values: non-finite numbers become null (JSON has no NaN)."""
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if hasattr(value, "item") and callable(value.item):  # numpy scalars
        return _jsonable(value.item())
    return value


def _element_unit(name: str) -> str:
    if name.startswith("fc"):  # a skin corner: a frequency
        return "Hz"
    return {"R": "Ω", "L": "H", "C": "F"}.get(name[:1].upper(), "")


def _spread_text(value: float, error: float | None) -> str:
    """`` ±x %`` of a value's one-sigma ``error``; `` (not determined)`` beyond ±100 %
    (an element the fit does not need, pinned at a bound, or a landmark resting on one:
    the number itself says nothing more); nothing when the error is not known."""
    from bench.core.fit_select import relative_spread, undetermined

    relative = relative_spread(value, error)
    if relative is None:
        return ""
    return " (not determined)" if undetermined(relative) else f" ±{100 * relative:.2g} %"


def _model_mark_text(value: float, error: float | None) -> str:
    """`` (model ±x %)``: a landmark given by the fitted model, with its one-sigma spread
    within the model (the model's own shortfall, an extrapolation's above all, is not in
    it); `` (model, not determined)`` beyond ±100 %."""
    from bench.core.fit_select import relative_spread, undetermined

    relative = relative_spread(value, error)
    if relative is None:
        return " (model)"
    return (
        " (model, not determined)"
        if undetermined(relative)
        else f" (model ±{100 * relative:.2g} %)"
    )


def _model_text(result: Any) -> str:
    """``two-branch (capacitor)``, or just ``inductor`` when the family names the kind."""
    return result.model if result.model == result.kind else f"{result.model} ({result.kind})"


def _summary_text(outcome: FileOutcome) -> str:
    from bench.core.fit_result import noise_text

    result = outcome.result
    q = result.quality
    lines = [
        f"{outcome.path}: {_model_text(result)}, RMS complex-log error "
        f"{q.rms_log_error:.3g}{noise_text(q)}, largest {q.max_abs_log_error:.3g}; "
        f"{q.points_used} points used, "
        f"{q.points_outside_window} outside the window"
    ]
    sources = dict(getattr(result, "landmark_sources", {}) or {})
    mark_sigma = dict(getattr(result, "landmark_uncertainties", {}) or {})
    marks = ", ".join(
        f"{key} {format_si(float(value), LANDMARK_UNITS.get(key, ''))}"
        + (_model_mark_text(value, mark_sigma.get(key)) if sources.get(key) == "model" else "")
        for key, value in result.landmarks.items()
        if value is not None and math.isfinite(float(value))
    )
    lines.append(f"  landmarks: {marks}")
    sigma = dict(getattr(result, "uncertainties", {}) or {})
    elements = []
    for key, value in result.elements.items():
        # A loss tangent (tan<name>) is a plain number, not a quantity with a prefix.
        shown = f"{value:.4g}" if key.startswith("tan") else format_si(value, _element_unit(key))
        elements.append(f"{key} {shown}{_spread_text(value, sigma.get(key))}")
    lines.append(f"  elements: {', '.join(elements)}")
    for warning in result.warnings:
        lines.append(f"  warning: {warning}")
    if not meets_quality(result):
        lines.append("  warning: the fit does not meet its quality bound")
    if outcome.spice_path is not None:
        lines.append(f"  SPICE: {outcome.spice_path}")
    return "\n".join(lines)


def _parse_option(value: str | None, unit: str, option: str) -> float | None:
    if value is None:
        return None
    from bench import api

    return api._quantity(value, unit, option)


def _spice_targets(files: tuple[str, ...], out: str | None) -> tuple[dict[str, Path], Path | None]:
    """Per-file subcircuit paths, and the library path when all go in one library."""
    if out is None:
        return {}, None
    target = Path(out)
    stems: dict[str, list[str]] = {}
    for name in files:
        stems.setdefault(Path(name).stem, []).append(name)
    clashes = [names for names in stems.values() if len(names) > 1]
    if len(files) > 1 and clashes:
        raise InputError(
            f"--spice {out}: several files share the stem {Path(clashes[0][0]).stem!r} "
            f"({', '.join(clashes[0])}), so their subcircuits would share a name",
            hint="rename the files, or fit them in separate calls",
        )
    if len(files) == 1:
        path = target / f"{Path(files[0]).stem}.sub" if target.is_dir() else target
        return {files[0]: path}, None
    if target.suffix.lower() == ".lib":
        return {}, target
    if target.exists() and not target.is_dir():
        raise InputError(
            f"--spice {out}: is a file, but several inputs need a folder or a .lib library",
            hint="give a folder, or a name ending in .lib for one library",
        )
    return {name: target / f"{Path(name).stem}.sub" for name in files}, None


def subcircuit_names(files: tuple[str, ...]) -> dict[str, str]:
    """A unique SPICE subcircuit name per file: the stem made a SPICE token, with ``_2``,
    ``_3`` … added where two stems give one token (``a-b`` and ``a_b`` both give ``a_b``;
    SPICE names are also case-insensitive)."""
    from bench.exports import spice_name

    taken: set[str] = set()
    out: dict[str, str] = {}
    for name in files:
        base = spice_name(Path(name).stem)
        candidate, k = base, 2
        while candidate.lower() in taken:
            candidate, k = f"{base}_{k}", k + 1
        taken.add(candidate.lower())
        out[name] = candidate
    return out


def _fit_joined(
    files: tuple[str, ...],
    *,
    model: str,
    series_r: float | None,
    mount: Any,
    fmin: float | None,
    fmax: float | None,
    method: str | None,
    spice_out: str | None,
) -> FileOutcome:
    """All ``files`` as set-ups of one part: stitched, then fitted once."""
    from bench import api
    from bench.core.stitch import stitch

    label = "+".join(files)
    outcome = FileOutcome(path=label)
    segments = []
    for name in files:
        data, _ = impedance_of(
            name, outcome, series_r=series_r, mount=mount, fmin=fmin, fmax=fmax, method=method
        )
        segments.append(data)
    joined = stitch(segments, list(files))
    for text in joined.warnings:
        outcome.notes.append(f"warning: {text}")
    outcome.extra = {
        "files": list(files),
        "segments": [
            {
                "file": name,
                "method": seg.window.method,
                "z_min": seg.window.z_min,
                "z_max": seg.window.z_max,
                "f_min": float(seg.f[0]),
                "f_max": float(seg.f[-1]),
                "points_inside_window": int(seg.inside_window.sum()),
            }
            for name, seg in zip(files, segments, strict=True)
        ],
        "disagreements": [
            {
                "f_lo": d.f_lo,
                "f_hi": d.f_hi,
                "size": d.size,
                "labels": list(d.labels),
                "systematic": d.systematic,
            }
            for d in joined.disagreements
        ],
    }
    result = api.fit(joined.data, model=model)
    outcome.result = result
    if spice_out is not None:
        from bench.core.spice import subckt_text

        target = Path(spice_out)
        stem = Path(files[0]).stem
        path = target / f"{stem}.sub" if target.is_dir() else target
        provenance = api.default_provenance(
            ", ".join(files), methods=", ".join(s.window.method for s in segments)
        )
        name = subcircuit_names((files[0],))[files[0]]
        outcome.spice_text = subckt_text(result, name, provenance=provenance)
        outcome.spice_path = write_output(path, outcome.spice_text)
    if not meets_quality(result):
        outcome.exit_code = 3
    return outcome


@click.command("fit")
@click.argument("files", nargs=-1, required=True, metavar="FILE...")
@click.option(
    "--model",
    default="auto",
    show_default=True,
    metavar="NAME",
    help="A model family (series-rlc, lossy-rlc, two-branch, ladder, inductor, bead) or auto "
    "(chooses family and order).",
)
@click.option(
    "--method",
    metavar="NAME",
    help="How the files were measured: shunt-through, series-through or reflection "
    "(default: from the file, see above).",
)
@click.option(
    "--join",
    is_flag=True,
    help="The files are set-ups of one part: stitch them into one impedance and fit once.",
)
@click.option("--series-r", metavar="OHMS", help="Resistor in series at each port (e.g. 499).")
@click.option("--mount", metavar="FILE", help="Shorted-mount measurement to subtract.")
@click.option("--fmin", metavar="HZ", help="Lowest frequency to fit (e.g. 1k).")
@click.option("--fmax", metavar="HZ", help="Highest frequency to fit (e.g. 200 MHz).")
@click.option(
    "--spice",
    "spice_out",
    metavar="OUT",
    help="Write SPICE subcircuits: a file for one FILE; a folder, or a .lib library, for several.",
)
@click.option("--json", "as_json", is_flag=True, help="One JSON object per file (JSON Lines).")
@click.option(
    "--jobs",
    type=click.IntRange(min=1),
    default=None,
    metavar="N",
    help="Fit up to N files at once, one process each (default: all cores).",
)
def command(
    files: tuple[str, ...],
    model: str,
    method: str | None,
    join: bool,
    series_r: str | None,
    mount: str | None,
    fmin: str | None,
    fmax: str | None,
    spice_out: str | None,
    as_json: bool,
    jobs: int | None,
) -> None:
    """Fit equivalent-circuit models to stored measurements.

    FILE is a Touchstone file (2-port S: shunt-through unless --method or its comments
    say otherwise; 1-port S: reflection; Z: the impedance as given) or an impedance
    analyser's CSV. Values take SI prefixes (499, 2k, 100 MHz).
    """
    from bench import api

    check_stray_units(files)
    model = model.strip().lower()
    api.check_model_name(model)
    if method is not None:
        from bench.core.window import check_method

        method = check_method(method)
    r = _parse_option(series_r, "ohm", "--series-r")
    if r is not None and r < 0:
        raise InputError(
            f"--series-r {series_r}: a resistance cannot be negative", hint="give e.g. 0 or 499"
        )
    lo = _parse_option(fmin, "Hz", "--fmin")
    hi = _parse_option(fmax, "Hz", "--fmax")
    if lo is not None and hi is not None and lo >= hi:
        raise InputError(
            f"--fmin {fmin} is not below --fmax {fmax}", hint="swap or widen the limits"
        )
    mount_data = None
    if mount is not None:
        # Loaded once for all files; checked against each file's grid as it is used.
        mount_data = api.load(mount, series_r=r or 0.0, method=method)
    if join:
        if len(files) < 2:
            raise InputError("--join needs two or more files of one part", hint="give them all")
        outcome = _fit_joined(
            files,
            model=model,
            series_r=r,
            mount=mount_data,
            fmin=lo,
            fmax=hi,
            method=method,
            spice_out=spice_out,
        )
        _emit(outcome, as_json=as_json)
        _finish([outcome], None)
        return
    per_file, library = _spice_targets(files, spice_out)
    options = FitOptions(
        model=model,
        series_r=r,
        mount=mount_data,
        fmin=lo,
        fmax=hi,
        method=method,
        want_spice=spice_out is not None,
        spice_paths=per_file,
        subckt_names=subcircuit_names(files) if spice_out is not None else {},
    )
    outcomes: list[FileOutcome] = []
    # Files are fitted on up to --jobs processes; results come back in input order.
    for outcome in fit_files(files, options, jobs):
        if library is not None and outcome.spice_text:
            outcome.spice_path = library  # written once every file is fitted
        outcomes.append(outcome)
        _emit(outcome, as_json=as_json)
    if library is not None:
        texts = [o.spice_text for o in outcomes if o.spice_text]
        if texts:
            from bench.core.spice import library_text

            write_output(library, library_text(texts, title=f"zbench fit of {len(texts)} files"))
            if not as_json:
                click.echo(f"SPICE library: {library}")
    _finish(outcomes, library)


def _emit(outcome: FileOutcome, *, as_json: bool) -> None:
    for note in outcome.notes:
        click.echo(f"zbench: {note}", err=True)
    if outcome.error is not None:
        click.echo(f"zbench: {outcome.error}", err=True)
        return
    if outcome.note is not None:
        click.echo(f"zbench: {outcome.note}", err=True)
    if as_json:
        record = {"file": outcome.path, **outcome.extra, **outcome.result.to_json()}
        record["spice"] = str(outcome.spice_path) if outcome.spice_path is not None else None
        click.echo(json.dumps(_jsonable(record), allow_nan=False))
    else:
        click.echo(_summary_text(outcome))


def _finish(outcomes: list[FileOutcome], library: Path | None) -> None:
    codes = [o.exit_code for o in outcomes]
    failed = [o for o in outcomes if o.exit_code in (1, 2)]
    if 1 in codes:
        raise InternalError(
            f"{codes.count(1)} of {len(outcomes)} files failed with an internal error; "
            "please report it with the file"
        )
    if 2 in codes:
        raise InputError(f"{len(failed)} of {len(outcomes)} files could not be fitted (see above)")
    if 3 in codes:
        below = [o.path for o in outcomes if o.exit_code == 3]
        written = library is not None or any(o.spice_path is not None for o in outcomes)
        tail = "results were still printed and written" if written else "results were printed"
        raise FitError(
            f"{len(below)} of {len(outcomes)} fits did not meet their quality bound "
            f"({', '.join(below)}); {tail}"
        )
