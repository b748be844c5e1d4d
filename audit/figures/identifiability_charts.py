"""Drawing the identifiability stage's figures (``identifiability`` writes them): the profiles, the
correlation map, the weak directions and the collinearity indices.

This module imports matplotlib, so only a process that draws imports it.
"""
from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
from matplotlib.colors import LinearSegmentedColormap
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

from ..identifiability.analysis import Identifiability
from ..identifiability.profiles import NOT_WALKED
from .layout import (COLORBAR_SHRINK, arrange, colorbar_beside, colorbar_room, heading, legend_below, panel_figure,
                     place_colorbar, renderer_of)
from .style import ASYMPTOTIC, EMPIRICAL, legend_columns, save

#: Negative → zero → positive, dark to light to dark so that the sign also shows in the cell text.
CORRELATION_MAP = LinearSegmentedColormap.from_list("fitaudit_correlation", ["#1b3a5c", "#f4f4f4", "#b5651d"])
THRESHOLD = "#b5651d"
POSITIVE, NEGATIVE = "#1b3a5c", "#e6aa68"
COLLINEAR_HATCH = "//"
#: The profile panels show SSR up to this many times the threshold's rise above SSR_min.
PROFILE_HEADROOM = 6.0
#: A log-scale parameter's profile is drawn on a log axis when its walked part spans at least
#: this ratio.
LOG_AXIS_SPAN = 10.0
#: Weak directions drawn at most.
DIRECTIONS_SHOWN = 3
#: Drawing order in a profile panel: the interval bar and an open side's arrow, then the
#: threshold over them (drawn under the bar, it vanished along the whole interval), then the
#: refined ends.
BAR_ORDER, THRESHOLD_ORDER, END_ORDER = 2.0, 2.5, 3.0
#: Heights (axes fraction) of the marks that are not SSR values: failed refits on the bottom
#: edge itself, asymptotic ends beyond the axis in the margin the y limits keep free below the
#: lowest SSR (0.15 / 1.15 of the height).
FAILED_HEIGHT, BEYOND_HEIGHT = 0.0, 0.06
FAILED_LABEL = "refit failed (no value)"
BEYOND_LABEL = "off-axis asymptotic end (value)"
#: Artist ids (``Artist.get_gid``) of the profile panel's marks, for tests that find them.
BAR_GID, THRESHOLD_GID, FAILED_GID, BEYOND_GID = "profile-interval", "threshold", "refit-failed", "asymptotic-beyond"
#: Subsets drawn at most in the collinearity figure: the highest indices (the title says so).
SUBSETS_SHOWN = 30
#: The correlation map's colour bar: its gap to the map in inches (near the 0.05 of the map's width
#: that matplotlib's colour bar keeps, for maps 3.5 to 5 in wide) and its length over its width (matplotlib's 20).
BAR_GAP, BAR_ASPECT = 0.2, 20


def draw_figures(result: Identifiability, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    """Draw the stage's figures into ``folder`` in each of ``formats``; return their paths."""
    paths = _profiles(result, folder, formats)
    paths += _correlation(result, folder, formats)
    paths += _weak_directions(result, folder, formats)
    if len(result.collinearity.index):
        paths += _collinearity(result, folder, formats)
    return paths


def _panels(count: int, width: float = 3.4, height: float = 2.9):
    """A figure of ``count`` panels (each about ``width`` × ``height`` inches) in up to three columns,
    to be laid out by ``_finish``: (figure, (rows, columns) axes array; the spare ones hidden)."""
    columns = min(3, count)
    rows = -(-count // columns)
    figure, grid = panel_figure(rows, columns, (width * columns, height * rows + 0.4))
    for extra in grid.flat[count:]:
        extra.set_visible(False)
    return figure, grid


def _finish(figure, grid, title: str | None = None, handles: list | None = None, columns: int = 1) -> None:
    """The heading ``title`` above the panels, the legend of ``handles`` below them (at most
    ``columns`` columns, fewer where they would not fit), and the panels placed between them."""
    renderer = renderer_of(figure)
    top = heading(figure, title, renderer, fontsize=11) if title else 0.0
    bottom = legend_below(figure, handles, columns, renderer)[1] if handles else 0.0
    arrange(figure, grid, renderer, top=top, bottom=bottom)


def _profiles(result: Identifiability, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    profiles, estimates = result.profiles, result.estimates
    rise = profiles.threshold - profiles.ssr_min
    figure, grid = _panels(len(result.names))
    axes = grid.flat[:len(result.names)]
    any_beyond = False
    for j, (name, axis) in enumerate(zip(result.names, axes)):
        values, ssr = profiles.values[j], profiles.ssr[j]
        axis.plot(values, ssr, color=EMPIRICAL, marker="o", markersize=2.5, linewidth=1.2, label="profile SSR")
        failed = ~np.isfinite(ssr) & (profiles.outcome[j] != NOT_WALKED)
        if failed.any():
            # A failed refit has no SSR: its mark sits on the bottom edge (y in axes fraction),
            # where it cannot be read as a value on the SSR scale.
            axis.plot(values[failed], np.full(failed.sum(), FAILED_HEIGHT), transform=axis.get_xaxis_transform(),
                      linestyle="none", marker="x", markersize=5, markeredgewidth=1.2, color=THRESHOLD,
                      clip_on=False, label=FAILED_LABEL, gid=FAILED_GID)
        axis.axhline(profiles.threshold, color=THRESHOLD, linestyle=":", linewidth=1.4, zorder=THRESHOLD_ORDER,
                     label=f"{profiles.confidence:.0%} threshold", gid=THRESHOLD_GID)
        axis.axvline(result.params[j], color=ASYMPTOTIC, linewidth=0.6, alpha=0.6)
        walked = walked_values(profiles, j)
        _profile_interval(axis, profiles, j, walked)
        top = profiles.ssr_min + PROFILE_HEADROOM * rise if rise > 0 else np.nanmax(ssr)
        bottom = min(profiles.ssr_min, np.nanmin(ssr)) - 0.15 * (top - profiles.ssr_min)
        if np.isfinite(top) and top > bottom:
            axis.set_ylim(bottom, top)
        walked = walked[np.isfinite(walked)]
        if walked.max() > walked.min():
            axis.set_xlim(walked.min(), walked.max())
        axis.set_title(name, fontsize=10, loc="right")
        axis.set_ylabel("profile SSR")
        axis.ticklabel_format(axis="both", style="sci", scilimits=(-3, 4), useOffset=False)
        if profiles.log[j] and walked.max() >= LOG_AXIS_SPAN * walked.min():
            axis.set_xscale("log")
            axis.xaxis.set_major_locator(LogLocator(subs=(1.0, 2.0, 5.0)))
            axis.xaxis.set_major_formatter(FuncFormatter(lambda value, _: f"{value:g}"))
            axis.xaxis.set_minor_formatter(NullFormatter())
        any_beyond |= asymptotic_ends(axis, estimates.lower[j], estimates.upper[j])
    handles = _profile_legend(axes, any_beyond)
    columns = legend_columns([handle.get_label() for handle in handles], figure.get_figwidth())
    _finish(figure, grid, "Profile likelihood: SSR with each parameter fixed, the others refitted", handles, columns)
    return save(figure, folder, "identifiability-profiles", formats)


def _profile_legend(axes, any_beyond: bool) -> list:
    """One handle per thing drawn in any panel (a failed refit may show in one panel only), then
    the interval marks."""
    drawn = {}
    for axis in axes:
        for handle, label in zip(*axis.get_legend_handles_labels()):
            drawn.setdefault(label, handle)
    handles = list(drawn.values())
    handles += [Line2D([], [], color=ASYMPTOTIC, linestyle="--", label="asymptotic interval"),
                Line2D([], [], color=EMPIRICAL, linewidth=4, solid_capstyle="butt", label="profile interval"),
                Line2D([], [], linestyle="none", marker="|", markersize=12, markeredgewidth=2, color=THRESHOLD,
                       label="refined end")]
    if any_beyond:
        handles.append(Line2D([], [], linestyle="none", marker=">", markersize=6, color=ASYMPTOTIC,
                              label=BEYOND_LABEL))
    return handles


def asymptotic_ends(axis, lower: float, upper: float) -> bool:
    """Each finite asymptotic interval end as a dashed line where it falls inside the x limits;
    beyond them (at or below zero on a log axis too) as a triangle on that edge, pointing out,
    with the end's value written beside it. Call once the limits and scale are final.

    Returns:
        True when an end was beyond the axis.
    """
    left, right = axis.get_xlim()   # positive on a log axis, so an end at or below zero is beyond
    beyond = False
    for end in (lower, upper):
        if not np.isfinite(end):
            continue
        if left <= end <= right:
            axis.axvline(end, color=ASYMPTOTIC, linestyle="--", linewidth=1.0)
            continue
        beyond = True
        edge, outward, text_side = (0.0, "<", "left") if end < left else (1.0, ">", "right")
        axis.plot([edge], [BEYOND_HEIGHT], transform=axis.transAxes, linestyle="none", marker=outward, markersize=6,
                  color=ASYMPTOTIC, clip_on=False, gid=BEYOND_GID)
        axis.annotate(f"{end:.3g}", (edge, BEYOND_HEIGHT), xycoords="axes fraction",
                      xytext=(6 if text_side == "left" else -6, 0), textcoords="offset points", ha=text_side,
                      va="center", fontsize=7, color=ASYMPTOTIC, gid=BEYOND_GID)
    return beyond


def walked_values(profiles, j: int) -> np.ndarray:
    """Parameter j's profile values that were refitted (the estimate included), increasing."""
    return profiles.values[j][profiles.outcome[j] != NOT_WALKED]


def _profile_interval(axis, profiles, j: int, values: np.ndarray) -> None:
    """The profile interval as a bar on the threshold line between the refined ends (marked at
    their refits' SSR); an arrow to the walk's last point where a side is open."""
    level = profiles.threshold
    ends = []
    for side, (end, status, edge, text_side) in enumerate((
            (profiles.lower[j], profiles.lower_status[j], values[0], "left"),
            (profiles.upper[j], profiles.upper_status[j], values[-1], "right"))):
        if status == "closed":
            ends.append(end)
            axis.plot(end, profiles.end_ssr[j, side], linestyle="none", marker="|", markersize=12,
                      markeredgewidth=2, color=THRESHOLD, zorder=END_ORDER)
            continue
        ends.append(edge)
        axis.annotate("", xy=(edge, level), xytext=(profiles.estimate[j], level), zorder=BAR_ORDER,
                      arrowprops=dict(arrowstyle="->", color=EMPIRICAL, linewidth=1.6))
        axis.annotate("open", (edge, level), xytext=(4 if text_side == "left" else -4, 5), textcoords="offset points",
                      ha=text_side, va="bottom", fontsize=8, color=EMPIRICAL)
    axis.plot(ends, [level, level], color=EMPIRICAL, linewidth=4, solid_capstyle="butt", alpha=0.85, zorder=BAR_ORDER,
              gid=BAR_GID)


def _correlation(result: Identifiability, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    correlation = result.estimates.correlation
    n = len(result.names)
    size = max(3.6, 0.75 * n + 2.2)
    figure, grid = panel_figure(1, 1, (size + 1.0, size))
    axis = grid[0, 0]
    image = axis.imshow(np.ma.masked_invalid(correlation), cmap=CORRELATION_MAP, vmin=-1, vmax=1)
    axis.set_xticks(range(n), result.names, rotation=45, ha="right")
    axis.set_yticks(range(n), result.names)
    for i in range(n):
        for j in range(n):
            value = correlation[i, j]
            text = "—" if not np.isfinite(value) else f"{value:+.2f}"
            strong = np.isfinite(value) and abs(value) >= result.strong_limit and i != j
            axis.text(j, i, text, ha="center", va="center", fontsize=9,
                      color="white" if np.isfinite(value) and abs(value) > 0.6 else "black",
                      fontweight="bold" if strong else "normal")
    title = "Correlation of the estimates"
    if not np.isfinite(correlation).all():
        title += "\n(— : undefined, the Jacobian is singular)"
    axis.set_title(title, fontsize=11)
    # Made as wide as a bar along the whole figure's height would be, the most its final length allows.
    bar = colorbar_beside(figure, image, "correlation", COLORBAR_SHRINK * size,
                          width=COLORBAR_SHRINK * size / BAR_ASPECT)
    renderer = renderer_of(figure)
    arrange(figure, grid, renderer, right=colorbar_room(bar, renderer, BAR_GAP))
    place_colorbar(figure, grid, bar, renderer, BAR_GAP, aspect=BAR_ASPECT)
    return save(figure, folder, "identifiability-correlation", formats)


def _weak_directions(result: Identifiability, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    rows = result.weak[:DIRECTIONS_SHOWN]
    n = len(result.names)
    figure, grid = _panels(len(rows), width=4.8, height=max(2.6, 0.45 * n + 1.8))
    positions = np.arange(n)
    for row, text, axis in zip(rows, result.weak_text, grid.flat):
        for position, loading in zip(positions, result.directions[row]):
            axis.barh(position, loading, color=NEGATIVE if loading < 0 else POSITIVE, edgecolor="black",
                      linewidth=0.6, hatch="//" if loading < 0 else None)
        axis.axvline(0, color="black", linewidth=0.8)
        axis.set_yticks(positions, result.names)
        axis.invert_yaxis()
        axis.set_xlim(-1.05, 1.05)
        axis.set_xlabel("loading (parameters in units of\ntheir conditional standard errors)", fontsize=8)
        # Keep each "± coefficient·name" term on one line.
        unbroken = text.replace(" − ", " −\u00a0").replace(" + ", " +\u00a0")
        axis.set_title("\n".join(textwrap.wrap(unbroken, 46)), fontsize=8.5)
    _finish(figure, grid, f"Weakest parameter combinations\n(scaled condition number {result.condition_scaled:.3g})")
    return save(figure, folder, "identifiability-weak-directions", formats)


def _collinearity(result: Identifiability, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    """One bar per subset, named on its row, from 1 to its index γ on a log axis, the highest at
    the top (at most ``SUBSETS_SHOWN`` of them); exactly dependent subsets (γ = ∞) reach past the
    others and are written "∞"."""
    collinearity = result.collinearity
    index = collinearity.index
    finite = np.isfinite(index)
    reach = max(np.max(index[finite], initial=collinearity.limit), collinearity.limit) * 10
    length = np.where(finite, index, reach)
    rows = np.argsort(-length, kind="stable")[:SUBSETS_SHOWN]
    above = length[rows] >= collinearity.limit
    figure, grid = panel_figure(1, 1, (6.4, max(2.4, 1.6 + 0.22 * len(rows))))
    axis = grid[0, 0]
    positions = np.arange(len(rows))
    axis.barh(positions, length[rows] - 1.0, left=1.0, height=0.7, color=np.where(above, THRESHOLD, EMPIRICAL),
              hatch=[COLLINEAR_HATCH if flag else "" for flag in above], edgecolor="black", linewidth=0.5)
    axis.set_yticks(positions, ["{" + ", ".join(collinearity.subset_names(row)) + "}" for row in rows], fontsize=8)
    for position, row in zip(positions, rows):
        axis.annotate(f"{index[row]:.3g}" if finite[row] else "∞", (length[row], position), xytext=(3, 0),
                      textcoords="offset points", va="center", fontsize=7)
    axis.axvline(collinearity.limit, color="black", linestyle=":", linewidth=1.2)
    # Two rows at least, so that a single subset's bar is not a block filling the panel.
    axis.set_ylim(max(len(rows), 2) - 0.5, -0.5)
    axis.set_xscale("log")
    # Room right of the longest bar for its index; the limit stays in sight when every index is far below it.
    axis.set_xlim(0.9, max(np.max(length) * 4, collinearity.limit * 2))
    axis.xaxis.set_major_formatter(FuncFormatter(lambda value, _: f"{value:g}"))
    axis.xaxis.set_minor_formatter(NullFormatter())
    axis.set_xlabel("collinearity index γ")
    handles = [Patch(facecolor=EMPIRICAL, edgecolor="black", linewidth=0.5, label="identifiable"),
               Patch(facecolor=THRESHOLD, hatch=COLLINEAR_HATCH, edgecolor="black", linewidth=0.5,
                     label="not identifiable"),
               Line2D([], [], color="black", linestyle=":", linewidth=1.2, label=f"limit {collinearity.limit:g}")]
    which = ("every parameter subset" if len(rows) == len(index)
             else f"the {len(rows)} highest of {len(index)} parameter subsets")
    axis.set_title(f"Collinearity index of {which}", fontsize=11)
    _finish(figure, grid, handles=handles, columns=3)
    return save(figure, folder, "identifiability-collinearity", formats)
