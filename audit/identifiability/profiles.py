"""Profile likelihood: fix one parameter at a time, refit the others, record the residual sum of squares.

For parameter j the profile is SSR_j(θ) = min over the other parameters of SSR with a_j = θ.
Its confidence interval at level 1 − α is the set where

    SSR_j(θ) ≤ SSR_min · (1 + F(1, m − n; 1 − α) / (m − n)),

which for a model linear in its parameters is exactly the Student t interval (F(1, ν) = t²).
A side on which the profile stays below that level up to the parameter's range bound is open:
the data do not bound the parameter there (practically non-identifiable on that side).

Each side of every profile is walked outward from the best fit (``audit.identifiability.profile_walk``: the
planned grid, then doubling steps up to the range bound), all sides of all parameters in one
``fit_batch`` call per step, each run holding its own parameter fixed through the per-run mask of
free parameters. Every side that crossed the threshold then has its crossing refined by
root-finding on refits (``audit.identifiability.profile_ends``), again all sides together, to about ten
significant digits. A side is open only at its range bound, where the refits failed, or (for a
parameter without a range) after the walk's doubling steps ran out.

Parameters on a logarithmic axis get a geometric grid (equal ratios, not equal differences), so
a side that runs towards zero or over decades is walked evenly in log θ.
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import partial

import numpy as np
from scipy import stats

from ..engine.batch import RefitSettings
from ..engine.outcomes import Outcome
from ..engine.problem import Problem
from ..jsonable import jsonable
from ..parallel.plan import ParallelPlan, map_chunks
from .profile_ends import ProfileEnds, refine_crossings
from .profile_walk import AT_BOUND, CEILING_RISES, CROSSED, FITS_FAILED, NOT_WALKED, SideWalk, walk_sides

#: What the end of each side of a profile means.
SIDE_STATUS: dict[str, str] = {
    "closed": "the profile rose above the threshold: the interval ends here",
    "open_at_bound": "the profile stayed below the threshold up to the parameter's range bound",
    "open_fits_failed": "the refits failed before the profile rose above the threshold",
    "open_no_bound": "the parameter has no range and the profile stayed below the threshold for 10^18 grid steps",
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
        values: (n, P) pinned values of each profile in increasing order, the estimate in the
            middle: each side's planned grid, then the points its walk added beyond the grid
            (NaN in slots of sides that stopped sooner).
        log: (n,) True where that grid is geometric (a parameter on a logarithmic axis).
        ssr: (n, P) profile SSR at each value; NaN where the refit failed or was not run.
        params: (n, P, n) all parameters at each profile point (the others refitted).
        outcome: (n, P) ``Outcome`` of each refit (the estimate itself counts as converged),
            ``NOT_WALKED`` beyond the point where a side stopped (see
            ``profile_walk.CEILING_RISES``).
        lower, upper: (n,) profile interval ends, refined by root-finding on refits; NaN on an
            open side.
        lower_status, upper_status: (n,) keys of ``SIDE_STATUS``.
        end_ssr: (n, 2) SSR of the refits at the lower and upper ends (the threshold, to the
            refinement's tolerance); NaN on an open side.
        end_params: (n, 2, n) all parameters at those ends.
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
    end_ssr: np.ndarray
    end_params: np.ndarray
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
                "end_ssr": self.end_ssr[j],
                "end_others": [{other: self.end_params[j, side, k] for k, other in enumerate(self.names) if k != j}
                               for side in range(2)],
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
    values = np.where(log[:, None, None], geometric, even)
    # A clipped side ends exactly on its bound, so that the walk knows it got there.
    values[..., -1] = np.where(clipped, np.stack([lower_bound, upper_bound], axis=1), values[..., -1])
    return ProfileGrid(values=values, clipped=clipped, log=log)




def profile_all(problem: Problem, estimate: np.ndarray, ssr_min: float, grid: ProfileGrid, confidence: float,
                walk: RefitSettings = RefitSettings(), plan: ParallelPlan | None = None,
                on_step=None, lower_bound: np.ndarray | None = None,
                upper_bound: np.ndarray | None = None) -> Profiles:
    """Walk every profile outward from the best fit and find where each crosses the threshold.

    Args:
        problem: the fitted problem, m > n.
        estimate: (n,) best fit; ssr_min its SSR.
        grid: from ``plan_grid``.
        confidence: interval level in (0, 1).
        walk: solver settings of the refits.
        plan: how to spread the parameters over processes (default: this process only, one
            batch per step for all parameters).
        on_step: called as on_step(done, total) after each completed grid step (in this
            process) or each finished group of parameters (with several processes).
        lower_bound, upper_bound: (n,) range ends the walk may reach, NaN where none
            (default: none).
    """
    n, dof = problem.n_params, problem.n_obs - problem.n_params
    steps = grid.values.shape[2]
    plan = plan or ParallelPlan(jobs=1)
    groups = [group for group in np.array_split(np.arange(n), min(plan.workers, n)) if len(group)]
    f_quantile = float(stats.f.ppf(confidence, 1, dof))
    threshold = ssr_min * (1 + f_quantile / dof)
    no_bound = np.full(n, np.nan)
    bounds = np.stack([np.nan_to_num(no_bound if lower_bound is None else lower_bound, nan=-np.inf),
                       np.nan_to_num(no_bound if upper_bound is None else upper_bound, nan=np.inf)], axis=1)
    walker = partial(_profile_group, problem, estimate, ssr_min, threshold, grid, bounds, walk)
    if len(groups) == 1:
        found = [walker(groups[0], on_step=None if on_step is None else
                        lambda done: on_step(min(done, steps), total=steps))]
    else:
        found = []
        for done, result in enumerate(map_chunks(walker, groups, plan), start=1):
            found.append(result)
            if on_step is not None:
                on_step(done, total=len(groups))
    return _assemble(problem, estimate, ssr_min, dof, confidence, f_quantile, threshold, grid, groups, found)


def _profile_group(problem: Problem, estimate: np.ndarray, ssr_min: float, threshold: float, grid: ProfileGrid,
                   bounds: np.ndarray, walk: RefitSettings, group: np.ndarray,
                   on_step=None) -> tuple[SideWalk, ProfileEnds]:
    """Walk both sides of the parameters in ``group`` and refine their crossings (rows: parameter
    group[r // 2], side r % 2)."""
    pinned, sides = np.repeat(group, 2), np.tile([0, 1], len(group))
    ceiling = ssr_min + CEILING_RISES * (threshold - ssr_min)
    walked = walk_sides(problem, estimate, pinned, grid.values[pinned, sides], bounds[pinned, sides],
                        grid.log[pinned], threshold, ceiling, walk, on_step)
    return walked, refine_crossings(problem, estimate, ssr_min, threshold, pinned, walked, walk)


def _assemble(problem: Problem, estimate: np.ndarray, ssr_min: float, dof: int, confidence: float,
              f_quantile: float, threshold: float, grid: ProfileGrid, groups: list[np.ndarray],
              found: list[tuple[SideWalk, ProfileEnds]]) -> Profiles:
    """Lay the groups' sides out as profiles in increasing order, the estimate in the middle."""
    n, steps = problem.n_params, grid.values.shape[2]
    walked_slots = max(int(np.max(np.flatnonzero((walked.outcome != NOT_WALKED).any(axis=0)), initial=-1)) + 1
                       for walked, _ in found)
    slots = max(steps, walked_slots)
    side_values = np.full((n, 2, slots), np.nan)
    side_ssr = np.full((n, 2, slots), np.nan)
    side_params = np.full((n, 2, slots, n), np.nan)
    side_outcome = np.full((n, 2, slots), NOT_WALKED, dtype=np.int8)
    ends, end_ssr, end_params = np.full((n, 2), np.nan), np.full((n, 2), np.nan), np.full((n, 2, n), np.nan)
    stop = np.zeros((n, 2), dtype=np.int8)
    for group, (walked, refined) in zip(groups, found):
        side_values[group] = walked.values[:, :slots].reshape(len(group), 2, slots)
        side_ssr[group] = walked.ssr[:, :slots].reshape(len(group), 2, slots)
        side_params[group] = walked.params[:, :slots].reshape(len(group), 2, slots, n)
        side_outcome[group] = walked.outcome[:, :slots].reshape(len(group), 2, slots)
        stop[group] = walked.stop.reshape(len(group), 2)
        ends[group] = refined.value.reshape(len(group), 2)
        end_ssr[group] = refined.ssr.reshape(len(group), 2)
        end_params[group] = refined.params.reshape(len(group), 2, n)
    status = np.select([stop == CROSSED, stop == AT_BOUND, stop == FITS_FAILED],
                       ["closed", "open_at_bound", "open_fits_failed"], "open_no_bound").astype(object)
    order = np.concatenate([np.arange(slots)[::-1], [-1], np.arange(slots)])
    side = np.concatenate([np.zeros(slots, dtype=int), [0], np.ones(slots, dtype=int)])

    def along(per_side: np.ndarray, centre) -> np.ndarray:
        picked = per_side[:, side, np.maximum(order, 0)]
        picked[:, slots] = centre
        return picked

    values = along(side_values, estimate)
    ssr = along(side_ssr, ssr_min)
    params = along(side_params, estimate)
    outcome = along(side_outcome, Outcome.CONVERGED)
    lowest = np.nanargmin(np.where(np.isfinite(ssr), ssr, np.inf))
    return Profiles(
        names=problem.names, estimate=estimate, ssr_min=float(ssr_min), dof=dof, confidence=confidence,
        f_quantile=f_quantile, threshold=float(threshold), values=values, log=grid.log, ssr=ssr, params=params,
        outcome=outcome, lower=ends[:, 0], upper=ends[:, 1], lower_status=status[:, 0], upper_status=status[:, 1],
        end_ssr=end_ssr, end_params=end_params, lowest_ssr=float(ssr.flat[lowest]),
        lowest_params=params.reshape(-1, n)[lowest],
    )


def _label(code: int) -> str:
    return "not_walked" if code == NOT_WALKED else Outcome(int(code)).label
