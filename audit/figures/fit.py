"""Figure of the data with the fitted curve and its pointwise confidence band.

The band comes from the asymptotic covariance by the delta method (``engine.band``). With one
predictor the curve and band are drawn on a fine grid across the data; with several, the fitted
values and their band are drawn at the observations against the first predictor, since a curve
through a higher-dimensional design has no single line to draw.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from ..engine.band import confidence_band
from ..engine.estimates import Estimates
from ..engine.problem import Problem
from .style import ASYMPTOTIC, EMPIRICAL, new_figure, save

#: Points of the drawn curve across the data's range of the predictor.
CURVE_POINTS = 400
STEM = "fit-band"


def write_figure(problem: Problem, estimates: Estimates, folder: Path, *, x_label: str = "x", y_label: str = "y",
                 formats: tuple[str, ...] = ("png", "pdf")) -> list[Path]:
    """Draw ``folder/fit-band.<format>``: data (±σ where given), fitted curve, confidence band.

    Args:
        problem: the fitted problem (data, weights, model).
        estimates: the asymptotic estimates at the fit (params, covariance, t quantile, level).
        folder: where the files go (created if missing).
        x_label, y_label: axis labels (the data file's column names).
        formats: file formats.

    Returns:
        The files written, one per format.
    """
    figure, axes = new_figure()
    x = np.asarray(problem.x, dtype=float)
    first = x if x.ndim == 1 else x[0]
    sigma = None if problem.weights is None else 1.0 / np.sqrt(problem.weights)
    axes.errorbar(first, problem.y, yerr=sigma, fmt="o", markersize=3, color=ASYMPTOTIC, ecolor=ASYMPTOTIC,
                  elinewidth=0.8, label="data" + (" (±σ)" if sigma is not None else ""), zorder=3)
    level = f"{estimates.confidence:.0%} confidence band of the curve"
    if x.ndim == 1:
        grid = np.linspace(first.min(), first.max(), CURVE_POINTS)
        fitted, half = confidence_band(problem, estimates.params, estimates.covariance, estimates.t_quantile, grid)
        axes.plot(grid, fitted, color=EMPIRICAL, linewidth=1.4, label="fitted curve", zorder=4)
        if np.isfinite(half).all():
            axes.fill_between(grid, fitted - half, fitted + half, color=EMPIRICAL, alpha=0.25, linewidth=0,
                              label=level, zorder=2)
    else:
        fitted, half = confidence_band(problem, estimates.params, estimates.covariance, estimates.t_quantile)
        axes.errorbar(first, fitted, yerr=half if np.isfinite(half).all() else None, fmt="s", markersize=3,
                      color=EMPIRICAL, label=f"fitted values ({level})", zorder=4)
    if not np.isfinite(half).all():
        axes.set_title("no band: the covariance is undefined (the Jacobian lost rank)", fontsize=9)
    else:
        axes.set_title(f"widest half-width of the band: {np.max(half):.3g}", fontsize=9)
    axes.set_xlabel(x_label)
    axes.set_ylabel(y_label)
    axes.legend(fontsize=8)
    return save(figure, folder, STEM, formats)
