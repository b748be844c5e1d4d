"""The batched engine against outside references: scipy, numpy's least squares, OLS formulas, NIST."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from engine_problems import cycling_problem, two_exponentials
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import least_squares

from audit import InputError, Outcome, Problem, fit_batch
from audit.engine import batch as engine
from audit.engine.estimates import estimate
from audit.inputs.scenario import load_scenario
from audit.validation.reference import log_relative_error

BUNDLED = Path(__file__).resolve().parents[1] / "scenarios" / "probe-cooling"


def scipy_fit(problem: Problem, start: np.ndarray, free: np.ndarray | None = None):
    """Reference fit: scipy.optimize.least_squares (MINPACK lm) on the weighted residuals."""
    sqrt_w = 1.0 if problem.sqrt_weights is None else problem.sqrt_weights
    free = np.ones(problem.n_params, dtype=bool) if free is None else free

    def residual(theta):
        params = start.copy()
        params[free] = theta
        return sqrt_w * (problem.predict(params[None, :])[0] - problem.y)

    found = least_squares(residual, start[free], method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15, max_nfev=20000)
    params = start.copy()
    params[free] = found.x
    return found.status > 0, params, 2 * found.cost


@pytest.mark.parametrize("method", ["gn", "lm"])
@pytest.mark.parametrize("which", ["bundled", "two_exponentials"])
def test_agrees_with_scipy_least_squares_wherever_both_converge(which, method):
    # Reference: scipy.optimize.least_squares (method "lm") from the same starts.
    if which == "bundled":
        problem = load_scenario(BUNDLED).problem
        rng = np.random.default_rng(1)
        starts = np.column_stack([rng.uniform(0, 50, 40), np.exp(rng.uniform(0, np.log(200), 40)),
                                  np.exp(rng.uniform(0, np.log(1000), 40))])
    else:
        problem = two_exponentials()
        rng = np.random.default_rng(2)
        starts = np.array([5.0, 1.3, 2.0, 0.2]) * np.exp(rng.uniform(-0.7, 0.7, (40, 4)))
    result = fit_batch(problem, starts, method=method, tol=1e-10, max_iter=500)
    compared = 0
    for start, params, ssr, outcome in zip(starts, result.params, result.ssr, result.outcome):
        ok, reference, reference_ssr = scipy_fit(problem, start)
        same_optimum = abs(ssr - reference_ssr) <= 1e-8 * reference_ssr
        if outcome == Outcome.CONVERGED and ok and same_optimum:
            np.testing.assert_allclose(params, reference, rtol=1e-6)
            compared += 1
    assert compared >= 20


def test_weights_enter_both_the_step_and_the_ssr():
    # Reference: scipy.optimize.least_squares on sqrt(w)·(f − y), and its SSR Σ w (y − f)².
    problem = load_scenario(BUNDLED).problem
    start = np.array([20.0, 60.0, 100.0])
    result = fit_batch(problem, start[None, :], tol=1e-12)
    ok, reference, reference_ssr = scipy_fit(problem, start)
    assert ok and result.outcome[0] == Outcome.CONVERGED
    np.testing.assert_allclose(result.params[0], reference, rtol=1e-8)
    np.testing.assert_allclose(result.ssr[0], reference_ssr, rtol=1e-10)
    unweighted = Problem(problem.model, problem.x, problem.y, problem.names, jacobian=problem.jacobian)
    plain = fit_batch(unweighted, start[None, :], tol=1e-12)
    assert np.max(np.abs(plain.params[0] / result.params[0] - 1)) > 1e-5


def straight_line_and_cubic():
    rng = np.random.default_rng(3)
    x = np.linspace(-2.0, 3.0, 25)
    line = Problem(lambda x, a, b: a + b * x, x, 1.5 - 0.7 * x + 0.2 * rng.standard_normal(25), ("a", "b"),
                   jacobian=lambda x, a, b: [np.ones_like(x), x])
    cubic_truth = 0.3 + 0.5 * x - 0.8 * x**2 + 0.25 * x**3
    cubic = Problem(lambda x, c0, c1, c2, c3: c0 + c1 * x + c2 * x**2 + c3 * x**3, x,
                    cubic_truth + 0.1 * rng.standard_normal(25), ("c0", "c1", "c2", "c3"))
    return line, cubic


@pytest.mark.parametrize("index", [0, 1])
def test_linear_model_one_full_step_reaches_least_squares(index):
    # Common practice: linear regression is the special case where one full Gauss-Newton step
    # (factor 1) lands on the solution. Reference: numpy.linalg.lstsq; the second step is ~0.
    problem = straight_line_and_cubic()[index]
    design = np.vander(problem.x, problem.n_params, increasing=True)
    solution = np.linalg.lstsq(design, problem.y, rcond=None)[0]
    result = fit_batch(problem, np.full((1, problem.n_params), 10.0), 1.0, history=5)
    assert result.outcome[0] == Outcome.CONVERGED
    assert result.iterations[0] == 2
    first_step = result.history[0][-2]
    # The cubic has no hand-written Jacobian: central differences (relative error ~1e-10) bound
    # how exactly the first step can land.
    np.testing.assert_allclose(first_step, solution, rtol=1e-12 if problem.has_jacobian else 1e-8)
    np.testing.assert_allclose(result.params[0], solution, rtol=1e-10)


@pytest.mark.parametrize("index", [0, 1])
def test_linear_standard_errors_equal_ols_formulas(index):
    # Reference: the textbook OLS covariance s²(XᵀX)⁻¹ with s² = RSS/(m − p), computed with numpy.
    problem = straight_line_and_cubic()[index]
    design = np.vander(problem.x, problem.n_params, increasing=True)
    solution, rss = np.linalg.lstsq(design, problem.y, rcond=None)[:2]
    m, p = design.shape
    covariance = rss[0] / (m - p) * np.linalg.inv(design.T @ design)
    fitted = estimate(problem, fit_batch(problem, np.zeros((1, p))).params[0])
    np.testing.assert_allclose(fitted.std_errors, np.sqrt(np.diag(covariance)), rtol=1e-9)
    np.testing.assert_allclose(fitted.ssr, rss[0], rtol=1e-10)
    if index == 0:
        # Straight line, closed forms (e.g. Draper & Smith, Applied Regression Analysis, ch. 1):
        # se(b) = s / sqrt(Sxx), se(a) = s·sqrt(1/m + x̄²/Sxx).
        s = np.sqrt(rss[0] / (m - 2))
        sxx = np.sum((problem.x - problem.x.mean()) ** 2)
        expected = [s * np.sqrt(1 / m + problem.x.mean() ** 2 / sxx), s / np.sqrt(sxx)]
        np.testing.assert_allclose(fitted.std_errors, expected, rtol=1e-9)


def misra1a_problem(reference) -> Problem:
    def model(x, b1, b2):
        return b1 * (1 - np.exp(-b2 * x))

    def jacobian(x, b1, b2):
        decay = np.exp(-b2 * x)
        return [1 - decay, b1 * x * decay]

    return Problem(model, reference.x, reference.y, reference.names, jacobian=jacobian)


def rat43_problem(reference) -> Problem:
    def model(x, b1, b2, b3, b4):
        return b1 / (1 + np.exp(b2 - b3 * x)) ** (1 / b4)

    def jacobian(x, b1, b2, b3, b4):
        grow = np.exp(b2 - b3 * x)
        base = 1 + grow
        power = base ** (-1 / b4)
        inner = -b1 / b4 * base ** (-1 / b4 - 1) * grow
        return [power, inner, -x * inner, b1 * power * np.log(base) / b4**2]

    return Problem(model, reference.x, reference.y, reference.names, jacobian=jacobian)


@pytest.mark.parametrize("name, build, runs", [
    ("Misra1a", misra1a_problem, [("gn", 0), ("gn", 1), ("lm", 0), ("lm", 1)]),
    ("Rat43", rat43_problem, [("gn", 1), ("lm", 0), ("lm", 1)]),
])
def test_nist_certified_values_with_hand_written_jacobians(nist, name, build, runs):
    # Reference: NIST StRD certified parameters (LRE ≥ 6) and standard deviations (LRE ≥ 4).
    reference = nist(name)
    problem = build(reference)
    for method, start in runs:
        result = fit_batch(problem, reference.starts[start][None, :], method=method, tol=1e-10, max_iter=1000)
        assert result.outcome[0] == Outcome.CONVERGED, (method, start)
        assert log_relative_error(result.params[0], reference.certified).min() >= 6, (method, start)
        assert log_relative_error(result.ssr[0], reference.ssr) >= 6
        fitted = estimate(problem, result.params[0])
        assert log_relative_error(fitted.std_errors, reference.certified_sd).min() >= 4
        assert log_relative_error(fitted.residual_sd, reference.residual_sd) >= 6


# ---------------------------------------------------------------- per-run data, free mask, history

def test_per_run_observations_match_separate_fits():
    # Reference: scipy.optimize.least_squares on each replicate separately.
    problem = two_exponentials()
    rng = np.random.default_rng(4)
    replicates = problem.y + 0.02 * rng.standard_normal((5, problem.n_obs))
    start = np.array([5.0, 1.3, 2.0, 0.2])
    result = fit_batch(problem, np.tile(start, (5, 1)), y=replicates, tol=1e-12)
    for row, observed in enumerate(replicates):
        single = Problem(problem.model, problem.x, observed, problem.names, jacobian=problem.jacobian)
        ok, reference, _ = scipy_fit(single, start)
        assert ok and result.outcome[row] == Outcome.CONVERGED
        np.testing.assert_allclose(result.params[row], reference, rtol=1e-7)


def test_per_run_predictors_for_resampled_pairs():
    # Reference: scipy.optimize.least_squares on each resampled data set.
    problem = two_exponentials()
    rng = np.random.default_rng(5)
    picks = rng.integers(0, problem.n_obs, (4, problem.n_obs))
    start = np.array([5.0, 1.3, 2.0, 0.2])
    result = fit_batch(problem, np.tile(start, (4, 1)), x=problem.x[picks], y=problem.y[picks], tol=1e-12)
    for row, pick in enumerate(picks):
        single = Problem(problem.model, problem.x[pick], problem.y[pick], problem.names, jacobian=problem.jacobian)
        ok, reference, _ = scipy_fit(single, start)
        np.testing.assert_allclose(result.params[row], reference, rtol=1e-7)


def test_several_predictors_with_per_run_resampling():
    # y = a·x1 + exp(−b·x2): x has shape (2, m); per-run x has shape (2, B, m).
    rng = np.random.default_rng(6)
    x = rng.uniform(0, 3, (2, 40))
    problem = Problem(lambda x, a, b: a * x[0] + np.exp(-b * x[1]), x, 1.7 * x[0] + np.exp(-0.4 * x[1]), ("a", "b"))
    picks = rng.integers(0, 40, (3, 40))
    result = fit_batch(problem, np.ones((3, 2)), x=x[:, picks], y=problem.y[picks], tol=1e-12)
    assert np.all(result.converged)
    np.testing.assert_allclose(result.params, np.tile([1.7, 0.4], (3, 1)), rtol=1e-8)


def test_free_mask_holds_parameters_fixed():
    # Reference: scipy.optimize.least_squares on the reduced problem with b fixed.
    problem = two_exponentials()
    start = np.array([4.0, 1.5, 2.5, 0.25])
    free = np.array([True, False, True, True])
    result = fit_batch(problem, start[None, :], free=free, tol=1e-12)
    ok, reference, reference_ssr = scipy_fit(problem, start, free)
    assert ok and result.outcome[0] == Outcome.CONVERGED
    assert result.params[0, 1] == 1.5
    np.testing.assert_allclose(result.params[0], reference, rtol=1e-7)


@pytest.mark.parametrize("method", ["gn", "lm"])
def test_per_run_free_masks_hold_a_different_parameter_in_each_run(method):
    # Reference: scipy.optimize.least_squares on each reduced problem (profile likelihood needs
    # runs that hold different parameters fixed in one batch).
    problem = two_exponentials()
    start = np.array([4.0, 1.5, 2.5, 0.25])
    free = ~np.eye(4, dtype=bool)
    result = fit_batch(problem, np.tile(start, (4, 1)), free=free, method=method, tol=1e-12)
    for row in range(4):
        ok, reference, _ = scipy_fit(problem, start, free[row])
        assert ok and result.outcome[row] == Outcome.CONVERGED
        assert result.params[row, row] == start[row]
        np.testing.assert_allclose(result.params[row], reference, rtol=1e-7)


def test_history_keeps_the_last_iterates_oldest_first():
    result = fit_batch(cycling_problem(), [[0.0], [0.0]], [1.0, 0.5], history=3)
    assert result.history.shape == (2, 3, 1)
    assert set(result.history[0].ravel()) <= {0.0, 1.0}
    assert result.history[1, -1, 0] == result.params[1, 0]


@settings(max_examples=25, deadline=None)
@given(st.lists(st.floats(0.2, 8.0), min_size=2, max_size=9), st.integers(0, 8))
def test_a_run_does_not_depend_on_the_other_runs_in_its_batch(rates, position):
    # Parallel chunks only give the same results if each run is independent of its batch mates.
    x = np.linspace(0, 4, 30)
    problem = Problem(lambda x, a, k: a * np.exp(-k * x), x, 3.0 * np.exp(-1.1 * x), ("a", "k"))
    starts = np.column_stack([np.full(len(rates), 2.0), rates])
    together = fit_batch(problem, starts)
    alone = fit_batch(problem, starts[position % len(rates)][None, :])
    row = position % len(rates)
    assert together.outcome[row] == alone.outcome[0]
    np.testing.assert_allclose(together.params[row], alone.params[0], rtol=1e-12, equal_nan=True)


def test_runs_split_over_many_blocks_give_the_same_fits(monkeypatch):
    # Blocks are an implementation detail: 40 runs in blocks of 3 must give what one block gives.
    problem = two_exponentials()
    rng = np.random.default_rng(5)
    starts = np.array([5.0, 1.3, 2.0, 0.2]) * np.exp(rng.uniform(-0.7, 0.7, (40, 4)))
    for method in ("gn", "lm"):
        whole = fit_batch(problem, starts, method=method, history=2)
        monkeypatch.setattr(engine, "BLOCK_RUNS", (3, 3))
        split = fit_batch(problem, starts, method=method, history=2)
        monkeypatch.undo()
        np.testing.assert_array_equal(split.outcome, whole.outcome)
        np.testing.assert_array_equal(split.iterations, whole.iterations)
        np.testing.assert_allclose(split.params, whole.params, rtol=1e-13, equal_nan=True)
        np.testing.assert_allclose(split.history, whole.history, rtol=1e-13, equal_nan=True)


def test_blocks_hold_fewer_runs_when_each_run_needs_more_memory():
    # Working set per run: (c + 1)·m numbers with a Jacobian, (2c + 1)·m with central differences.
    with_jacobian = two_exponentials()
    without = Problem(with_jacobian.model, with_jacobian.x, with_jacobian.y, with_jacobian.names)
    assert engine.block_size(with_jacobian, 4) == engine.BLOCK_ELEMENTS // (200 * 5)
    assert engine.block_size(without, 4) == engine.BLOCK_ELEMENTS // (200 * 9)
    assert engine.block_size(with_jacobian, 1) == engine.BLOCK_ELEMENTS // (200 * 2)
    huge = Problem(with_jacobian.model, np.linspace(0, 10, 10**6), np.ones(10**6), with_jacobian.names)
    assert engine.block_size(huge, 4) == engine.BLOCK_RUNS[0]


def test_central_differences_match_calculus():
    # Reference: the exact derivatives of a·exp(−k·x), ∂/∂a = exp(−k·x), ∂/∂k = −a·x·exp(−k·x).
    x = np.linspace(0, 4, 30)
    problem = Problem(lambda x, a, k: a * np.exp(-k * x), x, np.zeros(30), ("a", "k"))
    params = np.array([[3.0, 1.1], [0.5, 0.02]])
    numeric = problem.derivatives(params)
    exact = np.stack([np.exp(-params[:, 1:] * x), -params[:, :1] * x * np.exp(-params[:, 1:] * x)], axis=1)
    np.testing.assert_allclose(numeric, exact, rtol=1e-8, atol=1e-12)


@pytest.mark.parametrize("kwargs, message", [
    ({"starts": np.ones((2, 3))}, "starts must have shape"),
    ({"starts": [[np.nan, 1.0, 1.0, 1.0]]}, "finite"),
    ({"step_factor": 1.5}, "(0, 1]"),
    ({"method": "newton"}, "method"),
    ({"y": np.ones(7)}, "y must have shape"),
    ({"free": [False] * 4}, "at least one True"),
    ({"free": [[True] * 4, [False] * 4]}, "at least one True"),
])
def test_bad_arguments_are_refused_with_a_clear_message(kwargs, message):
    problem = two_exponentials()
    arguments = {"starts": np.ones((1, 4))} | kwargs
    with pytest.raises(InputError, match=message.replace("(", r"\(").replace(")", r"\)")):
        fit_batch(problem, **arguments)
