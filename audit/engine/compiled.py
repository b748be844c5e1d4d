"""The compiled path of ``fit_batch``: a whole Gauss-Newton fit per run in one compiled loop.

A problem may carry a ``kernel``: a function that returns the compiled loop of ``kernel_loop``
for its model (formula models, where numba is installed; ``inputs.formula_kernel`` builds it),
or None when it cannot. ``fit_batch`` uses it for Gauss-Newton batches of at least
COMPILED_MIN_RUNS runs with shared predictors, no history and no per-run free masks, and hands
the runs the loop gives back (rank loss, the careful QR/SVD path, divergence, model errors,
oscillation) to the numpy engine, which replays them from their starts. Both paths do the same
arithmetic in a different summation order, so a run's result agrees to rounding (1e-10 relative
and the same outcome, tests/test_compiled_path.py), except on paths so ill-conditioned or
chaotic that the numpy engine itself ends elsewhere from a start one rounding unit away.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from .iterate import DIVERGENCE_FACTOR, OSCILLATION_WINDOW, SSR_BLOWUP, Runs, total_sum_of_squares
from .linsolve import PIVOT_TOLERANCE
from .outcomes import Outcome
from .problem import FLOOR_FRACTION, Problem

#: Status the loop writes for a run it leaves to the numpy engine (see ``kernel_loop``).
HANDED_BACK = -1
#: Fewest runs in a call for the compiled path. A process pays once for the loop (importing
#: numba and reading its disk cache take about a second; compiling a new formula, several); a
#: run on the compiled path saves 0.05-0.5 ms. Batches of a few starts (the StRD check, single
#: fits, profile refits) stay on the numpy path; the sweep's and the bootstrap's do not.
COMPILED_MIN_RUNS = 1000


def loop_source() -> str:
    """The text of ``kernel_loop.py``, read rather than imported (importing it would load numba)."""
    return Path(__file__).with_name("kernel_loop.py").read_text()


def compiled_applies(problem: Problem, runs: Runs, method: str, history: int) -> bool:
    """True when the batch is of the kind the compiled loop fits (see the module docstring)."""
    return (problem.kernel is not None and method == "gn" and not history and runs.held is None
            and runs.x.ndim == problem.x.ndim and len(runs.starts) >= COMPILED_MIN_RUNS)


def fit_compiled(problem: Problem, runs: Runs, result, tol: float, max_iter: int) -> np.ndarray | None:
    """Fit every run with the compiled loop, writing the finished ones into ``result`` (a BatchFit).

    Returns:
        The indices of the runs handed back to the numpy engine, or None when the problem's
        kernel is not available (numba missing, or the model could not be compiled).
    """
    loop = problem.kernel()
    if loop is None:
        return None
    with np.errstate(all="ignore"):
        params, ssr, iterations, status, change = run_loop(loop, runs, tol, max_iter)
    done = status != HANDED_BACK
    result.params[done], result.ssr[done] = params[done], ssr[done]
    result.iterations[done], result.max_rel_change[done] = iterations[done], change[done]
    result.outcome[done] = np.where(status[done] == Outcome.CONVERGED, Outcome.CONVERGED, Outcome.STALLED)
    return np.flatnonzero(~done)


def run_loop(loop, runs: Runs, tol: float, max_iter: int) -> tuple[np.ndarray, ...]:
    """Run ``loop`` on every run, each argument in the one layout it is compiled for.

    Returns:
        params (B, n), ssr (B,), iterations (B,), status (B,) (Outcome code or HANDED_BACK) and
        the last step's largest scaled change (B,).
    """
    def owned(values: np.ndarray) -> np.ndarray:
        # A fresh, writable C array: numba compiles one version per layout and read-only flag.
        return np.array(values, dtype=float, order="C")

    count = len(runs.starts)
    starts, typical = runs.starts, runs.typical
    sqrt_weights = np.ones(runs.y.shape[-1]) if runs.sqrt_weights is None else runs.sqrt_weights
    params, ssr, change = np.empty_like(starts), np.empty(count), np.full(count, np.nan)
    iterations, status = np.zeros(count, dtype=np.int64), np.full(count, HANDED_BACK, dtype=np.int64)
    loop(owned(np.atleast_2d(runs.x)), owned(np.atleast_2d(runs.y)), owned(np.atleast_2d(sqrt_weights)), owned(starts),
         owned(runs.step_factor), owned(FLOOR_FRACTION * typical), owned(DIVERGENCE_FACTOR * typical + np.abs(starts)),
         owned(total_sum_of_squares(runs, np.arange(count))), runs.free.astype(np.int64),
         float(tol), int(max_iter), float(PIVOT_TOLERANCE), int(OSCILLATION_WINDOW), float(SSR_BLOWUP),
         params, ssr, iterations, status, change)
    return params, ssr, iterations, status, change
