"""Fits per second of ``fit_batch`` against a loop of scipy.optimize.least_squares, on one core.

Run:  python tests/benchmarks/bench_engine.py [--starts N]

Three constructed problems (2, 4 and 8 parameters), the same starts, the same analytic
Jacobian and the same tolerance for both; then a size scan of the 4- and 8-parameter problems
with fewer observations (``--scan``). Only runs where both solvers converge to the same
point (parameters within 1e-6 relative) count; the rate is counted runs per second of the
whole batch (every run's time is charged, failed ones included). Prints one JSON object.

``model_share`` is the fraction of the engine's time spent inside the model and Jacobian
functions themselves (measured in a second, instrumented pass). ``speedup_ceiling`` bounds what
any batched engine could reach on the problem, whatever its own overhead: scipy's time per fit
over the time the model and Jacobian alone take for scipy's own numbers of evaluations per fit,
each evaluated batched at the cheapest of several batch sizes.
"""
from __future__ import annotations

import os

for variable in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[variable] = "1"   # one core: set before numpy loads its BLAS

import argparse  # noqa: E402
import json  # noqa: E402
import time  # noqa: E402
from functools import partial  # noqa: E402

import numpy as np  # noqa: E402
from scipy.optimize import least_squares  # noqa: E402

from audit import Outcome, Problem, fit_batch  # noqa: E402

TOLERANCE = 1e-8


def saturation() -> tuple[Problem, np.ndarray]:
    """2 parameters, m = 50: y = b1·(1 − exp(−b2·x))."""
    x = np.linspace(10, 800, 50)
    truth = np.array([240.0, 5.5e-4])

    def model(x, b1, b2):
        return b1 * (1 - np.exp(-b2 * x))

    def jacobian(x, b1, b2):
        decay = np.exp(-b2 * x)
        return [1 - decay, b1 * x * decay]

    return _noisy(model, jacobian, x, truth, ("b1", "b2"), 0.1), truth


def two_decays(observations: int = 200) -> tuple[Problem, np.ndarray]:
    """4 parameters, m = 200: a fast and a slow exponential decay."""
    x = np.linspace(0, 10, observations)
    truth = np.array([5.0, 1.3, 2.0, 0.2])

    def model(x, a, b, c, d):
        return a * np.exp(-b * x) + c * np.exp(-d * x)

    def jacobian(x, a, b, c, d):
        fast, slow = np.exp(-b * x), np.exp(-d * x)
        return [fast, -a * x * fast, slow, -c * x * slow]

    return _noisy(model, jacobian, x, truth, ("a", "b", "c", "d"), 0.01), truth


def two_peaks(observations: int = 250) -> tuple[Problem, np.ndarray]:
    """8 parameters, m = 250: two Gaussian peaks on an exponential baseline."""
    x = np.linspace(1, 250, observations)
    truth = np.array([98.0, 0.0105, 100.0, 67.0, 23.0, 72.0, 178.0, 18.5])

    def model(x, b1, b2, b3, b4, b5, b6, b7, b8):
        return b1 * np.exp(-b2 * x) + b3 * np.exp(-((x - b4) ** 2) / b5**2) + b6 * np.exp(-((x - b7) ** 2) / b8**2)

    def jacobian(x, b1, b2, b3, b4, b5, b6, b7, b8):
        base = np.exp(-b2 * x)
        first = np.exp(-((x - b4) ** 2) / b5**2)
        second = np.exp(-((x - b7) ** 2) / b8**2)
        return [base, -b1 * x * base,
                first, 2 * b3 * first * (x - b4) / b5**2, 2 * b3 * first * (x - b4) ** 2 / b5**3,
                second, 2 * b6 * second * (x - b7) / b8**2, 2 * b6 * second * (x - b7) ** 2 / b8**3]

    return _noisy(model, jacobian, x, truth, tuple(f"b{i}" for i in range(1, 9)), 2.5), truth


def _noisy(model, jacobian, x, truth, names, noise) -> Problem:
    rng = np.random.default_rng(20261202)
    y = model(x, *truth) + noise * rng.standard_normal(x.size)
    return Problem(model, x, y, names, jacobian=jacobian)


def scipy_loop(problem: Problem, starts: np.ndarray) -> tuple[np.ndarray, np.ndarray, float, np.ndarray]:
    """Reference: one least_squares(method="lm") call per start, same Jacobian and tolerance.

    Returns parameters, success flags, seconds, and the evaluations per fit (model, Jacobian)
    averaged over the starts.
    """
    x, y = problem.x, problem.y
    n = problem.n_params
    params = np.full(starts.shape, np.nan)
    success = np.zeros(len(starts), dtype=bool)
    evaluations = np.zeros((len(starts), 2))
    began = time.perf_counter()
    for row, start in enumerate(starts):
        fit = least_squares(lambda a: problem.model(x, *a) - y, start,
                            jac=lambda a: np.column_stack(problem.jacobian(x, *a)) * np.ones((x.size, n)),
                            method="lm", xtol=TOLERANCE, ftol=TOLERANCE, gtol=TOLERANCE)
        params[row], success[row], evaluations[row] = fit.x, fit.status > 0, (fit.nfev, fit.njev)
    return params, success, time.perf_counter() - began, evaluations.mean(axis=0)


def batched_evaluation_cost(problem: Problem, starts: np.ndarray) -> tuple[float, float]:
    """Seconds per run of one batched model call and one batched Jacobian call at the starts,
    the cheapest over batch sizes from 64 to 4096 (small batches stay in cache)."""
    cheapest = [np.inf, np.inf]
    for size in (64, 256, 1024, 4096):
        columns = [column[:, None] for column in np.resize(starts, (size, starts.shape[1])).T]
        for slot, function in enumerate((problem.model, problem.jacobian)):
            repeats = max(1, 20_000 // size)
            began = time.perf_counter()
            for _ in range(repeats):
                function(problem.x, *columns)
            cheapest[slot] = min(cheapest[slot], (time.perf_counter() - began) / (repeats * size))
    return cheapest[0], cheapest[1]


def instrumented(problem: Problem) -> tuple[Problem, list[float]]:
    """The same problem with its model and Jacobian timed; returns it and the time accumulator."""
    spent = [0.0]

    def timed(function):
        def call(*args):
            began = time.perf_counter()
            try:
                return function(*args)
            finally:
                spent[0] += time.perf_counter() - began
        return call

    return Problem(timed(problem.model), problem.x, problem.y, problem.names,
                   jacobian=timed(problem.jacobian)), spent


def measure(name: str, build, count: int, spread: float, seed: int) -> dict:
    problem, truth = build()
    rng = np.random.default_rng(seed)
    starts = truth * np.exp(rng.uniform(-spread, spread, (count, truth.size)))
    reference, reference_ok, scipy_seconds, (model_calls, jacobian_calls) = scipy_loop(problem, starts)
    model_cost, jacobian_cost = batched_evaluation_cost(problem, starts)
    figures = {"problem": name, "parameters": problem.n_params, "observations": problem.n_obs, "starts": count,
               "scipy_seconds": round(scipy_seconds, 4),
               "scipy_evaluations_per_fit": {"model": round(model_calls, 2), "jacobian": round(jacobian_calls, 2)},
               "batched_us_per_run": {"model": round(1e6 * model_cost, 3), "jacobian": round(1e6 * jacobian_cost, 3)},
               "speedup_ceiling": round(scipy_seconds / count / (model_calls * model_cost + jacobian_calls * jacobian_cost),
                                        1)}
    for method in ("gn", "lm"):
        fit_batch(problem, starts[:64], method=method, tol=TOLERANCE)          # warm-up
        began = time.perf_counter()
        result = fit_batch(problem, starts, method=method, tol=TOLERANCE)
        seconds = time.perf_counter() - began
        agree = (result.outcome == Outcome.CONVERGED) & reference_ok & np.all(
            np.abs(result.params - reference) <= 1e-6 * np.abs(reference), axis=1)
        counted = int(agree.sum())
        timed_problem, spent = instrumented(problem)
        began = time.perf_counter()
        fit_batch(timed_problem, starts, method=method, tol=TOLERANCE)
        model_share = spent[0] / (time.perf_counter() - began)
        engine_rate = counted / seconds
        scipy_rate = counted / scipy_seconds
        figures[method] = {
            "agreeing_runs": counted,
            "engine_seconds": round(seconds, 4),
            "engine_fits_per_second": round(engine_rate, 1),
            "scipy_fits_per_second": round(scipy_rate, 1),
            "speedup": round(engine_rate / scipy_rate, 2) if counted else None,
            "engine_us_per_start": round(1e6 * seconds / count, 2),
            "median_iterations": float(np.median(result.iterations)),
            "model_share": round(model_share, 3),
        }
    return figures


def size_scan(count: int, observations: list[int]) -> list[dict]:
    """The 4- and 8-parameter problems with fewer observations: where the speedup comes from."""
    rows = []
    for name, build, spread, seed in (("two decays", two_decays, 0.4, 2), ("two peaks", two_peaks, 0.08, 3)):
        for m in observations:
            figures = measure(name, partial(build, m), count, spread, seed)
            rows.append({"problem": name, "parameters": figures["parameters"], "observations": m,
                         "speedup_gn": figures["gn"]["speedup"], "speedup_lm": figures["lm"]["speedup"],
                         "speedup_ceiling": figures["speedup_ceiling"]})
    return rows


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--starts", type=int, default=3000, help="starts per problem (default 3000)")
    parser.add_argument("--scan", default="25,50,100", metavar="M,M,...",
                        help="observation counts of the size scan of the 4- and 8-parameter problems "
                             "(default 25,50,100; empty to skip)")
    args = parser.parse_args()
    report = {
        "threads": 1,
        "tolerance": TOLERANCE,
        "problems": [
            measure("saturation (2 parameters)", saturation, args.starts, 0.5, 1),
            measure("two decays (4 parameters)", two_decays, args.starts, 0.4, 2),
            measure("two peaks on a baseline (8 parameters)", two_peaks, args.starts, 0.08, 3),
        ],
        "size_scan": size_scan(args.starts, [int(m) for m in args.scan.split(",") if m.strip()]),
    }
    print(json.dumps(report, indent=2))


if __name__ == "__main__":
    main()
