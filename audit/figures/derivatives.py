"""Figures of the derivative audit, drawn from a ``DerivativeAudit`` only.

- ``derivatives-columns``: one panel pair per parameter at the point where that column is worst:
  the true derivative (line) with the hand-derived values (open circles) over the observations,
  and below it their difference as a share of the column's size, inside the grey tolerance band.
  A wrong column shows at a glance: circles off the line, differences outside the band.
- ``derivatives-points``: every check point × every parameter, shaded by the relative error
  (digits lost), marked ✗ with the share of observations that disagree, hatched where the
  numeric reference is unreliable. A column wrong at some points only shows as a broken stripe,
  one wrong at some observations only as shares below 100 %. Without a hand-derived Jacobian it
  shows the engine's central differences instead.

This module writes the figures without importing matplotlib (about a second); ``derivatives_charts``
draws them, imported by the process that draws, so that ``fitaudit run`` can leave the drawing and
the import to its workers, or skip both when the figures are already drawn.
"""
from __future__ import annotations

from pathlib import Path

from ..derivatives.check import DerivativeAudit
from .drawn_once import drawn_once


@drawn_once()
def write_figures(result: DerivativeAudit, folder: Path, formats: tuple[str, ...] = ("png",)) -> list[Path]:
    """Write the audit's figures into ``folder`` in each of ``formats``; returns the paths written."""
    from .derivatives_charts import draw_figures   # matplotlib: imported by the process that draws

    return draw_figures(result, Path(folder), formats)
