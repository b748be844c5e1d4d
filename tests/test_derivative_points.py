"""Where the derivative audit compares derivatives: the least-squares optimum, the start, and
seeded samples over the parameter ranges, checked against scipy.optimize.least_squares and the
sampling laws named beside each check."""
from __future__ import annotations

from pathlib import Path

import numpy as np
from scipy.optimize import least_squares
from scipy.stats import binomtest

from audit import Problem
from audit.derivatives.points import check_points, sample_points
from audit.inputs.scenario import Parameter, load_scenario

BUNDLED = Path(__file__).resolve().parents[1] / "scenarios" / "probe-cooling"


def scipy_reference_fit(problem: Problem, start: np.ndarray) -> np.ndarray:
    """scipy.optimize.least_squares (MINPACK lm) on the weighted residuals, tight tolerances."""
    def residual(params):
        return problem.sqrt_weights * (problem.predict(params[None, :])[0] - problem.y)
    return least_squares(residual, start, method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15).x


def test_check_points_are_the_least_squares_optimum_the_start_and_seeded_samples():
    scenario = load_scenario(BUNDLED)
    points = check_points(scenario.problem, scenario.parameters, scenario.solver, 50, seed=3)
    # Outside reference for the best fit: scipy.optimize.least_squares from the same start.
    np.testing.assert_allclose(points.params[0], scipy_reference_fit(scenario.problem, scenario.start), rtol=1e-7)
    np.testing.assert_array_equal(points.params[1], scenario.start)
    samples = points.params[2:]
    lower = [p.lower for p in scenario.parameters]
    upper = [p.upper for p in scenario.parameters]
    assert np.all((samples >= lower) & (samples <= upper))
    again = check_points(scenario.problem, scenario.parameters, scenario.solver, 50, seed=3)
    np.testing.assert_array_equal(points.params, again.params)


def test_log_axis_samples_are_log_uniform_and_unranged_ones_stay_near_the_start():
    scenario = load_scenario(BUNDLED)
    samples = sample_points(scenario.parameters, 4000, np.random.default_rng(11))
    # tau on a log axis over [1, 1000]: half the samples below the geometric midpoint sqrt(1000),
    # checked against the binomial law (scipy.stats.binomtest).
    below = int(np.sum(samples[:, 2] < np.sqrt(1000.0)))
    assert binomtest(below, 4000, 0.5).pvalue > 1e-3
    free = (Parameter("offset", start=3.0), Parameter("rate", start=0.2, axis="log"))
    near = sample_points(free, 1000, np.random.default_rng(1))
    assert np.all(np.abs(near[:, 0] - 3.0) <= 1.5) and np.all((near[:, 1] >= 0.1) & (near[:, 1] <= 0.4))
