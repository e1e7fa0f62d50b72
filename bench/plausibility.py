"""Plausibility checks on what the bench just captured: is this what was asked for?

Pure functions on arrays (no I/O); each returns ``None`` when the capture is plausible,
else a short text saying what is wrong, for the operator. The runner asks a guided
operator to repeat, and stops an unattended run, on a standard or a mount short that
fails; a part reading at the floor is noted (its verdict becomes CHECK) and the run goes
on, so one empty position does not stop a lot.

The bounds are deliberately loose (a plausibility check catches a wrong or missing
connection, not a marginal one); all are common practice, no source.

- through: the median raw |S21| over the lowest quarter of the sweep lies within
  :data:`THROUGH_DB` of 20·log10(Z0/(Z0 + Rs)), the through seen through the port
  series resistors (docs/references.md §1: a matched through reads 0 dB);
- short, open, load: the median raw |reflection| over the lowest tenth of the sweep at
  both ports lies within :data:`REFLECTION_DISTANCE` of the kit's |Γ| seen through the
  resistors, Γ = (Rs + Zk − Z0)/(Rs + Zk + Z0) with Zk = 0, ∞ or the load resistance
  (magnitude only: the raw phase turns with the cables' delay; a load in place of a
  short or open, or nothing in place of a load, is caught);
- mount short: its median |Z| over the lowest fifth of the sweep is below
  :data:`MOUNT_SHORT_MAX_OHM` (a fitted strap reads milliohms; an empty mount kiloohms),
  on the network analyser's capture and on the gain-phase analyser's (where a fixture
  left on the network analyser's cables reads as an open);
- a part: at least :data:`FLOOR_SHARE` of its points lie outside the measurable window.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from bench.units import format_si

THROUGH_DB = 6.0
REFLECTION_DISTANCE = 0.4
MOUNT_SHORT_MAX_OHM = 0.5
FLOOR_SHARE = 0.9


def _low(f: Any, values: Any, share: float) -> np.ndarray:
    f = np.asarray(f, dtype=float)
    values = np.asarray(values)
    count = max(3, math.ceil(share * f.size))
    order = np.argsort(f)[:count]
    return values[order]


def check_through(f: Any, s: Any, *, z0: float = 50.0, series_r: float = 0.0) -> str | None:
    """The through standard: |S21| (and |S12|) near 20·log10(Z0/(Z0 + Rs))."""
    s = np.asarray(s, dtype=complex)
    expected = 20 * math.log10(z0 / (z0 + series_r))
    for name, trace in (("S21", s[:, 1, 0]), ("S12", s[:, 0, 1])):
        level = 20 * math.log10(float(np.median(np.abs(_low(f, trace, 0.25)))) + 1e-300)
        if abs(level - expected) > THROUGH_DB:
            return (
                f"the through reads |{name}| {level:.1f} dB at low frequency where about "
                f"{expected:.1f} dB is expected: are the two cable ends joined by the "
                "through adapter, and the cables on the analyser's ports?"
            )
    return None


def kit_reflection(
    standard: str, *, z0: float = 50.0, series_r: float = 0.0, load_ohm: float = 50.0
) -> complex:
    """The reflection a short, open or load shows through the port series resistor."""
    if standard == "open":
        return 1.0 + 0j
    z = series_r + (0.0 if standard == "short" else load_ohm)
    return complex((z - z0) / (z + z0))


def check_reflection(
    standard: str,
    f: Any,
    s: Any,
    *,
    z0: float = 50.0,
    series_r: float = 0.0,
    load_ohm: float = 50.0,
) -> str | None:
    """A short, open or load: raw |S11| and |S22| near the kit's |Γ| at low frequency."""
    s = np.asarray(s, dtype=complex)
    expected = kit_reflection(standard, z0=z0, series_r=series_r, load_ohm=load_ohm)
    for port, trace in ((1, s[:, 0, 0]), (2, s[:, 1, 1])):
        level = float(np.median(np.abs(_low(f, trace, 0.1))))
        if abs(level - abs(expected)) > REFLECTION_DISTANCE:
            return (
                f"port {port} does not look like a {standard}: |reflection| {level:.2f} "
                f"where about {abs(expected):.2f} is expected; is the {standard} on that "
                "cable end?"
            )
    return None


def _short_level(f: Any, z_short: Any) -> float | None:
    """The median |Z| (Ω) of a strap capture over the lowest fifth of its sweep, when it
    is above :data:`MOUNT_SHORT_MAX_OHM` (or not a number); None when it is plausible."""
    z = np.asarray(z_short, dtype=complex)
    level = float(np.median(np.abs(_low(f, z, 0.2))))
    if not math.isfinite(level) or level > MOUNT_SHORT_MAX_OHM:
        return level
    return None


def check_mount_short(f: Any, z_short: Any, position: int) -> str | None:
    """The mount short: |Z| at low frequency below :data:`MOUNT_SHORT_MAX_OHM`."""
    level = _short_level(f, z_short)
    if level is None:
        return None
    return (
        f"the mount short at position {position} reads {level:.3g} Ω at low frequency, "
        f"more than {MOUNT_SHORT_MAX_OHM:g} Ω: is the shorting strap fitted and pressed "
        "down in that position?"
    )


def check_gain_phase_short(f: Any, z_short: Any, position: int) -> str | None:
    """The gain-phase analyser's sweep of a mount short (its receiver ratio as an
    impedance, receiver B's input removed): |Z| at low frequency below
    :data:`MOUNT_SHORT_MAX_OHM`, as for the network analyser's."""
    level = _short_level(f, z_short)
    if level is None:
        return None
    return (
        f"the gain-phase analyser reads the mount short at position {position} as "
        f"{level:.3g} Ω at low frequency, more than {MOUNT_SHORT_MAX_OHM:g} Ω: is the "
        "gain-phase analyser connected to the fixture, and the shorting strap fitted and "
        "pressed down in that position?"
    )


def check_part(inside_window: Any, label: str) -> str | None:
    """A part reading at the set-up's floor or ceiling (most points outside the window)."""
    inside = np.asarray(inside_window, dtype=bool)
    if inside.size == 0:
        return None
    share = 1.0 - float(inside.mean())
    if share >= FLOOR_SHARE:
        return (
            f"{label} reads at the limits of the set-up ({100 * share:.0f} % of its points "
            "outside the measurable window): is the part seated, and the right part for "
            "this set-up?"
        )
    return None


# A frequency screened out of this share of a run's fitted samples (and of at least
# SHARED_MIN of them) is the set-up's, not the parts'.
SHARED_SHARE = 0.5
SHARED_MIN = 3


def shared_screening(samples: Any) -> str | None:
    """A note when the fits of many samples left out a point at the same frequency.

    ``samples`` have ``label``, ``data.f`` and ``fit`` (its ``point_status``, or None).
    A glitch, a lone point out of line or a negative resistance (``bench.core.robust``)
    at one frequency in at least :data:`SHARED_SHARE` of the fitted samples, and in at
    least :data:`SHARED_MIN`, came with a capture they share (a calibration standard, the
    through, a mount short), not with the parts: worth repeating that capture. None when
    no frequency is shared so."""
    from bench.core.robust import IN_BAND, screened

    counts: dict[float, int] = {}
    fitted = 0
    for sample in samples:
        status = getattr(sample.fit, "point_status", None) or ()
        f = np.asarray(sample.data.f, dtype=float)
        if len(status) != f.size:
            continue
        fitted += 1
        for value in np.unique(
            np.float32(f[screened(status, f.size, IN_BAND)])
        ):  # grids agree to 7 digits
            counts[float(value)] = counts.get(float(value), 0) + 1
    need = max(SHARED_MIN, math.ceil(SHARED_SHARE * fitted))
    shared = sorted(f for f, n in counts.items() if n >= need)
    if not shared:
        return None
    listed = ", ".join(f"{format_si(f, 'Hz')} ({counts[f]} of {fitted})" for f in shared[:6])
    more = f" and {len(shared) - 6} more" if len(shared) > 6 else ""
    return (
        f"the fits of many samples left out a point at the same frequency: {listed}{more}; "
        "shared by so many parts, it came with a capture they share (a calibration "
        "standard, the through or a mount short), not with the parts; repeat that capture "
        "if the points matter"
    )
