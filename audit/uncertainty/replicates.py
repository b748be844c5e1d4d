"""Refits of replicate data sets (bootstrap or jackknife) and how each one ended.

A refit starts at the best fit. Its fate is its engine outcome, except that a converged refit is
split in two by where a descent from the best fit on the same replicate data ends (a
Levenberg-Marquardt refit: every step it takes lowers the SSR, so it ends at the minimum whose
basin holds the best fit; the refit itself when the refits already are such runs):

- best: the refit ends at that same point, i.e. in the best fit's solution, however far from
  the best fit that point lies (a long tail is what the bootstrap is run to show);
- other: it ends elsewhere (a Gauss-Newton step jumped into another basin: another local
  minimum, an alias, a mirror image), or the descent did not converge, so nothing confirms
  the solution. Its values would mix two solutions into one interval, so it is left out like a
  failed refit;
- timed out: the descent was cut short by ``[model] time_limit``, so nothing confirms it either,
  and the reason is the limit, not another solution.

Two end points are the same point when their curves agree on the replicate's data as closely as
the sweep's same-curve test demands and no parameter differs by SAME_POINT standard errors (a
mirror image gives the same curve with parameters many standard errors away).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..engine.outcomes import Outcome
from ..engine.problem import CURVE_FLOOR, CURVE_TOLERANCE, Problem
from ..jsonable import jsonable

#: Two converged end points of one minimum differ by the solver's tolerance, far below a
#: standard error; two distinct minima with the same curve (symmetries) lie many apart.
SAME_POINT = 1.0

#: Kinds of end, in the order of the figures' outcome styles.
FATES = ("best", "other", "diverged", "oscillating", "stalled", "singular", "model_error", "timed_out")
FATE_MEANINGS = {
    "best": "converged to the point a descent from the best fit reaches on the same data: the best fit's "
            "solution; used in the intervals",
    "other": "converged elsewhere than a descent from the best fit on the same data (another solution), or "
             "that descent did not converge; left out of the intervals",
    **{outcome.label: outcome.meaning for outcome in Outcome if outcome != Outcome.CONVERGED},
}
BEST, OTHER = 0, 1


@dataclass(frozen=True)
class RefitEnds:
    """Where B refits and their descents ended (plain arrays: what a worker sends back for a chunk
    and the chunk cache stores).

    Attributes:
        params: (B, n) end points.
        ssr: (B,) weighted residual sum of squares at the end point, on the replicate's data.
        outcome: (B,) engine ``Outcome`` codes.
        iterations: (B,) steps taken.
        descent: (B, n) where the descent from the best fit on the same data ended.
        descent_outcome: (B,) its ``Outcome`` codes.
        same_point: (B,) True where the refit and the descent end at the same point.
    """

    params: np.ndarray
    ssr: np.ndarray
    outcome: np.ndarray
    iterations: np.ndarray
    descent: np.ndarray
    descent_outcome: np.ndarray
    same_point: np.ndarray


@dataclass(frozen=True)
class ReplicateFits(RefitEnds):
    """Refits of B replicate data sets (``RefitEnds``) with each one's fate: (B,) index into FATES."""

    fate: np.ndarray

    @property
    def used(self) -> np.ndarray:
        """(B,) True for refits that reached the best fit's solution."""
        return self.fate == BEST

    @property
    def used_count(self) -> int:
        return int(np.count_nonzero(self.used))

    def counts(self) -> dict[str, int]:
        """Number of refits of each fate, every fate listed."""
        tally = np.bincount(self.fate, minlength=len(FATES))
        return {label: int(tally[k]) for k, label in enumerate(FATES)}

    def shares(self) -> dict[str, float]:
        """Share of refits of each fate."""
        total = max(len(self.fate), 1)
        return {label: count / total for label, count in self.counts().items()}

    def other_reasons(self) -> dict[str, int]:
        """Why converged refits count as "other": they reached another solution than the descent
        from the best fit, or that descent did not converge (nothing to compare with)."""
        other = self.fate == OTHER
        descended = self.descent_outcome == Outcome.CONVERGED
        return {"another_solution": int(np.count_nonzero(other & descended)),
                "descent_failed": int(np.count_nonzero(other & ~descended))}

    @property
    def failure_share(self) -> float:
        """Share of refits left out of the intervals (did not converge, or reached another solution)."""
        return 1.0 - self.used_count / max(len(self.fate), 1)

    def to_dict(self) -> dict:
        return jsonable({
            "count": len(self.fate), "used": self.used_count, "failure_share": self.failure_share,
            "counts": self.counts(), "shares": self.shares(), "other_reasons": self.other_reasons(),
            "fate": [FATES[k] for k in self.fate], "params": self.params, "ssr": self.ssr,
            "iterations": self.iterations, "descent": self.descent,
            "descent_outcome": [Outcome(int(code)).label for code in self.descent_outcome],
        })


def same_point(problem: Problem, refit: np.ndarray, descent: np.ndarray, scale: np.ndarray, *,
               y: np.ndarray, x: np.ndarray | None = None, weights: np.ndarray | None = None) -> np.ndarray:
    """(B,) True where two end points on the same replicate data are one point.

    Args:
        problem: the fitted problem.
        refit, descent: (B, n) the two end points of each replicate.
        scale: (n,) positive parameter unit (asymptotic standard errors, see ``distance_scale``).
        y, x, weights: the replicates' data, as ``fit_batch`` takes them.
    """
    refit_residuals = problem.residuals(refit, x, y, weights)
    descent_residuals = problem.residuals(descent, x, y, weights)
    root_weights = problem.sqrt_weights if weights is None else np.sqrt(weights)
    weighted_y = y if root_weights is None else y * root_weights
    with np.errstate(invalid="ignore", over="ignore"):
        limit = (CURVE_TOLERANCE * np.linalg.norm(descent_residuals, axis=-1)
                 + CURVE_FLOOR * np.linalg.norm(np.broadcast_to(weighted_y, refit_residuals.shape), axis=-1))
        same_curve = np.linalg.norm(refit_residuals - descent_residuals, axis=-1) <= limit
        near = np.max(np.abs(refit - descent) / scale, axis=-1) <= SAME_POINT
    return same_curve & near


def classify(params: np.ndarray, ssr: np.ndarray, outcome: np.ndarray, iterations: np.ndarray,
             descent: np.ndarray, descent_outcome: np.ndarray, same: np.ndarray) -> ReplicateFits:
    """Give every refit its fate.

    Args:
        params, ssr, outcome, iterations, descent, descent_outcome: per refit, as in ``ReplicateFits``.
        same: (B,) ``same_point`` of the refit and the descent.
    """
    fate = np.empty(len(outcome), dtype=np.int64)
    for code in Outcome:
        if code != Outcome.CONVERGED:
            fate[outcome == code] = FATES.index(code.label)
    converged = outcome == Outcome.CONVERGED
    confirmed = same & (descent_outcome == Outcome.CONVERGED)
    fate[converged] = np.where(confirmed[converged], BEST, OTHER)
    fate[converged & (descent_outcome == Outcome.TIMED_OUT)] = FATES.index("timed_out")
    return ReplicateFits(params=params, ssr=ssr, outcome=outcome, iterations=iterations, descent=descent,
                         descent_outcome=descent_outcome, same_point=same, fate=fate)


def distance_scale(std_errors: np.ndarray, best: np.ndarray, typical: np.ndarray | None) -> np.ndarray:
    """(n,) parameter unit of the same-point test: the asymptotic standard error, or where that
    is not finite (a singular Jacobian at the best fit) the parameter's own size."""
    fallback = np.abs(best) if typical is None else np.maximum(np.abs(best), 1e-3 * typical)
    fallback = np.where(fallback > 0, fallback, 1.0)
    return np.where(np.isfinite(std_errors) & (std_errors > 0), std_errors, fallback)
