"""A Touchstone file read once, within bounds, refusing what would be misread.

:func:`scan_touchstone` reads a file's structure and rows in one pass (numbers converted
in one numpy call) and refuses, with the line and the fix: rows that do not match the
port count of the extension, an option line with a reference impedance that is not
positive, a version-2 ``[Number of Frequencies]`` that disagrees with the rows, a
version-2 two-port file without ``[Two-Port Data Order]``, text where a number belongs,
a file over :data:`MAX_FILE_BYTES` or :data:`MAX_POINTS` rows, and anything that is not
a regular file (:func:`check_regular_file`, by ``stat`` only). :func:`network_matrix`
turns the rows into matrices (docs/references.md §6). :mod:`bench.touchstone` builds a
measurement from them and re-exports these names.
"""

from __future__ import annotations

import math
import os
import re
import stat
from dataclasses import dataclass, field
from pathlib import Path
from typing import NoReturn

import numpy as np
from numpy.typing import NDArray

from bench.errors import InputError

#: Largest measurement file read (bytes): about a million one-port points.
MAX_FILE_BYTES = 64 * 1024 * 1024
#: Most frequency points a file may hold: reading costs time and memory in proportion
#: (scikit-rf parses each row in Python), so a longer file is refused before it is read.
MAX_POINTS = 200_001
_UNITS = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9}
_FORMATS = ("db", "ma", "ri")
_PARAMETERS = ("s", "y", "z", "h", "g")
SNP_EXTENSION = re.compile(r"\.[sS](\d+)[pP]$")


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


def scpi_no_number(values: NDArray[np.float64]) -> NDArray[np.bool_]:
    """Where ``values`` hold SCPI's codes for no number: 9.91E37 (not-a-number) and
    ±9.9E37 (infinity), which an analyser writes for a point it could not measure
    (SCPI-99 vol. 1; from memory). Read as numbers they would pass for 10³⁷."""
    size = np.abs(values)
    return np.isclose(size, 9.9e37, rtol=1e-4) | np.isclose(size, 9.91e37, rtol=1e-4)


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
    match = SNP_EXTENSION.search(path.name)
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
    values: NDArray[np.float64] | None = None
    lines = text.splitlines()
    for number, raw in enumerate(lines, start=1):
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
            if ports <= 2 and not in_reference:
                values = _plain_rows(lines[number - 1 :], width)
                if values is not None:
                    break
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
    if values is None:
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
    codes = scpi_no_number(rows[:, 1:])
    if np.any(codes):
        rows = rows.copy()
        rows[:, 1:][codes] = np.nan
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


def _plain_rows(lines: list[str], width: int) -> NDArray[np.float64] | None:
    """The numbers of ``lines`` in one C-level pass, or None to read them row by row.

    Taken only when the rest of the file is plain rows (no comment, option line or
    keyword after the first data row) of ``width`` numbers each; anything else (a
    comment at a row's end, a version-1 noise block, text, a short row) returns None and
    the row-by-row reading gives the same values or names the line at fault."""
    rest = "\n".join(lines)
    if "!" in rest or "#" in rest or "[" in rest:
        return None
    try:
        rows = np.loadtxt(lines, dtype=float, ndmin=2)
    except ValueError:
        return None
    if rows.shape[1] != width:
        return None
    return rows.ravel()


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
    with np.errstate(over="ignore", invalid="ignore"):  # an infinite value stays one
        if scan.version.startswith("1") and scan.parameter == "z":
            m = m * scan.reference
        elif scan.version.startswith("1") and scan.parameter == "y":
            m = m / scan.reference
    return np.asarray(m, dtype=complex), float(z0)
