"""Profile likelihood: fix one parameter on a grid, refit the others, record the residual sum of squares.

For parameter j the profile is SSR_j(θ) = min over the other parameters of SSR with a_j = θ.
Its confidence interval at level 1 − α is the set where

    SSR_j(θ) ≤ SSR_min · (1 + F(1, m − n; 1 − α) / (m − n)),

which for a model linear in its parameters is exactly the Student t interval (F(1, ν) = t²).
A side on which the profile never rises above that level, within the grid, is open: the data
do not bound the parameter there (practically non-identifiable on that side).

The walk: every side of every profile starts at the best fit and moves outward one grid point
per step; each new point is warm-started from the refit of its neighbour. One step is one
batch across all parameters and both directions (each run holds its own parameter fixed through
``fit_batch``'s per-run mask of free parameters); runs that Gauss-Newton does not settle are retried
with Levenberg-Marquardt in a second call. The crossing of the threshold is interpolated in
the signed root of SSR − SSR_min, which is linear in θ for a linear model, so the interval is
exact there and second-order accurate elsewhere.

Parameters on a logarithmic axis get a geometric grid (equal ratios, not equal differences), so
a side that runs towards zero or over decades is walked evenly in log θ.
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import partial

import numpy as np
from scipy import stats

from .engine import RefitSettings, fit_batch
from .jsonable import jsonable
from .outcomes import Outcome
from .parallel import ParallelPlan, map_chunks
from .problem import Problem

#: A side stops walking once its SSR has risen this many times as far above SSR_min as the
#: threshold does (three asymptotic half-widths for a quadratic profile): the interval is
#: closed well before, and far-out refits are the slow, fragile ones.
CEILING_RISES = 9.0
#: A side also stops after this many refits in a row that failed (the region beyond is one
#: where the model or the remaining parameters break down).
FAILURES_IN_A_ROW = 3
#: Outcome code of grid points that were not refitted because their side had stopped.
NOT_WALKED = -1

#: What the end of each side of a profile means.
SIDE_STATUS: dict[str, str] = {
    "closed": "the profile rose above the threshold: the interval ends here",
    "open_at_bound": "the profile stayed below the threshold up to the parameter's range bound",
    "open_at_grid_end": "the profile stayed below the threshold to the end of the grid",
    "open_fits_failed": "the refits failed before the profile rose above the threshold",
}


@dataclass(frozen=True)
class ProfileGrid:
    """Where each side of each profile goes.

    Attributes:
        values: (n, 2, K) pinned values, side 0 walking down, side 1 walking up, nearest first.
        clipped: (n, 2) True where the side ends at the parameter's range bound.
        log: (n,) True where the grid is geometric (equal ratios).
    """

    values: np.ndarray
    clipped: np.ndarray
    log: np.ndarray


@dataclass
class Profiles:
    """Profile likelihood of every parameter.

    Attributes:
        names: parameter names (n).
        estimate: (n,) the best fit.
        ssr_min: its residual sum of squares.
        dof: m − n.
        confidence: level of the intervals.
        f_quantile: F(1, m − n) quantile at ``confidence``.
        threshold: SSR_min·(1 + f_quantile / dof), the SSR level that bounds the interval.
        values: (n, P) grid of each profile in increasing order, the estimate in the middle.
        log: (n,) True where that grid is geometric (a parameter on a logarithmic axis).
        ssr: (n, P) profile SSR at each grid value; NaN where the refit failed.
        params: (n, P, n) all parameters at each profile point (the others refitted).
        outcome: (n, P) ``Outcome`` of each refit (the estimate itself counts as converged),
            ``NOT_WALKED`` beyond the point where a side stopped (see ``CEILING_RISES``).
        lower, upper: (n,) profile interval ends; NaN on an open side.
        lower_status, upper_status: (n,) keys of ``SIDE_STATUS``.
        lowest_ssr: smallest SSR met on any profile (below ``ssr_min`` when the best fit was
            not the least-squares minimum).
        lowest_params: (n,) parameters where ``lowest_ssr`` was met.
    """

    names: tuple[str, ...]
    estimate: np.ndarray
    ssr_min: float
    dof: int
    confidence: float
    f_quantile: float
    threshold: float
    values: np.ndarray
    log: np.ndarray
    ssr: np.ndarray
    params: np.ndarray
    outcome: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    lower_status: np.ndarray
    upper_status: np.ndarray
    lowest_ssr: float
    lowest_params: np.ndarray

    @property
    def open(self) -> np.ndarray:
        """(n,) True where either side of the profile interval is open."""
        return (self.lower_status != "closed") | (self.upper_status != "closed")

    @property
    def found_lower_ssr(self) -> bool:
        """True when a profile refit beat the best fit by more than rounding."""
        return bool(self.lowest_ssr < self.ssr_min * (1 - 1e-9) - np.finfo(float).tiny)

    def to_dict(self) -> dict:
        return jsonable({
            "confidence": self.confidence, "dof": self.dof, "f_quantile": self.f_quantile,
            "ssr_min": self.ssr_min, "threshold": self.threshold,
            "found_lower_ssr": self.found_lower_ssr, "lowest_ssr": self.lowest_ssr,
            "lowest_params": dict(zip(self.names, self.lowest_params)),
            "status_meanings": SIDE_STATUS,
            "parameters": [{
                "name": name, "estimate": self.estimate[j],
                "lower": self.lower[j], "upper": self.upper[j],
                "lower_status": self.lower_status[j], "upper_status": self.upper_status[j],
                "values": self.values[j], "log_grid": self.log[j], "ssr": self.ssr[j],
                "outcome": [_label(code) for code in self.outcome[j]],
                "others": {other: self.params[j, :, k] for k, other in enumerate(self.names) if k != j},
            } for j, name in enumerate(self.names)],
        })


def plan_grid(estimate: np.ndarray, half_width: np.ndarray, lower_bound: np.ndarray, upper_bound: np.ndarray,
              steps: int, reach: float, fallback: np.ndarray, log_axis: np.ndarray | None = None) -> ProfileGrid:
    """Grid points reaching ``reach`` asymptotic half-widths each way, clipped to the range;
    evenly spaced, or in equal ratios for parameters on a logarithmic axis.

    Args:
        estimate: (n,) best fit.
        half_width: (n,) asymptotic interval half-widths t·se (NaN or 0 where unknown).
        lower_bound, upper_bound: (n,) range ends, NaN where none.
        steps: grid points per side, K.
        reach: how many half-widths each side reaches.
        fallback: (n,) distance reached per side where the half-width is unusable and there is
            no range bound on that side.
        log_axis: (n,) True for parameters on a logarithmic axis; their grid is geometric where
            the estimate and both ends are positive (else it stays even).
    """
    usable = np.isfinite(half_width) & (half_width > 0)
    distance = np.where(usable, reach * np.where(usable, half_width, 0.0), fallback)
    ends, clipped = [], []
    for bound, direction in ((lower_bound, -1.0), (upper_bound, 1.0)):
        bounded = np.isfinite(bound) & (direction * (bound - estimate) >= 0)
        room = np.where(bounded, np.abs(bound - estimate), np.inf)
        wanted = np.where(usable | ~bounded, distance, room)
        clipped.append(bounded & (wanted >= room))
        ends.append(estimate + direction * np.minimum(wanted, room))
    ends, clipped = np.stack(ends, axis=1), np.stack(clipped, axis=1)
    log = np.zeros(len(estimate), dtype=bool) if log_axis is None else np.asarray(log_axis, dtype=bool)
    log = log & (estimate > 0) & np.all(ends > 0, axis=1)
    fraction = np.arange(1, steps + 1) / steps
    even = estimate[:, None, None] + (ends - estimate[:, None])[:, :, None] * fraction
    with np.errstate(divide="ignore", invalid="ignore"):
        geometric = estimate[:, None, None] * (ends / estimate[:, None])[:, :, None] ** fraction
    return ProfileGrid(values=np.where(log[:, None, None], geometric, even), clipped=clipped, log=log)


def profile_all(problem: Problem, estimate: np.ndarray, ssr_min: float, grid: ProfileGrid, confidence: float,
                walk: RefitSettings = RefitSettings(), plan: ParallelPlan | None = None,
                on_step=None) -> Profiles:
    """Walk every profile outward from the best fit and find where each crosses the threshold.

    Args:
        problem: the fitted problem, m > n.
        estimate: (n,) best fit; ssr_min its SSR.
        grid: from ``plan_grid``.
        confidence: interval level in (0, 1).
        walk: solver settings of the refits.
        plan: how to spread the parameters over processes (default: this process only, one
            batch per step for all parameters).
        on_step: called as on_step(done, total) after each completed step (in this process) or
            each finished group of parameters (with several processes).
    """
    n, dof = problem.n_params, problem.n_obs - problem.n_params
    steps = grid.values.shape[2]
    plan = plan or ParallelPlan(jobs=1)
    groups = [group for group in np.array_split(np.arange(n), min(plan.workers, n)) if len(group)]
    f_quantile = float(stats.f.ppf(confidence, 1, dof))
    threshold = ssr_min * (1 + f_quantile / dof)
    ceiling = ssr_min + CEILING_RISES * (threshold - ssr_min)
    walker = partial(_walk, problem, estimate, grid.values, walk, ceiling)
    side_ssr = np.full((n, 2, steps), np.nan)
    side_params = np.full((n, 2, steps, n), np.nan)
    side_outcome = np.full((n, 2, steps), NOT_WALKED, dtype=np.int8)
    if len(groups) == 1:
        found = [walker(groups[0], on_step=None if on_step is None else partial(on_step, total=steps))]
    else:
        found = []
        for done, result in enumerate(map_chunks(walker, groups, plan), start=1):
            found.append(result)
            if on_step is not None:
                on_step(done, total=len(groups))
    for group, (ssr, params, outcome) in zip(groups, found):
        side_ssr[group], side_params[group], side_outcome[group] = ssr, params, outcome

    ends, status = _crossings(estimate, ssr_min, threshold, grid, side_ssr)
    order = np.concatenate([np.arange(steps)[::-1], [-1], np.arange(steps)])
    side = np.concatenate([np.zeros(steps, dtype=int), [0], np.ones(steps, dtype=int)])

    def along(per_side: np.ndarray, centre) -> np.ndarray:
        picked = per_side[:, side, np.maximum(order, 0)]
        picked[:, steps] = centre
        return picked

    values = along(grid.values, estimate)
    ssr = along(side_ssr, ssr_min)
    params = along(side_params, estimate)
    outcome = along(side_outcome, Outcome.CONVERGED)
    lowest = np.nanargmin(np.where(np.isfinite(ssr), ssr, np.inf))
    return Profiles(
        names=problem.names, estimate=estimate, ssr_min=float(ssr_min), dof=dof, confidence=confidence,
        f_quantile=f_quantile, threshold=float(threshold), values=values, log=grid.log, ssr=ssr, params=params,
        outcome=outcome, lower=ends[:, 0], upper=ends[:, 1], lower_status=status[:, 0], upper_status=status[:, 1],
        lowest_ssr=float(ssr.flat[lowest]), lowest_params=params.reshape(-1, n)[lowest],
    )


def _walk(problem: Problem, estimate: np.ndarray, values: np.ndarray, walk: RefitSettings,
          ceiling: float, group: np.ndarray, on_step=None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Walk the profiles of the parameters in ``group`` (both sides), one batch per step.

    A side stops after its first settled point above ``ceiling``, or after
    ``FAILURES_IN_A_ROW`` failed refits in a row.

    Returns (ssr, params, outcome) of shapes (g, 2, K), (g, 2, K, n), (g, 2, K).
    """
    n, steps = problem.n_params, values.shape[2]
    pinned = np.repeat(group, 2)                                   # run r: parameter pinned[r], side r % 2
    sides = np.tile([0, 1], len(group))
    ssr = np.full((len(pinned), steps), np.nan)
    params = np.full((len(pinned), steps, n), np.nan)
    outcome = np.full((len(pinned), steps), NOT_WALKED, dtype=np.int8)
    last_good = np.broadcast_to(estimate, (len(pinned), n)).copy()
    active = np.ones(len(pinned), dtype=bool)
    failures = np.zeros(len(pinned), dtype=np.int64)
    for k in range(steps):
        rows = np.flatnonzero(active)
        if not len(rows):
            break
        value = values[pinned[rows], sides[rows], k]
        start = last_good[rows].copy()
        start[np.arange(len(rows)), pinned[rows]] = value
        if n == 1:
            found, found_ssr, codes = start, problem.ssr(start), np.full(len(rows), Outcome.CONVERGED)
        else:
            found, found_ssr, codes = _refit(problem, start, pinned[rows], walk)
        settled = codes == Outcome.CONVERGED
        ssr[rows[settled], k] = found_ssr[settled]
        params[rows[settled], k] = found[settled]
        outcome[rows, k] = codes
        last_good[rows[settled]] = found[settled]
        failures[rows] = np.where(settled, 0, failures[rows] + 1)
        active[rows[settled & (found_ssr > ceiling)]] = False
        active[failures >= FAILURES_IN_A_ROW] = False
        if on_step is not None:
            on_step(k + 1)
    if on_step is not None:
        on_step(steps)
    shape = (len(group), 2)
    return ssr.reshape(*shape, steps), params.reshape(*shape, steps, n), outcome.reshape(*shape, steps)


def _refit(problem: Problem, start: np.ndarray, pinned: np.ndarray,
           walk: RefitSettings) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Refit every run with its own parameter ``pinned`` (B,) held at its start value.

    The settings' method first (Gauss-Newton by default), then Levenberg-Marquardt where it
    failed. A Levenberg-Marquardt run that settles on a rank-deficient Jacobian still sits at the
    smallest SSR along its valley, so it counts as settled for the profile.
    """
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


def _crossings(estimate: np.ndarray, ssr_min: float, threshold: float, grid: ProfileGrid,
               side_ssr: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(n, 2) interval ends and (n, 2) side statuses from the per-side profiles (n, 2, K).

    The first grid point above the threshold closes a side; the crossing is interpolated
    between it and the last settled point before it (or the estimate), linearly in
    sqrt(SSR − SSR_min).
    """
    n, _, steps = side_ssr.shape
    above = np.where(np.isfinite(side_ssr), side_ssr > threshold, False)
    closed = above.any(axis=2)
    first = np.argmax(above, axis=2)                                            # (n, 2)
    index = np.arange(steps)
    before = np.isfinite(side_ssr) & (index < first[..., None])
    previous = np.where(before.any(axis=2), steps - 1 - np.argmax(before[..., ::-1], axis=2), -1)
    value_at = np.concatenate([np.broadcast_to(estimate[:, None, None], (n, 2, 1)), grid.values], axis=2)
    ssr_at = np.concatenate([np.full((n, 2, 1), ssr_min), side_ssr], axis=2)

    def pick(array: np.ndarray, where: np.ndarray) -> np.ndarray:
        return np.take_along_axis(array, (where + 1)[..., None], axis=2)[..., 0]

    inner_value, outer_value = pick(value_at, previous), pick(value_at, first)
    inner_root = np.sqrt(np.maximum(pick(ssr_at, previous) - ssr_min, 0.0))
    outer_root = np.sqrt(np.maximum(pick(ssr_at, first) - ssr_min, 0.0))
    target = np.sqrt(max(threshold - ssr_min, 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.clip((target - inner_root) / (outer_root - inner_root), 0.0, 1.0)
    ends = np.where(closed, inner_value + share * (outer_value - inner_value), np.nan)
    last_failed = ~np.isfinite(side_ssr[:, :, -1])
    status = np.where(closed, "closed", np.where(last_failed, "open_fits_failed",
                                                  np.where(grid.clipped, "open_at_bound", "open_at_grid_end")))
    return ends, status.astype(object)


def _label(code: int) -> str:
    return "not_walked" if code == NOT_WALKED else Outcome(int(code)).label
