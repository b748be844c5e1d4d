"""One purpose-built problem per outcome code of the engine, each derived by hand or checked
against numpy and scipy: oscillating, diverged, singular, stalled and model error."""
from __future__ import annotations

import numpy as np
import pytest
from engine_problems import cycling_problem, two_exponentials

from audit import Outcome, Problem, fit_batch
from audit.engine.estimates import estimate


def test_oscillating_two_cycle_and_damped_convergence():
    problem = cycling_problem()
    plain = fit_batch(problem, [[0.0]], 1.0, history=6)
    assert plain.outcome[0] == Outcome.OSCILLATING
    np.testing.assert_allclose(plain.history[0].ravel()[-4:] % 1, 0.0)
    assert set(plain.history[0].ravel()[-4:]) == {0.0, 1.0}
    damped = fit_batch(problem, [[0.0]], 0.5, tol=1e-12)
    real_root = np.roots([1, 0, -2, 2])
    real_root = real_root[np.abs(real_root.imag) < 1e-12].real[0]
    assert damped.outcome[0] == Outcome.CONVERGED
    assert damped.params[0, 0] == pytest.approx(real_root, rel=1e-10)


def test_diverged_when_the_step_overshoots_into_overflow():
    # exp(a·x) from a = −3: the linearisation sends a past 11, where exp(a·5) is ~1e25 and the
    # SSR explodes by far more than 1e12 times (the blow-up bound).
    x = np.linspace(0.0, 5.0, 20)
    problem = Problem(lambda x, a: np.exp(a * x), x, np.exp(0.5 * x), ("a",),
                      jacobian=lambda x, a: [x * np.exp(a * x)])
    result = fit_batch(problem, [[-3.0], [2.0]])
    assert list(result.outcome) == [Outcome.DIVERGED, Outcome.CONVERGED]
    assert result.params[1, 0] == pytest.approx(0.5, rel=1e-12)


def test_singular_for_a_model_that_only_sees_a_product():
    # y = a·b·x: the columns b·x and a·x are proportional, the Jacobian has rank 1 everywhere.
    x = np.linspace(1.0, 4.0, 10)
    for jacobian in (lambda x, a, b: [b * x, a * x], None):
        problem = Problem(lambda x, a, b: a * b * x, x, 6.0 * x, ("a", "b"), jacobian=jacobian)
        for method in ("gn", "lm"):
            result = fit_batch(problem, [[2.0, 5.0]], method=method)
            assert result.outcome[0] == Outcome.SINGULAR, (method, jacobian is None)


def test_no_standard_errors_where_the_jacobian_lost_rank():
    # Linear algebra: JᵀJ of proportional columns has no inverse, so no covariance exists;
    # reporting huge finite standard errors instead would be a false number.
    x = np.linspace(1.0, 4.0, 10)
    problem = Problem(lambda x, a, b: a * b * x, x, 6.0 * x + 0.1 * np.sin(x), ("a", "b"))
    fitted = estimate(problem, np.array([2.0, 3.0]))
    assert np.all(np.isnan(fitted.std_errors)) and fitted.condition_number == np.inf


def test_stalled_at_the_iteration_limit():
    problem = two_exponentials()
    result = fit_batch(problem, [[3.0, 2.0, 1.0, 0.1]], 0.1, max_iter=5)
    assert result.outcome[0] == Outcome.STALLED and result.iterations[0] == 5


def test_model_error_only_for_the_runs_where_the_model_fails():
    # sqrt(a) is undefined for a < 0 (NaN), and the model raises for b > 100: only those runs fail.
    x = np.linspace(0.0, 2.0, 15)

    def model(x, a, b):
        if np.any(b > 100):
            raise ValueError("b out of the calibrated range")
        return np.sqrt(a) * x + b

    problem = Problem(model, x, 2.0 * x + 1.0, ("a", "b"))
    result = fit_batch(problem, [[-1.0, 1.0], [3.0, 0.5], [4.0, 500.0], [5.0, 2.0]])
    assert list(result.outcome) == [Outcome.MODEL_ERROR, Outcome.CONVERGED, Outcome.MODEL_ERROR, Outcome.CONVERGED]
    np.testing.assert_allclose(result.params[[1, 3]], [[4.0, 1.0], [4.0, 1.0]], rtol=1e-9)


def test_non_finite_values_after_a_step_are_model_error_close_in_and_divergence_far_out():
    # Close in: y = sqrt(a)·x with data 0.1·x from a = 1. The Gauss-Newton step (calculus:
    # J = x/(2·sqrt a), r = −0.9·x, Δa = Σ J·r / Σ J² = −1.8) lands on a = −0.8, where sqrt is
    # undefined: the model's own failure, one typical magnitude from the start.
    x = np.linspace(0.5, 2.0, 10)
    near = Problem(lambda x, a: np.sqrt(a) * x, x, 0.1 * x, ("a",), jacobian=lambda x, a: [x / (2 * np.sqrt(a))])
    result = fit_batch(near, [[1.0]], history=2)
    assert result.outcome[0] == Outcome.MODEL_ERROR
    assert result.history[0, -1, 0] == pytest.approx(-0.8, rel=1e-12)
    # Far out: y = exp(−exp(u)·t) from u = −20, where the curve is flat (k = exp(u) ≈ 2e-9). The
    # step Δu = Σ J·r / Σ J² with J = −t·k·exp(−k·t) is about 3e8: exp(u) overflows there, the
    # derivatives become inf·0 = NaN. The run ran off (diverged), the model is not at fault.
    t = np.linspace(0.1, 3.0, 12)
    far = Problem(lambda t, u: np.exp(-np.exp(u) * t), t, np.exp(-t), ("u",),
                  jacobian=lambda t, u: [-t * np.exp(u) * np.exp(-np.exp(u) * t)])
    k = np.exp(-20.0)
    column, residual = -t * k * np.exp(-k * t), np.exp(-t) - np.exp(-k * t)
    step = column @ residual / (column @ column)
    assert step > 1e8 and -20.0 + step > np.log(np.finfo(float).max)      # exp overflows there
    result = fit_batch(far, [[-20.0]], history=2)
    assert result.outcome[0] == Outcome.DIVERGED
    assert result.history[0, -1, 0] == pytest.approx(-20.0 + step, rel=1e-9)
