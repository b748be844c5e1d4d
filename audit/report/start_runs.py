"""Where the scenario's own start leads: one fit per step factor, judged against the best fit.

The sweep asks how the fit behaves from many starts; a user who publishes a fit ran it from one,
the scenario's. This fits from that start with every step factor of [solver], in one batched
call, and says which of them reach the best fit (its SSR within a relative margin, so that an
alias or mirror image of the best curve counts as reaching it).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..engine.batch import fit_batch
from ..engine.outcomes import Outcome, outcome_labels
from ..jsonable import jsonable


@dataclass
class StartRuns:
    """Fits from the scenario's start, one per step factor (F step factors, n parameters).

    Attributes:
        names: (n) parameter names; start: (n,) the scenario's starting values.
        method: "gn" or "lm"; step_factors: (F,) as in [solver], the scenario's own first.
        outcome: (F,) ``Outcome`` codes; iterations: (F,); params: (F, n); ssr: (F,).
        best_ssr: SSR of the best fit the audit uses (NaN when there is none).
        same_ssr_relative: the margin: a converged run whose SSR is at most best_ssr·(1 + margin)
            reaches the best fit.
    """

    names: tuple[str, ...]
    start: np.ndarray
    method: str
    step_factors: np.ndarray
    outcome: np.ndarray
    iterations: np.ndarray
    params: np.ndarray
    ssr: np.ndarray
    best_ssr: float
    same_ssr_relative: float

    @property
    def excess(self) -> np.ndarray:
        """(F,) (SSR − best SSR) / best SSR of each run; NaN where it did not converge."""
        converged = self.outcome == Outcome.CONVERGED
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(converged, (self.ssr - self.best_ssr) / abs(self.best_ssr), np.nan)

    @property
    def reaches_best(self) -> np.ndarray:
        """(F,) True where the run converged to the best fit's SSR within the margin."""
        return np.nan_to_num(self.excess, nan=np.inf) <= self.same_ssr_relative

    def to_dict(self) -> dict:
        return jsonable({
            "start": dict(zip(self.names, self.start)), "method": self.method, "best_ssr": self.best_ssr,
            "same_ssr_relative": self.same_ssr_relative,
            "runs": [{"step_factor": factor, "outcome": label, "iterations": iterations, "ssr": ssr,
                      "params": dict(zip(self.names, params)), "ssr_excess": excess, "reaches_best": reached}
                     for factor, label, iterations, ssr, params, excess, reached in zip(
                         self.step_factors, outcome_labels(self.outcome), self.iterations, self.ssr, self.params,
                         self.excess, self.reaches_best)],
        })


def fit_from_start(scenario, best_ssr: float, same_ssr_relative: float) -> StartRuns:
    """Fit ``scenario`` from its start with each [solver] step factor (one ``fit_batch`` call).

    Args:
        scenario: a loaded ``Scenario``.
        best_ssr: SSR of the audited best fit (NaN when none was found).
        same_ssr_relative: the verdict's margin for "reaches the best fit".
    """
    solver = scenario.solver
    factors = np.array(solver.step_factors, dtype=float)
    fits = fit_batch(scenario.problem, np.tile(scenario.start, (len(factors), 1)), factors, method=solver.method,
                     tol=solver.tolerance, max_iter=solver.max_iterations)
    return StartRuns(names=scenario.names, start=scenario.start, method=solver.method, step_factors=factors,
                     outcome=np.asarray(fits.outcome), iterations=np.asarray(fits.iterations), params=fits.params,
                     ssr=np.asarray(fits.ssr), best_ssr=float(best_ssr), same_ssr_relative=float(same_ssr_relative))
