"""The batched profile walk: every side of every profile moves outward from the best fit, one
``fit_batch`` call per step for all of them, until it crosses the threshold or cannot go on.

A side first walks its planned grid (``profiles.plan_grid``: even steps, or equal ratios on a
logarithmic axis, reaching a few asymptotic half-widths), which draws the profile's shape
around the interval. A side still below the threshold at the grid's end walks on with steps
that double each time (in log θ on a logarithmic axis), so that a nearly flat profile reaches a
crossing or the range bound in a few dozen refits instead of stopping at an arbitrary grid end.
Each point is warm-started from the refit of its neighbour.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..engine.batch import RefitSettings, fit_batch
from ..engine.outcomes import Outcome
from ..engine.problem import Problem

#: A side stops walking its grid once its SSR has risen this many times as far above SSR_min as
#: the threshold does (three asymptotic half-widths for a quadratic profile): the interval is
#: closed well before, and far-out refits are the slow, fragile ones.
CEILING_RISES = 9.0
#: A side also stops after this many refits in a row that failed (the region beyond is one
#: where the model or the remaining parameters break down).
FAILURES_IN_A_ROW = 3
#: Doubling steps a side may take past its grid. Without a range bound, 60 doublings reach
#: about 10¹⁸ grid spacings: a profile still below the threshold there is open for any purpose.
EXTENSION_STEPS = 60
#: Outcome code of slots that were not refitted because their side had stopped.
NOT_WALKED = -1

#: Why a side stopped, in ``SideWalk.stop``.
CROSSED, AT_BOUND, FITS_FAILED, NO_BOUND = 0, 1, 2, 3


@dataclass
class SideWalk:
    """Every walked point of R profile sides (R = 2 per parameter: down, up).

    Attributes:
        values: (R, S) pinned values, nearest first; NaN in slots not reached.
        ssr: (R, S) profile SSR; NaN where the refit failed or the slot was not walked.
        params: (R, S, n) all parameters at each point.
        outcome: (R, S) ``Outcome`` of each refit, ``NOT_WALKED`` in slots not reached.
        stop: (R,) why the side stopped: ``CROSSED``, ``AT_BOUND``, ``FITS_FAILED`` or
            ``NO_BOUND`` (its extension ran out without a range bound).
    """

    values: np.ndarray
    ssr: np.ndarray
    params: np.ndarray
    outcome: np.ndarray
    stop: np.ndarray


def walk_sides(problem: Problem, estimate: np.ndarray, pinned: np.ndarray, grid_values: np.ndarray,
               bound: np.ndarray, log: np.ndarray, threshold: float, ceiling: float, walk: RefitSettings,
               on_step=None) -> SideWalk:
    """Walk R sides at once.

    Args:
        problem: the fitted problem.
        estimate: (n,) best fit.
        pinned: (R,) parameter each side holds fixed.
        grid_values: (R, K) planned grid of each side, nearest first.
        bound: (R,) range bound in the side's direction (±inf where none).
        log: (R,) True where the side steps in log θ.
        threshold: SSR level of the interval; ceiling: SSR at which a side leaves its grid.
        walk: solver settings of the refits.
        on_step: called as on_step(k) after each step.
    """
    sides, steps = grid_values.shape
    slots, n = steps + EXTENSION_STEPS, problem.n_params
    values = np.full((sides, slots), np.nan)
    values[:, :steps] = grid_values
    ssr = np.full((sides, slots), np.nan)
    params = np.full((sides, slots, n), np.nan)
    outcome = np.full((sides, slots), NOT_WALKED, dtype=np.int8)
    stop = np.full(sides, NO_BOUND, dtype=np.int8)
    with np.errstate(divide="ignore", invalid="ignore"):
        coordinate = np.where(log[:, None], np.log(values), values)
        centre = np.where(log, np.log(estimate[pinned]), estimate[pinned])
        spacing = coordinate[:, steps - 1] - (coordinate[:, steps - 2] if steps > 1 else centre)
        # On a log axis a side without a positive bound runs towards 0 or infinity.
        bound_coordinate = np.where(log, np.where(np.isfinite(bound) & (bound > 0), np.log(bound),
                                                  np.sign(spacing) * np.inf), bound)
    last_good = np.broadcast_to(estimate, (sides, n)).copy()
    crossed = np.zeros(sides, dtype=bool)
    active = np.ones(sides, dtype=bool)
    failures = np.zeros(sides, dtype=np.int64)
    for k in range(slots):
        rows = np.flatnonzero(active)
        if not len(rows):
            break
        if k >= steps:
            reached = coordinate[rows, k - 1] + spacing[rows] * 2.0 ** (k - steps + 1)
            beyond = (reached - bound_coordinate[rows]) * np.sign(spacing[rows]) >= 0
            coordinate[rows, k] = np.where(beyond, bound_coordinate[rows], reached)
            values[rows, k] = np.where(beyond, bound[rows], np.where(log[rows], np.exp(reached), reached))
        start = last_good[rows].copy()
        start[np.arange(len(rows)), pinned[rows]] = values[rows, k]
        found, found_ssr = start, np.full(len(rows), np.nan)
        # Doubling steps on a log axis can overflow: such a point is a failed refit.
        codes = np.full(len(rows), Outcome.DIVERGED, dtype=np.int8)
        finite = np.isfinite(values[rows, k])
        if finite.any():
            found, found_ssr = found.copy(), found_ssr.copy()
            found[finite], found_ssr[finite], codes[finite] = refit_pinned(problem, start[finite],
                                                                           pinned[rows[finite]], walk)
        settled = codes == Outcome.CONVERGED
        ssr[rows[settled], k] = found_ssr[settled]
        params[rows[settled], k] = found[settled]
        outcome[rows, k] = codes
        last_good[rows[settled]] = found[settled]
        failures[rows] = np.where(settled, 0, failures[rows] + 1)
        crossed[rows[settled & (found_ssr > threshold)]] = True
        # On its grid a crossed side goes on up to the ceiling, to draw the profile past the
        # crossing; beyond the grid the first point above the threshold ends it.
        past_grid = k >= steps - 1
        done = crossed[rows] & (past_grid | (settled & (found_ssr > ceiling)))
        at_bound = values[rows, k] == bound[rows]
        failed = failures[rows] >= FAILURES_IN_A_ROW
        stop[rows] = np.where(crossed[rows], CROSSED, np.where(at_bound & settled, AT_BOUND,
                                                               np.where(settled, NO_BOUND, FITS_FAILED)))
        active[rows[done | at_bound | failed]] = False
        if on_step is not None:
            on_step(k + 1)
    return SideWalk(values=values, ssr=ssr, params=params, outcome=outcome, stop=stop)


def refit_pinned(problem: Problem, start: np.ndarray, pinned: np.ndarray,
                 walk: RefitSettings) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Refit every run with its own parameter ``pinned`` (B,) held at its start value.

    The settings' method first (Gauss-Newton by default), then Levenberg-Marquardt where it
    failed. A Levenberg-Marquardt run that settles on a rank-deficient Jacobian still sits at the
    smallest SSR along its valley, so it counts as settled for the profile. With one parameter
    there is nothing to refit: the SSR at the pinned value is the profile.

    Returns:
        (params (B, n), ssr (B,), outcome codes (B,)).
    """
    if problem.n_params == 1:
        return start, problem.ssr(start), np.full(len(start), Outcome.CONVERGED, dtype=np.int8)
    free = np.arange(problem.n_params)[None, :] != pinned[:, None]
    options = dict(tol=walk.tolerance, max_iter=walk.max_iterations)
    first = fit_batch(problem, start, walk.step_factor, free=free, method=walk.method, **options)
    found, ssr, codes = first.params.copy(), first.ssr.copy(), first.outcome.copy()
    retry = np.flatnonzero(codes != Outcome.CONVERGED)
    if len(retry):
        second = fit_batch(problem, start[retry], 1.0, free=free[retry], method="lm", **options)
        settled = np.isin(second.outcome, (Outcome.CONVERGED, Outcome.SINGULAR))
        codes[retry] = np.where(settled, Outcome.CONVERGED, second.outcome)
        found[retry] = second.params
        ssr[retry] = second.ssr
    return found, ssr, codes
