"""Solutions outside the searched ranges, marked on a basin map so that their cells are not read
as minima inside the map.

A catalogued solution that some starts of the map reach, but whose parameters lie outside the
ranges, gets a hollow diamond: at its place when its two mapped parameters fall inside the map
(a held parameter is the one outside), else at the map's edge in its direction (on a log axis, a
value at or below zero goes to the lower edge). The numbers of the solutions the legend
names are written beside their marks, towards the inside of the map; further solutions (a map
can reach dozens outside the ranges) get the mark only, all in one call.
"""
from __future__ import annotations

import numpy as np
from matplotlib import patheffects
from matplotlib.lines import Line2D

from ..sweep.result import BasinMap, SweepResult

#: White outline on a black halo: shows on the darkest and the lightest cells and on the legend.
HALO = [patheffects.Stroke(linewidth=3.2, foreground="black"), patheffects.Normal()]
OUTSIDE = dict(marker="D", s=46, facecolor="none", edgecolor="white", linewidth=1.4, zorder=6, clip_on=False,
               path_effects=HALO)
OUTSIDE_LABEL = "solution outside the ranges (at the edge if off the map)"
#: Artist id of the marks (``Artist.get_gid``), for tests that find them.
OUTSIDE_GID = "outside-the-ranges"


def outside_rows(result: SweepResult, rows) -> list[int]:
    """The catalogue rows among ``rows`` (solution codes: −1 and −2 are not rows) whose solution
    lies outside the searched ranges."""
    rows = np.asarray(rows, dtype=np.int64)
    rows = rows[(rows >= 0) & (rows < len(result.solution_inside))]
    return rows[~np.asarray(result.solution_inside, dtype=bool)[rows]].tolist()


def map_positions(values: np.ndarray, edges: tuple[float, float]) -> tuple[np.ndarray, np.ndarray]:
    """Where ``values`` are drawn on a map axis spanning ``edges``: (positions, sides), side −1 or
    +1 where a value was moved to the lower or upper edge, 0 where it lies on the map. (A log
    axis has a positive lower edge, so values at or below zero go to it.)"""
    low, high = edges
    below, above = values < low, values > high
    return np.where(below, low, np.where(above, high, values)), above.astype(int) - below.astype(int)


def mark_outside(axes, result: SweepResult, basin_map: BasinMap, rows: list[int], numbered: int) -> None:
    """Hollow diamonds for the solutions ``rows`` (catalogue rows outside the ranges) on one map
    panel, one per place, in one call; beside those of rows up to ``numbered`` (the ones the legend
    names), their numbers as in the legend (row + 1)."""
    if not rows:
        return
    x, y = result.names.index(basin_map.x_name), result.names.index(basin_map.y_name)
    chosen = np.asarray(rows)
    x_at, x_side = map_positions(result.solution_params[chosen, x], axes.get_xlim())
    y_at, y_side = map_positions(result.solution_params[chosen, y], axes.get_ylim())
    places = np.unique(np.column_stack([x_at, y_at]), axis=0)
    axes.scatter(places[:, 0], places[:, 1], **OUTSIDE, gid=OUTSIDE_GID)
    numbers: dict[tuple[float, float, int, int], list[int]] = {}
    for k in np.flatnonzero(chosen <= numbered):
        numbers.setdefault((x_at[k], y_at[k], x_side[k], y_side[k]), []).append(int(chosen[k]) + 1)
    for (x_place, y_place, x_edge, y_edge), written in numbers.items():
        # The numbers go towards the inside of the map, away from the edge the mark sits on.
        inward = (-7 * x_edge if x_edge else 7, -7 * y_edge if y_edge else 7)
        axes.annotate(", ".join(map(str, written)), (x_place, y_place), xytext=inward, textcoords="offset points",
                      ha="right" if x_edge > 0 else "left", va="top" if y_edge > 0 else "bottom", fontsize=7,
                      zorder=6, gid=OUTSIDE_GID,
                      bbox=dict(boxstyle="round,pad=0.15", facecolor="white", edgecolor="none", alpha=0.85))


def outside_handle() -> Line2D:
    """The legend entry of the marks."""
    return Line2D([], [], linestyle="none", marker=OUTSIDE["marker"], markersize=7, markerfacecolor="none",
                  markeredgecolor=OUTSIDE["edgecolor"], markeredgewidth=OUTSIDE["linewidth"], path_effects=HALO,
                  label=OUTSIDE_LABEL)


def outside_note(result: SweepResult, rows) -> str:
    """For a legend entry of solutions (catalogue rows): "outside the ranges" where all lie
    outside, "some outside the ranges" where some do, else ""."""
    rows = list(rows)
    outside = outside_rows(result, rows)
    if not outside:
        return ""
    return "outside the ranges" if len(outside) == len(rows) else "some outside the ranges"


def further_rows(solution: np.ndarray, named: int) -> np.ndarray:
    """Catalogue rows beyond the ``named`` ones that a map's cells (any shape) reached."""
    reached = np.unique(solution)
    return reached[reached > named]
