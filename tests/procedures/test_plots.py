"""Figures of the report: one per sample, palette PNGs, the light minor grid."""

from __future__ import annotations

import dataclasses
import io
import re

import numpy as np
import pytest
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
        "|Z| (Ω)",
        "ESR = Re Z (Ω)",
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
    # Large enough for a slide: at least 1600 px wide, the figure's proportions kept.
    assert width >= plots.SLIDE_WIDTH_PX == 1600
    assert height / width == pytest.approx(8.2 / 7.0, rel=0.01)
    rgb = plots.png_bytes(fig, colours=None)
    assert len(data) < 0.6 * len(rgb)


def test_every_axis_names_its_unit(summary):
    fitted, _ = _samples(summary)
    fig = plots.sample_figure(fitted.data, fitted.fit)
    for ax in fig.axes:
        assert re.search(r"\((Ω|%|°)\)$", ax.get_ylabel()), ax.get_ylabel()
    assert fig.axes[-1].get_xlabel() == "frequency (Hz)"
    lot = plots.lot_figure("A", [s for s in summary.samples if s.fit is not None][:2])
    assert [ax.get_ylabel()[-3:] for ax in lot.axes] == ["(Ω)", "(Ω)"]


def test_window_and_sigma_band_are_told_apart(summary):
    from matplotlib.colors import to_hex

    fitted, _ = _samples(summary)
    fig = plots.sample_figure(fitted.data, fitted.fit)
    (legend,) = fig.legends
    patches = {
        t.get_text(): h for t, h in zip(legend.get_texts(), legend.legend_handles, strict=True)
    }
    window, sigma = patches["measurable window"], patches["±1σ measurement"]
    assert to_hex(window.get_facecolor()) != to_hex(sigma.get_facecolor())
    assert sigma.get_hatch() and not window.get_hatch()


def test_non_positive_re_z_is_marked_not_dropped(summary):
    fitted, _ = _samples(summary)
    z = fitted.data.z.copy()
    z[[5, 6, 7]] = -abs(z[[5, 6, 7]].real) + 1j * z[[5, 6, 7]].imag
    data = dataclasses.replace(fitted.data, z=z)
    fig = plots.sample_figure(data, fitted.fit)
    (legend,) = fig.legends
    labels = [t.get_text() for t in legend.get_texts()]
    assert "Re Z ≤ 0, not on the log axis (3)" in labels


def test_srf_label_near_the_right_edge_stays_inside_the_figure(summary):
    fitted, _ = _samples(summary)
    f = fitted.data.f
    fit = dataclasses.replace(fitted.fit, landmarks={**fitted.fit.landmarks, "srf": f[-2]})
    fig = plots.sample_figure(fitted.data, fit)
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    renderer = canvas.get_renderer()
    width = fig.bbox.width
    labels = [t for ax in fig.axes for t in ax.texts if t.get_text().startswith("SRF")]
    assert labels
    for text in labels:
        box = text.get_window_extent(renderer)
        assert box.x0 >= 0 and box.x1 <= width


def test_axis_labels_clear_the_tick_labels_and_stay_inside(summary):
    # The labels sit at fixed distances from their panels (plots.YLABEL_OFFSET_IN): the
    # widest tick labels must still clear them. A |Z| of 120…870 mΩ without a model gives
    # labelled 200 mΩ and 500 mΩ positions besides the decade's (the short-range labels).
    fitted, _ = _samples(summary)
    f = fitted.data.f
    z = (0.12 + 0.75 * np.linspace(0, 1, f.size)) * np.exp(0.3j)
    data = dataclasses.replace(fitted.data, z=z)
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    short = dataclasses.replace(fitted, data=data)
    figures = [
        plots.sample_figure(fitted.data, fitted.fit),
        plots.sample_figure(data, None),
        plots.lot_figure("A", [short]),
    ]
    for fig in figures:
        canvas = FigureCanvasAgg(fig)
        fig.set_dpi(plots.slide_dpi(fig))
        canvas.draw()
        renderer = canvas.get_renderer()
        for ax in fig.axes:
            label = ax.yaxis.label.get_window_extent(renderer)
            ticks = [
                t.get_window_extent(renderer)
                for t in [*ax.get_yticklabels(), *ax.get_yticklabels(minor=True)]
                if t.get_visible() and t.get_text()
            ]
            assert ticks
            assert label.x1 < min(box.x0 for box in ticks)
            assert label.x0 >= 0
            if ax.get_xlabel():
                xlabel = ax.xaxis.label.get_window_extent(renderer)
                xticks = [
                    t.get_window_extent(renderer) for t in ax.get_xticklabels() if t.get_text()
                ]
                assert xlabel.y1 < min(box.y0 for box in xticks)
                assert xlabel.y0 >= 0


def _mlcc(glitches=True):
    """An invented 10 µF MLCC (series R-L-C, 20 mΩ, 0.6 nH) with 0.5 % noise and, with
    ``glitches``, two glitches inside the window: one far out (×3), one in phase (0.3
    rad). Returns the data, its fit and the glitches' indices."""
    from bench.core.fitting import fit_impedance

    f = np.geomspace(1e3, 1e8, 401)
    w = 2 * np.pi * f
    z = 20e-3 + 1j * w * 0.6e-9 + 1 / (1j * w * 10e-6)
    rng = np.random.default_rng(4)
    z = z * (1 + 0.005 * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)))
    where = [120, 260] if glitches else []
    if glitches:
        z[120] *= 3.0
        z[260] *= np.exp(0.3j)
    data = type("Data", (), {"f": f, "z": z, "rel_uncertainty": np.full(f.size, 0.005)})()
    return data, fit_impedance(f, z, rel_uncertainty=data.rel_uncertainty), where


def _circles(ax):
    """The lines of ``ax`` drawn as open circles alone (the screened points)."""
    lines = ax.lines
    return [line for line in lines if line.get_marker() == "o" and line.get_linestyle() == "None"]


def test_points_the_fit_screened_out_are_marked_and_do_not_set_the_residual_scale():
    data, fit, glitches = _mlcc()
    status = np.asarray(fit.point_status)
    assert list(np.flatnonzero(status != "used")) == glitches
    assert set(status[glitches]) == {"glitch"}
    fig = plots.sample_figure(data, fit)
    labels = [text.get_text() for text in fig.legends[0].get_texts()]
    assert "screened out of the fit (2)" in labels
    ax_mag, ax_esr, ax_res, ax_ph = fig.axes
    for ax in (ax_mag, ax_esr):
        (marked,) = _circles(ax)
        assert np.allclose(marked.get_xdata(), data.f[glitches])
    # The residual scale follows the used points (0.5 % noise: a few per cent), not the
    # ×3 glitch (model − measured: ln(1/3), −110 %), which is drawn at the bottom edge.
    lo, hi = ax_res.get_ylim()
    assert lo > -10.0 and hi < 10.0
    (edge,) = [line for line in ax_res.lines if line.get_marker() == "v"]
    assert edge.get_xdata()[0] == pytest.approx(data.f[120])
    assert edge.get_ydata()[0] == pytest.approx(lo)
    # The phase glitch (−0.3 rad, −17°) lies beyond the phase panel's scale: at its edge.
    lo, hi = ax_ph.get_ylim()
    assert lo > -17.0 and hi < 17.0
    (edge,) = [line for line in ax_ph.lines if line.get_marker() == "v"]
    assert edge.get_xdata()[0] == pytest.approx(data.f[260])
    assert edge.get_ydata()[0] == pytest.approx(lo)


def test_a_fit_that_screened_nothing_marks_nothing():
    data, fit, _ = _mlcc(glitches=False)
    assert set(fit.point_status) == {"used"}
    fig = plots.sample_figure(data, fit)
    labels = [text.get_text() for text in fig.legends[0].get_texts()]
    assert not any(label.startswith("screened out") for label in labels)
    assert not any(_circles(ax) for ax in fig.axes)
