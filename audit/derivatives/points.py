"""Where the derivative audit looks: the best known fit, the scenario's start and seeded samples.

A hand-derived derivative can be right near the solution and wrong elsewhere (a branch, an
absolute value, a term that only matters far from the data's region), so the audit checks it at
the best known fit (``best_fit.best_known_fit``: the sweep's in-range reference, else the best
fit from the start), at the scenario's start, and at points drawn inside the parameter ranges.

A parameter without a range is drawn from a neighbourhood of its start: within ±50 % of its
typical magnitude on a linear axis, and between half and twice the start on a log axis.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from ..engine.best_fit import KnownFit, SweepReference, best_known_fit
from ..engine.problem import Problem
from ..inputs.scenario import Parameter
from ..inputs.settings import SolverSettings

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
        best_fit: the fit behind the "best fit" point and any lower SSR known, or None.
    """

    params: np.ndarray
    labels: tuple[str, ...]
    notes: tuple[str, ...] = ()
    best_fit: KnownFit | None = None


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


def check_points(problem: Problem, parameters: tuple[Parameter, ...], solver: SolverSettings,
                 count: int, seed: int, reference: SweepReference | None = None) -> CheckPoints:
    """The best known fit (when there is one), the start and ``count`` seeded samples.

    The fit from the start uses central differences, not the hand-derived Jacobian under
    audit, so that a wrong derivative cannot move the point at which it is judged.

    Args:
        problem: the scenario's problem.
        parameters: the scenario's parameters (start, range, axis).
        solver: settings of the best-fit run.
        count: number of sampled points (≥ 0).
        seed: seed of the sampling generator.
        reference: what a sweep of the same scenario found, or None.
    """
    start = np.array([parameter.start for parameter in parameters])
    rows, labels, notes = [], [], []
    fitted = best_known_fit(dataclasses.replace(problem, jacobian=None), start, **solver.fit_options(),
                            reference=reference)
    if fitted is None:
        notes.append("no fit from the start converged (step-factor Gauss-Newton or Levenberg-Marquardt), "
                     "so the best fit is not among the check points")
    else:
        rows.append(fitted.params)
        labels.append(BEST_FIT)
    rows.append(start)
    labels.append(START)
    samples = sample_points(parameters, count, np.random.default_rng(seed))
    rows.extend(samples)
    labels.extend(f"{SAMPLE} {k + 1}" for k in range(count))
    return CheckPoints(params=np.vstack(rows), labels=tuple(labels), notes=tuple(notes), best_fit=fitted)
