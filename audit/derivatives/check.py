"""The derivative audit: hand-derived partial derivatives against numeric (and exact) ones.

At each check point (``derivative_points``) the hand-derived Jacobian is compared, element by
element, with the reference: the exact symbolic derivative when the scenario states the model's
formula (and the formula reproduces the model function), otherwise numdifftools' Richardson-
extrapolated derivative (``numeric_derivatives``). An element disagrees when the difference is
beyond its tolerance:

    numeric reference:  SAFETY × (numdifftools' error estimate + rounding bound) + REL_FLOOR × column size
    exact reference:    SAFETY × eps × |exact| + REL_FLOOR × column size

where the column size is the largest |∂f/∂a_j| over the observations at that point. REL_FLOOR
(one millionth) says that a mistake smaller than that share of the column cannot change a fit.
Elements where the numeric derivative is unreliable (model not smooth there, or an error bound
above 0.1 % of the column) are left out. A column is wrong when any element disagrees; the
diagnosis (``derivative_diagnosis``) then names the mistake.

The same comparison measures how many digits the engine's own central differences carry, which
is all there is to check in a scenario without a hand-derived Jacobian.
"""
from __future__ import annotations

import dataclasses
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..engine.best_fit import KnownFit, SweepReference
from ..engine.problem import FLOOR_FRACTION, Problem
from ..errors import InputError
from ..inputs.formula import CompiledFormula
from ..inputs.scenario import Scenario
from ..jsonable import jsonable
from .consequences import Consequences, fit_consequences
from .diagnosis import Diagnosis, Evidence, diagnose, no_hand_derivative
from .exact import exact_derivatives
from .numeric import EPS, SAFETY, numeric_derivatives
from .points import check_points

#: Differences below this share of the column's size never count as a mistake.
REL_FLOOR = 1e-6
#: Central differences off by more than this share of the column are too poor to fit with.
CENTRAL_POOR = 1e-3

VERDICTS: dict[str, str] = {
    "agrees": "within the tolerance at every element where the reference is reliable",
    "wrong": "beyond the tolerance (well beyond the numeric error bound) somewhere",
    "unchecked": "nothing to judge: no hand-derived derivative, or no reliable reference element",
}
SOURCES: dict[str, str] = {
    "hand": "hand-derived (the model file's Jacobian function)",
    "formula": "exact, from the model formula by computer algebra",
    "none": "none given: the fit uses central differences",
}


@dataclass
class DerivativeAudit:
    """Everything the derivative audit found (K points, n parameters, m observations).

    Attributes:
        names: (n) parameter names.
        labels: (K) check-point labels ("best fit", "start", "sample 1", ...).
        points: (K, n) parameter values of the check points.
        predictor_names: (k) names of the predictors; x_rows: (k, m) their values.
        jacobian_source: a key of ``SOURCES``.
        reference: "exact" or "numeric": what the hand-derived values were judged against.
        hand: (K, n, m) hand-derived derivatives, or None.
        numeric: (K, n, m) numdifftools' derivatives; numeric_error: (K, n, m) their error bound.
        smooth: (K, n, m) False where left and right numeric derivatives differ (kink, jump).
        exact: (K, n, m) symbolic derivatives from the formula, or None.
        tolerance: (K, n, m) largest difference from the reference that counts as agreement.
        usable: (K, n, m) elements where the reference is reliable.
        disagrees: (K, n, m) usable elements where the hand-derived value is beyond tolerance.
        column_scale: (K, n) largest |reference| of each column at each point.
        wrong_share: (K, n) share of the usable observations that disagree (NaN: none usable).
        relative_error: (K, n) largest |hand − reference| / column size (NaN: nothing usable).
        relative_error_numeric: (K, n) the same against numdifftools (equal to the above when
            the reference is numeric).
        central_error: (K, n) the same for the engine's central differences.
        max_relative_error, max_relative_error_numeric, max_central_error: (n,) the largest over points.
        worst_point, worst_observation: (n,) where ``max_relative_error`` occurs (−1: nowhere).
        verdict: (n) keys of ``VERDICTS``.
        diagnoses: (n) one ``Diagnosis`` per column.
        dropped: labels of points left out because the model is not finite there.
        notes: remarks for the reader (formula not usable, best fit not found, ...).
        consequences: fits with and without the wrong columns, or None when nothing is wrong.
        audited_fit: the fit behind the "best fit" point and any lower SSR known, or None.
    """

    names: tuple[str, ...]
    labels: tuple[str, ...]
    points: np.ndarray
    predictor_names: tuple[str, ...]
    x_rows: np.ndarray
    jacobian_source: str
    reference: str
    hand: np.ndarray | None
    numeric: np.ndarray
    numeric_error: np.ndarray
    smooth: np.ndarray
    exact: np.ndarray | None
    tolerance: np.ndarray
    usable: np.ndarray
    disagrees: np.ndarray
    column_scale: np.ndarray
    wrong_share: np.ndarray
    relative_error: np.ndarray
    relative_error_numeric: np.ndarray
    central_error: np.ndarray
    max_relative_error: np.ndarray
    max_relative_error_numeric: np.ndarray
    max_central_error: np.ndarray
    worst_point: np.ndarray
    worst_observation: np.ndarray
    verdict: tuple[str, ...]
    diagnoses: tuple[Diagnosis, ...]
    dropped: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    consequences: Consequences | None = None
    audited_fit: KnownFit | None = None

    @property
    def true(self) -> np.ndarray:
        """(K, n, m) the reference values the hand-derived ones were judged against."""
        return self.exact if self.reference == "exact" else self.numeric

    @property
    def wrong_columns(self) -> list[int]:
        return [j for j, verdict in enumerate(self.verdict) if verdict == "wrong"]

    @property
    def central_poor(self) -> np.ndarray:
        """(n,) True where the engine's central differences are off by more than CENTRAL_POOR."""
        return self.max_central_error > CENTRAL_POOR

    @property
    def has_finding(self) -> bool:
        """A wrong hand-derived column; without one, central differences too poor to fit with."""
        if self.jacobian_source == "none":
            return bool(self.central_poor.any())
        return bool(self.wrong_columns)

    def to_dict(self) -> dict:
        columns = []
        for j, name in enumerate(self.names):
            k = int(self.worst_point[j])
            worst = None
            if k >= 0 and self.hand is not None:
                worst = {"point": self.labels[k], "observation": int(self.worst_observation[j]),
                         "hand": self.hand[k, j], "reference": self.true[k, j], "tolerance": self.tolerance[k, j]}
            columns.append({
                "name": name, "verdict": self.verdict[j], "verdict_meaning": VERDICTS[self.verdict[j]],
                "max_relative_error": self.max_relative_error[j],
                "max_relative_error_numeric": self.max_relative_error_numeric[j],
                "max_central_difference_error": self.max_central_error[j],
                "diagnosis": self.diagnoses[j].to_dict(), "worst": worst,
            })
        return jsonable({
            "names": list(self.names), "jacobian_source": self.jacobian_source,
            "jacobian_source_meaning": SOURCES[self.jacobian_source], "reference": self.reference,
            "points": [{"label": label, "params": dict(zip(self.names, row))}
                       for label, row in zip(self.labels, self.points)],
            "columns": columns,
            "relative_error": self.relative_error, "wrong_share": self.wrong_share,
            "relative_error_numeric": self.relative_error_numeric,
            "central_difference_error": self.central_error,
            "unreliable": (~self.usable).any(axis=2),
            "dropped": list(self.dropped), "notes": list(self.notes), "has_finding": self.has_finding,
            "consequences": self.consequences.to_dict() if self.consequences is not None else None,
            "audited_fit": self.audited_fit,
        })


def audit_derivatives(scenario: Scenario, count: int | None = None,
                      progress: Callable[[str], None] | None = None,
                      reference: SweepReference | None = None, cache: Path | None = None) -> DerivativeAudit:
    """The whole audit of a scenario: check points, comparison, diagnosis and consequences.

    Args:
        scenario: a loaded scenario.
        count: number of sampled check points (default: the scenario's [derivatives] points).
        progress: called with the name of each stage as it starts (for progress bars).
        reference: what a sweep of this scenario found; its in-range reference is the "best
            fit" check point (``derivative_points.check_points``).
        cache: a folder where the exact reference is kept for a rerun (``exact``; None: not kept).

    Raises:
        InputError: for a negative ``count``, or when the model is not finite at any point.
    """
    count = scenario.derivatives.points if count is None else count
    if count < 0:
        raise InputError(f"the number of sampled check points must be 0 or more, got {count}")
    announce = progress or (lambda stage: None)
    announce("best fit")
    points = check_points(scenario.problem, scenario.parameters, scenario.solver, count, scenario.derivatives.seed,
                          reference)
    audit = compare_derivatives(scenario.problem, points.params, points.labels,
                                predictor_names=scenario.x_names, progress=announce, cache=cache)
    consequences = None
    if audit.wrong_columns:
        announce("consequences")
        consequences = fit_consequences(scenario.problem, scenario.start, audit.wrong_columns, scenario.solver,
                                        scenario.bootstrap.confidence)
    return dataclasses.replace(audit, notes=points.notes + audit.notes, consequences=consequences,
                               audited_fit=points.best_fit)


def compare_derivatives(problem: Problem, points: np.ndarray, labels: tuple[str, ...] | list[str], *,
                        predictor_names: tuple[str, ...] | None = None, formula: str | None = None,
                        progress: Callable[[str], None] | None = None, cache: Path | None = None) -> DerivativeAudit:
    """Compare the problem's Jacobian with the references at ``points`` (K, n) and diagnose.

    Args:
        problem: the model; its ``jacobian`` is the one under audit (None: nothing to check).
        points: (K, n) parameter values.
        labels: (K) names of the points.
        predictor_names: names of the predictors as the formula uses them (default x, or x1..xk).
        formula: the model's formula (default ``problem.formula``); gives the exact reference.
        progress: called with the name of each stage as it starts.
        cache: a folder where the exact reference is kept for a rerun (``exact``; None: not kept).

    Raises:
        InputError: when ``points`` has the wrong shape or the model is finite at none of them.
    """
    announce = progress or (lambda stage: None)
    points = np.array(points, dtype=float, ndmin=2)
    labels = tuple(labels)
    if points.shape[1] != problem.n_params or len(labels) != points.shape[0]:
        raise InputError(f"check points must have shape (K, {problem.n_params}) with one label each")
    x_rows = problem.x if problem.x.ndim == 2 else problem.x[None, :]
    predictor_names = tuple(predictor_names or (("x",) if len(x_rows) == 1
                                                else tuple(f"x{i + 1}" for i in range(len(x_rows)))))
    finite = np.isfinite(problem.predict(points)).all(axis=1)
    if not finite.any():
        raise InputError("the model is not finite at any of the check points")
    dropped = tuple(label for label, ok in zip(labels, finite) if not ok)
    points, labels = points[finite], tuple(label for label, ok in zip(labels, finite) if ok)

    announce("numeric derivatives")
    numeric = numeric_derivatives(problem, points)
    announce("comparison")
    source = _jacobian_source(problem)
    formula = formula or problem.formula
    # A formula that made the Jacobian under audit cannot also be its reference.
    exact, notes = exact_derivatives(problem, points, formula, predictor_names, cache) \
        if formula and source != "formula" else (None, ())
    true = exact if exact is not None else numeric.values
    usable = numeric.reliable & np.isfinite(true)
    column_scale = np.max(np.where(usable, np.abs(true), 0.0), axis=2)
    floor = REL_FLOOR * column_scale[:, :, None]
    tolerance = (SAFETY * EPS * np.abs(true) if exact is not None else SAFETY * numeric.error) + floor
    tolerance = np.where(usable, tolerance, np.nan)

    difference_floor = None if problem.typical is None else FLOOR_FRACTION * problem.typical
    central = np.moveaxis(problem.central_differences(points, problem.x, np.arange(problem.n_params),
                                                      difference_floor), 0, 1)
    hand = problem.derivatives(points) if problem.has_jacobian else None
    judged = hand if hand is not None else np.full_like(true, np.nan)
    with np.errstate(invalid="ignore"):
        disagrees = usable & ~(np.abs(judged - true) <= tolerance) if hand is not None else np.zeros_like(usable)
        wrong_share = disagrees.sum(axis=2) / usable.sum(axis=2)
    nothing = np.full(column_scale.shape, np.nan)
    relative_error = _relative_error(hand, true, usable, column_scale) if hand is not None else nothing
    relative_error_numeric = _relative_error(hand, numeric.values, usable, column_scale) if hand is not None \
        else nothing
    central_error = _relative_error(central, true, usable, column_scale)
    worst_point, worst_observation = _worst(hand, true, usable, relative_error)
    verdict = tuple("unchecked" if hand is None or not usable[:, j].any()
                    else "wrong" if disagrees[:, j].any() else "agrees" for j in range(problem.n_params))
    evidence = Evidence(hand=judged, true=true, tolerance=tolerance, usable=usable, smooth=numeric.smooth,
                        disagrees=disagrees, column_scale=column_scale, points=points, labels=labels,
                        names=problem.names, x_rows=x_rows, predictor_names=predictor_names)
    wrong = np.array([v == "wrong" for v in verdict])
    diagnoses = tuple(diagnose(evidence, j, wrong, int(worst_point[j])) if hand is not None
                      else no_hand_derivative(evidence, j) for j in range(problem.n_params))
    return DerivativeAudit(
        names=problem.names, labels=labels, points=points, predictor_names=predictor_names, x_rows=x_rows,
        jacobian_source=source, reference="exact" if exact is not None else "numeric", hand=hand,
        numeric=numeric.values, numeric_error=numeric.error, smooth=numeric.smooth, exact=exact,
        tolerance=tolerance, usable=usable, disagrees=disagrees, column_scale=column_scale, wrong_share=wrong_share,
        relative_error=relative_error, relative_error_numeric=relative_error_numeric, central_error=central_error,
        max_relative_error=_column_max(relative_error), max_relative_error_numeric=_column_max(relative_error_numeric),
        max_central_error=_column_max(central_error), worst_point=worst_point, worst_observation=worst_observation,
        verdict=verdict, diagnoses=diagnoses, dropped=dropped, notes=notes)


def _jacobian_source(problem: Problem) -> str:
    if problem.jacobian is None:
        return "none"
    return "formula" if isinstance(getattr(problem.jacobian, "__self__", None), CompiledFormula) else "hand"


def _relative_error(values: np.ndarray, true: np.ndarray, usable: np.ndarray, column_scale: np.ndarray) -> np.ndarray:
    """(K, n) largest |values − true| over usable elements / column size (inf: not finite)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        difference = np.where(usable, np.abs(values - true), 0.0)
        difference = np.where(usable & ~np.isfinite(values), np.inf, difference)
        largest = difference.max(axis=2)
        relative = np.where(largest == 0, 0.0, largest / column_scale)
    return np.where(usable.any(axis=2), relative, np.nan)


def _column_max(relative: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        return np.array([np.nan if np.all(np.isnan(column)) else np.nanmax(column) for column in relative.T])


def _worst(hand, true, usable, relative_error) -> tuple[np.ndarray, np.ndarray]:
    """(n,) point and observation of each column's largest relative error (−1 where none)."""
    n = usable.shape[1]
    point = np.full(n, -1)
    observation = np.full(n, -1)
    if hand is None:
        return point, observation
    for j in range(n):
        if np.all(np.isnan(relative_error[:, j])):
            continue
        k = int(np.nanargmax(relative_error[:, j]))
        with np.errstate(invalid="ignore"):
            difference = np.where(usable[k, j], np.abs(hand[k, j] - true[k, j]), -1.0)
        difference = np.where(usable[k, j] & ~np.isfinite(hand[k, j]), np.inf, difference)
        point[j], observation[j] = k, int(np.argmax(difference))
    return point, observation
