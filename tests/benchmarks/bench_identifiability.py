"""Profile-likelihood walk: one batch per step for all parameters against one call per profile side.

    python tests/benchmarks/bench_identifiability.py [--points N] [--repeat R]

The batched walk (``audit.profiles.profile_all``: every parameter and both directions of a step
in one ``fit_batch`` call through ``audit.pinned``) is timed against the obvious alternative:
the same grid, the same warm starts, but one ``fit_batch`` call per parameter, side and step
with the engine's ``free`` mask. Both must give the same profile SSRs (the largest relative
difference is printed). Problems: the bundled probe-cooling scenario (3 parameters) and a
constructed sum of three exponentials (6 parameters, m = 400). Prints one JSON object; times
are the best of ``--repeat`` runs, on one process.
"""
from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np

from audit.engine import fit_batch
from audit.estimates import estimate
from audit.identifiability import best_fit
from audit.outcomes import Outcome
from audit.problem import Problem
from audit.profiles import CEILING_RISES, FAILURES_IN_A_ROW, plan_grid, profile_all
from audit.scenario import load_scenario
from audit.settings import SolverSettings

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


def per_side_walk(problem: Problem, estimate_: np.ndarray, values: np.ndarray, solver: SolverSettings,
                  ceiling: float) -> np.ndarray:
    """The unbatched baseline: (n, 2, K) profile SSR, one fit_batch call per parameter, side and step.

    Sides stop where the batched walk stops them: above ``ceiling``, or after repeated failures.
    """
    n, _, steps = values.shape
    ssr = np.full(values.shape, np.nan)
    for j in range(n):
        free = np.arange(n) != j
        for side in (0, 1):
            last, failures = estimate_.copy(), 0
            for k in range(steps):
                start = last.copy()
                start[j] = values[j, side, k]
                fit = fit_batch(problem, start[None, :], solver.step_factors[0], free=free,
                                tol=solver.tolerance, max_iter=solver.max_iterations)
                if fit.outcome[0] != Outcome.CONVERGED:
                    fit = fit_batch(problem, start[None, :], 1.0, free=free, method="lm",
                                    tol=solver.tolerance, max_iter=solver.max_iterations)
                if fit.outcome[0] in (Outcome.CONVERGED, Outcome.SINGULAR):
                    ssr[j, side, k] = fit.ssr[0]
                    last, failures = fit.params[0], 0
                    if fit.ssr[0] > ceiling:
                        break
                else:
                    failures += 1
                    if failures >= FAILURES_IN_A_ROW:
                        break
    return ssr


def measure(name: str, problem: Problem, start: np.ndarray, points: int, repeat: int) -> dict:
    solver = SolverSettings()
    params, _ = best_fit(problem, start, solver)
    estimates = estimate(problem, params)
    steps = (points - 1) // 2
    grid = plan_grid(params, estimates.t_quantile * estimates.std_errors, np.full(len(params), np.nan),
                     np.full(len(params), np.nan), steps, reach=4.0, fallback=np.abs(params))
    batched_times, baseline_times = [], []
    for _ in range(repeat):
        started = time.perf_counter()
        profiles = profile_all(problem, params, estimates.ssr, grid, 0.95)
        batched_times.append(time.perf_counter() - started)
        started = time.perf_counter()
        ceiling = profiles.ssr_min + CEILING_RISES * (profiles.threshold - profiles.ssr_min)
        baseline = per_side_walk(problem, params, grid.values, solver, ceiling)
        baseline_times.append(time.perf_counter() - started)
    centre = steps
    batched = np.stack([profiles.ssr[:, :centre][:, ::-1], profiles.ssr[:, centre + 1:]], axis=1)
    both = np.isfinite(batched) & np.isfinite(baseline)
    difference = np.max(np.abs(batched[both] - baseline[both]) / baseline[both]) if both.any() else None
    return {
        "problem": name, "parameters": problem.n_params, "observations": problem.n_obs,
        "profile_points": 2 * steps + 1, "batched_seconds": min(batched_times),
        "per_side_seconds": min(baseline_times), "speedup": min(baseline_times) / min(batched_times),
        "points_compared": int(both.sum()), "largest_relative_ssr_difference": difference,
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--points", type=int, default=41, help="profile grid points per parameter")
    parser.add_argument("--repeat", type=int, default=3, help="timed repetitions (the best is kept)")
    args = parser.parse_args()
    scenario = load_scenario(SCENARIO)
    exponentials, start = three_exponentials()
    results = [measure("probe-cooling", scenario.problem, scenario.start, args.points, args.repeat),
               measure("three-exponentials", exponentials, start, args.points, args.repeat)]
    print(json.dumps({"benchmark": "profile walk, batched vs one call per side", "results": results}, indent=2))


if __name__ == "__main__":
    main()
