"""Drawing one figure of the multistart sweep (``sweep`` lists them and writes them): the outcome
bars and the failing runs' paths here, the basin maps in ``sweep_maps``.

This module imports matplotlib, so only a process that draws imports it.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from ..sweep.result import CATEGORIES, SweepResult
from .layout import GAP, arrange, heading, legend_below, panel_figure, renderer_of, text_size
from .style import OUTCOME_MARKERS, OUTCOME_STYLE, decade_ticks, plt, save
from .sweep_maps import basin_figure, cases_on_map_figure, iteration_figure

#: Line styles that tell step factors apart in the path plots (cycled).
FACTOR_LINES = ("-", "--", ":", "-.")
#: Paths are shown within the range widened by this fraction on each side; runaway iterates
#: leave the panel instead of flattening everything else.
PATH_MARGIN = 0.5


def draw_figure(result: SweepResult, folder: Path, formats: tuple[str, ...], figure: tuple) -> list[Path]:
    """Draw the figure ``figure`` (an entry of ``sweep.figure_list``) into ``folder``; return its files."""
    kind = figure[0]
    if kind == "outcomes":
        return _outcome_bars(result, folder, formats)
    if kind == "cases":
        return _paths_figure(result, folder, formats)
    basin_map, m = result.maps[figure[1]], figure[2]
    method = result.methods[m]
    suffix = f"{basin_map.x_name}-{basin_map.y_name}" + ("" if method == "gn" else f"-{method}")
    draw_map = {"basins": basin_figure, "iterations": iteration_figure, "cases-map": cases_on_map_figure}[kind]
    return draw_map(result, basin_map, m, folder, f"sweep-{kind}-{suffix}", formats)


def _outcome_bars(result: SweepResult, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    labels = [f"{factor:g}" + ("" if len(result.methods) == 1 else f"\n{method}")
              for method in result.methods for factor in result.step_factors]
    shares = result.shares.reshape(-1, len(CATEGORIES))
    figure, grid = panel_figure(1, 1, (max(4.8, 1.0 * len(labels) + 2.6), 4.4))
    axes = grid[0, 0]
    positions = np.arange(len(labels))
    bottom = np.zeros(len(labels))
    handles = []
    for k, label in enumerate(CATEGORIES):
        if not shares[:, k].any():
            continue
        colour, hatch, text = OUTCOME_STYLE[label]
        axes.bar(positions, shares[:, k], bottom=bottom, width=0.62, color=colour, hatch=hatch, edgecolor="black",
                 linewidth=0.5)
        handles.append(Patch(facecolor=colour, hatch=hatch, edgecolor="black", linewidth=0.5, label=text))
        bottom += shares[:, k]
    if result.recommended is not None:
        m, f = result.recommended
        column = m * len(result.step_factors) + f
        axes.annotate("recommended", (column, 1.0), xytext=(0, 4), textcoords="offset points", ha="center",
                      fontsize=8)
    axes.set_xticks(positions, labels)
    axes.set_xlabel("step factor")
    axes.set_ylabel("share of starts")
    axes.set_ylim(0, 1.08)
    axes.yaxis.set_major_formatter(plt.FuncFormatter(lambda value, _: f"{value:.0%}"))
    legend = axes.legend(handles=handles[::-1], loc="center left", bbox_to_anchor=(1.01, 0.5), fontsize=8,
                         frameon=False)
    axes.set_title(f"how {result.points} starts ended ({result.design} design)", fontsize=10)
    renderer = renderer_of(figure)
    # The legend starts 1 % of the axes' width right of it, plus its own border pad (under GAP).
    arrange(figure, grid, renderer, right=text_size(legend, renderer)[0] + GAP + 0.01 * figure.get_figwidth())
    return save(figure, folder, "sweep-outcomes", formats)


def _paths_figure(result: SweepResult, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    cases = [case for case in result.cases if case.source == "design"]
    if not cases:
        return []
    kinds = list(dict.fromkeys(case.kind for case in cases))
    n = len(result.names)
    figure, axes = panel_figure(n, len(kinds), (max(3.3 * len(kinds) + 0.6, 6.0), 1.9 * n + 1.2), sharex="col")
    factors = list(result.step_factors)
    for column, kind in enumerate(kinds):
        colour = OUTCOME_STYLE[kind][0]
        for case in (case for case in cases if case.kind == kind):
            style = FACTOR_LINES[factors.index(case.step_factor) % len(FACTOR_LINES)]
            steps = np.arange(len(case.path))
            for j in range(n):
                axes[j, column].plot(steps, case.path[:, j], color=colour, linestyle=style, linewidth=0.9,
                                     marker=OUTCOME_MARKERS[kind], markersize=2.5, markevery=max(1, len(steps) // 12))
        axes[0, column].set_title(OUTCOME_STYLE[kind][2], fontsize=9)
        axes[-1, column].set_xlabel("iteration")
        for j in range(n):
            _path_limits(axes[j, column], result, j)
            if np.isfinite(result.best_params[j]):
                axes[j, column].axhline(result.best_params[j], color="black", linewidth=0.6, linestyle=(0, (1, 2)))
    for j, name in enumerate(result.names):
        axes[j, 0].set_ylabel(name)
    handles = [Line2D([], [], color="black", linestyle=FACTOR_LINES[f % len(FACTOR_LINES)],
                      label=f"step factor {factor:g}") for f, factor in enumerate(factors)
               if any(case.step_factor == factor for case in cases)]
    handles.append(Line2D([], [], color="black", linewidth=0.6, linestyle=(0, (1, 2)), label="best fit"))
    renderer = renderer_of(figure)
    top = heading(figure, "example failing runs from the design: parameters at each iteration\n"
                  "(a path leaving its panel ran far beyond the range, or to zero or below on a log axis)", renderer,
                  fontsize=9)
    _, bottom = legend_below(figure, handles, len(handles), renderer)
    arrange(figure, axes, renderer, top=top, bottom=bottom)
    return save(figure, folder, "sweep-cases", formats)


def _path_limits(axes, result: SweepResult, j: int) -> None:
    low, high = result.lower[j], result.upper[j]
    if result.log[j]:
        decade_ticks(axes, "y")
        span = np.log10(high / low)
        axes.set_ylim(low / 10 ** (PATH_MARGIN * span), high * 10 ** (PATH_MARGIN * span))
    else:
        span = high - low
        axes.set_ylim(low - PATH_MARGIN * span, high + PATH_MARGIN * span)
