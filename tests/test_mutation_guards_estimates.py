"""Asymptotic estimates pinned number by number against numpy.linalg and scipy.stats on a weighted
straight line, where the linearisation is exact: covariance, standard errors, correlation, t
quantile and interval ends, condition number, the JSON keys and every refusal."""
from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import stats

from audit.engine.estimates import estimate
from audit.engine.problem import Problem
from audit.errors import InputError

X = np.array([0.0, 1.0, 2.0, 3.0, 5.0, 8.0, 9.0])
Y = np.array([1.1, 2.9, 5.2, 6.8, 11.3, 16.7, 19.4])
WEIGHTS = np.array([1.0, 4.0, 2.0, 1.0, 0.5, 3.0, 1.0])


def line(x, intercept, slope):
    return intercept + slope * x


def line_jacobian(x, intercept, slope):
    return [np.ones_like(x), x + 0 * slope]


def weighted_line() -> tuple[Problem, np.ndarray, np.ndarray]:
    """The problem, the weighted least-squares fit (numpy.linalg.lstsq) and its design matrix."""
    problem = Problem(model=line, jacobian=line_jacobian, x=X, y=Y, names=("intercept", "slope"), weights=WEIGHTS)
    design = np.column_stack([np.ones_like(X), X])
    root = np.sqrt(WEIGHTS)
    params = np.linalg.lstsq(design * root[:, None], Y * root, rcond=None)[0]
    return problem, params, design


def test_every_number_of_a_weighted_line_matches_the_textbook():
    problem, params, design = weighted_line()
    result = estimate(problem, params, confidence=0.9)
    # Weighted linear least squares (Seber & Wild, Nonlinear Regression, 1989, ch. 2; exact for a
    # linear model): s² = Σ w·r² / (m − n), Cov = s²·(Xᵀ W X)⁻¹ by numpy.linalg.inv.
    residuals = Y - design @ params
    ssr = float(np.sum(WEIGHTS * residuals**2))
    variance = ssr / 5
    covariance = variance * np.linalg.inv(design.T @ (WEIGHTS[:, None] * design))
    std_errors = np.sqrt(np.diag(covariance))
    assert result.dof == 5 and result.ssr == pytest.approx(ssr, rel=1e-10)
    assert result.residual_sd == pytest.approx(np.sqrt(variance), rel=1e-10)
    np.testing.assert_allclose(result.covariance, covariance, rtol=1e-9)
    np.testing.assert_allclose(result.std_errors, std_errors, rtol=1e-9)
    # Correlation: Cov_ij / (se_i·se_j), unit diagonal.
    np.testing.assert_allclose(result.correlation, covariance / np.outer(std_errors, std_errors), rtol=1e-9)
    np.testing.assert_allclose(np.diag(result.correlation), 1.0, rtol=1e-12)
    t_quantile = stats.t.ppf(0.95, 5)                  # scipy.stats.t, two-sided 90 %
    assert result.t_quantile == pytest.approx(t_quantile, rel=1e-12) and result.confidence == 0.9
    np.testing.assert_allclose(result.lower, params - t_quantile * std_errors, rtol=1e-9)
    np.testing.assert_allclose(result.upper, params + t_quantile * std_errors, rtol=1e-9)
    # Condition number of the column-scaled weighted design (numpy.linalg.cond, 2-norm).
    weighted = design * np.sqrt(WEIGHTS)[:, None]
    assert result.condition_number == pytest.approx(np.linalg.cond(weighted / np.linalg.norm(weighted, axis=0)),
                                                    rel=1e-9)
    assert result.names == ("intercept", "slope")


def test_to_dict_carries_every_number_under_its_name():
    problem, params, design = weighted_line()
    result = estimate(problem, params)
    data = json.loads(json.dumps(result.to_dict()))
    assert data["names"] == ["intercept", "slope"]
    assert data["t_quantile"] == pytest.approx(stats.t.ppf(0.975, 5), rel=1e-12)   # scipy.stats.t
    assert data["confidence"] == 0.95 and data["dof"] == 5
    for key in ("params", "std_errors", "lower", "upper"):
        assert data[key] == pytest.approx(getattr(result, key).tolist(), rel=1e-15)
    for key in ("covariance", "correlation"):
        np.testing.assert_allclose(data[key], getattr(result, key), rtol=1e-15)
    for key in ("ssr", "residual_sd", "condition_number"):
        assert data[key] == pytest.approx(getattr(result, key), rel=1e-15)
    # The residual SD squared is SSR / dof (definition); the interval half-width is t·se.
    assert data["residual_sd"] ** 2 == pytest.approx(data["ssr"] / 5, rel=1e-12)


def collinear(x, a, b):
    return (a + 2 * b) * x


def flat_in_b(x, a, b):
    return a * x + 0 * b


def overflowing(x, a, b):
    return a * x + np.exp(b * x)


@pytest.mark.parametrize("model", [collinear, flat_in_b, overflowing])
def test_a_jacobian_without_full_rank_or_finite_values_gives_no_standard_errors(model):
    # Columns x and 2x (rank 1), a zero column, or an overflowing column: no inverse exists
    # (numpy.linalg.matrix_rank of the first two is 1), so nothing finite may be reported.
    problem = Problem(model=model, x=X, y=Y, names=("a", "b"))
    result = estimate(problem, np.array([2.0, 800.0 if model is overflowing else 0.5]))
    assert np.all(np.isnan(result.covariance)) and np.all(np.isnan(result.std_errors))
    assert result.condition_number == np.inf


@pytest.mark.parametrize("confidence", [0.0, 1.0, -0.5, 1.5])
def test_confidence_outside_zero_one_is_refused(confidence):
    problem, params, _ = weighted_line()
    with pytest.raises(InputError, match="confidence"):
        estimate(problem, params, confidence=confidence)


def test_as_many_parameters_as_data_is_refused_and_one_spare_point_is_enough():
    two_points = Problem(model=line, x=X[:2], y=Y[:2], names=("intercept", "slope"))
    with pytest.raises(InputError, match="no degrees of freedom"):
        estimate(two_points, np.array([1.0, 1.0]))
    three_points = Problem(model=line, x=X[:3], y=Y[:3], names=("intercept", "slope"))
    result = estimate(three_points, np.array([1.0, 2.0]))
    assert result.dof == 1 and result.t_quantile == pytest.approx(stats.t.ppf(0.975, 1), rel=1e-12)
