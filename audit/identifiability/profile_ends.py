"""Where each profile crosses its threshold, found by root-finding on refits.

The walk (``audit.identifiability.profile_walk``) leaves every closed side with a bracket: its last settled
point below the threshold (or the best fit) and its first point above. The crossing is the
root of

    g(θ) = sqrt(SSR_j(θ) − SSR_min) − sqrt(threshold − SSR_min),

which is linear in θ for a model linear in its parameters and smooth near the crossing
otherwise, so regula falsi on g converges fast. The Illinois rule (halve the value kept at a
bracket end that has not moved for two rounds) stops one end from sticking. Every round is one
``fit_batch`` call for all unfinished sides of all parameters, each trial warm-started from the
parameters interpolated between its bracket's ends.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..engine.batch import RefitSettings
from ..engine.outcomes import Outcome
from ..engine.problem import Problem
from .profile_walk import CROSSED, SideWalk, refit_pinned

#: A crossing is final once sqrt(SSR − SSR_min) is within this fraction of the threshold's
#: sqrt(threshold − SSR_min) (about 10 significant digits in θ away from θ ≈ 0), or once its
#: bracket is this narrow relative to θ.
END_TOLERANCE = 1e-10
#: Refinement rounds at most: regula falsi with the Illinois rule needs about ten from a walk's
#: bracket; the limit only matters where refits are noisy.
MAX_ROUNDS = 40


@dataclass
class ProfileEnds:
    """Refined crossings of R profile sides.

    Attributes:
        value: (R,) the pinned value where the profile meets the threshold; NaN where the side
            did not cross.
        params: (R, n) all parameters of the refit there.
        ssr: (R,) the refit's SSR (equal to the threshold to the refinement's tolerance).
        rounds: (R,) refinement refits spent on each side.
    """

    value: np.ndarray
    params: np.ndarray
    ssr: np.ndarray
    rounds: np.ndarray


def refine_crossings(problem: Problem, estimate: np.ndarray, ssr_min: float, threshold: float,
                     pinned: np.ndarray, walked: SideWalk, walk: RefitSettings) -> ProfileEnds:
    """Find the threshold crossing of every side whose walk crossed it.

    Args:
        problem: the fitted problem; estimate: (n,) best fit; ssr_min: its SSR.
        threshold: the interval's SSR level.
        pinned: (R,) parameter each side holds fixed; walked: the sides' walk.
        walk: solver settings of the refits.
    """
    sides, n = len(pinned), problem.n_params
    target = np.sqrt(max(threshold - ssr_min, 0.0))
    ends = ProfileEnds(value=np.full(sides, np.nan), params=np.full((sides, n), np.nan),
                       ssr=np.full(sides, np.nan), rounds=np.zeros(sides, dtype=np.int64))
    rows = np.flatnonzero(walked.stop == CROSSED)
    if not len(rows):
        return ends
    inner_value, inner_params, inner_gap, outer_value, outer_params, outer_gap = _brackets(
        estimate, ssr_min, threshold, pinned, walked, rows)
    last_moved = np.zeros(len(rows), dtype=np.int8)                   # −1 inner, +1 outer, 0 none yet
    active = np.ones(len(rows), dtype=bool)
    for _ in range(MAX_ROUNDS):
        live = np.flatnonzero(active)
        if not len(live):
            break
        share = inner_gap[live] / (inner_gap[live] - outer_gap[live])
        trial = inner_value[live] + share * (outer_value[live] - inner_value[live])
        start = inner_params[live] + share[:, None] * (outer_params[live] - inner_params[live])
        start[np.arange(len(live)), pinned[rows[live]]] = trial
        found, found_ssr, codes = refit_pinned(problem, start, pinned[rows[live]], walk)
        ends.rounds[rows[live]] += 1
        settled = codes == Outcome.CONVERGED
        # A failed refit leaves the side with its best crossing so far.
        active[live[~settled]] = False
        live, trial, found, found_ssr = live[settled], trial[settled], found[settled], found_ssr[settled]
        gap = np.sqrt(np.maximum(found_ssr - ssr_min, 0.0)) - target
        ends.value[rows[live]], ends.params[rows[live]], ends.ssr[rows[live]] = trial, found, found_ssr
        below = gap <= 0
        for moved, value, params, gap_kept, gap_other, sign in (
                (below, inner_value, inner_params, inner_gap, outer_gap, -1),
                (~below, outer_value, outer_params, outer_gap, inner_gap, 1)):
            which = live[moved]
            stuck = which[last_moved[which] == sign]
            gap_other[stuck] /= 2
            value[which], params[which], gap_kept[which] = trial[moved], found[moved], gap[moved]
            last_moved[which] = sign
        width = np.abs(outer_value[live] - inner_value[live])
        done = (np.abs(gap) <= END_TOLERANCE * target) | (width <= END_TOLERANCE * np.abs(trial))
        active[live[done]] = False
    unrefined = rows[np.isnan(ends.value[rows])]
    if len(unrefined):
        ends.value[unrefined], ends.params[unrefined] = _interpolated(
            inner_value, inner_params, inner_gap, outer_value, outer_params, outer_gap, np.isin(rows, unrefined))
    return ends


def _brackets(estimate: np.ndarray, ssr_min: float, threshold: float, pinned: np.ndarray, walked: SideWalk,
              rows: np.ndarray) -> tuple[np.ndarray, ...]:
    """Each crossed side's bracket: (inner value, params, gap, outer value, params, gap), the
    inner end the last settled point before the first one above the threshold (or the best fit)."""
    ssr = walked.ssr[rows]
    slots = ssr.shape[1]
    above = np.where(np.isfinite(ssr), ssr > threshold, False)
    first = np.argmax(above, axis=1)
    before = np.isfinite(ssr) & (np.arange(slots) < first[:, None])
    previous = np.where(before.any(axis=1), slots - 1 - np.argmax(before[:, ::-1], axis=1), -1)
    picked = np.arange(len(rows))
    from_estimate = previous < 0
    inner_value = np.where(from_estimate, estimate[pinned[rows]], walked.values[rows, previous])
    inner_params = np.where(from_estimate[:, None], estimate, walked.params[rows, previous])
    inner_ssr = np.where(from_estimate, ssr_min, ssr[picked, previous])
    target = np.sqrt(max(threshold - ssr_min, 0.0))

    def gap(values: np.ndarray) -> np.ndarray:
        return np.sqrt(np.maximum(values - ssr_min, 0.0)) - target

    return (inner_value, inner_params, gap(inner_ssr), walked.values[rows, first].copy(),
            walked.params[rows, first].copy(), gap(ssr[picked, first]))


def _interpolated(inner_value, inner_params, inner_gap, outer_value, outer_params, outer_gap,
                  which: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Regula falsi on the bracket without a refit, for sides whose every refinement refit failed."""
    share = inner_gap[which] / (inner_gap[which] - outer_gap[which])
    value = inner_value[which] + share * (outer_value[which] - inner_value[which])
    params = inner_params[which] + share[:, None] * (outer_params[which] - inner_params[which])
    return value, params
