"""Shared look of fitaudit's figures: one colour, marker and hatch per outcome, greyscale-safe.

The outcome colours run from dark to light in a fixed order, and each also has its own hatch,
so a basin map or bar chart still reads when printed in black and white. ``legend_columns`` and
``cap_ticks`` keep legends and tick labels from running off a figure or into each other,
estimated from their text, without drawing.
"""
from __future__ import annotations

import itertools
import math
from pathlib import Path

import matplotlib
import numpy as np

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402  (the backend must be chosen first)
from matplotlib.font_manager import FontProperties  # noqa: E402
from matplotlib.ticker import MaxNLocator, NullLocator  # noqa: E402

from .png import write_png  # noqa: E402

#: Kinds of end a run can have once converged runs are split by solution.
#: label -> (fill colour, hatch, legend text). Ordered dark to light.
OUTCOME_STYLE: dict[str, tuple[str, str, str]] = {
    "best": ("#1b3a5c", "", "reached the best solution"),
    "other": ("#3f7f6e", "//", "reached another solution"),
    "oscillating": ("#b5651d", "xx", "oscillating"),
    "stalled": ("#8e7cc3", "..", "stalled (iteration limit)"),
    "diverged": ("#c0392b", "\\\\", "diverged"),
    "singular": ("#e0b94a", "++", "singular Jacobian"),
    "model_error": ("#d9d9d9", "--", "model error"),
    "timed_out": ("#f2f2f2", "||", "timed out ([model] time_limit)"),
}

#: Marker of each kind of end (same keys as OUTCOME_STYLE), for paths and point plots, so
#: that kinds stay apart without colour.
OUTCOME_MARKERS: dict[str, str] = {
    "best": "o",
    "other": "s",
    "oscillating": "D",
    "stalled": "v",
    "diverged": "^",
    "singular": "P",
    "model_error": "X",
    "timed_out": "*",
}

#: A qualitative sequence for distinct solutions, dark to light, for maps with several optima:
#: blues and greens only, so that no solution is mistaken for a failure kind's red, orange or
#: yellow above.
SOLUTION_COLOURS = ("#1b3a5c", "#3f7f6e", "#7fb069", "#5fa8d3", "#b9d7a8", "#6c4f77", "#a5a5a5")

#: Interval colours: asymptotic (dashed) vs resampled / profile (solid).
ASYMPTOTIC = "#555555"
EMPIRICAL = "#1b3a5c"

DPI = 150
#: Widths of a tick label's characters in em, taken generously (DejaVu Sans digits are 0.64 em),
#: and the gap kept between neighbouring labels, in em.
CHARACTER_EM, LABEL_GAP_EM = 0.66, 1.0
#: Tick counts tried by ``cap_ticks``, most first (MaxNLocator's nbins), and the tick steps it
#: allows (matplotlib's default AutoLocator steps: 1, 2, 2.5 or 5 times a power of ten).
TICK_BINS = (6, 5, 4, 3, 2, 1)
TICK_STEPS = (1, 2, 2.5, 5, 10)


def plain_text(text: object) -> str:
    """A user's string (column or parameter name, title) for a matplotlib label: every '$' escaped,
    so that a name holding dollar signs is drawn as written instead of parsed as mathtext (where an
    unbalanced '$\\frac{a$' would stop the figure with an error)."""
    return str(text).replace("$", r"\$")


def decade_ticks(axes, which: str) -> None:
    """Put the ``which`` ("x" or "y") axis of ``axes`` on a log scale ticked at whole decades only.

    Minor ticks at 2, 3, ... 9 of every decade double the drawing time of a multi-panel map (each
    tick is an object matplotlib lays out and draws), while a basin map or a path plot is read by
    region, not by value; the decades are labelled as usual.
    """
    if which == "x":
        axes.set_xscale("log")
        axes.xaxis.set_minor_locator(NullLocator())
    else:
        axes.set_yscale("log")
        axes.yaxis.set_minor_locator(NullLocator())


def legend_columns(labels: list[str], width: float, fontsize: float = 8.0) -> int:
    """The most columns a figure legend of ``labels`` can have within ``width`` inches at
    ``fontsize`` points, estimated without drawing (matplotlib's default handle, padding and column
    spacing, 0.55 em per character), at least 1.

    Matplotlib fills a legend column by column, the first ``len % columns`` columns one entry
    longer (``Legend._init_legend_box``), so each column is as wide as its longest entry.
    """
    spacing = 2.0 + 0.8 + 2.0   # handle length, handle-text pad, column spacing (em)
    for columns in range(len(labels), 1, -1):
        rows, longer = divmod(len(labels), columns)
        sizes = [rows + 1] * longer + [rows] * (columns - longer)
        starts = [0, *itertools.accumulate(sizes)]
        longest = [max(len(label) for label in labels[start:start + size]) for start, size in zip(starts, sizes)]
        if sum(spacing + 0.55 * characters for characters in longest) * fontsize / 72 <= 0.95 * width:
            return columns
    return 1


def cap_ticks(axis, length: float, *, size=None, rotation: float = 0.0) -> None:
    """Give ``axis`` (an XAxis) a MaxNLocator with the most ticks whose labels fit side by side
    along ``length`` inches, estimated from the labels' text without drawing.

    Long labels (many significant digits, e.g. 584.656625 where the spread is 1e-4) overlap under
    matplotlib's own locator, which counts ticks by the axis length only. Call once the view
    limits are final. ``size``: the labels' font size (default rcParams' xtick.labelsize);
    ``rotation``: their angle in degrees (a label then spans w·cos θ + h·sin θ along the axis).
    """
    points = FontProperties(size=size if size is not None else plt.rcParams["xtick.labelsize"]).get_size_in_points()
    low, high = sorted(axis.get_view_interval())
    angle = math.radians(rotation)
    for bins in TICK_BINS:
        locator = MaxNLocator(nbins=bins, steps=TICK_STEPS)
        ticks = [tick for tick in locator.tick_values(low, high) if low <= tick <= high]
        labels = axis.get_major_formatter().format_ticks(ticks)
        widest = max((len(label) for label in labels), default=0) * CHARACTER_EM
        span = widest * math.cos(angle) + 1.2 * math.sin(angle) + LABEL_GAP_EM
        if len(ticks) * span * points / 72 <= length:
            break
    axis.set_major_locator(locator)


def new_figure(width: float = 6.4, height: float = 4.4):
    """A figure and axes with fitaudit's defaults."""
    figure, axes = plt.subplots(figsize=(width, height), constrained_layout=True)
    return figure, axes


def save(figure, folder: Path, stem: str, formats: tuple[str, ...] = ("png",)) -> list[Path]:
    """Write ``figure`` as ``folder/stem.<format>`` for each format, close it, return the paths."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for extension in formats:
        path = folder / f"{stem}.{extension}"
        if extension == "png":
            _write_png(figure, path)
        else:
            figure.savefig(path, dpi=DPI)
        paths.append(path)
    plt.close(figure)
    return paths


def _write_png(figure, path: Path) -> None:
    """``figure`` drawn at ``DPI`` into a PNG, the same pixels as savefig writes, encoded faster.

    Every pixel of a figure on its opaque background is opaque, so the alpha channel is dropped
    where that holds (a quarter fewer bytes to compress), and rows are written unfiltered
    (``png.py``): together about a third of the encoding time, for files of about the same size.
    """
    figure.set_dpi(DPI)
    figure.canvas.draw()
    pixels = np.asarray(figure.canvas.buffer_rgba())
    opaque = bool((pixels[..., 3] == 255).all())
    write_png(path, pixels[..., :3] if opaque else pixels, DPI)
