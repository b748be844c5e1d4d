"""Figure of the residual checks, drawn from a ``ResidualChecks`` plus the fit's x and fitted
values: weighted residuals against x (in x order, so runs of one sign show), against the fitted
values (a funnel shows changing spread), and a normal quantile plot (scipy.stats.probplot;
points off the line show skew or heavy tails). Each panel's title carries its checks' findings
in short.

This module writes the figure without importing matplotlib or scipy.stats (about a second between
them); ``residuals_charts`` draws it, imported by the process that draws, so that ``fitaudit run``
can leave the drawing and the imports to its workers, or skip both when the figure is already drawn.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from .drawn_once import drawn_once

if TYPE_CHECKING:
    from ..residuals import ResidualChecks


def write_figures(result: ResidualChecks, x, fitted, folder: Path, formats: tuple[str, ...] = ("png",),
                  x_label: str = "x") -> list[Path]:
    """Draw the three residual panels into ``folder/residuals.<format>``.

    Args:
        result: the checks of the fit.
        x: (m,) or (m, k) predictors in the order given to the checks; the first is drawn.
        fitted: (m,) fitted values, same order.
        folder: where the files go (created if missing).
        formats: file formats, e.g. ("png",) or ("png", "pdf").
        x_label: axis label of the first predictor.

    Returns:
        The files written, one per format. A rerun that finds the same picture drawn in
        ``folder`` keeps its files.
    """
    return draw_picture(residual_picture(result, x, fitted, x_label), folder, formats)


@dataclass(frozen=True)
class ResidualPicture:
    """What the residual figure shows: the checks, the first predictor (m,), the fitted values (m,)
    and the predictor's label."""

    checks: ResidualChecks
    x: np.ndarray
    fitted: np.ndarray
    x_label: str


def residual_picture(result: ResidualChecks, x, fitted, x_label: str = "x") -> ResidualPicture:
    """What the residual figure of ``result`` shows (arguments as ``write_figures``)."""
    x = np.asarray(x, dtype=float)
    return ResidualPicture(result, x if x.ndim == 1 else x[:, 0], np.asarray(fitted, dtype=float), x_label)


@drawn_once()
def draw_picture(picture: ResidualPicture, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    """Draw ``picture`` into ``folder/residuals.<format>`` (see ``write_figures``)."""
    from .residuals_charts import draw_residuals   # matplotlib: imported by the process that draws

    return draw_residuals(picture, Path(folder), formats)
