"""Solutions that give the best fit's curve with other parameters: symmetries and aliases.

Some models give exactly the same curve for two parameter sets: a sum of two exponentials with
its terms exchanged (a, b ↔ c, d), a peak whose width enters squared (w ↔ −w), a phase shifted
by a full period. A sweep finds both sets as distinct solutions with the same SSR, which alone
looks like parameters the data cannot determine. Two tests tell a symmetry apart from a flat
valley: the curves agree far more closely than the residuals' size, and the two sets are many
asymptotic standard errors apart (a flat valley has large standard errors, so its end points
are close in those units).

A curve can also agree only at the sampled x: a sinusoid sampled every Δt gives the same values
with its frequency raised by 2π/Δt, and different ones between the samples. That is an alias,
not a symmetry of the model, and the only honest test is to look between the samples: both
curves are evaluated at fractions ``BETWEEN_FRACTIONS`` of the way from each sample to the next
and compared with the same tolerance as at the samples.

``SameCurve`` applies the curve test alone to any number of end points at once: the sweep uses
it to count every converged run that reached the best fit's curve, including runs whose
solution fell beyond the catalogue's limit.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..engine.estimates import estimate
from ..engine.problem import CURVE_FLOOR, CURVE_TOLERANCE, Problem
from ..errors import InputError
from .parameter_relation import relations

#: Two solutions are distinct minima, not points of one flat valley, when some parameter
#: differs by more than this many asymptotic standard errors at the best fit.
DISTINCT_STD_ERRORS = 10.0
#: Where curves are compared between the samples, as fractions of the way to the next sample:
#: multiples of the golden ratio's fractional part, which no whole number of alias periods
#: k·(2π/Δt)·u brings back to a multiple of 2π at all of them (a rational fraction such as 1/2
#: would hide every even k).
BETWEEN_FRACTIONS = np.mod(np.arange(1, 6) * (np.sqrt(5.0) - 1.0) / 2.0, 1.0)

#: The kinds of equivalence, as ``Equivalence.kind`` names them (several joined by " and ").
EXCHANGE = "exchange"
MIRROR = "mirror"
PERIOD_SHIFT = "period shift"
ALIAS = "alias at the sample points"
OTHER_SYMMETRY = "other symmetry"


class SameCurve:
    """The curve test against one best fit, for any number of parameter sets at once.

    A parameter set gives the best fit's curve when the weighted difference of the two curves
    at the samples is at most ``limit``: CURVE_TOLERANCE of the best fit's weighted residual
    norm, plus CURVE_FLOOR of the weighted data's norm.
    """

    def __init__(self, problem: Problem, best: np.ndarray) -> None:
        self.problem = problem
        self.best_residuals = problem.residuals(np.asarray(best, dtype=float)[None, :])[0]
        self.limit = (CURVE_TOLERANCE * np.linalg.norm(self.best_residuals)
                      + CURVE_FLOOR * np.linalg.norm(problem.weighted_y))

    def __call__(self, params: np.ndarray) -> np.ndarray:
        """(k,) True where ``params`` (k, n) give the best fit's curve at the samples; one model
        call for all of them."""
        params = np.asarray(params, dtype=float).reshape(-1, self.problem.n_params)
        if not len(params):
            return np.zeros(0, dtype=bool)
        difference = np.linalg.norm(self.problem.residuals(params) - self.best_residuals, axis=1)
        return np.nan_to_num(difference, nan=np.inf) <= self.limit


@dataclass(frozen=True)
class Equivalence:
    """Which catalogued solutions reproduce the best fit (row 0) with other parameters.

    Attributes:
        same_curve: (S,) True where the solution gives the best fit's curve at the samples and
            is a distinct minimum (row 0 itself is False).
        kind: (S,) for those, ``ALIAS`` when the curves differ between the samples, else the
            kinds of mapping that explain the parameters (``EXCHANGE``, ``MIRROR``,
            ``PERIOD_SHIFT``, joined by " and "), or ``OTHER_SYMMETRY``; "" elsewhere.
        relation: (S,) how the parameters map onto the best fit's, e.g. "a↔c, b↔d", "w → −w",
            "phase + 1×6.28319" (see ``parameter_relation``); "" where that does not explain them.
    """

    same_curve: np.ndarray
    kind: list[str]
    relation: list[str]


def find_equivalent(problem: Problem, params: np.ndarray, ssr_level: np.ndarray,
                    parameter_relative: float, floor: np.ndarray) -> Equivalence:
    """Mark and name the solutions among ``params`` (S, n) that repeat the best one's (row 0) curve.

    Args:
        problem: the fitted problem.
        params: (S, n) catalogued solutions, the best first.
        ssr_level: (S,) True where a solution's SSR equals the best's within tolerance.
        parameter_relative, floor: when two parameter values are the same (as for clustering).
    """
    count = len(params)
    same_curve = np.zeros(count, dtype=bool)
    kind, relation = [""] * count, [""] * count
    candidates = np.flatnonzero(ssr_level)
    candidates = candidates[candidates > 0]
    if not len(candidates):
        return Equivalence(same_curve=same_curve, kind=kind, relation=relation)
    curve = SameCurve(problem, params[0])
    same_curve[candidates] = curve(params[candidates]) & _distinct_minima(problem, params[0], params[candidates])
    equivalent = np.flatnonzero(same_curve)
    everywhere = np.zeros(count, dtype=bool)
    everywhere[equivalent] = _same_between_samples(problem, params[0], params[equivalent], curve.limit)
    def same_everywhere(candidates: np.ndarray) -> np.ndarray:
        return curve(candidates) & _same_between_samples(problem, params[0], candidates, curve.limit)

    # An alias's shifts are periods of the sampling (2π/Δt in a frequency), found at the samples
    # alone; a symmetry's are periods of the model, found between the samples too.
    for group, same in ((equivalent[everywhere[equivalent]], same_everywhere),
                        (equivalent[~everywhere[equivalent]], curve)):
        for s, found in zip(group, relations(problem.names, params[0], params[group], parameter_relative, floor,
                                             same)):
            relation[s] = found.text
            if not everywhere[s]:
                kind[s] = ALIAS
            elif found.text:
                kind[s] = " and ".join(name for name, present in ((EXCHANGE, found.exchange), (MIRROR, found.mirror),
                                                                  (PERIOD_SHIFT, found.shift)) if present)
            else:
                kind[s] = OTHER_SYMMETRY
    return Equivalence(same_curve=same_curve, kind=kind, relation=relation)


def _distinct_minima(problem: Problem, best: np.ndarray, others: np.ndarray) -> np.ndarray:
    """(k,) True where a solution is more than DISTINCT_STD_ERRORS standard errors from the best."""
    try:
        std_errors = estimate(problem, best).std_errors
    except InputError:
        return np.zeros(len(others), dtype=bool)
    with np.errstate(divide="ignore", invalid="ignore"):
        distance = np.abs(others - best) / std_errors
    return np.any(distance > DISTINCT_STD_ERRORS, axis=1) & np.all(np.isfinite(std_errors))


def _same_between_samples(problem: Problem, best: np.ndarray, others: np.ndarray, limit: float) -> np.ndarray:
    """(k,) True where ``others`` (k, n) also give the best fit's curve between the samples.

    The points between lie on the segments from each sample to its neighbour (the next larger x
    for one predictor, the next row for several; the last sample looks back), with the weights
    interpolated along them. The weighted difference over all of them, scaled to the number of
    samples, must stay within the curve test's ``limit``. Where the model gives no finite value at a
    point for one curve and does for the other, the curves differ.
    """
    x, count = problem.x, problem.n_obs
    order = np.argsort(x, kind="stable") if x.ndim == 1 else np.arange(count)
    neighbour = np.empty(count, dtype=np.int64)
    neighbour[order[:-1]] = order[1:]
    neighbour[order[-1]] = order[-2] if count > 1 else order[-1]
    fractions = BETWEEN_FRACTIONS[:, None]
    between = x[..., None, :] + fractions * (x[..., neighbour] - x)[..., None, :]   # (U, m) or (k, U, m)
    root_weights = problem.sqrt_weights if problem.sqrt_weights is not None else np.ones(count)
    weights = root_weights + fractions * (root_weights[neighbour] - root_weights)   # (U, m)
    sets = np.vstack([best[None, :], others])
    runs = len(BETWEEN_FRACTIONS)
    values = problem.predict(np.repeat(sets, runs, axis=0), problem.repeat_runs(between, len(sets)))
    values = values.reshape(len(sets), runs, count)
    with np.errstate(invalid="ignore"):
        difference = (values[1:] - values[0]) * weights
    difference = np.where(np.isnan(values[1:]) & np.isnan(values[0]), 0.0, difference)
    difference = np.nan_to_num(difference, nan=np.inf).reshape(len(others), runs * count)
    # Scaled to the number of samples, so that the limit of the test at the samples applies.
    norm = np.linalg.norm(difference, axis=1) / np.sqrt(runs)
    return norm <= limit
