"""Reading stored measurements and writing Touchstone S and Z files (scikit-rf).

A measurement zbench can fit (docs/design.md §9) is a Touchstone file:

* a 2-port S file of a shunt-through or series-through measurement (the method from
  the caller, else from the file's comments, else shunt-through);
* a 1-port S file: a reflection (``S11``);
* a 1-port Z (or version-2 Y) file: the part's impedance as given;

or an impedance analyser's CSV (:mod:`bench.impedance_csv`). :func:`scan_touchstone`
(:mod:`bench.touchstone_scan`, re-exported here) reads a file once, within a size bound,
converting all numbers in one numpy pass, and refuses what a lenient reader would misread
or accept silently: rows that do not match the port count of the extension, an option
line with a reference impedance that is not positive, a version-2 ``[Number of
Frequencies]`` that disagrees with the rows, a version-2 two-port file without
``[Two-Port Data Order]``, text where a number belongs. :func:`network_matrix` turns the
rows into matrices (scikit-rf converts Z and Y to S; a test checks the result against
scikit-rf's own reader). A file without an option line is read with the Touchstone
defaults (``GHz S MA R 50``) and a warning saying so. Every bad input raises
:class:`bench.errors.InputError` naming the file and the fix. Files are written with
scikit-rf through :func:`bench.files.atomic_write_text`, so a reader never sees half a
file.

Notes on the format (docs/references.md §6): in version 1.x files Z data is normalised to
the option line's R; version-1 Y, G and H files are read wrongly by scikit-rf 2.2, so
they are refused here (as are G and H in version 2); R is written as an integer in 1.x
files.
"""

from __future__ import annotations

import math
import re
import warnings
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from bench.core.conversions import reflection_z, series_through_z, shunt_through_z
from bench.errors import InputError
from bench.files import atomic_write_text
from bench.touchstone_scan import (
    MAX_FILE_BYTES,
    MAX_POINTS,
    SNP_EXTENSION,
    Scan,
    check_regular_file,
    network_matrix,
    scan_touchstone,
)

if TYPE_CHECKING:
    import skrf

__all__ = [
    "MAX_ABS_S",
    "MAX_ABS_Z",
    "MAX_FILE_BYTES",
    "MAX_POINTS",
    "MIN_POINTS",
    "TWO_PORT_METHODS",
    "Measurement",
    "Scan",
    "check_method_for_ports",
    "check_regular_file",
    "interpolate_to",
    "load_measurement",
    "method_comment",
    "method_from_comments",
    "network_matrix",
    "scan_touchstone",
    "write_touchstone_s",
    "write_touchstone_z",
]

#: Fewest frequency points a fit or a mount removal can work with.
MIN_POINTS = 10
#: Largest |S| accepted: a passive part's corrected S-parameters stay near or below 1;
#: raw, uncorrected ratios may exceed it a little, never by orders of magnitude.
MAX_ABS_S = 100.0
#: Largest |Z| (Ω) accepted in an impedance file.
MAX_ABS_Z = 1e12
#: Highest frequency (Hz) accepted: no network analyser measures near it, so a file that
#: reaches it has the wrong unit (values in Hz under an option line saying GHz, say).
MAX_FREQUENCY = 1e13
#: A sweep that ends below this (Hz) is noted: it is likely a unit slip the other way
#: (values in GHz or MHz read as Hz); a power-delivery part is swept well above it.
LOWEST_SWEEP_TOP = 100.0
#: The measuring methods a 2-port S file may hold.
TWO_PORT_METHODS = ("shunt-through", "series-through")
_METHOD_COMMENT = re.compile(
    r"measur\w*\s+method\s*[:=]\s*(shunt-through|series-through|reflection)", re.I
)


@dataclass(frozen=True, eq=False)
class Measurement:
    """A stored measurement ready for the core.

    ``kind`` is ``"s2p"`` (2-port S, ``s`` of shape (nf, 2, 2)), ``"s1p"`` (1-port S, a
    reflection, ``s`` of shape (nf, 1, 1)) or ``"impedance"`` (a 1-port Z file or an
    impedance CSV, ``s`` None). ``method`` is the measuring method (``"shunt-through"``,
    ``"series-through"``, ``"reflection"``) or None for an impedance taken as given, and
    ``method_source`` where it came from (``"option"``, ``"comments"``, ``"file"``,
    ``"default"``). ``z`` (Ω, shape (nf,)) is the part's impedance by that method (with
    ``series_r`` for the two-port ones). ``f`` in Hz, strictly increasing; ``z0`` the
    file's reference impedance (Ω); ``warnings`` what the reader wants a person to know.
    """

    path: Path
    f: NDArray[np.float64]
    kind: Literal["s2p", "s1p", "impedance"]
    s: NDArray[np.complex128] | None
    z: NDArray[np.complex128]
    z0: float
    series_r: float = 0.0
    comments: str = ""
    method: str | None = None
    method_source: str = "default"
    warnings: tuple[str, ...] = field(default_factory=tuple)

    @property
    def s21(self) -> NDArray[np.complex128] | None:
        """S21 of a 2-port measurement, None otherwise."""
        return None if self.s is None or self.s.shape[1] < 2 else self.s[:, 1, 0]


def method_comment(method: str) -> str:
    """The comment line zbench writes so a reader infers the method: ``measurement method: X``."""
    return f"measurement method: {method}"


def method_from_comments(comments: str) -> str | None:
    """The measuring method a file's comments state (``measurement method: X``), or None."""
    match = _METHOD_COMMENT.search(comments or "")
    return match.group(1).lower() if match else None


# Frequencies within this fraction of each other are one frequency written twice (the
# shared end of two segments of a segmented sweep, with rounding in the export).
REPEAT_TOLERANCE = 1e-12


def sweep_in_order(
    f: NDArray[np.float64], values: NDArray[Any]
) -> tuple[NDArray[np.float64], NDArray[Any], str | None]:
    """``(f, values, note)`` with each frequency that comes twice or more in a row (a
    segmented sweep repeats the frequency where one segment ends and the next begins)
    read once, as the mean of its readings (``values`` has one row per frequency);
    ``note`` says so, None when nothing was repeated. A sweep that runs downward
    throughout (from its top frequency, as an analyser may sweep and export) is turned
    round first, and the note says that too; frequencies otherwise out of order are left
    for :func:`_check_grid` to refuse."""
    f = np.asarray(f, dtype=float)
    if f.size < 2:
        return f, values, None
    turned = None
    steps = np.diff(f)
    repeat = np.abs(steps) <= REPEAT_TOLERANCE * np.abs(f[1:])
    if np.all(repeat | (steps < 0)) and not np.all(repeat):
        f, values = f[::-1].copy(), np.asarray(values)[::-1].copy()
        repeat = repeat[::-1]
        turned = "the sweep runs from its top frequency down: read in increasing order"
    if not np.any(repeat):
        return f, values, turned
    starts = np.flatnonzero(np.concatenate([[True], ~repeat]))
    counts = np.diff(np.append(starts, f.size))
    summed = np.add.reduceat(np.asarray(values), starts, axis=0)
    shape = (-1,) + (1,) * (summed.ndim - 1)
    merged = summed / counts.reshape(shape)
    n = int(np.count_nonzero(repeat))
    note = (
        f"{n} repeated frequenc{'y' if n == 1 else 'ies'} (a segmented sweep's shared "
        "segment ends, say) read once, as the mean of the readings there"
    )
    return f[starts], merged, note if turned is None else f"{turned}; {note}"


def _check_grid(name: str, f: NDArray[np.float64]) -> None:
    if f.size < MIN_POINTS:
        raise InputError(
            f"has {f.size} frequency points; at least {MIN_POINTS} are needed",
            path=name,
            hint="measure or export more points (a log sweep of 201 points or more is usual)",
        )
    top = float(np.max(f))
    if not top <= MAX_FREQUENCY:
        raise InputError(
            f"has frequencies up to {top:.3g} Hz, far beyond any network analyser: the "
            "frequency unit does not match the values",
            path=name,
            hint="state the unit the values are in (Touchstone: '# Hz', '# kHz', '# MHz' or "
            "'# GHz' on the option line; CSV: the unit in the frequency column's header)",
        )
    steps = np.diff(f)
    if not np.all(steps > 0):
        bad = int(np.argmax(steps <= 0)) + 1
        raise InputError(
            f"frequencies are not strictly increasing (point {bad + 1}: {f[bad]:g} Hz "
            f"after {f[bad - 1]:g} Hz)",
            path=name,
            hint="sort the data by frequency and remove repeated frequencies",
        )


def low_sweep_note(f: NDArray[np.float64]) -> str | None:
    """A note when the whole sweep lies below :data:`LOWEST_SWEEP_TOP` (a unit slip is
    likely), None otherwise."""
    if f.size and float(f[-1]) < LOWEST_SWEEP_TOP:
        return (
            f"the sweep ends at {float(f[-1]):.3g} Hz; if the values are in kHz, MHz or GHz, "
            "state that unit (Touchstone option line, CSV header): read as Hz they are "
            "another measurement"
        )
    return None


def check_method_for_ports(name: str, ports: int, method: str | None) -> None:
    """Refuse a method the file cannot hold (a two-port method on a one-port file)."""
    if method is None:
        return
    if ports == 1 and method != "reflection":
        raise InputError(
            f"is a one-port file, so it holds a reflection, not a {method} measurement",
            path=name,
            hint="give --method reflection (or leave it out), or the two-port .s2p file",
        )


def load_measurement(
    path: str | Path, *, series_r: float = 0.0, method: str | None = None
) -> Measurement:
    """Load a stored measurement for fitting (see the module doc for what is read how).

    ``series_r`` (Ω, >= 0) is the series resistor at each port of a 2-port measurement,
    used to compute Z from its through-normalised S21. ``method`` (``"shunt-through"``,
    ``"series-through"``, ``"reflection"`` or None) says how the file was measured; when
    None it is inferred (one-port S: reflection; two-port S: the comments' statement,
    else shunt-through; Z file: none, the impedance is taken as given). A ``.csv`` is
    read by :func:`bench.impedance_csv.load_impedance_csv`. Raises :class:`InputError`
    for everything a person must fix, naming the file and the fix.
    """
    p = Path(path)
    name = str(p)
    if not (math.isfinite(series_r) and series_r >= 0):
        raise InputError(
            f"series resistance {series_r!r} is not a resistance >= 0 ohms",
            path=name,
            hint="give --series-r as the resistor at each port, e.g. 0 or 499",
        )
    if p.suffix.lower() in (".csv", ".tsv"):
        from bench.impedance_csv import load_impedance_csv

        check_regular_file(p)
        return load_impedance_csv(p, method=method)
    scan = scan_touchstone(p)
    notes: list[str] = []
    if not scan.has_option_line:
        notes.append(
            "has no option line ('# ...'), so it is read with the Touchstone defaults: "
            "frequencies in GHz, S-parameters as magnitude and angle, R 50"
        )
    ports, parameter, version = scan.ports, scan.parameter, scan.version
    if ports >= 3 or ports < 1:
        raise InputError(
            f"has {ports} ports; zbench reads a 2-port (shunt- or series-through) "
            f"measurement or a 1-port reflection or impedance file",
            path=name,
            hint="export ports 1 and 2 of the measurement as a .s2p file",
        )
    if parameter in ("g", "h") or (parameter == "y" and version.startswith("1")):
        raise InputError(
            f"holds version-{version[0]} {parameter.upper()} data, which zbench does not read "
            "(scikit-rf scales version-1 Y by R)",
            path=name,
            hint="export the measurement as S-parameters ('# Hz S RI R 50') or Z, or as "
            "Touchstone 2.0",
        )
    if scan.all_zero:
        raise InputError(
            "every value in the file is zero: there is no measurement in it, and nothing "
            "was fitted or written",
            path=name,
            hint="re-export the measurement; check that the analyser's trace held data",
        )
    limit = MAX_ABS_Z if parameter == "z" else MAX_ABS_S
    if scan.data_format != "db" and not scan.largest <= limit:
        raise InputError(
            f"holds values up to {scan.largest:.3g}, which no measurement of a passive part "
            f"gives ({'|Z|' if parameter == 'z' else '|S|'} should stay below {limit:g})",
            path=name,
            hint="check the export: the data format on the option line (RI, MA, DB) and "
            "the column order",
        )
    matrix, z0 = network_matrix(scan)
    f, matrix, ordered = sweep_in_order(scan.frequencies, matrix)
    if ordered:
        notes.append(ordered)
    _check_grid(name, f)
    low = low_sweep_note(f)
    if low:
        notes.append(low)
    if not np.all(np.isfinite(matrix)):
        rows = np.unique(np.nonzero(~np.isfinite(matrix.reshape(f.size, -1)))[0])
        listed = ", ".join(f"{f[i]:g} Hz" for i in rows[:3])
        raise InputError(
            f"has no number (NaN, infinity, or SCPI's 9.91E37 that an analyser writes for a "
            f"point it could not measure) at {rows.size} "
            f"frequenc{'y' if rows.size == 1 else 'ies'} ({listed}"
            f"{', ...' if rows.size > 3 else ''})",
            path=name,
            hint="measure again (an overloaded receiver is the usual cause: lower the "
            "source power), or drop those points from the file",
        )
    comments = scan.comments
    common = {"path": p, "f": f, "z0": z0, "comments": comments, "warnings": tuple(notes)}
    if ports == 1 and parameter in ("z", "y"):
        with np.errstate(divide="ignore", invalid="ignore"):
            z = matrix[:, 0, 0] if parameter == "z" else 1.0 / matrix[:, 0, 0]
        _check_finite(name, z, "impedance")
        return Measurement(
            kind="impedance",
            s=None,
            z=z,
            method=method,
            method_source="option" if method else "file",
            **common,
        )
    if parameter in ("z", "y"):
        import skrf  # only a Z or Y file of two ports needs the conversion

        s = (skrf.network.z2s if parameter == "z" else skrf.network.y2s)(matrix, z0)
    else:
        s = matrix
    stated = method_from_comments(comments)
    if ports == 1:
        check_method_for_ports(name, 1, method)
        z = reflection_z(s[:, 0, 0], z0)
        _check_finite(name, z, "reflection")
        source = "option" if method else "file"
        return Measurement(
            kind="s1p", s=s, z=z, method="reflection", method_source=source, **common
        )
    chosen, source = method, "option"
    if chosen is None:
        chosen, source = (stated, "comments") if stated else ("shunt-through", "default")
    if chosen == "reflection":
        if series_r:
            raise InputError(
                "port series resistors do not apply to a reflection",
                path=name,
                hint="leave out --series-r, or give the two-port method",
            )
        z = reflection_z(s[:, 0, 0], z0)
    elif chosen == "series-through":
        z = series_through_z(s[:, 1, 0], z0, series_r)
    else:
        z = shunt_through_z(s[:, 1, 0], z0, series_r)
    _check_finite(name, z, chosen)
    return Measurement(
        kind="s2p",
        s=s,
        z=z,
        series_r=float(series_r),
        method=chosen,
        method_source=source,
        **common,
    )


_SINGULAR = {
    "shunt-through": ("S21 = 1", "a shunt-through measurement normalised to the through"),
    "series-through": ("S21 = 0", "a series-through measurement with signal through the part"),
    "reflection": ("S11 = 1", "a reflection measurement of a part, not of an open port"),
    "impedance": ("an infinite impedance", "an impedance file"),
}


def _check_finite(name: str, z: NDArray[np.complex128], method: str) -> None:
    bad = ~np.isfinite(z)
    if bad.any():
        where, what = _SINGULAR[method]
        raise InputError(
            f"has {where} at {int(bad.sum())} frequencies, where the part's impedance by "
            f"the {method} method is infinite",
            path=name,
            hint=f"check that this is {what}, or give --method for the way it was measured",
        )


def interpolate_to(
    f_target: ArrayLike, f_source: ArrayLike, values: ArrayLike, *, name: str = "mount file"
) -> NDArray[np.complex128]:
    """Interpolate complex ``values`` on ``f_source`` (Hz) onto ``f_target`` (Hz).

    Real and imaginary parts are interpolated linearly in frequency (the mount is
    ``R + jωL``, linear in f). Extrapolation is refused: a target grid that extends beyond
    the source's range (by more than 1e-9 relative) raises :class:`InputError`.
    """
    ft = np.asarray(f_target, dtype=float)
    fs = np.asarray(f_source, dtype=float)
    v = np.asarray(values, dtype=complex)
    if fs.shape != v.shape or fs.ndim != 1 or fs.size < 2:
        raise InputError(
            f"{name}: needs matching 1-D frequency and value arrays of at least 2 points, "
            f"got {fs.shape} and {v.shape}",
            hint="give the same number of frequencies and values",
        )
    if not np.all(np.diff(fs) > 0):
        raise InputError(
            f"{name}: source frequencies are not strictly increasing",
            hint="sort the file by frequency",
        )
    slack = 1e-9 * max(abs(fs[0]), abs(fs[-1]))
    if ft.size and (ft.min() < fs[0] - slack or ft.max() > fs[-1] + slack):
        raise InputError(
            f"{name}: covers {fs[0]:g} Hz to {fs[-1]:g} Hz but the measurement needs "
            f"{ft.min():g} Hz to {ft.max():g} Hz; zbench will not extrapolate a mount",
            hint="capture the mount short over at least the measurement's frequency range",
        )
    ftc = np.clip(ft, fs[0], fs[-1])
    return np.interp(ftc, fs, v.real) + 1j * np.interp(ftc, fs, v.imag)


def _option_r(z0: float) -> str:
    if not (math.isfinite(z0) and z0 > 0 and float(z0).is_integer()):
        raise ValueError(
            f"reference impedance {z0!r} ohm: Touchstone 1.x files need an integer R; "
            f"use an integer reference such as 50"
        )
    return str(int(z0))


def _network(f: ArrayLike, data: NDArray[np.complex128], z0: float, comments: Iterable[str]):
    ff = np.asarray(f, dtype=float)
    if ff.ndim != 1 or data.shape[0] != ff.size:
        raise ValueError(f"frequencies {ff.shape} and data {data.shape} do not match")
    if ff.size >= 2 and not np.all(np.diff(ff) > 0):
        raise ValueError("frequencies must be strictly increasing")
    import skrf  # writing only: reading and fitting an S file do without it

    text = "\n".join(str(c) for c in comments)
    return skrf.Network(
        frequency=skrf.Frequency.from_f(ff, unit="Hz"),
        s=data,
        z0=z0,
        comments=text,
        name="zbench",
    )


def _write(network: skrf.Network, path: str | Path, z0: float, parameter: str) -> Path:
    r_text = _option_r(z0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        text = network.write_touchstone(
            return_string=True, form="ri", r_ref=float(z0), parameter=parameter
        )
    # scikit-rf writes 'R 50.0'; 1.x readers expect an integer there.
    text = re.sub(r"^(#.*\bR\s+)\S+", rf"\g<1>{r_text}", text, count=1, flags=re.MULTILINE)
    return atomic_write_text(path, text)


def write_touchstone_s(
    path: str | Path,
    f: ArrayLike,
    s: ArrayLike,
    z0: float = 50.0,
    comments: Iterable[str] = (),
) -> Path:
    """Write S-parameters ``s`` (shape (nf, n, n) or (nf,) for one port) as Touchstone 1.x.

    ``f`` in Hz, strictly increasing; ``z0`` an integer reference (Ω); each comment
    becomes a ``!`` line. Returns the path written.
    """
    data = np.asarray(s, dtype=complex)
    if data.ndim == 1:
        data = data.reshape(-1, 1, 1)
    return _write(_network(f, data, z0, comments), path, z0, "S")


def write_touchstone_z(
    path: str | Path, f: ArrayLike, z: ArrayLike, comments: Iterable[str] = (), z0: float = 50.0
) -> Path:
    """Write a part's impedance ``z`` (Ω, shape (nf,)) as a standard 1-port Touchstone 1.x
    file, ``.s1p`` with ``# Hz Z RI R 50``.

    The values are normalised to ``R z0`` in the file as version 1.1 requires, and a
    comment says so; :func:`load_measurement` (and any Touchstone reader) reads them
    back in ohms. ``path`` must end in ``.s1p``: zbench writes no extension of its own.
    """
    if SNP_EXTENSION.search(Path(path).name) is None or not str(path).lower().endswith(".s1p"):
        raise ValueError(f"{path}: an impedance is written as a standard one-port .s1p file")
    zz = np.asarray(z, dtype=complex).reshape(-1, 1, 1)
    if not np.all(np.isfinite(zz)):
        raise ValueError("impedance values must be finite to be written")
    import skrf

    s = skrf.network.z2s(zz, z0)
    note = (
        f"impedance Z of the part; values normalised to R = {_option_r(z0)} ohm as "
        "Touchstone 1.x requires (multiply by R for ohms)"
    )
    return _write(_network(f, s, z0, [*comments, note]), path, z0, "Z")
