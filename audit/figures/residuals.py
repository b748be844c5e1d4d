"""Figure of the residual checks, drawn from a ``ResidualChecks`` plus the fit's x and fitted
values: weighted residuals against x (in x order, so runs of one sign show), against the fitted
values (a funnel shows changing spread), and a normal quantile plot (scipy.stats.probplot;
points off the line show skew or heavy tails). Each panel's title carries its checks' findings
in short.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
from scipy import stats

from audit.figures.drawn_once import drawn_once
from audit.figures.layout import arrange, heading, panel_figure, renderer_of
from audit.figures.style import ASYMPTOTIC, EMPIRICAL, plain_text, save

if TYPE_CHECKING:
    from audit.residuals import ResidualChecks

PANEL_WIDTH = 4.2
PANEL_HEIGHT = 3.8


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
    result, first, fitted, x_label = picture.checks, picture.x, picture.fitted, picture.x_label
    weighted = result.weighted_residuals
    figure, grid = panel_figure(1, 3, (3 * PANEL_WIDTH, PANEL_HEIGHT))

    along_x, against_fitted, quantiles = axes = grid[0]
    along_x.plot(first[result.order], weighted[result.order], color=EMPIRICAL, lw=0.6, alpha=0.5)
    along_x.scatter(first, weighted, s=14, color=EMPIRICAL, zorder=3)
    _zero_line(along_x)
    x_label = plain_text(x_label)
    along_x.set_xlabel(x_label)
    along_x.set_ylabel("weighted residual r·√w")
    along_x.set_title(f"against {x_label}\nruns: {result.runs.status}, Durbin-Watson: {result.serial.status}",
                      fontsize="small")

    against_fitted.scatter(fitted, weighted, s=14, color=EMPIRICAL, zorder=3)
    _zero_line(against_fitted)
    against_fitted.set_xlabel("fitted value")
    against_fitted.set_title(f"against the fitted values\nconstant spread: {result.variance.status} "
                             f"(Breusch-Pagan), {result.variance_rank.status} (rank)", fontsize="small")

    (theoretical, ordered), (slope, intercept, _) = stats.probplot(weighted, dist="norm")
    quantiles.scatter(theoretical, ordered, s=14, color=EMPIRICAL, zorder=3)
    quantiles.plot(theoretical, slope * theoretical + intercept, color=ASYMPTOTIC, ls="--", lw=1.2)
    quantiles.set_xlabel("normal quantile")
    quantiles.set_ylabel("ordered weighted residual")
    quantiles.set_title(f"normal quantile plot\nShapiro-Wilk: {result.normality.status}", fontsize="small")

    for ax in axes:
        ax.ticklabel_format(useOffset=False)
    renderer = renderer_of(figure)
    top = heading(figure, f"Residual checks: {result.status}; bootstrap scheme suited: {result.scheme}", renderer,
                  fontsize="medium")
    arrange(figure, grid, renderer, top=top)
    return save(figure, Path(folder), "residuals", formats)


def _zero_line(ax) -> None:
    ax.axhline(0.0, color=ASYMPTOTIC, lw=1, ls="--")
