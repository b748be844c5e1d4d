"""Drawing the fit figure (``fit`` writes it) from a ``FitPicture``: the data with the fitted curve
and its band above, the data minus the curve with the band around zero below.

This module imports matplotlib, so only a process that draws imports it.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from .fit import FitPicture
from .layout import arrange, panel_figure, renderer_of
from .style import ASYMPTOTIC, EMPIRICAL, plain_text, save

#: Heights of the two panels: the data and curve over the data minus the curve.
HEIGHTS = (2.0, 1.0)
STEM = "fit-band"


def draw_fit(picture: FitPicture, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    """Draw ``picture`` into ``folder/fit-band.<format>``; return the files written."""
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
