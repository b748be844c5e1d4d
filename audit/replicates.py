"""Refits of replicate data sets (bootstrap or jackknife) and how each one ended.

A refit starts at the best fit. Its fate is its engine outcome, except that a converged refit is
split in two by comparing its end point with the best fit:

- best: converged to the solution that belongs to the best fit: the end point's residual sum of
  squares (on the replicate's own data) is no worse than that of the best fit's parameters, and
  no parameter moved more than FAR_AWAY asymptotic standard errors;
- other: converged, but to a worse point than it started from, or to a point far away (another
  solution, e.g. a swapped pair of exponentials). Its values would mix two solutions into one
  interval, so it is left out like a failed refit.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .jsonable import jsonable
from .outcomes import Outcome

#: A parameter that moved this many asymptotic standard errors is taken to have left the best
#: fit's solution. A design choice, set generously: the tails of a skewed bootstrap distribution
#: (the very thing the bootstrap is run to show) usually stay within a few standard errors, a
#: swapped or mirrored solution lies much farther out. A parameter with a very long tail (a time
#: constant whose rate may reach zero) also loses refits here; the result then says that the
#: intervals rest on fewer refits than drawn and on which side that matters.
FAR_AWAY = 20.0
#: Relative slack on the comparison of residual sums of squares: a converged refit lies within
#: rounding of a stationary point, so only a clear excess means it ended worse than its start.
SSR_SLACK = 1e-6

#: Kinds of end, in the order of the figures' outcome styles.
FATES = ("best", "other", "diverged", "oscillating", "stalled", "singular", "model_error")
FATE_MEANINGS = {
    "best": "converged to the solution of the best fit; used in the intervals",
    "other": f"converged, but to a point worse than its start or over {FAR_AWAY:g} standard errors away",
    **{outcome.label: outcome.meaning for outcome in Outcome if outcome != Outcome.CONVERGED},
}
BEST, OTHER = 0, 1


@dataclass
class ReplicateFits:
    """Refits of B replicate data sets.

    Attributes:
        params: (B, n) end points.
        ssr: (B,) weighted residual sum of squares at the end point, on the replicate's data.
        ssr_at_best: (B,) the same at the best fit's parameters (where every refit started).
        outcome: (B,) engine ``Outcome`` codes.
        iterations: (B,) steps taken.
        distance: (B,) largest parameter move from the best fit, in asymptotic standard errors.
        worse: (B,) True where the end point's SSR exceeds that at the best fit's parameters.
        fate: (B,) index into FATES.
    """

    params: np.ndarray
    ssr: np.ndarray
    ssr_at_best: np.ndarray
    outcome: np.ndarray
    iterations: np.ndarray
    distance: np.ndarray
    worse: np.ndarray
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
        """Why converged refits count as "other": ended worse than they started, or far away
        (a refit can be both)."""
        other = self.fate == OTHER
        return {"worse_than_start": int(np.count_nonzero(other & self.worse)),
                "far_away": int(np.count_nonzero(other & ~(self.distance <= FAR_AWAY)))}

    @property
    def failure_share(self) -> float:
        """Share of refits left out of the intervals (did not converge, or reached another solution)."""
        return 1.0 - self.used_count / max(len(self.fate), 1)

    def to_dict(self) -> dict:
        return jsonable({
            "count": len(self.fate), "used": self.used_count, "failure_share": self.failure_share,
            "counts": self.counts(), "shares": self.shares(), "other_reasons": self.other_reasons(),
            "far_away_limit": FAR_AWAY,
            "fate": [FATES[k] for k in self.fate], "params": self.params, "ssr": self.ssr,
            "ssr_at_best": self.ssr_at_best, "iterations": self.iterations, "distance": self.distance,
        })


def classify(params: np.ndarray, ssr: np.ndarray, ssr_at_best: np.ndarray, outcome: np.ndarray,
             iterations: np.ndarray, best: np.ndarray, scale: np.ndarray) -> ReplicateFits:
    """Give every refit its fate.

    Args:
        params, ssr, ssr_at_best, outcome, iterations: per refit, as in ``ReplicateFits``.
        best: (n,) the best fit.
        scale: (n,) positive distance unit per parameter (asymptotic standard errors).
    """
    with np.errstate(invalid="ignore", over="ignore"):
        distance = np.max(np.abs(params - best) / scale, axis=1)
        worse = ssr > ssr_at_best * (1.0 + SSR_SLACK) + np.finfo(float).tiny
    fate = np.empty(len(outcome), dtype=np.int64)
    for code in Outcome:
        if code != Outcome.CONVERGED:
            fate[outcome == code] = FATES.index(code.label)
    converged = outcome == Outcome.CONVERGED
    fate[converged] = np.where(worse[converged] | ~(distance[converged] <= FAR_AWAY), OTHER, BEST)
    return ReplicateFits(params=params, ssr=ssr, ssr_at_best=ssr_at_best, outcome=outcome,
                         iterations=iterations, distance=distance, worse=worse, fate=fate)


def distance_scale(std_errors: np.ndarray, best: np.ndarray, typical: np.ndarray | None) -> np.ndarray:
    """(n,) unit of the distance test: the asymptotic standard error, or where that is not
    finite (a singular Jacobian at the best fit) the parameter's own size."""
    fallback = np.abs(best) if typical is None else np.maximum(np.abs(best), 1e-3 * typical)
    fallback = np.where(fallback > 0, fallback, 1.0)
    return np.where(np.isfinite(std_errors) & (std_errors > 0), std_errors, fallback)
