"""The figures of the derivative, bootstrap, identifiability, residual and fit stages, laid out by
figures/layout.py from measured texts, checked once drawn: every text inside the figure, none over
another text or over a panel (``figure_checks``: matplotlib's own extents after the canvas is drawn).

Cases: the quick audits of two bundled scenarios, drawn as ``fitaudit run`` draws them
(``AuditResult.write_figures``): probe-cooling (three parameters: one row of panels, panel pairs
with an offset text between them, colour bars beside a heat map and a square correlation map) and
spectrometer-peak (five parameters: two rows with a hidden panel, a 4 × 4 pairs plot with its upper
half hidden, profile SSR in the ten thousands, so that every profile panel has a "1e4" offset text
beside its right-hand title), and the identifiability stage of a quartic fitted to x in [0, 2]
(its powers nearly collinear: two weak directions side by side under long wrapped titles,
collinearity bars past the limit). Two small figures then make the layout meet what these may not:
a title long enough to meet an offset text, and tick labels on the edges of neighbouring panels.
"""
from __future__ import annotations

import numpy as np
import pytest
from figure_checks import layout_faults, placed_texts
from gallery_audit import quick_audit

from audit import Problem
from audit.figures import (bootstrap_charts, derivatives_charts, fit_charts, identifiability, identifiability_charts,
                           layout, residuals_charts, sweep_charts, sweep_maps)
from audit.figures.style import plt
from audit.identifiability.analysis import analyse
from audit.inputs.settings import IdentifiabilitySettings

#: The modules that draw (and save) the stages' figures.
STAGE_CHARTS = (derivatives_charts, identifiability_charts, bootstrap_charts, residuals_charts, fit_charts)
STAGE_FIGURES = {"derivatives-columns", "derivatives-points", "identifiability-profiles",
                 "identifiability-correlation", "identifiability-weak-directions", "identifiability-collinearity",
                 "bootstrap-histograms", "bootstrap-pairs", "residuals", "fit-band"}


@pytest.fixture(autouse=True)
def close_figures():
    yield
    plt.close("all")


def keeper(figures: dict):
    """A ``save`` that keeps each figure in ``figures`` by stem instead of saving it."""
    def keep(figure, folder, stem, formats=("png",)):
        figures[stem] = figure
        return []
    return keep


def stage_figures(name: str, folder, monkeypatch) -> dict:
    """The stages' figures of the quick audit of bundled scenario ``name``, kept before saving:
    stem -> figure (the sweep's are drawn but not kept: test_figure_layout.py checks them)."""
    figures: dict = {}

    def drop(figure, folder, stem, formats=("png",)):
        plt.close(figure)
        return []

    for module in STAGE_CHARTS:
        monkeypatch.setattr(module, "save", keeper(figures))
    for module in (sweep_charts, sweep_maps):
        monkeypatch.setattr(module, "save", drop)
    quick_audit(name).write_figures(folder)
    return figures


@pytest.mark.parametrize("name", ["probe-cooling", "spectrometer-peak"])
def test_stage_figures_keep_every_text_inside_and_apart(name, monkeypatch, tmp_path):
    figures = stage_figures(name, tmp_path, monkeypatch)
    assert set(figures) == STAGE_FIGURES
    faults = {stem: layout_faults(figure) for stem, figure in figures.items()}
    assert not {stem: found for stem, found in faults.items() if found}


def test_identifiability_figures_of_a_nearly_collinear_quartic_keep_every_text_inside_and_apart(monkeypatch,
                                                                                                tmp_path):
    x = np.linspace(0.0, 2.0, 30)
    names = tuple(f"c{k}" for k in range(5))
    columns = np.column_stack([x**k for k in range(5)])
    y = columns @ np.ones(5) + 0.05 * np.random.default_rng(2).standard_normal(x.size)
    result = analyse(Problem(lambda x, *c: sum(ck * x**k for k, ck in enumerate(c)), x, y, names),
                     np.linalg.lstsq(columns, y, rcond=None)[0], lower=np.full(5, np.nan), upper=np.full(5, np.nan),
                     log_axis=np.zeros(5, bool), settings=IdentifiabilitySettings(profile_points=5))
    figures: dict = {}
    monkeypatch.setattr(identifiability_charts, "save", keeper(figures))
    identifiability.write_figures(result, tmp_path)
    assert sum(axes.get_visible() for axes in figures["identifiability-weak-directions"].axes) == len(result.weak) == 2
    faults = {stem: layout_faults(figure) for stem, figure in figures.items()}
    assert len(faults) == 4 and not {stem: found for stem, found in faults.items() if found}


def test_the_spectrometer_profiles_have_offset_texts_and_panels_in_two_rows(monkeypatch, tmp_path):
    # What makes the case hard, so that it stays hard: SSR near 2.2e4 is written with a "1e4" offset
    # text (matplotlib's ScalarFormatter beyond the profile axes' scilimits of 1e4), and five panels
    # take two rows of three, the last one hidden.
    figure = stage_figures("spectrometer-peak", tmp_path, monkeypatch)["identifiability-profiles"]
    figure.canvas.draw()
    offsets = [axes.yaxis.offsetText.get_text() for axes in figure.axes if axes.get_visible()]
    assert offsets == ["1e4"] * 5
    assert sum(not axes.get_visible() for axes in figure.axes) == 1


def test_a_title_meeting_the_offset_text_goes_above_it():
    # A y axis from 0 to 3e-7 is labelled 0.0 ... 3.0 with a "1e−7" offset text above the frame's
    # left end (matplotlib's ScalarFormatter), where a centred title as wide as the panel meets it.
    figure, grid = layout.panel_figure(1, 1, (4.0, 3.0))
    axes = grid[0, 0]
    axes.plot([0.0, 1.0], [0.0, 3e-7])
    axes.set_title("a centred title as wide as the panel is, or nearly so", fontsize=10)
    layout.arrange(figure, grid, layout.renderer_of(figure))
    assert layout_faults(figure) == []
    assert ((0, "y offset") in dict(placed_texts(figure))) and axes.yaxis.offsetText.get_text() == "1e−7"


def test_tick_labels_on_the_edges_of_neighbouring_panels_stay_apart():
    # Two panels side by side, their x ticks on both ends of the view (0 and 10000): a label centred
    # on a tick at a frame's side reaches half its width past it, towards the next panel's first
    # label and, on the right, past the figure's edge. The second panel has no y tick labels, so no
    # room is kept between the panels but for the labels that reach into it.
    figure, grid = layout.panel_figure(1, 2, (5.0, 2.5))
    for axes in grid[0]:
        axes.set_xlim(0.0, 10000.0)
        axes.set_xticks([0.0, 5000.0, 10000.0])
    grid[0, 1].set_yticks([])
    layout.arrange(figure, grid, layout.renderer_of(figure))
    assert layout_faults(figure) == []


def test_the_check_finds_a_title_over_an_offset_text_and_labels_meeting_across_panels():
    # The same two figures placed without the layout: a title fixed on the frame's top (y=1, no pad),
    # and matplotlib's subplots_adjust with no room between the panels and none at the right edge.
    figure, grid = layout.panel_figure(1, 1, (4.0, 3.0))
    axes = grid[0, 0]
    axes.plot([0.0, 1.0], [0.0, 3e-7])
    axes.set_title("a centred title as wide as the panel is, or nearly so", fontsize=10, y=1.0, pad=0)
    assert any("title" in fault and "y offset" in fault for fault in layout_faults(figure))
    figure, grid = layout.panel_figure(1, 2, (5.0, 2.5))
    for axes in grid[0]:
        axes.set_xlim(0.0, 10000.0)
        axes.set_xticks([0.0, 5000.0, 10000.0])
    grid[0, 1].set_yticks([])
    figure.subplots_adjust(wspace=0.0, right=1.0)
    faults = layout_faults(figure)
    assert any("(0, 'x ticks') over (1, 'x ticks')" in fault for fault in faults)
    assert any("x ticks" in fault and "outside the figure" in fault for fault in faults)


@pytest.mark.parametrize("loc", ["left", "center", "right"])
def test_a_title_keeps_its_look_when_the_layout_fixes_its_place(loc):
    # The layout sets each title again with a fixed height; its text, size, weight and colour are
    # what the figure gave it (matplotlib's own getters before and after).
    figure, grid = layout.panel_figure(1, 1, (4.0, 3.0))
    axes = grid[0, 0]
    axes.set_title("wrong column", loc=loc, fontsize=10, fontweight="bold", color="#c0392b")
    title = {"left": axes._left_title, "center": axes.title, "right": axes._right_title}[loc]
    before = (title.get_text(), title.get_fontsize(), title.get_fontweight(), title.get_color())
    layout.arrange(figure, grid, layout.renderer_of(figure))
    assert (title.get_text(), title.get_fontsize(), title.get_fontweight(), title.get_color()) == before
    assert title.get_position()[1] == pytest.approx(1.0)
