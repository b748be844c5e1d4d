"""Profile likelihood: one batch per step for all parameters against one call per profile side.

    python tests/benchmarks/bench_identifiability.py [--profile-points N] [--repeat R]

The batched profiles (``audit.identifiability.profiles.profile_all``: every parameter and both directions of a
walk step, then of a refinement round of the interval ends, in one ``fit_batch`` call) are timed
against the same algorithm run side by side: the same grid, doubling steps and refinement, but
one side per call (``profile_walk.walk_sides`` and ``profile_ends.refine_crossings`` given one
side at a time). Both must give the same interval ends (the largest relative difference is
printed), with the refinement rounds spent. Problems: the bundled probe-cooling scenario
(3 parameters), a constructed sum of three exponentials (6 parameters, m = 400) and a
saturation curve seen only at low concentrations (2 parameters, walks far past its grid).
Prints one JSON object; times are the best of ``--repeat`` runs, on one process.
"""
from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np

from audit.engine.batch import RefitSettings
from audit.engine.best_fit import best_known_fit
from audit.engine.estimates import estimate
from audit.engine.problem import Problem
from audit.identifiability.profile_ends import refine_crossings
from audit.identifiability.profile_walk import CEILING_RISES, NOT_WALKED, walk_sides
from audit.identifiability.profiles import plan_grid, profile_all
from audit.inputs.scenario import load_scenario
from audit.inputs.settings import SolverSettings

SCENARIO = Path(__file__).resolve().parents[2] / "scenarios" / "probe-cooling"


def three_exponentials() -> tuple[Problem, np.ndarray]:
    """Constructed data: three decays plus noise; returns the problem and a start near the truth."""
    rng = np.random.default_rng(17)
    x = np.linspace(0.0, 12.0, 400)
    truth = np.array([4.0, 2.5, 2.0, 0.6, 1.0, 0.08])

    def model(x, a1, r1, a2, r2, a3, r3):
        return a1 * np.exp(-r1 * x) + a2 * np.exp(-r2 * x) + a3 * np.exp(-r3 * x)

    def jacobian(x, a1, r1, a2, r2, a3, r3):
        e1, e2, e3 = np.exp(-r1 * x), np.exp(-r2 * x), np.exp(-r3 * x)
        return [e1, -a1 * x * e1, e2, -a2 * x * e2, e3, -a3 * x * e3]

    y = model(x, *truth) + 0.01 * rng.standard_normal(x.size)
    return Problem(model, x, y, ("a1", "r1", "a2", "r2", "a3", "r3"), jacobian=jacobian), truth * 1.05


def low_concentration_saturation() -> tuple[Problem, np.ndarray, np.ndarray, np.ndarray]:
    """Constructed data: y = vmax·x/(km + x) measured only up to 0.4·km (vmax 30, km 5, 7 %
    noise); returns the problem, a start and the ranges [0.1, 1000] of both parameters."""
    rng = np.random.default_rng(8)
    x = np.repeat([0.25, 0.5, 0.75, 1.0, 1.5, 2.0], 2)

    def model(x, vmax, km):
        return vmax * x / (km + x)

    y = model(x, 30.0, 5.0) * (1 + 0.07 * rng.standard_normal(x.size))
    return Problem(model, x, y, ("vmax", "km")), np.array([20.0, 3.0]), np.full(2, 0.1), np.full(2, 1000.0)


def per_side_ends(problem: Problem, estimate_: np.ndarray, ssr_min: float, threshold: float, grid,
                  lower: np.ndarray, upper: np.ndarray, walk: RefitSettings) -> np.ndarray:
    """The unbatched baseline: (n, 2) interval ends, walking and refining one side per call."""
    n = len(estimate_)
    ceiling = ssr_min + CEILING_RISES * (threshold - ssr_min)
    bounds = np.stack([np.nan_to_num(lower, nan=-np.inf), np.nan_to_num(upper, nan=np.inf)], axis=1)
    ends = np.full((n, 2), np.nan)
    for j in range(n):
        for side in (0, 1):
            pinned = np.array([j])
            walked = walk_sides(problem, estimate_, pinned, grid.values[j, side][None, :], bounds[j, side][None],
                                grid.log[pinned], threshold, ceiling, walk)
            ends[j, side] = refine_crossings(problem, estimate_, ssr_min, threshold, pinned, walked, walk).value[0]
    return ends


def measure(name: str, problem: Problem, start: np.ndarray, points: int, repeat: int,
            lower: np.ndarray | None = None, upper: np.ndarray | None = None) -> dict:
    solver = SolverSettings()
    walk = RefitSettings(step_factor=solver.step_factors[0], tolerance=solver.tolerance,
                         max_iterations=solver.max_iterations)
    params = best_known_fit(problem, start, **solver.fit_options(), accept_lost_rank=True).params
    estimates = estimate(problem, params)
    n = len(params)
    lower = np.full(n, np.nan) if lower is None else lower
    upper = np.full(n, np.nan) if upper is None else upper
    steps = (points - 1) // 2
    grid = plan_grid(params, estimates.t_quantile * estimates.std_errors, lower, upper, steps, reach=4.0,
                     fallback=np.abs(params))
    batched_times, baseline_times = [], []
    for _ in range(repeat):
        started = time.perf_counter()
        profiles = profile_all(problem, params, estimates.ssr, grid, 0.95, walk, lower_bound=lower,
                               upper_bound=upper)
        batched_times.append(time.perf_counter() - started)
        started = time.perf_counter()
        baseline = per_side_ends(problem, params, profiles.ssr_min, profiles.threshold, grid, lower, upper, walk)
        baseline_times.append(time.perf_counter() - started)
    batched = np.column_stack([profiles.lower, profiles.upper])
    both = np.isfinite(batched) & np.isfinite(baseline)
    difference = np.max(np.abs(batched[both] - baseline[both]) / np.abs(baseline[both])) if both.any() else None
    return {
        "problem": name, "parameters": problem.n_params, "observations": problem.n_obs,
        "grid_points": 2 * steps + 1, "walked_points": int(np.sum(profiles.outcome != NOT_WALKED)) - n,
        "closed_sides": int(np.sum(np.isfinite(batched))),
        "batched_seconds": min(batched_times), "per_side_seconds": min(baseline_times),
        "speedup": min(baseline_times) / min(batched_times),
        "largest_relative_end_difference": difference,
        "largest_end_ssr_error": float(np.nanmax(np.abs(profiles.end_ssr / profiles.threshold - 1))),
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--profile-points", type=int, default=41, help="profile grid points per parameter")
    parser.add_argument("--repeat", type=int, default=3, help="timed repetitions (the best is kept)")
    args = parser.parse_args()
    scenario = load_scenario(SCENARIO)
    exponentials, start = three_exponentials()
    saturation, saturation_start, lower, upper = low_concentration_saturation()
    results = [measure("probe-cooling", scenario.problem, scenario.start, args.profile_points, args.repeat),
               measure("three-exponentials", exponentials, start, args.profile_points, args.repeat),
               measure("low-concentration-saturation", saturation, saturation_start, args.profile_points, args.repeat,
                       lower, upper)]
    print(json.dumps({"benchmark": "profiles, batched vs one call per side", "results": results}, indent=2))


if __name__ == "__main__":
    main()
