"""Figures of a measurement and its fit, readable in print.

Every function builds a :class:`matplotlib.figure.Figure` directly (no pyplot, no global
state, Agg rendering) and returns it; :func:`save_png` writes one atomically and
:func:`png_bytes` renders one in memory for embedding in the report.

The style is our own and neutral: dark, print-safe colours, and every series also has
its own line style or marker so the figures read the same in grey-scale. Frequencies
are in Hz and impedances in Ω, labelled with SI prefixes (``10 kHz``, ``1 mΩ``).

Inputs are duck-typed on the contracts of :mod:`bench.core`: ``data`` is an
``ImpedanceData`` (``f``, ``z``, ``rel_uncertainty``, ``inside_window``, ``window``
with ``z_min``/``z_max`` in Ω) and ``fit`` a ``FitResult`` (``model``, ``landmarks``,
``quality``, ``impedance(f)``).
"""

from __future__ import annotations

import contextlib
import io
import math
import os
from collections.abc import Iterable, Iterator, Mapping, Sequence
from typing import Any

import matplotlib
import numpy as np
from matplotlib.axes import Axes
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure
from matplotlib.ticker import EngFormatter, LogLocator, NullFormatter, NullLocator
from matplotlib.transforms import ScaledTranslation

from bench.core.robust import IN_BAND, screened
from bench.files import atomic_write_bytes
from bench.units import format_si

# Print-safe colours (dark enough on white, distinct in grey-scale together with the
# line styles and markers below). Our own choice, not a library theme.
COLOURS = ("#1b1b1b", "#2f5d8a", "#a0522d", "#3d7a3d", "#6a3d7a", "#7a6a1f", "#555555")
LINESTYLES = ("-", "--", "-.", ":", (0, (5, 1, 1, 1, 1, 1)), (0, (1, 1)), (0, (8, 2)))
MARKERS = ("o", "s", "^", "D", "v", "P", "X")

MEASURED_COLOUR = "#1b1b1b"
MODEL_COLOUR = "#b03a2e"
OUTSIDE_COLOUR = "#b03a2e"
WINDOW_FACE = "#9bb7d4"
#: The ±1σ measurement band: another hue and a hatch, so it never reads as the window.
SIGMA_FACE = "#e3c27a"
SIGMA_HATCH = "...."
NEGATIVE_COLOUR = "#6a3d7a"

STYLE: dict[str, Any] = {
    "font.size": 9.0,
    "axes.titlesize": 10.0,
    "axes.labelsize": 9.0,
    "legend.fontsize": 8.0,
    "xtick.labelsize": 8.0,
    "ytick.labelsize": 8.0,
    "axes.grid": True,
    "axes.grid.which": "both",
    "grid.color": "#c8c8c8",
    "grid.linewidth": 0.5,
    "axes.edgecolor": "#333333",
    "axes.linewidth": 0.8,
    "lines.linewidth": 1.3,
    "legend.frameon": True,
    "legend.framealpha": 0.9,
    "legend.edgecolor": "#999999",
}

DPI = 110
#: Stored PNGs are at least this wide (pixels), large enough for a slide; the
#: resolution follows from the figure's width (see :func:`slide_dpi`).
SLIDE_WIDTH_PX = 1600
#: Palette size of the stored PNGs (see :func:`png_bytes`).
PALETTE_COLOURS = 64
#: Distance (inches) of the y axis label's near edge left of its panel, and of the x
#: axis label's top below it: clear of the widest tick labels these figures carry
#: ("100 mΩ" at 8 pt is about 0.45 in with its tick and pad; a frequency label about
#: 0.2 in tall with them). Fixed rather than placed by measuring every tick label of
#: every panel that shares the axis at each draw (about a tenth of a figure's drawing
#: time); the labels of stacked panels then also line up.
YLABEL_OFFSET_IN = 0.62
XLABEL_OFFSET_IN = 0.24


def series_style(index: int) -> dict[str, Any]:
    """Colour, line style and marker of the ``index``-th series of an overlay."""
    return {
        "color": COLOURS[index % len(COLOURS)],
        "linestyle": LINESTYLES[index % len(LINESTYLES)],
        "marker": MARKERS[index % len(MARKERS)],
    }


#: Figures kept for reuse (kind and layout -> Figure), and whether reuse is on: see
#: :func:`reusing_figures`.
_KEPT: dict[tuple[Any, ...], Figure] = {}
_REUSING = False


@contextlib.contextmanager
def reusing_figures() -> Iterator[None]:
    """Within this block the sample and lot figures reuse one :class:`Figure` per layout.

    For a caller that renders each figure and lets it go (the report draws dozens in each
    worker process): the axes, their tick objects and the canvas are made once per
    process and only the plotted artists, limits and labels change between figures. The
    pixels are those of a fresh figure. A figure returned inside the block is valid until
    the next figure of its kind is made."""
    global _REUSING
    previous, _REUSING = _REUSING, True
    try:
        yield
    finally:
        _REUSING = previous


def _reset(fig: Figure) -> None:
    """Put a reused figure back to the state :func:`_new_figure` left it in: no plotted
    artists, legends or titles, linear scales, limits free to follow the data."""
    for legend in list(fig.legends):
        legend.remove()
    if fig._suptitle is not None:
        fig._suptitle.remove()
        fig._suptitle = None
    for ax in fig.axes:
        for artist in [*ax.lines, *ax.collections, *ax.patches, *ax.texts, *ax.images]:
            artist.remove()
        if ax.legend_ is not None:
            ax.legend_.remove()
        for title in (ax.title, ax._left_title, ax._right_title):
            title.set_text("")
        ax.set_xlabel("")
        ax.set_ylabel("")
    for ax in fig.axes:
        ax.relim()
        ax.set_autoscale_on(True)
        ax._request_autoscale_view()


def _new_figure(
    rows: int,
    *,
    height: float,
    width: float = 7.0,
    height_ratios: Sequence[float] | None = None,
    gap: float = 0.35,
    top: float = 0.32,
    reuse_as: str | None = None,
) -> tuple[Figure, list[Axes]]:
    # Fixed margins (in inches, so they hold for any figure size) rather than a layout
    # engine: a report draws dozens of figures and constrained layout doubles their cost.
    # ``gap`` is the space between panels and ``top`` the margin above them, in inches.
    # ``reuse_as``: the figure's kind, for :func:`reusing_figures`.
    key = (reuse_as, rows, height, width, tuple(height_ratios or ()), gap, top)
    if reuse_as is not None and _REUSING and key in _KEPT:
        fig = _KEPT[key]
        with matplotlib.rc_context(STYLE):
            _reset(fig)
        return fig, list(fig.axes)
    with matplotlib.rc_context(STYLE):
        fig = Figure(figsize=(width, height))
        axes = fig.subplots(
            rows,
            1,
            sharex=True,
            squeeze=False,
            gridspec_kw={"height_ratios": height_ratios} if height_ratios else None,
        )[:, 0]
        bottom, top = 0.5 / height, 1 - top / height
        panel = (top - bottom) * height / rows
        fig.subplots_adjust(
            left=0.85 / width,
            right=1 - 0.2 / width,
            bottom=bottom,
            top=top,
            hspace=gap / panel,
        )
        for ax in axes:
            ax.yaxis.set_label_coords(
                0.0,
                0.5,
                ax.transAxes + ScaledTranslation(-YLABEL_OFFSET_IN, 0, fig.dpi_scale_trans),
            )
            ax.xaxis.set_label_coords(
                0.5,
                0.0,
                ax.transAxes + ScaledTranslation(0, -XLABEL_OFFSET_IN, fig.dpi_scale_trans),
            )
    if reuse_as is not None and _REUSING:
        _KEPT[key] = fig
    return fig, list(axes)


def _log_axes(ax: Axes, *, x_unit: str = "Hz", y_unit: str | None = "Ω") -> None:
    """Log axes with SI-prefixed decade labels and a light grid.

    Minor ticks are switched off: on log axes matplotlib builds a tick object (two marks,
    a grid line and two labels) for every minor position, and over a six-decade sweep
    that is most of a figure's drawing time. :func:`_minor_grid` draws the same light
    grid as one line collection instead, once the limits are settled.
    """
    if ax.get_xscale() != "log":  # panels sharing the axis are set with the first one
        ax.set_xscale("log")
    ax.xaxis.set_major_formatter(EngFormatter(unit=x_unit, sep=" "))
    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.xaxis.set_minor_locator(NullLocator())
    if y_unit is not None:
        ax.set_yscale("log")
        ax.yaxis.set_major_formatter(EngFormatter(unit=y_unit, sep=" "))
        ax.yaxis.set_minor_formatter(NullFormatter())
        ax.yaxis.set_minor_locator(NullLocator())
    ax.grid(True, which="major", color="#b4b4b4", linewidth=0.6)


MINOR_GRID = {"colors": "#e2e2e2", "linewidths": 0.4, "zorder": 0.4}


def _log_minor_positions(lo: float, hi: float) -> np.ndarray:
    """2…9 × 10^k inside (lo, hi): where a log axis puts its minor grid."""
    if not (lo > 0 and hi > lo and math.isfinite(hi)):
        return np.empty(0)
    decades = np.arange(math.floor(math.log10(lo)), math.ceil(math.log10(hi)) + 1)
    values = (np.arange(2, 10)[None, :] * 10.0 ** decades[:, None]).ravel()
    return values[(values > lo) & (values < hi)]


def _finish(fig: Figure) -> None:
    """Last touches once everything is plotted (the minor grid, see :func:`_minor_grid`).

    Titles are given ``y=1.0``: a title left to place itself makes matplotlib measure
    the axes' tick labels at every draw, and these sit above plain axes.
    """
    _minor_grid(fig)


def _minor_grid(fig: Figure) -> None:
    """Draw the light minor grid of every log axis of ``fig`` as line collections.

    Call once all data is plotted: the current limits are frozen so the grid and the
    data agree. Axes that show labelled minor ticks (a short log range) keep those. The
    lines are placed in axes coordinates (their log positions worked out here), so
    drawing them needs no per-line log transform.
    """
    for ax in fig.axes:
        if ax.get_xscale() == "log" and isinstance(ax.xaxis.get_minor_locator(), NullLocator):
            lo, hi = ax.get_xlim()
            ax.set_xlim(lo, hi)
            segments = [((u, 0.0), (u, 1.0)) for u in _axes_fractions(lo, hi)]
            ax.add_collection(
                LineCollection(segments, transform=ax.transAxes, **MINOR_GRID), autolim=False
            )
        if ax.get_yscale() == "log" and isinstance(ax.yaxis.get_minor_locator(), NullLocator):
            lo, hi = ax.get_ylim()
            ax.set_ylim(lo, hi)
            segments = [((0.0, v), (1.0, v)) for v in _axes_fractions(lo, hi)]
            ax.add_collection(
                LineCollection(segments, transform=ax.transAxes, **MINOR_GRID), autolim=False
            )


def _axes_fractions(lo: float, hi: float) -> np.ndarray:
    """The minor grid's positions inside the log range (lo, hi) as fractions of it."""
    values = _log_minor_positions(lo, hi)
    if values.size == 0:
        return values
    return (np.log10(values) - math.log10(lo)) / (math.log10(hi) - math.log10(lo))


def _label_short_log_range(ax: Axes, unit: str, axis: str = "y") -> None:
    """Label 2 and 5 between decades when the ``axis`` range spans less than two decades.

    With only decade labels a narrow range (an ESR that barely changes, a sweep of one
    decade) would show one number or none.
    """
    lo, hi = ax.get_ylim() if axis == "y" else ax.get_xlim()
    if lo <= 0 or hi <= 0 or math.log10(hi / lo) >= 2.0:
        return
    scale = ax.yaxis if axis == "y" else ax.xaxis
    scale.set_minor_locator(LogLocator(base=10.0, subs=(2.0, 5.0)))
    scale.set_minor_formatter(EngFormatter(unit=unit, sep=" "))


def _positive(values: np.ndarray) -> np.ndarray:
    """Values with the non-positive ones masked (a log axis cannot show them)."""
    out = np.asarray(values, dtype=float).copy()
    out[~(out > 0)] = np.nan
    return out


def _window_bounds(data: Any) -> tuple[np.ndarray, np.ndarray] | None:
    window = getattr(data, "window", None)
    if window is None:
        return None
    z_min = getattr(window, "z_min", None)
    z_max = getattr(window, "z_max", None)
    if z_min is None or z_max is None:
        return None
    if not (np.isfinite(z_max) and z_min > 0):
        return None  # data taken as given: no window to shade
    f = np.asarray(data.f, dtype=float)
    lo = np.broadcast_to(np.asarray(z_min, dtype=float), f.shape)
    hi = np.broadcast_to(np.asarray(z_max, dtype=float), f.shape)
    return lo, hi


def _outside_mask(data: Any) -> np.ndarray:
    inside = getattr(data, "inside_window", None)
    if inside is None:
        return np.zeros(np.shape(data.f), dtype=bool)
    return ~np.asarray(inside, dtype=bool)


#: The fates of points inside the fitted band that the fit's screening left out
#: (``FitResult.point_status``), marked point by point; a screened band edge is hatched
#: with the other ends of the sweep the fit did not use.
SCREENED = IN_BAND
SCREENED_COLOUR = "#a0522d"
_SCREENED_MARKER = {
    "linestyle": "none",
    "marker": "o",
    "markersize": 4.5,
    "markerfacecolor": "none",
    "markeredgecolor": SCREENED_COLOUR,
    "markeredgewidth": 1.0,
}


def _point_status(fit: Any, f: np.ndarray) -> np.ndarray | None:
    """The fit's ``point_status`` of the points ``f``; None when it does not say (no
    fit, or a fit made on other points)."""
    status = getattr(fit, "point_status", None)
    if status is None or len(status) != f.size:
        return None
    return np.asarray(status, dtype=object)


def _screened_mask(fit: Any, f: np.ndarray) -> np.ndarray:
    """The points of ``f`` that the fit's screening left out (:data:`SCREENED`)."""
    return screened(getattr(fit, "point_status", None), f.size, SCREENED)


def _mark_screened_residuals(ax: Axes, f: np.ndarray, values: np.ndarray) -> None:
    """Screened points on a residual panel whose scale is set: those beyond it drawn
    at its edge as a triangle pointing their way, so a glitch is seen, not clipped."""
    lo, hi = ax.get_ylim()
    ax.set_autoscaley_on(False)
    clamped = np.clip(values, lo, hi)
    for where, marker in ((values > hi, "^"), (values < lo, "v")):
        if np.any(where):
            ax.plot(
                f[where], clamped[where], clip_on=False, **{**_SCREENED_MARKER, "marker": marker}
            )
    within = ~((values > hi) | (values < lo))
    if np.any(within):
        ax.plot(f[within], values[within], **_SCREENED_MARKER)


def _landmark_lines(ax: Axes, fit: Any, f: np.ndarray | None = None) -> None:
    """A thin vertical line at the resonance, the landmark an engineer looks for first;
    none for a resonance beyond the measured sweep ``f`` (the model's extrapolation, which
    the fit's warning states: a line there would stretch the axis over decades of no data)."""
    srf = (getattr(fit, "landmarks", None) or {}).get("srf")
    if srf is None or not math.isfinite(srf) or srf <= 0:
        return
    if f is not None and np.size(f) >= 1 and not float(np.min(f)) <= srf <= float(np.max(f)):
        return
    ax.axvline(srf, color="#666666", linewidth=0.8, linestyle=(0, (2, 2)), zorder=1)
    # Near the right edge the label goes to the left of the line, so it is never clipped.
    right = False
    if f is not None and np.size(f) >= 2 and f[0] > 0:
        lo, hi = math.log(f[0]), math.log(f[-1])
        right = hi > lo and (math.log(srf) - lo) / (hi - lo) > 0.7
    ax.annotate(
        f"SRF {format_si(srf, 'Hz', 4)}",
        xy=(srf, 1.0),
        xycoords=("data", "axes fraction"),
        xytext=(-3 if right else 3, -3),
        textcoords="offset points",
        ha="right" if right else "left",
        va="top",
        fontsize=7.5,
        color="#444444",
    )


def _unused_spans(ax: Axes, f: np.ndarray, fit: Any, *, label: bool) -> None:
    """Hatch the ends of the sweep that the fit left out (``fit.f_range``, Hz).

    A run may drop points for reasons beyond the window (a ground loop below a corner,
    ``--fmin``/``--fmax``); the reader should see which measured points the model answers to.
    """
    f_range = getattr(fit, "f_range", None)
    if f_range is None or f.size < 2:
        return
    lo, hi = (float(v) for v in f_range)
    spans = []
    if math.isfinite(lo) and lo > f[0] * (1 + 1e-9):
        spans.append((f[0], lo))
    if math.isfinite(hi) and hi < f[-1] * (1 - 1e-9):
        spans.append((hi, f[-1]))
    for index, (start, stop) in enumerate(spans):
        ax.axvspan(
            start,
            stop,
            facecolor="none",
            edgecolor="#b0b0b0",
            hatch="///",
            linewidth=0,
            zorder=0.5,
            label="not used by the fit" if label and index == 0 else None,
        )


def _re_label(kind: str | None) -> str:
    """Label of the Re Z panel: ESR for a capacitor, the series resistance otherwise."""
    return "Re Z" if kind is None else ("ESR = Re Z" if kind == "capacitor" else "R = Re Z")


def _mark_non_positive(ax: Axes, f: np.ndarray, values: np.ndarray) -> None:
    """Mark points a log axis cannot show (Re Z ≤ 0) on the panel's floor, counted."""
    values = np.asarray(values, dtype=float)
    bad = np.isfinite(values) & (values <= 0)
    if not bad.any():
        return
    ax.plot(
        f[bad],
        np.full(int(bad.sum()), 0.02),
        transform=ax.get_xaxis_transform(),
        linestyle="none",
        marker="v",
        markersize=3.5,
        color=NEGATIVE_COLOUR,
        clip_on=False,
        label=f"Re Z ≤ 0, not on the log axis ({int(bad.sum())})",
    )


def _draw_impedance(
    ax_mag: Axes, ax_esr: Axes, data: Any, fit: Any, *, legends: bool = True
) -> None:
    """|Z| (with the window) and ESR of ``data``, the model of ``fit`` dashed."""
    f = np.asarray(data.f, dtype=float)
    z = np.asarray(data.z, dtype=complex)
    outside = _outside_mask(data)
    bounds = _window_bounds(data)
    if bounds is not None:
        lo, hi = bounds
        ax_mag.fill_between(
            f, lo, hi, color=WINDOW_FACE, alpha=0.22, linewidth=0, label="measurable window"
        )
        ax_mag.plot(f, lo, color="#5a7fa6", linewidth=0.7, linestyle=":")
        ax_mag.plot(f, hi, color="#5a7fa6", linewidth=0.7, linestyle=":")
    ax_mag.plot(f, _positive(np.abs(z)), color=MEASURED_COLOUR, label="measured")
    ax_esr.plot(f, _positive(z.real), color=MEASURED_COLOUR, label="measured Re Z")
    if fit is not None:
        zm = np.asarray(fit.impedance(f), dtype=complex)
        label = f"model ({fit.model})"
        ax_mag.plot(f, np.abs(zm), color=MODEL_COLOUR, linestyle="--", label=label)
        ax_esr.plot(f, _positive(zm.real), color=MODEL_COLOUR, linestyle="--", label=label)
        _landmark_lines(ax_mag, fit, f)
        _landmark_lines(ax_esr, fit, f)
        _unused_spans(ax_mag, f, fit, label=True)
        _unused_spans(ax_esr, f, fit, label=False)
    outside_marker = {
        "linestyle": "none",
        "marker": "x",
        "markersize": 4,
        "color": OUTSIDE_COLOUR,
        "markeredgewidth": 0.9,
    }
    for mask, label, marker in (
        (outside, "outside window", outside_marker),
        (_screened_mask(fit, f), "screened out of the fit", _SCREENED_MARKER),
    ):
        if mask.any():
            ax_mag.plot(
                f[mask],
                _positive(np.abs(z[mask])),
                label=f"{label} ({int(mask.sum())})",
                **marker,
            )
            ax_esr.plot(f[mask], _positive(z.real[mask]), **marker)
    _log_axes(ax_mag)
    _log_axes(ax_esr)
    _label_short_log_range(ax_mag, "Ω")
    _label_short_log_range(ax_esr, "Ω")
    _label_short_log_range(ax_esr, "Hz", axis="x")
    _mark_non_positive(ax_esr, f, z.real)
    ax_mag.set_ylabel("|Z| (Ω)")
    ax_esr.set_ylabel(_re_label(getattr(fit, "kind", None)) + " (Ω)")
    if legends:
        ax_mag.legend(loc="best")
        ax_esr.legend(loc="best")


def _draw_residuals(
    ax_mag: Axes, ax_ph: Axes, data: Any, fit: Any, *, legends: bool = True
) -> None:
    """Complex-log error of ``fit`` against ``data``: magnitude (%) and phase (°)."""
    f = np.asarray(data.f, dtype=float)
    z = np.asarray(data.z, dtype=complex)
    zm = np.asarray(fit.impedance(f), dtype=complex)
    with np.errstate(divide="ignore", invalid="ignore"):
        delta = np.log(zm) - np.log(z)
    mag_pct = 100.0 * delta.real
    # Wrap the phase difference into (−180°, 180°] so a branch cut never shows as a jump.
    phase_deg = np.degrees(np.angle(np.exp(1j * delta.imag)))
    outside = _outside_mask(data)
    rel = getattr(data, "rel_uncertainty", None)
    if rel is not None:
        band = 100.0 * np.clip(np.asarray(rel, dtype=float), 0, 10.0)
        sigma = {
            "facecolor": SIGMA_FACE,
            "edgecolor": "#b08a3a",
            "hatch": SIGMA_HATCH,
            "alpha": 0.45,
            "linewidth": 0,
        }
        ax_mag.fill_between(f, -band, band, label="±1σ measurement", **sigma)
        band_deg = np.degrees(np.clip(np.asarray(rel, dtype=float), 0, math.pi))
        ax_ph.fill_between(f, -band_deg, band_deg, **sigma)
    screened = _screened_mask(fit, f)
    inside = ~outside & ~screened
    # The scale follows the points the fit used, where it says which: a glitch or a band
    # edge far off would otherwise set it and flatten the rest.
    status = _point_status(fit, f)
    counted = inside if status is None else status == "used"
    ax_mag.plot(
        f, np.where(inside, mag_pct, np.nan), color=MEASURED_COLOUR, label="model − measured"
    )
    ax_ph.plot(f, np.where(inside, phase_deg, np.nan), color=MEASURED_COLOUR)
    if outside.any():
        marker = {
            "linestyle": "none",
            "marker": "x",
            "markersize": 3.5,
            "color": OUTSIDE_COLOUR,
        }
        ax_mag.plot(f[outside], mag_pct[outside], label="outside window", **marker)
        ax_ph.plot(f[outside], phase_deg[outside], **marker)
    for ax in (ax_mag, ax_ph):
        _log_axes(ax, y_unit=None)
        ax.axhline(0.0, color="#666666", linewidth=0.7)
    _unused_spans(ax_mag, f, fit, label=False)
    _unused_spans(ax_ph, f, fit, label=False)
    # Keep the scale on the points that count (outside points may be far off), wide
    # enough that the typical uncertainty band shows its edges.
    typical = None
    if rel is not None and np.any(counted):
        typical = float(np.nanmedian(np.asarray(rel, dtype=float)[counted]))
    _limit_to(ax_mag, mag_pct[counted], None if typical is None else 100.0 * typical)
    _limit_to(ax_ph, phase_deg[counted], None if typical is None else math.degrees(typical))
    if screened.any():
        _mark_screened_residuals(ax_mag, f[screened], mag_pct[screened])
        _mark_screened_residuals(ax_ph, f[screened], phase_deg[screened])
    ax_mag.set_ylabel("magnitude error (%)")
    ax_ph.set_ylabel("phase error (°)")
    if legends:
        ax_mag.legend(loc="best")


def _rms_text(fit: Any) -> str:
    rms = getattr(getattr(fit, "quality", None), "rms_log_error", None)
    return "" if rms is None else f"RMS complex-log error {rms:.3g}"


_REPEATED_LABELS = frozenset({"measured Re Z", "model − measured", "outside window"})


#: Colours of the set-ups a stitched curve came from: apart from the measured curve, the
#: model, the window's shading and the ±1σ band.
SETUP_COLOURS = ("tab:green", "tab:purple", "tab:orange", "tab:olive")


def _draw_setups(ax: Axes, setups: Sequence[tuple[str, Any]]) -> None:
    """Each set-up of a stitched curve on the |Z| panel: its points inside its own window
    (a thin line in its colour) and that window's floor and ceiling (dotted)."""
    for i, (label, data) in enumerate(setups):
        colour = SETUP_COLOURS[i % len(SETUP_COLOURS)]
        f = np.asarray(data.f, dtype=float)
        z = np.abs(np.asarray(data.z, dtype=complex))
        inside = np.asarray(data.inside_window, dtype=bool)
        window = data.window
        span = f"{format_si(window.z_min, 'Ω', 3)} to {format_si(window.z_max, 'Ω', 3)}"
        ax.plot(
            f,
            np.where(inside & (z > 0), z, np.nan),
            color=colour,
            linewidth=1.0,
            alpha=0.85,
            label=f"{label}, window {span}",
        )
        for edge in (window.z_min, window.z_max):
            if math.isfinite(edge) and edge > 0:
                ax.axhline(edge, color=colour, linestyle=":", linewidth=0.9)


def sample_figure(
    data: Any, fit: Any = None, *, title: str = "", setups: Sequence[tuple[str, Any]] = ()
) -> Figure:
    """One figure per measured sample: |Z|, ESR and, with a fit, the fit residuals.

    ``setups`` (``(method, ImpedanceData)`` pairs) are the set-ups a stitched ``data``
    came from: each is drawn on the |Z| panel inside its own window, with that window's
    limits dotted in its colour.

    Four panels on one frequency axis (Hz, log): |Z| with the measurable window shaded
    (Ω, ``data.window.z_min`` … ``z_max``), ESR = Re Z (Ω), the model's magnitude error
    (%) and its phase error (°) against the measurement, with the ±1σ measurement band.
    Points outside the window are crosses; points the fit's screening left out inside
    its band (a glitch, a lone point, negative resistance: ``fit.point_status``) are
    open circles, drawn at the edge of a residual panel (a triangle) when beyond its
    scale, which is set by the points the fit used; ends of the sweep the fit left out
    (a screened band edge among them) are hatched. Without a fit only the two impedance
    panels are drawn.
    """
    if fit is None:
        fig, (ax_mag, ax_esr) = _new_figure(2, height=5.5, top=0.95, reuse_as="sample")
        axes = [ax_mag, ax_esr]
    else:
        fig, axes = _new_figure(
            4,
            height=8.2,
            height_ratios=(3.0, 2.2, 1.3, 1.3),
            gap=0.3,
            top=0.95,
            reuse_as="sample",
        )
        ax_mag, ax_esr = axes[:2]
    with matplotlib.rc_context(STYLE):
        _draw_impedance(ax_mag, ax_esr, data, fit, legends=False)
        if len(setups) > 1:
            _draw_setups(ax_mag, setups)
        if fit is not None:
            _draw_residuals(axes[2], axes[3], data, fit, legends=False)
            axes[2].set_title(
                f"model − measured ({_rms_text(fit)})", fontsize=8.5, loc="left", y=1.0
            )
        axes[-1].set_xlabel("frequency (Hz)")
        # One legend for every panel, in a row under the title: nothing is hidden behind
        # it, and there is no search for the emptiest corner of each panel.
        handles: dict[str, Any] = {}
        for ax in axes:
            for handle, label in zip(*ax.get_legend_handles_labels(), strict=True):
                # The ESR and residual panels repeat the |Z| panel's entries under other
                # names; their own titles and axis labels say what they show.
                if label not in _REPEATED_LABELS:
                    handles.setdefault(label, handle)
        fig.legend(
            list(handles.values()),
            list(handles),
            loc="upper center",
            bbox_to_anchor=(0.5, 1 - 0.32 / fig.get_figheight()),
            ncol=min(3, max(1, len(handles))),
            fontsize=7.5,
        )
        if title:
            fig.suptitle(title, y=1 - 0.06 / fig.get_figheight(), va="top", fontsize=10)
        _finish(fig)
    return fig


def impedance_figure(data: Any, fit: Any = None, *, title: str = "") -> Figure:
    """|Z| and ESR (Re Z) versus frequency, log-log, with the model and the window.

    The measurable window (``data.window.z_min`` … ``z_max``, Ω) is shaded on the |Z|
    panel; points outside it are marked with crosses on both panels. Non-positive
    Re Z (noise around a near-lossless point) cannot be shown on a log axis: those
    points are marked with triangles on the ESR panel's floor and counted in the legend.
    """
    fig, (ax_mag, ax_esr) = _new_figure(2, height=5.6)
    with matplotlib.rc_context(STYLE):
        _draw_impedance(ax_mag, ax_esr, data, fit)
        ax_esr.set_xlabel("frequency (Hz)")
        if title:
            ax_mag.set_title(title, y=1.0)
        _finish(fig)
    return fig


def residuals_figure(data: Any, fit: Any, *, title: str = "") -> Figure:
    """Complex-log error of the model against the measurement, versus frequency.

    ln Z_model − ln Z_measured is split into its real part (magnitude error, shown as
    a percentage: 100·Re) and its imaginary part (phase error, degrees). The measured
    per-point uncertainty (one sigma, ``data.rel_uncertainty``) is shaded as a band
    so a reader sees where the model sits within what the bench can resolve.
    """
    fig, (ax_mag, ax_ph) = _new_figure(2, height=4.2)
    with matplotlib.rc_context(STYLE):
        _draw_residuals(ax_mag, ax_ph, data, fit)
        ax_ph.set_xlabel("frequency (Hz)")
        heading = title or "fit residuals"
        rms = _rms_text(fit)
        ax_mag.set_title(f"{heading}   ({rms})" if rms else heading, y=1.0)
        _finish(fig)
    return fig


def _limit_to(ax: Axes, values: np.ndarray, band: float | None = None) -> None:
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return
    span = float(np.max(np.abs(finite)))
    if band is not None and math.isfinite(band):
        span = max(span, band)
    span = max(span * 1.15, 1e-3)
    current = ax.get_ylim()
    ax.set_ylim(max(current[0], -span), min(current[1], span))


def bias_figure(
    part: str,
    curves: Mapping[str, tuple[Sequence[float], Sequence[float]]],
    *,
    nominal: float | None = None,
) -> Figure:
    """Capacitance versus DC bias for the samples of one part.

    ``curves`` maps a sample name to ``(bias_v, c_farad)``. The upper panel shows the
    capacitance (F, SI prefixes), the lower the change from the sample's lowest bias
    point in percent (labelled "from 0 V" when every sample starts there). ``nominal``
    (F), when given, is drawn as a reference line.
    """
    fig, (ax_c, ax_pct) = _new_figure(2, height=4.6, width=6.0)
    starts = {
        float(np.min(np.asarray(bias, dtype=float))) for bias, _ in curves.values() if len(bias)
    }
    reference = f"{starts.pop():g} V" if len(starts) == 1 else "lowest bias"
    with matplotlib.rc_context(STYLE):
        for index, (sample, (bias, cap)) in enumerate(curves.items()):
            bias_a = np.asarray(bias, dtype=float)
            cap_a = np.asarray(cap, dtype=float)
            order = np.argsort(bias_a)
            bias_a, cap_a = bias_a[order], cap_a[order]
            style = series_style(index)
            ax_c.plot(bias_a, cap_a, label=sample, markersize=4.5, **style)
            if cap_a.size and cap_a[0] > 0:
                ax_pct.plot(bias_a, 100.0 * (cap_a / cap_a[0] - 1.0), markersize=4.5, **style)
        if nominal:
            ax_c.axhline(nominal, color="#666666", linewidth=0.8, linestyle=":", label="nominal")
        ax_c.yaxis.set_major_formatter(EngFormatter(unit="F", sep=" "))
        ax_pct.axhline(0.0, color="#666666", linewidth=0.7)
        ax_c.set_ylabel("capacitance c_low (F)")
        ax_pct.set_ylabel(f"change from {reference} (%)")
        ax_pct.set_xlabel("DC bias (V)")
        ax_c.set_title(f"{part}: capacitance versus DC bias", y=1.0)
        ax_c.legend(loc="best")
    return fig


def lot_figure(
    part: str, samples: Iterable[Any], *, with_models: bool = False, title: str = ""
) -> Figure:
    """|Z| and ESR of every sample of a part overlaid (``samples``: ``SampleResult``).

    Each sample has its own colour, line style and marker (markers every few points so
    the curves stay readable). With ``with_models`` the fitted models are drawn thin.
    Curves of one sample at several DC bias points (a per-bias overlay) are labelled
    by their bias.
    """
    samples = list(samples)
    one_sample = len({s.sample for s in samples}) == 1 and len(samples) > 1
    fig, (ax_mag, ax_esr) = _new_figure(2, height=5.6, reuse_as="lot")
    with matplotlib.rc_context(STYLE):
        for index, sample in enumerate(samples):
            f = np.asarray(sample.data.f, dtype=float)
            z = np.asarray(sample.data.z, dtype=complex)
            style = series_style(index)
            every = max(1, f.size // 12)
            label = sample.sample + (f" @ {sample.bias_v:g} V" if sample.bias_v else "")
            if one_sample:
                label = f"{sample.bias_v:g} V"
            kwargs = {"markevery": (index % every, every), "markersize": 4, **style}
            ax_mag.plot(f, _positive(np.abs(z)), label=label, **kwargs)
            ax_esr.plot(f, _positive(z.real), label=label, **kwargs)
            if with_models and sample.fit is not None:
                zm = np.asarray(sample.fit.impedance(f), dtype=complex)
                ax_mag.plot(f, np.abs(zm), color=style["color"], linewidth=0.6, linestyle="-")
        _log_axes(ax_mag)
        _log_axes(ax_esr)
        _label_short_log_range(ax_mag, "Ω")
        _label_short_log_range(ax_esr, "Ω")
        ax_mag.set_ylabel("|Z| (Ω)")
        kinds = {getattr(s.fit, "kind", None) for s in samples if s.fit is not None}
        ax_esr.set_ylabel(_re_label(kinds.pop() if len(kinds) == 1 else None) + " (Ω)")
        for sample in samples:
            z = np.asarray(sample.data.z, dtype=complex)
            if np.any(np.isfinite(z.real) & (z.real <= 0)):
                _mark_non_positive(ax_esr, np.asarray(sample.data.f, dtype=float), z.real)
                break
        ax_esr.set_xlabel("frequency (Hz)")
        ax_mag.set_title(title or f"{part}: all samples", y=1.0)
        ax_mag.legend(loc="best", ncol=2)
        _finish(fig)
    return fig


def slide_dpi(fig: Figure, width_px: int = SLIDE_WIDTH_PX) -> int:
    """The resolution at which ``fig`` is at least ``width_px`` pixels wide."""
    return max(DPI, math.ceil(width_px / fig.get_figwidth()))


def png_bytes(
    fig: Figure, *, dpi: int | None = None, colours: int | None = PALETTE_COLOURS
) -> bytes:
    """Render ``fig`` to PNG bytes with the Agg renderer.

    ``dpi`` defaults to :func:`slide_dpi` (at least :data:`SLIDE_WIDTH_PX` wide).
    With ``colours`` (2…256) the image is stored with a palette of that many colours
    instead of full RGB: a line figure holds a few inks and their anti-aliased edges,
    so the file is about a third of the size and reads the same. ``None`` keeps RGB.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from PIL import Image

    dpi = slide_dpi(fig) if dpi is None else dpi
    buffer = io.BytesIO()
    if colours is None:
        fig.savefig(buffer, format="png", dpi=dpi, facecolor="white")
        return buffer.getvalue()
    # A reused figure keeps its canvas (and the renderer's text metrics with it).
    canvas = fig.canvas if isinstance(fig.canvas, FigureCanvasAgg) else FigureCanvasAgg(fig)
    fig.set_dpi(dpi)
    fig.patch.set_facecolor("white")
    canvas.draw()
    # PIL reads the canvas' RGBA buffer in place and drops alpha itself (a numpy slice of
    # it would be copied first, several times slower).
    rgb = Image.frombuffer(
        "RGBA", canvas.get_width_height(), canvas.buffer_rgba(), "raw", "RGBA", 0, 1
    ).convert("RGB")
    # The palette is chosen on a quarter-size copy (the same inks, a sixteenth of the
    # pixels) and every pixel then mapped to its nearest entry: three times faster than
    # choosing it on the full image. No dithering: it would speckle the flat shading and
    # grow the file.
    palette = rgb.reduce(4).quantize(
        colors=colours, method=Image.Quantize.FASTOCTREE, dither=Image.Dither.NONE
    )
    image = rgb.quantize(palette=palette, dither=Image.Dither.NONE)
    image.save(buffer, format="png", dpi=(dpi, dpi))
    return buffer.getvalue()


def save_png(fig: Figure, path: str | os.PathLike[str], *, dpi: int | None = None) -> bytes:
    """Write ``fig`` to ``path`` as PNG atomically (see :func:`png_bytes`); returns its bytes."""
    data = png_bytes(fig, dpi=dpi)
    atomic_write_bytes(path, data)
    return data
