"""Grading fits of a NIST StRD problem against its certified values.

A StRD problem's own model lines become a formula model with exact symbolic derivatives
(``reference_model``). ``grade_runs`` compares any batch of fits of it with the certified values
by the log relative error (LRE: agreeing significant digits) of the parameters, the residual sum
of squares (SSR) and the standard deviations, and gives every run a verdict:

- pass: converged to the certified minimum with at least ``THRESHOLDS`` digits;
- few digits: converged to the certified minimum (SSR agrees to ``THRESHOLDS['ssr']`` digits)
  but the parameters or standard deviations fall short;
- equivalent parameters: the SSR agrees but some parameter is off by more than 10 %: another
  parameter vector giving the same fit (a sign or exchange symmetry of the model), not agreement;
- other solution: converged at a higher SSR: a different local minimum, not agreement;
- below certified: converged at a lower SSR than certified (would contradict the certificate);
- not converged: the engine's outcome (stalled, singular, ...) says how the run ended.

Where double precision cannot resolve the SSR (``strd_extended``), a converged fit is refined
in extended precision and only there the verdict uses the refined SSR, and the standard
deviations rescaled by it; parameters always keep their double-precision values.
"""
from __future__ import annotations

from dataclasses import dataclass
from enum import IntEnum

import numpy as np

from ..engine.batch import BatchFit
from ..engine.estimates import estimate
from ..engine.outcomes import Outcome
from ..engine.problem import Problem
from ..errors import InputError
from ..inputs.formula import CompiledFormula, compile_formula
from .extended_precision import refine_in_extended_precision, ssr_digits_available
from .reference import NistFormula, ReferenceProblem, log_relative_error, nist_formula

#: Digits (LRE) a run must reach to pass: parameters, residual sum of squares, standard deviations.
THRESHOLDS = {"params": 6.0, "ssr": 6.0, "sd": 4.0}
#: Double precision counts as unable to resolve the SSR when fewer than the SSR threshold plus
#: this margin of its digits lie above the rounding floor (the floor is a bound, not an estimate).
PRECISION_MARGIN = 2.0
#: A run at the certified SSR whose smallest parameter LRE is below this (some parameter more than
#: 10 % off) found a different parameter vector for the same fit, not the certified one imprecisely.
EQUIVALENT_BELOW = 1.0


class Verdict(IntEnum):
    """How one run compares with the certified result; lower is better."""

    PASS = 0
    FEW_DIGITS = 1
    EQUIVALENT = 2
    OTHER_SOLUTION = 3
    BELOW_CERTIFIED = 4
    NOT_CONVERGED = 5


VERDICT_LABELS = {
    Verdict.PASS: "pass",
    Verdict.FEW_DIGITS: "few digits",
    Verdict.EQUIVALENT: "equivalent parameters",
    Verdict.OTHER_SOLUTION: "other solution",
    Verdict.BELOW_CERTIFIED: "below certified",
    Verdict.NOT_CONVERGED: "not converged",
}


@dataclass(frozen=True)
class ReferenceModel:
    """A StRD problem ready for the engine: the formula, its compiled forms and the Problem."""

    reference: ReferenceProblem
    formula: NistFormula
    model: CompiledFormula
    response: CompiledFormula | None
    problem: Problem


def reference_model(reference: ReferenceProblem) -> ReferenceModel:
    """Turn a StRD problem's model lines into a formula model; a transformed response is applied to y.

    Raises:
        InputError: when the model lines cannot be read as a formula.
    """
    formula = nist_formula(reference.model_lines)
    where = f"{reference.name} model"
    model = compile_formula(formula.model, reference.names, reference.predictors, where=where)
    response = None
    y = reference.y
    if formula.transformed:
        response = compile_formula(formula.response, (), (formula.response_name,), where=f"{reference.name} response")
        with np.errstate(all="ignore"):
            y = np.broadcast_to(np.asarray(response.model(reference.y), dtype=float), reference.y.shape)
        if not np.all(np.isfinite(y)):
            raise InputError(f"{where}: the response transform {formula.response} is not finite for every observation")
    problem = Problem(model=model.model, jacobian=model.jacobian, x=reference.x, y=y, names=reference.names,
                      formula=formula.model)
    return ReferenceModel(reference=reference, formula=formula, model=model, response=response, problem=problem)


@dataclass
class RunGrades:
    """Every run of a batch compared with the certified values; arrays over the B runs.

    Attributes:
        params: (B, n) final parameters; std_errors: (B, n) asymptotic standard deviations.
        ssr: (B,) double-precision SSR; iterations, outcome: (B,) from the engine.
        lre_params, lre_sd: (B,) smallest LRE over the parameters / standard deviations.
        lre_ssr: (B,) LRE of the double-precision SSR.
        ssr_digits: (B,) digits of the SSR double precision can resolve at the run's end point.
        precision_limited: (B,) converged runs whose SSR double precision cannot resolve.
        extended_ssr, extended_lre_ssr, extended_lre_sd, extended_shift: (B,) the extended-
            precision refinement (SSR, its LRE, LRE of the rescaled SDs, largest relative
            parameter change); NaN where not made.
        verdict: (B,) ``Verdict`` codes.
    """

    params: np.ndarray
    std_errors: np.ndarray
    ssr: np.ndarray
    iterations: np.ndarray
    outcome: np.ndarray
    lre_params: np.ndarray
    lre_ssr: np.ndarray
    lre_sd: np.ndarray
    ssr_digits: np.ndarray
    precision_limited: np.ndarray
    extended_ssr: np.ndarray
    extended_lre_ssr: np.ndarray
    extended_lre_sd: np.ndarray
    extended_shift: np.ndarray
    verdict: np.ndarray


def grade_runs(fitted: ReferenceModel, fit: BatchFit) -> RunGrades:
    """Compare every run of ``fit`` (a ``fit_batch`` of ``fitted.problem``) with the certified values."""
    reference, problem = fitted.reference, fitted.problem
    with np.errstate(all="ignore"):
        values = problem.predict(fit.params)
        digits = ssr_digits_available(problem.y - values, problem.y, values, fit.ssr)
        uncertainty = np.array([_std_errors(problem, point) for point in fit.params])    # (B, n + 1)
    std_errors, estimate_ssr = uncertainty[:, :-1], uncertainty[:, -1]
    lre_params = log_relative_error(fit.params, reference.certified).min(axis=1)
    lre_ssr = log_relative_error(fit.ssr, reference.ssr)
    lre_sd = log_relative_error(std_errors, reference.certified_sd).min(axis=1)
    converged = fit.outcome == Outcome.CONVERGED
    limited = converged & (digits < THRESHOLDS["ssr"] + PRECISION_MARGIN)
    extended = np.full((4, len(fit.ssr)), np.nan)                        # ssr, lre_ssr, lre_sd, shift
    for run in np.flatnonzero(limited):
        refined = refine_in_extended_precision(fitted.model, fitted.response, reference.data_text, fit.params[run])
        # s² = SSR / dof is the SDs' only ingredient that double precision cannot resolve here.
        rescaled = std_errors[run] * np.sqrt(refined.ssr / estimate_ssr[run])
        extended[:, run] = (refined.ssr, log_relative_error(refined.ssr, reference.ssr),
                            log_relative_error(rescaled, reference.certified_sd).min(), refined.shift)
    verdict = _verdicts(converged, np.where(limited, extended[0], fit.ssr), reference.ssr, lre_params,
                        np.where(limited, extended[1], lre_ssr), np.where(limited, extended[2], lre_sd))
    return RunGrades(
        params=fit.params, std_errors=std_errors, ssr=fit.ssr, iterations=fit.iterations, outcome=fit.outcome,
        lre_params=lre_params, lre_ssr=lre_ssr, lre_sd=lre_sd, ssr_digits=digits, precision_limited=limited,
        extended_ssr=extended[0], extended_lre_ssr=extended[1], extended_lre_sd=extended[2],
        extended_shift=extended[3], verdict=verdict,
    )


#: One line per verdict, for the legend under tables.
VERDICT_MEANINGS = {
    Verdict.PASS: "converged to the certified minimum with the required digits",
    Verdict.FEW_DIGITS: "converged to the certified minimum, but parameters or SDs have too few digits",
    Verdict.EQUIVALENT: "same SSR as certified, but some parameter more than 10 % off: a symmetric "
                        "parameter set giving the same fit, not the certified one",
    Verdict.OTHER_SOLUTION: "converged at a higher SSR than certified: another local minimum",
    Verdict.BELOW_CERTIFIED: "converged at a lower SSR than certified: contradicts the certificate",
    Verdict.NOT_CONVERGED: "the run did not converge; the outcome column says how it ended",
}


def lre_ssr_at_certified(fitted: ReferenceModel) -> float:
    """The SSR LRE double precision reaches at the certified parameters themselves."""
    return float(log_relative_error(fitted.problem.ssr(fitted.reference.certified[None, :])[0], fitted.reference.ssr))


def _std_errors(problem: Problem, point: np.ndarray) -> np.ndarray:
    """(n + 1,) asymptotic standard deviations at ``point`` and the SSR they were computed with.

    NaN where the point is not finite.
    """
    if not np.all(np.isfinite(point)):
        return np.full(problem.n_params + 1, np.nan)
    estimates = estimate(problem, point)
    return np.append(estimates.std_errors, estimates.ssr)


def _verdicts(converged, ssr, certified_ssr, lre_params, lre_ssr, lre_sd) -> np.ndarray:
    """Verdict codes: the SSR decides which minimum a converged run found, the digits whether it passed."""
    same = lre_ssr >= THRESHOLDS["ssr"]
    enough = (lre_params >= THRESHOLDS["params"]) & (lre_sd >= THRESHOLDS["sd"])
    verdict = np.full(converged.shape, Verdict.NOT_CONVERGED, dtype=np.int8)
    verdict[converged & same & enough] = Verdict.PASS
    verdict[converged & same & ~enough] = Verdict.FEW_DIGITS
    verdict[converged & same & (lre_params < EQUIVALENT_BELOW)] = Verdict.EQUIVALENT
    verdict[converged & ~same & (ssr > certified_ssr)] = Verdict.OTHER_SOLUTION
    verdict[converged & ~same & ~(ssr > certified_ssr)] = Verdict.BELOW_CERTIFIED
    return verdict


def verdict_label(verdict: int, outcome: int) -> str:
    """'pass', 'other solution', ..., or the engine outcome (e.g. 'stalled') of a run that did not converge."""
    code = Verdict(int(verdict))
    return Outcome(int(outcome)).label if code == Verdict.NOT_CONVERGED else VERDICT_LABELS[code]
