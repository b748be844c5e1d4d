"""A fixed layout for figures of panels, in place of matplotlib's constrained layout.

Constrained layout finds the room each panel needs by computing the tight box of every axes, with
every tick label, in two passes before every drawing, and savefig draws a figure with a layout
engine once more before writing a PDF: on a sweep's basin map that was about 40 % of the time to
draw it, on the stages' figures (PNG and PDF each) about half. Here the few texts that need room are
measured once (each axis's visible tick labels, label and offset text, each panel's titles, the
figure's heading and legend) and the panels are given their places; the heading and a figure legend
go into the room kept for them at the top and bottom edges, a colour bar into the room kept at the
right.

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
#: Placings by measured texts at most: each after a locator gave other ticks for the panel's new size.
PLACINGS = 3


@dataclass(frozen=True)
class Decorations:
    """Room (inches) a panel's texts and ticks take outside its frame: left of it its y ticks with their
    labels and its y label; below it its x ticks and labels, then its x label or, at the right end, the
    x axis's offset text (a multiplier such as 1e−6); above it its titles, or the y axis's offset text
    with the titles on top of it; and ``spill``, how far tick labels reach past the frame's sides along
    their axis (left, right, below, above), e.g. rotated x labels or the label of a tick on the edge."""

    y_ticks: float = 0.0
    y_label: float = 0.0
    x_ticks: float = 0.0
    x_label: float = 0.0
    x_offset: float = 0.0
    titles: float = 0.0
    spill: tuple[float, float, float, float] = (0.0, 0.0, 0.0, 0.0)

    @property
    def left(self) -> float:
        return max(self.y_ticks + self.y_label, self.spill[0])

    @property
    def right(self) -> float:
        return self.spill[1]

    @property
    def below(self) -> float:
        return max(self.x_ticks + max(self.x_label, self.x_offset), self.spill[2])

    @property
    def above(self) -> float:
        return max(self.titles, self.spill[3])


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


def heading(figure, text: str, renderer, fontsize: float | str) -> float:
    """The figure's heading at its top edge; the inches it takes there, its gap included."""
    title = figure.suptitle(text, fontsize=fontsize, y=1 - EDGE / figure.get_figheight(), va="top")
    return text_size(title, renderer)[1] + GAP


def legend_below(figure, handles: list, columns: int, renderer, fontsize: float | str = 8.0):
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


def _in_view(axis, locator=None) -> np.ndarray:
    """The major tick locations ``locator`` (default: the axis's own) gives for the view of ``axis``
    at the panel's present size, those inside the view only (matplotlib's own tolerance for a tick
    on the view's edge)."""
    low, high = sorted(axis.get_view_interval())
    slack = 1e-10 * (high - low)
    locations = np.asarray(axis.get_majorticklocs() if locator is None else locator())
    return locations[(locations >= low - slack) & (locations <= high + slack)]


def _fix_ticks(locators: dict) -> bool:
    """Fix each axis's major ticks to those its locator (``locators``: axis -> the locator it was
    given) puts inside the view at the panel's present size; True when any changed. The same ticks
    are drawn, but matplotlib no longer makes and lays out tick objects for the ones beyond the
    view, which a log axis's decade locator and the linear one both add on each side (a third of a
    map's ticks). Ticks the figure fixed itself are kept as they are: a fixed formatter labels them
    by position."""
    changed = False
    checked = set()
    for axis, locator in locators.items():
        # Axes sharing an axis share its ticker (locator and formatter): one of them is asked.
        if isinstance(locator, FixedLocator) or id(axis.major) in checked:
            continue
        checked.add(id(axis.major))
        locator.set_axis(axis)          # axes sharing it take turns: each is asked for its own view and size
        shown = _in_view(axis, locator)
        now = axis.get_major_locator()
        if now is locator or not np.array_equal(now.locs, shown):
            axis.set_major_locator(FixedLocator(shown))
            changed = True
    return changed


def _axis_room(axis, renderer, across: int, boxes=None) -> tuple[float, float]:
    """(room taken by the ticks and tick labels, by the label) of one axis, in inches, measured
    ``across`` the axis (0: widths, for a y axis; 1: heights, for an x axis), its tick labels'
    extents being ``boxes`` (``_label_boxes``). Without ``boxes``, an estimate: the labels the
    locator would give now are measured as loose texts, without making tick objects. The axis's
    formatter is left with the labels' offset text (``_offset_size``)."""
    first = axis.majorTicks[0]      # made with the axis: its label's font and visibility are the axis's
    locations = _in_view(axis)
    if boxes is None:
        texts = axis.get_major_formatter().format_ticks(locations)
        shown = texts if first.label1.get_visible() else []
        widest = max((_loose_text_size(text, first.label1, renderer)[across] for text in shown), default=0.0)
    else:
        widest = max(((box.width, box.height)[across] / DPI for box in boxes), default=0.0)
    ticks = 0.0
    if len(locations):
        ticks = first.get_tick_padding() / 72 + (widest + first.get_pad() / 72 if widest else 0.0)
    label = text_size(axis.label, renderer)[across]
    return ticks, label + axis.labelpad / 72 if label else 0.0


def _label_boxes(axis, renderer) -> list:
    """The extents (pixels) of ``axis``'s shown tick labels where the panel is now, labelled by its
    formatter as they will be drawn."""
    return [label.get_window_extent(renderer) for label in axis.get_ticklabels() if label.get_text()]


def _offset_size(axis, renderer) -> tuple[float, float]:
    """(width, height) in inches of the offset text (a multiplier such as 1e−6) matplotlib will draw
    beside ``axis``'s tick labels, as its formatter last labelled them; (0, 0) where there is none."""
    offset = axis.get_major_formatter().get_offset() if axis.offsetText.get_visible() else ""
    return _loose_text_size(offset, axis.offsetText, renderer) if offset else (0.0, 0.0)


def _loose_text_size(text: str, like, renderer) -> tuple[float, float]:
    """(width, height) in inches ``text`` would take drawn in the font and at the angle of the text ``like``."""
    probe = Text(text=text, fontproperties=like.get_fontproperties(), rotation=like.get_rotation())
    probe.set_figure(like.figure)
    return text_size(probe, renderer)


def _titles(axes) -> dict[str, Text]:
    """The panel's titles that hold text, by place ("left", "center", "right")."""
    # Matplotlib keeps the side titles in attributes of its own; set_title(loc=...) is their public side.
    found = {"left": axes._left_title, "center": axes.title, "right": axes._right_title}
    return {loc: title for loc, title in found.items() if title.get_visible() and title.get_text()}


def decorations(axes, renderer, *, estimate: bool = False) -> Decorations:
    """The room one panel's tick labels, axis labels, offset texts and titles take outside its frame
    (``estimate``: the tick labels the locators would give now, measured as loose texts, and no
    spill past the frame's sides, which is measured only once the panel has a place)."""
    if estimate:
        y_ticks, y_label = _axis_room(axes.yaxis, renderer, 0)
        x_ticks, x_label = _axis_room(axes.xaxis, renderer, 1)
        spill = (0.0, 0.0, 0.0, 0.0)
    else:
        axes.apply_aspect()         # where a fixed aspect shrinks the panel, its labels move with it
        along, across = _label_boxes(axes.yaxis, renderer), _label_boxes(axes.xaxis, renderer)
        y_ticks, y_label = _axis_room(axes.yaxis, renderer, 0, along)
        x_ticks, x_label = _axis_room(axes.xaxis, renderer, 1, across)
        spill = _spill(axes.get_window_extent(renderer), across, along)
    x_offset = _offset_size(axes.xaxis, renderer)[1]
    x_offset += axes.xaxis.OFFSETTEXTPAD / 72 if x_offset else 0.0
    return Decorations(y_ticks, y_label, x_ticks, x_label, x_offset, _titles_room(axes, renderer), spill)


def _titles_room(axes, renderer) -> float:
    """Inches the panel's titles and its y axis's offset text take above its frame: the titles at
    the title pad, the offset text at its own pad, or the titles on top of it where one meets it
    (``_fix_titles``), judged where the panel is now."""
    titles = [title.get_window_extent(renderer) for title in _titles(axes).values()]
    title = max((box.height for box in titles), default=0.0) / DPI
    room = title + rcParams["axes.titlepad"] / 72 if title else 0.0
    width, height = _offset_size(axes.yaxis, renderer)
    if not height:
        return room
    offset = axes.yaxis.OFFSETTEXTPAD / 72 + height
    frame = axes.get_window_extent(renderer)
    meets = any(box.x0 < frame.x0 + width * DPI and box.x1 > frame.x0 for box in titles)
    return offset + title if meets else max(room, offset)


def _spill(frame, across: list, along: list) -> tuple[float, float, float, float]:
    """How far (inches) the x tick labels (extents ``across``) reach left and right of the panel's
    ``frame``, and the y tick labels (``along``) below and above it (all in pixels)."""
    reach = (max((frame.x0 - box.x0 for box in across), default=0.0),
             max((box.x1 - frame.x1 for box in across), default=0.0),
             max((frame.y0 - box.y0 for box in along), default=0.0),
             max((box.y1 - frame.y1 for box in along), default=0.0))
    return tuple(max(0.0, pixels) / DPI for pixels in reach)


def arrange(figure, grid: np.ndarray, renderer, *, top: float = 0.0, bottom: float = 0.0, right: float = 0.0,
            heights=None) -> None:
    """Place the panels of ``grid`` ((rows, columns) axes made by ``panel_figure``; hidden ones are
    skipped) so that their decorations fit between them and the figure's edges, keeping ``top``,
    ``bottom`` and ``right`` inches free for a heading, a legend, a colour bar; ``heights``: the rows'
    relative heights (default equal). Axis labels and titles are then fixed where matplotlib's
    automatic placement would put them. Call once the panels' contents, limits, ticks and texts are
    final."""
    # The tick labels a locator gives depend on the panel's size, so the panels are first placed by
    # an estimate (the labels it would give now, measured as loose texts), their ticks then fixed at
    # that size, and the panels placed again by the labels of those ticks, and by how far they reach
    # past the frames' sides; again while that moved them enough to change a locator's ticks.
    visible = [axes for axes in grid.flat if axes.get_visible()]
    locators = {axis: axis.get_major_locator() for axes in visible for axis in (axes.xaxis, axes.yaxis)}
    _place(figure, grid, [decorations(axes, renderer, estimate=True) for axes in visible], top, bottom, right, heights)
    _fix_ticks(locators)
    for _ in range(PLACINGS):
        room = _place(figure, grid, [decorations(axes, renderer) for axes in visible], top, bottom, right, heights)
        if not _fix_ticks(locators):
            break
    for axes, item in zip(grid.flat, room.flat):
        if axes.get_visible():
            _fix_texts(axes, item, renderer)


def _place(figure, grid: np.ndarray, measured: list[Decorations], top: float, bottom: float, right: float, heights):
    """Put the panels where their decorations ``measured`` (visible panels, in grid order) leave room:
    columns of one width, rows of the ``heights`` ratios, each gap as wide as the decorations on its
    two sides need. Returns the decorations by grid position."""
    rows, columns = grid.shape
    ratios = np.ones(rows) if heights is None else np.asarray(heights, dtype=float)
    found = iter(measured)
    room = np.full(grid.shape, None, dtype=object)
    for index, axes in np.ndenumerate(grid):
        room[index] = next(found) if axes.get_visible() else Decorations()
    width, height = figure.get_size_inches()
    left = EDGE + max(item.left for item in room[:, 0])
    end = EDGE + right + max(item.right for item in room[:, -1])
    between_columns = GAP + max((one.right + other.left for one, other in zip(room[:, :-1].flat, room[:, 1:].flat)),
                                default=0.0)
    below = EDGE + bottom + max(item.below for item in room[-1, :])
    above = EDGE + top + max(item.above for item in room[0, :])
    between_rows = [GAP + max(upper.below + lower.above for upper, lower in zip(room[r], room[r + 1]))
                    for r in range(rows - 1)]
    panel_width = (width - left - end - (columns - 1) * between_columns) / columns
    unit = (height - above - below - sum(between_rows)) / ratios.sum()
    if panel_width <= 0 or unit <= 0:
        raise ValueError(f"a {width:.1f} × {height:.1f} in figure leaves no room for its {rows} × {columns} panels")
    ceiling = height - above
    for r in range(rows):
        panel_height = ratios[r] * unit
        for c in range(columns):
            grid[r, c].set_position(((left + c * (panel_width + between_columns)) / width,
                                     (ceiling - panel_height) / height, panel_width / width, panel_height / height))
        ceiling -= panel_height + (between_rows[r] if r < rows - 1 else 0.0)
    return room


def _fix_texts(axes, room: Decorations, renderer) -> None:
    """Put the axis labels where matplotlib would (beyond the tick labels, by the label pad) and
    the titles at the frame's top, so that drawing does not measure the ticks again to place them."""
    figure = axes.figure
    box = axes.get_position()       # where it is drawn: a fixed aspect may have shrunk it in its place
    width, height = box.width * figure.get_figwidth(), box.height * figure.get_figheight()
    axes.yaxis.set_label_coords(-(room.y_ticks + axes.yaxis.labelpad / 72) / width, 0.5)
    axes.xaxis.set_label_coords(0.5, -(room.x_ticks + axes.xaxis.labelpad / 72) / height)
    _fix_titles(axes, renderer)


def _fix_titles(axes, renderer) -> None:
    """Each title at the frame's top, or where it meets the y axis's offset text (above the frame's
    left end), every title lifted until its bottom is at that text's top, as matplotlib does; an
    explicit height turns matplotlib's search for room above the panel off (set_title's y)."""
    titles = _titles(axes)
    if not titles:
        return
    width, height = _offset_size(axes.yaxis, renderer)
    frame = axes.get_window_extent(renderer)
    top = frame.y1 + axes.yaxis.OFFSETTEXTPAD * DPI / 72 + height * DPI      # of the offset text, in pixels
    lifts = [0.0]
    for loc, title in titles.items():
        _set_title(axes, loc, title, 1.0)
        box = title.get_window_extent(renderer) if height else None
        if box is not None and box.x0 < frame.x0 + width * DPI and box.x1 > frame.x0 and box.y0 < top:
            lifts.append((top - box.y0) / frame.height)
    if max(lifts) > 0:
        for loc, title in titles.items():
            _set_title(axes, loc, title, 1.0 + max(lifts))


def _set_title(axes, loc: str, title, y: float) -> None:
    """``title`` (the panel's title at ``loc``) at height ``y`` (axes fraction), its look kept."""
    axes.set_title(title.get_text(), loc=loc, y=y, fontsize=title.get_fontsize(), fontweight=title.get_fontweight(),
                   color=title.get_color())


def colorbar_beside(figure, image, label: str, height: float, width: float = COLORBAR_WIDTH):
    """A colour bar of ``image`` in axes of its own, ``height`` × ``width`` inches for now (its ticks
    depend on its length), to be measured by ``colorbar_room`` and moved by ``place_colorbar``."""
    figure_width, figure_height = figure.get_size_inches()
    return figure.colorbar(image, cax=figure.add_axes((0.5, 0.1, width / figure_width, height / figure_height)),
                           label=label)


def colorbar_room(bar, renderer, gap: float = COLORBAR_GAP) -> float:
    """Inches a colour bar takes right of the panels, ``gap`` included: the ``right`` of ``arrange``."""
    ticks, label = _axis_room(bar.ax.yaxis, renderer, 0, _label_boxes(bar.ax.yaxis, renderer))
    width = bar.ax.get_position().width * bar.ax.figure.get_figwidth()
    return gap + width + ticks + label


def place_colorbar(figure, grid: np.ndarray, bar, renderer, gap: float = COLORBAR_GAP, aspect: float | None = None):
    """Move a colour bar ``gap`` inches right of the arranged panels of ``grid``, COLORBAR_SHRINK of
    their height, and fix its label's place. With ``aspect`` its width becomes its length over
    ``aspect`` (as matplotlib sizes a colour bar), at most the width it was made with (the room kept)."""
    width, height = figure.get_size_inches()
    boxes = [axes.get_position() for axes in grid.flat if axes.get_visible()]
    right = max(box.x1 for box in boxes)
    low, high = min(box.y0 for box in boxes), max(box.y1 for box in boxes)
    span = COLORBAR_SHRINK * (high - low)
    bar_width = bar.ax.get_position().width * width
    if aspect is not None:
        bar_width = min(bar_width, span * height / aspect)
    bar.ax.set_position((right + gap / width, low + (high - low - span) / 2, bar_width / width, span))
    ticks, _ = _axis_room(bar.ax.yaxis, renderer, 0, _label_boxes(bar.ax.yaxis, renderer))
    bar.ax.yaxis.set_label_coords(1 + (ticks + bar.ax.yaxis.labelpad / 72) / bar_width, 0.5)
