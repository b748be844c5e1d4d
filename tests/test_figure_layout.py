"""The sweep's figures, laid out by figures/layout.py from measured texts, checked once drawn: every
text inside the figure, none over another text or over a panel (``figure_checks``: matplotlib's own
extents after the canvas is drawn). Cases: the bundled scenario's sweep with both solvers and five
step factors (two rows of panels with hidden ones, log axes, an outcome chart of two-line labels,
the iteration map's colour bar) and the twin-optima sweep of tests/twin_optima.py (linear axes,
three panels, a narrow figure). The other stages' figures: test_figure_layout_stages.py.
"""
from __future__ import annotations

import pytest
import twin_optima as twin
from figure_checks import layout_faults

from audit.figures import sweep as sweep_figures
from audit.figures import sweep_charts
from audit.figures import layout, style, sweep_maps
from audit.figures.style import plt
from audit.inputs.scenario import load_scenario
from audit.parallel.plan import ParallelPlan
from audit.sweep.run import SweepRequest, run_sweep
from conftest import PROJECT_ROOT


def drawn_figures(result, folder, monkeypatch) -> dict:
    """Every sweep figure of ``result``, kept before saving: stem -> figure."""
    figures: dict = {}

    def keep(figure, folder, stem, formats=("png",)):
        figures[stem] = figure
        return []

    monkeypatch.setattr(sweep_charts, "save", keep)
    monkeypatch.setattr(sweep_maps, "save", keep)
    sweep_figures.write_figures(result, folder)
    return figures


@pytest.fixture(scope="module")
def bundled_sweep(tmp_path_factory):
    scenario = load_scenario(PROJECT_ROOT / "scenarios" / "probe-cooling")
    request = SweepRequest.from_scenario(scenario, points=256, resolution=21, methods=("gn", "lm"),
                                         step_factors=(1.0, 0.5, 0.25, 0.1, 0.05))
    return run_sweep(scenario, request, ParallelPlan(jobs=1), tmp_path_factory.mktemp("bundled-cache"))


@pytest.fixture(scope="module")
def twin_sweep(tmp_path_factory):
    folder = tmp_path_factory.mktemp("twin")
    (folder / "scenario.toml").write_text(twin.scenario_toml().replace("\n        ", "\n"))
    (folder / "model.py").write_text(twin.MODEL)
    (folder / "data.csv").write_text(twin.DATA)
    scenario = load_scenario(folder)
    return run_sweep(scenario, SweepRequest.from_scenario(scenario), ParallelPlan(jobs=1), folder / "cache")


@pytest.mark.parametrize("case", ["bundled", "twin"])
def test_sweep_figures_keep_every_text_inside_and_apart(case, bundled_sweep, twin_sweep, monkeypatch, tmp_path):
    result = bundled_sweep if case == "bundled" else twin_sweep
    figures = drawn_figures(result, tmp_path, monkeypatch)
    expected = {"sweep-outcomes", "sweep-basins-dT-tau", "sweep-basins-dT-tau-lm", "sweep-iterations-dT-tau",
                "sweep-cases"} if case == "bundled" else {"sweep-outcomes", "sweep-basins-a-b"}
    assert expected <= set(figures), sorted(figures)
    try:
        faults = {stem: layout_faults(figure) for stem, figure in figures.items()}
    finally:
        plt.close("all")
    assert not {stem: found for stem, found in faults.items() if found}


def test_the_check_finds_a_legend_over_the_panels_and_a_title_off_the_page():
    # A legend centred on a panel lies over its frame, and a heading placed above the figure's
    # top edge lies outside it, by matplotlib's extents.
    figure, axes = plt.subplots(figsize=(4.0, 3.0))
    axes.plot([0, 1], [0, 1], label="a line")
    figure.legend(loc="center")
    figure.suptitle("a heading", y=1.05, va="bottom")
    faults = layout_faults(figure)
    plt.close(figure)
    assert any("legend 0" in fault and "frame" in fault for fault in faults)
    assert any("heading" in fault and "outside" in fault for fault in faults)


def drawn_ticks(axes) -> list[list[tuple[float, str]]]:
    """(location, label) of the ticks matplotlib draws on each axis of ``axes``, once drawn."""
    axes.figure.canvas.draw()
    found = []
    for axis in (axes.xaxis, axes.yaxis):
        low, high = sorted(axis.get_view_interval())
        found.append([(tick.get_loc(), tick.label1.get_text()) for tick in axis.get_major_ticks()
                      if low - 1e-9 * (high - low) <= tick.get_loc() <= high + 1e-9 * (high - low)])
    return found


@pytest.mark.parametrize("log", [False, True])
def test_layout_keeps_the_ticks_matplotlib_draws_and_no_others(log):
    # Reference: the ticks matplotlib's own locators draw inside the view, ticks on both view edges
    # included (x from 0 to 10, or 1 to 1000 on a log axis); the layout must keep exactly these,
    # with the same labels, and make no tick objects beyond the view.
    figure, grid = layout.panel_figure(1, 1, (4.0, 3.0))
    axes = grid[0, 0]
    if log:
        style.decade_ticks(axes, "x")
        axes.set_xlim(1.0, 1000.0)
        axes.set_ylim(0.3, 2e4)
        axes.set_yscale("log")
    else:
        axes.set_xlim(0.0, 10.0)
        axes.set_ylim(-0.37, 2.91)
    expected = drawn_ticks(axes)
    x_ticks = [location for location, _ in expected[0]]
    assert (x_ticks[0], x_ticks[-1]) == pytest.approx(axes.get_xlim())     # a tick on each edge of the view
    layout.arrange(figure, grid, figure.canvas.get_renderer())
    assert drawn_ticks(axes) == expected
    assert [len(axis.get_major_ticks()) for axis in (axes.xaxis, axes.yaxis)] == [len(ticks) for ticks in expected]
    plt.close(figure)


def default_ticks(axes) -> list[list[float]]:
    """The major ticks matplotlib's default locators put inside the view of an axes of the same size,
    place, scale and limits as ``axes``, in a figure of the same size and resolution, once drawn."""
    figure = plt.figure(figsize=axes.figure.get_size_inches(), dpi=axes.figure.dpi)
    twin_axes = figure.add_axes(axes.get_position().bounds)
    twin_axes.set_xscale(axes.get_xscale())
    twin_axes.set_yscale(axes.get_yscale())
    twin_axes.set_xlim(axes.get_xlim())
    twin_axes.set_ylim(axes.get_ylim())
    found = [[location for location, _ in ticks] for ticks in drawn_ticks(twin_axes)]
    plt.close(figure)
    return found


def test_panels_show_the_ticks_matplotlib_chooses_for_their_final_size(bundled_sweep, monkeypatch, tmp_path):
    # Reference: matplotlib's default locators (AutoLocator, LogLocator) on an axes of the panel's
    # final size and limits. The layout fixes each panel's ticks; it must do so at the final size (a
    # locator's tick count depends on the axis length), not at the size panels have before layout.
    # The outcome chart's x ticks are its bars', set by the figure, so it is left out.
    figures = drawn_figures(bundled_sweep, tmp_path, monkeypatch)
    compared = 0
    try:
        for stem, figure in figures.items():
            if stem == "sweep-outcomes":
                continue
            figure.canvas.draw()
            for axes in figure.axes:
                if axes.get_visible() and axes.get_subplotspec() is not None:
                    shown = [[location for location, _ in ticks] for ticks in drawn_ticks(axes)]
                    assert shown == default_ticks(axes), (stem, axes.get_title())
                    compared += 1
    finally:
        plt.close("all")
    assert compared >= 20
