"""Bootstrap resampling schemes: how one set of replicate data sets is drawn from a fitted problem.

Each scheme is a small frozen object built once from the problem and its best fit, and asked for
``count`` replicate data sets at a time with ``draw(rng, count)``. All three return a
``Resample`` that ``fit_batch`` takes as it is (per-run y; per-run x and weights for pairs):

- residual: y* = f(â) + e*, the e* drawn with replacement from the centred (optionally
  leverage-adjusted) residuals. Assumes the errors are exchangeable once weighted: the same
  distribution at every x.
- wild: y*_i = f_i(â) + r_i·v_i with independent multipliers v of mean 0 and variance 1
  (Rademacher ±1, or Mammen's two-point law, which also keeps the third moment). Each
  observation keeps its own residual size, so unequal variances survive.
- pairs: whole observations (x_i, y_i, weight_i) drawn with replacement. Assumes nothing about
  the errors, but a resample may miss the observations that pin a parameter down.

``leave_one_out`` gives the jackknife data sets (the BCa acceleration) in the same form.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..engine.problem import Problem
from ..errors import InputError

SCHEMES = ("residual", "wild", "pairs")
WILD_MULTIPLIERS = ("rademacher", "mammen")

#: Mammen's two-point multiplier law: value LOW with probability MAMMEN_LOW_CHANCE, else HIGH.
#: Mean 0, variance 1, third moment 1 (Mammen 1993; value from memory, checked in the tests).
MAMMEN_LOW = -(np.sqrt(5.0) - 1.0) / 2.0
MAMMEN_HIGH = (np.sqrt(5.0) + 1.0) / 2.0
MAMMEN_LOW_CHANCE = (np.sqrt(5.0) + 1.0) / (2.0 * np.sqrt(5.0))


@dataclass(frozen=True)
class Resample:
    """Replicate data for ``count`` refits, in the shapes ``fit_batch`` takes.

    Attributes:
        y: (count, m') observations.
        x: per-run predictors ((count, m') or (k, count, m')), or None for the problem's own.
        weights: (count, m') weights 1/sigma², or None for the problem's own.
    """

    y: np.ndarray
    x: np.ndarray | None = None
    weights: np.ndarray | None = None


@dataclass(frozen=True)
class ResidualScheme:
    """Residual bootstrap: fitted values plus residuals drawn with replacement.

    Attributes:
        fitted: (m,) model values at the best fit.
        pool: (m,) weighted residuals sqrt(w)·r, leverage-adjusted if asked, centred to mean 0.
        unweight: (m,) 1/sqrt(w) (ones when unweighted): puts a drawn residual on observation scale.
    """

    fitted: np.ndarray
    pool: np.ndarray
    unweight: np.ndarray
    name: str = "residual"

    def draw(self, rng: np.random.Generator, count: int) -> Resample:
        picks = rng.integers(0, self.pool.size, size=(count, self.pool.size))
        return Resample(y=self.fitted + self.pool[picks] * self.unweight)


@dataclass(frozen=True)
class WildScheme:
    """Wild bootstrap: each observation's own residual times a random multiplier.

    Attributes:
        fitted: (m,) model values at the best fit.
        residuals: (m,) residuals y − f(â), leverage-adjusted if asked.
        multipliers: "rademacher" or "mammen".
    """

    fitted: np.ndarray
    residuals: np.ndarray
    multipliers: str = "rademacher"
    name: str = "wild"

    def draw(self, rng: np.random.Generator, count: int) -> Resample:
        shape = (count, self.residuals.size)
        if self.multipliers == "rademacher":
            factors = np.where(rng.random(shape) < 0.5, -1.0, 1.0)
        else:
            factors = np.where(rng.random(shape) < MAMMEN_LOW_CHANCE, MAMMEN_LOW, MAMMEN_HIGH)
        return Resample(y=self.fitted + self.residuals * factors)


@dataclass(frozen=True)
class PairsScheme:
    """Pairs (case) bootstrap: whole observations drawn with replacement.

    Attributes:
        problem: the fitted problem, whose x, y and weights are resampled.
    """

    problem: Problem
    name: str = "pairs"

    def draw(self, rng: np.random.Generator, count: int) -> Resample:
        m = self.problem.n_obs
        return take_observations(self.problem, rng.integers(0, m, size=(count, m)))


Scheme = ResidualScheme | WildScheme | PairsScheme


def build_scheme(method: str, problem: Problem, best: np.ndarray, *, wild_multipliers: str = "rademacher",
                 leverage_adjusted: bool = False) -> Scheme:
    """The resampling scheme ``method`` around the best fit.

    Args:
        method: "residual", "wild" or "pairs".
        problem: the fitted problem.
        best: (n,) the best fit's parameters.
        wild_multipliers: "rademacher" or "mammen" (wild only).
        leverage_adjusted: divide residual i by sqrt(1 − h_i), h the leverages of the weighted
            Jacobian at the best fit, so that resampled residuals have about the error's
            variance instead of less (residual and wild only; pairs resamples data, not residuals).

    Raises:
        InputError: for an unknown method or multiplier law, or a non-finite model at ``best``.
    """
    if method not in SCHEMES:
        raise InputError(f"bootstrap method must be one of {', '.join(SCHEMES)}, got {method!r}")
    if wild_multipliers not in WILD_MULTIPLIERS:
        raise InputError(f"wild multipliers must be one of {', '.join(WILD_MULTIPLIERS)}, got {wild_multipliers!r}")
    if method == "pairs":
        return PairsScheme(problem=problem)
    best = np.asarray(best, dtype=float)
    fitted = problem.predict(best[None, :])[0]
    if not np.all(np.isfinite(fitted)):
        raise InputError("the model is not finite at the best fit, so there are no residuals to resample")
    residuals = problem.y - fitted
    if leverage_adjusted:
        residuals = residuals / np.sqrt(1.0 - leverages(problem, best))
    if method == "wild":
        return WildScheme(fitted=fitted, residuals=residuals, multipliers=wild_multipliers)
    root_weights = np.ones(problem.n_obs) if problem.sqrt_weights is None else problem.sqrt_weights
    pool = residuals * root_weights
    return ResidualScheme(fitted=fitted, pool=pool - pool.mean(), unweight=1.0 / root_weights)


def leverages(problem: Problem, params: np.ndarray) -> np.ndarray:
    """(m,) diagonal of the hat matrix of the weighted Jacobian at ``params``, each below 1.

    Computed from the left singular vectors of the column-scaled weighted Jacobian (the hat
    matrix does not change under column scaling). A leverage of 1 (an observation that alone
    fixes a parameter) is capped just below 1, since its residual is zero anyway.
    """
    weighted = problem.weighted_derivatives(np.asarray(params, dtype=float)[None, :])[0]     # (n, m)
    norms = np.linalg.norm(weighted, axis=1)
    if not np.all(np.isfinite(weighted)) or not np.all(norms > 0):
        raise InputError("leverages need a finite Jacobian with no zero column at the best fit")
    left, values, _ = np.linalg.svd((weighted / norms[:, None]).T, full_matrices=False)
    kept = values > values[0] * np.finfo(float).eps * problem.n_obs
    hat = np.sum(left[:, kept] ** 2, axis=1)
    return np.minimum(hat, 1.0 - 1e-12)


def take_observations(problem: Problem, picks: np.ndarray) -> Resample:
    """Replicate data made of the observations ``picks`` ((B, k) indices into 0..m−1)."""
    weights = None if problem.weights is None else problem.weights[picks]
    return Resample(y=problem.y[picks], x=np.take(problem.x, picks, axis=-1), weights=weights)


def leave_one_out(problem: Problem, first: int, count: int) -> tuple[Problem, Resample]:
    """Jackknife data sets ``first`` .. ``first + count − 1``: each leaves out that observation.

    Returns:
        The problem reduced to m − 1 observations (its own data are placeholders; every run
        brings its own) and the per-run data, observation ``first + r`` missing from run r.
    """
    m = problem.n_obs
    left_out = np.arange(first, first + count)
    picks = np.arange(m - 1)[None, :] + (np.arange(m - 1)[None, :] >= left_out[:, None])
    reduced = Problem(model=problem.model, x=problem.x[..., : m - 1], y=problem.y[: m - 1], names=problem.names,
                      jacobian=problem.jacobian,
                      weights=None if problem.weights is None else problem.weights[: m - 1],
                      typical=problem.typical, formula=problem.formula)
    return reduced, take_observations(problem, picks)
