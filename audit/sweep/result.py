"""What a sweep found, as arrays: shares per step factor, solutions, safe region, maps, cases.

Array axes follow one order everywhere: M methods, F step factors, K categories (``CATEGORIES``),
S solutions, n parameters, r map resolution. Every derived number is computed once, by the
sweep; figures, tables and JSON only read these objects.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..engine.best_fit import SweepReference
from ..engine.outcomes import MEANINGS, Outcome
from ..jsonable import jsonable

#: How a run ended once converged runs are split by solution; the keys of the figure style.
CATEGORIES = ("best", "other", "diverged", "oscillating", "stalled", "singular", "model_error", "timed_out")
CATEGORY_MEANINGS = {
    "best": "converged to the best solution found (lowest residual sum of squares inside the searched ranges)",
    "other": "converged, but to another solution (a different local optimum)",
    **{outcome.label: MEANINGS[outcome] for outcome in Outcome if outcome != Outcome.CONVERGED},
}
#: Category index of each engine outcome code, for runs that did not converge.
CATEGORY_OF_OUTCOME = np.array([CATEGORIES.index(o.label) if o != Outcome.CONVERGED else -1 for o in Outcome],
                               dtype=np.int8)
BEST, OTHER = 0, 1


@dataclass
class BasinMap:
    """A 2-D slice of starts: a grid over two parameters, the others at the best fit.

    Attributes:
        x_name, y_name: the varied parameters (x along columns, y along rows).
        x_values, y_values: (r,) their grid values.
        x_log, y_log: True where the axis is logarithmic.
        base: (n,) the start values of all parameters outside the grid (the held ones matter).
        category: (M, F, r, r) category index of each run, rows follow y.
        solution: (M, F, r, r) solution reached (row of the catalogue), −1 not converged,
            −2 converged to a solution beyond the catalogue.
        iterations: (M, F, r, r) iterations taken.
        shares: (M, F, K) share of the map's starts in each category.
    """

    x_name: str
    y_name: str
    x_values: np.ndarray
    y_values: np.ndarray
    x_log: bool
    y_log: bool
    base: np.ndarray
    category: np.ndarray
    solution: np.ndarray
    iterations: np.ndarray
    shares: np.ndarray

    def to_dict(self) -> dict:
        return jsonable({
            "x": {"name": self.x_name, "values": self.x_values, "log": self.x_log},
            "y": {"name": self.y_name, "values": self.y_values, "log": self.y_log},
            "base": self.base, "category": self.category, "solution": self.solution,
            "iterations": self.iterations, "shares": self.shares,
        })


@dataclass
class TrajectoryCase:
    """One run kept with its whole path, as an example of a failure kind.

    Attributes:
        source: "design" or "map <x>/<y>".
        method, step_factor: how it was fitted.
        kind: the category label (e.g. "oscillating").
        start: (n,) starting values.
        path: (L, n) the start and every iterate, in order.
        iterations: steps taken.
    """

    source: str
    method: str
    step_factor: float
    kind: str
    start: np.ndarray
    path: np.ndarray
    iterations: int

    def to_dict(self) -> dict:
        return jsonable(self.__dict__)


@dataclass
class SweepResult:
    """Everything one sweep found.

    Attributes:
        names, lower, upper, log: the parameters and the box (n,) searched.
        design: "grid", "sobol" or "lhs"; points: its number of starts; seed: its seed.
        step_factors: (F,); methods: (M,); tolerance, max_iterations: solver settings.
        counts: (M, F, K) runs per category; shares: counts over the number of starts.
        iterations_median, iterations_p90: (M, F, K) of the runs in each category (NaN if none).
        solution_params: (S, n), solution_ssr: (S,): distinct solutions, lowest SSR first
            (row 0 is the best, the reference); solution_shares: (M, F, S) share of starts
            reaching each; solution_level_with_best: (S,) True where the SSR equals the best's
            within tolerance although the parameters differ (a sign of non-identifiability);
            solution_inside: (S,) True where every parameter lies within its searched range
            (the best is the lowest SSR among those; solutions outside follow them);
            solution_same_curve: (S,) True where a solution gives the best fit's curve with
            other parameters, a distinct minimum (a symmetry of the model, see
            ``equivalent_solutions``); solution_equivalence: (S,) for those, what kind:
            "alias at the sample points" (the curves differ between the samples), or the
            exchange, mirror or period shift that maps the parameters ("" elsewhere);
            solution_relation: (S,) that mapping, e.g. "a↔c, b↔d", "w → −w",
            "phase + 1×6.28319" ("" where none explains the parameters).
        curve_shares: (M, F) share of starts reaching the best fit's curve: the best solution,
            or a converged end point whose curve passes the same-curve test (an alias, an
            exchange of terms, a mirror image, a period shift), inside the ranges or not,
            catalogued or beyond the catalogue's limit.
        start: (n,) the scenario's own starting values; start_distance: its distance from the
            best fit in unit-cube coordinates (largest over the parameters).
        region_radius: (M, F) half-width, in unit-cube coordinates, of the largest cube around
            the best fit inside which at least ``region_level`` of the starts reached the best
            (NaN when none holds ``region_min_starts`` starts); region_lower, region_upper:
            (M, F, n) per parameter, the extent of the starts inside that cube, in parameter
            values (the safe ranges); region_starts: (M, F) starts inside it; region_share:
            (M, F) share of them reaching the best; start_inside: (M, F) whether the scenario's
            start lies within every safe range; start_inside_parameter: (M, F, n) per parameter.
        recommended: (method index, step factor index) or None when no run reached the best.
        recommendation_reason: one line on why, naming the region the choice is safe from.
        next_step: when no run reached the best, what to look at next (the derivative check for
            a hand-written Jacobian that disagrees with central differences, identifiability
            for rank loss, ...); "" otherwise.
        maps: the 2-D slices; cases: example runs with their paths.
        chunks: {"total", "reused", "computed"}; cache: the cache folder; warnings: notes.
        fingerprint: ``scenario.solutions_fingerprint`` of the scenario swept, so that other
            stages take the reference only from a sweep of the same problem ("" when unset).
    """

    names: tuple[str, ...]
    lower: np.ndarray
    upper: np.ndarray
    log: np.ndarray
    design: str
    points: int
    seed: int
    step_factors: np.ndarray
    methods: tuple[str, ...]
    tolerance: float
    max_iterations: int
    counts: np.ndarray
    shares: np.ndarray
    iterations_median: np.ndarray
    iterations_p90: np.ndarray
    solution_params: np.ndarray
    solution_ssr: np.ndarray
    solution_shares: np.ndarray
    solution_level_with_best: np.ndarray
    solution_inside: np.ndarray
    solution_same_curve: np.ndarray
    solution_equivalence: list[str]
    solution_relation: list[str]
    curve_shares: np.ndarray
    start: np.ndarray
    start_distance: float
    region_level: float
    region_min_starts: int
    region_radius: np.ndarray
    region_lower: np.ndarray
    region_upper: np.ndarray
    region_starts: np.ndarray
    region_share: np.ndarray
    start_inside: np.ndarray
    start_inside_parameter: np.ndarray
    recommended: tuple[int, int] | None
    recommendation_reason: str
    next_step: str = ""
    maps: list[BasinMap] = field(default_factory=list)
    cases: list[TrajectoryCase] = field(default_factory=list)
    chunks: dict[str, int] = field(default_factory=dict)
    cache: str = ""
    warnings: list[str] = field(default_factory=list)
    fingerprint: str = ""

    @property
    def best_params(self) -> np.ndarray:
        """(n,) the best fit (NaN when no run converged)."""
        return self.solution_params[0] if len(self.solution_ssr) else np.full(len(self.names), np.nan)

    @property
    def best_ssr(self) -> float:
        return float(self.solution_ssr[0]) if len(self.solution_ssr) else float("nan")

    def share(self, category: str, method: str | None = None, step_factor: float | None = None) -> np.ndarray:
        """Shares of one category: (M, F), or one number for a given method and step factor."""
        values = self.shares[..., CATEGORIES.index(category)]
        if method is None:
            return values
        return values[self.methods.index(method), int(np.flatnonzero(self.step_factors == step_factor)[0])]

    def to_dict(self) -> dict:
        recommendation = None
        if self.recommended is not None:
            m, f = self.recommended
            recommendation = {
                "method": self.methods[m], "step_factor": self.step_factors[f],
                "basin_share": self.shares[m, f, BEST],
                "iterations_median": self.iterations_median[m, f, BEST],
                "iterations_p90": self.iterations_p90[m, f, BEST],
                "reason": self.recommendation_reason,
                "safe_region": {
                    "radius": self.region_radius[m, f], "starts_inside": self.region_starts[m, f],
                    "share_inside": self.region_share[m, f],
                    "ranges": {name: [low, high] for name, low, high in
                               zip(self.names, self.region_lower[m, f], self.region_upper[m, f])},
                },
                "start": {"values": dict(zip(self.names, self.start)), "distance": self.start_distance,
                          "inside": self.start_inside[m, f],
                          "inside_per_parameter": dict(zip(self.names, self.start_inside_parameter[m, f]))},
            }
        per_run = [
            {"method": method, "step_factor": factor,
             **{f"{label}_share": self.shares[m, f, k] for k, label in enumerate(CATEGORIES)},
             "best_curve_share": self.curve_shares[m, f],
             "iterations_median": self.iterations_median[m, f, BEST],
             "iterations_p90": self.iterations_p90[m, f, BEST],
             "safe_radius": self.region_radius[m, f]}
            for m, method in enumerate(self.methods) for f, factor in enumerate(self.step_factors)]
        return jsonable({
            "parameters": [{"name": name, "range": [low, high], "log": log}
                           for name, low, high, log in zip(self.names, self.lower, self.upper, self.log)],
            "design": {"kind": self.design, "points": self.points, "seed": self.seed},
            "solver": {"methods": list(self.methods), "step_factors": self.step_factors,
                       "tolerance": self.tolerance, "max_iterations": self.max_iterations},
            "categories": {label: CATEGORY_MEANINGS[label] for label in CATEGORIES},
            "by_step_factor": per_run,
            "counts": self.counts, "shares": self.shares,
            "iterations_median": self.iterations_median, "iterations_p90": self.iterations_p90,
            "solutions": [{"params": dict(zip(self.names, params)), "ssr": ssr, "level_with_best": level,
                           "inside_ranges": inside, "same_curve_as_best": same, "equivalence": kind,
                           "relation_to_best": relation, "shares": self.solution_shares[..., s]}
                          for s, (params, ssr, level, inside, same, kind, relation) in enumerate(zip(
                              self.solution_params, self.solution_ssr, self.solution_level_with_best,
                              self.solution_inside, self.solution_same_curve, self.solution_equivalence,
                              self.solution_relation))],
            "best": {"params": dict(zip(self.names, self.best_params)), "ssr": self.best_ssr},
            "fingerprint": self.fingerprint,
            "reference": {"params": dict(zip(self.names, self.best_params)), "ssr": self.best_ssr}
            if len(self.solution_ssr) and self.solution_inside[0] else None,
            "recommendation": recommendation,
            "next_step": self.next_step,
            "safe_region": {"level": self.region_level, "min_starts": self.region_min_starts,
                            "radius": self.region_radius, "lower": self.region_lower, "upper": self.region_upper,
                            "starts_inside": self.region_starts, "share_inside": self.region_share,
                            "start_inside": self.start_inside},
            "maps": list(self.maps),                  # jsonable asks each for its to_dict(), once
            "cases": list(self.cases),
            "chunks": self.chunks, "cache": self.cache, "warnings": self.warnings,
        })


def reference_from_json(payload: dict, names: tuple[str, ...]) -> SweepReference | None:
    """The in-range reference in a sweep's ``to_dict()`` output, or None when it holds none.

    Whether the sweep belongs to the same scenario is the caller's check (its fingerprint).
    """
    reference = payload.get("reference")
    if reference is None:
        return None
    parameters = {entry["name"]: entry["range"] for entry in payload["parameters"]}
    outside = [entry for entry in payload["solutions"] if not entry["inside_ranges"]]
    return SweepReference(params=_values(reference["params"], names), ssr=float(reference["ssr"]),
                          lower=_values({name: parameters[name][0] for name in names}, names),
                          upper=_values({name: parameters[name][1] for name in names}, names),
                          outside_params=np.array([_values(entry["params"], names)
                                                   for entry in outside]).reshape(-1, len(names)),
                          outside_ssr=_values([entry["ssr"] for entry in outside], None))


def _values(mapping, names: tuple[str, ...] | None) -> np.ndarray:
    """Floats (JSON null as NaN) from a {name: value} mapping in ``names`` order, or from a list."""
    values = [mapping[name] for name in names] if names is not None else mapping
    return np.array([np.nan if value is None else value for value in values], dtype=float)
