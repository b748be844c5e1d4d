"""Wall time of the whole ``fitaudit sweep`` command on a bundled scenario, fresh and cached.

    python tests/benchmarks/bench_sweep_command.py [--scenario probe-cooling] [--rounds 3] [--jobs 2]

Each round runs the command twice as a child process, the way a user does: into an empty
output folder (every chunk computed, every figure drawn), then again into the same folder
(every chunk and figure taken from the cache). It also runs the same sweep once more in a child
that times its phases: importing the command, fitting the chunks, drawing the figures. Prints
one JSON object with the minimum, median and maximum of each figure over the rounds.

The targets (issue 17): the default sweep of the bundled scenario in at most 8 s of wall time on
2 cores, its cached rerun in at most 3 s, and at most 2 s of it drawing figures. Run it on a
machine not busy with other work.
"""
from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

PHASES = '''
import json, sys, tempfile, time
from pathlib import Path
began = time.perf_counter()
from audit.cli.sweep import SweepRequest, local_mapper, run_sweep, write_figures
from audit.parallel.plan import ParallelPlan
from audit.inputs.bundled import resolve_scenario
from audit.inputs.scenario import load_scenario
imported = time.perf_counter()
scenario = load_scenario(resolve_scenario(sys.argv[1]))
plan = ParallelPlan(jobs=int(sys.argv[2]))
with tempfile.TemporaryDirectory() as folder:
    started = time.perf_counter()
    result = run_sweep(scenario, SweepRequest.from_scenario(scenario), plan, Path(folder))
    fitted = time.perf_counter()
    write_figures(result, Path(folder) / "figures", mapper=local_mapper(plan))
    drawn = time.perf_counter()
print(json.dumps({"import_s": imported - began, "sweep_s": fitted - started, "figures_s": drawn - fitted}))
'''


def command(scenario: str, folder: Path, jobs: int) -> tuple[float, float]:
    """(wall seconds, CPU seconds of the command and its workers) of one ``fitaudit sweep``."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    began = time.perf_counter()
    subprocess.run([sys.executable, "-m", "audit", "sweep", scenario, "-o", str(folder), "--jobs", str(jobs),
                    "--json"], check=False, capture_output=True)
    wall = time.perf_counter() - began
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return wall, (after.ru_utime + after.ru_stime) - (before.ru_utime + before.ru_stime)


def spread(values: list[float]) -> dict[str, float]:
    ordered = sorted(values)
    return {"min": round(ordered[0], 2), "median": round(ordered[len(ordered) // 2], 2), "max": round(ordered[-1], 2)}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scenario", default="probe-cooling")
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--jobs", type=int, default=2)
    args = parser.parse_args()
    figures: dict[str, list[float]] = {}
    for _ in range(args.rounds):
        with tempfile.TemporaryDirectory() as folder:
            for name, (wall, cpu) in (("fresh", command(args.scenario, Path(folder), args.jobs)),
                                      ("cached", command(args.scenario, Path(folder), args.jobs))):
                figures.setdefault(f"{name}_wall_s", []).append(wall)
                figures.setdefault(f"{name}_cpu_s", []).append(cpu)
        done = subprocess.run([sys.executable, "-c", PHASES, args.scenario, str(args.jobs)], check=True,
                              capture_output=True, text=True)
        for key, value in json.loads(done.stdout.splitlines()[-1]).items():
            figures.setdefault(key, []).append(value)
    print(json.dumps({"scenario": args.scenario, "jobs": args.jobs, "rounds": args.rounds,
                      **{key: spread(values) for key, values in figures.items()}}, indent=1))


if __name__ == "__main__":
    main()
