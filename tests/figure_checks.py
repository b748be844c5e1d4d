"""Checks of a drawn figure's layout, shared by the figure layout tests: every text the layout places
inside the figure, none over another text or over a panel's frame; and ``captured``, which keeps the
figures a drawing module makes instead of saving them, for the tests that look at their artists.

Reference: matplotlib's own extents after the canvas is drawn (Text.get_window_extent,
Legend.get_window_extent, Axes.get_window_extent), at the size the figure is saved; the layout
itself measures the texts before the panels are placed, so this checks the placing, not the
measuring.
"""
from __future__ import annotations

import itertools

#: Pixels two extents may share (anti-aliasing and rounding of text boxes).
TOLERANCE = 0.5


def captured(monkeypatch, module) -> dict:
    """Keep every figure the drawing module ``module`` would save, by stem, instead of saving it."""
    figures: dict = {}

    def keep(figure, folder, stem, formats=("png",)):
        figures[stem] = figure
        return []

    monkeypatch.setattr(module, "save", keep)
    return figures


def _shown(text) -> bool:
    return text.get_visible() and bool(text.get_text())


def placed_texts(figure) -> list[tuple[tuple, object]]:
    """((owner, kind), extent) of every text the layout places: headings, figure and panel legends,
    and of every visible axes (colour bars too) its titles (left, centre, right), axis labels,
    offset texts (a multiplier such as 1e−6 beside the tick labels) and the tick labels of ticks in
    view. Call once the canvas is drawn (offset texts get their place and text there)."""
    renderer = figure.canvas.get_renderer()
    found = [(("figure", "heading"), text.get_window_extent(renderer)) for text in figure.texts if _shown(text)]
    found += [(("figure", f"legend {k}"), legend.get_window_extent(renderer))
              for k, legend in enumerate(figure.legends)]
    for a, axes in enumerate(figure.axes):
        if not axes.get_visible():
            continue
        if axes.get_legend() is not None:
            found.append(((a, "legend"), axes.get_legend().get_window_extent(renderer)))
        # Matplotlib keeps the side titles in attributes of its own (set_title(loc=...) sets them).
        texts = (("title", axes.title), ("left title", axes._left_title), ("right title", axes._right_title),
                 ("x label", axes.xaxis.label), ("y label", axes.yaxis.label),
                 ("x offset", axes.xaxis.offsetText), ("y offset", axes.yaxis.offsetText))
        found += [((a, kind), text.get_window_extent(renderer)) for kind, text in texts if _shown(text)]
        for name, axis in (("x", axes.xaxis), ("y", axes.yaxis)):
            low, high = sorted(axis.get_view_interval())
            for tick in axis.get_major_ticks():
                if low <= tick.get_loc() <= high:
                    found += [((a, f"{name} ticks"), label.get_window_extent(renderer))
                              for label in (tick.label1, tick.label2) if _shown(label)]
    return found


def overlap(one, other) -> bool:
    return (min(one.x1, other.x1) - max(one.x0, other.x0) > TOLERANCE
            and min(one.y1, other.y1) - max(one.y0, other.y0) > TOLERANCE)


def inside(box, frame) -> bool:
    return (box.x0 >= frame.x0 - TOLERANCE and box.x1 <= frame.x1 + TOLERANCE
            and box.y0 >= frame.y0 - TOLERANCE and box.y1 <= frame.y1 + TOLERANCE)


def layout_faults(figure) -> list[str]:
    """What the drawn figure gets wrong: texts outside it, texts of different owners or kinds over
    each other, texts over a panel's frame (their own panel's too: they belong outside it; only a
    panel's legend may lie wholly inside its own frame)."""
    figure.canvas.draw()
    page = figure.bbox
    texts = placed_texts(figure)
    faults = [f"{who} outside the figure: {box}" for who, box in texts if not inside(box, page)]
    faults += [f"{one} over {other}" for (one, box), (other, other_box) in itertools.combinations(texts, 2)
               if one != other and overlap(box, other_box)]
    frames = [(a, axes.get_window_extent()) for a, axes in enumerate(figure.axes) if axes.get_visible()]
    faults += [f"{who} over the frame of panel {a}" for who, box in texts for a, frame in frames
               if overlap(box, frame) and not (who == (a, "legend") and inside(box, frame))]
    return faults
