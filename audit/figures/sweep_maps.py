"""Basin maps of a sweep: where starts lead, how long they take, and failing paths on the map.

Every map panel is one step factor. Cells are coloured by what the run from that start did
(the best solution, another solution, or a failure kind), each kind also hatched, so the map
reads in greyscale. The best fit is a white star, the scenario's own start a white circle, a
solution outside the searched ranges a hollow diamond (``sweep_outside``), the safe starting
region a dashed box, drawn the same in the legend.
"""
from __future__ import annotations

import math
import textwrap
from pathlib import Path

import numpy as np
from matplotlib import patheffects
from matplotlib.colors import BoundaryNorm, ListedColormap
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, Rectangle

from ..sweep.result import BEST, CATEGORIES, OTHER, BasinMap, SweepResult
from .layout import (COLORBAR_SHRINK, arrange, colorbar_beside, colorbar_room, heading, legend_below, panel_figure,
                     place_colorbar, renderer_of)
from .style import (OUTCOME_MARKERS, OUTCOME_STYLE, SOLUTION_COLOURS, decade_ticks, legend_columns, plain_text, plt,
                    save)
from .sweep_outside import further_rows, mark_outside, outside_handle, outside_note, outside_rows

PANEL_SIZE = 3.1
#: Other solutions drawn each in their own colour; later ones share one.
NAMED_SOLUTIONS = 3
#: The best fit and the scenario's start on a map, as keywords of a line of markers only (``Axes.plot``):
#: the look scatter gave them (s = 170 and 60 pt², so markers sqrt(s) pt across) at a fraction of the
#: cost of a scatter's collection, made for one point.
BEST_FIT = dict(linestyle="none", marker="*", markersize=170 ** 0.5, markerfacecolor="white", markeredgecolor="black",
                markeredgewidth=1.0, zorder=5)
START = dict(linestyle="none", marker="o", markersize=60 ** 0.5, markerfacecolor="white", markeredgecolor="black",
             markeredgewidth=1.2, zorder=5)
#: A failing run's start on its path (scatter's s = 30 pt² and default edge width, rcParams' lines.linewidth).
CASE_START = dict(linestyle="none", marker="o", markersize=30 ** 0.5, markerfacecolor="white", markeredgewidth=1.5,
                  zorder=4)
#: The safe starting region: black dashes on a white halo, which show on dark and light cells
#: alike and on the legend's white ground, where the legend draws the same unfilled outline.
REGION = dict(fill=False, edgecolor="black", linestyle="--", linewidth=1.6, zorder=4,
              path_effects=[patheffects.Stroke(linewidth=3.6, foreground="white"), patheffects.Normal()])
#: Artist id of the region's outline (``Artist.get_gid``), for tests that find it.
REGION_GID = "safe-region"
#: Cells whose run did not reach the best solution, on iteration maps: hatched white, apart
#: from every colour of the scale, in greyscale too.
UNREACHED = dict(facecolor="white", hatch="////", edgecolor="#9a9a9a")
#: Narrow figures (one or two panels) keep room for their heading and legend.
MIN_WIDTH = 6.0


def map_classes(result: SweepResult, basin_map: BasinMap, m: int) -> tuple[np.ndarray, list[tuple[str, str, str]]]:
    """Display class of every cell of a map for method ``m`` and the classes' look.

    Returns:
        (F, r, r) class indices and a list of (colour, hatch, legend text) per class.
    """
    looks: list[tuple[str, str, str]] = [OUTCOME_STYLE["best"]]
    classes = np.zeros(basin_map.category.shape[1:], dtype=np.int64)
    solution = basin_map.solution[m]
    category = basin_map.category[m]
    hatch = OUTCOME_STYLE["other"][1]
    for s in range(1, NAMED_SOLUTIONS + 1):
        outside = outside_note(result, [s])
        notes = _same_curve(result, s) + (f", {outside}" if outside else "")
        looks.append((SOLUTION_COLOURS[s], hatch, f"solution {s + 1} (SSR {_ssr(result, s)}{notes})"))
    further = outside_note(result, further_rows(solution, NAMED_SOLUTIONS))
    looks.append((SOLUTION_COLOURS[NAMED_SOLUTIONS + 1], hatch,
                  f"further solutions ({further})" if further else "further solutions"))
    for s in range(1, NAMED_SOLUTIONS + 1):
        classes[solution == s] = s
    classes[(category == OTHER) & ((solution > NAMED_SOLUTIONS) | (solution < 0))] = NAMED_SOLUTIONS + 1
    for k, label in enumerate(CATEGORIES[2:], start=2):
        looks.append(OUTCOME_STYLE[label])
        classes[category == k] = NAMED_SOLUTIONS + k
    return classes, looks


def _same_curve(result: SweepResult, s: int) -> str:
    return ", same curve as the best" if s < len(result.solution_same_curve) and result.solution_same_curve[s] else ""


def _ssr(result: SweepResult, s: int) -> str:
    return f"{result.solution_ssr[s]:.4g}" if s < len(result.solution_ssr) else "—"


def cell_edges(values: np.ndarray, log: bool) -> np.ndarray:
    """(r + 1,) edges of cells centred on ``values`` (midpoints; geometric on a log axis)."""
    axis = np.log10(values) if log else values
    middle = (axis[1:] + axis[:-1]) / 2
    edges = np.concatenate([[axis[0] - (middle[0] - axis[0])], middle, [axis[-1] + (axis[-1] - middle[-1])]])
    return 10.0 ** edges if log else edges


def panel_grid(count: int):
    """A figure with ``count`` map panels in up to four columns, laid out by ``finish``: (figure, axes array)."""
    columns = min(count, 4)
    rows = math.ceil(count / columns)
    size = (max(PANEL_SIZE * columns + 0.4, MIN_WIDTH), PANEL_SIZE * rows + 1.3)
    figure, axes = panel_figure(rows, columns, size, sharex=True, sharey=True)
    for extra in axes.flat[count:]:
        extra.set_visible(False)
    return figure, axes


def finish(figure, axes, title: str, handles: list, columns: int, bar=None) -> None:
    """The heading above, the legend of ``handles`` below (at most ``columns`` columns), an optional
    colour bar right of the panels, and the panels placed between them."""
    renderer = renderer_of(figure)
    top = heading(figure, title, renderer, fontsize=10)
    _, bottom = legend_below(figure, handles, columns, renderer)
    right = colorbar_room(bar, renderer) if bar is not None else 0.0
    arrange(figure, axes, renderer, top=top, bottom=bottom, right=right)
    if bar is not None:
        place_colorbar(figure, axes, bar, renderer)


def draw_classes(axes, basin_map: BasinMap, classes: np.ndarray, looks, alpha: float = 1.0) -> None:
    """Colour and hatch one panel by class."""
    x_edges, y_edges = cell_edges(basin_map.x_values, basin_map.x_log), cell_edges(basin_map.y_values, basin_map.y_log)
    colours = ListedColormap([look[0] for look in looks])
    norm = BoundaryNorm(np.arange(len(looks) + 1) - 0.5, len(looks))
    axes.pcolormesh(x_edges, y_edges, classes, cmap=colours, norm=norm, alpha=alpha, rasterized=True)
    for index, (_, hatch, _) in enumerate(looks):
        mask = classes == index
        if hatch and mask.any() and alpha == 1.0:
            with plt.rc_context({"hatch.color": "black", "hatch.linewidth": 0.5}):
                axes.contourf(basin_map.x_values, basin_map.y_values, mask.astype(float), levels=[0.5, 1.5],
                              colors="none", hatches=[hatch])
    _axes_style(axes, basin_map)


def _axes_style(axes, basin_map: BasinMap) -> None:
    if basin_map.x_log:
        decade_ticks(axes, "x")
    if basin_map.y_log:
        decade_ticks(axes, "y")
    axes.set_xlim(*cell_edges(basin_map.x_values, basin_map.x_log)[[0, -1]])
    axes.set_ylim(*cell_edges(basin_map.y_values, basin_map.y_log)[[0, -1]])


def mark_points(axes, result: SweepResult, basin_map: BasinMap) -> None:
    """The best fit (star) and the scenario's start (circle) on a map panel."""
    x, y = result.names.index(basin_map.x_name), result.names.index(basin_map.y_name)
    if np.all(np.isfinite(result.best_params)):
        axes.plot([result.best_params[x]], [result.best_params[y]], **BEST_FIT)
    axes.plot([result.start[x]], [result.start[y]], **START)


def mark_region(axes, result: SweepResult, basin_map: BasinMap, m: int, f: int) -> bool:
    """The safe starting region of method ``m`` and factor ``f`` as a dashed box; False if none."""
    low, high = result.region_lower[m, f], result.region_upper[m, f]
    if not np.all(np.isfinite(low)):
        return False
    x, y = result.names.index(basin_map.x_name), result.names.index(basin_map.y_name)
    axes.add_patch(Rectangle((low[x], low[y]), high[x] - low[x], high[y] - low[y], **REGION, gid=REGION_GID))
    return True


def marker_legend() -> list[Line2D]:
    return [Line2D([], [], linestyle="none", markersize=11, markerfacecolor="white", markeredgecolor="black",
                   marker=BEST_FIT["marker"], label="best fit"),
            Line2D([], [], linestyle="none", markersize=7, markerfacecolor="white", markeredgecolor="black",
                   marker=START["marker"], label="scenario start")]


def basin_figure(result: SweepResult, basin_map: BasinMap, m: int, folder: Path, stem: str,
                 formats: tuple[str, ...]) -> list[Path]:
    """One panel per step factor, cells coloured by where the run from them ended."""
    classes, looks = map_classes(result, basin_map, m)
    figure, axes = panel_grid(len(result.step_factors))
    regions = outside = False
    for f, factor in enumerate(result.step_factors):
        panel = axes.flat[f]
        draw_classes(panel, basin_map, classes[f], looks)
        regions |= mark_region(panel, result, basin_map, m, f)
        mark_points(panel, result, basin_map)
        rows = outside_rows(result, np.unique(basin_map.solution[m, f]))
        mark_outside(panel, result, basin_map, rows, NAMED_SOLUTIONS)
        outside |= bool(rows)
        panel.set_title(f"step factor {factor:g}\n{basin_map.shares[m, f, BEST]:.0%} of this map reach the best",
                        fontsize=9)
    _labels(axes, basin_map)
    present = sorted(set(np.unique(classes).tolist()))
    handles = [Patch(facecolor=looks[i][0], hatch=looks[i][1], edgecolor="black", linewidth=0.5, label=looks[i][2])
               for i in present] + marker_legend()
    if outside:
        handles.append(outside_handle())
    if regions:
        handles.append(Patch(**REGION, label=f"safe starting region (≥{result.region_level:.0%} reach the best)"))
    columns = min(4, legend_columns([handle.get_label() for handle in handles], figure.get_figwidth()))
    finish(figure, axes, _heading(result, basin_map, m, "where each start leads"), handles, columns)
    return save(figure, folder, stem, formats)


def iteration_figure(result: SweepResult, basin_map: BasinMap, m: int, folder: Path, stem: str,
                     formats: tuple[str, ...]) -> list[Path]:
    """One panel per step factor: iterations taken by runs that reached the best solution."""
    reached = basin_map.category[m] == BEST
    if not reached.any():
        return []
    counts = np.where(reached, basin_map.iterations[m], np.nan)
    top = float(np.nanmax(counts))
    figure, axes = panel_grid(len(result.step_factors))
    x_edges, y_edges = cell_edges(basin_map.x_values, basin_map.x_log), cell_edges(basin_map.y_values, basin_map.y_log)
    image = None
    for f, factor in enumerate(result.step_factors):
        panel = axes.flat[f]
        panel.patch.set(**UNREACHED)
        image = panel.pcolormesh(x_edges, y_edges, counts[f], cmap="cividis_r", vmin=0, vmax=max(top, 1),
                                 rasterized=True)
        _axes_style(panel, basin_map)
        mark_points(panel, result, basin_map)
        median = np.nanmedian(counts[f]) if reached[f].any() else float("nan")
        panel.set_title(f"step factor {factor:g}: median {median:.0f}", fontsize=9)
    _labels(axes, basin_map)
    bar = colorbar_beside(figure, image, "iterations to the best solution",
                          COLORBAR_SHRINK * PANEL_SIZE * axes.shape[0])
    handles = [Patch(**UNREACHED, linewidth=0.5, label="did not reach the best")]
    finish(figure, axes, _heading(result, basin_map, m, "iterations needed"), handles + marker_legend(), 3, bar)
    return save(figure, folder, stem, formats)


def cases_on_map_figure(result: SweepResult, basin_map: BasinMap, m: int, folder: Path, stem: str,
                        formats: tuple[str, ...]) -> list[Path]:
    """Failing runs started on the map, their paths drawn over the faded basin map."""
    source = f"map {basin_map.x_name}/{basin_map.y_name}"
    cases = [case for case in result.cases if case.source == source and case.method == result.methods[m]]
    factors = sorted({case.step_factor for case in cases}, reverse=True)
    if not factors:
        return []
    classes, looks = map_classes(result, basin_map, m)
    figure, axes = panel_grid(len(factors))
    x, y = result.names.index(basin_map.x_name), result.names.index(basin_map.y_name)
    kinds = []
    for panel, factor in zip(axes.flat, factors):
        f = int(np.flatnonzero(result.step_factors == factor)[0])
        draw_classes(panel, basin_map, classes[f], looks, alpha=0.35)
        for case in (case for case in cases if case.step_factor == factor):
            colour = OUTCOME_STYLE[case.kind][0]
            panel.plot(case.path[:, x], case.path[:, y], color=colour, linewidth=1.0,
                       marker=OUTCOME_MARKERS[case.kind], markersize=3.5)
            panel.plot([case.start[x]], [case.start[y]], markeredgecolor=colour, **CASE_START)
            kinds.append(case.kind)
        mark_points(panel, result, basin_map)
        panel.set_title(f"step factor {factor:g}", fontsize=9)
    _labels(axes, basin_map)
    handles = [Line2D([], [], color=OUTCOME_STYLE[kind][0], marker=OUTCOME_MARKERS[kind], markersize=5,
                      label=f"{OUTCOME_STYLE[kind][2]} (path)") for kind in dict.fromkeys(kinds)]
    finish(figure, axes, _heading(result, basin_map, m, "paths of failing runs (open circle: their start)"),
           handles + marker_legend(), 4)
    return save(figure, folder, stem, formats)


def _labels(axes, basin_map: BasinMap) -> None:
    for panel in axes[-1, :]:
        panel.set_xlabel(plain_text(basin_map.x_name))
    for panel in axes[:, 0]:
        panel.set_ylabel(plain_text(basin_map.y_name))


def _heading(result: SweepResult, basin_map: BasinMap, m: int, what: str) -> str:
    held = [f"{name} = {value:.4g}" for name, value in zip(result.names, basin_map.base)
            if name not in (basin_map.x_name, basin_map.y_name)]
    method = "Gauss-Newton" if result.methods[m] == "gn" else "Levenberg-Marquardt"
    where = f"; {', '.join(held)} (best fit)" if held else ""
    return textwrap.fill(f"{method}: {what}, {basin_map.x_name} × {basin_map.y_name}{where}", 90)
