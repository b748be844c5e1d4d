"""Time per converged fit of this tree's numpy engine against another copy of the package, on one core.

Run:  git archive main | tar -x -C /tmp/engine-main
      python tests/benchmarks/bench_engine_versions.py --baseline /tmp/engine-main [--starts N] [--rounds R]

``--baseline`` is a folder holding an ``audit`` package (e.g. main's, unpacked as above); it is
loaded beside this tree's under another name, with its own ``Problem`` class, so that each side
runs its own code from the model call up. Without ``--baseline`` the script compares this tree's
Levenberg-Marquardt with every run sent down the eigen-decomposition path of the trust-region step
(``trust_region.CONDITION_LIMIT = 0``) against its usual Cholesky path.

The problems, starts and tolerance are those of ``bench_engine.py`` (2, 4 and 8 parameters;
m = 50, 200, 250), with the model written in numpy, so every fit takes the numpy path. Each round
times every solver once, one after the other (a change in the machine's load touches all alike);
the figures are medians over the rounds, and the quartiles and extremes of the per-round ratios of
the baseline's time per converged fit to this tree's. Both the wall clock and the process's CPU
time are reported: on a loaded machine the wall clock mostly measures waiting for a core, while
CPU time still counts only this process's work (though other processes still share its caches).
Every run is compared with the baseline: the counts of runs whose outcome or iteration count
differ, and the largest relative difference of the parameters where both converged. Prints one
JSON object.
"""
from __future__ import annotations

import os

for variable in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ[variable] = "1"   # one core: set before numpy loads its BLAS

import argparse  # noqa: E402
import json  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

# This tree's package, whatever else is installed (an editable install may point elsewhere).
sys.path[:0] = [str(Path(__file__).resolve().parents[2]), str(Path(__file__).resolve().parent)]
from baseline_package import baseline_module  # noqa: E402
from bench_engine import TOLERANCE, saturation, two_decays, two_peaks  # noqa: E402

from audit import Outcome, Problem, fit_batch  # noqa: E402
from audit.engine import trust_region  # noqa: E402

THIS_TREE = Path(__file__).resolve().parents[2]

def load_baseline(folder: Path):
    """The ``audit`` package under ``folder``, imported as ``baseline_audit``: (fit_batch, Problem)."""
    batch = baseline_module(folder, "engine.batch")
    problem = baseline_module(folder, "engine.problem")
    return batch.fit_batch, problem.Problem


def rebuilt(problem: Problem, problem_class) -> Problem:
    """The same model, data and Jacobian as an instance of ``problem_class``."""
    return problem_class(problem.model, problem.x, problem.y, problem.names, jacobian=problem.jacobian)


def eigen_path(fit):
    """``fit`` run with every Levenberg-Marquardt step on the eigen-decomposition path."""
    def run(*args, **kwargs):
        usual = trust_region.CONDITION_LIMIT
        trust_region.CONDITION_LIMIT = 0.0
        try:
            return fit(*args, **kwargs)
        finally:
            trust_region.CONDITION_LIMIT = usual
    return run


def measure(name: str, build, count: int, rounds: int, spread: float, seed: int, methods, baseline) -> dict:
    problem, _, truth = build()
    rng = np.random.default_rng(seed)
    starts = truth * np.exp(rng.uniform(-spread, spread, (count, truth.size)))
    if baseline is None:
        old_fit, old_problem = eigen_path(fit_batch), problem
    else:
        old_fit, old_problem = baseline[0], rebuilt(problem, baseline[1])
    sides = {"baseline": (old_fit, old_problem), "this_tree": (fit_batch, problem)}
    for fit, subject in sides.values():     # warm-up: first calls
        for method in methods:
            fit(subject, starts[:64], method=method, tol=TOLERANCE)
    figures = {"problem": name, "parameters": problem.n_params, "observations": problem.n_obs, "starts": count}
    clocks = {"cpu": time.process_time, "wall": time.perf_counter}
    for method in methods:
        per_fit = {(clock, side): [] for clock in clocks for side in sides}
        outputs = {}
        for _ in range(rounds):
            for side, (fit, subject) in sides.items():
                began = {clock: read() for clock, read in clocks.items()}
                result = fit(subject, starts, method=method, tol=TOLERANCE)
                seconds = {clock: read() - began[clock] for clock, read in clocks.items()}
                converged = max(int((np.asarray(result.outcome) == Outcome.CONVERGED).sum()), 1)
                for clock in clocks:
                    per_fit[clock, side].append(seconds[clock] / converged)
                outputs[side] = result
        old, new = outputs["baseline"], outputs["this_tree"]
        both = (np.asarray(old.outcome) == Outcome.CONVERGED) & (new.outcome == Outcome.CONVERGED)
        difference = np.abs(new.params - old.params) / np.abs(old.params)
        figures[method] = {clock: _timing(per_fit[clock, "baseline"], per_fit[clock, "this_tree"]) for clock in clocks}
        figures[method].update({
            "converged": int(both.sum()),
            "outcomes_differ": int((np.asarray(old.outcome) != new.outcome).sum()),
            "iterations_differ": int((np.asarray(old.iterations) != new.iterations).sum()),
            "largest_relative_difference": float(np.max(difference[both], initial=0.0)),
        })
    return figures


def _timing(baseline: list[float], this_tree: list[float]) -> dict:
    """Medians of the seconds per converged fit and the paired ratios' median, quartiles, extremes."""
    ratios = np.array(baseline) / np.array(this_tree)
    return {
        "baseline_us_per_converged_fit": round(1e6 * float(np.median(baseline)), 1),
        "this_tree_us_per_converged_fit": round(1e6 * float(np.median(this_tree)), 1),
        "speedup": round(float(np.median(ratios)), 3),
        "speedup_quartiles": [round(float(q), 3) for q in np.percentile(ratios, [25, 75])],
        "speedup_extremes": [round(float(ratios.min()), 3), round(float(ratios.max()), 3)],
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--baseline", type=Path, help="folder holding the other copy's audit package")
    parser.add_argument("--starts", type=int, default=1000, help="starts per problem (default 1000)")
    parser.add_argument("--rounds", type=int, default=11, help="alternating timing rounds (default 11)")
    parser.add_argument("--methods", default=None, help="gn,lm (default both with --baseline, else lm)")
    args = parser.parse_args()
    if not Path(trust_region.__file__).resolve().is_relative_to(THIS_TREE):
        raise SystemExit(f"imported {trust_region.__file__}, not this tree's package")
    baseline = load_baseline(args.baseline.resolve()) if args.baseline else None
    methods = (args.methods or ("gn,lm" if baseline else "lm")).split(",")
    report = {
        "baseline": str(args.baseline) if baseline else "this tree, every LM step on the eigen path",
        "threads": 1,
        "tolerance": TOLERANCE,
        "problems": [
            measure("saturation (2 parameters)", saturation, args.starts, args.rounds, 0.5, 1, methods, baseline),
            measure("two decays (4 parameters)", two_decays, args.starts, args.rounds, 0.4, 2, methods, baseline),
            measure("two peaks on a baseline (8 parameters)", two_peaks, args.starts, args.rounds, 0.08, 3, methods,
                    baseline),
        ],
    }
    print(json.dumps(report, indent=2))


if __name__ == "__main__":
    main()
