"""Figure of the data with the fitted curve and its pointwise confidence band.

The band comes from the asymptotic covariance by the delta method (``engine.band``). It is
usually far narrower than the data's range, so a lower panel shows it again around zero, beside
the data minus the fitted curve, where its width can be read. With one
predictor the curve and band are drawn on a fine grid across the data; with several, the fitted
values and their band are drawn at the observations against the first predictor, since a curve
through a higher-dimensional design has no single line to draw.

This module computes the picture and writes it without importing matplotlib (about a second);
``fit_charts`` draws it, imported by the process that draws, so that ``fitaudit run`` can leave the
drawing and the import to its workers, or skip both when the figure is already drawn.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..engine.band import confidence_band
from ..engine.estimates import Estimates
from ..engine.problem import Problem
from .drawn_once import drawn_once

#: Points of the drawn curve across the data's range of the predictor.
CURVE_POINTS = 400


@dataclass(frozen=True)
class FitPicture:
    """Every number the fit figure shows, so that an unchanged picture is not drawn again.

    Attributes:
        x: (m,) the first predictor at the observations; y: (m,) the observations; sigma: (m,)
            their standard deviations, or None without weights.
        at_data: (m,) the fitted values at the observations.
        where: (g,) where the curve is drawn (a grid across the data with one predictor, the
            observations with several); fitted, half: (g,) the curve and its band's half-width.
        grid: True when ``where`` is a grid (drawn as a line), False for fitted values at the data.
        confidence: the band's level, e.g. 0.95; x_label, y_label: the axis labels.
    """

    x: np.ndarray
    y: np.ndarray
    sigma: np.ndarray | None
    at_data: np.ndarray
    where: np.ndarray
    fitted: np.ndarray
    half: np.ndarray
    grid: bool
    confidence: float
    x_label: str
    y_label: str


def fit_picture(problem: Problem, estimates: Estimates, x_label: str = "x", y_label: str = "y") -> FitPicture:
    """The numbers of the fit figure of ``problem`` at ``estimates`` (see ``write_figure``)."""
    x = np.asarray(problem.x, dtype=float)
    first = x if x.ndim == 1 else x[0]
    sigma = None if problem.weights is None else 1.0 / np.sqrt(problem.weights)
    band = (estimates.params, estimates.covariance, estimates.t_quantile)
    at_data, half_at_data = confidence_band(problem, *band)
    if x.ndim == 1:
        where = np.linspace(first.min(), first.max(), CURVE_POINTS)
        fitted, half = confidence_band(problem, *band, where)
    else:
        where, fitted, half = first, at_data, half_at_data
    return FitPicture(first, np.asarray(problem.y, dtype=float), sigma, at_data, where, fitted, half, x.ndim == 1,
                      estimates.confidence, x_label, y_label)


def write_figure(problem: Problem, estimates: Estimates, folder: Path, *, x_label: str = "x", y_label: str = "y",
                 formats: tuple[str, ...] = ("png", "pdf")) -> list[Path]:
    """Draw ``folder/fit-band.<format>``: data (±σ where given), fitted curve, confidence band; below,
    the data minus the curve with the band around zero. A rerun that finds the same picture drawn
    there keeps its files.

    Args:
        problem: the fitted problem (data, weights, model).
        estimates: the asymptotic estimates at the fit (params, covariance, t quantile, level).
        folder: where the files go (created if missing).
        x_label, y_label: axis labels (the data file's column names).
        formats: file formats.

    Returns:
        The files written, one per format.
    """
    return draw_picture(fit_picture(problem, estimates, x_label, y_label), folder, formats)


@drawn_once()
def draw_picture(picture: FitPicture, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    """Draw ``picture`` into ``folder/fit-band.<format>`` (see ``write_figure``)."""
    from .fit_charts import draw_fit   # matplotlib: imported by the process that draws

    return draw_fit(picture, Path(folder), formats)
