"""The fit every local stage audits: the best one known, and any lower SSR known elsewhere.

The derivative check points, the bootstrap and the identifiability stage judge one fit. It must
be the best one known, not whatever the scenario's start happens to reach: on a model with
several optima the start can settle in a local one, and every number computed there describes
the wrong fit. ``best_known_fit`` chooses between

* the sweep's reference, the lowest SSR inside the searched ranges (``SweepReference``, read
  from the sweep's JSON by the command line when it was written for the same scenario, which
  ``scenario.solutions_fingerprint`` tells), and
* the lowest-SSR converged fit from the scenario's start over the step factors and one
  Levenberg-Marquardt run (``single_fit.best_from_start``),

and keeps the lowest SSR known below the chosen one (a solution outside the ranges, the start's
fit, later a profile refit) so that the stages can say so loudly instead of staying silent.
"""
from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ..jsonable import jsonable
from .outcomes import Outcome
from .problem import Problem
from .single_fit import best_from_start

FROM_SWEEP, FROM_START = "sweep", "scenario start"
SOURCE_MEANINGS = {
    FROM_SWEEP: "the sweep's reference: the lowest SSR any of its runs reached inside the parameter ranges",
    FROM_START: "the lowest-SSR converged fit from the scenario's start over its step factors and "
                "Levenberg-Marquardt",
}
#: An SSR counts as lower only below the audited one by more than this share: equal-SSR solutions
#: (aliases, mirror images) differ by rounding alone, which stays many orders of magnitude below.
LOWER_MARGIN = 1e-9


@dataclass(frozen=True)
class SweepReference:
    """What a sweep of the same scenario found, as far as the other stages need it.

    Attributes:
        params: (n,) the in-range reference (lowest SSR with every parameter in its range).
        ssr: its residual sum of squares, as the sweep computed it.
        lower, upper: (n,) the searched ranges (NaN where none).
        outside_params: (k, n) the sweep's solutions outside the ranges; outside_ssr: (k,) their SSR.
    """

    params: np.ndarray
    ssr: float
    lower: np.ndarray
    upper: np.ndarray
    outside_params: np.ndarray
    outside_ssr: np.ndarray

    def inside(self, params: np.ndarray) -> bool:
        """Whether ``params`` (n,) lies within every range (a missing range never excludes)."""
        with np.errstate(invalid="ignore"):
            return bool(np.all(~(params < self.lower) & ~(params > self.upper)))


@dataclass(frozen=True)
class KnownFit:
    """The fit a stage audits and what else is known about it.

    Attributes:
        names: (n) parameter names.
        params: (n,) the audited fit; ssr: its weighted residual sum of squares.
        source: FROM_SWEEP or FROM_START (see ``SOURCE_MEANINGS``).
        outcome: how the run that found it ended ("converged", or "singular" for a settled
            Levenberg-Marquardt run on a lost rank).
        lower_params: (n,) where the lowest SSR known below ``ssr`` was met, or None.
        lower_ssr: that SSR (NaN when none is known); lower_source: where it was met, in words.
        notes: how the choice was made, where that is worth a line.
    """

    names: tuple[str, ...]
    params: np.ndarray
    ssr: float
    source: str
    outcome: str
    lower_params: np.ndarray | None = None
    lower_ssr: float = float("nan")
    lower_source: str = ""
    notes: tuple[str, ...] = ()

    @property
    def lower_ssr_known(self) -> bool:
        return self.lower_params is not None

    def with_lower(self, params: np.ndarray, ssr: float, source: str) -> "KnownFit":
        """This fit, also knowing SSR ``ssr`` at ``params`` (n,) when it is the lowest known below it."""
        if not ssr < self.ssr * (1.0 - LOWER_MARGIN) or (self.lower_ssr_known and not ssr < self.lower_ssr):
            return self
        return replace(self, lower_params=np.asarray(params, dtype=float).copy(), lower_ssr=float(ssr),
                       lower_source=source)

    @property
    def summary(self) -> str:
        """One line: which fit is audited and where it comes from."""
        return f"audited fit: SSR {self.ssr:.8g} from the {self.source} ({SOURCE_MEANINGS[self.source]})"

    @property
    def warning(self) -> str | None:
        """One line when a lower SSR than the audited one is known, else None."""
        if not self.lower_ssr_known:
            return None
        where = ", ".join(f"{name} = {value:.8g}" for name, value in zip(self.names, self.lower_params))
        return (f"the audited fit (SSR {self.ssr:.8g}, from the {self.source}) is not the lowest known: "
                f"{self.lower_source} reached SSR {self.lower_ssr:.8g} at {where}")

    def to_dict(self) -> dict:
        return jsonable({
            "params": dict(zip(self.names, self.params)), "ssr": self.ssr, "source": self.source,
            "source_meaning": SOURCE_MEANINGS[self.source], "outcome": self.outcome,
            "lower_ssr_known": self.lower_ssr_known,
            "lower": {"params": dict(zip(self.names, self.lower_params)), "ssr": self.lower_ssr,
                      "source": self.lower_source} if self.lower_ssr_known else None,
            "warning": self.warning, "notes": list(self.notes),
        })


def best_known_fit(problem: Problem, start: np.ndarray, *, step_factors, method: str, tol: float, max_iter: int,
                   reference: SweepReference | None = None, accept_lost_rank: bool = False) -> KnownFit | None:
    """The fit to audit: the sweep's in-range reference, or the best fit from ``start``.

    The fit from the start is always run (a handful of runs): it replaces the sweep's reference
    when it lies inside the ranges with a lower SSR (a sweep too coarse to find it), and is
    otherwise one of the lower SSRs the result may know of.

    Args:
        problem: the scenario's problem (the derivative check passes one without the
            hand-derived Jacobian, so that a wrong derivative cannot move its point).
        start: (n,) the scenario's starting values.
        step_factors, method, tol, max_iter: how the fits from the start run (a scenario's
            [solver] settings give them through ``SolverSettings.fit_options``).
        reference: what a sweep of the same scenario found, or None.
        accept_lost_rank: take a settled Levenberg-Marquardt run on a lost rank when nothing
            from the start converged (see ``best_from_start``).

    Returns:
        The KnownFit, or None when there is no reference and nothing from the start converged.
    """
    found = best_from_start(problem, start, step_factors=step_factors, method=method, tol=tol, max_iter=max_iter,
                            accept_lost_rank=accept_lost_rank)
    from_start = None
    if found is not None:
        params, outcome = found
        from_start = KnownFit(names=problem.names, params=params, ssr=_ssr(problem, params), source=FROM_START,
                              outcome=outcome.label)
    if reference is None:
        return from_start
    from_sweep = KnownFit(names=problem.names, params=np.asarray(reference.params, dtype=float),
                          ssr=_ssr(problem, reference.params), source=FROM_SWEEP, outcome=Outcome.CONVERGED.label)
    audited = from_sweep
    if from_start is not None and reference.inside(from_start.params) \
            and from_start.ssr < from_sweep.ssr * (1.0 - LOWER_MARGIN):
        audited = replace(from_start, notes=(f"the fit from the scenario's start, inside the ranges, has a lower SSR "
                                             f"than the sweep's reference ({from_sweep.ssr:.8g}): the sweep's design "
                                             "missed this solution; a denser sweep may find more",))
    elif from_start is not None:
        audited = audited.with_lower(from_start.params, from_start.ssr, "the fit from the scenario's start "
                                     + ("(inside the ranges)" if reference.inside(from_start.params)
                                        else "(outside the parameter ranges)"))
    if len(reference.outside_ssr):
        lowest = int(np.argmin(reference.outside_ssr))
        audited = audited.with_lower(reference.outside_params[lowest], _ssr(problem, reference.outside_params[lowest]),
                                     "a sweep solution outside the parameter ranges (an alias or mirror image, or "
                                     "a sign that a range is too narrow)")
    return audited


def _ssr(problem: Problem, params: np.ndarray) -> float:
    return float(problem.ssr(np.asarray(params, dtype=float)[None, :])[0])
