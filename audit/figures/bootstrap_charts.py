"""Drawing the uncertainty stage's figures (``bootstrap`` writes them): the histograms and the
pairs plot.

This module imports matplotlib (and scipy.stats for the t density), so only a process that draws
imports them.
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
from matplotlib.colors import LinearSegmentedColormap
from matplotlib.lines import Line2D
from scipy import stats

from ..uncertainty.bootstrap import BootstrapResult
from .layout import arrange, heading, legend_below, panel_figure, renderer_of
from .style import ASYMPTOTIC, EMPIRICAL, cap_ticks, save

#: Pairs plots show at most this many parameters (the first ones), so panels stay readable.
MAX_PAIR_PARAMETERS = 6
#: Above this many points a scatter turns into a smear; a hexagonal density is drawn instead.
MAX_SCATTER_POINTS = 4000
PANEL_SIZE = 3.2
#: A single pair panel is widened to this many inches so that its title and legend fit.
MIN_PAIRS_WIDTH = 4.6
#: Share of a panel's width its x axis keeps once the layout has placed the labels (a histogram
#: has no y tick labels; a pair panel has them); the tick labels must fit along it.
HISTOGRAM_AXIS_SHARE, PAIR_AXIS_SHARE = 0.85, 0.7
#: Angle of the pair panels' x tick labels (degrees).
PAIR_LABEL_ROTATION = 30
ESTIMATE_COLOUR = "#000000"
#: Replicate density from white to the bootstrap colour: lightness alone carries it, so it
#: survives greyscale printing.
DENSITY_MAP = LinearSegmentedColormap.from_list("replicate_density", ["#ffffff", EMPIRICAL])


def draw_figures(result: BootstrapResult, used: np.ndarray, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    """Draw the histograms of the ``used`` replicates (rows of parameters) and, for two or more
    parameters, their pairs plot into ``folder``; return the files written."""
    paths = _histograms(result, used, folder, formats)
    if len(result.names) >= 2:
        paths += _pairs(result, used, folder, formats)
    return paths


def _headline(result: BootstrapResult) -> str:
    return (f"{result.method} bootstrap: {result.used} of {result.samples} refits used, "
            f"{result.confidence:.0%} intervals, step factor {result.refit.step_factor:g}")


def _histograms(result: BootstrapResult, used: np.ndarray, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    n = len(result.names)
    columns = min(n, 3)
    rows = math.ceil(n / columns)
    figure, axes = panel_figure(rows, columns, (PANEL_SIZE * 1.25 * columns, PANEL_SIZE * rows + 0.9))
    flagged = {}
    for flag in result.flags:
        flagged.setdefault(flag.parameter, []).append(flag.kind)
    for j, name in enumerate(result.names):
        _histogram_panel(axes.flat[j], result, used[:, j], j, flagged.get(name, []))
        cap_ticks(axes.flat[j].xaxis, HISTOGRAM_AXIS_SHARE * PANEL_SIZE * 1.25)
    for spare in axes.flat[n:]:
        spare.set_visible(False)
    handles = [
        Line2D([], [], color=ESTIMATE_COLOUR, lw=1, label="estimate (best fit)"),
        Line2D([], [], color=ASYMPTOTIC, lw=1.5, ls="--", marker="|", label="t interval and density (linearised)"),
        Line2D([], [], color=EMPIRICAL, lw=1, marker="|", label="percentile interval"),
        Line2D([], [], color=EMPIRICAL, lw=3, marker="|", label="BCa interval"),
    ]
    _finish(figure, axes, _headline(result), handles, 4)
    return save(figure, folder, "bootstrap-histograms", formats)


def _finish(figure, axes, title: str, handles: list, columns: int) -> None:
    """The heading ``title`` above the panels ``axes`` ((rows, columns)), the legend of ``handles``
    below them (at most ``columns`` columns, fewer where they would not fit), the panels between."""
    renderer = renderer_of(figure)
    top = heading(figure, title, renderer, fontsize="medium")
    _, bottom = legend_below(figure, handles, columns, renderer, fontsize="small")
    arrange(figure, axes, renderer, top=top, bottom=bottom)


def _histogram_panel(ax, result: BootstrapResult, values: np.ndarray, j: int, kinds: list[str]) -> None:
    estimate = result.best[j]
    t_error = result.asymptotic.std_errors[j]
    heights, _, _ = ax.hist(values, bins="auto", density=True, histtype="stepfilled", color=EMPIRICAL, alpha=0.35,
                            linewidth=0)
    ends = [values.min(), values.max()]
    if np.isfinite(t_error) and t_error > 0:
        ends += [result.asymptotic.lower[j], result.asymptotic.upper[j]]
        grid = np.linspace(min(ends), max(ends), 400)
        density = stats.t.pdf((grid - estimate) / t_error, result.asymptotic.dof) / t_error
        ax.plot(grid, density, color=ASYMPTOTIC, ls="--", lw=1.2)
        heights = np.append(heights, density.max())
    top = float(np.max(heights))
    ax.axvline(estimate, color=ESTIMATE_COLOUR, lw=1)
    brackets = [
        (result.asymptotic.lower[j], result.asymptotic.upper[j], ASYMPTOTIC, 1.5, "--", 1.12),
        (result.percentile_lower[j], result.percentile_upper[j], EMPIRICAL, 1.0, "-", 1.22),
        (result.bca.lower[j], result.bca.upper[j], EMPIRICAL, 3.0, "-", 1.32),
    ]
    for lower, upper, colour, width, style, level in brackets:
        if np.isfinite(lower) and np.isfinite(upper):
            ax.plot([lower, upper], [top * level] * 2, color=colour, lw=width, ls=style, marker="|",
                    markersize=9, markeredgewidth=1.5, solid_capstyle="butt")
    ax.set_ylim(0, top * 1.45)
    ax.set_yticks([])
    ax.ticklabel_format(axis="x", useOffset=False)
    ax.set_xlabel(result.names[j])
    ratio = result.comparison.width_ratio[j]
    title = f"{result.names[j]}: width ratio {ratio:.2f}" if np.isfinite(ratio) else result.names[j]
    flagged = "flagged: " + ", ".join(dict.fromkeys(kinds)) if kinds else "no flags"
    ax.set_title(f"{title}\n{flagged}", fontsize="small", fontweight="bold" if kinds else "normal")


def _pairs(result: BootstrapResult, used: np.ndarray, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    shown = min(len(result.names), MAX_PAIR_PARAMETERS)
    size = shown - 1
    width = max(PANEL_SIZE * size + 0.6, MIN_PAIRS_WIDTH)
    figure, axes = panel_figure(size, size, (width, PANEL_SIZE * size + 0.9))
    for row in range(size):
        for column in range(size):
            ax = axes[row, column]
            if column > row:
                ax.set_visible(False)
                continue
            _pair_panel(ax, result, used, column, row + 1)
            cap_ticks(ax.xaxis, PAIR_AXIS_SHARE * PANEL_SIZE, size="x-small", rotation=PAIR_LABEL_ROTATION)
            if row == size - 1:
                ax.set_xlabel(result.names[column])
            if column == 0:
                ax.set_ylabel(result.names[row + 1])
    density = len(used) > MAX_SCATTER_POINTS
    handles = [
        Line2D([], [], color=EMPIRICAL, ls="", marker="h" if density else "o", markersize=6 if density else 4,
               alpha=0.6, label="used replicates" + (" (density: darker = more)" if density else "")),
        Line2D([], [], color=ASYMPTOTIC, ls="--", lw=1.5,
               label=f"asymptotic {result.confidence:.0%} joint confidence ellipse"),
        Line2D([], [], color=ESTIMATE_COLOUR, ls="", marker="+", markersize=10, label="best fit"),
    ]
    note = "" if shown == len(result.names) else f" (first {shown} of {len(result.names)} parameters)"
    _finish(figure, axes, _headline(result).replace(": ", ":\n", 1) + note, handles, 3 if size > 1 else 1)
    return save(figure, folder, "bootstrap-pairs", formats)


def _pair_panel(ax, result: BootstrapResult, used: np.ndarray, first: int, second: int) -> None:
    points = used[:, [first, second]]
    if len(points) > MAX_SCATTER_POINTS:
        ax.hexbin(points[:, 0], points[:, 1], gridsize=40, cmap=DENSITY_MAP, mincnt=1, linewidths=0)
    else:
        ax.scatter(points[:, 0], points[:, 1], s=4, color=EMPIRICAL, alpha=0.35, linewidths=0)
    centre = result.best[[first, second]]
    covariance = result.asymptotic.covariance[np.ix_([first, second], [first, second])]
    if np.all(np.isfinite(covariance)):
        values, vectors = np.linalg.eigh(covariance)
        angle = np.linspace(0, 2 * np.pi, 200)
        circle = np.vstack([np.cos(angle), np.sin(angle)]) * np.sqrt(np.clip(values, 0, None))[:, None]
        outline = centre[:, None] + result.pair_region_scale * vectors @ circle
        ax.plot(outline[0], outline[1], color=ASYMPTOTIC, ls="--", lw=1.5)
    ax.plot(*centre, marker="+", color=ESTIMATE_COLOUR, markersize=10, markeredgewidth=1.5, ls="")
    ax.ticklabel_format(useOffset=False)
    ax.tick_params(labelsize="x-small")
    ax.tick_params(axis="x", labelrotation=PAIR_LABEL_ROTATION)
