"""Figure of the data with the fitted curve and its pointwise confidence band.

The band comes from the asymptotic covariance by the delta method (``engine.band``). It is
usually far narrower than the data's range, so a lower panel shows it again around zero, beside
the data minus the fitted curve, where its width can be read. With one
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
from .style import ASYMPTOTIC, EMPIRICAL, plain_text, plt, save

#: Points of the drawn curve across the data's range of the predictor.
CURVE_POINTS = 400
STEM = "fit-band"


def write_figure(problem: Problem, estimates: Estimates, folder: Path, *, x_label: str = "x", y_label: str = "y",
                 formats: tuple[str, ...] = ("png", "pdf")) -> list[Path]:
    """Draw ``folder/fit-band.<format>``: data (±σ where given), fitted curve, confidence band; below,
    the data minus the curve with the band around zero.

    Args:
        problem: the fitted problem (data, weights, model).
        estimates: the asymptotic estimates at the fit (params, covariance, t quantile, level).
        folder: where the files go (created if missing).
        x_label, y_label: axis labels (the data file's column names).
        formats: file formats.

    Returns:
        The files written, one per format.
    """
    figure, (axes, below) = plt.subplots(2, 1, figsize=(6.4, 6.4), sharex=True, height_ratios=(2, 1),
                                         constrained_layout=True)
    x = np.asarray(problem.x, dtype=float)
    first = x if x.ndim == 1 else x[0]
    sigma = None if problem.weights is None else 1.0 / np.sqrt(problem.weights)
    data = dict(fmt="o", markersize=3, color=ASYMPTOTIC, ecolor=ASYMPTOTIC, elinewidth=0.8, zorder=3)
    axes.errorbar(first, problem.y, yerr=sigma, label="data" + (" (±σ)" if sigma is not None else ""), **data)
    level = f"{estimates.confidence:.0%} confidence band of the curve"
    at_data, _ = confidence_band(problem, estimates.params, estimates.covariance, estimates.t_quantile)
    below.errorbar(first, problem.y - at_data, yerr=sigma, **data)
    below.axhline(0.0, color=EMPIRICAL, linewidth=1.0)
    if x.ndim == 1:
        where = np.linspace(first.min(), first.max(), CURVE_POINTS)
        fitted, half = confidence_band(problem, estimates.params, estimates.covariance, estimates.t_quantile, where)
        axes.plot(where, fitted, color=EMPIRICAL, linewidth=1.4, label="fitted curve", zorder=4)
    else:
        where = first
        fitted, half = confidence_band(problem, estimates.params, estimates.covariance, estimates.t_quantile)
        axes.plot(first, fitted, "s", markersize=3, color=EMPIRICAL, label="fitted values", zorder=4)
    if np.isfinite(half).all():
        order = np.argsort(where, kind="stable")
        axes.fill_between(where[order], (fitted - half)[order], (fitted + half)[order], color=EMPIRICAL, alpha=0.25,
                          linewidth=0, label=level, zorder=2)
        below.fill_between(where[order], -half[order], half[order], color=EMPIRICAL, alpha=0.25, linewidth=0)
        axes.set_title(f"widest half-width of the band: {np.max(half):.3g}", fontsize=9)
    else:
        axes.set_title("no band: the covariance is undefined (the Jacobian lost rank)", fontsize=9)
    axes.set_ylabel(plain_text(y_label))
    axes.legend(fontsize=8)
    below.set_xlabel(plain_text(x_label))
    below.set_ylabel("data − fitted curve")
    return save(figure, folder, STEM, formats)
