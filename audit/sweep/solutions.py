"""Distinct solutions among converged end points: clustering by SSR and scaled parameter distance.

Two end points are the same solution when their residual sums of squares agree to
``SolutionTolerance.ssr_relative`` (plus an absolute floor for zero-residual fits) and every
parameter agrees to ``parameter_relative`` of its size (or of a floor for parameters near zero).
The clustering is a leader algorithm over the points sorted by SSR, those inside the searched
ranges first: the first point not yet placed founds a solution and takes every remaining point
within tolerance of it. Each pass is vectorised over the points; the passes number the
solutions found. Because the leader is the lowest point of its solution, the solution's
representative is its most accurate end point.

Inside first, because the catalogue is capped: a periodic model reaches endless aliases of its
best curve outside the ranges (a frequency plus multiples of 2π over the sampling step, a phase
plus multiples of 2π), each at the same SSR to rounding. Sorted by SSR alone they filled the
cap and pushed out the optimum inside the ranges, which is the one the user asked about.

A sweep clusters each chunk's end points into a small local catalogue, then merges the
catalogues of all chunks with the same rule (``merge_catalogues``), so memory follows the
number of distinct solutions, not the number of runs.
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from ..engine.problem import FLOOR_FRACTION

#: Converged runs stop when the scaled step falls below the solver tolerance; with a linear
#: rate (damped steps, non-zero residuals) the remaining distance to the optimum can be a few
#: hundred times that step. The parameter tolerance sits well above this and well below the
#: separation of genuinely different optima.
PARAMETER_TOLERANCE_FACTOR = 1e4
MIN_PARAMETER_TOLERANCE = 1e-5
#: SSR varies quadratically near an optimum, so end points of one solution agree closely.
SSR_TOLERANCE = 1e-6
#: Zero-residual fits: SSRs below this fraction of the data's own sum of squares are equal.
SSR_FLOOR_FRACTION = 1e-14
#: Most distinct solutions kept per chunk and in the merged catalogue (lowest SSR first); runs
#: that reached a solution beyond the limit count as "another solution" without an entry.
CATALOGUE_LIMIT = 64
#: Label of a converged run whose solution is beyond the catalogue limit.
UNCATALOGUED = -2
#: Label of a run that did not converge.
NO_SOLUTION = -1


@dataclass(frozen=True)
class SolutionTolerance:
    """When two end points count as one solution.

    Attributes:
        parameter_relative: largest |a - b| / max(|b|, floor) per parameter.
        floor: (n,) magnitudes below which a parameter is measured on the floor.
        ssr_relative: largest relative SSR difference.
        ssr_floor: SSR differences below this are ignored (zero-residual problems).
    """

    parameter_relative: float
    floor: np.ndarray
    ssr_relative: float
    ssr_floor: float

    @classmethod
    def for_problem(cls, problem, solver_tolerance: float) -> "SolutionTolerance":
        """Tolerances for ``problem`` (its typical magnitudes and data) and the solver's tolerance."""
        typical = problem.typical if problem.typical is not None else np.ones(problem.n_params)
        total = float(problem.weighted_y @ problem.weighted_y)
        return cls(parameter_relative=max(MIN_PARAMETER_TOLERANCE, PARAMETER_TOLERANCE_FACTOR * solver_tolerance),
                   floor=FLOOR_FRACTION * typical, ssr_relative=SSR_TOLERANCE,
                   ssr_floor=max(SSR_FLOOR_FRACTION * total, np.finfo(float).tiny))


@dataclass
class Catalogue:
    """Distinct solutions: those inside the searched ranges first, each group lowest SSR first.

    Attributes:
        params: (k, n) representative end points.
        ssr: (k,) their residual sums of squares.
        count: (k,) number of end points in each.
    """

    params: np.ndarray
    ssr: np.ndarray
    count: np.ndarray

    def __len__(self) -> int:
        return len(self.ssr)


#: ``contains(params (k, n)) -> (k,) bool``: True where a point lies inside the searched ranges.
Contains = Callable[[np.ndarray], np.ndarray]


def cluster(params: np.ndarray, ssr: np.ndarray, tolerance: SolutionTolerance,
            weight: np.ndarray | None = None, limit: int = CATALOGUE_LIMIT,
            contains: Contains | None = None) -> tuple[Catalogue, np.ndarray]:
    """Group end points into distinct solutions.

    Args:
        params: (k, n) end points (finite).
        ssr: (k,) their SSR.
        tolerance: when two points are one solution.
        weight: (k,) how many runs each point stands for (default 1 each).
        limit: most solutions kept; points of later ones get ``UNCATALOGUED``.
        contains: which points lie inside the searched ranges (default: all of them).

    Returns:
        The catalogue (solutions led by a point inside the ranges first, each group lowest
        SSR first; row 0 is the reference) and (k,) labels: the catalogue row of each point.
    """
    params = np.asarray(params, dtype=float)
    ssr = np.asarray(ssr, dtype=float)
    weight = np.ones(len(ssr), dtype=np.int64) if weight is None else np.asarray(weight, dtype=np.int64)
    labels = np.full(len(ssr), UNCATALOGUED, dtype=np.int64)
    outside = np.zeros(len(ssr), dtype=bool) if contains is None or not len(ssr) else ~contains(params)
    order = np.lexsort((ssr, outside))
    remaining = order
    leaders: list[int] = []
    counts: list[int] = []
    while remaining.size and len(leaders) < limit:
        leader = remaining[0]
        same = _same_solution(params[remaining], ssr[remaining], params[leader], ssr[leader], tolerance)
        members = remaining[same]
        labels[members] = len(leaders)
        leaders.append(leader)
        counts.append(int(weight[members].sum()))
        remaining = remaining[~same]
    catalogue = Catalogue(params=params[leaders].reshape(len(leaders), params.shape[1]),
                          ssr=ssr[leaders], count=np.array(counts, dtype=np.int64))
    return catalogue, labels


def _same_solution(params: np.ndarray, ssr: np.ndarray, leader_params: np.ndarray, leader_ssr: float,
                   tolerance: SolutionTolerance) -> np.ndarray:
    scale = np.maximum(np.abs(leader_params), tolerance.floor)
    close = np.max(np.abs(params - leader_params) / scale, axis=1) <= tolerance.parameter_relative
    level = np.abs(ssr - leader_ssr) <= tolerance.ssr_relative * abs(leader_ssr) + tolerance.ssr_floor
    return close & level


def merge_catalogues(catalogues: list[Catalogue], tolerance: SolutionTolerance,
                     limit: int = CATALOGUE_LIMIT, contains: Contains | None = None
                     ) -> tuple[Catalogue, list[np.ndarray]]:
    """One catalogue from many (e.g. one per chunk), and where each entry went.

    Returns:
        The merged catalogue (inside the ranges first, as ``cluster``) and, per input
        catalogue, (k_i,) labels into it (``UNCATALOGUED`` beyond the limit).
    """
    # An empty catalogue still has its (0, n) shape: every run of a sweep may have failed.
    n = next((c.params.shape[1] for c in catalogues if c.params.ndim == 2), 0)
    sizes = [len(c) for c in catalogues]
    if not sum(sizes):
        return Catalogue(np.empty((0, n)), np.empty(0), np.empty(0, dtype=np.int64)), \
            [np.empty(0, dtype=np.int64) for _ in catalogues]
    params = np.vstack([c.params for c in catalogues if len(c)])
    ssr = np.concatenate([c.ssr for c in catalogues])
    count = np.concatenate([c.count for c in catalogues])
    merged, labels = cluster(params, ssr, tolerance, weight=count, limit=limit, contains=contains)
    return merged, np.split(labels, np.cumsum(sizes)[:-1])
