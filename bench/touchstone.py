"""Reading stored measurements and writing Touchstone S and Z files (scikit-rf).

A measurement zbench can fit (docs/design.md §9) is a Touchstone file:

* a 2-port S file of a shunt-through or series-through measurement (the method from
  the caller, else from the file's comments, else shunt-through);
* a 1-port S file: a reflection (``S11``);
* a 1-port Z (or version-2 Y) file: the part's impedance as given;

or an impedance analyser's CSV (:mod:`bench.impedance_csv`). :func:`scan_touchstone`
reads a file once, within a size bound, converting all numbers in one numpy pass, and
refuses what a lenient reader would misread or accept silently: rows that do not match
the port count of the extension, an option line with a reference impedance that is not
positive, a version-2 ``[Number of Frequencies]`` that disagrees with the rows, a
version-2 two-port file without ``[Two-Port Data Order]``, text where a number belongs.
:func:`network_matrix` turns the rows into matrices (scikit-rf converts Z and Y to S;
a test checks the result against scikit-rf's own reader). A file without an option line
is read with the Touchstone defaults (``GHz S MA R 50``) and a warning saying so. Every
bad input raises :class:`bench.errors.InputError` naming the file and the fix. Files are
written with scikit-rf through :func:`bench.files.atomic_write_text`, so a reader never
sees half a file.

Notes on the format (docs/references.md §6): in version 1.x files Z data is normalised to
the option line's R; version-1 Y, G and H files are read wrongly by scikit-rf 2.2, so
they are refused here (as are G and H in version 2); R is written as an integer in 1.x
files.
"""

from __future__ import annotations

import math
import os
import re
import stat
import warnings
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal, NoReturn

import numpy as np
import skrf
from numpy.typing import ArrayLike, NDArray

from bench.core.conversions import reflection_z, series_through_z, shunt_through_z
from bench.errors import InputError
from bench.files import atomic_write_text

#: Fewest frequency points a fit or a mount removal can work with.
MIN_POINTS = 10
#: Largest measurement file read (bytes): about a million one-port points.
MAX_FILE_BYTES = 64 * 1024 * 1024
#: Most frequency points a file may hold: reading costs time and memory in proportion
#: (scikit-rf parses each row in Python), so a longer file is refused before it is read.
MAX_POINTS = 200_001
#: Largest |S| accepted: a passive part's corrected S-parameters stay near or below 1;
#: raw, uncorrected ratios may exceed it a little, never by orders of magnitude.
MAX_ABS_S = 100.0
#: Largest |Z| (Ω) accepted in an impedance file.
MAX_ABS_Z = 1e12
#: The measuring methods a 2-port S file may hold.
TWO_PORT_METHODS = ("shunt-through", "series-through")
_METHOD_COMMENT = re.compile(
    r"measur\w*\s+method\s*[:=]\s*(shunt-through|series-through|reflection)", re.I
)
_UNITS = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9}
_FORMATS = ("db", "ma", "ri")
_PARAMETERS = ("s", "y", "z", "h", "g")
_EXTENSION = re.compile(r"\.[sS](\d+)[pP]$")


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


def check_regular_file(path: Path, *, kinds: str = "a .s2p, .s1p or .csv file") -> None:
    """Refuse a missing path, a folder, a device or a FIFO, and a file over the size bound.

    Only ``stat`` is used, so a FIFO or a device is never opened (and cannot block).
    """
    name = str(path)
    try:
        info = os.stat(path)
    except FileNotFoundError:
        raise InputError(
            "file not found", path=name, hint=f"check the path; give {kinds}"
        ) from None
    except OSError as exc:
        raise InputError(
            f"cannot be read ({exc.strerror or exc})",
            path=name,
            hint="check the path and its permissions",
        ) from exc
    if stat.S_ISDIR(info.st_mode):
        raise InputError("is a folder, not a measurement file", path=name, hint=f"give {kinds}")
    if not stat.S_ISREG(info.st_mode):
        raise InputError(
            "is not a regular file (a pipe, socket or device); zbench reads measurement files only",
            path=name,
            hint=f"save the data to a file first and give {kinds}",
        )
    _check_size(path)
    if info.st_size > MAX_FILE_BYTES:
        raise InputError(
            f"is {info.st_size / 2**20:.0f} MiB, above the {MAX_FILE_BYTES / 2**20:.0f} MiB "
            "zbench reads",
            path=name,
            hint="export fewer points (a log sweep of a few thousand points is plenty) or "
            "split the band into several files and join them with --join",
        )


def _check_size(path: Path) -> None:
    """Refuse, before parsing it, a file with more than :data:`MAX_POINTS` data rows
    (its bytes are bounded already by :data:`MAX_FILE_BYTES`)."""
    if path.stat().st_size <= MAX_POINTS * 6:
        return  # too small to hold that many rows
    with path.open("rb") as stream:
        rows = sum(1 for line in stream if line.lstrip()[:1] not in (b"!", b"#", b"[", b""))
    if rows > MAX_POINTS:
        raise InputError(
            f"holds {rows} data rows; zbench reads files of at most {MAX_POINTS} frequency points",
            path=str(path),
            hint="export the sweep with fewer points (a log sweep of 801 to 1601 points "
            "resolves every landmark), or keep every n-th row of the file",
        )


@dataclass(frozen=True)
class Scan:
    """What :func:`scan_touchstone` found: version, option line, ports and rows."""

    version: str
    unit: str
    parameter: str
    data_format: str
    reference: float
    has_option_line: bool
    ports: int
    rows: int
    frequencies: NDArray[np.float64]
    declared_frequencies: int | None
    all_zero: bool
    largest: float
    data: NDArray[np.float64] = field(default_factory=lambda: np.zeros((0, 0)))
    matrix: str = "full"
    order: str = "21_12"
    references: tuple[float, ...] = ()
    comments: str = ""


def _bad(name: str, line: int | None, message: str, hint: str) -> InputError:
    where = f"{name}:{line}" if line is not None else name
    return InputError(message, path=where, hint=hint)


def _option_line(name: str, number: int, text: str) -> tuple[str, str, str, float]:
    tokens = text[1:].split()
    unit, parameter, data_format, reference = "ghz", "s", "ma", 50.0
    i = 0
    while i < len(tokens):
        token = tokens[i].lower()
        if token in _UNITS:
            unit = token
        elif token in _PARAMETERS:
            parameter = token
        elif token in _FORMATS:
            data_format = token
        elif token == "r":
            if i + 1 >= len(tokens):
                raise _bad(
                    name, number, "option line: R has no value", "write e.g. '# Hz S RI R 50'"
                )
            try:
                reference = float(tokens[i + 1])
            except ValueError:
                raise _bad(
                    name,
                    number,
                    f"option line: R {tokens[i + 1]!r} is not a number",
                    "write the reference impedance in ohms, e.g. 'R 50'",
                ) from None
            if not (math.isfinite(reference) and reference > 0):
                raise _bad(
                    name,
                    number,
                    f"option line: reference impedance R {tokens[i + 1]} must be a positive "
                    "number of ohms",
                    "write the reference the data were measured against, e.g. 'R 50'",
                )
            i += 1
        else:
            raise _bad(
                name,
                number,
                f"option line: {tokens[i]!r} is not a Touchstone option",
                "write '# <Hz|kHz|MHz|GHz> <S|Z|Y> <RI|MA|DB> R <ohms>', e.g. '# Hz S RI R 50'",
            )
        i += 1
    return unit, parameter, data_format, reference


def scan_touchstone(path: Path) -> Scan:
    """Read a Touchstone file's structure once, refusing what would be misread.

    Checks: the option line; every network-data row has ``1 + 2n²`` numbers for the
    file's ``n`` ports (from ``[Number of Ports]`` in version 2, else the extension
    ``.sNp``, else the first row's width); numbers are numbers; a version-2
    ``[Number of Frequencies]`` equals the rows. Raises :class:`InputError` with the line.
    """
    name = str(path)
    check_regular_file(path)
    text = path.read_bytes().decode("latin-1")
    match = _EXTENSION.search(path.name)
    ports = int(match.group(1)) if match else None
    version = "1.0"
    option: tuple[str, str, str, float] | None = None
    declared: int | None = None
    matrix = "full"
    in_noise = False
    numbers: list[str] = []
    lines_at: list[tuple[int, int]] = []
    width = 0
    comments: list[str] = []
    order: str | None = None
    references: list[float] = []
    in_reference = False
    for number, raw in enumerate(text.splitlines(), start=1):
        line, bang, comment = raw.partition("!")
        line = line.strip()
        if bang:
            comments.append(comment.strip())
        if not line:
            continue
        if line.startswith("#"):
            if option is None:
                option = _option_line(name, number, line)
            continue
        if line.startswith("["):
            keyword, _, rest = line[1:].partition("]")
            key = keyword.strip().lower()
            value = rest.strip()
            if key == "version":
                version = value or "2.0"
            elif key == "number of ports":
                try:
                    ports = int(value)
                except ValueError:
                    raise _bad(
                        name,
                        number,
                        f"[Number of Ports] {value!r} is not a whole number",
                        "write e.g. '[Number of Ports] 2'",
                    ) from None
            elif key == "number of frequencies":
                try:
                    declared = int(value)
                except ValueError:
                    raise _bad(
                        name,
                        number,
                        f"[Number of Frequencies] {value!r} is not a whole number",
                        "write the number of data rows",
                    ) from None
            elif key == "matrix format":
                matrix = value.lower()
            elif key == "two-port data order":
                order = value.lower()
            elif key == "noise data":
                in_noise = True
            elif key == "end":
                break
            in_reference = key == "reference"
            if not in_reference or not value:
                continue
            line = value
        if in_noise:
            continue
        tokens = line.split()
        if in_reference:
            # [Reference] values (one per port) may run over several lines.
            if all(_is_number(t) for t in tokens) and len(references) + len(tokens) <= (ports or 0):
                references.extend(float(t) for t in tokens)
                continue
            in_reference = False
        if (
            ports == 2
            and len(tokens) == 5
            and version.startswith("1")
            and numbers
            and _is_number(tokens[0])
            and float(tokens[0]) <= float(numbers[-width])
        ):
            # Version 1: a fall in frequency starts the noise parameters (5 numbers a row).
            in_noise = True
            continue
        # A row of the wrong width may be text: say so first, it is the likelier fault.
        odd = ports is None or (ports <= 2 and len(tokens) != width)
        if odd and not all(_is_number(t) for t in tokens):
            _raise_not_a_number(name, tokens, [(number, len(tokens))])
        if ports is None:
            ports = {3: 1, 9: 2}.get(len(tokens), 0)
            if not ports:
                raise _bad(
                    name,
                    number,
                    f"the first data row has {len(tokens)} numbers, not 3 "
                    "(one port) or 9 (two ports)",
                    "name the file .s1p or .s2p for its port count and check the rows",
                )
        if width == 0:
            n = ports
            width = 1 + (n * (n + 1) if matrix in ("lower", "upper") else 2 * n * n)
        if ports <= 2 and len(tokens) != width:
            raise _bad(
                name,
                number,
                f"has {len(tokens)} numbers in a row where a {ports}-port file has {width} "
                f"(frequency and {width - 1} values)",
                "check the port count: a one-port file is .s1p (3 numbers a row), a "
                "two-port file .s2p (9 numbers a row)",
            )
        # Larger networks wrap rows; their numbers are only counted (refused later).
        lines_at.append((number, len(tokens)))
        numbers.extend(tokens)
    try:
        values = np.array(numbers, dtype=float)
    except ValueError:
        _raise_not_a_number(name, numbers, lines_at)
    if width == 0 or values.size == 0:
        raise _bad(
            name,
            None,
            "holds no network data rows",
            "give a Touchstone file: an option line such as '# Hz S RI R 50', then one line "
            "of numbers per frequency",
        )
    if values.size % width:
        raise _bad(
            name,
            None,
            f"holds {values.size} numbers, not a whole number of {width}-number rows",
            "check the port count and re-export the file",
        )
    rows = values.reshape(-1, width)
    freqs = rows[:, 0]
    all_zero = not np.any(rows[:, 1:])
    if version.startswith("2") and declared is not None and declared != len(freqs):
        raise _bad(
            name,
            None,
            f"[Number of Frequencies] says {declared} but the file has {len(freqs)} data rows",
            "correct [Number of Frequencies] or restore the missing rows",
        )
    unit, parameter, data_format, reference = option or ("ghz", "s", "ma", 50.0)
    largest = 0.0
    if data_format != "db" and rows.shape[1] % 2 == 1:
        pairs = rows[:, 1:].reshape(rows.shape[0], -1, 2)
        with np.errstate(over="ignore"):
            size = np.abs(pairs).max(axis=-1) if data_format == "ri" else pairs[..., 0]
        size = np.abs(size[np.isfinite(size)])  # NaN and inf get their own message later
        largest = float(size.max()) if size.size else 0.0
    if version.startswith("2") and ports == 2 and order not in ("12_21", "21_12"):
        raise _bad(
            name,
            None,
            "is a version-2 two-port file without a valid [Two-Port Data Order]",
            "add '[Two-Port Data Order] 12_21' (or 21_12) as the specification requires",
        )
    if references and len(set(references)) > 1:
        raise _bad(
            name,
            None,
            f"[Reference] gives different impedances per port ({references})",
            "re-export the measurement with one reference impedance, e.g. 50 ohm",
        )
    if references and not all(math.isfinite(r) and r > 0 for r in references):
        raise _bad(
            name,
            None,
            f"[Reference] {references[0]:g} must be a positive number of ohms",
            "write the reference the data were measured against, e.g. 50",
        )
    return Scan(
        version=version,
        unit=unit,
        parameter=parameter,
        data_format=data_format,
        reference=reference,
        has_option_line=option is not None,
        ports=int(ports or 0),
        rows=len(freqs),
        frequencies=freqs * _UNITS[unit],
        declared_frequencies=declared,
        all_zero=all_zero,
        largest=largest,
        data=rows,
        matrix=matrix,
        order=order or "21_12",
        references=tuple(references),
        comments="\n".join(c for c in comments if c),
    )


def _raise_not_a_number(name: str, numbers: list[str], lines_at: list[tuple[int, int]]) -> NoReturn:
    """The slow path after a fast conversion failed: find the line and the token."""
    start = 0
    for number, count in lines_at:
        for token in numbers[start : start + count]:
            if not _is_number(token):
                raise _bad(
                    name,
                    number,
                    f"{token!r} is not a number",
                    "not a readable Touchstone file there: give an option line such as "
                    "'# Hz S RI R 50', then rows of numbers only; comment out other text "
                    "with '!'",
                ) from None
        start += count
    raise _bad(name, None, "holds text where numbers belong", "re-export the file")


def _is_number(token: str) -> bool:
    try:
        float(token)
    except ValueError:
        return False
    return True


def _check_grid(name: str, f: NDArray[np.float64]) -> None:
    if f.size < MIN_POINTS:
        raise InputError(
            f"has {f.size} frequency points; at least {MIN_POINTS} are needed",
            path=name,
            hint="measure or export more points (a log sweep of 201 points or more is usual)",
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


def network_matrix(scan: Scan) -> tuple[NDArray[np.complex128], float]:
    """The network data of a scanned 1- or 2-port file as complex matrices (nf, n, n), in
    the file's parameter (S, or Z and Y in ohms and siemens), and the reference (Ω).

    Formats RI, MA and DB (angles in degrees); version 1 lists two-port data as 11, 21,
    12, 22 and normalises Z and Y to R; version 2 follows ``[Two-Port Data Order]`` and
    ``[Matrix Format]`` and does not normalise (docs/references.md §6).
    """
    rows = scan.data
    pairs = rows[:, 1:].reshape(rows.shape[0], -1, 2)
    a, b = pairs[..., 0], pairs[..., 1]
    with np.errstate(over="ignore", invalid="ignore"):
        if scan.data_format == "ri":
            v = a + 1j * b
        elif scan.data_format == "ma":
            v = a * np.exp(1j * np.deg2rad(b))
        else:
            v = 10.0 ** (a / 20.0) * np.exp(1j * np.deg2rad(b))
    if scan.ports == 1:
        m = v.reshape(-1, 1, 1)
    else:
        if scan.matrix == "lower":
            m11, m21, m22 = v.T
            m12 = m21
        elif scan.matrix == "upper":
            m11, m12, m22 = v.T
            m21 = m12
        elif scan.version.startswith("1") or scan.order == "21_12":
            m11, m21, m12, m22 = v.T
        else:
            m11, m12, m21, m22 = v.T
        m = np.stack([np.stack([m11, m12], -1), np.stack([m21, m22], -1)], -2)
    z0 = scan.references[0] if scan.references else scan.reference
    if scan.version.startswith("1") and scan.parameter == "z":
        m = m * scan.reference
    elif scan.version.startswith("1") and scan.parameter == "y":
        m = m / scan.reference
    return np.asarray(m, dtype=complex), float(z0)


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
    f = scan.frequencies
    _check_grid(name, f)
    matrix, z0 = network_matrix(scan)
    if not np.all(np.isfinite(matrix)):
        rows = np.unique(np.nonzero(~np.isfinite(matrix.reshape(f.size, -1)))[0])
        listed = ", ".join(f"{f[i]:g} Hz" for i in rows[:3])
        raise InputError(
            f"has NaN or infinite values at {rows.size} frequencies ({listed}"
            f"{', ...' if rows.size > 3 else ''})",
            path=name,
            hint="re-export the measurement, or drop the bad points",
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
    if parameter == "z":
        s = skrf.network.z2s(matrix, z0)
    elif parameter == "y":
        s = skrf.network.y2s(matrix, z0)
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
    if _EXTENSION.search(Path(path).name) is None or not str(path).lower().endswith(".s1p"):
        raise ValueError(f"{path}: an impedance is written as a standard one-port .s1p file")
    zz = np.asarray(z, dtype=complex).reshape(-1, 1, 1)
    if not np.all(np.isfinite(zz)):
        raise ValueError("impedance values must be finite to be written")
    s = skrf.network.z2s(zz, z0)
    note = (
        f"impedance Z of the part; values normalised to R = {_option_r(z0)} ohm as "
        "Touchstone 1.x requires (multiply by R for ohms)"
    )
    return _write(_network(f, s, z0, [*comments, note]), path, z0, "Z")
