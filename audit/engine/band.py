"""Pointwise confidence band of a fitted curve from the asymptotic covariance (delta method).

To first order f(x; â) − f(x; a) ≈ g(x)ᵀ(â − a) with g(x) = ∂f/∂a at â, so
Var f(x; â) ≈ g(x)ᵀ Cov g(x), and the band at level 1 − α is f(x; â) ± t_{1−α/2, m−n}·sqrt(that).
It describes the curve's uncertainty, not where new measurements fall (no noise term added).
"""
from __future__ import annotations

import dataclasses

import numpy as np

from .problem import Problem


def confidence_band(problem: Problem, params: np.ndarray, covariance: np.ndarray, t_quantile: float,
                    x: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """The fitted curve and the half-width of its pointwise confidence band.

    Args:
        problem: the fitted problem; its Jacobian (hand-derived, formula or central differences)
            gives g(x).
        params: (n,) the fit.
        covariance: (n, n) the asymptotic covariance of the estimates.
        t_quantile: the Student t quantile of the level (``Estimates.t_quantile``).
        x: predictors where the band is wanted, (g,) or (k, g) like ``problem.x``; None: the data's.

    Returns:
        (fitted (g,), half_width (g,)): f(x; params) and t·sqrt(g(x)ᵀ Cov g(x)).
    """
    point = np.asarray(params, dtype=float)[None, :]
    if x is not None:
        # The same model on other predictor values: a problem whose observations are the grid.
        x = np.asarray(x, dtype=float)
        problem = dataclasses.replace(problem, x=x, y=np.zeros(x.shape[-1]), weights=None)
    fitted = problem.predict(point)[0]
    gradient = problem.derivatives(point)[0]  # (n, g)
    variance = np.einsum("ig,ij,jg->g", gradient, np.asarray(covariance, dtype=float), gradient)
    return fitted, t_quantile * np.sqrt(np.maximum(variance, 0.0))
