"""Figures reused between samples (the report's workers): the same pixels as fresh ones."""

from __future__ import annotations

import dataclasses
import io

import numpy as np
from PIL import Image

from bench import plots


def _pixels(data: bytes) -> np.ndarray:
    with Image.open(io.BytesIO(data)) as image:
        return np.asarray(image.convert("RGB"))


def _recipes(summary):
    """Figures of several layouts and contents, in an order that switches between them."""
    fitted = [s for s in summary.samples if s.fit is not None]
    unfitted = [s for s in summary.samples if s.fit is None]
    first, second = fitted[0], fitted[-1]
    z = first.data.z.copy()
    z[[5, 6, 7]] = -abs(z[[5, 6, 7]].real) + 1j * z[[5, 6, 7]].imag  # Re Z <= 0 marks
    odd = dataclasses.replace(first.data, z=z)
    return [
        (plots.sample_figure, (first.data, first.fit), {"title": "A / s1"}),
        (plots.lot_figure, ("A", fitted[:2]), {}),
        (plots.sample_figure, (second.data, second.fit), {"title": "B / s2"}),
        (plots.sample_figure, (unfitted[0].data, None), {}),
        (plots.sample_figure, (odd, first.fit), {}),
        (plots.lot_figure, ("B", fitted[-3:]), {"title": "B: overlay"}),
        (plots.sample_figure, (first.data, first.fit), {"title": "A / s1 again"}),
    ]


def test_reused_figures_draw_the_pixels_of_fresh_ones(summary):
    recipes = _recipes(summary)
    fresh = [plots.png_bytes(build(*args, **kwargs)) for build, args, kwargs in recipes]
    with plots.reusing_figures():
        reused = [plots.png_bytes(build(*args, **kwargs)) for build, args, kwargs in recipes]
    for index, (a, b) in enumerate(zip(fresh, reused, strict=True)):
        assert np.array_equal(_pixels(a), _pixels(b)), f"figure {index} differs when reused"


def test_reuse_keeps_one_figure_per_layout_and_only_when_asked(summary):
    fitted = [s for s in summary.samples if s.fit is not None]
    with plots.reusing_figures():
        one = plots.sample_figure(fitted[0].data, fitted[0].fit)
        two = plots.sample_figure(fitted[1].data, fitted[1].fit)
        lot = plots.lot_figure("A", fitted[:2])
    assert one is two and lot is not one
    # The second figure holds only its own curves: the first one's were taken away.
    assert len(one.axes[0].lines) == len(
        plots.sample_figure(fitted[1].data, fitted[1].fit).axes[0].lines
    )
    # Outside the block every call makes a new figure (callers may keep and change it).
    assert plots.sample_figure(fitted[0].data, fitted[0].fit) is not one
