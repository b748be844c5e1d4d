"""The fitted curve's confidence band (delta method) against closed forms and scipy/numpy."""
from __future__ import annotations

from pathlib import Path

import matplotlib.image
import numpy as np
import pytest
from scipy import stats
from scipy.optimize import least_squares

from audit.engine.band import confidence_band
from audit.engine.estimates import estimate
from audit.engine.problem import Problem
from audit.figures.fit import write_figure
from audit.inputs.scenario import load_scenario

BUNDLED = Path(__file__).resolve().parents[1] / "scenarios" / "probe-cooling"


def test_straight_line_band_is_the_textbook_interval_for_the_mean():
    """For y = a + b·x the delta method is exact: the half-width at x0 is
    t_{0.975, n−2} · s · sqrt(1/n + (x0 − x̄)² / Sxx), the confidence interval of the mean response
    (Draper & Smith, Applied Regression Analysis, ch. 1; value from memory)."""
    rng = np.random.default_rng(7)
    x = np.linspace(0.0, 10.0, 15)
    y = 1.5 + 0.8 * x + rng.normal(0.0, 0.3, x.size)

    def line(x, a, b):
        return a + b * x

    problem = Problem(model=line, x=x, y=y, names=("a", "b"))
    design = np.column_stack([np.ones_like(x), x])
    coefficients, *_ = np.linalg.lstsq(design, y, rcond=None)  # numpy's least squares as the fit
    estimates = estimate(problem, coefficients, 0.95)
    grid = np.array([-2.0, 0.0, 4.2, 10.0, 13.0])
    fitted, half = confidence_band(problem, coefficients, estimates.covariance, estimates.t_quantile, grid)

    n = x.size
    s = np.sqrt(np.sum((y - design @ coefficients) ** 2) / (n - 2))
    sxx = np.sum((x - x.mean()) ** 2)
    t = stats.t.ppf(0.975, n - 2)
    np.testing.assert_allclose(fitted, coefficients[0] + coefficients[1] * grid, rtol=1e-12)
    np.testing.assert_allclose(half, t * s * np.sqrt(1 / n + (grid - x.mean()) ** 2 / sxx), rtol=1e-9)


def test_probe_cooling_band_matches_scipy_fit_and_hand_gradient():
    """T(t) = T_env + dT·exp(−t/τ); by hand ∂T/∂T_env = 1, ∂T/∂dT = e^{−t/τ}, ∂T/∂τ = dT·t·e^{−t/τ}/τ².
    Covariance s²(JᵀWJ)⁻¹ from scipy.optimize.least_squares' weighted Jacobian (numpy.linalg.inv),
    t from scipy.stats; half-width t·sqrt(gᵀ Cov g)."""
    scenario = load_scenario(BUNDLED)
    problem = scenario.problem
    sqrt_w = np.sqrt(problem.weights)

    def weighted_residuals(p):
        return (problem.y - (p[0] + p[1] * np.exp(-problem.x / p[2]))) * sqrt_w

    reference = least_squares(weighted_residuals, scenario.start, xtol=1e-14, ftol=1e-14, gtol=1e-14)
    m, n = problem.n_obs, 3
    covariance = (2 * reference.cost / (m - n)) * np.linalg.inv(reference.jac.T @ reference.jac)
    t = stats.t.ppf(0.975, m - n)
    grid = np.linspace(0.0, 300.0, 7)
    T_env, dT, tau = reference.x
    decay = np.exp(-grid / tau)
    gradient = np.vstack([np.ones_like(grid), decay, dT * grid * decay / tau**2])
    expected = t * np.sqrt(np.einsum("ig,ij,jg->g", gradient, covariance, gradient))

    estimates = estimate(problem, reference.x, 0.95)
    fitted, half = confidence_band(problem, reference.x, estimates.covariance, estimates.t_quantile, grid)
    np.testing.assert_allclose(fitted, T_env + dT * decay, rtol=1e-12)
    # scipy's Jacobian is a finite-difference one: agreement to its accuracy, far below the band's size
    np.testing.assert_allclose(half, expected, rtol=1e-5)
    # The band is narrowest inside the data and widens at t = 0, where dT and tau act together
    assert half[0] == pytest.approx(expected.max(), rel=1e-5)


def test_fit_figure_is_written_and_decodes(tmp_path):
    scenario = load_scenario(BUNDLED)
    fit = least_squares(lambda p: scenario.problem.residuals(p[None, :])[0], scenario.start)
    paths = write_figure(scenario.problem, estimate(scenario.problem, fit.x), tmp_path, x_label="time_s",
                         y_label="temperature_C")
    assert sorted(path.suffix for path in paths) == [".pdf", ".png"]
    image = matplotlib.image.imread(next(path for path in paths if path.suffix == ".png"))
    assert image.ndim == 3 and image.shape[0] > 100 and image.shape[1] > 100
    assert next(path for path in paths if path.suffix == ".pdf").read_bytes().startswith(b"%PDF")


def test_fit_figure_is_drawn_again_only_when_what_it_shows_changes(tmp_path):
    scenario = load_scenario(BUNDLED)
    fit = least_squares(lambda p: scenario.problem.residuals(p[None, :])[0], scenario.start)
    estimates = estimate(scenario.problem, fit.x)
    first = write_figure(scenario.problem, estimates, tmp_path, formats=("png",))
    drawn = first[0].stat().st_mtime_ns
    assert write_figure(scenario.problem, estimates, tmp_path, formats=("png",)) == first
    assert first[0].stat().st_mtime_ns == drawn   # the same picture is not drawn again
    moved = estimate(scenario.problem, fit.x * (1 + 1e-6))
    write_figure(scenario.problem, moved, tmp_path, formats=("png",))
    assert first[0].stat().st_mtime_ns != drawn
    relabelled = first[0].stat().st_mtime_ns
    write_figure(scenario.problem, moved, tmp_path, x_label="t", formats=("png",))
    assert first[0].stat().st_mtime_ns != relabelled
