"""Solutions that give the best fit's curve with other parameters: symmetries of the model.

Some models give exactly the same curve for two parameter sets: a sum of two exponentials with
its terms exchanged (a, b ↔ c, d), a peak whose width enters squared (w ↔ −w), a phase shifted
by a full period. A sweep finds both sets as distinct solutions with the same SSR, which alone
looks like parameters the data cannot determine. Two tests tell a symmetry apart from a flat
valley: the curves agree far more closely than the residuals' size, and the two sets are many
asymptotic standard errors apart (a flat valley has large standard errors, so its end points
are close in those units).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .estimates import estimate
from .problem import Problem

#: Curves count as the same when their weighted difference is below this fraction of the
#: weighted residuals' norm at the best fit (converged end points agree to about the solver
#: tolerance, far below it), or below CURVE_FLOOR of the weighted data's norm (exact data).
CURVE_TOLERANCE = 1e-3
CURVE_FLOOR = 1e-9
#: Two solutions are distinct minima, not points of one flat valley, when some parameter
#: differs by more than this many asymptotic standard errors at the best fit.
DISTINCT_STD_ERRORS = 10.0


@dataclass(frozen=True)
class Equivalence:
    """Which catalogued solutions reproduce the best fit (row 0) with other parameters.

    Attributes:
        same_curve: (S,) True where the solution gives the best fit's curve and is a distinct
            minimum (row 0 itself is False).
        exchange: (S,) how the parameters map onto the best fit's, e.g. "a↔c, b↔d" or
            "w → −w", where they are the same values exchanged or with a sign changed; ""
            otherwise.
    """

    same_curve: np.ndarray
    exchange: list[str]


def find_equivalent(problem: Problem, params: np.ndarray, ssr_level: np.ndarray,
                    parameter_relative: float, floor: np.ndarray) -> Equivalence:
    """Mark the solutions among ``params`` (S, n) that are symmetries of the best one (row 0).

    Args:
        problem: the fitted problem.
        params: (S, n) catalogued solutions, the best first.
        ssr_level: (S,) True where a solution's SSR equals the best's within tolerance.
        parameter_relative, floor: when two parameter values are the same (as for clustering).
    """
    count = len(params)
    same_curve = np.zeros(count, dtype=bool)
    candidates = np.flatnonzero(ssr_level)
    candidates = candidates[candidates > 0]
    if len(candidates):
        residuals = problem.residuals(params[np.concatenate([[0], candidates])])
        limit = CURVE_TOLERANCE * np.linalg.norm(residuals[0]) + CURVE_FLOOR * np.linalg.norm(problem.weighted_y)
        differences = np.linalg.norm(residuals[1:] - residuals[0], axis=1)
        same_curve[candidates] = (differences <= limit) & _distinct_minima(problem, params[0], params[candidates])
    exchange = [_exchange(problem.names, params[0], params[s], parameter_relative, floor) if same_curve[s] else ""
                for s in range(count)]
    return Equivalence(same_curve=same_curve, exchange=exchange)


def _distinct_minima(problem: Problem, best: np.ndarray, others: np.ndarray) -> np.ndarray:
    """(k,) True where a solution is more than DISTINCT_STD_ERRORS standard errors from the best."""
    try:
        std_errors = estimate(problem, best).std_errors
    except InputError:
        return np.zeros(len(others), dtype=bool)
    with np.errstate(divide="ignore", invalid="ignore"):
        distance = np.abs(others - best) / std_errors
    return np.any(distance > DISTINCT_STD_ERRORS, axis=1) & np.all(np.isfinite(std_errors))


def _exchange(names: tuple[str, ...], best: np.ndarray, other: np.ndarray, parameter_relative: float,
              floor: np.ndarray) -> str:
    """How ``other`` (n,) is ``best`` (n,) with values exchanged or signs changed, e.g. "a↔c, b↔d"
    or "w → −w" ("x → y" reads: x now holds the best fit's value of y); "" when it is not."""
    tolerance = parameter_relative * np.maximum(np.abs(best), floor)
    source: dict[int, tuple[int, str]] = {}
    for j, value in enumerate(other):
        taken = {k for k, _ in source.values()}
        options = [(int(k), "") for k in np.flatnonzero(np.abs(value - best) <= tolerance) if k not in taken]
        options += [(int(k), "−") for k in np.flatnonzero(np.abs(value + best) <= tolerance) if k not in taken]
        if not options:
            return ""
        source[j] = next((option for option in options if option[0] == j), options[0])
    parts = []
    for j, (k, sign) in source.items():
        if (k, sign) == (j, ""):
            continue
        if not sign and source.get(k) == (j, ""):
            if j < k:
                parts.append(f"{names[j]}↔{names[k]}")
            continue
        parts.append(f"{names[j]} → {sign}{names[k]}")
    return ", ".join(parts)
