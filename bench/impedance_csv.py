"""Reading an impedance analyser's CSV export as the part's impedance (docs/design.md §9).

The form read: optional comment lines (starting with ``#``, ``!`` or ``%``), then a
header row naming the columns, then one row of numbers per frequency. Names are
case-insensitive; each carries its unit in brackets (``Frequency [Hz]``, ``|Z| (Ohm)``)
or after a space (``Phase deg``). Columns: a frequency (Hz, kHz, MHz, GHz), then one
pair among |Z| (Ω, kΩ, mΩ) with phase (deg or rad), R with X (Ω), real with imaginary
part (Ω), or an analyser's equivalent circuit: Cs (F, µF, nF, pF) or Ls (H, µH, nH) with
Rs (Ω), D or Q, or Cp or Lp with Rp, D or Q (D and Q without a unit). Comma, semicolon
or tab delimited; with semicolons a decimal comma is read as a point.
``Frequency [Hz],|Z| [Ohm],Phase [deg]`` is the plainest form.

Every malformed file (no header, an unknown column, a missing unit, text where a number
belongs) raises :class:`bench.errors.InputError` naming the file, the line and the fix.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np

from bench.errors import InputError

_FREQ_UNITS = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9}
_OHM_UNITS = {
    "ohm": 1.0,
    "ohms": 1.0,
    "Ω": 1.0,
    "mohm": 1e-3,
    "mΩ": 1e-3,
    "kohm": 1e3,
    "kΩ": 1e3,
}
_FARAD_UNITS = {"f": 1.0, "mf": 1e-3, "µf": 1e-6, "uf": 1e-6, "nf": 1e-9, "pf": 1e-12}
_HENRY_UNITS = {"h": 1.0, "mh": 1e-3, "µh": 1e-6, "uh": 1e-6, "nh": 1e-9, "ph": 1e-12}
# D and Q have no unit: none, or one of these.
_NUMBER_UNITS = {"": 1.0, "1": 1.0, "-": 1.0}
_ANGLE_UNITS = {
    "deg": math.pi / 180,
    "degree": math.pi / 180,
    "degrees": math.pi / 180,
    "°": math.pi / 180,
    "rad": 1.0,
    "radian": 1.0,
    "radians": 1.0,
}
#: Column role -> accepted names (lower case).
_NAMES = {
    "f": ("frequency", "freq", "f"),
    "mag": ("|z|", "z", "mag", "magnitude", "impedance", "|z| magnitude", "zmag", "mag(z)"),
    "phase": ("phase", "theta", "θ", "angle", "arg", "phase(z)", "arg(z)"),
    "r": ("r", "rs", "resistance", "esr"),
    "x": ("x", "xs", "reactance"),
    "re": ("real", "re", "re(z)", "real(z)", "real part", "z'"),
    "im": ("imag", "imaginary", "im", "im(z)", "imag(z)", "imaginary part", "z''"),
    # An analyser's equivalent-circuit readings: series or parallel C or L with the
    # series or parallel resistance, the dissipation factor D or the quality factor Q.
    "cs": ("cs", "c series", "series capacitance"),
    "cp": ("cp", "c parallel", "parallel capacitance"),
    "ls": ("ls", "l series", "series inductance"),
    "lp": ("lp", "l parallel", "parallel inductance"),
    "rp": ("rp", "parallel resistance"),
    "d": ("d", "df", "dissipation", "dissipation factor", "tan delta", "tanδ"),
    "q": ("q", "quality factor"),
}
_UNITS_OF = {
    "f": _FREQ_UNITS,
    "mag": _OHM_UNITS,
    "phase": _ANGLE_UNITS,
    "r": _OHM_UNITS,
    "x": _OHM_UNITS,
    "re": _OHM_UNITS,
    "im": _OHM_UNITS,
    "cs": _FARAD_UNITS,
    "cp": _FARAD_UNITS,
    "ls": _HENRY_UNITS,
    "lp": _HENRY_UNITS,
    "rp": _OHM_UNITS,
    "d": _NUMBER_UNITS,
    "q": _NUMBER_UNITS,
}
_PAIRS = (
    ("mag", "phase"),
    ("r", "x"),
    ("re", "im"),
    ("cs", "r"),
    ("cs", "d"),
    ("cs", "q"),
    ("cp", "rp"),
    ("cp", "d"),
    ("cp", "q"),
    ("ls", "r"),
    ("ls", "q"),
    ("ls", "d"),
    ("lp", "rp"),
    ("lp", "q"),
    ("lp", "d"),
)
_EXAMPLE = "Frequency [Hz],|Z| [Ohm],Phase [deg]"
_BRACKETED = re.compile(r"^(.*?)\s*[\[(]\s*([^\])]*?)\s*[\])]\s*$")
_UNIT_AFTER = re.compile(r"[\s_]+(?=[^\s_]+$)")


def _role(name: str) -> str | None:
    key = name.strip().lower()
    for role, names in _NAMES.items():
        if key in names:
            return role
    return None


def _unit_of(role: str, unit: str) -> float | None:
    table = _UNITS_OF[role]
    for key, scale in table.items():
        if unit == key or unit.lower() == key.lower():
            return scale
    return None


def _column(where: str, text: str) -> tuple[str, float]:
    """A header field as (role, scale to SI), or :class:`InputError`."""
    field = text.strip().strip('"').strip("'").strip()
    match = _BRACKETED.match(field)
    if match:
        name, unit = match.group(1), match.group(2)
    else:
        # "Frequency Hz" or "freq_MHz": the unit after the last space or underscore.
        parts = _UNIT_AFTER.split(field, maxsplit=1)
        name, unit = (parts[0], parts[1]) if len(parts) == 2 else (field, "")
        if _role(field) is not None and (len(parts) < 2 or _role(name) is None):
            name, unit = field, ""
    role = _role(name)
    if role is None:
        raise InputError(
            f"unknown column {field!r}",
            path=where,
            hint="name the columns Frequency, then |Z| and Phase, or R and X, or Real and "
            f"Imag, each with its unit, e.g. '{_EXAMPLE}'",
        )
    if not unit and "" not in _UNITS_OF[role]:  # D and Q need none
        raise InputError(
            f"column {field!r} has no unit",
            path=where,
            hint=f"write the unit in brackets or after a space, e.g. '{_EXAMPLE}'",
        )
    scale = _unit_of(role, unit)
    if scale is None:
        known = ", ".join(k for k in _UNITS_OF[role] if k.isascii() and k) or "no unit"
        raise InputError(
            f"column {field!r}: unit {unit!r} is not one zbench reads for it",
            path=where,
            hint=f"use one of: {known}",
        )
    return role, scale


def _number(where: str, text: str, decimal_comma: bool, column: str) -> float:
    token = text.strip().strip('"')
    if decimal_comma:
        token = token.replace(",", ".")
    try:
        return float(token)
    except ValueError:
        raise InputError(
            f"{token!r} in column {column!r} is not a number",
            path=where,
            hint="each data row holds only numbers (a decimal point, or a decimal comma "
            "with ';' as the delimiter); remove other text or mark it as a comment with '#'",
        ) from None


def load_impedance_csv(path: str | Path, *, method: str | None = None):
    """Read an impedance CSV (module doc) as a :class:`bench.touchstone.Measurement`.

    ``method`` is kept as the measurement's method (it only sets the window the points
    are judged against); without it the impedance is taken as given.
    """
    from bench.touchstone import (
        MAX_ABS_Z,
        Measurement,
        _check_grid,
        low_sweep_note,
        sweep_in_order,
    )
    from bench.touchstone_scan import scpi_no_number

    p = Path(path)
    name = str(p)
    raw = p.read_bytes()
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        text = raw.decode("latin-1")
    lines = text.splitlines()
    comments: list[str] = []
    header_at = None
    for index, line in enumerate(lines):
        stripped = line.strip()
        if not stripped:
            continue
        if stripped[0] in "#!%":
            comments.append(stripped[1:].strip())
            continue
        header_at = index
        break
    if header_at is None:
        raise InputError(
            "holds no header row and no data",
            path=name,
            hint=f"give a header row naming the columns, e.g. '{_EXAMPLE}', then the data",
        )
    header = lines[header_at]
    where = f"{name}:{header_at + 1}"
    delimiter = "\t" if "\t" in header else ";" if ";" in header else ","
    fields = header.split(delimiter)
    if all(_is_number(field.replace(",", ".")) for field in fields if field.strip()):
        raise InputError(
            "has no header row: the first line holds numbers",
            path=where,
            hint=f"add a header row naming the columns with their units, e.g. '{_EXAMPLE}'",
        )
    roles: list[tuple[str, float]] = [_column(where, field) for field in fields]
    names = [field.strip() for field in fields]
    seen = [role for role, _ in roles]
    for role in set(seen):
        if seen.count(role) > 1:
            raise InputError(
                f"names the {role!r} column twice", path=where, hint="keep one column for each"
            )
    pair = [p for p in _PAIRS if p[0] in seen and p[1] in seen]
    if "f" not in seen or len(pair) != 1 or len(seen) != 3:
        raise InputError(
            f"has the columns {', '.join(names)}; zbench needs a frequency and one pair: "
            "|Z| with phase, R with X, real with imaginary part, or an analyser's "
            "equivalent circuit (Cs or Ls with Rs, D or Q; Cp or Lp with Rp, D or Q)",
            path=where,
            hint=f"export three columns, e.g. '{_EXAMPLE}'",
        )
    decimal_comma = delimiter == ";"
    columns = {role: i for i, (role, _) in enumerate(roles)}
    scales = {role: scale for role, scale in roles}
    rows: list[list[float]] = []
    for index in range(header_at + 1, len(lines)):
        line = lines[index].strip()
        if not line or line[0] in "#!%":
            continue
        cells = line.split(delimiter)
        row_at = f"{name}:{index + 1}"
        if len(cells) != len(fields):
            raise InputError(
                f"has {len(cells)} fields where the header has {len(fields)}",
                path=row_at,
                hint=f"give every row the header's columns, separated by {delimiter!r}"
                + (" (a decimal comma needs ';' as the delimiter)" if delimiter == "," else ""),
            )
        rows.append(
            [_number(row_at, cells[i], decimal_comma, names[i]) for i in range(len(fields))]
        )
    if not rows:
        raise InputError(
            "has a header but no data rows", path=name, hint="export the measurement's data too"
        )
    data = np.asarray(rows, dtype=float)
    data[scpi_no_number(data)] = np.nan  # a point the analyser did not measure
    f = data[:, columns["f"]] * scales["f"]
    a, b = pair[0]
    first = data[:, columns[a]] * scales[a]
    second = data[:, columns[b]] * scales[b]
    z = _impedance_of(a, b, 2 * np.pi * f, first, second)
    f, z, ordered = sweep_in_order(f, z)
    _check_grid(name, f)
    if not (np.all(np.isfinite(z)) and np.all(np.isfinite(f))):
        raise InputError(
            "holds no number (NaN, infinity, or SCPI's 9.91E37 that an analyser writes for a "
            "point it could not measure)",
            path=name,
            hint="measure again, or remove those rows",
        )
    if not np.any(z):
        raise InputError(
            "every impedance in the file is zero: there is no measurement in it, and "
            "nothing was fitted or written",
            path=name,
            hint="re-export the measurement",
        )
    largest = float(np.max(np.abs(z)))
    if largest > MAX_ABS_Z:
        raise InputError(
            f"holds impedances up to {largest:.3g} Ω, which no measurement of a part gives",
            path=name,
            hint="check the units in the header (Ohm, kOhm) and the column order",
        )
    return Measurement(
        path=p,
        f=f,
        kind="impedance",
        s=None,
        z=z,
        z0=50.0,
        comments="\n".join(comments),
        method=method,
        method_source="option" if method else "file",
        warnings=tuple(w for w in (ordered, low_sweep_note(f)) if w),
    )


def _impedance_of(a: str, b: str, w, first, second):
    """The impedance (Ω) from the pair of columns ``a``, ``b`` (SI values) at ``w``
    (rad/s). An analyser's equivalent circuits (docs/references.md §3), with the signed
    definitions it reports above a resonance too (a negative Cs is inductive):
    series ``Z = Rs + 1/(jωCs)`` or ``Rs + jωLs`` with ``D = ωCs·Rs`` and
    ``Q = ωLs/Rs``; parallel ``Y = 1/Rp + jωCp`` or ``1/Rp + 1/(jωLp)`` with
    ``D = 1/(ωCp·Rp)`` and ``Q = Rp/(ωLp)``; ``Q = 1/D`` throughout."""
    with np.errstate(divide="ignore", invalid="ignore"):
        if a == "mag":
            return first * np.exp(1j * second)
        if a in ("r", "re"):
            return first + 1j * second
        if a in ("cs", "ls"):
            x = -1.0 / (w * first) if a == "cs" else w * first
            if b == "r":
                rs = second
            else:
                d = second if b == "d" else 1.0 / second
                # D = Rs/|Xs| for a capacitance, 1/Q = Rs/Xs for an inductance.
                rs = d * (1.0 / (w * first) if a == "cs" else w * first)
            return rs + 1j * x
        b_par = w * first if a == "cp" else -1.0 / (w * first)
        if b == "rp":
            g = 1.0 / second
        else:
            d = second if b == "d" else 1.0 / second
            g = d * (w * first if a == "cp" else 1.0 / (w * first))
        return 1.0 / (g + 1j * b_par)


def _is_number(text: str) -> bool:
    try:
        float(text.strip().strip('"'))
    except ValueError:
        return False
    return True
