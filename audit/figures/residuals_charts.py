"""Drawing the residual figure (``residuals`` writes it) from a ``ResidualPicture``: the three
panels, the normal quantiles from scipy.stats.probplot.

This module imports matplotlib and scipy.stats, so only a process that draws imports them.
"""
from __future__ import annotations

from pathlib import Path

from scipy import stats

from .layout import arrange, heading, panel_figure, renderer_of
from .residuals import ResidualPicture
from .style import ASYMPTOTIC, EMPIRICAL, plain_text, save

PANEL_WIDTH = 4.2
PANEL_HEIGHT = 3.8


def draw_residuals(picture: ResidualPicture, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    """Draw ``picture`` into ``folder/residuals.<format>``; return the files written."""
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
