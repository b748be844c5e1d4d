"""Streaming tallies over stored chunks: categories, iterations, solutions, distances, cases.

A ``DesignTally`` takes one chunk at a time (its stored arrays, with the unit coordinates of
its starts, and the map from its local solution labels to the merged catalogue) and adds it to
fixed-size counters, so the memory of the summary does not grow with the number of starts.
``MapGrid`` fills the (small) per-run grids of one basin map, which are kept whole for the
figures.
"""
from __future__ import annotations

import numpy as np

from ..engine.outcomes import Outcome
from .chunk import CASES
from .equivalent_solutions import SameCurve
from .recommend import DISTANCE_BINS, start_distances
from .result import BEST, CATEGORIES, CATEGORY_OF_OUTCOME, OTHER
from .solutions import NO_SOLUTION, UNCATALOGUED


def global_labels(label: np.ndarray, mapping: np.ndarray) -> np.ndarray:
    """Chunk-local solution labels (−1 none, −2 beyond the local catalogue) to merged rows."""
    label = label.astype(np.int64)
    merged = np.where(label >= 0, mapping[np.maximum(label, 0)] if mapping.size else UNCATALOGUED, label)
    return merged.astype(np.int16)


def categorise(outcome: np.ndarray, solution: np.ndarray) -> np.ndarray:
    """Category index (``CATEGORIES``) of each run from its outcome code and merged solution."""
    category = CATEGORY_OF_OUTCOME[outcome.astype(np.int64)]
    return np.where(solution == 0, BEST, np.where(solution == NO_SOLUTION, category, OTHER)).astype(np.int8)


class CaseCandidates:
    """Example runs offered by each chunk; ``pick`` spreads the choice over the whole design.

    Each chunk offers at most CASES indices per (method, factor, kind), so the candidates
    number CASES per chunk, a few integers, whatever the chunk size. The unit coordinates of the
    offered starts are kept with them (``unit``: design index -> (n,)), so that the chosen runs
    can be refitted without the design's generator.
    """

    def __init__(self) -> None:
        self.offered: list[np.ndarray] = []
        self.unit: dict[int, np.ndarray] = {}

    def add(self, chunk: dict[str, np.ndarray]) -> None:
        """Take a stored chunk's offer (its ``case_start``, ``unit`` and ``span``)."""
        found, first = chunk["case_start"], int(chunk["span"][0])
        self.offered.append(found)
        for index in np.unique(found[found >= 0]).tolist():
            self.unit[index] = chunk["unit"][index - first]

    def pick(self, shape: tuple[int, ...]) -> np.ndarray:
        """(M, F, K, CASES) indices: CASES candidates evenly spaced in design order, −1 where fewer."""
        chosen = np.full((*shape, CASES), -1, dtype=np.int64)
        if not self.offered:
            return chosen
        candidates = np.concatenate(self.offered, axis=-1).reshape(-1, len(self.offered) * CASES)
        flat = chosen.reshape(-1, CASES)
        for row, values in enumerate(candidates):
            values = np.unique(values[values >= 0])
            if values.size:
                spots = np.unique(np.round(np.linspace(0, values.size - 1, min(CASES, values.size))).astype(int))
                flat[row, :spots.size] = values[spots]
        return chosen


class DesignTally:
    """Fixed-size counters over the design's chunks.

    Attributes (after all chunks were added):
        counts: (M, F, K) runs per category.
        iteration_histogram: (M, F, K, max_iterations + 1) runs per category and iteration count.
        solution_counts: (M, F, S) runs per merged solution.
        curve_counts: (M, F) runs that reached the best fit's curve: the best solution, or any
            converged end point that passes the curve test (an alias, a symmetry), whether its
            solution is catalogued or beyond the limit.
        distance_total: (DISTANCE_BINS,) starts per distance from the best fit.
        distance_best: (M, F, DISTANCE_BINS) of those reaching the best solution.
        distance_farthest: (DISTANCE_BINS,) largest distance seen in each bin (−inf if none).
        unit_low, unit_high: (DISTANCE_BINS, n) extent of the starts' unit coordinates per bin.
        cases: the example runs offered by the chunks (``CaseCandidates``).
    """

    def __init__(self, methods: int, factors: int, max_iterations: int, solutions: int, centre: np.ndarray,
                 same_curve: SameCurve | None = None) -> None:
        kinds = len(CATEGORIES)
        self.centre = centre
        self.same_curve = same_curve
        self.counts = np.zeros((methods, factors, kinds), dtype=np.int64)
        self.iteration_histogram = np.zeros((methods, factors, kinds, max_iterations + 1), dtype=np.int64)
        self.solution_counts = np.zeros((methods, factors, max(solutions, 0)), dtype=np.int64)
        self.curve_counts = np.zeros((methods, factors), dtype=np.int64)
        self.distance_total = np.zeros(DISTANCE_BINS, dtype=np.int64)
        self.distance_best = np.zeros((methods, factors, DISTANCE_BINS), dtype=np.int64)
        self.distance_farthest = np.full(DISTANCE_BINS, -np.inf)
        self.unit_low = np.full((DISTANCE_BINS, len(centre)), np.inf)
        self.unit_high = np.full((DISTANCE_BINS, len(centre)), -np.inf)
        self.cases = CaseCandidates()

    def add(self, chunk: dict[str, np.ndarray], mapping: np.ndarray) -> None:
        """Count one chunk: its stored arrays and its local-to-merged solution map."""
        methods, factors, kinds = self.counts.shape
        solution = global_labels(chunk["label"], mapping)
        category = categorise(chunk["outcome"], solution).astype(np.int64)
        cell = (np.arange(methods)[:, None, None] * factors + np.arange(factors)[None, :, None])
        flat = (cell * kinds + category).ravel()
        self.counts += np.bincount(flat, minlength=methods * factors * kinds).reshape(self.counts.shape)
        length = self.iteration_histogram.shape[-1]
        iterations = np.minimum(chunk["iterations"].astype(np.int64), length - 1)
        self.iteration_histogram += np.bincount(
            (flat * length + iterations.ravel()), minlength=self.iteration_histogram.size
        ).reshape(self.iteration_histogram.shape)
        solutions = self.solution_counts.shape[-1]
        if solutions:
            reached = solution >= 0
            index = (np.broadcast_to(cell, solution.shape) * solutions + solution)[reached]
            self.solution_counts += np.bincount(index.astype(np.int64), minlength=methods * factors * solutions
                                                ).reshape(self.solution_counts.shape)
        on_curve = category == BEST
        if self.same_curve is not None:
            on_curve[chunk["outcome"] == Outcome.CONVERGED] |= self.same_curve(chunk["converged_params"])
        self.curve_counts += on_curve.sum(axis=-1)
        unit = chunk["unit"]
        distance, bins = start_distances(unit, self.centre)
        self.distance_total += np.bincount(bins, minlength=DISTANCE_BINS)
        np.maximum.at(self.distance_farthest, bins, distance)
        np.minimum.at(self.unit_low, bins, unit)
        np.maximum.at(self.unit_high, bins, unit)
        best = category == BEST
        where = (np.broadcast_to(cell, best.shape) * DISTANCE_BINS + bins)[best]
        self.distance_best += np.bincount(where, minlength=self.distance_best.size).reshape(self.distance_best.shape)
        self.cases.add(chunk)


class MapGrid:
    """The per-run grids of one basin map, filled chunk by chunk."""

    def __init__(self, methods: int, factors: int, resolution: int) -> None:
        shape = (methods, factors, resolution * resolution)
        self.resolution = resolution
        self.category = np.zeros(shape, dtype=np.int8)
        self.solution = np.full(shape, NO_SOLUTION, dtype=np.int16)
        self.iterations = np.zeros(shape, dtype=np.int32)
        self.cases = CaseCandidates()

    def add(self, chunk: dict[str, np.ndarray], mapping: np.ndarray) -> None:
        first, stop = (int(v) for v in chunk["span"])
        solution = global_labels(chunk["label"], mapping)
        self.solution[..., first:stop] = solution
        self.category[..., first:stop] = categorise(chunk["outcome"], solution)
        self.iterations[..., first:stop] = chunk["iterations"]
        self.cases.add(chunk)

    def grids(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """category, solution and iterations as (M, F, r, r), rows along the map's y axis."""
        shape = (*self.category.shape[:2], self.resolution, self.resolution)
        return self.category.reshape(shape), self.solution.reshape(shape), self.iterations.reshape(shape)

    def shares(self) -> np.ndarray:
        """(M, F, K) share of the map's starts per category."""
        kinds = len(CATEGORIES)
        counts = np.stack([(self.category == k).sum(axis=-1) for k in range(kinds)], axis=-1)
        return counts / self.category.shape[-1]
