"""SPICE text of fitted models: one ``.subckt NAME 1 2`` per part and a library of them.

Pin 1 to pin 2 is the part. The subcircuit carries, as ``*`` comments, the model family,
the landmarks, the fit quality and the measurement's provenance, so a model file found
alone still says where it came from. Comments are plain ASCII ("uF", "mOhm", "+/-"), as
some SPICE readers reject any other byte even in a comment; element values are plain SI
numbers in exponent notation (``1.2e-09``), which every SPICE reads. Networks without a
DC path get a 1e12 Ω bleed resistor so that an operating point exists (ngspice stops on a
floating node otherwise). Text only; no I/O here.
"""

from __future__ import annotations

import re
import unicodedata
from collections.abc import Mapping, Sequence

from bench.core.fitting import FitResult
from bench.units import format_si

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
_ELEMENT_UNITS = {"R": "Ohm", "L": "H", "C": "F"}


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
    """SPICE subcircuit text of ``result`` named ``name`` (sanitised), pins ``1 2``.

    ``provenance`` holds what the measurement was (file, part, sample, run, date,
    fixture, ...); each entry becomes a comment line.
    """
    sub = spice_name(name)
    q = result.quality
    lines = [
        _comment(
            f"{sub}: zbench {result.model} model (order {result.order}) of "
            f"{'an' if result.kind[:1] in 'aeiou' else 'a'} {result.kind}"
        ),
        _comment(
            f"fitted from {format_si(result.f_range[0], 'Hz')} to "
            f"{format_si(result.f_range[1], 'Hz')}, {q.points_used} points used, "
            f"{q.points_outside_window} outside the measurable window"
        ),
        _comment(
            f"fit quality: rms_log_error {q.rms_log_error:.4g}, max_abs_log_error "
            f"{q.max_abs_log_error:.4g}, bound {result.quality_bound:.4g} "
            f"({'met' if result.meets_quality else 'NOT met'})"
        ),
    ]
    marks = []
    for key, value in result.landmarks.items():
        text = "n/a" if value is None else format_si(value, _LANDMARK_UNITS.get(key, ""))
        marks.append(f"{key} = {text}")
    if marks:
        lines.append(_comment("landmarks (from the model): " + ", ".join(marks)))
    elements = []
    for key, value in result.elements.items():
        sigma = result.uncertainties.get(key)
        unit = _ELEMENT_UNITS.get(key[0], "")
        text = format_si(value, unit)
        if sigma is not None and value > 0:
            text += f" +/- {100 * sigma / value:.2g} %"
        elements.append(f"{key} = {text}")
    lines.append(_comment("elements: " + ", ".join(elements)))
    for key, value in provenance.items():
        lines.append(_comment(f"{key}: {value}"))
    for warning in result.warnings:
        lines.append(_comment(f"warning: {warning}"))
    lines.append(f".subckt {sub} 1 2")
    lines.extend(result.spice_lines())
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
