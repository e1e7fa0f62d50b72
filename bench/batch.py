"""Several measurement files fitted on every core, in input order: ``zbench fit FILE...``.

:func:`fit_files` is the batch behind the command once it has read its options (and the
same code the speed benchmark times in-process): each file is read, its impedance made
and fitted by :func:`fit_file` in a worker process (:func:`bench.parallel.ordered_map`),
and the outcomes come back in the order of the files, as soon as each one and those
before it are done. A bad file becomes its outcome's message and exit code; it never stops
the others. The options shared by every file (:class:`FitOptions`, which may hold a loaded
mount short) reach each worker once, not with every file, and an outcome carries the
fit's numbers only (no arrays of the measurement)::

    from bench.batch import FitOptions, fit_files

    for outcome in fit_files(["a.s2p", "b.s2p"], FitOptions(model="auto"), jobs=None):
        print(outcome.path, outcome.error or outcome.result.model)

A program calling it should ask for one BLAS thread before numpy loads
(``OPENBLAS_NUM_THREADS=1``, as :mod:`bench.cli` does): the workers use the cores, and
BLAS threads would only spin on a fit's small matrices.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from bench.errors import FitError, InputError, ZbenchError
from bench.files import atomic_write_text
from bench.parallel import ordered_map
from bench.units import format_si


@dataclass
class FileOutcome:
    """One file's result (``result``, a ``FitResult``) or its error, with the notes made."""

    path: str
    result: Any = None
    spice_text: str | None = None
    spice_path: Path | None = None
    error: str | None = None
    exit_code: int = 0
    note: str | None = None
    notes: list[str] = field(default_factory=list)
    extra: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class FitOptions:
    """What every file of a batch is fitted with (the command's options, already parsed).

    ``series_r`` None takes the resistors a file's comments state; ``mount`` is a loaded
    shorted-mount measurement (or None); ``spice_paths`` and ``subckt_names`` map a file to
    its subcircuit file and name when ``want_spice``."""

    model: str = "auto"
    series_r: float | None = None
    mount: Any = None
    fmin: float | None = None
    fmax: float | None = None
    method: str | None = None
    want_spice: bool = False
    spice_paths: Mapping[str, Path] = field(default_factory=dict)
    subckt_names: Mapping[str, str] = field(default_factory=dict)


def fit_files(
    files: Iterable[str], options: FitOptions | None = None, jobs: int | None = None
) -> Iterator[FileOutcome]:
    """Fit every file on up to ``jobs`` processes (all cores when None); outcomes in order."""
    names = [str(name) for name in files]
    return ordered_map(fit_file, names, jobs, shared=options or FitOptions())


def fit_file(name: str, options: FitOptions | None = None) -> FileOutcome:
    """One file read and fitted, every error turned into its outcome (a worker's task).

    Notes made before a failure (a file read with default units) still reach the user.
    """
    options = options or FitOptions()
    started = FileOutcome(path=name)
    try:
        return _fit_one(name, options, started)
    except ZbenchError as exc:
        text = str(exc)
        if isinstance(exc, FitError):
            text = f"{name}: no fit: {text}"
        elif name not in text:
            text = f"{name}: {text}"
        return FileOutcome(path=name, error=text, exit_code=exc.exit_code, notes=started.notes)
    except Exception as exc:  # one bad file must not stop an archive re-fit
        return FileOutcome(
            path=name,
            error=f"{name}: internal error ({type(exc).__name__}: {exc})",
            exit_code=1,
            notes=started.notes,
        )


def _fit_one(name: str, options: FitOptions, outcome: FileOutcome) -> FileOutcome:
    from bench import api  # loads the numeric core: not needed for --help

    mount = options.mount
    data, stated = impedance_of(
        name,
        outcome,
        series_r=options.series_r,
        mount=mount,
        fmin=options.fmin,
        fmax=options.fmax,
        method=options.method,
    )
    result = api.fit(data, model=options.model)
    outcome.result = result
    if options.want_spice:
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
        subckt = options.subckt_names.get(name) or spice_name(Path(name).stem)
        outcome.spice_text = subckt_text(result, subckt, provenance=provenance)
        spice_path = options.spice_paths.get(name)
        if spice_path is not None:
            outcome.spice_path = write_output(spice_path, outcome.spice_text)
    if not meets_quality(result):
        outcome.exit_code = 3
    return outcome


def write_output(path: Path, text: str, option: str = "--spice") -> Path:
    """Write ``text`` atomically; a full disk or a read-only folder is bad input, not a crash."""
    try:
        return atomic_write_text(path, text)
    except OSError as exc:
        raise InputError(
            f"cannot write {path}: {exc.strerror or exc}",
            hint=f"free some space or choose a writable place for {option}",
        ) from exc


def meets_quality(result: Any) -> bool:
    return bool(getattr(result, "meets_quality", True))


_METHOD_NOTES = {
    "default": "shunt-through (a two-port S file; give --method series-through if the part "
    "sat in series)",
    "comments": "{method}, as its comments state (give --method to override)",
    "file": "reflection (a one-port S file)",
}


def method_note(name: str, measurement: Any) -> str | None:
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
    import numpy as np

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


def impedance_of(
    name: str,
    outcome: FileOutcome,
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
    note = method_note(name, measurement)
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
