"""The PNG files ``figures.style.save`` writes hold the pixels matplotlib's own savefig draws.

``save`` encodes PNGs itself (``figures/png.py``: no alpha channel where every pixel is opaque,
unfiltered rows); the references are ``Figure.savefig`` at the same resolution and PIL's PNG
decoder (which checks every chunk's CRC), compared pixel by pixel.
"""
from __future__ import annotations

import io

import numpy as np
import pytest
from PIL import Image

from audit.figures import style
from audit.figures.png import png_bytes


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


@pytest.mark.parametrize("channels", [3, 4])
def test_png_bytes_decode_to_the_pixels_written(channels):
    # Reference: PIL's PNG decoder, on every byte value in every channel, an odd width and one row.
    rng = np.random.default_rng(5)
    for shape in [(7, 13, channels), (1, 5, channels)]:
        pixels = rng.integers(0, 256, size=shape, dtype=np.uint8)
        with Image.open(io.BytesIO(png_bytes(pixels, 150))) as decoded:
            assert decoded.mode == {3: "RGB", 4: "RGBA"}[channels]
            np.testing.assert_array_equal(np.asarray(decoded), pixels)
            assert decoded.info["dpi"] == pytest.approx((150, 150), rel=1e-3)


def test_png_bytes_refuse_pixels_they_cannot_write():
    with pytest.raises(ValueError, match="uint8"):
        png_bytes(np.zeros((2, 2, 3), dtype=np.float32), 150)
    with pytest.raises(ValueError, match="3 or 4"):
        png_bytes(np.zeros((2, 2, 2), dtype=np.uint8), 150)
