"""Figures of the multistart sweep, drawn from a ``SweepResult`` only.

- ``sweep-outcomes``: per step factor (and method), how the runs ended, as stacked shares.
- ``sweep-basins-<x>-<y>[-lm]``: basin maps, one panel per step factor (``sweep_maps``).
- ``sweep-iterations-<x>-<y>[-lm]``: iterations to the best solution on the same maps.
- ``sweep-cases``: example failing runs, each parameter against the iteration.
- ``sweep-cases-map-<x>-<y>[-lm]``: failing runs started on a map, their paths on it.

This module lists the figures and hands them out; ``sweep_charts`` draws each one. Only that
module imports matplotlib (about a second), so a command whose figures are drawn by worker
processes never imports it itself.
"""
from __future__ import annotations

import functools
from collections.abc import Callable
from pathlib import Path

from ..sweep.result import SweepResult
from .drawn_once import drawn_once


@drawn_once("chunks", "cache")
def write_figures(result: SweepResult, folder: Path, formats: tuple[str, ...] = ("png",), *,
                  mapper: Callable = map) -> list[Path]:
    """Draw every sweep figure into ``folder`` in each of ``formats``; return the files written.

    ``mapper(function, items)`` runs the independent figures, e.g. over worker processes of this
    machine (the builtin ``map`` by default); the files are the same either way.
    """
    draw = functools.partial(_draw, result, Path(folder), formats)
    return [path for paths in mapper(draw, figure_list(result)) for path in paths]


def figure_list(result: SweepResult) -> list[tuple]:
    """What to draw, one entry a figure: (kind,) or (kind, map index, method index)."""
    per_map = [(kind, i, m) for i in range(len(result.maps)) for m in range(len(result.methods))
               for kind in ("basins", "iterations", "cases-map")]
    return [("outcomes",), *per_map, ("cases",)]


def _draw(result: SweepResult, folder: Path, formats: tuple[str, ...], figure: tuple) -> list[Path]:
    from .sweep_charts import draw_figure   # matplotlib: imported by the process that draws

    return draw_figure(result, folder, formats, figure)
