"""Figures of the identifiability stage, drawn from an ``Identifiability`` result only.

* ``profiles``: each parameter's profile SSR against its walked values, the threshold line, the
  asymptotic interval (dashed) and the profile interval (solid bar between the refined ends,
  each marked where its refit met the threshold; an arrow to the walk's last point where open);
* ``correlation``: the correlation matrix as an annotated heat map;
* ``weak_directions``: the loadings of the weakest directions as bars (negative hatched);
* ``collinearity``: collinearity index of every subset against its size, with the limit.
"""
from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
from matplotlib.colors import LinearSegmentedColormap
from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

from ..identifiability.analysis import Identifiability
from ..identifiability.profiles import NOT_WALKED
from .drawn_once import drawn_once
from .style import ASYMPTOTIC, EMPIRICAL, plt, save

#: Negative → zero → positive, dark to light to dark so that the sign also shows in the cell text.
CORRELATION_MAP = LinearSegmentedColormap.from_list("fitaudit_correlation", ["#1b3a5c", "#f4f4f4", "#b5651d"])
THRESHOLD = "#b5651d"
POSITIVE, NEGATIVE = "#1b3a5c", "#e6aa68"
#: The profile panels show SSR up to this many times the threshold's rise above SSR_min.
PROFILE_HEADROOM = 6.0
#: A log-scale parameter's profile is drawn on a log axis when its walked part spans at least
#: this ratio.
LOG_AXIS_SPAN = 10.0
#: Weak directions drawn at most.
DIRECTIONS_SHOWN = 3


@drawn_once()
def write_figures(result: Identifiability, folder: Path, formats: tuple[str, ...] = ("png",)) -> list[Path]:
    """Write the stage's figures into ``folder`` in each of ``formats``; return their paths."""
    folder = Path(folder)
    paths = _profiles(result, folder, formats)
    paths += _correlation(result, folder, formats)
    paths += _weak_directions(result, folder, formats)
    if len(result.collinearity.index):
        paths += _collinearity(result, folder, formats)
    return paths


def _panels(count: int, width: float = 3.4, height: float = 2.9):
    columns = min(3, count)
    rows = -(-count // columns)
    figure, axes = plt.subplots(rows, columns, figsize=(width * columns, height * rows + 0.4),
                                constrained_layout=True, squeeze=False)
    for extra in axes.flat[count:]:
        extra.set_visible(False)
    return figure, axes.flat


def _profiles(result: Identifiability, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    profiles, estimates = result.profiles, result.estimates
    rise = profiles.threshold - profiles.ssr_min
    figure, axes = _panels(len(result.names))
    for j, (name, axis) in enumerate(zip(result.names, axes)):
        values, ssr = profiles.values[j], profiles.ssr[j]
        axis.plot(values, ssr, color=EMPIRICAL, marker="o", markersize=2.5, linewidth=1.2, label="profile SSR")
        failed = ~np.isfinite(ssr) & (profiles.outcome[j] != NOT_WALKED)
        if failed.any():
            axis.plot(values[failed], np.full(failed.sum(), profiles.ssr_min), linestyle="none", marker="x",
                      color=THRESHOLD, label="refit failed")
        axis.axhline(profiles.threshold, color=THRESHOLD, linestyle=":", linewidth=1.2,
                     label=f"{profiles.confidence:.0%} threshold")
        for bound in (estimates.lower[j], estimates.upper[j]):
            if np.isfinite(bound):
                axis.axvline(bound, color=ASYMPTOTIC, linestyle="--", linewidth=1.0)
        axis.axvline(result.params[j], color=ASYMPTOTIC, linewidth=0.6, alpha=0.6)
        _profile_interval(axis, profiles, j, walked_values(profiles, j))
        top = profiles.ssr_min + PROFILE_HEADROOM * rise if rise > 0 else np.nanmax(ssr)
        bottom = min(profiles.ssr_min, np.nanmin(ssr)) - 0.15 * (top - profiles.ssr_min)
        if np.isfinite(top) and top > bottom:
            axis.set_ylim(bottom, top)
        walked = walked_values(profiles, j)
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
    axes[0].plot([], [], color=ASYMPTOTIC, linestyle="--", label="asymptotic interval")
    axes[0].plot([], [], color=EMPIRICAL, linewidth=4, solid_capstyle="butt", label="profile interval")
    axes[0].plot([], [], linestyle="none", marker="|", markersize=12, markeredgewidth=2, color=THRESHOLD,
                 label="refined end")
    figure.legend(*axes[0].get_legend_handles_labels(), loc="outside lower center", ncol=6, fontsize=8,
                  frameon=False)
    figure.suptitle("Profile likelihood: SSR with each parameter fixed, the others refitted", fontsize=11)
    return save(figure, folder, "identifiability-profiles", formats)


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
                      markeredgewidth=2, color=THRESHOLD)
            continue
        ends.append(edge)
        axis.annotate("", xy=(edge, level), xytext=(profiles.estimate[j], level),
                      arrowprops=dict(arrowstyle="->", color=EMPIRICAL, linewidth=1.6))
        axis.annotate("open", (edge, level), xytext=(4 if text_side == "left" else -4, 5), textcoords="offset points",
                      ha=text_side, va="bottom", fontsize=8, color=EMPIRICAL)
    axis.plot(ends, [level, level], color=EMPIRICAL, linewidth=4, solid_capstyle="butt", alpha=0.85)


def _correlation(result: Identifiability, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    correlation = result.estimates.correlation
    n = len(result.names)
    size = max(3.6, 0.75 * n + 2.2)
    figure, axis = plt.subplots(figsize=(size + 1.0, size), constrained_layout=True)
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
    figure.colorbar(image, ax=axis, shrink=0.8, label="correlation")
    title = "Correlation of the estimates"
    if not np.isfinite(correlation).all():
        title += "\n(— : undefined, the Jacobian is singular)"
    axis.set_title(title, fontsize=11)
    return save(figure, folder, "identifiability-correlation", formats)


def _weak_directions(result: Identifiability, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    rows = result.weak[:DIRECTIONS_SHOWN]
    n = len(result.names)
    figure, axes = _panels(len(rows), width=4.8, height=max(2.6, 0.45 * n + 1.8))
    positions = np.arange(n)
    for row, text, axis in zip(rows, result.weak_text, axes):
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
    figure.suptitle(f"Weakest parameter combinations\n(scaled condition number {result.condition_scaled:.3g})",
                    fontsize=11)
    return save(figure, folder, "identifiability-weak-directions", formats)


def _collinearity(result: Identifiability, folder: Path, formats: tuple[str, ...]) -> list[Path]:
    collinearity = result.collinearity
    figure, axis = plt.subplots(figsize=(6.4, 4.0), constrained_layout=True)
    index = np.where(np.isfinite(collinearity.index), collinearity.index, np.nan)
    shown = np.nan_to_num(index, nan=np.nanmax(index[np.isfinite(index)], initial=collinearity.limit) * 10)
    above = shown >= collinearity.limit
    # Spread each size's subsets evenly across a narrow band so that equal indices stay visible.
    jitter = np.zeros(len(shown))
    for size in np.unique(collinearity.size):
        group = np.flatnonzero(collinearity.size == size)
        if len(group) > 1:
            jitter[group] = (np.arange(len(group)) / (len(group) - 1) - 0.5) * 0.3
    for mask, colour, marker, label in ((~above, EMPIRICAL, "o", "identifiable"),
                                        (above, THRESHOLD, "^", "not identifiable")):
        if mask.any():
            axis.scatter(collinearity.size[mask] + jitter[mask], shown[mask], s=18, color=colour, marker=marker,
                         label=label, alpha=0.8)
    axis.axhline(collinearity.limit, color="black", linestyle=":", label=f"limit {collinearity.limit:g}")
    axis.set_yscale("log")
    axis.set_ylim(bottom=0.9, top=max(np.max(shown), collinearity.limit) * 6)
    axis.yaxis.set_major_formatter(FuncFormatter(lambda value, _: f"{value:g}"))
    axis.yaxis.set_minor_formatter(NullFormatter())
    axis.set_xticks(range(2, collinearity.max_size + 1))
    axis.set_xlim(1.5, collinearity.max_size + 0.5)
    axis.set_xlabel("subset size")
    axis.set_ylabel("collinearity index γ")
    worst = int(np.argmax(shown))
    axis.annotate("{" + ", ".join(collinearity.subset_names(worst)) + "}",
                  (collinearity.size[worst] + jitter[worst], shown[worst]), textcoords="offset points",
                  xytext=(0, 7), ha="center", fontsize=8)
    axis.legend(fontsize=8, frameon=False)
    axis.set_title("Collinearity index of every parameter subset", fontsize=11)
    return save(figure, folder, "identifiability-collinearity", formats)
