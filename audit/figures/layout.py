"""A fixed layout for figures of panels, in place of matplotlib's constrained layout.

Constrained layout finds the room each panel needs by computing the tight box of every axes, with
every tick label, in two passes before the real drawing: on a sweep's basin map that was about
40 % of the time to draw it. Here the few texts that need room are measured once (each axis's
visible tick labels and label, each panel's title, the figure's heading and legend) and the panels
are placed with ``subplots_adjust``; the heading and a figure legend go into the room kept for them
at the top and bottom edges, a colour bar into the room kept at the right.

The figure is made at the resolution it is saved at (``style.DPI``), so the renderer used to
measure is the one ``savefig`` draws with, and matplotlib's text measurements, cached per renderer,
are not made twice. Axis labels and panel titles are given fixed places, so that drawing does not
look for them again (matplotlib otherwise measures the tick labels of every panel sharing an axis
to place each label, at every draw).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from matplotlib import rcParams
from matplotlib.text import Text
from matplotlib.ticker import FixedLocator

from .style import DPI, plt

#: Room kept at each edge of the figure, and between neighbouring panels' decorations, in inches
#: (constrained layout's default padding is 3/72 in; a little more, as the texts are measured once).
EDGE = 4 / 72
GAP = 6 / 72
#: A colour bar beside a panel grid: its gap to the panels and its width, in inches, and the share
#: of the panels' height it spans (matplotlib's colorbar shrink).
COLORBAR_GAP, COLORBAR_WIDTH, COLORBAR_SHRINK = 0.25, 0.12, 0.8


@dataclass(frozen=True)
class Decorations:
    """Room (inches) a panel's texts and ticks take outside its frame: its y ticks with their labels
    and its y label (left of it), its x ticks, labels and x label (below it), its title (above it)."""

    y_ticks: float = 0.0
    y_label: float = 0.0
    x_ticks: float = 0.0
    x_label: float = 0.0
    above: float = 0.0

    @property
    def left(self) -> float:
        return self.y_ticks + self.y_label

    @property
    def below(self) -> float:
        return self.x_ticks + self.x_label


#: One mathtext parser for the renderers of every figure laid out here, by renderer class: matplotlib
#: caches parsed expressions per parser and each renderer makes its own, so the decade labels of a log
#: axis (10^0, 10^1, ...) were parsed again for every figure, some 10 ms each. Parsing depends only on
#: the expression, resolution and font (the cache's key), so a shared parser draws the same pixels.
_MATHTEXT_PARSERS: dict[type, object] = {}


def renderer_of(figure):
    """The renderer ``figure``'s canvas draws with at its current size and resolution (the one the
    saving draw reuses), sharing its mathtext parser with the other figures of this process."""
    renderer = figure.canvas.get_renderer()
    if hasattr(renderer, "mathtext_parser"):
        renderer.mathtext_parser = _MATHTEXT_PARSERS.setdefault(type(renderer), renderer.mathtext_parser)
    return renderer


def panel_figure(rows: int, columns: int, size: tuple[float, float], **subplots):
    """A figure of ``rows`` × ``columns`` panels (``size`` in inches) with no layout engine, made at
    the saving resolution: (figure, (rows, columns) axes array). ``subplots`` go to plt.subplots."""
    return plt.subplots(rows, columns, figsize=size, dpi=DPI, squeeze=False, **subplots)


def text_size(artist, renderer) -> tuple[float, float]:
    """(width, height) in inches of a text (or legend) as drawn; (0, 0) for a hidden or empty text."""
    if not artist.get_visible() or (hasattr(artist, "get_text") and not artist.get_text()):
        return 0.0, 0.0
    box = artist.get_window_extent(renderer)
    return box.width / DPI, box.height / DPI


def heading(figure, text: str, renderer, fontsize: float) -> float:
    """The figure's heading at its top edge; the inches it takes there, its gap included."""
    title = figure.suptitle(text, fontsize=fontsize, y=1 - EDGE / figure.get_figheight(), va="top")
    return text_size(title, renderer)[1] + GAP


def legend_below(figure, handles: list, columns: int, renderer, fontsize: float = 8.0):
    """A figure legend centred on the figure's bottom edge, with fewer columns than ``columns``
    where its measured width would not fit: (legend, inches it takes there, its gap included)."""
    width = figure.get_figwidth() - 2 * EDGE
    for count in range(max(1, columns), 0, -1):
        legend = figure.legend(handles=handles, loc="lower center", bbox_to_anchor=(0.5, EDGE / figure.get_figheight()),
                               bbox_transform=figure.transFigure, borderaxespad=0.0, ncol=count, fontsize=fontsize,
                               frameon=False)
        size = text_size(legend, renderer)
        if size[0] <= width or count == 1:
            break
        legend.remove()
    return legend, size[1] + GAP


def _in_view(axis) -> np.ndarray:
    """The major tick locations ``axis``'s locator gives for its view at the panel's present size,
    those inside the view only (matplotlib's own tolerance for a tick on the view's edge)."""
    low, high = sorted(axis.get_view_interval())
    slack = 1e-10 * (high - low)
    locations = np.asarray(axis.get_majorticklocs())
    return locations[(locations >= low - slack) & (locations <= high + slack)]


def _ticks_in_view(axis) -> None:
    """Fix ``axis``'s major ticks to those of its locator inside the view: the same ticks are drawn
    (call it once the panel has its final size: a locator's tick count may depend on it), but
    matplotlib no longer makes and lays out tick objects for the ones beyond the view, which a log
    axis's decade locator and the linear one both add on each side (a third of a map's ticks)."""
    axis.set_major_locator(FixedLocator(_in_view(axis)))


def _axis_room(axis, renderer, across: int, *, estimate: bool = False) -> tuple[float, float]:
    """(room taken by the ticks and tick labels, by the label) of one axis, in inches, measured
    ``across`` the axis (0: widths, for a y axis; 1: heights, for an x axis). With ``estimate`` the
    labels the locator would give now are measured as loose texts, without making tick objects."""
    first = axis.majorTicks[0]      # made with the axis: its label's font and visibility are the axis's
    if estimate:
        texts = axis.get_major_formatter().format_ticks(_in_view(axis)) if first.label1.get_visible() else []
        widest = max((_loose_text_size(text, first.label1, renderer)[across] for text in texts), default=0.0)
    else:
        widest = max((text_size(label, renderer)[across] for label in axis.get_ticklabels()), default=0.0)
    room = first.get_tick_padding() / 72 + (widest + first.get_pad() / 72 if widest else 0.0)
    label = text_size(axis.label, renderer)[across]
    return room, label + axis.labelpad / 72 if label else 0.0


def _loose_text_size(text: str, like, renderer) -> tuple[float, float]:
    """(width, height) in inches ``text`` would take drawn in the font of the text ``like``."""
    probe = Text(text=text, fontproperties=like.get_fontproperties())
    probe.set_figure(like.get_figure(root=True))
    return text_size(probe, renderer)


def decorations(axes, renderer, *, estimate: bool = False) -> Decorations:
    """The room one panel's tick labels, axis labels and (centre) title take outside its frame
    (``estimate``: see ``_axis_room``)."""
    title = text_size(axes.title, renderer)[1]
    return Decorations(*_axis_room(axes.yaxis, renderer, 0, estimate=estimate),
                       *_axis_room(axes.xaxis, renderer, 1, estimate=estimate),
                       title + rcParams["axes.titlepad"] / 72 if title else 0.0)


def arrange(figure, grid: np.ndarray, renderer, *, top: float = 0.0, bottom: float = 0.0, right: float = 0.0) -> None:
    """Place the panels of ``grid`` ((rows, columns) axes made by ``panel_figure``; hidden ones are
    skipped) so that their decorations fit between them and the figure's edges, keeping ``top``,
    ``bottom`` and ``right`` inches free for a heading, a legend, a colour bar. Axis labels and titles
    are then fixed where matplotlib's automatic placement would put them. Call once the panels'
    contents, limits, ticks and texts are final. Panel titles are taken to be centre titles styled
    by a font size only (they are set again with their text and size, fixed at the frame's top)."""
    # Twice: the tick labels a locator gives depend on the panel's size, so the panels are first
    # placed by an estimate (the labels it would give now, measured as loose texts), their ticks then
    # fixed at that size, and the panels placed again by the labels of those ticks.
    visible = [axes for axes in grid.flat if axes.get_visible()]
    _place(figure, grid, [decorations(axes, renderer, estimate=True) for axes in visible], top, bottom, right)
    for axes in visible:
        for axis in (axes.xaxis, axes.yaxis):
            _ticks_in_view(axis)
    room, size = _place(figure, grid, [decorations(axes, renderer) for axes in visible], top, bottom, right)
    for axes, item in zip(grid.flat, room.flat):
        _fix_texts(axes, item, *size)


def _place(figure, grid: np.ndarray, measured: list[Decorations], top: float, bottom: float, right: float):
    """``subplots_adjust`` for the panels' decorations ``measured`` (visible panels, in grid order):
    (decorations by grid position, (panel width, panel height) in inches)."""
    rows, columns = grid.shape
    found = iter(measured)
    room = np.full(grid.shape, None, dtype=object)
    for index, axes in np.ndenumerate(grid):
        room[index] = next(found) if axes.get_visible() else Decorations()
    width, height = figure.get_size_inches()
    left = EDGE + max(item.left for item in room[:, 0])
    between_columns = GAP + max((item.left for item in room[:, 1:].flat), default=0.0)
    below = EDGE + bottom + max(item.below for item in room[-1, :])
    between_rows = GAP + max((item.above + under.below for item, under in zip(room[1:, :].flat, room[:-1, :].flat)),
                             default=0.0)
    above = EDGE + top + max(item.above for item in room[0, :])
    panel_width = (width - left - EDGE - right - (columns - 1) * between_columns) / columns
    panel_height = (height - above - below - (rows - 1) * between_rows) / rows
    if panel_width <= 0 or panel_height <= 0:
        raise ValueError(f"a {width:.1f} × {height:.1f} in figure leaves no room for its {rows} × {columns} panels")
    figure.subplots_adjust(left=left / width, right=1 - (EDGE + right) / width, bottom=below / height,
                           top=1 - above / height, wspace=between_columns / panel_width,
                           hspace=between_rows / panel_height)
    return room, (panel_width, panel_height)


def _fix_texts(axes, room: Decorations, panel_width: float, panel_height: float) -> None:
    """Put the axis labels where matplotlib would (beyond the tick labels, by the label pad) and
    the title at the frame's top, so that drawing does not measure the ticks again to place them."""
    axes.yaxis.set_label_coords(-(room.y_ticks + axes.yaxis.labelpad / 72) / panel_width, 0.5)
    axes.xaxis.set_label_coords(0.5, -(room.x_ticks + axes.xaxis.labelpad / 72) / panel_height)
    if axes.get_title():
        # An explicit height turns matplotlib's search for room above the panel off (set_title's y).
        axes.set_title(axes.get_title(), fontsize=axes.title.get_fontsize(), y=1.0)


def colorbar_beside(figure, image, label: str, height: float):
    """A colour bar of ``image`` in axes of its own, ``height`` inches tall for now (its ticks depend
    on its length), to be measured by ``colorbar_room`` and moved by ``place_colorbar``."""
    width, figure_height = figure.get_size_inches()
    return figure.colorbar(image, cax=figure.add_axes((0.5, 0.1, COLORBAR_WIDTH / width, height / figure_height)),
                           label=label)


def colorbar_room(bar, renderer) -> float:
    """Inches a colour bar takes right of the panels, its gap included: the ``right`` of ``arrange``."""
    ticks, label = _axis_room(bar.ax.yaxis, renderer, 0)
    return COLORBAR_GAP + COLORBAR_WIDTH + ticks + label


def place_colorbar(figure, grid: np.ndarray, bar, renderer) -> None:
    """Move a colour bar beside the arranged panels of ``grid`` and fix its label's place."""
    width, height = figure.get_size_inches()
    boxes = [axes.get_position() for axes in grid.flat if axes.get_visible()]
    right = max(box.x1 for box in boxes)
    low, high = min(box.y0 for box in boxes), max(box.y1 for box in boxes)
    span = COLORBAR_SHRINK * (high - low)
    bar.ax.set_position((right + COLORBAR_GAP / width, low + (high - low - span) / 2, COLORBAR_WIDTH / width, span))
    ticks, _ = _axis_room(bar.ax.yaxis, renderer, 0)
    bar.ax.yaxis.set_label_coords(1 + (ticks + bar.ax.yaxis.labelpad / 72) / COLORBAR_WIDTH, 0.5)
