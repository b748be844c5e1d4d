"""Figures that cannot be misread: each mark checked on the matplotlib artists of a figure drawn
from a small hard case, before it is saved.

Hard cases (the collinearity figure's are in test_figure_collinearity.py):
- a straight line y = a + b·x whose intercept's range is narrower than its confidence interval
  (the profile of a is open at both range bounds and both asymptotic ends lie beyond the axis),
  and whose model gives no value for slopes past a cut (the refits of b's profile fail there);
  the asymptotic interval of a linear model is β̂ ± t·se, from numpy.linalg.lstsq and
  scipy.stats.t (any regression text, e.g. Draper & Smith, Applied Regression Analysis);
- the sweep of tests/twin_optima.py with a's range cut at 1.5: its best optimum a = 2, b = 0
  (calculus, derived in twin_optima.py) then lies outside the ranges, and every start with
  a > A_SPLIT reaches it.
"""
from __future__ import annotations

import re

import numpy as np
import pytest
import twin_optima as twin
from figure_checks import captured
from scipy import stats

from audit import Problem
from audit.figures import bootstrap as bootstrap_figures
from audit.figures import bootstrap_charts
from audit.figures import identifiability as identifiability_figures
from audit.figures import identifiability_charts
from audit.figures import sweep_maps
from audit.figures.style import plt
from audit.figures.sweep_outside import OUTSIDE_GID, OUTSIDE_LABEL
from audit.identifiability.analysis import analyse
from audit.identifiability.profiles import NOT_WALKED
from audit.inputs.scenario import load_scenario
from audit.parallel.plan import ParallelPlan
from audit.sweep.run import SweepRequest, run_sweep
from audit.uncertainty.bootstrap import run_bootstrap

X = np.linspace(0.0, 1.0, 20)
CONFIDENCE = 0.95


@pytest.fixture(autouse=True)
def close_figures():
    yield
    plt.close("all")


# ---------------------------------------------------------------- the straight-line hard case
@pytest.fixture(scope="module")
def line_case():
    """(result, reference) of the straight line: reference holds β̂, t·se and the slope cut."""
    y = 1.0 + 2.0 * X + 0.1 * np.random.default_rng(7).standard_normal(X.size)
    design = np.column_stack([np.ones_like(X), X])
    # Reference: numpy.linalg.lstsq for β̂ and SSR; se = sqrt(SSR/ν · diag (XᵀX)⁻¹); t from scipy.stats.
    beta, ssr, *_ = np.linalg.lstsq(design, y, rcond=None)
    dof = X.size - 2
    half = stats.t.ppf(0.5 + CONFIDENCE / 2, dof) * np.sqrt(ssr[0] / dof * np.diag(np.linalg.inv(design.T @ design)))
    cut = beta[1] + 0.3 * half[1]

    def line(x, a, b):
        # No value past the cut: a refit pinned there fails.
        with np.errstate(invalid="ignore"):
            return np.where(b > cut, np.nan, a + b * x)

    # a's range is a quarter of its interval on each side: pinned there, a moves b by
    # |ρ|·0.25 ≈ 0.22 of b's half-width (ρ ≈ −0.87 for x evenly in [0, 1]), short of the cut.
    lower = np.array([beta[0] - 0.25 * half[0], np.nan])
    upper = np.array([beta[0] + 0.25 * half[0], np.nan])
    result = analyse(Problem(line, X, y, ("a", "b")), beta, lower=lower, upper=upper, log_axis=np.zeros(2, bool))
    return result, {"beta": beta, "half": half, "cut": cut}


@pytest.fixture
def profile_figure(monkeypatch, line_case, tmp_path):
    result, _ = line_case
    figures = captured(monkeypatch, identifiability_charts)
    identifiability_figures.write_figures(result, tmp_path)
    return figures["identifiability-profiles"]


def by_gid(axis, gid: str) -> list:
    return [artist for artist in axis.get_children() if artist.get_gid() == gid]


def legend_labels(figure) -> list[str]:
    return [text.get_text() for legend in figure.legends for text in legend.get_texts()]


def test_the_hard_case_has_what_the_marks_are_for(line_case):
    result, reference = line_case
    profiles = result.profiles
    assert list(profiles.lower_status) == ["open_at_bound", "closed"]
    assert list(profiles.upper_status) == ["open_at_bound", "open_fits_failed"]
    # The asymptotic interval is the textbook β̂ ± t·se (numpy + scipy, see the fixture).
    np.testing.assert_allclose(result.estimates.lower, reference["beta"] - reference["half"], rtol=1e-9)
    np.testing.assert_allclose(result.estimates.upper, reference["beta"] + reference["half"], rtol=1e-9)


def test_threshold_is_drawn_over_the_profile_interval_bar(profile_figure):
    # Matplotlib draws an axes' children sorted by zorder, ties in the order they were added
    # (Axes.draw); the threshold must come after the bar and after an open side's arrow.
    for axis in profile_figure.axes[:2]:
        order = sorted(axis.get_children(), key=lambda artist: artist.zorder)
        threshold = by_gid(axis, identifiability_charts.THRESHOLD_GID)[0]
        bar = by_gid(axis, identifiability_charts.BAR_GID)[0]
        arrows = [artist for artist in axis.texts if getattr(artist, "arrow_patch", None) is not None]
        assert all(order.index(threshold) > order.index(artist) for artist in [bar, *arrows])


def test_threshold_colour_shows_inside_the_bar_once_rendered(profile_figure):
    # The rendered pixels along the threshold's row, between the bar's ends, must include the
    # threshold's colour (its dots), which a bar drawn over it would hide entirely.
    profile_figure.canvas.draw()
    pixels = np.asarray(profile_figure.canvas.buffer_rgba())[..., :3].astype(float)
    colour = np.array([int(identifiability_charts.THRESHOLD[k:k + 2], 16) for k in (1, 3, 5)], dtype=float)
    for axis in profile_figure.axes[:2]:
        bar = by_gid(axis, identifiability_charts.BAR_GID)[0]
        ends = axis.transData.transform(np.column_stack([bar.get_xdata(), bar.get_ydata()]))
        row = pixels.shape[0] - int(round(ends[0, 1]))
        left, right = sorted(ends[:, 0])
        inner = slice(int(left + 0.1 * (right - left)), int(right - 0.1 * (right - left)))
        band = pixels[row - 1:row + 2, inner]
        close = np.linalg.norm(band - colour, axis=-1) < 60
        assert close.any(axis=0).mean() > 0.15, axis.get_title(loc="right")


def test_failed_refits_are_marked_on_the_bottom_edge_not_at_an_ssr(profile_figure, line_case):
    result, reference = line_case
    axis = profile_figure.axes[1]                 # b, whose refits fail past the cut
    marks = by_gid(axis, identifiability_charts.FAILED_GID)
    assert len(marks) == 1
    profiles = result.profiles
    failed = ~np.isfinite(profiles.ssr[1]) & (profiles.outcome[1] != NOT_WALKED)
    # The failed refits are exactly the walked slopes past the cut (the model gives no value there).
    walked = profiles.values[1][profiles.outcome[1] != NOT_WALKED]
    np.testing.assert_array_equal(np.sort(marks[0].get_xdata()), np.sort(walked[walked > reference["cut"]]))
    assert failed.sum() == len(marks[0].get_xdata()) >= 1
    # Their height is a fraction of the axes, not an SSR: it stays put when the SSR scale moves.
    before = marks[0].get_transform().transform(np.column_stack([marks[0].get_xdata(), marks[0].get_ydata()]))[:, 1]
    axis.set_ylim(0.0, 1e6)
    after = marks[0].get_transform().transform(np.column_stack([marks[0].get_xdata(), marks[0].get_ydata()]))[:, 1]
    np.testing.assert_allclose(after, before)
    bottom, top = axis.get_window_extent().y0, axis.get_window_extent().y1
    assert np.all((after >= bottom - 1) & (after <= bottom + 0.1 * (top - bottom)))
    assert identifiability_charts.FAILED_LABEL in legend_labels(profile_figure)


def written_ends(axis) -> list[tuple[float, float]]:
    """(axes-fraction x of the triangle, value written) of every asymptotic end beyond the axis."""
    marks = [artist for artist in by_gid(axis, identifiability_charts.BEYOND_GID) if hasattr(artist, "get_xdata")]
    texts = [artist for artist in by_gid(axis, identifiability_charts.BEYOND_GID) if hasattr(artist, "get_text")]
    assert len(marks) == len(texts)
    return sorted((float(mark.get_xdata()[0]), float(text.get_text().replace("−", "-")))
                  for mark, text in zip(marks, texts))


def dashed_lines(axis) -> list[float]:
    return sorted(float(line.get_xdata()[0]) for line in axis.get_lines() if line.get_linestyle() == "--")


def test_asymptotic_ends_beyond_the_axis_are_marked_with_their_value(profile_figure, line_case):
    _, reference = line_case
    expected = np.column_stack([reference["beta"] - reference["half"], reference["beta"] + reference["half"]])
    a_axis, b_axis = profile_figure.axes[:2]
    # a: its range is a quarter of its interval wide, so both ends are off the axis: a triangle on each
    # edge with the end written (3 significant digits) and no dashed line.
    ends = written_ends(a_axis)
    assert [edge for edge, _ in ends] == [0.0, 1.0]
    np.testing.assert_allclose([value for _, value in ends], expected[0], rtol=5e-3)
    assert dashed_lines(a_axis) == []
    # b: the lower end lies on the walked part (a dashed line there), the upper one beyond the
    # last refit before the cut (a triangle on the right edge).
    left, right = b_axis.get_xlim()
    assert left < expected[1, 0] < right < expected[1, 1]
    np.testing.assert_allclose(dashed_lines(b_axis), [expected[1, 0]], rtol=1e-12)
    (edge, value), = written_ends(b_axis)
    assert edge == 1.0 and value == pytest.approx(expected[1, 1], rel=5e-3)
    assert any(label == identifiability_charts.BEYOND_LABEL for label in legend_labels(profile_figure))


def test_no_mark_where_both_asymptotic_ends_are_on_the_axis(monkeypatch, tmp_path):
    # Reference: β̂ ± t·se of a straight line without ranges (numpy.linalg.lstsq, scipy.stats.t);
    # the profile walks past both ends, so each is a dashed line and nothing is marked.
    y = 1.0 + 2.0 * X + 0.1 * np.random.default_rng(3).standard_normal(X.size)
    design = np.column_stack([np.ones_like(X), X])
    beta, ssr, *_ = np.linalg.lstsq(design, y, rcond=None)
    half = stats.t.ppf(0.975, X.size - 2) * np.sqrt(ssr[0] / (X.size - 2) * np.diag(np.linalg.inv(design.T @ design)))
    result = analyse(Problem(lambda x, a, b: a + b * x, X, y, ("a", "b")), beta, lower=np.full(2, np.nan),
                     upper=np.full(2, np.nan), log_axis=np.zeros(2, bool))
    figures = captured(monkeypatch, identifiability_charts)
    identifiability_figures.write_figures(result, tmp_path)
    figure = figures["identifiability-profiles"]
    for j, axis in enumerate(figure.axes[:2]):
        assert written_ends(axis) == []
        np.testing.assert_allclose(dashed_lines(axis), [beta[j] - half[j], beta[j] + half[j]], rtol=1e-12)
        assert by_gid(axis, identifiability_charts.FAILED_GID) == []
    assert not any(label == identifiability_charts.BEYOND_LABEL for label in legend_labels(figure))


# ---------------------------------------------------------------- basin maps
@pytest.fixture(scope="module")
def cut_twin(tmp_path_factory):
    """The twin-optima sweep with a searched only up to 1.5: the optimum a = 2 is outside."""
    folder = tmp_path_factory.mktemp("twin-cut")
    toml = twin.scenario_toml().replace(f"range = [{twin.A_RANGE[0]}, {twin.A_RANGE[1]}]",
                                        f"range = [{twin.A_RANGE[0]}, 1.5]")
    (folder / "scenario.toml").write_text(toml.replace("\n        ", "\n"))
    (folder / "model.py").write_text(twin.MODEL)
    (folder / "data.csv").write_text(twin.DATA)
    scenario = load_scenario(folder)
    return run_sweep(scenario, SweepRequest.from_scenario(scenario), ParallelPlan(jobs=1), folder / "cache")


@pytest.fixture
def basin_figure(monkeypatch, cut_twin, tmp_path):
    figures = captured(monkeypatch, sweep_maps)
    sweep_maps.basin_figure(cut_twin, cut_twin.maps[0], 0, tmp_path, "basins", ("png",))
    return figures["basins"]


def legend_entry(figure, prefix: str):
    """(drawn legend handle, label) of the figure legend's entry starting with ``prefix``."""
    legend = figure.legends[0]
    found = [(handle, text.get_text()) for handle, text in zip(legend.legend_handles, legend.get_texts())
             if text.get_text().startswith(prefix)]
    assert len(found) == 1, [text.get_text() for text in legend.get_texts()]
    return found[0]


def test_safe_region_legend_entry_is_the_outline_the_map_draws(basin_figure):
    outlines = [patch for axis in basin_figure.axes for patch in axis.patches
                if patch.get_gid() == sweep_maps.REGION_GID]
    assert outlines, "the twin sweep has a safe region at some step factor"
    handle, _ = legend_entry(basin_figure, "safe starting region")
    for outline in outlines:
        assert outline.get_fill() is False and handle.get_fill() is False       # unfilled, both
        assert handle.get_facecolor()[3] == outline.get_facecolor()[3] == 0.0
        assert handle.get_edgecolor() == outline.get_edgecolor()
        assert handle.get_linewidth() == outline.get_linewidth()
        # Patch.update_from (how the legend copies a handle) copies the dash pattern, which is
        # what is drawn; the pattern in points, scaled by the line width, must be the same.
        assert handle._dash_pattern == outline._dash_pattern and outline._dash_pattern[1] is not None
        effects = [(type(effect).__name__, vars(effect).get("_gc")) for effect in outline.get_path_effects()]
        assert [(type(effect).__name__, vars(effect).get("_gc")) for effect in handle.get_path_effects()] == effects


def test_solution_outside_the_ranges_is_marked_at_the_map_edge(cut_twin, basin_figure):
    # Calculus (twin_optima.py): the minimum at a = 2, b = 0 lies past the cut range end a = 1.5.
    row = int(np.argmin(np.abs(cut_twin.solution_params[:, 0] - 2.0)))
    np.testing.assert_allclose(cut_twin.solution_params[row], [2.0, 0.0], atol=1e-7)
    assert not cut_twin.solution_inside[row] and cut_twin.solution_inside[0]
    for axis in basin_figure.axes:
        marks = [artist for artist in by_gid(axis, OUTSIDE_GID) if hasattr(artist, "get_offsets")]
        numbers = [artist for artist in by_gid(axis, OUTSIDE_GID) if hasattr(artist, "get_text")]
        # Every start with a > A_SPLIT reaches it at every step factor (twin_optima.py).
        assert len(marks) == 1 and len(numbers) == 1
        x, y = marks[0].get_offsets()[0]
        assert x == pytest.approx(axis.get_xlim()[1]) and y == pytest.approx(0.0, abs=1e-7)
        assert marks[0].get_facecolor().size == 0 or marks[0].get_facecolor()[0][3] == 0.0     # hollow
        assert numbers[0].get_text() == str(row + 1)
    _, label = legend_entry(basin_figure, f"solution {row + 1} ")
    assert re.search(r"outside the ranges\)$", label)
    legend_entry(basin_figure, OUTSIDE_LABEL)
    # The best fit (inside the ranges) is not marked as outside.
    _, best = legend_entry(basin_figure, "reached the best")
    assert "outside" not in best


# ---------------------------------------------------------------- legends stay on the page
@pytest.mark.parametrize("which", ["profiles", "basins"])
def test_legend_lies_within_its_figure(which, profile_figure, basin_figure):
    # The profile legend of the line case has seven entries, the basin legend long solution
    # names; matplotlib's own extents (after drawing) must keep them inside the figure.
    figure = profile_figure if which == "profiles" else basin_figure
    figure.canvas.draw()
    legend = figure.legends[0].get_window_extent()
    page = figure.bbox
    assert page.x0 <= legend.x0 and legend.x1 <= page.x1, (legend, page)


def test_best_fit_and_start_are_marked_on_every_map_panel(cut_twin, basin_figure):
    # With a cut at 1.5 the best fit the sweep audits is the minimum inside the ranges, a = −1 − 1/√2,
    # b = 0 (calculus, twin_optima.py: A_OTHER); the start is the scenario's own (twin.START). Each
    # panel marks each once, a white star and a white circle.
    for axis in basin_figure.axes:
        marks = {line.get_marker(): line for line in axis.get_lines() if line.get_linestyle() == "None"}
        star, circle = marks["*"], marks["o"]
        np.testing.assert_allclose(np.column_stack([star.get_xdata(), star.get_ydata()]), [[twin.A_OTHER, 0.0]],
                                   atol=1e-7)
        np.testing.assert_allclose(np.column_stack([circle.get_xdata(), circle.get_ydata()]), [twin.START])
        assert star.get_markerfacecolor() == circle.get_markerfacecolor() == "white"
        assert star.get_markersize() > circle.get_markersize()


def test_bootstrap_histograms_fill_numpys_histogram_of_the_used_replicates(monkeypatch, tmp_path):
    # Reference: numpy.histogram(bins="auto", density=True) of each parameter's used replicates. The
    # filled region of its panel reaches each bin's height at the bin's middle, and no higher.
    y = 1.0 + 2.0 * X + 0.1 * np.random.default_rng(3).standard_normal(X.size)
    result = run_bootstrap(Problem(lambda x, a, b: a + b * x, X, y, ("a", "b")), np.polyfit(X, y, 1)[::-1],
                           samples=300, seed=4)
    figures = captured(monkeypatch, bootstrap_charts)
    bootstrap_figures.write_figures(result, tmp_path)
    used = result.replicates.params[result.replicates.used]
    for j, axis in enumerate(figures["bootstrap-histograms"].axes[:2]):
        heights, edges = np.histogram(used[:, j], bins="auto", density=True)
        for middle, height in zip((edges[1:] + edges[:-1]) / 2, heights):
            filled = [any(patch.contains_point(axis.transData.transform((middle, level)))
                          for patch in axis.patches) for level in (0.97 * height, 1.03 * height + 1e-12)]
            assert filled == [height > 0, False], (j, middle, height)
