"""Example runs of each failure kind, refitted with their whole path.

Keeping every run's iterates would cost (runs × iterations × n) numbers; the chunks keep only
the design indices of the first few runs of each failure kind. The selected runs are fitted
again here, a few dozen of them in one batch per method, with the engine's history on. A run
depends only on its start, step factor and method, so the refit retraces the original.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..engine.batch import fit_batch
from ..engine.problem import Problem
from .chunk import FAILURE_KINDS
from .result import TrajectoryCase
from .starts import StartDesign


@dataclass(frozen=True)
class CaseSelection:
    """Which example runs of one design to refit.

    Attributes:
        source: "design" or "map <x>/<y>".
        design: the start design the indices refer to.
        index: (M, F, K, CASES) design indices, −1 where none.
        unit: design index -> (n,) unit coordinates of that start, for every index chosen.
    """

    source: str
    design: StartDesign
    index: np.ndarray
    unit: dict[int, np.ndarray]


def trace_cases(problem: Problem, selections: list[CaseSelection], methods: tuple[str, ...],
                step_factors: np.ndarray, tolerance: float, max_iterations: int) -> list[TrajectoryCase]:
    """Refit every selected run with its history and return them, in selection order."""
    cases: list[TrajectoryCase] = []
    for m, method in enumerate(methods):
        picked = []
        for selection in selections:
            chosen = selection.index[m] >= 0
            factor, kind, _ = np.nonzero(chosen)
            picked += [(selection, int(f), int(k), int(i))
                       for f, k, i in zip(factor, kind, selection.index[m][chosen])]
        if not picked:
            continue
        starts = np.vstack([selection.design.values(selection.unit[i][None, :]) for selection, _, _, i in picked])
        alpha = np.array([step_factors[f] for _, f, _, _ in picked])
        fit = fit_batch(problem, starts, alpha, method=method, tol=tolerance, max_iter=max_iterations,
                        history=max_iterations + 1)
        for row, (selection, f, k, _) in enumerate(picked):
            history = fit.history[row]
            made = ~np.all(np.isnan(history), axis=1)
            cases.append(TrajectoryCase(source=selection.source, method=method, step_factor=float(step_factors[f]),
                                        kind=FAILURE_KINDS[k].label, start=starts[row], path=history[made],
                                        iterations=int(fit.iterations[row])))
    return cases
