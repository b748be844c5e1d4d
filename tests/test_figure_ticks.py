"""Every figure the audit draws, checked for tick labels that overlap, with matplotlib's own text
extents (Text.get_window_extent after the canvas is drawn), at the size the figure is saved."""
from __future__ import annotations

import importlib
import itertools

import pytest

from audit.cli import main
from audit.figures import style
from conftest import PROJECT_ROOT

WRITERS = ("bootstrap", "derivatives", "fit", "identifiability", "residuals", "sweep", "sweep_maps")


def overlapping_tick_labels(figure) -> list[tuple[str, str, str]]:
    """(axes title, label, label) for every pair of visible tick labels on one axis that overlap."""
    figure.canvas.draw()
    renderer = figure.canvas.get_renderer()
    found = []
    for axes in figure.axes:
        for axis in (axes.xaxis, axes.yaxis):
            labels = [label for label in axis.get_ticklabels(minor=False) + axis.get_ticklabels(minor=True)
                      if label.get_visible() and label.get_text()]
            boxes = [label.get_window_extent(renderer) for label in labels]
            for (a, box_a), (b, box_b) in itertools.combinations(zip(labels, boxes), 2):
                if box_a.overlaps(box_b):
                    found.append((axes.get_title() or axes.get_xlabel(), a.get_text(), b.get_text()))
    return found


@pytest.fixture(scope="module")
def drawn(tmp_path_factory):
    """Every figure of a quick audit of the demo scenario: stem -> overlapping tick-label pairs."""
    checked: dict[str, list] = {}
    original = style.save
    patch = pytest.MonkeyPatch()

    def checking_save(figure, folder, stem, formats=("png", "pdf")):
        checked[stem] = overlapping_tick_labels(figure)
        return original(figure, folder, stem, formats=("png",))

    for name in WRITERS:
        module = importlib.import_module(f"audit.figures.{name}")
        if hasattr(module, "save"):
            patch.setattr(module, "save", checking_save)
    try:
        folder = tmp_path_factory.mktemp("figures")
        main(["run", str(PROJECT_ROOT / "scenarios" / "probe-cooling"), "--quick", "--jobs", "1", "-o", str(folder)])
    finally:
        patch.undo()
    return checked


def test_every_figure_writer_was_reached(drawn):
    prefixes = {stem.split("-")[0] for stem in drawn}
    assert {"bootstrap", "derivatives", "identifiability", "sweep", "fit", "residuals"} <= prefixes, sorted(drawn)


def test_no_figure_has_overlapping_tick_labels(drawn):
    overlapping = {stem: pairs for stem, pairs in drawn.items() if pairs}
    assert not overlapping


def test_the_check_finds_tick_labels_that_do_overlap():
    # Twelve 9-character labels at 10 pt take about 12 · 9 · 6 pt ≈ 650 pt of text; matplotlib's
    # extents show them overlapping on an axis 2 inches (144 pt) wide, and not once rotated 90°.
    figure, axes = style.new_figure(2.0, 2.0)
    axes.set_xticks(range(12), [f"label{k:04d}" for k in range(12)])
    assert len(overlapping_tick_labels(figure)) > 0
    axes.set_xticks(range(12), [f"label{k:04d}" for k in range(12)], rotation=90, fontsize=5)
    assert overlapping_tick_labels(figure) == []
    style.plt.close(figure)
