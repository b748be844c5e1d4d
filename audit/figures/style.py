"""Shared look of fitaudit's figures: one colour, marker and hatch per outcome, greyscale-safe.

The outcome colours run from dark to light in a fixed order, and each also has its own hatch,
so a basin map or bar chart still reads when printed in black and white.
"""
from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402  (the backend must be chosen first)

#: Kinds of end a run can have once converged runs are split by solution.
#: label -> (fill colour, hatch, legend text). Ordered dark to light.
OUTCOME_STYLE: dict[str, tuple[str, str, str]] = {
    "best": ("#1b3a5c", "", "reached the best solution"),
    "other": ("#3f7f6e", "//", "reached another solution"),
    "oscillating": ("#b5651d", "xx", "oscillating"),
    "stalled": ("#8e7cc3", "..", "stalled (iteration limit)"),
    "diverged": ("#c0392b", "\\\\", "diverged"),
    "singular": ("#e0b94a", "++", "singular Jacobian"),
    "model_error": ("#d9d9d9", "--", "model error"),
    "timed_out": ("#f2f2f2", "||", "timed out ([model] time_limit)"),
}

#: Marker of each kind of end (same keys as OUTCOME_STYLE), for paths and point plots, so
#: that kinds stay apart without colour.
OUTCOME_MARKERS: dict[str, str] = {
    "best": "o",
    "other": "s",
    "oscillating": "D",
    "stalled": "v",
    "diverged": "^",
    "singular": "P",
    "model_error": "X",
    "timed_out": "*",
}

#: A qualitative sequence for distinct solutions, dark to light, for maps with several optima:
#: blues and greens only, so that no solution is mistaken for a failure kind's red, orange or
#: yellow above.
SOLUTION_COLOURS = ("#1b3a5c", "#3f7f6e", "#7fb069", "#5fa8d3", "#b9d7a8", "#6c4f77", "#a5a5a5")

#: Interval colours: asymptotic (dashed) vs resampled / profile (solid).
ASYMPTOTIC = "#555555"
EMPIRICAL = "#1b3a5c"

DPI = 150


def plain_text(text: object) -> str:
    """A user's string (column or parameter name, title) for a matplotlib label: every '$' escaped,
    so that a name holding dollar signs is drawn as written instead of parsed as mathtext (where an
    unbalanced '$\\frac{a$' would stop the figure with an error)."""
    return str(text).replace("$", r"\$")


def new_figure(width: float = 6.4, height: float = 4.4):
    """A figure and axes with fitaudit's defaults."""
    figure, axes = plt.subplots(figsize=(width, height), constrained_layout=True)
    return figure, axes


def save(figure, folder: Path, stem: str, formats: tuple[str, ...] = ("png",)) -> list[Path]:
    """Write ``figure`` as ``folder/stem.<format>`` for each format, close it, return the paths."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for extension in formats:
        path = folder / f"{stem}.{extension}"
        figure.savefig(path, dpi=DPI)
        paths.append(path)
    plt.close(figure)
    return paths
