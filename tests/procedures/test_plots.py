"""Figures of the report: one per sample, palette PNGs, the light minor grid."""

from __future__ import annotations

import io

import numpy as np
from PIL import Image

from bench import plots

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), file signature


def _samples(summary):
    fitted = next(s for s in summary.samples if s.fit is not None)
    unfitted = next(s for s in summary.samples if s.fit is None)
    return fitted, unfitted


def test_sample_figure_has_impedance_and_residual_panels_on_one_axis(summary):
    fitted, unfitted = _samples(summary)
    fig = plots.sample_figure(fitted.data, fitted.fit, title="A / s1")
    assert len(fig.axes) == 4
    assert [ax.get_ylabel() for ax in fig.axes] == [
        "|Z|",
        "ESR = Re Z",
        "magnitude error (%)",
        "phase error (°)",
    ]
    assert all(ax.get_xscale() == "log" for ax in fig.axes)
    assert len({ax.get_xlim() for ax in fig.axes}) == 1  # one shared frequency axis
    (legend,) = fig.legends
    labels = [text.get_text() for text in legend.get_texts()]
    assert "measured" in labels and any(label.startswith("model (") for label in labels)
    assert len(labels) == len(set(labels))
    # Without a fit, only |Z| and ESR.
    assert len(plots.sample_figure(unfitted.data, None).axes) == 2


def test_minor_grid_positions_are_two_to_nine_per_decade():
    positions = plots._log_minor_positions(150.0, 2000.0)
    assert np.allclose(positions, [200, 300, 400, 500, 600, 700, 800, 900])
    assert plots._log_minor_positions(0.0, 10.0).size == 0


def test_minor_grid_is_drawn_without_minor_ticks(summary):
    fitted, _ = _samples(summary)
    fig = plots.sample_figure(fitted.data, fitted.fit)
    ax = fig.axes[0]
    assert ax.xaxis.get_minorticklocs().size == 0
    lo, hi = ax.get_xlim()
    decades = np.log10(hi / lo)
    from matplotlib.collections import LineCollection

    grid = [c for c in ax.collections if isinstance(c, LineCollection)]
    # One vertical line per minor position: 8 per decade, within one decade's worth.
    vertical = max(len(c.get_segments()) for c in grid)
    assert abs(vertical - 8 * decades) <= 8


def test_png_is_a_small_palette_image(summary):
    fitted, _ = _samples(summary)
    fig = plots.sample_figure(fitted.data, fitted.fit)
    data = plots.png_bytes(fig)
    assert data.startswith(PNG_SIGNATURE)
    with Image.open(io.BytesIO(data)) as image:
        assert image.mode == "P"
        assert len(image.getcolors(256)) <= plots.PALETTE_COLOURS
        width, height = image.size
    # 7 in × 8.2 in at the figure DPI.
    assert (width, height) == (round(7.0 * plots.DPI), round(8.2 * plots.DPI))
    rgb = plots.png_bytes(fig, colours=None)
    assert len(data) < 0.6 * len(rgb)
