"""Every figure the audit draws, checked for tick labels that overlap, with matplotlib's own text
extents (Text.get_window_extent after the canvas is drawn), at the size the figure is saved (the
appendix scales a figure as a whole, so labels that do not overlap there do not in print)."""
from __future__ import annotations

import importlib
import itertools

import numpy as np
import pytest

from audit import Problem
from audit.cli import main
from audit.figures import bootstrap as bootstrap_figures
from audit.figures import bootstrap_charts
from audit.figures import style
from audit.uncertainty.bootstrap import run_bootstrap
from conftest import PROJECT_ROOT

#: The modules that draw (and save) every figure of an audit.
CHARTS = ("bootstrap_charts", "derivatives_charts", "fit_charts", "identifiability_charts", "residuals_charts",
          "sweep_charts", "sweep_maps")


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

    for name in CHARTS:
        patch.setattr(importlib.import_module(f"audit.figures.{name}"), "save", checking_save)
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


@pytest.mark.parametrize("level", [584.6567, -12345.678])
def test_bootstrap_tick_labels_of_many_digits_do_not_overlap(level, monkeypatch, tmp_path):
    # A straight line whose intercept (584.6567, or −12345.678 with its sign) is known to about
    # 1e-4: every tick label needs eight to eleven characters. Matplotlib's own locator counts ticks
    # by the axis length alone and put 584.656625, 584.656650, ... side by side, overlapping.
    x = np.linspace(0.0, 1.0, 30)
    y = level * (1 + 0.5 * x) + 1e-4 * np.random.default_rng(1).standard_normal(x.size)
    best = np.linalg.lstsq(np.column_stack([np.ones_like(x), x]), y, rcond=None)[0]
    result = run_bootstrap(Problem(lambda x, a, b: a + b * x, x, y, ("intercept", "slope")), best, samples=300,
                           seed=2)
    checked = {}

    def checking_save(figure, folder, stem, formats=("png",)):
        checked[stem] = overlapping_tick_labels(figure)
        style.plt.close(figure)
        return []

    monkeypatch.setattr(bootstrap_charts, "save", checking_save)
    bootstrap_figures.write_figures(result, tmp_path)
    assert checked == {"bootstrap-histograms": [], "bootstrap-pairs": []}
