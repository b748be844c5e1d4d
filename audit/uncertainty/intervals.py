"""Bootstrap confidence intervals from a set of replicate estimates: percentile and BCa.

Both read quantiles of the replicates with linear interpolation between order statistics
(numpy's default). BCa (bias-corrected and accelerated) moves the two quantile levels:

    z0 = Φ⁻¹(share of replicates below the estimate, ties counted half)
    a  = Σ d³ / (6·(Σ d²)^{3/2}),  d_i = mean(θ_(·)) − θ_(i)   (jackknife, θ_(i) without observation i)
    level(z) = Φ(z0 + (z0 + z) / (1 − a·(z0 + z)))  for z = Φ⁻¹(α/2) and Φ⁻¹(1 − α/2)

(Efron & Tibshirani, An Introduction to the Bootstrap, 1993, ch. 14; formulas from memory,
checked against scipy.stats.bootstrap in the tests.)
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from ..errors import InputError


@dataclass(frozen=True)
class BcaInterval:
    """BCa interval of every parameter.

    Attributes:
        lower, upper: (n,) interval ends; NaN where BCa is undefined (every replicate on one
            side of the estimate, or a jackknife that does not move).
        bias_correction: (n,) z0.
        acceleration: (n,) a.
    """

    lower: np.ndarray
    upper: np.ndarray
    bias_correction: np.ndarray
    acceleration: np.ndarray


def percentile_interval(replicates: np.ndarray, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Equal-tailed percentile interval.

    Args:
        replicates: (B, n) replicate estimates, B ≥ 2, all finite.
        confidence: level in (0, 1).

    Returns:
        (lower, upper), each (n,): the (1 − c)/2 and (1 + c)/2 quantiles.
    """
    replicates = _checked(replicates, confidence)
    tail = (1.0 - confidence) / 2.0
    lower, upper = np.quantile(replicates, [tail, 1.0 - tail], axis=0)
    return lower, upper


def jackknife_acceleration(jackknife: np.ndarray) -> np.ndarray:
    """(n,) BCa acceleration from (J, n) leave-one-out estimates; NaN where they do not vary.

    Raises:
        InputError: with fewer than 3 jackknife estimates.
    """
    jackknife = np.asarray(jackknife, dtype=float)
    if jackknife.ndim != 2 or jackknife.shape[0] < 3:
        raise InputError(f"the acceleration needs at least 3 jackknife estimates, got shape {jackknife.shape}")
    spread = jackknife.mean(axis=0) - jackknife
    squares = np.sum(spread**2, axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(squares > 0, np.sum(spread**3, axis=0) / (6.0 * squares**1.5), np.nan)


def bca_interval(replicates: np.ndarray, estimate: np.ndarray, acceleration: np.ndarray,
                 confidence: float) -> BcaInterval:
    """Bias-corrected and accelerated interval.

    Args:
        replicates: (B, n) replicate estimates, B ≥ 2, all finite.
        estimate: (n,) the estimate from the original data.
        acceleration: (n,) from ``jackknife_acceleration``.
        confidence: level in (0, 1).
    """
    replicates = _checked(replicates, confidence)
    estimate = np.asarray(estimate, dtype=float)
    below = np.count_nonzero(replicates < estimate, axis=0) + np.count_nonzero(replicates <= estimate, axis=0)
    bias_correction = special.ndtri(below / (2.0 * replicates.shape[0]))
    tail = special.ndtri((1.0 - confidence) / 2.0)
    levels = []
    for z in (tail, -tail):
        shifted = bias_correction + z
        with np.errstate(divide="ignore", invalid="ignore"):
            levels.append(special.ndtr(bias_correction + shifted / (1.0 - acceleration * shifted)))
    defined = np.isfinite(bias_correction) & np.isfinite(acceleration)
    ends = [np.full(estimate.shape, np.nan) for _ in levels]
    for j in np.flatnonzero(defined):
        ends[0][j], ends[1][j] = np.quantile(replicates[:, j], [levels[0][j], levels[1][j]])
    return BcaInterval(lower=ends[0], upper=ends[1], bias_correction=bias_correction, acceleration=acceleration)


def _checked(replicates: np.ndarray, confidence: float) -> np.ndarray:
    replicates = np.asarray(replicates, dtype=float)
    if replicates.ndim != 2 or replicates.shape[0] < 2:
        raise InputError(f"intervals need at least 2 replicates of shape (B, n), got shape {replicates.shape}")
    if not 0 < confidence < 1:
        raise InputError(f"confidence must lie between 0 and 1, got {confidence}")
    return replicates
