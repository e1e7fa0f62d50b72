"""The live line of a sample just swept: its landmarks from a quick correction, before any
fit, in the words of :func:`bench.procedure.display.result_line`."""

from __future__ import annotations

from typing import Any

import numpy as np

from bench.procedure.display import result_line


def part_landmarks(part: Any, f: np.ndarray, data: Any, valid: Any = None) -> dict[str, Any]:
    """Landmarks of ``part``'s impedance ``data`` from the points of ``valid`` (default:
    those inside the measurable window), less the lone points the sweep alone shows to
    be no reading of the part (``bench.core.robust``: out of line with the points beside
    them, or standing alone with only noise beside them): the fit, which judges them
    properly, comes later."""
    from bench.core import robust
    from bench.core.landmarks import landmarks_for

    kind = "capacitor" if part.spec.kind in ("mlcc", "bulk") else "inductor"
    inside = np.asarray(data.inside_window if valid is None else valid, dtype=bool)
    z = np.asarray(data.z, dtype=complex)
    u = np.asarray(data.rel_uncertainty, dtype=float)
    measured = np.isfinite(z) & np.isfinite(u)
    doubtful = robust.isolated(f, z, u, inside, measured) | robust.unvouched(u, inside, measured)
    if np.count_nonzero(inside & ~doubtful) >= 3:
        inside = inside & ~doubtful
    return dict(landmarks_for(kind, f, data.z, inside))


def landmark_line(label: str, part: Any, marks: dict[str, Any], data: Any, **extra: Any) -> str:
    """The live line of ``part``: ``marks`` against its nominal value and tolerance, the
    points outside the window, a bead's |Z| at its stated frequency; ``extra`` goes to
    :func:`result_line` (``bias_v``, ``reference``)."""
    from bench.procedure.processing import z_at_nominal

    spec = part.spec
    return result_line(
        label,
        spec.kind,
        marks,
        nominal=spec.nominal,
        tolerance=spec.tolerance,
        outside=data.points_outside_window,
        z_at_nominal=z_at_nominal(spec, data),
        nominal_at_hz=spec.nominal_at_hz if spec.kind == "bead" else None,
        **extra,
    )
