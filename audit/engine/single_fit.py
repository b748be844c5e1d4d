"""One fit from one start, with its whole iteration trace and the asymptotic uncertainty.

This is what ``fitaudit fit`` shows: the engine is run on a batch of one, keeping every iterate,
and the residual sum of squares and largest scaled change of each iterate are recomputed from
that history so the trace shows exactly what the solver did. ``best_from_start`` is the fit the
local stages (derivative check points, bootstrap, identifiability) audit when no sweep of the
scenario gave a reference (``best_fit.best_known_fit``).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..jsonable import jsonable
from .batch import fit_batch
from .estimates import Estimates, estimate
from .outcomes import Outcome
from .problem import FLOOR_FRACTION, Problem


@dataclass
class SingleFit:
    """A traced fit.

    Attributes:
        names: parameter names.
        method: "gn" or "lm".
        step_factor: α used.
        start: (n,) starting values.
        iterates: (k + 1, n) the start and every iterate, in order.
        ssr: (k + 1,) weighted residual sum of squares of each iterate.
        max_rel_change: (k + 1,) largest scaled change that led to each iterate (NaN at the start).
        outcome: how the fit ended.
        estimates: asymptotic uncertainty at the end point when converged, else None.
    """

    names: tuple[str, ...]
    method: str
    step_factor: float
    start: np.ndarray
    iterates: np.ndarray
    ssr: np.ndarray
    max_rel_change: np.ndarray
    outcome: Outcome
    estimates: Estimates | None

    @property
    def params(self) -> np.ndarray:
        return self.iterates[-1]

    @property
    def converged(self) -> bool:
        return self.outcome == Outcome.CONVERGED

    def to_dict(self) -> dict:
        return jsonable({
            "names": list(self.names),
            "method": self.method,
            "step_factor": self.step_factor,
            "start": dict(zip(self.names, self.start)),
            "outcome": self.outcome.label,
            "outcome_meaning": self.outcome.meaning,
            "iterations": [
                {"iteration": k, "ssr": ssr, "max_rel_change": change, "params": dict(zip(self.names, point))}
                for k, (point, ssr, change) in enumerate(zip(self.iterates, self.ssr, self.max_rel_change))
            ],
            "params": dict(zip(self.names, self.params)),
            "estimates": self.estimates.to_dict() if self.estimates is not None else None,
        })


def fit_once(problem: Problem, start: np.ndarray, *, step_factor: float = 1.0, method: str = "gn",
             tol: float = 1e-8, max_iter: int = 200, confidence: float = 0.95) -> SingleFit:
    """Fit from ``start`` (n,) keeping the whole trace; estimates when the fit converged."""
    start = np.asarray(start, dtype=float)
    result = fit_batch(problem, start[None, :], step_factor, method=method, tol=tol, max_iter=max_iter,
                       history=max_iter + 1)
    trail = result.history[0]
    iterates = trail[np.isfinite(trail).all(axis=1)]
    # A fit stopped by [model] time_limit has no trail kept: it ends at its start.
    if not len(iterates) or not np.array_equal(iterates[-1], result.params[0], equal_nan=True):
        iterates = np.vstack([iterates, result.params[0]])
    ssr = problem.ssr(iterates)
    with np.errstate(all="ignore"):
        floor = FLOOR_FRACTION * problem.typical_magnitude(start)
        moves = np.abs(np.diff(iterates, axis=0)) / np.maximum(np.abs(iterates[1:]), floor)
    change = np.concatenate([[np.nan], moves.max(axis=1) if len(moves) else []])
    outcome = Outcome(int(result.outcome[0]))
    estimates = None
    if outcome == Outcome.CONVERGED and problem.n_obs > problem.n_params:
        estimates = estimate(problem, result.params[0], confidence)
    return SingleFit(names=problem.names, method=method, step_factor=float(step_factor), start=start,
                     iterates=iterates, ssr=ssr, max_rel_change=change, outcome=outcome, estimates=estimates)


def best_from_start(problem: Problem, start: np.ndarray, *, step_factors, method: str, tol: float, max_iter: int,
                    accept_lost_rank: bool = False) -> tuple[np.ndarray, Outcome] | None:
    """The lowest-SSR converged fit from ``start`` (n,), or None when nothing converges.

    Every step factor in ``step_factors`` runs with ``method``, plus one Levenberg-Marquardt run,
    all from the same start with tolerance ``tol`` and at most ``max_iter`` iterations (a
    scenario's [solver] settings give these through ``SolverSettings.fit_options``). With
    ``accept_lost_rank``, a Levenberg-Marquardt run that settled where the Jacobian lost rank
    (the floor of the valley of a structurally non-identifiable model) is taken when nothing
    converged.

    Returns:
        (params (n,), outcome) of the chosen run, or None.
    """
    start = np.asarray(start, dtype=float)
    factors = np.array(step_factors, dtype=float)
    options = dict(tol=tol, max_iter=max_iter)
    stepped = fit_batch(problem, np.tile(start, (len(factors), 1)), factors, method=method, **options)
    damped = fit_batch(problem, start[None, :], 1.0, method="lm", **options)
    params = np.vstack([stepped.params, damped.params])
    ssr = np.concatenate([stepped.ssr, damped.ssr])
    outcome = np.concatenate([stepped.outcome, damped.outcome])
    usable = outcome == Outcome.CONVERGED
    if not usable.any() and accept_lost_rank:
        usable = (outcome == Outcome.SINGULAR) & (np.arange(len(outcome)) == len(outcome) - 1)
    if not usable.any():
        return None
    winner = np.flatnonzero(usable)[np.argmin(ssr[usable])]
    return params[winner], Outcome(int(outcome[winner]))
