"""Figures of the uncertainty stage, drawn from a ``BootstrapResult`` only.

- ``bootstrap-histograms``: per parameter, the histogram of the used replicates with the
  linearised (t) sampling density dashed over it, and the t, percentile and BCa intervals as
  brackets above it.
- ``bootstrap-pairs``: per parameter pair, the used replicates (points, or a hexagonal density
  for many) with the asymptotic joint confidence ellipse dashed over them.

This module writes the figures without importing matplotlib (about a second); ``bootstrap_charts``
draws them, imported by the process that draws, so that ``fitaudit run`` can leave the drawing and
the import to its workers, or skip both when the figures are already drawn.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from ..uncertainty.bootstrap import BootstrapResult
from .drawn_once import drawn_once


@drawn_once("chunks", "cache")
def write_figures(result: BootstrapResult, folder: Path, formats: tuple[str, ...] = ("png",)) -> list[Path]:
    """Draw the histograms and (for two or more parameters) the pairs plot into ``folder``.

    Returns:
        The files written (one per figure and format; PNG unless a report asks for PDF too); none
        when no replicate was usable.
    """
    used = result.replicates.params[result.replicates.used]
    if len(used) < 2 or not np.all(np.isfinite(result.std_error)):
        return []
    from .bootstrap_charts import draw_figures   # matplotlib: imported by the process that draws

    return draw_figures(result, used, Path(folder), formats)
