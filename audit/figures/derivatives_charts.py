"""Drawing the derivative audit's figures (``derivatives`` lists them and writes them): the column
pairs and the map of check points × parameters.

This module imports matplotlib, so only a process that draws imports it.
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
from matplotlib.colors import LinearSegmentedColormap

from ..derivatives.check import CENTRAL_POOR, REL_FLOOR, DerivativeAudit
from .layout import (COLORBAR_SHRINK, arrange, colorbar_beside, colorbar_room, heading, panel_figure, place_colorbar,
                     renderer_of)
from .style import EMPIRICAL, OUTCOME_STYLE, plain_text, plt, save

HAND_COLOUR = OUTCOME_STYLE["oscillating"][0]
WRONG_COLOUR = OUTCOME_STYLE["diverged"][0]
BAND_COLOUR = "#d9d9d9"
#: Light (no error) to dark (all digits lost): reads the same in greyscale.
ERROR_MAP = LinearSegmentedColormap.from_list("fitaudit_error", ["#f4f1ea", "#9fb7c9", EMPIRICAL, "#0b1a2b"])
#: Relative errors are drawn on log10 scale between these exponents.
SMALLEST, LARGEST = -16, 0
#: Heights of a column's two panels: the derivatives over their differences.
PAIR_HEIGHTS = (2.2, 1.0)
#: The error map's colour bar: its gap to the map in inches (near the 0.05 of the map's width that
#: matplotlib's colour bar keeps, for maps 3.5 to 5 in wide) and its length over its width (matplotlib's 20).
BAR_GAP, BAR_ASPECT = 0.2, 20


def draw_figures(result: DerivativeAudit, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    """Draw the audit's figures into ``folder`` in each of ``formats``; return the paths written."""
    paths = []
    if result.hand is not None:
        paths += _columns(result, folder, formats)
    paths += _points(result, folder, formats)
    return paths


def _columns(result: DerivativeAudit, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    n = len(result.names)
    across = min(n, 3)
    down = math.ceil(n / across)
    # Each column of the Jacobian is a pair of panels, one above the other: two grid rows per row of pairs.
    figure, grid = panel_figure(2 * down, across, (4.3 * across, 3.9 * down))
    for j in range(down * across):
        upper, lower = grid[2 * (j // across), j % across], grid[2 * (j // across) + 1, j % across]
        if j < n:
            lower.sharex(upper)
            _column_panel(result, j, upper, lower)
        else:
            upper.set_visible(False)
            lower.set_visible(False)
    reference = "exact (from the formula)" if result.reference == "exact" else "numeric (numdifftools)"
    renderer = renderer_of(figure)
    top = heading(figure, f"Hand-derived partial derivatives against the {reference} ones, at each column's worst "
                  "point", renderer, fontsize=11)
    arrange(figure, grid, renderer, top=top, heights=PAIR_HEIGHTS * down)
    return save(figure, folder, "derivatives-columns", formats)


def _column_panel(result: DerivativeAudit, j: int, upper, lower) -> None:
    name = plain_text(result.names[j])
    k = int(result.worst_point[j])
    wrong = result.verdict[j] == "wrong"
    title_colour = WRONG_COLOUR if wrong else "black"
    where = f" (at {plain_text(result.labels[k])})" if k >= 0 else ""
    upper.set_title(f"∂f/∂{name}: {result.diagnoses[j].headline}{where}", color=title_colour, fontsize=10,
                    fontweight="bold" if wrong else "normal")
    if k < 0:
        upper.text(0.5, 0.5, "nothing could be judged", ha="center", va="center", transform=upper.transAxes)
        return
    x, label = _abscissa(result)
    order = np.argsort(x, kind="stable")
    usable = result.usable[k, j][order]
    true = result.true[k, j][order]
    hand = result.hand[k, j][order]
    xs = x[order]
    upper.plot(xs[usable], true[usable], color=EMPIRICAL, linewidth=1.6, label="true", zorder=2)
    upper.plot(xs, hand, linestyle="none", marker="o", markersize=4.5, markerfacecolor="none",
               markeredgecolor=HAND_COLOUR, label="hand-derived", zorder=3)
    if (~usable).any():
        upper.plot(xs[~usable], true[~usable], linestyle="none", marker="x", color="#555555",
                   label="numeric unreliable")
    upper.legend(fontsize=7, loc="best", frameon=False)
    upper.tick_params(labelbottom=False, labelsize=8)
    upper.ticklabel_format(axis="y", useOffset=False)
    upper.set_ylabel("derivative", fontsize=8)
    scale = result.column_scale[k, j] or 1.0
    shown = np.concatenate([true[usable], hand[np.isfinite(hand)]])
    low, high = (shown.min(), shown.max()) if shown.size else (0.0, 0.0)
    if high - low < 0.2 * scale:
        # A constant column: rounding noise must not fill the panel.
        middle = (high + low) / 2
        low, high = middle - 0.1 * scale, middle + 0.1 * scale
    margin = 0.08 * (high - low)
    upper.set_ylim(low - margin, high + margin)

    band = result.tolerance[k, j][order] / scale
    difference = (hand - true) / scale
    lower.fill_between(xs, -band, band, color=BAND_COLOUR, step="mid", linewidth=0, label="tolerance")
    lower.axhline(0.0, color="#888888", linewidth=0.6)
    flagged = result.disagrees[k, j][order]
    lower.plot(xs[~flagged], difference[~flagged], linestyle="none", marker="o", markersize=2.5, color=EMPIRICAL)
    lower.plot(xs[flagged], difference[flagged], linestyle="none", marker="s", markersize=3, color=WRONG_COLOUR)
    largest = np.nanmax(np.abs(np.where(np.isfinite(difference), difference, np.nan)), initial=0.0)
    limit = max(largest, np.nanmax(band, initial=0.0)) * 1.15 or 1e-6
    lower.set_ylim(-limit, limit)
    lower.set_ylabel("difference /\ncolumn size", fontsize=8)
    lower.set_xlabel(label, fontsize=8)
    lower.tick_params(labelsize=8)
    lower.ticklabel_format(axis="y", style="sci", scilimits=(-2, 3))


def _abscissa(result: DerivativeAudit) -> tuple[np.ndarray, str]:
    if len(result.predictor_names) == 1:
        return result.x_rows[0], plain_text(result.predictor_names[0])
    return np.arange(result.x_rows.shape[1], dtype=float), "observation"


def _points(result: DerivativeAudit, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    hand = result.hand is not None
    errors = result.relative_error if hand else result.central_error
    count, n = errors.shape
    figure, grid = panel_figure(1, 1, (max(5.6, 1.6 + 1.05 * n), 1.5 + 0.28 * count))
    axes = grid[0, 0]
    with np.errstate(divide="ignore"):
        exponent = np.clip(np.log10(np.where(errors > 0, errors, 10.0 ** SMALLEST)), SMALLEST, LARGEST)
    image = axes.imshow(np.ma.masked_invalid(exponent), cmap=ERROR_MAP, vmin=SMALLEST, vmax=LARGEST, aspect="auto")
    unreliable = (~result.usable).any(axis=2)
    wrong = result.wrong_share > 0
    for k in range(count):
        for j in range(n):
            if unreliable[k, j]:
                axes.add_patch(plt.Rectangle((j - 0.5, k - 0.5), 1, 1, fill=False, hatch="////",
                                             edgecolor="#777777", linewidth=0))
            if wrong[k, j]:
                light = not exponent[k, j] > -7
                axes.text(j, k, f"✗ {result.wrong_share[k, j]:.0%}", ha="center", va="center", fontsize=7.5,
                          fontweight="bold", color=WRONG_COLOUR if light else "white")
            elif np.isfinite(exponent[k, j]):
                shade = "white" if exponent[k, j] > -7 else "#333333"
                text = f"≤{SMALLEST}" if exponent[k, j] <= SMALLEST else f"{exponent[k, j]:.0f}"
                axes.text(j, k, text.replace("-", "−"), ha="center", va="center", fontsize=7, color=shade)
    axes.set_xticks(range(n), [f"∂f/∂{plain_text(name)}" for name in result.names], fontsize=8, rotation=30, ha="right")
    axes.set_yticks(range(count), [plain_text(label) for label in result.labels], fontsize=8)
    against = "exact" if result.reference == "exact" else "numeric"
    if hand:
        title = (f"log10 relative error, hand-derived vs {against}\n✗ share of observations wrong · hatched: "
                 f"reference unreliable\nred line: {REL_FLOOR:.0e}, below which no difference counts")
        line = REL_FLOOR
    else:
        title = (f"log10 relative error, the fit's central differences vs {against}\nhatched: reference "
                 f"unreliable\nred line: {CENTRAL_POOR:.0e}, above which they are too poor")
        line = CENTRAL_POOR
    axes.set_title(title, fontsize=9)
    # Made as wide as a bar along the whole figure's height would be, the most its final length allows.
    colourbar = colorbar_beside(figure, image, "", COLORBAR_SHRINK * figure.get_figheight(),
                                width=COLORBAR_SHRINK * figure.get_figheight() / BAR_ASPECT)
    colourbar.set_label("log10(largest |difference| / column size)", fontsize=8)
    colourbar.ax.axhline(math.log10(line), color=WRONG_COLOUR, linewidth=2)
    renderer = renderer_of(figure)
    arrange(figure, grid, renderer, right=colorbar_room(colourbar, renderer, BAR_GAP))
    place_colorbar(figure, grid, colourbar, renderer, BAR_GAP, aspect=BAR_ASPECT)
    return save(figure, folder, "derivatives-points", formats)
