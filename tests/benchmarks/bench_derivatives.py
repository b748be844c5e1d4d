"""Derivative audit timing on the bundled probe-cooling scenario.

    python tests/benchmarks/bench_derivatives.py [--check-points N] [--repeats R]

Prints one JSON object: the whole audit (best fit, numeric derivatives, comparison) for N
sampled points, and the numeric derivatives of all points in one batched numdifftools call
against one call per point (the same steps, so the values must agree), as seconds and ratio.
"""
from __future__ import annotations

import argparse
import json
import os
import time
from pathlib import Path

import numpy as np

from audit.derivatives.check import audit_derivatives
from audit.derivatives.numeric import numeric_derivatives
from audit.derivatives.points import check_points
from audit.inputs.scenario import load_scenario

SCENARIO = Path(__file__).resolve().parents[2] / "scenarios" / "probe-cooling"


def best_of(repeats: int, work) -> tuple[float, object]:
    timings, result = [], None
    for _ in range(repeats):
        started = time.perf_counter()
        result = work()
        timings.append(time.perf_counter() - started)
    return min(timings), result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--check-points", type=int, default=100, help="sampled check points")
    parser.add_argument("--repeats", type=int, default=3, help="timed repeats (the best is reported)")
    args = parser.parse_args()
    scenario = load_scenario(SCENARIO)
    problem = scenario.problem
    points = check_points(problem, scenario.parameters, scenario.solver, args.check_points,
                          scenario.derivatives.seed).params

    audit_seconds, audit = best_of(args.repeats, lambda: audit_derivatives(scenario, args.check_points))
    batched_seconds, batched = best_of(args.repeats, lambda: numeric_derivatives(problem, points))
    looped_seconds, looped = best_of(args.repeats, lambda: [numeric_derivatives(problem, row[None, :])
                                                            for row in points])
    looped_values = np.concatenate([part.values for part in looped])
    print(json.dumps({
        "scenario": SCENARIO.name, "check_points": len(points), "observations": problem.n_obs,
        "parameters": problem.n_params, "cores": os.cpu_count(),
        "audit_seconds": round(audit_seconds, 3),
        "verdicts": list(audit.verdict),
        "numeric_batched_seconds": round(batched_seconds, 3),
        "numeric_one_call_per_point_seconds": round(looped_seconds, 3),
        "speedup_batched_over_per_point": round(looped_seconds / batched_seconds, 2),
        "largest_difference_batched_vs_per_point": float(np.max(np.abs(batched.values - looped_values))),
    }, indent=2))


if __name__ == "__main__":
    main()
