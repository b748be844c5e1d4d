"""Where the derivative audit looks: the best fit, the scenario's start and seeded samples.

A hand-derived derivative can be right near the solution and wrong elsewhere (a branch, an
absolute value, a term that only matters far from the data's region), so the audit checks it at
the best fit, at the scenario's start, and at points drawn inside the parameter ranges.

A parameter without a range is drawn from a neighbourhood of its start: within ±50 % of its
typical magnitude on a linear axis, and between half and twice the start on a log axis.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from .problem import Problem
from .scenario import Parameter
from .settings import SolverSettings
from .single_fit import best_from_start

#: Half-width of the neighbourhood of a start without a range, as a fraction of its typical
#: magnitude (linear axis); on a log axis the start is multiplied by 2**u, u in [−1, 1].
NEIGHBOURHOOD = 0.5

BEST_FIT, START, SAMPLE = "best fit", "start", "sample"


@dataclass(frozen=True)
class CheckPoints:
    """Parameter values at which the derivatives are compared.

    Attributes:
        params: (K, n) parameter values, one row per point.
        labels: (K) "best fit", "start", "sample 1", ...
        notes: what could not be done (e.g. no converged fit for the best-fit point).
    """

    params: np.ndarray
    labels: tuple[str, ...]
    notes: tuple[str, ...] = ()


def sample_points(parameters: tuple[Parameter, ...], count: int, rng: np.random.Generator) -> np.ndarray:
    """(count, n) points drawn uniformly over each parameter's range (log-uniformly on a log axis).

    Parameters without a range are drawn from the neighbourhood of their start described in
    the module docstring.
    """
    uniform = rng.random((count, len(parameters)))
    columns = []
    for j, parameter in enumerate(parameters):
        u = uniform[:, j]
        if parameter.has_range and parameter.axis == "log":
            low, high = np.log(parameter.lower), np.log(parameter.upper)
            columns.append(np.exp(low + u * (high - low)))
        elif parameter.has_range:
            columns.append(parameter.lower + u * (parameter.upper - parameter.lower))
        elif parameter.axis == "log":
            columns.append(parameter.start * 2.0 ** (2.0 * u - 1.0))
        else:
            columns.append(parameter.start + NEIGHBOURHOOD * parameter.typical * (2.0 * u - 1.0))
    return np.column_stack(columns)


def best_fit(problem: Problem, start: np.ndarray, solver: SolverSettings) -> np.ndarray | None:
    """(n,) the lowest-SSR converged fit from ``start``, or None when no run converges.

    The fit uses central differences, not the hand-derived Jacobian under audit, so that a wrong
    derivative cannot move the point at which it is judged.
    """
    found = best_from_start(dataclasses.replace(problem, jacobian=None), start, solver)
    return None if found is None else found[0]


def check_points(problem: Problem, parameters: tuple[Parameter, ...], solver: SolverSettings,
                 count: int, seed: int) -> CheckPoints:
    """The best fit (when one converges), the start and ``count`` seeded samples.

    Args:
        problem: the scenario's problem.
        parameters: the scenario's parameters (start, range, axis).
        solver: settings of the best-fit run.
        count: number of sampled points (≥ 0).
        seed: seed of the sampling generator.
    """
    start = np.array([parameter.start for parameter in parameters])
    rows, labels, notes = [], [], []
    fitted = best_fit(problem, start, solver)
    if fitted is None:
        notes.append("no fit from the start converged (step-factor Gauss-Newton or Levenberg-Marquardt), "
                     "so the best fit is not among the check points")
    else:
        rows.append(fitted)
        labels.append(BEST_FIT)
    rows.append(start)
    labels.append(START)
    samples = sample_points(parameters, count, np.random.default_rng(seed))
    rows.extend(samples)
    labels.extend(f"{SAMPLE} {k + 1}" for k in range(count))
    return CheckPoints(params=np.vstack(rows), labels=tuple(labels), notes=tuple(notes))
