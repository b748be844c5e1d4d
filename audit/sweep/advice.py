"""What to look at next when no run of a sweep reached the best solution.

A sweep in which every run failed is a finding, not an error, and how the runs failed points
at the cause:

- a hand-written Jacobian that disagrees with central differences at the scenario's start (a
  sign, a factor, a swapped column) sends every step the wrong way: the derivative check;
- runs ending singular: the Jacobian lost rank, so some parameters enter the model only in
  combination (a product, a sum): identifiability;
- runs timed out: the model is too slow for [model] time_limit somewhere;
- otherwise runs diverged, oscillated or stalled: smaller step factors, Levenberg-Marquardt,
  more iterations, or solutions outside the ranges that a wider range would admit.
"""
from __future__ import annotations

import numpy as np

from ..engine.problem import Problem
from .result import CATEGORIES

#: Columns of the Jacobian disagree when their relative difference exceeds this. Central
#: differences of a smooth model agree with exact derivatives to about 1e-7 relative; a wrong
#: derivative (sign, factor, missing term) is off by order one.
JACOBIAN_DISAGREEMENT = 1e-3


def next_step(problem: Problem, start: np.ndarray, counts: np.ndarray, solutions_outside: int) -> str:
    """One sentence naming the likely cause and the command to run, for a sweep in which no
    run reached the best solution.

    Args:
        problem: the swept problem; start: (n,) the scenario's starting values.
        counts: (M, F, K) runs per category (``CATEGORIES``).
        solutions_outside: converged solutions found outside the searched ranges.
    """
    wrong = _disagreeing_columns(problem, start)
    if wrong:
        return (f"the hand-written Jacobian disagrees with central differences at the scenario's start in the "
                f"column(s) of {', '.join(wrong)}: run `fitaudit derivatives` to find the mistake before anything "
                "else")
    totals = counts.sum(axis=(0, 1))
    failed = totals.sum() - totals[CATEGORIES.index("best")] - totals[CATEGORIES.index("other")]
    if totals[CATEGORIES.index("singular")] >= 0.5 * max(failed, 1):
        share = totals[CATEGORIES.index("singular")] / max(totals.sum(), 1)
        return (f"{share:.0%} of the runs ended singular: the Jacobian lost rank, so some parameters enter the "
                "model only in combination (a product or a sum, say); run `fitaudit identify` to see which, then "
                "fix one of them or reparametrise")
    if solutions_outside:
        return (f"runs converged only to {solutions_outside} solution(s) outside the searched ranges: widen a range "
                "if they are physical, else check the model")
    kind = CATEGORIES[int(np.argmax(totals))].replace("_", " ")
    if kind == "timed out":
        return ("most runs timed out: their chunks of fits used up [model] time_limit; raise it so that a whole "
                "chunk can finish, or find what makes the model slow at those parameters")
    return (f"most runs ended {kind}: try smaller step factors (--step-factors) or Levenberg-Marquardt "
            "(--solver lm), more iterations ([solver] max_iterations), and check the derivatives with "
            "`fitaudit derivatives`")


def _disagreeing_columns(problem: Problem, start: np.ndarray) -> list[str]:
    """Names of the parameters whose hand-written derivatives disagree with central differences."""
    if not problem.has_jacobian:
        return []
    point = np.asarray(start, dtype=float)[None, :]
    columns = np.arange(problem.n_params)
    with np.errstate(all="ignore"):
        hand = problem.derivatives(point)[0]
        numeric = problem.central_differences(point, problem.x, columns)[:, 0]
        difference = np.linalg.norm(hand - numeric, axis=1) / np.maximum(np.linalg.norm(numeric, axis=1),
                                                                         np.finfo(float).tiny)
    return [problem.names[j] for j in columns if difference[j] > JACOBIAN_DISAGREEMENT]
