"""The iteration loop behind ``fit_batch``: one block of runs, vectorised, until each has an outcome.

Every iteration evaluates the derivatives of the runs still working, factorises their step
problems together, moves them, and classifies the ones whose fate is decided. Finished runs are
written out and dropped from the working arrays at once, so the cost per iteration follows the
number of runs left.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .linsolve import StepSystem
from .outcomes import Outcome
from .problem import FLOOR_FRACTION, Problem
from .trust_region import INITIAL_RADIUS_FACTOR, TrustRegion

#: A parameter past this multiple of its typical magnitude (plus its start) has run away.
DIVERGENCE_FACTOR = 1e8
#: Non-finite model values or derivatives at a parameter past this multiple of its typical
#: magnitude (plus its start; a scenario's typical magnitude is the larger end of the range)
#: mean the run has run off to where the model overflows (diverged: an exponent parameter
#: overflows at a few hundred times its size); closer in they are the model's own failure
#: (model error).
OVERFLOW_FACTOR = 10.0
#: A residual sum of squares past this multiple of the larger of the start's and the data's own
#: sum of squares has blown up.
SSR_BLOWUP = 1e12
#: Consecutive reversing, non-improving steps that make a run oscillating.
OSCILLATION_WINDOW = 6
#: Reversing steps that shrank below this fraction of their length over OSCILLATION_WINDOW
#: iterations are closing in on a point (a damped zig-zag: Gauss-Newton's linear convergence on
#: a problem with large residuals), not cycling: a cycle's steps keep their length.
CLOSING_IN = 0.9
#: Levenberg-Marquardt: trial steps per iteration before the iteration is given up, and the
#: smallest ratio of actual to predicted decrease of the SSR for a step to be taken.
TRIAL_STEPS = 12
ACCEPTED_GAIN = 1e-4
#: Rounding noise of a weighted SSR, as a multiple of ‖r‖·‖y‖: each residual y − f loses
#: about eps·|y| to cancellation, so the SSR is uncertain by about 2·eps·Σ|r||y| ≤ 2·eps·‖r‖‖y‖.
ROUNDING_NOISE = 4 * np.finfo(float).eps


@dataclass(frozen=True)
class Runs:
    """Validated inputs of one ``fit_batch`` call (see its docstring for shapes).

    ``free`` holds the indices of the parameters fitted in any run (c of them); ``held`` is
    None when every run fits all of those, else (B, c) True where a run holds one fixed.
    """

    starts: np.ndarray
    step_factor: np.ndarray
    y: np.ndarray
    x: np.ndarray
    sqrt_weights: np.ndarray | None
    free: np.ndarray
    held: np.ndarray | None
    typical: np.ndarray


class _Working:
    """Per-run arrays of the runs still iterating; ``keep`` drops the finished ones.

    Arrays given as ``None`` (shared observations, weights or predictors) are not per run.
    """

    def __init__(self, **arrays: np.ndarray | None) -> None:
        self.per_run: list[str] = []
        for name, value in arrays.items():
            self.add(name, value)

    def add(self, name: str, value: np.ndarray | None) -> None:
        setattr(self, name, value)
        if value is not None:
            self.per_run.append(name)

    def keep(self, mask: np.ndarray) -> None:
        for name in self.per_run:
            setattr(self, name, getattr(self, name)[mask])

    def __len__(self) -> int:
        return len(self.index)


def run_block(problem: Problem, runs: Runs, block: np.ndarray, result, method: str,
              tol: float, max_iter: int, history: int) -> None:
    """Iterate the runs in ``block`` to their outcomes, writing them into ``result`` (a BatchFit)."""
    free = runs.free
    # Indexing by a slice when every parameter is fitted gives views instead of copies.
    columns = slice(None) if len(free) == problem.n_params else free
    shared_y = runs.y if runs.y.ndim == 1 else None
    shared_w = runs.sqrt_weights if runs.sqrt_weights is not None and runs.sqrt_weights.ndim == 1 else None
    shared_x = runs.x if runs.x.ndim == problem.x.ndim else None
    typical = runs.typical[block]
    starts = runs.starts[block]
    state = _Working(
        index=block,
        params=starts.copy(),
        alpha=runs.step_factor[block],
        floor=FLOOR_FRACTION * typical,
        bound=DIVERGENCE_FACTOR * typical + np.abs(starts),
        far=OVERFLOW_FACTOR * typical + np.abs(starts),
        y=None if shared_y is not None else runs.y[block],
        sqrt_w=None if runs.sqrt_weights is None or shared_w is not None else runs.sqrt_weights[block],
        x=None if shared_x is not None else np.moveaxis(problem.take_runs(runs.x, block), problem.runs_axis(), 0),
        # Levenberg-Marquardt's trust radius and largest column norms; Gauss-Newton has neither.
        radius=np.full(len(block), np.nan) if method == "lm" else None,
        norm_memory=np.zeros((len(block), len(free))) if method == "lm" else None,
        ssr_previous=np.full(len(block), np.inf),
        ssr_two_back=np.full(len(block), np.inf),
        last_move=np.zeros((len(block), len(free))),
        last_length=np.zeros(len(block)),
        reversals=np.zeros(len(block), dtype=np.int64),
        shrinking=np.zeros(len(block), dtype=bool),
        past_lengths=np.zeros((len(block), OSCILLATION_WINDOW)),
        change=np.full(len(block), np.nan),
        settled=np.zeros(len(block), dtype=bool),
        lost_rank=np.zeros(len(block), dtype=bool),
        trail=np.full((len(block), history, problem.n_params), np.nan) if history else None,
        held=None if runs.held is None else runs.held[block],
    )

    def model_x(rows: np.ndarray | None = None) -> np.ndarray:
        """Predictors in the model's layout; per-run ones are kept runs-first while iterating."""
        if state.x is None:
            return shared_x
        return np.moveaxis(state.x if rows is None else state.x[rows], 0, problem.runs_axis())

    def residual(params: np.ndarray, rows: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Weighted residuals and SSR of ``params`` for all working runs or the given rows."""
        def own(value):
            return value if value is None or rows is None else value[rows]
        x = model_x(rows)
        y = shared_y if state.y is None else own(state.y)
        weights = shared_w if state.sqrt_w is None else own(state.sqrt_w)
        weighted = y - problem.predict(params, x)
        if weights is not None:
            weighted = weighted * weights
        return weighted, np.einsum("am,am->a", weighted, weighted)

    def finish(mask: np.ndarray, code: Outcome | np.ndarray, iteration: int) -> None:
        """Write out the runs in ``mask`` with their outcome (one, or one per run in the mask)."""
        if not mask.any():
            return
        where = state.index[mask]
        result.params[where] = state.params[mask]
        result.ssr[where] = state.ssr[mask]
        result.iterations[where] = iteration
        result.outcome[where] = code
        result.max_rel_change[where] = state.change[mask]
        if history:
            order = iteration - history + 1 + np.arange(history)
            result.history[where] = np.where((order >= 0)[None, :, None],
                                             state.trail[mask][:, order % history], np.nan)
        state.keep(~mask)

    def remember(iteration: int) -> None:
        if history:
            state.trail[:, iteration % history] = state.params

    with np.errstate(all="ignore"):
        weighted, ssr = residual(state.params)
        state.add("weighted", weighted)
        state.add("ssr", ssr)
        total = total_sum_of_squares(runs, block)
        state.add("blowup", SSR_BLOWUP * np.maximum(ssr, total))
        state.add("data_norm", np.sqrt(total))
        remember(0)
        finish(~np.isfinite(state.ssr), Outcome.MODEL_ERROR, 0)
        for iteration in range(1, max_iter + 1):
            if not len(state):
                return
            rows = problem.derivative_rows(state.params, model_x(), free, state.floor)
            weights = shared_w if state.sqrt_w is None else state.sqrt_w
            if weights is not None:
                rows = [row * weights for row in rows]
            system = StepSystem.build(rows, state.weighted, state.norm_memory,
                                      held=state.held)
            if system.broken.any():
                overflowed = system.broken & (np.abs(state.params) > state.far).any(axis=1)
                finish(overflowed, Outcome.DIVERGED, iteration - 1)
                finish(system.broken[~overflowed], Outcome.MODEL_ERROR, iteration - 1)
                system = system.restricted(~system.broken)
            if method == "gn" and system.rank_deficient.any():
                finish(system.rank_deficient, Outcome.SINGULAR, iteration - 1)
                system = system.restricted(~system.rank_deficient)
            if not len(state):
                return
            if method == "gn":
                _gauss_newton_step(state, system, columns, residual, tol, iteration)
            else:
                _levenberg_marquardt_step(state, system, columns, residual, tol, iteration)
            remember(iteration)
            _classify(state, finish, iteration, tol)
        finish(np.ones(len(state), dtype=bool), Outcome.STALLED, max_iter)


def total_sum_of_squares(runs: Runs, block: np.ndarray) -> np.ndarray:
    """(len(block),) weighted sum of squares of the observations: the SSR of a zero model."""
    obs = runs.y if runs.y.ndim == 1 else runs.y[block]
    if runs.sqrt_weights is not None:
        obs = obs * (runs.sqrt_weights if runs.sqrt_weights.ndim == 1 else runs.sqrt_weights[block])
    total = np.sum(np.square(obs), axis=-1)
    return np.broadcast_to(np.maximum(total, np.finfo(float).tiny), (len(block),))


def _scaled_change(move: np.ndarray, params: np.ndarray, floor: np.ndarray) -> np.ndarray:
    """(A, c) parameter moves relative to max(|a|, floor)."""
    return move / np.maximum(np.abs(params), floor)


def _gauss_newton_step(state: _Working, system: StepSystem, columns: slice | np.ndarray, residual, tol: float,
                       iteration: int) -> None:
    """a ← a + α·Δ for every working run, whatever it does to the SSR."""
    move = state.alpha[:, None] * system.gauss_newton()
    state.params[:, columns] += move
    floor = state.floor[:, columns]
    state.change = np.max(np.abs(_scaled_change(move, state.params[:, columns], floor)), axis=1)
    state.settled = state.change < tol
    _track_reversals(state, move / floor, iteration)
    state.ssr_two_back, state.ssr_previous = state.ssr_previous, state.ssr
    state.weighted, state.ssr = residual(state.params)


def _levenberg_marquardt_step(state: _Working, system: StepSystem, columns: slice | np.ndarray, residual, tol: float,
                              iteration: int) -> None:
    """One trust-region iteration; a rejected trial shrinks the radius and is retried at once.

    The radius follows the gain ratio (actual over predicted decrease of the SSR): halved after
    a poor step, at least doubled after a good one. A run is settled when the undamped
    Gauss-Newton step from where it stands is below the tolerance (it is stationary); or when
    that step is small (below the square root of the tolerance) and the SSR can no longer tell
    better from worse: every trial down to one below the tolerance was refused, or the step just
    taken was within the SSR's rounding noise and no shorter than the one before, or part of a
    zig-zag that no longer closes in (a shrunken radius alone cannot fake convergence, and noisy
    derivatives cannot keep a run jittering at its noise floor; while the steps keep shrinking
    the gradient is still above its noise and the run goes on gaining digits the SSR can no
    longer show); or when its Jacobian has lost rank and its steps have died out.
    """
    state.norm_memory = np.maximum(state.norm_memory, system.column_norms)
    region = TrustRegion(system)
    fresh = np.isnan(state.radius)
    size = np.linalg.norm(state.norm_memory[fresh] * state.params[fresh][:, columns], axis=1)
    state.radius[fresh] = INITIAL_RADIUS_FACTOR * np.where(size > 0, size, 1.0)
    floor = state.floor[:, columns]
    full_step = _scaled_change(state.alpha[:, None] * region.full_step(), state.params[:, columns], floor)
    full_change = np.max(np.abs(full_step), axis=1)
    stationary = full_change < tol
    count = len(state)
    pending = ~stationary
    moved = np.zeros(count, dtype=bool)
    at_noise_floor = np.zeros(count, dtype=bool)
    change = np.full(count, np.inf)
    moves = np.zeros((count, system.gradient.shape[1]))
    # Accepted trials are written into the state at once: a run leaves the pending ones when it
    # moves, so nothing reads its old values afterwards; only the SSR before the step is kept.
    ssr_before = state.ssr.copy()
    for _ in range(TRIAL_STEPS):
        rows = np.flatnonzero(pending)
        if not len(rows):
            break
        alpha = state.alpha[rows]
        damped = region.damped(rows, state.radius[rows])
        move = alpha[:, None] * damped.steps
        trial = state.params[rows]
        trial[:, columns] += move
        change[rows] = np.max(np.abs(_scaled_change(move, trial[:, columns], floor[rows])), axis=1)
        trial_weighted, trial_ssr = residual(trial, rows)
        predicted = damped.predicted_reduction(alpha)
        gain = (state.ssr[rows] - trial_ssr) / predicted
        gain = np.where(np.isfinite(gain) & np.isfinite(trial).all(axis=1), gain, -np.inf)
        # Below the rounding noise of the SSR the gain ratio is noise too: a step whose
        # predicted decrease is that small is taken unless it clearly raises the SSR.
        noise = _ssr_noise(state.ssr[rows], state.data_norm[rows])
        unresolved = (predicted <= noise) & (trial_ssr <= state.ssr[rows] + noise)
        accepted = ((gain >= ACCEPTED_GAIN) & (trial_ssr < state.ssr[rows])) | unresolved
        length = alpha * damped.length
        poor = (gain < 0.25) & ~unresolved
        good = (gain > 0.75) | ((damped.damping == 0) & (gain >= 0.25))
        state.radius[rows[poor]] = 0.5 * np.minimum(state.radius[rows[poor]], length[poor])
        state.radius[rows[good]] = np.maximum(state.radius[rows[good]], 2 * length[good])
        took = rows[accepted]
        state.params[took], state.weighted[took] = trial[accepted], trial_weighted[accepted]
        state.ssr[took] = trial_ssr[accepted]
        moves[took] = move[accepted]
        moved[took] = True
        at_noise_floor[rows[unresolved & accepted]] = True
        pending[took] = False
        pending[rows[change[rows] < tol]] = False
    change[stationary] = full_change[stationary]
    state.change = change
    _track_reversals(state, moves / floor, iteration)
    near_stationary = full_change < np.sqrt(tol)
    refused = (change < tol) & ~moved
    # At the floor a zig-zag that no longer closes in is rounding, not a cycle: LM takes no step
    # that clearly raises the SSR, so it cannot cycle above the floor.
    at_rounding_floor = at_noise_floor & (~state.shrinking | _cycling(state))
    state.settled = (stationary | (near_stationary & (refused | at_rounding_floor))
                     | ((change < tol) & system.rank_deficient))
    state.lost_rank = system.rank_deficient
    state.ssr_two_back, state.ssr_previous = state.ssr_previous, ssr_before


def _ssr_noise(ssr: np.ndarray, data_norm: np.ndarray) -> np.ndarray:
    """(A,) rounding noise of the SSR (see ROUNDING_NOISE): SSR changes below it mean nothing."""
    return ROUNDING_NOISE * np.sqrt(ssr) * data_norm


def _track_reversals(state: _Working, move: np.ndarray, iteration: int) -> None:
    """Count consecutive steps that reverse the previous one and come back near the iterate
    before it (a ≈ a two steps back while a ≠ the last one).

    ``move`` (A, c) is the step in units fixed per run (not relative to the moving iterate),
    so that steps from different iterates compare. Sets ``shrinking`` where the step is shorter
    than the one before, and keeps the lengths of the last OSCILLATION_WINDOW steps before this
    one in ``past_lengths``, a ring indexed by iteration (every run of a block iterates in step),
    so that a zig-zag that shrinks (converging) can be told from a cycle.
    """
    length, last_length = np.sqrt(np.add.reduce(move * move, axis=1)), state.last_length   # as np.linalg.norm
    reversing = np.einsum("ac,ac->a", move, state.last_move) < -0.5 * length * last_length
    # Whether a reversing step comes back near the iterate before it is asked of those steps only:
    # most runs do not reverse, and the test takes two passes over the steps.
    reversed_rows = np.flatnonzero(reversing)
    back, last_move = move[reversed_rows], state.last_move[reversed_rows]
    cycling = np.max(np.abs(back + last_move), axis=1, initial=0.0) <= 0.5 * np.max(np.abs(back), axis=1, initial=0.0)
    state.shrinking = length < last_length
    reversals, cycles = np.zeros_like(state.reversals), reversed_rows[cycling]
    reversals[cycles] = state.reversals[cycles] + 1
    state.reversals = reversals
    state.past_lengths[:, iteration % OSCILLATION_WINDOW] = last_length
    state.oldest_length_slot = (iteration + 1) % OSCILLATION_WINDOW
    state.last_move, state.last_length = move, length


def _cycling(state: _Working) -> np.ndarray:
    """(A,) True where the last OSCILLATION_WINDOW steps reversed one another and the last step
    is at least CLOSING_IN times as long as the one OSCILLATION_WINDOW steps before it (a damped
    zig-zag shrinks by more)."""
    cycling = state.reversals >= OSCILLATION_WINDOW
    if cycling.any():
        cycling &= state.last_length >= CLOSING_IN * state.past_lengths[:, state.oldest_length_slot]
    return cycling


def _classify(state: _Working, finish, iteration: int, tol: float) -> None:
    """Give outcomes to the runs whose last step decided their fate.

    Non-finite or runaway parameters, an infinite or blown-up SSR, a NaN SSR past
    OVERFLOW_FACTOR typical magnitudes: diverged. A NaN SSR closer in: the model is undefined
    there (model error). A settled run whose Jacobian lost rank (Levenberg-Marquardt only;
    Gauss-Newton stops at the loss): singular. Otherwise settled: converged. Reversing steps
    for OSCILLATION_WINDOW iterations that have not shrunk over them (``_cycling``), without
    the SSR falling below its value two steps back by more than its rounding noise:
    oscillating (an SSR still falling by more than its noise, however little relative to its
    size, and steps still shrinking are progress).
    """
    magnitude = np.abs(state.params)
    finite = np.isfinite(state.ssr)
    # Not below the bound: past it, infinite or NaN.
    diverged = ~(magnitude <= state.bound).all(axis=1) | (state.ssr > state.blowup) | (state.ssr == np.inf)
    if not finite.all():
        diverged |= ~finite & (magnitude > state.far).any(axis=1)
    undefined = ~diverged & ~finite
    healthy = ~diverged & finite
    settled = healthy & state.settled
    oscillating = healthy & ~state.settled & _cycling(state)
    if oscillating.any():
        two_back = state.ssr_two_back
        not_falling = state.ssr >= two_back - _ssr_noise(two_back, state.data_norm)
        oscillating &= not_falling & (state.change > 100 * tol)
    decided = diverged | undefined | settled | oscillating
    if decided.any():
        rows = np.flatnonzero(decided)
        conditions = [diverged[rows], undefined[rows], settled[rows] & state.lost_rank[rows], settled[rows]]
        codes = np.select(conditions, [Outcome.DIVERGED, Outcome.MODEL_ERROR, Outcome.SINGULAR, Outcome.CONVERGED],
                          Outcome.OSCILLATING)
        finish(decided, codes, iteration)
