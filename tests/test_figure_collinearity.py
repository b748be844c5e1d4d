"""The collinearity figure: every bar named by its subset and as long as its index, checked on the
matplotlib artists of the figure before it is saved.

Hard cases:
- polynomials in x with 5 and 7 coefficients: collinearity indices of all 26 and 119 subsets, each
  γ_K = 1/σ_min of the unit-length columns K (Brun, Reichert & Künsch 2001), computed here with
  numpy.linalg.svd;
- a straight line on x symmetric about 0, whose one subset's index is 1, far below the limit.
"""
from __future__ import annotations

import itertools

import numpy as np
import pytest
from figure_checks import captured

from audit import Problem
from audit.figures import identifiability as identifiability_figures
from audit.figures import identifiability_charts
from audit.figures.style import plt
from audit.identifiability.analysis import analyse
from audit.inputs.settings import IdentifiabilitySettings


@pytest.fixture(autouse=True)
def close_figures():
    yield
    plt.close("all")


def polynomial_collinearity(degree: int, monkeypatch, tmp_path):
    """The collinearity figure of y = Σ c_k·x^k (k = 0..degree) and numpy's γ of every subset."""
    x = np.linspace(0.0, 2.0, 30)
    names = tuple(f"c{k}" for k in range(degree + 1))

    def polynomial(x, *coefficients):
        return sum(c * x**k for k, c in enumerate(coefficients))

    columns = np.column_stack([x**k for k in range(degree + 1)])
    y = columns @ np.ones(degree + 1) + 0.05 * np.random.default_rng(2).standard_normal(x.size)
    best = np.linalg.lstsq(columns, y, rcond=None)[0]
    # Few profile points: the profiles are not under test here, and they are most of the time.
    result = analyse(Problem(polynomial, x, y, names), best, lower=np.full(len(names), np.nan),
                     upper=np.full(len(names), np.nan), log_axis=np.zeros(len(names), bool),
                     settings=IdentifiabilitySettings(profile_points=5))
    figures = captured(monkeypatch, identifiability_charts)
    identifiability_figures.write_figures(result, tmp_path)
    # Reference: γ_K = 1 / σ_min(S̃_K), S̃ the columns scaled to unit length (numpy.linalg.svd).
    unit = columns / np.linalg.norm(columns, axis=0)
    gamma = {}
    for size in range(2, min(len(names), 6) + 1):
        for subset in itertools.combinations(range(len(names)), size):
            gamma["{" + ", ".join(names[j] for j in subset) + "}"] = 1 / np.linalg.svd(unit[:, subset],
                                                                                    compute_uv=False)[-1]
    return figures["identifiability-collinearity"], gamma


def bars_and_labels(figure) -> list[tuple[str, float]]:
    """(tick label at the bar's centre, bar's right end) of every bar of the collinearity figure."""
    axis = figure.axes[0]
    bars = [patch for container in axis.containers for patch in container.patches]
    labels = {round(tick, 6): text.get_text() for tick, text in zip(axis.get_yticks(), axis.get_yticklabels())}
    named = []
    for bar in bars:
        centre = round(bar.get_y() + bar.get_height() / 2, 6)
        assert labels.get(centre), f"bar at {centre} has no label"
        named.append((labels[centre], bar.get_x() + bar.get_width()))
    return named


def test_every_collinearity_bar_is_named_by_its_subset_with_its_index(monkeypatch, tmp_path):
    figure, gamma = polynomial_collinearity(4, monkeypatch, tmp_path)      # 5 coefficients: 26 subsets
    named = bars_and_labels(figure)
    assert len(named) == len(gamma) == 26
    assert sorted(label for label, _ in named) == sorted(gamma)
    for label, end in named:
        assert end == pytest.approx(gamma[label], rel=1e-6), label
    assert "every parameter subset" in figure.axes[0].get_title()


def test_collinearity_figure_names_the_highest_subsets_it_keeps(monkeypatch, tmp_path):
    figure, gamma = polynomial_collinearity(6, monkeypatch, tmp_path)      # 7 coefficients: 119 subsets
    named = bars_and_labels(figure)
    kept = identifiability_charts.SUBSETS_SHOWN
    assert len(gamma) == 119 and len(named) == kept
    highest = sorted(gamma, key=gamma.get, reverse=True)[:kept]
    assert sorted(label for label, _ in named) == sorted(highest)
    for label, end in named:
        assert end == pytest.approx(gamma[label], rel=1e-6), label
    assert f"the {kept} highest of 119" in figure.axes[0].get_title()


def test_collinearity_limit_stays_in_sight_when_every_index_is_far_below_it(monkeypatch, tmp_path):
    # A straight line on x symmetric about 0: the unit columns 1 and x are orthogonal, so the
    # one subset's γ = 1 / σ_min = 1 exactly (numpy.linalg.svd of orthonormal columns), far below
    # the limit; the figure's dotted limit line must still fall inside the axis.
    x = np.linspace(-1.0, 1.0, 21)
    y = 1.0 + 0.5 * x + 0.01 * np.random.default_rng(3).standard_normal(x.size)
    unit = np.column_stack([np.ones_like(x), x])
    unit /= np.linalg.norm(unit, axis=0)
    assert 1 / np.linalg.svd(unit, compute_uv=False)[-1] == pytest.approx(1.0, rel=1e-12)
    best = np.polynomial.polynomial.polyfit(x, y, 1)
    result = analyse(Problem(lambda x, a, b: a + b * x, x, y, ("a", "b")), best, lower=np.full(2, np.nan),
                     upper=np.full(2, np.nan), log_axis=np.zeros(2, bool),
                     settings=IdentifiabilitySettings(profile_points=5))
    figures = captured(monkeypatch, identifiability_charts)
    identifiability_figures.write_figures(result, tmp_path)
    axis = figures["identifiability-collinearity"].axes[0]
    [(_, end)] = bars_and_labels(figures["identifiability-collinearity"])
    assert end == pytest.approx(1.0, rel=1e-9)
    limit = result.collinearity.limit
    assert [line.get_xdata()[0] for line in axis.lines if line.get_linestyle() == ":"] == [limit]
    left, right = axis.get_xlim()
    assert left < end and 1.2 * limit < right
