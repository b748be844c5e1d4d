"""The batched solver every stage shares: step-factor Gauss-Newton and Levenberg-Marquardt.

``fit_batch`` fits B runs at once. Each run has its own start and step factor, and may have its
own observations (bootstrap replicates), predictors (pairs bootstrap) and weights. A mask of
free parameters holds the others fixed (profile likelihood). All arithmetic is vectorised over
the runs still working; a run leaves the working set as soon as it has an outcome.

Gauss-Newton, as audited: a ← a + α·Δ, where Δ solves J·Δ ≈ y − f in the least-squares sense,
whatever happens to the residual sum of squares. Levenberg-Marquardt: the step solves the
damped problem and is only taken when it lowers the residual sum of squares; a rejected step
raises the damping and is retried from the same factorisation.
"""
from __future__ import annotations

from contextlib import suppress
from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..jsonable import jsonable
from .compiled import compiled_applies, fit_compiled
from .iterate import Runs, run_block
from .outcomes import Outcome, outcome_counts, outcome_labels
from .problem import Problem
from .time_limit import ChunkTimeout, chunk_budget

METHODS = ("gn", "lm")

#: Runs are processed in blocks whose working arrays hold about this many numbers: large enough
#: to amortise numpy's per-call cost, small enough to stay in a core's cache. A run holds about
#: (c + 1)·m numbers (derivative rows and residuals), (2c + 1)·m with central differences.
#: Measured on the engine benchmark's problems, this beats a fixed 1024 runs by 10-25 % (best
#: blocks about 4096, 640 and 320 runs for m·(c + 1) = 150, 1000 and 2250; 128 runs for
#: m·(2c + 1) = 4250).
BLOCK_ELEMENTS = 600_000
#: Bounds on the runs per block (numpy's per-call cost dominates below the lower one).
BLOCK_RUNS = (16, 4096)


@dataclass(frozen=True)
class RefitSettings:
    """How a stage runs its refits: step factor α, method, tolerance and iteration limit."""

    step_factor: float = 1.0
    method: str = "gn"
    tolerance: float = 1e-8
    max_iterations: int = 200


@dataclass
class BatchFit:
    """The end of every run of one ``fit_batch`` call.

    Attributes:
        params: (B, n) final parameters (where the run stopped, whatever its outcome).
        ssr: (B,) weighted residual sum of squares at ``params``.
        iterations: (B,) steps taken.
        outcome: (B,) ``Outcome`` codes.
        max_rel_change: (B,) largest scaled relative change of the last step.
        step_factor: (B,) step factor of each run.
        names: parameter names.
        method: "gn" or "lm".
        history: (B, k, n) last k iterates, oldest first, NaN where fewer were made; or None.
    """

    params: np.ndarray
    ssr: np.ndarray
    iterations: np.ndarray
    outcome: np.ndarray
    max_rel_change: np.ndarray
    step_factor: np.ndarray
    names: tuple[str, ...]
    method: str
    history: np.ndarray | None = None

    @property
    def converged(self) -> np.ndarray:
        """(B,) True where the run converged."""
        return self.outcome == Outcome.CONVERGED

    def counts(self) -> dict[str, int]:
        """Number of runs per outcome."""
        return outcome_counts(self.outcome)

    def to_dict(self) -> dict:
        return jsonable({
            "method": self.method,
            "names": list(self.names),
            "params": self.params,
            "ssr": self.ssr,
            "iterations": self.iterations,
            "outcome": outcome_labels(self.outcome),
            "max_rel_change": self.max_rel_change,
            "step_factor": self.step_factor,
            "history": self.history,
            "counts": self.counts(),
        })


def fit_batch(
    problem: Problem,
    starts: np.ndarray,
    step_factor: float | np.ndarray = 1.0,
    *,
    y: np.ndarray | None = None,
    x: np.ndarray | None = None,
    weights: np.ndarray | None = None,
    free: np.ndarray | None = None,
    method: str = "gn",
    tol: float = 1e-8,
    max_iter: int = 200,
    history: int = 0,
) -> BatchFit:
    """Fit B runs of ``problem`` at once.

    Args:
        problem: the model, data and parameter names.
        starts: (B, n) starting parameters, finite.
        step_factor: α in (0, 1], one for all runs or (B,).
        y: observations, (m,) or per run (B, m); default the problem's.
        x: predictors, the problem's shape or per run ((B, m), or (k, B, m)); default the problem's.
        weights: 1/sigma², (m,) or per run (B, m), positive; default the problem's.
        free: (n,) or per run (B, n) bool, the parameters to fit; the others stay at their
            start values. Per-run masks let runs that hold different parameters fixed share one
            call (profile likelihood).
        method: "gn" (step-factor Gauss-Newton) or "lm" (Levenberg-Marquardt).
        tol: convergence when max_j |α·Δ_j| / max(|a_j|, floor_j) < tol.
        max_iter: iteration limit; a run that reaches it without another outcome is stalled.
        history: keep the last ``history`` iterates of every run (0: none).

    Returns:
        BatchFit with one entry per run, in the order of ``starts``. With ``problem.time_limit``
        the call is one chunk of that budget: once it is spent, the runs still fitting end
        ``Outcome.TIMED_OUT`` (at their start, SSR NaN) and the call returns.

    Raises:
        InputError: for arguments of the wrong shape or out of range.

    A problem with a compiled loop (formula models) fits large Gauss-Newton batches through it
    and leaves the awkward runs to the numpy path (``engine.compiled``); the results agree.
    """
    runs = _validated_runs(problem, starts, step_factor, y, x, weights, free, method, tol, max_iter, history)
    count, n = runs.starts.shape
    # Every run is written when it ends; one the chunk's time limit stops keeps these values:
    # timed out, at its start, with no SSR.
    result = BatchFit(
        params=runs.starts.copy(),
        ssr=np.full(count, np.nan),
        iterations=np.zeros(count, dtype=np.int64),
        outcome=np.full(count, Outcome.TIMED_OUT, dtype=np.int8),
        max_rel_change=np.full(count, np.nan),
        step_factor=runs.step_factor.copy(),
        names=problem.names,
        method=method,
        history=np.full((count, history, n), np.nan) if history else None,
    )
    remaining = None
    if compiled_applies(problem, runs, method, history):
        remaining = fit_compiled(problem, runs, result, tol, max_iter)
    if remaining is None:
        remaining = np.arange(count)
    # Blocks of equal size: a short last block would pay the per-iteration cost of a full one
    # for as long as its slowest run.
    blocks = -(-len(remaining) // block_size(problem, len(runs.free)))
    # The budget covers the numpy engine, where the user's model runs (the compiled loop of a
    # formula calls no Python and cannot be interrupted anyway).
    with chunk_budget(problem.time_limit), suppress(ChunkTimeout):
        for block in np.array_split(remaining, blocks) if blocks else ():
            run_block(problem, runs, block, result, method, tol, max_iter, history)
    return result


def block_size(problem: Problem, n_free: int) -> int:
    """Runs per block for ``problem`` with ``n_free`` fitted parameters."""
    rows = n_free if problem.has_jacobian else 2 * n_free
    fewest, most = BLOCK_RUNS
    return int(np.clip(BLOCK_ELEMENTS // (problem.n_obs * (rows + 1)), fewest, most))


def _validated_runs(problem, starts, step_factor, y, x, weights, free, method, tol, max_iter, history) -> Runs:
    n, m = problem.n_params, problem.n_obs
    starts = np.array(starts, dtype=float, ndmin=2)
    if starts.ndim != 2 or starts.shape[1] != n:
        raise InputError(f"starts must have shape (B, {n}), got {starts.shape}")
    if not np.all(np.isfinite(starts)):
        raise InputError("starts must be finite")
    count = starts.shape[0]
    alpha = np.broadcast_to(np.asarray(step_factor, dtype=float), (count,)).copy() if np.ndim(step_factor) == 0 \
        else np.asarray(step_factor, dtype=float)
    if alpha.shape != (count,):
        raise InputError(f"step_factor must be a number or have shape ({count},), got {alpha.shape}")
    if not np.all((alpha > 0) & (alpha <= 1)):
        raise InputError("step factors must lie in (0, 1]")
    if method not in METHODS:
        raise InputError(f"method must be one of {', '.join(METHODS)}, got {method!r}")
    if not tol > 0 or int(max_iter) < 1 or int(history) < 0:
        raise InputError("tol must be positive, max_iter at least 1 and history non-negative")
    y = problem.y if y is None else np.asarray(y, dtype=float)
    if y.shape not in ((m,), (count, m)):
        raise InputError(f"y must have shape ({m},) or ({count}, {m}), got {y.shape}")
    x = problem.x if x is None else np.asarray(x, dtype=float)
    per_run_x = list(problem.x.shape)
    per_run_x.insert(problem.runs_axis(), count)
    if x.shape not in (problem.x.shape, tuple(per_run_x)):
        raise InputError(f"x must have shape {problem.x.shape} or {tuple(per_run_x)}, got {x.shape}")
    sqrt_weights = problem.sqrt_weights
    if weights is not None:
        weights = np.asarray(weights, dtype=float)
        if weights.shape not in ((m,), (count, m)) or not np.all(weights > 0):
            raise InputError(f"weights must be positive with shape ({m},) or ({count}, {m})")
        sqrt_weights = np.sqrt(weights)
    free = np.ones(n, dtype=bool) if free is None else np.asarray(free, dtype=bool)
    if free.shape not in ((n,), (count, n)) or not np.all(free.any(axis=-1)):
        raise InputError(f"free must be {n} booleans, or ({count}, {n}) for each run, with at least one True per run")
    columns = np.flatnonzero(free.any(axis=0) if free.ndim == 2 else free)
    held = None if free.ndim == 1 or free[:, columns].all() else ~free[:, columns]
    typical = problem.typical_magnitude(starts)
    return Runs(starts=starts, step_factor=alpha, y=y, x=x, sqrt_weights=sqrt_weights,
                free=columns, held=held, typical=typical)
