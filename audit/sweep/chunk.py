"""One chunk of a sweep: a span of design points × every step factor × every method.

``ChunkWork`` is the function that ``parallel.map_chunks`` sends to the workers. It is a
picklable object holding everything a worker needs (the problem, the design rule, the
settings), and it maps a task ``((first, stop), unit)``, a span of design points with their
unit coordinates, to a dict of small arrays, which is exactly what the chunk cache stores. The
coordinates come from the caller, so that no worker needs the design's generator (a Sobol'
design imports scipy.stats, which takes about a second in every fresh process):

- ``outcome`` (M, F, c) int8 engine outcome codes, ``iterations`` (M, F, c) int32;
- ``label`` (M, F, c) int8: the row of the chunk's own solution catalogue that each converged
  run reached (``solutions.NO_SOLUTION`` when not converged, ``UNCATALOGUED`` beyond it);
- ``solution_params`` (k, n), ``solution_ssr`` (k,), ``solution_count`` (k,): that catalogue;
- ``converged_params`` (r, n): the end point of every converged run, in the order of the runs
  in (M, F, c), so that once the best fit is known every one of them can be tested for its
  curve, including runs whose solution is beyond the catalogue's limit;
- ``case_start`` (M, F, K, CASES) int64: design indices of a few runs of each failure kind
  (−1 where fewer), so that some of them can later be rerun with their whole history;
- ``unit`` (c, n): the unit coordinates of the starts, read back by the tallies and for the
  example runs, so that a rerun from the cache needs no design generator either;
- ``span`` (2,): first and stop, to check a stored chunk against the plan.

M methods, F step factors, c = stop − first design points, K failure kinds.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..engine.batch import fit_batch
from ..engine.outcomes import Outcome
from ..engine.problem import Problem
from .solutions import CATALOGUE_LIMIT, NO_SOLUTION, SolutionTolerance, cluster
from .starts import StartDesign

#: The outcomes whose trajectories are kept as examples, in this order.
FAILURE_KINDS = (Outcome.DIVERGED, Outcome.OSCILLATING, Outcome.STALLED, Outcome.SINGULAR, Outcome.MODEL_ERROR)
#: Example runs kept per failure kind, step factor and method.
CASES = 3


@dataclass(frozen=True, eq=False)
class ChunkWork:
    """Fits of design points × step factors × methods; called with a task ((first, stop), unit):
    a span of design points and their (stop − first, n) unit coordinates (``StartDesign.unit``).

    Compared and hashed by identity (``eq=False``): its fields hold arrays, and joblib's Dask
    backend hashes the function it sends.
    """

    problem: Problem
    design: StartDesign
    step_factors: tuple[float, ...]
    methods: tuple[str, ...]
    tolerance: float
    max_iterations: int
    solution_tolerance: SolutionTolerance

    def __call__(self, task: tuple[tuple[int, int], np.ndarray]) -> dict[str, np.ndarray]:
        (first, stop), unit = task
        starts = self.design.values(unit)
        count, factors = len(starts), len(self.step_factors)
        shape = (len(self.methods), factors, count)
        outcome = np.empty(shape, dtype=np.int8)
        iterations = np.empty(shape, dtype=np.int32)
        ends = np.empty((*shape, self.problem.n_params))
        ssr = np.empty(shape)
        # One call per method carries every step factor: starts repeated F times.
        tiled = np.tile(starts, (factors, 1))
        alpha = np.repeat(np.asarray(self.step_factors, dtype=float), count)
        for m, method in enumerate(self.methods):
            fit = fit_batch(self.problem, tiled, alpha, method=method, tol=self.tolerance,
                            max_iter=self.max_iterations)
            outcome[m] = fit.outcome.reshape(factors, count)
            iterations[m] = fit.iterations.reshape(factors, count)
            ends[m] = fit.params.reshape(factors, count, -1)
            ssr[m] = fit.ssr.reshape(factors, count)
        converged = outcome == Outcome.CONVERGED
        catalogue, labels = cluster(ends[converged], ssr[converged], self.solution_tolerance, limit=CATALOGUE_LIMIT,
                                    contains=self.design.space.contains)
        label = np.full(shape, NO_SOLUTION, dtype=np.int8)
        label[converged] = labels
        return {
            "outcome": outcome,
            "iterations": iterations,
            "label": label,
            "solution_params": catalogue.params,
            "solution_ssr": catalogue.ssr,
            "solution_count": catalogue.count,
            "converged_params": ends[converged],
            "case_start": _spread_cases(outcome, first),
            "unit": unit,
            "span": np.array([first, stop], dtype=np.int64),
        }


def _spread_cases(outcome: np.ndarray, first: int) -> np.ndarray:
    """(M, F, K, CASES) design indices of runs of each failure kind, −1 where fewer.

    The runs are spread over the chunk (the first, the last and evenly between, in design
    order), so that examples come from different parts of the design.
    """
    methods, factors, count = outcome.shape
    cases = np.full((methods, factors, len(FAILURE_KINDS), CASES), -1, dtype=np.int64)
    for k, kind in enumerate(FAILURE_KINDS):
        hits = outcome == kind
        total = hits.sum(axis=2, keepdims=True)
        # Rank of each hit among the hits of its (method, factor) row, in design order.
        rank = np.cumsum(hits, axis=2) - 1
        for slot in range(CASES):
            wanted = np.round(slot * (total - 1) / max(CASES - 1, 1)).astype(np.int64)
            chosen = hits & (rank == wanted) & (total > slot)
            m, f, point = np.nonzero(chosen)
            cases[m, f, k, slot] = first + point
    return cases
