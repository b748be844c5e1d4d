"""The multistart × step-factor sweep: where fits from many starts end, and what that implies.

``run_sweep`` fits every design start with every step factor (and every method asked for) in
chunks of bounded size, mapped through ``parallel.map_chunks``; each finished chunk is stored
at once in the chunk cache, so an interrupted or repeated sweep computes only what is missing.
Then, reading the chunks back one at a time:

1. the chunks' local solution catalogues are merged into distinct solutions; the one with the
   lowest SSR inside the searched ranges is the best one, the reference;
2. basin maps (2-D slices through the best fit) are swept the same way;
3. fixed-size tallies give the share of each outcome per step factor, iteration percentiles,
   the safe starting region and the recommended step factor;
4. a few runs of each failure kind are refitted with their whole path.

Chunks depend only on the scenario, the settings and their index, never on the number of
workers or the backend, and they are merged in index order, so the result is the same for
one process, many, or a Dask cluster.
"""
from __future__ import annotations

import math
import tempfile
from collections import Counter
from collections.abc import Callable, Iterator
from contextlib import ExitStack
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from .. import __version__
from ..errors import InputError
from ..inputs.scenario import solutions_fingerprint
from ..inputs.settings import nearest
from ..parallel.chunk_cache import ChunkStore, cache_key, cache_root, code_digest
from ..parallel.plan import ParallelPlan, map_chunks
from .advice import next_step
from .cases import CaseSelection, trace_cases
from .chunk import FAILURE_KINDS, ChunkWork
from .equivalent_solutions import ALIAS, Equivalence, SameCurve, find_equivalent
from .recommend import (REGION_LEVEL, REGION_MIN_STARTS, choose_step_factor, histogram_percentile, region_box,
                        safe_regions)
from .result import BEST, CATEGORIES, BasinMap, SweepResult
from .solutions import Catalogue, SolutionTolerance, merge_catalogues
from .starts import StartDesign, make_design, map_axis_values, map_design, search_space
from .tally import DesignTally, MapGrid

#: Runs (starts × step factors × methods) per chunk, before rounding the starts per chunk down
#: to a power of two (whole Sobol' blocks). A chunk's arrays stay well under a megabyte.
CHUNK_RUNS = 4096

#: progress(starts_done, starts_total, starts_computed_now); chunk_done(stage, chunk_index, reused).
ProgressCallback = Callable[[int, int, int], None]
ChunkCallback = Callable[[str, int, bool], None]


@dataclass(frozen=True)
class SweepRequest:
    """The settings of one sweep (the scenario's, with command-line overrides applied).

    Attributes:
        design: "grid", "sobol" or "lhs"; points: requested starts; seed: the design's seed.
        step_factors: α values; methods: "gn" and/or "lm".
        maps: parameter index pairs (x, y) of the basin maps; resolution: points per map axis.
        tolerance, max_iterations: the solver's.
    """

    design: str
    points: int
    seed: int
    step_factors: tuple[float, ...]
    methods: tuple[str, ...]
    maps: tuple[tuple[int, int], ...]
    resolution: int
    tolerance: float
    max_iterations: int

    @classmethod
    def from_scenario(cls, scenario, *, design: str | None = None, points: int | None = None,
                      step_factors: tuple[float, ...] | None = None, methods: tuple[str, ...] | None = None,
                      resolution: int | None = None) -> "SweepRequest":
        """The scenario's [sweep] and [solver] settings with the given overrides.

        Without [sweep] maps, a scenario of two or more parameters gets one map over its first
        two parameters.

        Raises:
            InputError: for a parameter without a range, or an override out of range (the
                option is named).
        """
        search_space(scenario)
        sweep, solver, names = scenario.sweep, scenario.solver, scenario.names
        step_factors = tuple(solver.step_factors if step_factors is None else step_factors)
        if not step_factors or not all(0 < a <= 1 for a in step_factors) or len(set(step_factors)) != len(step_factors):
            raise InputError(f"--step-factors: need distinct values in (0, 1], got {list(step_factors)}")
        methods = tuple(sweep.methods if methods is None else methods)
        for method in methods:
            if method not in ("gn", "lm"):
                raise InputError(f"--solver: unknown solver {method!r}{nearest(method, ('gn', 'lm'))}")
        points = sweep.points if points is None else points
        if points < 1:
            raise InputError(f"--starts: must be at least 1, got {points}")
        resolution = sweep.resolution if resolution is None else resolution
        if resolution < 2:
            raise InputError(f"--resolution: must be at least 2, got {resolution}")
        pairs = sweep.maps
        if not pairs and len(names) >= 2:
            pairs = ((names[0], names[1]),)
        for x, y in pairs:
            if x == y:
                raise InputError(f"{scenario.path / 'scenario.toml'} [sweep] maps: a map needs two different "
                                 f"parameters, got [{x!r}, {y!r}]")
        return cls(design=design or sweep.design, points=points, seed=sweep.seed, step_factors=step_factors,
                   methods=methods, maps=tuple((names.index(x), names.index(y)) for x, y in pairs),
                   resolution=resolution, tolerance=solver.tolerance, max_iterations=solver.max_iterations)

    @property
    def starts_per_chunk(self) -> int:
        runs_per_start = len(self.step_factors) * len(self.methods)
        return 2 ** int(math.log2(max(1, CHUNK_RUNS // runs_per_start)))


def run_sweep(scenario, request: SweepRequest, plan: ParallelPlan | None = None, folder: Path | None = None, *,
              on_progress: ProgressCallback | None = None, on_chunk: ChunkCallback | None = None) -> SweepResult:
    """Run (or resume) a sweep of ``scenario``.

    Args:
        scenario: a loaded ``Scenario``; every parameter needs a range.
        request: the settings (see ``SweepRequest.from_scenario``).
        plan: how to spread the chunks (default: all local cores).
        folder: output folder; chunks are cached under ``folder/cache``. None: a temporary
            folder, removed afterwards (nothing is resumable).
        on_progress: called with (starts done, starts in total, starts computed by this call, not
            taken from the cache) as chunks finish or are found.
        on_chunk: called with (stage, chunk index, reused) after each chunk is stored or found.

    Raises:
        InputError: for a parameter without a range or settings out of range.
    """
    with ExitStack() as stack:
        if folder is None:
            folder = Path(stack.enter_context(tempfile.TemporaryDirectory(prefix="fitaudit-sweep-")))
        return _Sweep(scenario, request, plan or ParallelPlan(), Path(folder), on_progress, on_chunk).run()


class _Sweep:
    """One sweep's state while it runs; ``run`` is the whole procedure."""

    def __init__(self, scenario, request: SweepRequest, plan: ParallelPlan, folder: Path,
                 on_progress: ProgressCallback | None, on_chunk: ChunkCallback | None) -> None:
        self.scenario, self.request, self.plan = scenario, request, plan
        self.problem = scenario.problem
        self.space = search_space(scenario)
        self.design = make_design(self.space, request.design, request.points, request.seed)
        self.tolerance = SolutionTolerance.for_problem(self.problem, request.tolerance)
        key = cache_key({"fingerprint": scenario.fingerprint, "version": __version__, "code": code_digest(),
                         "chunk": request.starts_per_chunk, **asdict(request)})
        self.cache = cache_root(folder) / f"sweep-{key}"
        self.on_progress, self.on_chunk = on_progress, on_chunk
        self.total = self.design.count + len(request.maps) * request.resolution ** 2
        self.done = self.computed = 0
        self.counters = {"total": 0, "reused": 0, "computed": 0}

    def run(self) -> SweepResult:
        request = self.request
        design_store = ChunkStore(self.cache, "design")
        design_spans = self._compute(self.design, design_store)
        design_catalogues = [_catalogue(design_store.load(i)) for i in range(len(design_spans))]
        design_best, _ = self._merge(design_catalogues)
        # The maps are slices through the design's best fit (the scenario's start if none).
        base = design_best.params[0] if len(design_best) else self.scenario.start
        planes = []
        for x_axis, y_axis in request.maps:
            plane = map_design(self.space, (x_axis, y_axis), request.resolution, base)
            store = ChunkStore(self.cache, f"map-{x_axis}-{y_axis}-{cache_key({'base': base})[:8]}")
            planes.append((plane, store, len(self._compute(plane, store))))
        catalogues = design_catalogues + [_catalogue(store.load(i)) for _, store, chunks in planes
                                          for i in range(chunks)]
        merged, mappings = self._merge(catalogues)
        best_unit = (np.clip(self.space.to_unit(merged.params[0]), 0, 1) if len(merged)
                     else np.full(self.space.n_params, 0.5))
        # This pass knows the best fit, so every converged run's end point meets the curve test.
        tally = DesignTally(len(request.methods), len(request.step_factors), request.max_iterations, len(merged),
                            best_unit, SameCurve(self.problem, merged.params[0]) if len(merged) else None)
        for i in range(len(design_spans)):
            tally.add(design_store.load(i), mappings[i])
        case_shape = (len(request.methods), len(request.step_factors), len(FAILURE_KINDS))
        maps, selections = [], [CaseSelection("design", self.design, tally.cases.pick(case_shape), tally.cases.unit)]
        offset = len(design_spans)
        for plane, store, chunks in planes:
            grid = MapGrid(len(request.methods), len(request.step_factors), request.resolution)
            for i in range(chunks):
                grid.add(store.load(i), mappings[offset + i])
            offset += chunks
            maps.append(self._basin_map(plane, grid))
            source = f"map {maps[-1].x_name}/{maps[-1].y_name}"
            selections.append(CaseSelection(source, plane, grid.cases.pick(case_shape), grid.cases.unit))
        cases = trace_cases(self.problem, selections, request.methods, np.array(request.step_factors),
                            request.tolerance, request.max_iterations)
        return self._result(tally, merged, design_best, best_unit, maps, cases)

    def _merge(self, catalogues: list[Catalogue]) -> tuple[Catalogue, list[np.ndarray]]:
        """Merge chunk catalogues, the solutions inside the searched ranges first."""
        return merge_catalogues(catalogues, self.tolerance, contains=self.space.contains)

    def _compute(self, design: StartDesign, store: ChunkStore) -> list[tuple[int, int]]:
        """Make sure every chunk of ``design`` is stored; compute the missing ones. Returns the spans."""
        size = self.request.starts_per_chunk
        spans = [(first, min(first + size, design.count)) for first in range(0, design.count, size)]
        missing = []
        for index, span in enumerate(spans):
            stored = store.load(index)
            if stored is not None and tuple(stored.get("span", ())) == span:
                self._finished(store.stage, index, span, reused=True)
            else:
                missing.append(index)
        request = self.request
        work = ChunkWork(problem=self.problem, design=design, step_factors=request.step_factors,
                         methods=request.methods, tolerance=request.tolerance,
                         max_iterations=request.max_iterations, solution_tolerance=self.tolerance)
        # The coordinates are computed here, so that workers need no design generator.
        tasks = ((spans[i], design.unit(*spans[i])) for i in missing)
        results: Iterator = map_chunks(work, tasks, self.plan)
        for index, arrays in zip(missing, results):
            store.save(index, arrays)
            self._finished(store.stage, index, spans[index], reused=False)
        return spans

    def _finished(self, stage: str, index: int, span: tuple[int, int], reused: bool) -> None:
        self.counters["total"] += 1
        self.counters["reused" if reused else "computed"] += 1
        self.done += span[1] - span[0]
        if not reused:
            self.computed += span[1] - span[0]
        if self.on_chunk is not None:
            self.on_chunk(stage, index, reused)
        if self.on_progress is not None:
            self.on_progress(self.done, self.total, self.computed)

    def _basin_map(self, plane: StartDesign, grid: MapGrid) -> BasinMap:
        x_axis, y_axis = plane.map_axes
        x_values, y_values = map_axis_values(plane)
        category, solution, iterations = grid.grids()
        return BasinMap(x_name=self.space.names[x_axis], y_name=self.space.names[y_axis], x_values=x_values,
                        y_values=y_values, x_log=bool(self.space.log[x_axis]), y_log=bool(self.space.log[y_axis]),
                        base=plane.base, category=category, solution=solution, iterations=iterations,
                        shares=grid.shares())

    def _result(self, tally: DesignTally, merged: Catalogue, design_best: Catalogue, best_unit: np.ndarray,
                maps: list[BasinMap], cases) -> SweepResult:
        request, space = self.request, self.space
        starts = self.design.count
        median = histogram_percentile(tally.iteration_histogram, 50)
        p90 = histogram_percentile(tally.iteration_histogram, 90)
        shares = tally.counts / starts
        last, radius, inside, share_inside = safe_regions(tally.distance_total, tally.distance_best,
                                                          tally.distance_farthest)
        lower, upper = region_box(last, tally.unit_low, tally.unit_high, space)
        start_distance = float(np.max(np.abs(space.to_unit(self.scenario.start) - best_unit)))
        start = self.scenario.start
        inside_parameter = (start >= lower) & (start <= upper)
        recommended, reason = choose_step_factor(shares[..., BEST], median[..., BEST], np.array(request.step_factors),
                                                 request.methods, radius, inside, share_inside)
        level = np.zeros(len(merged), dtype=bool)
        if len(merged):
            level = np.abs(merged.ssr - merged.ssr[0]) <= (self.tolerance.ssr_relative * abs(merged.ssr[0])
                                                           + self.tolerance.ssr_floor)
            level[0] = False
        equivalence = find_equivalent(self.problem, merged.params, level, self.tolerance.parameter_relative,
                                      self.tolerance.floor)
        solution_inside = self.space.contains(merged.params)
        symmetric_inside = equivalence.same_curve & solution_inside
        solution_shares = tally.solution_counts / starts
        curve_shares = tally.curve_counts / starts
        advice = "" if recommended is not None else next_step(self.problem, self.scenario.start, tally.counts,
                                                               int(np.count_nonzero(~solution_inside)))
        return SweepResult(
            names=space.names, fingerprint=solutions_fingerprint(self.scenario), lower=space.lower, upper=space.upper,
            log=space.log, design=request.design,
            points=starts, seed=request.seed, step_factors=np.array(request.step_factors), methods=request.methods,
            tolerance=request.tolerance, max_iterations=request.max_iterations, counts=tally.counts, shares=shares,
            iterations_median=median, iterations_p90=p90, solution_params=merged.params, solution_ssr=merged.ssr,
            solution_shares=solution_shares, solution_level_with_best=level,
            solution_inside=solution_inside, solution_same_curve=equivalence.same_curve,
            solution_equivalence=equivalence.kind, solution_relation=equivalence.relation, curve_shares=curve_shares,
            start=self.scenario.start, start_distance=start_distance,
            region_level=REGION_LEVEL, region_min_starts=REGION_MIN_STARTS, region_radius=radius,
            region_lower=lower, region_upper=upper, region_starts=inside, region_share=share_inside,
            start_inside=inside_parameter.all(axis=-1), start_inside_parameter=inside_parameter,
            recommended=recommended, recommendation_reason=reason, next_step=advice, maps=maps, cases=cases,
            chunks=dict(self.counters), cache=str(self.cache),
            warnings=self._warnings(merged, design_best, level & ~symmetric_inside, solution_inside, equivalence,
                                   starts)
            + _symmetry_notes(equivalence, symmetric_inside, curve_shares, recommended, request)
            + _timed_out_notes(tally.counts, maps, self.problem.time_limit))

    def _warnings(self, merged: Catalogue, design_best: Catalogue, level: np.ndarray, inside: np.ndarray,
                  equivalence: Equivalence, starts: int) -> list[str]:
        request, notes = self.request, []
        if request.design == "grid" and starts != request.points:
            notes.append(f"a full grid of {self.design.per_axis} points per axis has {starts} starts "
                         f"({request.points} were asked for)")
        if request.design == "sobol" and starts & (starts - 1):
            notes.append(f"{starts} Sobol' points: a power of two ({2 ** math.ceil(math.log2(starts))}) keeps the "
                         "design balanced")
        if starts < REGION_MIN_STARTS:
            notes.append(f"only {starts} starts: a safe region needs at least {REGION_MIN_STARTS}")
        if not len(merged):
            notes.append("no run converged: there is no best solution to compare with")
        elif len(design_best) and merged.ssr[0] < design_best.ssr[0] - (
                self.tolerance.ssr_relative * abs(design_best.ssr[0]) + self.tolerance.ssr_floor):
            notes.append("a basin map found a lower SSR than any design start; the maps are centred on the "
                         "design's best, so rerun with more design points")
        # Lower by more than the clustering's SSR tolerance: aliases sit at the best SSR to rounding.
        outside_lower = ~inside & (merged.ssr < merged.ssr[0] - (self.tolerance.ssr_relative * abs(merged.ssr[0])
                                                               + self.tolerance.ssr_floor)) if len(merged) else inside
        outside = outside_lower | (level & ~inside)
        if np.any(outside):
            kinds = Counter(equivalence.kind[s] for s in np.flatnonzero(outside & equivalence.same_curve))
            curve = (f"; {sum(kinds.values())} of them give the best fit's curve ("
                     + ", ".join(f"{count} {kind}" for kind, count in sorted(kinds.items())) + "), not separate fits"
                     if kinds else "")
            notes.append(f"{int(np.sum(outside))} solution(s) outside the searched ranges reach the best SSR or a "
                         f"lower one ({int(np.sum(outside_lower))} lower; see the solutions table){curve}: widen a "
                         "range only if values there are physical")
        if np.any(level & inside):
            notes.append(f"{int(np.sum(level & inside))} other solution(s) inside the ranges have the best SSR with "
                         "different parameters: the data may not determine the parameters (see the identifiability "
                         "stage)")
        return notes


def _symmetry_notes(equivalence: Equivalence, symmetric_inside: np.ndarray, curve_shares: np.ndarray,
                    recommended: tuple[int, int] | None, request: SweepRequest) -> list[str]:
    """One note per solution inside the ranges that repeats the best fit's curve with other
    parameters (those outside are noted with the other outside solutions), and the share of
    starts reaching the curve with them counted."""
    notes = []
    for s in np.flatnonzero(symmetric_inside):
        how = f" ({equivalence.relation[s]})" if equivalence.relation[s] else ""
        if equivalence.kind[s] == ALIAS:
            notes.append(f"solution {s + 1} gives the best fit's values at the sample points{how} but another curve "
                         "between them: an alias of the sampling, not a separate fit; narrow the ranges so that "
                         "only one of the two lies inside them, or sample more densely")
        else:
            notes.append(f"solution {s + 1} gives the best fit's curve with other parameters{how}: a symmetry of "
                         f"the model ({equivalence.kind[s]}), not a separate fit; narrow the ranges so that only "
                         "one of the two lies inside them")
    if len(notes) and recommended is not None:
        m, f = recommended
        notes.append(f"counting the equivalent solution(s), {curve_shares[m, f]:.1%} of the starts reach the best "
                     f"fit's curve with {request.methods[m]} and step factor {request.step_factors[f]:g}")
    return notes


def _timed_out_notes(counts: np.ndarray, maps: list[BasinMap], limit: float | None) -> list[str]:
    """A note on the runs whose chunk used up the time limit, in the design (``counts`` (M, F, K))
    and in the maps, naming the setting that stopped them."""
    timed_out = CATEGORIES.index("timed_out")
    design = int(counts[..., timed_out].sum())
    in_maps = sum(int(np.count_nonzero(basin_map.category == timed_out)) for basin_map in maps)
    if not design and not in_maps:
        return []
    where = " and ".join(part for part in (f"{design} of the design's runs" if design else "",
                                            f"{in_maps} of the maps' runs" if in_maps else "") if part)
    return [f"{where} timed out: their chunk of fits (up to {CHUNK_RUNS} runs) used up [model] time_limit = "
            f"{limit:g} s; raise it so that a whole chunk can finish, and run again"]


def _catalogue(chunk: dict[str, np.ndarray]) -> Catalogue:
    return Catalogue(params=chunk["solution_params"], ssr=chunk["solution_ssr"], count=chunk["solution_count"])
