"""SPICE text of fitted models: one ``.subckt NAME 1 2`` per part and a library of them.

Pin 1 to pin 2 is the part. Each part has two forms, named so they cannot be mixed up:
``NAME`` is the part alone, its mount removed (for a board-level field solver that
models the pads and vias itself), and ``NAME_on_mount`` the part on the mount it was
measured in, the mount's series R and L included (for a schematic with ideal
connections); see :func:`on_mount_subckt_text`. The subcircuit carries, as ``*``
comments, the model family, the landmarks, the fit quality and the measurement's
provenance, so a model file found alone still says where it came from. Comments are
plain ASCII ("uF", "mOhm", "+/-"), as some SPICE readers reject any other byte even in a
comment; element values are plain SI numbers in exponent notation (``1.2e-09``), which
every SPICE reads. Networks without a DC path get a 1e12 Ω bleed resistor so that an
operating point exists (ngspice stops on a floating node otherwise). Text only; no I/O
here.
"""

from __future__ import annotations

import re
import unicodedata
from collections.abc import Mapping, Sequence

import numpy as np

from bench.core.fit_select import relative_spread, undetermined
from bench.core.fitting import FitResult
from bench.core.models.network import L as Ind
from bench.core.models.network import Node, R, series, spice_lines
from bench.units import format_si

#: Suffix of the subcircuit of a part on its mount.
ON_MOUNT_SUFFIX = "_on_mount"

_LANDMARK_UNITS = {
    "c_low": "F",
    "esl": "H",
    "srf": "Hz",
    "esr_at_srf": "Ohm",
    "l_low": "H",
    "r_dc": "Ohm",
    "z_at_srf": "Ohm",
    "c_par": "F",
}
_ELEMENT_UNITS = {"R": "Ohm", "L": "H", "C": "F", "S": "Ohm at 1 MHz", "K": "Ohm"}


def spice_name(name: str) -> str:
    """``name`` as a SPICE-safe identifier: letters, digits and ``_``, starting with a letter.

    Other characters become ``_``; a name that does not start with a letter gets ``P_``
    in front (``"10u-0805"`` -> ``"P_10u_0805"``).
    """
    text = re.sub(r"[^A-Za-z0-9_]", "_", str(name).strip())
    if not text:
        raise ValueError("a SPICE subcircuit needs a non-empty name")
    if not text[0].isalpha():
        text = "P_" + text
    return text


# Characters of zbench's texts (units, prefixes, signs) spelled in ASCII.
_ASCII = {
    "µ": "u",
    "μ": "u",
    "Ω": "Ohm",
    "±": "+/-",
    "−": "-",
    "–": "-",
    "—": "-",
    "‖": "||",
    "×": "x",
    "·": "*",
    "°": " deg",
    "≈": "~",
    "≤": "<=",
    "≥": ">=",
    "²": "^2",
    "√": "sqrt",
    "‘": "'",
    "’": "'",
    "“": '"',
    "”": '"',
}
_ASCII_TABLE = str.maketrans(_ASCII)


def ascii_text(text: str) -> str:
    """``text`` in plain ASCII: units and signs spelled out (``µF`` -> ``uF``, ``Ω`` ->
    ``Ohm``, ``±`` -> ``+/-``), accents dropped, anything else left becomes ``?``."""
    text = str(text).translate(_ASCII_TABLE)
    text = unicodedata.normalize("NFKD", text)
    text = "".join(c for c in text if not unicodedata.combining(c))
    return text.encode("ascii", errors="replace").decode("ascii")


def _comment(text: str) -> str:
    """One comment line in ASCII; newlines in values would otherwise end the comment."""
    return "* " + " ".join(ascii_text(text).split())


def subckt_text(result: FitResult, name: str, *, provenance: Mapping[str, str]) -> str:
    """SPICE subcircuit text of ``result`` named ``name`` (sanitised), pins ``1 2``: the
    part alone, its mount removed.

    ``provenance`` holds what the measurement was (file, part, sample, run, date,
    fixture, ...); each entry becomes a comment line.
    """
    return _subckt(result, spice_name(name), provenance, None)


def on_mount_subckt_text(
    result: FitResult,
    name: str,
    mount_r: float,
    mount_l: float,
    *,
    provenance: Mapping[str, str],
) -> str:
    """SPICE subcircuit of the part on its mount, named ``NAME_on_mount``: the mount's
    series resistance ``mount_r`` (Ω) and inductance ``mount_l`` (H) from pin 1, then
    the part to pin 2."""
    if not (mount_r >= 0 and mount_l >= 0):
        raise ValueError(f"mount R and L must be >= 0, got {mount_r} Ohm and {mount_l} H")
    return _subckt(result, spice_name(name) + ON_MOUNT_SUFFIX, provenance, (mount_r, mount_l))


def _subckt(result: FitResult, sub: str, provenance, mount: tuple[float, float] | None) -> str:
    q = result.quality
    lines = [
        _comment(
            f"{sub}: zbench {result.model} model (order {result.order}) of "
            f"{'an' if result.kind[:1] in 'aeiou' else 'a'} {result.kind}"
            + (
                ", the part alone (mount removed; for a board-level field solver)"
                if mount is None
                else ", the part on its mount (mount included; for ideal connections)"
            )
        ),
        _comment(
            f"fitted from {format_si(result.f_range[0], 'Hz')} to "
            f"{format_si(result.f_range[1], 'Hz')}, {q.points_used} points used, "
            f"{q.points_outside_window} outside the measurable window"
        ),
        _comment(
            f"fit quality: rms_log_error {q.rms_log_error:.4g}, max_abs_log_error "
            f"{q.max_abs_log_error:.4g}, noise_ratio {q.noise_ratio:.3g}, bound "
            f"{result.quality_bound:.4g} ({'met' if result.meets_quality else 'NOT met'})"
        ),
    ]
    if result.excluded:
        lines.append(
            _comment(
                "points left out: "
                + ", ".join(
                    f"{e.count} {e.reason} ({format_si(e.f_lo, 'Hz')} to {format_si(e.f_hi, 'Hz')})"
                    for e in result.excluded
                )
            )
        )
    marks = []
    sigmas = getattr(result, "landmark_uncertainties", None) or {}
    for key, value in result.landmarks.items():
        text = "n/a" if value is None else format_si(value, _LANDMARK_UNITS.get(key, ""))
        source = result.landmark_sources.get(key)
        relative = relative_spread(value, sigmas.get(key))
        if source == "model" and relative is not None:
            # The model's value carries the model's uncertainty; beyond ±100 % (or
            # resting on an element the data do not see) it is not determined.
            source += (
                ", not determined" if undetermined(relative) else f", +/- {100 * relative:.2g} %"
            )
        marks.append(f"{key} = {text}" + (f" ({source})" if source else ""))
    if marks:
        lines.append(_comment("landmarks: " + ", ".join(marks)))
    elements = []
    for key, value in result.elements.items():
        sigma = result.uncertainties.get(key)
        # A skin corner (fc<name>) is a frequency.
        unit = "Hz" if key.startswith("fc") else _ELEMENT_UNITS.get(key[0], "")
        # A loss tangent (tan<name>) is a plain number, not a quantity with a prefix.
        text = f"{value:.4g}" if key.startswith("tan") else format_si(value, unit)
        if sigma is not None and value > 0:
            text += f" +/- {100 * sigma / value:.2g} %"
        elements.append(f"{key} = {text}")
    lines.append(_comment("elements: " + ", ".join(elements)))
    for key, value in provenance.items():
        lines.append(_comment(f"{key}: {value}"))
    for warning in result.warnings:
        lines.append(_comment(f"warning: {warning}"))
    if mount is not None:
        lines.append(
            _comment(
                f"mount in series from pin 1: Rmount = {format_si(mount[0], 'Ohm')}, "
                f"Lmount = {format_si(mount[1], 'H')}"
            )
        )
    lines.append(f".subckt {sub} 1 2")
    if mount is None:
        lines.extend(result.spice_lines())
    else:
        lines.extend(_on_mount_lines(result, mount))
    lines.append(f".ends {sub}")
    return "\n".join(lines) + "\n"


def library_text(subckts: Sequence[str], *, title: str) -> str:
    """A SPICE library holding ``subckts`` (texts from :func:`subckt_text`).

    Meant for ``.include`` or ``.lib``, so it carries no ``.end``. Two subcircuits of one
    name are an error (SPICE would take one silently).
    """
    names: list[str] = []
    for text in subckts:
        for match in re.finditer(r"^\.subckt\s+(\S+)", text, flags=re.MULTILINE | re.IGNORECASE):
            names.append(match.group(1).lower())
    dupes = sorted({n for n in names if names.count(n) > 1})
    if dupes:
        raise ValueError(
            f"library {title!r} would hold several subcircuits named {', '.join(dupes)}; "
            "give each part and sample its own name"
        )
    head = [_comment(title), _comment(f"{len(subckts)} subcircuits, pins 1 and 2"), "*"]
    body = "\n".join(text.rstrip("\n") + "\n" for text in subckts)
    return "\n".join(head) + "\n\n" + body


def _on_mount_lines(result: FitResult, mount: tuple[float, float]) -> list[str]:
    """Element lines of the mount (Rmount, Lmount) in series with the part's circuit."""
    part: Node | None = result.circuit
    values = dict(result.elements)
    if part is None:
        part = result.family.circuit(result.order)
    if "Rmount" in values or "Lmount" in values:
        raise ValueError("the part's elements already use the names Rmount or Lmount")
    values.update(Rmount=max(mount[0], 1e-12), Lmount=max(mount[1], 1e-18))
    return spice_lines(series(R("Rmount"), Ind("Lmount"), part), values)


def removed_mount(f, z_measured, z, valid=None) -> tuple[float, float] | None:
    """The series R (Ω) and L (H) of the mount removed from a measurement, fitted to
    ``z_measured − z`` (``bench.core.fixture.fit_mount``), or None when nothing was
    removed. With the pads' open admittance also removed the difference holds a little of
    it too; the series mount dominates at the low impedances of power-delivery parts."""
    from bench.core.fixture import fit_mount

    if z_measured is None:
        return None
    diff = np.asarray(z_measured, dtype=complex) - np.asarray(z, dtype=complex)
    if not np.any(np.abs(diff) > 0):
        return None
    keep = np.isfinite(diff) if valid is None else np.asarray(valid, bool) & np.isfinite(diff)
    if np.count_nonzero(keep) < 3:
        return None
    mount = fit_mount(np.asarray(f, dtype=float), diff, valid=keep)
    return float(mount.r), float(mount.l)
