"""Figure of the data with the fitted curve and its pointwise confidence band.

The band comes from the asymptotic covariance by the delta method (``engine.band``). It is
usually far narrower than the data's range, so a lower panel shows it again around zero, beside
the data minus the fitted curve, where its width can be read. With one
predictor the curve and band are drawn on a fine grid across the data; with several, the fitted
values and their band are drawn at the observations against the first predictor, since a curve
through a higher-dimensional design has no single line to draw.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..engine.band import confidence_band
from ..engine.estimates import Estimates
from ..engine.problem import Problem
from .drawn_once import drawn_once
from .layout import arrange, panel_figure, renderer_of
from .style import ASYMPTOTIC, EMPIRICAL, plain_text, save

#: Points of the drawn curve across the data's range of the predictor.
CURVE_POINTS = 400
#: Heights of the two panels: the data and curve over the data minus the curve.
HEIGHTS = (2.0, 1.0)
STEM = "fit-band"


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
    figure, grid = panel_figure(2, 1, (6.4, 6.4), sharex=True)
    axes, below = grid[:, 0]
    data = dict(fmt="o", markersize=3, color=ASYMPTOTIC, ecolor=ASYMPTOTIC, elinewidth=0.8, zorder=3)
    axes.errorbar(picture.x, picture.y, yerr=picture.sigma,
                  label="data" + (" (±σ)" if picture.sigma is not None else ""), **data)
    level = f"{picture.confidence:.0%} confidence band of the curve"
    below.errorbar(picture.x, picture.y - picture.at_data, yerr=picture.sigma, **data)
    below.axhline(0.0, color=EMPIRICAL, linewidth=1.0)
    where, fitted, half = picture.where, picture.fitted, picture.half
    if picture.grid:
        axes.plot(where, fitted, color=EMPIRICAL, linewidth=1.4, label="fitted curve", zorder=4)
    else:
        axes.plot(where, fitted, "s", markersize=3, color=EMPIRICAL, label="fitted values", zorder=4)
    if np.isfinite(half).all():
        order = np.argsort(where, kind="stable")
        axes.fill_between(where[order], (fitted - half)[order], (fitted + half)[order], color=EMPIRICAL, alpha=0.25,
                          linewidth=0, label=level, zorder=2)
        below.fill_between(where[order], -half[order], half[order], color=EMPIRICAL, alpha=0.25, linewidth=0)
        axes.set_title(f"widest half-width of the band: {np.max(half):.3g}", fontsize=9)
    else:
        axes.set_title("no band: the covariance is undefined (the Jacobian lost rank)", fontsize=9)
    axes.set_ylabel(plain_text(picture.y_label))
    axes.legend(fontsize=8)
    below.set_xlabel(plain_text(picture.x_label))
    below.set_ylabel("data − fitted curve")
    arrange(figure, grid, renderer_of(figure), heights=HEIGHTS)
    return save(figure, folder, STEM, formats)
