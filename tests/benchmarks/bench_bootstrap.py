"""Bootstrap throughput on the bundled probe-cooling scenario: refits per second with 1 and 2 jobs.

    python tests/benchmarks/bench_bootstrap.py [--samples N] [--resampling residual|wild|pairs]

Prints one JSON object. Each job count is timed after a small warm-up run (which starts the
worker processes), so the figures are the steady rate of the refits themselves; the results
of the two runs are also compared, since they must be identical.
"""
from __future__ import annotations

import argparse
import json
import os
import time
from pathlib import Path

import numpy as np

from audit.inputs.scenario import load_scenario
from audit.parallel.plan import ParallelPlan
from audit.uncertainty.bootstrap import bootstrap_scenario, total_refits

SCENARIO = Path(__file__).resolve().parents[2] / "scenarios" / "probe-cooling"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--samples", type=int, default=100_000, help="bootstrap replicates per timed run")
    parser.add_argument("--resampling", default="residual", choices=("residual", "wild", "pairs"))
    args = parser.parse_args()
    scenario = load_scenario(SCENARIO)
    timings, results = {}, {}
    for jobs in (1, 2):
        plan = ParallelPlan(jobs=jobs)
        bootstrap_scenario(scenario, method=args.resampling, samples=2000, plan=plan)
        started = time.perf_counter()
        results[jobs] = bootstrap_scenario(scenario, method=args.resampling, samples=args.samples, plan=plan)
        timings[jobs] = time.perf_counter() - started
    refits = total_refits(scenario.problem, args.samples)
    rate = {jobs: args.samples / seconds for jobs, seconds in timings.items()}
    print(json.dumps({
        "scenario": SCENARIO.name, "method": args.resampling, "samples": args.samples,
        "refits_including_jackknife": refits, "cores": os.cpu_count(),
        "seconds": {f"jobs_{jobs}": round(seconds, 3) for jobs, seconds in timings.items()},
        "replicates_per_second": {f"jobs_{jobs}": round(value) for jobs, value in rate.items()},
        "speedup_2_over_1": round(rate[2] / rate[1], 3),
        "used": results[1].used,
        "identical_results": bool(np.array_equal(results[1].replicates.params, results[2].replicates.params)),
    }, indent=2))


if __name__ == "__main__":
    main()
