"""Asymptotic estimates pinned number by number against numpy.linalg and scipy.stats on weighted
lines and quadratics, where the linearisation is exact: covariance, standard errors, correlation, t
quantile and interval ends, condition number, the JSON keys, the rank limit and every refusal."""
from __future__ import annotations

import json
import warnings

import numpy as np
import pytest
from scipy import stats

from audit.engine.estimates import estimate
from audit.engine.linsolve import RANK_TOLERANCE
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


SMALL_X = np.array([0.0, 0.01, 0.02, 0.03, 0.05, 0.08, 0.09])     # columns x and x² of norm below 1


def quadratic(x, a, b, c):
    return a + b * x + c * x**2


def quadratic_jacobian(x, a, b, c):
    return [np.ones_like(x), x + 0 * b, x**2 + 0 * c]


def test_three_parameters_on_a_small_scale_match_numpy_linalg():
    # A weighted quadratic is linear in its parameters, so the asymptotic numbers are exact
    # (Seber & Wild, Nonlinear Regression, 1989, ch. 2): Cov = s²·(XᵀWX)⁻¹ by numpy.linalg.inv,
    # the condition number of the column-scaled weighted design by numpy.linalg.cond (2-norm).
    problem = Problem(model=quadratic, jacobian=quadratic_jacobian, x=SMALL_X, y=Y, names=("a", "b", "c"),
                      weights=WEIGHTS)
    design = np.column_stack([np.ones_like(SMALL_X), SMALL_X, SMALL_X**2])
    root = np.sqrt(WEIGHTS)
    params = np.linalg.lstsq(design * root[:, None], Y * root, rcond=None)[0]
    result = estimate(problem, params)
    ssr = float(np.sum(WEIGHTS * (Y - design @ params) ** 2))
    covariance = ssr / 4 * np.linalg.inv(design.T @ (WEIGHTS[:, None] * design))
    np.testing.assert_allclose(result.covariance, covariance, rtol=1e-8)
    np.testing.assert_allclose(result.std_errors, np.sqrt(np.diag(covariance)), rtol=1e-8)
    weighted = design * root[:, None]
    assert result.condition_number == pytest.approx(np.linalg.cond(weighted / np.linalg.norm(weighted, axis=0)),
                                                    rel=1e-8)


def mixed_rate(x, a, b, c):
    return (a + c) * x + b * x**2


def mixed_rate_jacobian(x, a, b, c):
    return [x + 0 * a, x**2 + 0 * b, x + 0 * c]


def test_three_parameters_with_two_sharing_one_column_give_no_standard_errors():
    # Columns x, x² and x again: rank 2 of 3 (numpy.linalg.matrix_rank), so no inverse exists
    # although the two largest singular values are far from zero.
    design = np.column_stack([X, X**2, X])
    assert np.linalg.matrix_rank(design) == 2
    problem = Problem(model=mixed_rate, jacobian=mixed_rate_jacobian, x=X, y=Y, names=("a", "b", "c"))
    result = estimate(problem, np.array([1.0, 0.1, 1.0]))
    assert np.all(np.isnan(result.covariance)) and result.condition_number == np.inf


def columns_at_angle(angle: float) -> tuple[np.ndarray, np.ndarray]:
    """Two unit columns over 7 points at ``angle`` radians: u along X, v turned towards a unit w ⟂ u."""
    u = X / np.linalg.norm(X)
    w = np.ones_like(X) - (np.ones_like(X) @ u) * u
    w /= np.linalg.norm(w)
    return u, np.cos(angle) * u + np.sin(angle) * w


@pytest.mark.parametrize("angle, rank", [(1.5e-9, 1), (3e-9, 2)])
def test_rank_is_lost_at_a_smallest_singular_value_of_1e_9_of_the_largest(angle, rank):
    # Unit columns at angle θ have singular values √2·cos(θ/2) and √2·sin(θ/2): their ratio
    # tan(θ/2) is 0.75e-9 or 1.5e-9, either side of RANK_TOLERANCE = 1e-9 of the largest
    # (numpy.linalg.matrix_rank with that tolerance agrees).
    u, v = columns_at_angle(angle)
    design = np.column_stack([u, v])
    singular = np.linalg.svd(design, compute_uv=False)
    assert np.linalg.matrix_rank(design, tol=RANK_TOLERANCE * singular[0]) == rank
    problem = Problem(model=lambda x, a, b: a * u + b * v, jacobian=lambda x, a, b: [u + 0 * a, v + 0 * b],
                      x=X, y=Y, names=("a", "b"))
    result = estimate(problem, np.array([1.0, 1.0]))
    if rank == 1:
        assert np.all(np.isnan(result.std_errors)) and result.condition_number == np.inf
    else:
        # Cov = s²·(DᵀD)⁻¹ = s²·D⁺D⁺ᵀ (numpy.linalg.pinv: DᵀD itself is too ill-conditioned to invert);
        # the condition number 1/tan(θ/2) is about 6.7e8.
        pseudo = np.linalg.pinv(design, rcond=1e-15)
        np.testing.assert_allclose(result.covariance, result.ssr / 5 * pseudo @ pseudo.T, rtol=1e-5)
        assert result.condition_number == pytest.approx(singular[0] / singular[1], rel=1e-5)


def test_an_overflowing_point_gives_no_floating_point_warning():
    # exp(800·x) overflows at every x > 0: the estimate is all NaN, and quietly so (no
    # RuntimeWarning reaches the caller; a diverged run is not an error).
    problem = Problem(model=overflowing, x=X, y=Y, names=("a", "b"))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        result = estimate(problem, np.array([2.0, 800.0]))
    assert np.all(np.isnan(result.std_errors)) and result.condition_number == np.inf


def test_integer_parameters_are_estimated_as_floats():
    # At (1, 2), not a fit: SSR = Σ w·(y − 1 − 2x)² and Cov = SSR/5·(XᵀWX)⁻¹ (numpy.linalg.inv); the
    # JSON of integer parameters is the JSON of the same values given as floats, 1.0 not 1.
    problem, _, design = weighted_line()
    result = estimate(problem, [1, 2])
    ssr = float(np.sum(WEIGHTS * (Y - 1 - 2 * X) ** 2))
    covariance = ssr / 5 * np.linalg.inv(design.T @ (WEIGHTS[:, None] * design))
    assert result.ssr == pytest.approx(ssr, rel=1e-12)
    np.testing.assert_allclose(result.std_errors, np.sqrt(np.diag(covariance)), rtol=1e-9)
    assert json.dumps(result.to_dict()) == json.dumps(estimate(problem, [1.0, 2.0]).to_dict())
