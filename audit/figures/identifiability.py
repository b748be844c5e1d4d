"""Figures of the identifiability stage, drawn from an ``Identifiability`` result only.

* ``profiles``: each parameter's profile SSR against its walked values, the threshold line, the
  asymptotic interval (dashed) and the profile interval (solid bar between the refined ends,
  each marked where its refit met the threshold; an arrow to the walk's last point where open).
  The threshold is drawn over the bar; refits that failed are ticks on the bottom edge (they
  have no SSR to plot); an asymptotic end beyond the walked range is a triangle at that edge
  with its value written;
* ``correlation``: the correlation matrix as an annotated heat map;
* ``weak_directions``: the loadings of the weakest directions as bars (negative hatched);
* ``collinearity``: the collinearity index of each subset as a bar named by its subset, the
  highest first, with the limit.

This module writes the figures without importing matplotlib (about a second);
``identifiability_charts`` draws them, imported by the process that draws, so that ``fitaudit run``
can leave the drawing and the import to its workers, or skip both when the figures are already drawn.
"""
from __future__ import annotations

from pathlib import Path

from ..identifiability.analysis import Identifiability
from .drawn_once import drawn_once


@drawn_once()
def write_figures(result: Identifiability, folder: Path, formats: tuple[str, ...] = ("png",)) -> list[Path]:
    """Write the stage's figures into ``folder`` in each of ``formats``; return their paths."""
    from .identifiability_charts import draw_figures   # matplotlib: imported by the process that draws

    return draw_figures(result, Path(folder), formats)
