"""Identifiability at the best fit: can the data determine each parameter, and which combinations not?

Four views, from the weighted Jacobian J at the best fit and from refits:

1. singular values of J (raw, and with unit-length columns) and the condition numbers; the
   weakest directions told as parameter combinations (``audit.identifiability.weak_directions``);
2. the correlation matrix of the asymptotic estimates (``audit.engine.estimates``), strongly
   correlated pairs listed;
3. collinearity indices of every parameter subset up to six (``audit.identifiability.collinearity``);
4. profile likelihood of every parameter (``audit.identifiability.profiles``): intervals that may stay open.

A model is structurally non-identifiable when J has a zero singular value (below the solver's
rank tolerance, relative to the largest of the unit-column matrix) at the best fit and at
every random point drawn in the parameters' ranges: then no data of this design can separate
the parameters. A parameter is practically non-identifiable when its profile interval is open
on a side: this data set does not bound it there.
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from ..engine.batch import RefitSettings
from ..engine.best_fit import KnownFit, SweepReference, best_known_fit
from ..engine.estimates import Estimates, estimate
from ..engine.linsolve import RANK_TOLERANCE
from ..engine.problem import Problem
from ..errors import InputError
from ..inputs.settings import IdentifiabilitySettings, SolverSettings
from ..jsonable import jsonable
from ..parallel.plan import ParallelPlan
from .collinearity import Collinearity, collinearity_indices
from .profiles import SIDE_STATUS, Profiles, plan_grid, profile_all
from .weak_directions import WEAK_INDEX, condition_indices, describe, singular_values, weak_rows

#: |correlation| from which a pair is called practically non-identifiable in words even when both
#: profile intervals close: the data then fix little more than one combination of the two
#: (common practice puts the line between 0.99 and 0.999; the stricter end, so as not to cry wolf).
PRACTICAL_CORRELATION = 0.999
NO_FIT = ("no fit from the scenario's starting values converged; "
          "find a working start first (fitaudit fit) before judging identifiability")


@dataclass
class RankCheck:
    """Smallest over largest singular value of the unit-column weighted Jacobian, at the fit and elsewhere.

    Attributes:
        tolerance: ratios at or below it count as zero (the solver's rank tolerance).
        ratio_at_fit: the ratio at the best fit.
        points: (R, n) random points drawn in the ranges (seeded).
        ratio: (R,) the ratio at each point; NaN where the model or its derivatives failed.
    """

    tolerance: float
    ratio_at_fit: float
    points: np.ndarray
    ratio: np.ndarray

    @property
    def zero_at_fit(self) -> bool:
        return bool(self.ratio_at_fit <= self.tolerance)

    @property
    def zero_at_points(self) -> np.ndarray:
        """(R,) True where the ratio is zero; False where it is positive or unknown."""
        return np.where(np.isfinite(self.ratio), self.ratio <= self.tolerance, False)

    @property
    def structural(self) -> bool:
        """Zero at the fit and at every random point that could be evaluated (at least one)."""
        usable = np.isfinite(self.ratio)
        return self.zero_at_fit and bool(usable.any()) and bool(np.all(self.ratio[usable] <= self.tolerance))

    def to_dict(self) -> dict:
        return jsonable({"tolerance": self.tolerance, "ratio_at_fit": self.ratio_at_fit, "points": self.points,
                         "ratio": self.ratio, "zero_at_fit": self.zero_at_fit,
                         "zero_at_points": self.zero_at_points, "structural": self.structural})


@dataclass
class Identifiability:
    """Everything the identifiability stage found.

    Attributes:
        names: parameter names (n).
        params: (n,) the best fit analysed; fit_outcome: how that fit ended.
        singular_raw: (n,) singular values of the weighted Jacobian, largest first.
        singular_scaled: (n,) the same with the Jacobian's columns scaled to unit length.
        condition_raw, condition_scaled: largest over smallest of each (inf when singular).
        column_norms: (n,) lengths of the weighted Jacobian's columns (s / column norm is each
            parameter's conditional standard error, the unit of the loadings).
        directions: (n, n) right singular vectors of the unit-column Jacobian, one per row,
            strongest first, each with its largest loading positive.
        condition_index: (n,) σ_max / σ_k of each direction.
        weak: (w,) rows of ``directions`` reported as weak, weakest first; weak_text: their words.
        estimates: asymptotic estimates (standard errors, correlation, t intervals).
        strong_limit: |correlation| from which a pair is listed.
        strong_pairs: (p, 2) parameter indices; strong_correlation: (p,) their correlations.
        collinearity: indices of parameter subsets.
        rank: the structural (rank) check.
        profiles: profile likelihood of every parameter.
        structural: True when the model is structurally non-identifiable.
        practical: (n,) True where the profile interval is open on a side.
        findings: [{"level": "flag" | "note", "text": ...}]: flags make the stage fail.
        audited_fit: which fit ``params`` is and the lowest SSR known below it, a profile
            refit's included (set by ``identify_scenario``).
    """

    names: tuple[str, ...]
    params: np.ndarray
    fit_outcome: str
    singular_raw: np.ndarray
    singular_scaled: np.ndarray
    condition_raw: float
    condition_scaled: float
    column_norms: np.ndarray
    directions: np.ndarray
    condition_index: np.ndarray
    weak: np.ndarray
    weak_text: list[str]
    estimates: Estimates
    strong_limit: float
    strong_pairs: np.ndarray
    strong_correlation: np.ndarray
    collinearity: Collinearity
    rank: RankCheck
    profiles: Profiles
    structural: bool
    practical: np.ndarray
    findings: list[dict] = field(default_factory=list)
    audited_fit: KnownFit | None = None

    @property
    def flagged(self) -> bool:
        return any(finding["level"] == "flag" for finding in self.findings)

    def to_dict(self) -> dict:
        return jsonable({
            "names": list(self.names), "params": dict(zip(self.names, self.params)),
            "fit_outcome": self.fit_outcome, "flagged": self.flagged, "findings": self.findings,
            "structural": self.structural, "practical": dict(zip(self.names, self.practical)),
            "singular_values": {"raw": self.singular_raw, "scaled": self.singular_scaled,
                                "condition_raw": self.condition_raw, "condition_scaled": self.condition_scaled,
                                "condition_index": self.condition_index, "column_norms": self.column_norms},
            "directions": [{"loadings": dict(zip(self.names, self.directions[row])),
                            "singular_value": self.singular_scaled[row],
                            "condition_index": self.condition_index[row]} for row in range(len(self.names))],
            "weak_directions": [{"row": row, "text": text} for row, text in zip(self.weak, self.weak_text)],
            "loading_units": "each parameter in units of its conditional standard error s / |J_j|",
            "estimates": self.estimates,
            "strong_correlations": {"limit": self.strong_limit, "pairs": [
                {"parameters": [self.names[i], self.names[j]], "correlation": r}
                for (i, j), r in zip(self.strong_pairs, self.strong_correlation)]},
            "collinearity": self.collinearity, "rank_check": self.rank, "profiles": self.profiles,
            "audited_fit": self.audited_fit,
        })


def rank_check(problem: Problem, params: np.ndarray, lower: np.ndarray, upper: np.ndarray, log_axis: np.ndarray,
               count: int, rng: np.random.Generator) -> RankCheck:
    """Smallest over largest scaled singular value at ``params`` and at ``count`` random points.

    Points are uniform in each range (log-uniform on a log axis); a parameter without a range
    is drawn within ±50 % of its fitted value (±1 when that is zero).
    """
    n = problem.n_params
    draw = rng.random((count, n))
    has_range = np.isfinite(lower) & np.isfinite(upper)
    with np.errstate(invalid="ignore", divide="ignore"):
        linear = lower + draw * (upper - lower)
        logarithmic = np.exp(np.log(lower) + draw * (np.log(upper) - np.log(lower)))
    spread = np.where(params != 0, 0.5 * np.abs(params), 1.0)
    around = params + (2 * draw - 1) * spread
    points = np.where(has_range, np.where(log_axis, logarithmic, linear), around)
    ratios = _rank_ratio(problem, np.vstack([params, points]))
    return RankCheck(tolerance=RANK_TOLERANCE, ratio_at_fit=float(ratios[0]), points=points, ratio=ratios[1:])


def _rank_ratio(problem: Problem, params: np.ndarray) -> np.ndarray:
    """(B,) smallest over largest singular value of the unit-column weighted Jacobian at each row."""
    jacobian = np.swapaxes(problem.weighted_derivatives(params), 1, 2)            # (B, m, n)
    finite = np.isfinite(jacobian).all(axis=(1, 2))
    norms = np.linalg.norm(np.where(finite[:, None, None], jacobian, 0.0), axis=1)
    unit = np.where(finite[:, None, None], jacobian, 0.0) / np.where(norms > 0, norms, 1.0)[:, None, :]
    values = np.linalg.svd(unit, compute_uv=False)
    ratio = np.where(values[:, 0] > 0, values[:, -1] / np.where(values[:, 0] > 0, values[:, 0], 1.0), 0.0)
    if problem.n_obs < problem.n_params:
        ratio = np.zeros(len(params))
    return np.where(finite, ratio, np.nan)


def analyse(problem: Problem, params: np.ndarray, *, lower: np.ndarray, upper: np.ndarray, log_axis: np.ndarray,
            settings: IdentifiabilitySettings = IdentifiabilitySettings(), solver: SolverSettings = SolverSettings(),
            fit_outcome: str = "converged", plan: ParallelPlan | None = None, on_step=None) -> Identifiability:
    """Run every identifiability view at the best fit ``params`` (n,).

    Args:
        problem: the fitted problem (m > n).
        params: (n,) the best fit.
        lower, upper: (n,) parameter ranges (NaN where none); they bound the profile grids and
            the random points of the rank check.
        log_axis: (n,) True where a parameter's range is spread logarithmically.
        settings: [identifiability] settings (grid points, reach, confidence, thresholds, seed).
        solver: [solver] settings (tolerance, iterations, first step factor for the refits).
        fit_outcome: how the best fit ended (label).
        plan: processes for the profile walk; on_step: progress callback (done, total).

    Raises:
        InputError: for m ≤ n.
    """
    params = np.asarray(params, dtype=float)
    names = problem.names
    estimates = estimate(problem, params, settings.confidence)
    jacobian = problem.weighted_derivatives(params[None, :])[0].T
    spectrum = singular_values(jacobian)
    weak = weak_rows(spectrum["scaled"])
    weak_text = [describe(spectrum["directions"][row], spectrum["scaled"][row], spectrum["scaled"][0], names)
                 for row in weak]
    pairs, correlations = _strong_pairs(estimates.correlation, settings.strong_correlation)
    collinearity = collinearity_indices(jacobian, names, settings.collinearity_limit)
    rank = rank_check(problem, params, lower, upper, log_axis, settings.random_points,
                      np.random.default_rng(settings.seed))
    typical = problem.typical_magnitude(params)
    steps = max(2, (settings.profile_points - 1) // 2)
    grid = plan_grid(params, estimates.t_quantile * estimates.std_errors, lower, upper, steps,
                     settings.profile_reach, fallback=np.maximum(np.abs(params), typical), log_axis=log_axis)
    walk = RefitSettings(step_factor=solver.step_factors[0], tolerance=solver.tolerance,
                        max_iterations=solver.max_iterations)
    profiles = profile_all(problem, params, estimates.ssr, grid, settings.confidence, walk, plan, on_step,
                           lower_bound=lower, upper_bound=upper)
    result = Identifiability(
        names=names, params=params, fit_outcome=fit_outcome, singular_raw=spectrum["raw"],
        singular_scaled=spectrum["scaled"], condition_raw=spectrum["condition_raw"],
        condition_scaled=spectrum["condition_scaled"], column_norms=spectrum["column_norms"],
        directions=spectrum["directions"], condition_index=condition_indices(spectrum["scaled"]), weak=weak,
        weak_text=weak_text, estimates=estimates, strong_limit=settings.strong_correlation, strong_pairs=pairs,
        strong_correlation=correlations, collinearity=collinearity, rank=rank, profiles=profiles,
        structural=rank.structural, practical=profiles.open)
    result.findings = _findings(result)
    return result


def _strong_pairs(correlation: np.ndarray, limit: float) -> tuple[np.ndarray, np.ndarray]:
    """Pairs (p, 2) with |r| ≥ limit and their r (p,), strongest first."""
    rows, columns = np.triu_indices(len(correlation), 1)
    values = correlation[rows, columns]
    strong = np.flatnonzero(np.abs(np.nan_to_num(values)) >= limit)
    strong = strong[np.argsort(-np.abs(values[strong]), kind="stable")]
    return np.column_stack([rows[strong], columns[strong]]).astype(np.int64), values[strong]


def _findings(result: Identifiability) -> list[dict]:
    """Flags (the stage fails) and notes, in words, from the stored numbers."""
    names, rank, profiles = result.names, result.rank, result.profiles
    found = []
    if result.structural:
        found.append(("flag", f"structurally non-identifiable: the Jacobian has a zero singular value at the "
                              f"best fit and at all {np.isfinite(rank.ratio).sum()} random points in the ranges"))
    elif rank.zero_at_fit:
        found.append(("flag", "the Jacobian loses rank at the best fit (though not everywhere in the ranges): "
                              "the parameters are not locally identifiable there"))
    for j in np.flatnonzero(result.practical):
        sides = [f"{side} ({SIDE_STATUS[status]})" for side, status in
                 (("below", profiles.lower_status[j]), ("above", profiles.upper_status[j])) if status != "closed"]
        found.append(("flag", f"{names[j]}: profile interval open {' and '.join(sides)}"))
    if profiles.found_lower_ssr:
        where = ", ".join(f"{name} = {value:.8g}" for name, value in zip(names, profiles.lowest_params))
        found.append(("flag", f"a profile refit reached SSR {profiles.lowest_ssr:.6g} at {where}, below the best "
                              f"fit's {profiles.ssr_min:.6g}: the best fit is not the least-squares minimum"))
    for row, text in zip(result.weak, result.weak_text):
        if result.condition_index[row] >= WEAK_INDEX:
            found.append(("note", text))
    for (i, j), r in zip(result.strong_pairs, result.strong_correlation):
        if abs(r) >= PRACTICAL_CORRELATION:
            found.append(("note", f"{names[i]} and {names[j]} are practically non-identifiable as a pair: correlated "
                                  f"to r = {r:+.6f}, so the data fix little more than one combination of them"))
        else:
            found.append(("note", f"{names[i]} and {names[j]} are strongly correlated (r = {r:+.4f})"))
    collinearity = result.collinearity
    worst = np.flatnonzero(collinearity.index >= collinearity.limit)
    if len(worst):
        identifiable = ", ".join("{" + ", ".join(names[j] for j in subset) + "}"
                                 for subset in collinearity.largest_identifiable[:3]) or "none"
        subsets = "1 parameter subset has" if len(worst) == 1 else f"{len(worst)} parameter subsets have"
        found.append(("note", f"{subsets} a collinearity index of {collinearity.limit:g} or more; "
                              f"largest identifiable subsets: {identifiable}"))
    return [{"level": level, "text": text} for level, text in found]


def identify_scenario(scenario, *, points: int | None = None, plan: ParallelPlan | None = None,
                      on_step=None, reference: SweepReference | None = None,
                      known: KnownFit | None = None) -> Identifiability:
    """The identifiability stage for a loaded ``Scenario`` at its best known fit (``analyse``).

    Args:
        scenario: a loaded scenario.
        points: profile grid points per parameter (default: [identifiability] profile_points).
        plan, on_step: as for ``analyse``.
        reference: what a sweep of this scenario found; the stage analyses its in-range
            reference, else the best fit from the start (``best_fit.best_known_fit``).
        known: that best known fit when the caller has it already (the audit run, so that every
            stage audits the same fit); ``reference`` is then not used.

    Raises:
        InputError: for fewer than 5 points, or when no fit from the start converges.
    """
    settings = scenario.identifiability
    if points is not None:
        if points < 5:
            raise InputError(f"--profile-points {points}: a profile needs at least 5 grid points")
        settings = replace(settings, profile_points=points)
    if known is None:
        known = best_known_fit(scenario.problem, scenario.start, **scenario.solver.fit_options(), reference=reference,
                               accept_lost_rank=True)
    if known is None:
        raise InputError(NO_FIT)
    lower = np.array([p.lower for p in scenario.parameters])
    upper = np.array([p.upper for p in scenario.parameters])
    log_axis = np.array([p.axis == "log" for p in scenario.parameters])
    result = analyse(scenario.problem, known.params, lower=lower, upper=upper, log_axis=log_axis,
                     settings=settings, solver=scenario.solver, fit_outcome=known.outcome, plan=plan, on_step=on_step)
    profiles = result.profiles
    result.audited_fit = known.with_lower(profiles.lowest_params, profiles.lowest_ssr, "a profile refit")
    return result
