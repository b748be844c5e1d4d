"""What a wrong Jacobian column does to the fit: the same fit with and without it.

A wrong derivative does not always stop Gauss-Newton: the step direction is wrong, so it may
take more iterations, stop early at a point that is not the minimum (the convergence test only
looks at the size of the step), or converge to the right point with wrong standard errors
(which are computed from the Jacobian). The fit from the scenario's start is run with the
numeric Jacobian (the engine's central differences), with the hand-derived one, and, when more
than one column is wrong, with each wrong column alone among numeric ones.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from ..engine.batch import fit_batch
from ..engine.estimates import estimate
from ..engine.outcomes import Outcome, outcome_labels
from ..engine.problem import FLOOR_FRACTION, Problem
from ..inputs.settings import SolverSettings
from ..jsonable import jsonable

NUMERIC = "numeric (central differences)"
HAND = "hand-derived"


@dataclass
class Consequences:
    """The fits from the start, one per Jacobian (R runs, n parameters).

    Attributes:
        names: (n) parameter names.
        jacobians: (R) which Jacobian each run used; the first is the numeric one.
        start: (n,) starting values.
        step_factor: α of every run.
        method: "gn" or "lm".
        outcome: (R,) ``Outcome`` codes.
        iterations: (R,) iterations taken.
        params: (R, n) end points.
        ssr: (R,) weighted residual sum of squares at the end points.
        std_errors: (R, n) asymptotic standard errors computed with each run's own Jacobian
            (NaN when the run did not converge).
        relative_shift: (R, n) (params − numeric run's params) / |numeric run's params|.
        std_error_ratio: (R, n) std_errors / numeric run's std_errors.
    """

    names: tuple[str, ...]
    jacobians: tuple[str, ...]
    start: np.ndarray
    step_factor: float
    method: str
    outcome: np.ndarray
    iterations: np.ndarray
    params: np.ndarray
    ssr: np.ndarray
    std_errors: np.ndarray
    relative_shift: np.ndarray
    std_error_ratio: np.ndarray

    @property
    def converged(self) -> np.ndarray:
        """(R,) True where the run converged."""
        return self.outcome == Outcome.CONVERGED

    def to_dict(self) -> dict:
        return jsonable({
            "names": list(self.names), "jacobians": list(self.jacobians), "start": self.start,
            "step_factor": self.step_factor, "method": self.method, "outcome": outcome_labels(self.outcome),
            "iterations": self.iterations, "params": self.params, "ssr": self.ssr, "std_errors": self.std_errors,
            "relative_shift": self.relative_shift, "std_error_ratio": self.std_error_ratio,
        })


def fit_consequences(problem: Problem, start: np.ndarray, wrong_columns: list[int], solver: SolverSettings,
                     confidence: float = 0.95) -> Consequences:
    """Fit from ``start`` with the numeric, the hand-derived and (for several wrong columns) mixed Jacobians.

    Args:
        problem: a problem with a hand-derived Jacobian.
        start: (n,) starting values.
        wrong_columns: indices of the columns found wrong (at least one).
        solver: method, first step factor, tolerance and iteration limit of the runs.
        confidence: level used for the standard errors (they do not depend on it).
    """
    numeric = dataclasses.replace(problem, jacobian=None)
    variants = [(NUMERIC, numeric), (HAND, problem)]
    if len(wrong_columns) > 1:
        variants += [(f"hand-derived ∂f/∂{problem.names[j]} only", _mixed(problem, numeric, j))
                     for j in wrong_columns]
    step_factor = solver.step_factors[0]
    rows = [_fit(variant, start, step_factor, solver, confidence) for _, variant in variants]
    outcome, iterations, params, ssr, std_errors = (np.array(column) for column in zip(*rows))
    with np.errstate(divide="ignore", invalid="ignore"):
        relative_shift = (params - params[0]) / np.abs(params[0])
        std_error_ratio = std_errors / std_errors[0]
    return Consequences(
        names=problem.names, jacobians=tuple(label for label, _ in variants), start=np.asarray(start, dtype=float),
        step_factor=step_factor, method=solver.method, outcome=outcome.astype(np.int8), iterations=iterations,
        params=params, ssr=ssr, std_errors=std_errors, relative_shift=relative_shift,
        std_error_ratio=std_error_ratio)


def _fit(problem: Problem, start: np.ndarray, step_factor: float, solver: SolverSettings, confidence: float):
    fit = fit_batch(problem, np.asarray(start, dtype=float)[None, :], step_factor, method=solver.method,
                    tol=solver.tolerance, max_iter=solver.max_iterations)
    params = fit.params[0]
    std_errors = np.full(problem.n_params, np.nan)
    if fit.converged[0] and problem.n_obs > problem.n_params:
        std_errors = estimate(problem, params, confidence).std_errors
    return int(fit.outcome[0]), int(fit.iterations[0]), params, float(fit.ssr[0]), std_errors


def _mixed(problem: Problem, numeric: Problem, column: int) -> Problem:
    """The problem with central differences everywhere except the hand-derived ``column``."""
    floor = None if problem.typical is None else FLOOR_FRACTION * problem.typical
    every = np.arange(problem.n_params)

    def jacobian(x, *columns):
        params = np.hstack(np.broadcast_arrays(*columns))
        rows = list(numeric.central_differences(params, x, every, floor))
        rows[column] = problem.derivative_rows(params, x, np.array([column]))[0]
        return rows

    return dataclasses.replace(problem, jacobian=jacobian)
