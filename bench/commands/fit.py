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

import functools
import json
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import click
import numpy as np

from bench.errors import FitError, InputError, ZbenchError
from bench.files import atomic_write_text
from bench.parallel import ordered_map
from bench.units import LANDMARK_UNITS, format_si


class InternalError(ZbenchError):
    """An unexpected failure while fitting one of several files (exit 1)."""

    exit_code = 1


@dataclass
class _Outcome:
    path: str
    result: Any = None
    spice_text: str | None = None
    spice_path: Path | None = None
    error: str | None = None
    exit_code: int = 0
    note: str | None = None
    notes: list[str] = field(default_factory=list)
    extra: dict[str, Any] = field(default_factory=dict)


_METHOD_NOTES = {
    "default": "shunt-through (a two-port S file; give --method series-through if the part "
    "sat in series)",
    "comments": "{method}, as its comments state (give --method to override)",
    "file": "reflection (a one-port S file)",
}


def _method_note(name: str, measurement: Any) -> str | None:
    """What the reader decided about the method, for a person; None when told."""
    source = measurement.method_source
    if measurement.kind == "impedance":
        if measurement.method is None:
            return (
                f"{name}: impedance taken as given: no window cut, each point weighted by "
                "the file's own scatter (give --method to judge it against a set-up's window)"
            )
        return None
    if source in _METHOD_NOTES:
        return f"{name}: " + _METHOD_NOTES[source].format(method=measurement.method)
    return None


#: How a Touchstone comment states the port series resistors: zbench's corrected files
#: ("port series resistors: 499 ohm each") and the examples' wording.
_SERIES_R_COMMENTS = (
    re.compile(r"port series resistors?\s*[:=]\s*([0-9.]+(?:[eE][+-]?\d+)?)\s*(?:ohms?|Ω)", re.I),
    re.compile(r"([0-9.]+(?:[eE][+-]?\d+)?)\s*(?:ohms?|Ω)\s+in series at each port", re.I),
)


def series_r_from_comments(comments: str) -> float | None:
    """The port series resistance (Ω) a file's comments state, or None."""
    for pattern in _SERIES_R_COMMENTS:
        match = pattern.search(comments or "")
        if match:
            try:
                return float(match.group(1))
            except ValueError:
                return None
    return None


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


_NO_RESISTORS = re.compile(r"\bno (?:port )?(?:series )?resistors?\b", re.I)


def series_r_contradiction(comments: str, series_r: float) -> str | None:
    """Why ``--series-r`` disagrees with the resistors a file's comments state, or None."""
    stated = series_r_from_comments(comments)
    if stated is None and _NO_RESISTORS.search(comments or ""):
        stated = 0.0
    if stated is None or math.isclose(stated, series_r, rel_tol=1e-6, abs_tol=1e-9):
        return None
    return (
        f"--series-r {series_r:g} ohm contradicts the file's comments, which state "
        f"{stated:g} ohm at each port; the impedance scales with Z0 + Rs, so check which "
        "is right"
    )


def unnormalised_hint(f: Any, s: Any) -> str | None:
    """A hint when a two-port file looks never normalised to the through.

    Normalised shunt-through data obey 1/S21 = 1 + Z0/(2Z), so Re(1/S21) = 1 + Z0·R/(2|Z|²),
    which is 1 wherever the part's impedance is high and mostly reactive (a capacitor at
    the low end; derived from the shunt-through relation, docs/references.md §1). Data
    scaled by k (cable loss, an uncorrected analyser) read Re(1/S21) = 1/k there. The hint
    is given when the high-impedance points at the lowest frequencies read k < 0.93
    (common practice, no source).
    """
    f = np.asarray(f, dtype=float)
    s21 = np.asarray(s, dtype=complex)[:, 1, 0]
    order = np.argsort(f)
    low = s21[order[: max(5, f.size // 20)]]
    low = low[np.isfinite(low) & (np.abs(low) > 0.3)]
    if low.size < 3:
        return None
    k = 1.0 / float(np.median((1.0 / low).real))
    if 0.3 < k < 0.93:
        return (
            f"|S21| reads about {k:.2f} of what a shunt-through of a high impedance gives at "
            "the lowest frequencies: was the file normalised to the through (or "
            "calibrated)? Un-normalised data read the capacitance high"
        )
    return None


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


def _meets_quality(result: Any) -> bool:
    return bool(getattr(result, "meets_quality", True))


def _element_unit(name: str) -> str:
    if name.startswith("fc"):  # a skin corner: a frequency
        return "Hz"
    return {"R": "Ω", "L": "H", "C": "F"}.get(name[:1].upper(), "")


def _model_text(result: Any) -> str:
    """``two-branch (capacitor)``, or just ``inductor`` when the family names the kind."""
    return result.model if result.model == result.kind else f"{result.model} ({result.kind})"


def _summary_text(outcome: _Outcome) -> str:
    from bench.core.fit_result import noise_text

    result = outcome.result
    q = result.quality
    lines = [
        f"{outcome.path}: {_model_text(result)}, RMS complex-log error "
        f"{q.rms_log_error:.3g}{noise_text(q)}, largest {q.max_abs_log_error:.3g}; "
        f"{q.points_used} points used, "
        f"{q.points_outside_window} outside the window"
    ]
    marks = ", ".join(
        f"{key} {format_si(float(value), LANDMARK_UNITS.get(key, ''))}"
        for key, value in result.landmarks.items()
        if value is not None and math.isfinite(float(value))
    )
    lines.append(f"  landmarks: {marks}")
    sigma = dict(getattr(result, "uncertainties", {}) or {})
    elements = []
    for key, value in result.elements.items():
        # A loss tangent (tan<name>) is a plain number, not a quantity with a prefix.
        shown = f"{value:.4g}" if key.startswith("tan") else format_si(value, _element_unit(key))
        text = f"{key} {shown}"
        error = sigma.get(key)
        if error is not None and value and math.isfinite(error):
            relative = error / value
            # Beyond ±100 % the element is not determined by the data (a branch the
            # fit does not need, pinned at a bound); the number itself says nothing more.
            text += " (not determined)" if relative > 1 else f" ±{100 * relative:.2g} %"
        elements.append(text)
    lines.append(f"  elements: {', '.join(elements)}")
    for warning in result.warnings:
        lines.append(f"  warning: {warning}")
    if not _meets_quality(result):
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


def _write_output(path: Path, text: str, option: str = "--spice") -> Path:
    """Write ``text`` atomically; a full disk or a read-only folder is bad input, not a crash."""
    try:
        return atomic_write_text(path, text)
    except OSError as exc:
        raise InputError(
            f"cannot write {path}: {exc.strerror or exc}",
            hint=f"free some space or choose a writable place for {option}",
        ) from exc


def _fit_one(
    name: str,
    *,
    model: str,
    series_r: float | None,
    mount: Any,
    fmin: float | None,
    fmax: float | None,
    spice_path: Path | None,
    want_spice: bool,
    method: str | None = None,
    subckt: str | None = None,
    outcome: _Outcome | None = None,
) -> _Outcome:
    from bench import api  # loads the numeric core: not needed for --help

    outcome = outcome or _Outcome(path=name)
    data, stated = _impedance_of(
        name, outcome, series_r=series_r, mount=mount, fmin=fmin, fmax=fmax, method=method
    )
    result = api.fit(data, model=model)
    outcome.result = result
    if want_spice:
        from bench.core.spice import subckt_text
        from bench.exports import spice_name

        provenance = api.default_provenance(
            name,
            method=data.window.method,
            series_r=f"{stated or 0:g} ohm",
            # The mount arrives loaded; its file name is the provenance, not its data.
            mount=str(getattr(mount, "path", mount)) if mount is not None else "none",
            model=result.model,
        )
        outcome.spice_text = subckt_text(
            result, subckt or spice_name(Path(name).stem), provenance=provenance
        )
        if spice_path is not None:
            outcome.spice_path = _write_output(spice_path, outcome.spice_text)
    if not _meets_quality(result):
        outcome.exit_code = 3
    return outcome


def _impedance_of(
    name: str,
    outcome: _Outcome,
    *,
    series_r: float | None,
    mount: Any,
    fmin: float | None,
    fmax: float | None,
    method: str | None,
) -> tuple[Any, float | None]:
    """One file's impedance data (notes added to ``outcome``), and the series R used."""
    from bench import api

    measurement = api.load(name, series_r=series_r or 0.0, method=method)
    outcome.notes.extend(f"{name}: warning: {text}" for text in measurement.warnings)
    note = _method_note(name, measurement)
    if note:
        outcome.notes.append(note)
    if series_r is None and measurement.kind == "s2p":
        # Without --series-r, the set-up a file states in its comments (zbench writes it
        # into every corrected file); fitting a 499 Ω measurement as a plain 50 Ω one
        # would scale every impedance by about 11.
        stated = series_r_from_comments(measurement.comments)
        if stated is not None:
            series_r = stated
            outcome.notes.append(
                f"{name}: port series resistors {format_si(stated, 'Ω')} each, as its "
                "comments state (give --series-r to override)"
            )
    elif series_r is not None and measurement.kind == "s2p":
        contradiction = series_r_contradiction(measurement.comments, series_r)
        if contradiction:
            outcome.notes.append(f"{name}: warning: {contradiction}")
    if measurement.kind == "s2p" and measurement.s is not None:
        hint = unnormalised_hint(measurement.f, measurement.s)
        if hint:
            outcome.notes.append(f"{name}: hint: {hint}")
    if series_r and measurement.kind == "impedance" and measurement.method is None:
        outcome.notes.append(
            f"{name}: --series-r sets a window only with --method; this impedance is taken as given"
        )
    data = api.impedance(measurement, series_r=series_r, mount=mount, fmin=fmin, fmax=fmax)
    return data, series_r


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
) -> _Outcome:
    """All ``files`` as set-ups of one part: stitched, then fitted once."""
    from bench import api
    from bench.core.stitch import stitch

    label = "+".join(files)
    outcome = _Outcome(path=label)
    segments = []
    for name in files:
        data, _ = _impedance_of(
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
            {"f_lo": d.f_lo, "f_hi": d.f_hi, "size": d.size, "labels": list(d.labels)}
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
        outcome.spice_path = _write_output(path, outcome.spice_text)
    if not _meets_quality(result):
        outcome.exit_code = 3
    return outcome


def _fit_guarded(
    name: str, *, spice_paths: dict[str, Path], subckt_names: dict[str, str], **options: Any
) -> _Outcome:
    """:func:`_fit_one` with every error turned into the file's outcome (a worker's task).

    Notes made before a failure (a file read with default units) still reach the user.
    """
    started = _Outcome(path=name)
    try:
        return _fit_one(
            name,
            outcome=started,
            spice_path=spice_paths.get(name),
            subckt=subckt_names.get(name),
            **options,
        )
    except ZbenchError as exc:
        text = str(exc)
        if isinstance(exc, FitError):
            text = f"{name}: no fit: {text}"
        elif name not in text:
            text = f"{name}: {text}"
        return _Outcome(path=name, error=text, exit_code=exc.exit_code, notes=started.notes)
    except Exception as exc:  # one bad file must not stop an archive re-fit
        return _Outcome(
            path=name,
            error=f"{name}: internal error ({type(exc).__name__}: {exc})",
            exit_code=1,
            notes=started.notes,
        )


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
    names = subcircuit_names(files)
    outcomes: list[_Outcome] = []
    task = functools.partial(
        _fit_guarded,
        model=model,
        series_r=r,
        mount=mount_data,
        fmin=lo,
        fmax=hi,
        spice_paths=per_file,
        subckt_names=names,
        want_spice=spice_out is not None,
        method=method,
    )
    # Files are fitted on up to --jobs processes; results come back in input order.
    for outcome in ordered_map(task, files, jobs):
        if library is not None and outcome.spice_text:
            outcome.spice_path = library  # written once every file is fitted
        outcomes.append(outcome)
        _emit(outcome, as_json=as_json)
    if library is not None:
        texts = [o.spice_text for o in outcomes if o.spice_text]
        if texts:
            from bench.core.spice import library_text

            _write_output(library, library_text(texts, title=f"zbench fit of {len(texts)} files"))
            if not as_json:
                click.echo(f"SPICE library: {library}")
    _finish(outcomes, library)


def _emit(outcome: _Outcome, *, as_json: bool) -> None:
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


def _finish(outcomes: list[_Outcome], library: Path | None) -> None:
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
