"""Time per converged fit of ``fit_batch`` against scipy's MINPACK Levenberg-Marquardt, on one core.

Run:  python tests/benchmarks/bench_engine.py [--starts N] [--rounds R]

The fair baseline is ``scipy.optimize.leastsq(func, Dfun=..., col_deriv=True)``: the MINPACK
routine with the least wrapper cost (``least_squares(method="lm")`` calls the same routine
through a heavier layer and is timed beside it). Three constructed problems (2, 4 and 8
parameters), the same starts, analytic Jacobian and tolerance for every solver. Each round
times every solver once, one after the other, so that a change in the machine's load touches
all of them alike; the figures are the median over the rounds and the spread (smallest and
largest) of the per-round ratios.

Every run is checked: a run converged by both the engine and leastsq must reach leastsq's
parameters within 1e-6 relative; the count of those that do not is printed as ``disagreeing``.
Each solver is charged its whole batch time per run it converged itself.

Solvers: ``leastsq``, ``least_squares``, ``gn`` and ``lm`` (the engine's numpy path, the
model written in numpy) and ``gn_formula`` / ``lm_formula`` (the same model typed as a formula,
which takes the compiled path where numba is installed). Prints one JSON object.
"""
from __future__ import annotations

import os

for variable in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ[variable] = "1"   # one core: set before numpy loads its BLAS

import argparse  # noqa: E402
import json  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402
from scipy.optimize import least_squares, leastsq  # noqa: E402

from audit import Outcome, Problem, fit_batch  # noqa: E402
from audit.engine.compiled import COMPILED_MIN_RUNS  # noqa: E402
from audit.inputs.formula import compile_formula, formula_problem_parts  # noqa: E402

TOLERANCE = 1e-8
AGREEMENT = 1e-6


def saturation() -> tuple[Problem, str, np.ndarray]:
    """2 parameters, m = 50: y = b1·(1 − exp(−b2·x))."""
    x = np.linspace(10, 800, 50)
    truth = np.array([240.0, 5.5e-4])

    def model(x, b1, b2):
        return b1 * (1 - np.exp(-b2 * x))

    def jacobian(x, b1, b2):
        decay = np.exp(-b2 * x)
        return [1 - decay, b1 * x * decay]

    return _noisy(model, jacobian, x, truth, ("b1", "b2"), 0.1), "b1 * (1 - exp(-b2 * x))", truth


def two_decays() -> tuple[Problem, str, np.ndarray]:
    """4 parameters, m = 200: a fast and a slow exponential decay."""
    x = np.linspace(0, 10, 200)
    truth = np.array([5.0, 1.3, 2.0, 0.2])

    def model(x, a, b, c, d):
        return a * np.exp(-b * x) + c * np.exp(-d * x)

    def jacobian(x, a, b, c, d):
        fast, slow = np.exp(-b * x), np.exp(-d * x)
        return [fast, -a * x * fast, slow, -c * x * slow]

    return _noisy(model, jacobian, x, truth, ("a", "b", "c", "d"), 0.01), "a * exp(-b * x) + c * exp(-d * x)", truth


def two_peaks() -> tuple[Problem, str, np.ndarray]:
    """8 parameters, m = 250: two Gaussian peaks on an exponential baseline."""
    x = np.linspace(1, 250, 250)
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

    formula = "b1 * exp(-b2 * x) + b3 * exp(-(x - b4)**2 / b5**2) + b6 * exp(-(x - b7)**2 / b8**2)"
    return _noisy(model, jacobian, x, truth, tuple(f"b{i}" for i in range(1, 9)), 2.5), formula, truth


def _noisy(model, jacobian, x, truth, names, noise) -> Problem:
    rng = np.random.default_rng(20261202)
    y = model(x, *truth) + noise * rng.standard_normal(x.size)
    return Problem(model, x, y, names, jacobian=jacobian)


def _formula_twin(problem: Problem, formula: str) -> Problem:
    """The same data with the model typed as a formula (the compiled path where it applies)."""
    compiled = compile_formula(formula, problem.names, ("x",))
    return Problem(x=problem.x, y=problem.y, names=problem.names, **formula_problem_parts(compiled))


def minpack_loop(problem: Problem, starts: np.ndarray, wrapper: str) -> tuple[np.ndarray, np.ndarray]:
    """One MINPACK lm fit per start, through ``leastsq`` or ``least_squares``: parameters, success."""
    x, y, n = problem.x, problem.y, problem.n_params
    params = np.full(starts.shape, np.nan)
    success = np.zeros(len(starts), dtype=bool)

    def residual(a):
        return problem.model(x, *a) - y

    def columns(a):     # (n, m): col_deriv=True spares MINPACK a transpose
        return np.array([np.broadcast_to(part, x.shape) for part in problem.jacobian(x, *a)])

    for row, start in enumerate(starts):
        if wrapper == "leastsq":
            found, _, _, _, status = leastsq(residual, start, Dfun=columns, col_deriv=True, full_output=True,
                                             xtol=TOLERANCE, ftol=TOLERANCE, gtol=TOLERANCE)
            params[row], success[row] = found, status in (1, 2, 3, 4)
        else:
            fit = least_squares(residual, start, jac=lambda a: columns(a).T * np.ones((x.size, n)),
                                method="lm", xtol=TOLERANCE, ftol=TOLERANCE, gtol=TOLERANCE)
            params[row], success[row] = fit.x, fit.status > 0
    return params, success


def engine_run(problem: Problem, starts: np.ndarray, method: str) -> tuple[np.ndarray, np.ndarray]:
    fit = fit_batch(problem, starts, method=method, tol=TOLERANCE)
    return fit.params, fit.outcome == Outcome.CONVERGED


def measure(name: str, build, count: int, rounds: int, spread: float, seed: int) -> dict:
    problem, formula, truth = build()
    twin = _formula_twin(problem, formula)
    rng = np.random.default_rng(seed)
    starts = truth * np.exp(rng.uniform(-spread, spread, (count, truth.size)))
    solvers = {
        "leastsq": lambda: minpack_loop(problem, starts, "leastsq"),
        "least_squares": lambda: minpack_loop(problem, starts, "least_squares"),
        "gn": lambda: engine_run(problem, starts, "gn"),
        "lm": lambda: engine_run(problem, starts, "lm"),
        "gn_formula": lambda: engine_run(twin, starts, "gn"),
        "lm_formula": lambda: engine_run(twin, starts, "lm"),
    }
    for method in ("gn", "lm"):      # warm-up: first calls
        engine_run(problem, starts[:64], method)
        engine_run(twin, starts[:64], method)
    compiled = twin.kernel is not None and twin.kernel() is not None   # compiles or loads the kernel once
    per_fit = {solver: [] for solver in solvers}
    converged, disagreeing = {}, {}
    for _ in range(rounds):
        outputs = {}
        for solver, run in solvers.items():
            began = time.perf_counter()
            params, ok = run()
            seconds = time.perf_counter() - began
            per_fit[solver].append(seconds / max(int(ok.sum()), 1))
            outputs[solver] = params, ok
        reference, reference_ok = outputs["leastsq"]
        for solver, (params, ok) in outputs.items():
            both = ok & reference_ok
            off = np.any(np.abs(params - reference) > AGREEMENT * np.abs(reference), axis=1)
            converged[solver] = int(ok.sum())
            disagreeing[solver] = max(disagreeing.get(solver, 0), int((both & off).sum()))
    baseline = np.array(per_fit["leastsq"])
    figures = {"problem": name, "parameters": problem.n_params, "observations": problem.n_obs, "starts": count,
               "rounds": rounds, "compiled_path": compiled and count >= COMPILED_MIN_RUNS}
    for solver, times in per_fit.items():
        ratios = baseline / np.array(times)
        figures[solver] = {
            "us_per_converged_fit": round(1e6 * float(np.median(times)), 2),
            "speedup_vs_leastsq": round(float(np.median(ratios)), 2),
            "speedup_spread": [round(float(ratios.min()), 2), round(float(ratios.max()), 2)],
            "converged": converged[solver],
            "disagreeing": disagreeing[solver],
        }
    return figures


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--starts", type=int, default=1000, help="starts per problem (default 1000)")
    parser.add_argument("--rounds", type=int, default=5, help="alternating timing rounds (default 5)")
    args = parser.parse_args()
    report = {
        "threads": 1,
        "tolerance": TOLERANCE,
        "problems": [
            measure("saturation (2 parameters)", saturation, args.starts, args.rounds, 0.5, 1),
            measure("two decays (4 parameters)", two_decays, args.starts, args.rounds, 0.4, 2),
            measure("two peaks on a baseline (8 parameters)", two_peaks, args.starts, args.rounds, 0.08, 3),
        ],
    }
    print(json.dumps(report, indent=2))


if __name__ == "__main__":
    main()
