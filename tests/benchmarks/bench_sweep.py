"""Sweep throughput and memory: a million starts of a 4-parameter problem with 200 observations.

    python tests/benchmarks/bench_sweep.py [--starts N] [--step-factors 1,0.5] [--jobs 1,2]

Prints one JSON object. Each job count runs in a fresh child process with an empty cache, so
its peak resident memory (``resource.getrusage`` maxrss) is that of the whole sweep: with one
job every fit runs in that process; with more, the workers' peak is measured after they were
shut down and reaped. The model is a logistic rise with an offset (4 parameters), the data 200
points generated here with a fixed seed. Throughput is starts per second (each start fitted
with every step factor), basin maps included (they add resolution² starts). The results of the
job counts are compared, since they must be identical.

The targets: peak memory below 1.5 GB for 10⁶ starts, and 2 jobs at least 1.6× the 1-job rate
on 2 cores (on a machine not busy with other work).
"""
from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import textwrap
import time
from pathlib import Path

import numpy as np

MEMORY_LIMIT_MB = 1536
MODEL = '''
import numpy as np


def model(t, offset, height, midpoint, width):
    return offset + height / (1 + np.exp(-(t - midpoint) / width))


def jacobian(t, offset, height, midpoint, width):
    rise = 1 / (1 + np.exp(-(t - midpoint) / width))
    slope = height * rise * (1 - rise)
    return [np.ones_like(rise), rise, -slope / width, -slope * (t - midpoint) / width**2]
'''
SCENARIO = '''
title = "benchmark: logistic rise with offset"
[data]
file = "data.csv"
x = "t"
y = "y"
[model]
file = "model.py"
jacobian = "jacobian"
[parameters]
offset = {{ start = 0.0, range = [-5.0, 5.0] }}
height = {{ start = 10.0, range = [1.0, 100.0], scale = "log" }}
midpoint = {{ start = 5.0, range = [0.0, 10.0] }}
width = {{ start = 1.0, range = [0.1, 10.0], scale = "log" }}
[solver]
step_factors = {step_factors}
max_iterations = 100
[sweep]
design = "sobol"
points = {points}
maps = [["midpoint", "width"]]
resolution = {resolution}
'''


def write_scenario(folder: Path, points: int, step_factors: list[float], resolution: int) -> Path:
    """The benchmark scenario: 200 noisy points of a known logistic rise (seeded)."""
    rng = np.random.default_rng(20261201)
    t = np.linspace(0, 10, 200)
    y = 1.5 + 20 / (1 + np.exp(-(t - 4) / 1.2)) + rng.normal(0, 0.5, t.size)
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "data.csv").write_text("t,y\n" + "".join(f"{a:.6f},{b:.6f}\n" for a, b in zip(t, y)))
    (folder / "model.py").write_text(textwrap.dedent(MODEL))
    (folder / "scenario.toml").write_text(SCENARIO.format(points=points, step_factors=step_factors,
                                                          resolution=resolution))
    return folder


def child(scenario: Path, jobs: int, out: Path) -> None:
    """Run one sweep and print its timing, memory and a digest of the result."""
    from joblib.externals.loky import get_reusable_executor

    from audit.inputs.scenario import load_scenario
    from audit.parallel.plan import ParallelPlan
    from audit.sweep.run import SweepRequest, run_sweep

    loaded = load_scenario(scenario)
    started = time.perf_counter()
    result = run_sweep(loaded, SweepRequest.from_scenario(loaded), ParallelPlan(jobs=jobs), out)
    seconds = time.perf_counter() - started
    get_reusable_executor().shutdown(wait=True)
    payload = result.to_dict()
    payload.pop("cache")
    print(json.dumps({
        "seconds": seconds, "starts": result.points + sum(m.category[0, 0].size for m in result.maps),
        "peak_mb_main": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
        "peak_mb_largest_worker": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024,
        "basin_share": result.shares[..., 0].tolist(),
        "digest": hash(json.dumps(payload, sort_keys=True)),
    }))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--starts", type=int, default=1_000_000, help="design starts (default 1,000,000)")
    parser.add_argument("--step-factors", default="1,0.5", help="comma-separated step factors (default 1,0.5)")
    parser.add_argument("--jobs", default="1,2", help="job counts to compare (default 1,2)")
    parser.add_argument("--resolution", type=int, default=51, help="basin map points per axis (default 51)")
    parser.add_argument("--child", nargs=3, metavar=("SCENARIO", "JOBS", "OUT"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child(Path(args.child[0]), int(args.child[1]), Path(args.child[2]))
        return
    factors = [float(item) for item in args.step_factors.split(",")]
    runs = {}
    with tempfile.TemporaryDirectory(prefix="bench-sweep-") as temporary:
        scenario = write_scenario(Path(temporary) / "scenario", args.starts, factors, args.resolution)
        for jobs in (int(item) for item in args.jobs.split(",")):
            # The same hash seed in every child, so that the result digests can be compared.
            environment = {**os.environ, "PYTHONHASHSEED": "0"}
            finished = subprocess.run([sys.executable, __file__, "--child", str(scenario), str(jobs),
                                       str(Path(temporary) / f"out-{jobs}")], capture_output=True, text=True,
                                      check=True, env=environment)
            runs[jobs] = json.loads(finished.stdout.strip().splitlines()[-1])
    rate = {jobs: run["starts"] / run["seconds"] for jobs, run in runs.items()}
    first = min(runs)
    peak = max(run["peak_mb_main"] + jobs * run["peak_mb_largest_worker"] * (jobs > 1) for jobs, run in runs.items())
    print(json.dumps({
        "design_points": args.starts, "step_factors": factors, "observations": 200, "parameters": 4,
        "starts_including_maps": runs[first]["starts"], "cores": os.cpu_count(),
        "seconds": {f"jobs_{jobs}": round(run["seconds"], 2) for jobs, run in runs.items()},
        "starts_per_second": {f"jobs_{jobs}": round(value) for jobs, value in rate.items()},
        "speedup_over_1_job": {f"jobs_{jobs}": round(value / rate[first], 3) for jobs, value in rate.items()},
        "peak_memory_mb": {f"jobs_{jobs}": {"main": round(run["peak_mb_main"]),
                                            "largest_worker": round(run["peak_mb_largest_worker"])}
                           for jobs, run in runs.items()},
        "peak_memory_mb_upper_bound": round(peak),
        "under_memory_limit": bool(peak < MEMORY_LIMIT_MB),
        "basin_share": runs[first]["basin_share"],
        "identical_results": len({run["digest"] for run in runs.values()}) == 1,
    }, indent=2))


if __name__ == "__main__":
    main()
