"""Asymptotic uncertainty at a converged fit: covariance, standard errors, correlations, t intervals.

With m observations, n fitted parameters and weighted residual sum of squares SSR:
s² = SSR / (m − n) and Cov = s²·(JᵀWJ)⁻¹. The inverse is formed from the SVD of the
column-scaled weighted Jacobian, never from the normal equations, so that the ill-conditioned
reference problems keep their digits.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..jsonable import jsonable
from .linsolve import RANK_TOLERANCE
from .problem import Problem


@dataclass
class Estimates:
    """Asymptotic (linearised) uncertainty of one fit.

    Attributes:
        names: parameter names (n).
        params: (n,) estimates.
        ssr: weighted residual sum of squares.
        dof: degrees of freedom m − n.
        residual_sd: s = sqrt(SSR / dof).
        covariance: (n, n) s²·(JᵀWJ)⁻¹; NaN if the Jacobian lost rank.
        std_errors: (n,) square roots of the covariance diagonal.
        correlation: (n, n) correlation matrix.
        confidence: level of the intervals, e.g. 0.95.
        t_quantile: Student t quantile for ``confidence`` and ``dof``.
        lower, upper: (n,) t intervals params ∓ t·std_errors.
        condition_number: largest over smallest singular value of the column-scaled Jacobian.
    """

    names: tuple[str, ...]
    params: np.ndarray
    ssr: float
    dof: int
    residual_sd: float
    covariance: np.ndarray
    std_errors: np.ndarray
    correlation: np.ndarray
    confidence: float
    t_quantile: float
    lower: np.ndarray
    upper: np.ndarray
    condition_number: float

    def to_dict(self) -> dict:
        return jsonable({
            "names": list(self.names),
            "params": self.params,
            "ssr": self.ssr,
            "dof": self.dof,
            "residual_sd": self.residual_sd,
            "covariance": self.covariance,
            "std_errors": self.std_errors,
            "correlation": self.correlation,
            "confidence": self.confidence,
            "t_quantile": self.t_quantile,
            "lower": self.lower,
            "upper": self.upper,
            "condition_number": self.condition_number,
        })


def inverse_information(weighted: np.ndarray) -> tuple[np.ndarray, float]:
    """(JᵀWJ)⁻¹ and the scaled condition number, from (n, m) weighted derivative rows.

    Columns are scaled to unit norm before the SVD so that parameters of very different sizes
    do not cost digits; the inverse is unscaled afterwards. A zero column, or a Jacobian that has
    lost rank (the engine's ``RANK_TOLERANCE``), gives an all-NaN inverse and an infinite
    condition number: no standard error is better than a meaningless huge one.
    """
    norms = np.linalg.norm(weighted, axis=1)
    if not np.all(norms > 0) or not np.all(np.isfinite(weighted)):
        return np.full((len(norms), len(norms)), np.nan), np.inf
    _, values, right = np.linalg.svd((weighted / norms[:, None]).T, full_matrices=False)
    if values[-1] <= RANK_TOLERANCE * values[0]:
        return np.full((len(norms), len(norms)), np.nan), np.inf
    scaled_inverse = (right.T / values**2) @ right
    return scaled_inverse / np.outer(norms, norms), float(values[0] / values[-1])


def estimate(problem: Problem, params: np.ndarray, confidence: float = 0.95) -> Estimates:
    """Asymptotic standard errors, correlations and t intervals at ``params``.

    Args:
        problem: the fitted problem.
        params: (n,) parameters, normally a converged fit.
        confidence: level of the t intervals, in (0, 1).

    Raises:
        InputError: for a confidence outside (0, 1) or too few observations (m ≤ n).
    """
    if not 0 < confidence < 1:
        raise InputError(f"confidence must lie between 0 and 1, got {confidence}")
    params = np.asarray(params, dtype=float)
    m, n = problem.n_obs, problem.n_params
    dof = m - n
    if dof <= 0:
        raise InputError(f"{m} observations leave no degrees of freedom for {n} parameters")
    # Points far from convergence (a diverged run) may overflow; they give inf/NaN, not warnings.
    with np.errstate(all="ignore"):
        ssr = float(problem.ssr(params[None, :])[0])
        inverse, condition = inverse_information(problem.weighted_derivatives(params[None, :])[0])
        variance = ssr / dof
        covariance = variance * inverse
        std_errors = np.sqrt(np.diag(covariance))
        correlation = covariance / np.outer(std_errors, std_errors)
    from scipy import stats   # here, not at the top: scipy.stats takes seconds to import

    t_quantile = float(stats.t.ppf(0.5 + confidence / 2, dof))
    return Estimates(
        names=problem.names, params=params, ssr=ssr, dof=dof, residual_sd=float(np.sqrt(variance)),
        covariance=covariance, std_errors=std_errors, correlation=correlation, confidence=confidence,
        t_quantile=t_quantile, lower=params - t_quantile * std_errors, upper=params + t_quantile * std_errors,
        condition_number=condition,
    )
