"""The PNG files ``figures.style.save`` writes hold the pixels matplotlib's own savefig draws.

``save`` encodes PNGs itself (no alpha channel where every pixel is opaque, a faster zlib level);
the reference is ``Figure.savefig`` at the same resolution, decoded with PIL, compared pixel by pixel.
"""
from __future__ import annotations

import io

import numpy as np
import pytest
from PIL import Image

from audit.figures import style


def a_figure(width: float, height: float, **subplots):
    """A small figure with lines, text, a hatched patch and a log axis (made at matplotlib's default dpi)."""
    figure, axes = style.plt.subplots(figsize=(width, height), **subplots)
    axes.plot([1, 10, 100], [3, 1, 2], marker="o")
    axes.bar([20], [2.5], width=20, hatch="//", color="#3f7f6e", edgecolor="black")
    style.decade_ticks(axes, "x")
    axes.set_title("a title")
    return figure


def savefig_pixels(figure) -> np.ndarray:
    """The figure as savefig writes it at the saving resolution, decoded (RGBA)."""
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=style.DPI)
    buffer.seek(0)
    return np.asarray(Image.open(buffer).convert("RGBA"))


@pytest.mark.parametrize("layout", [{}, {"constrained_layout": True}])
def test_png_holds_the_pixels_savefig_draws(layout, tmp_path):
    figure = a_figure(4.0, 3.0, **layout)
    expected = savefig_pixels(figure)
    path, = style.save(figure, tmp_path, "figure")
    with Image.open(path) as written:
        assert written.mode == "RGB"              # opaque: no alpha channel
        assert written.info["dpi"] == pytest.approx((style.DPI, style.DPI), rel=1e-3)   # pHYs: whole pixels a metre
        pixels = np.asarray(written.convert("RGBA"))
    assert pixels.shape == expected.shape == (3 * style.DPI, 4 * style.DPI, 4)
    np.testing.assert_array_equal(pixels, expected)


def test_png_of_a_see_through_figure_keeps_its_alpha(tmp_path):
    figure = a_figure(3.0, 2.0)
    figure.patch.set_alpha(0.0)
    expected = savefig_pixels(figure)
    assert (expected[..., 3] < 255).any()         # the reference has see-through pixels
    path, = style.save(figure, tmp_path, "figure")
    with Image.open(path) as written:
        assert written.mode == "RGBA"
        np.testing.assert_array_equal(np.asarray(written), expected)
