"""The whole audit in one call: every stage in order, from the best in-range fit, with a verdict.

Order: load the scenario -> derivative check -> sweep -> best fit (the sweep's in-range
reference, or the best from the start) -> fits from the scenario's start -> bootstrap ->
identifiability -> residual checks -> uncertainty statement (GUM form) -> verdict. Every stage
after the sweep audits the same best fit (``engine.best_fit.best_known_fit`` with the sweep's
reference). A stage that cannot run is recorded with why and what to do, and the others still
run; only bad input (the scenario itself) stops the audit.
"""
from __future__ import annotations

import dataclasses
import sys
import tempfile
from collections.abc import Callable
from contextlib import ExitStack
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..derivatives.check import audit_derivatives
from ..engine.best_fit import best_known_fit
from ..engine.estimates import estimate
from ..errors import InputError
from ..identifiability.analysis import identify_scenario
from ..inputs.scenario import Scenario, load_scenario
from ..parallel.chunk_cache import cache_root
from ..parallel.plan import ParallelPlan
from ..residuals.checks import check_residuals
from ..sweep.result import reference_from_json
from ..sweep.run import SweepRequest, run_sweep
from ..uncertainty.bootstrap import bootstrap_scenario, total_refits
from ..uncertainty.statement import uncertainty_statement
from .provenance import provenance
from .result import AuditResult
from .start_runs import fit_from_start
from .verdict import judge

#: --quick: a small design for a first look in seconds (starts, map resolution, replicates).
QUICK_POINTS = 256
QUICK_RESOLUTION = 21
QUICK_SAMPLES = 200
#: The stages in the order they run, as ``on_progress`` names them.
STAGES = ("derivatives", "sweep", "best fit", "bootstrap", "identifiability", "residuals")

#: on_progress(stage, fraction of that stage done in [0, 1]).
ProgressCallback = Callable[[str, float], None]

WRONG_DERIVATIVE = ("the derivative check found the hand-derived Jacobian wrong: fix it first (see the "
                    "derivative table), then run the audit again")


@dataclass
class _Stages:
    """Why each stage that did not run did not."""

    skipped: dict[str, str] = field(default_factory=dict)

    def attempt(self, stage: str, work: Callable[[], object], hint: str = "") -> object | None:
        """Run ``work``; when it rejects its input, record why (and ``hint``) and return None."""
        try:
            return work()
        except InputError as error:
            self.skipped[stage] = str(error) + (f"; {hint}" if hint else "")
            return None


def run_audit(path_or_scenario: str | Path | Scenario, *, out: str | Path | None = None, quick: bool = False,
              plan=None, on_progress: ProgressCallback | None = None, step_factors: tuple[float, ...] | None = None,
              command_line: list[str] | None = None) -> AuditResult:
    """Audit a scenario end to end.

    Args:
        path_or_scenario: a scenario folder, its TOML file, or a loaded ``Scenario``.
        out: folder for the sweep's and the bootstrap's chunk caches and the derivative check's
            exact reference (``out/cache``), reused by a later run with the same settings; None: a
            temporary folder, nothing reused. Nothing else is written here: ``AuditResult.write(folder)``
            writes the files.
        quick: small designs for a first look: QUICK_POINTS starts, QUICK_RESOLUTION points per
            map axis, QUICK_SAMPLES bootstrap replicates.
        plan: a ``ParallelPlan`` for the sweep, bootstrap and profiles (default: one process; the
            results never depend on it).
        on_progress: called with (stage, fraction done) as the stages advance.
        step_factors: replace the scenario's [solver] step_factors for every stage (the sweep's
            set, the fits from the start, the bootstrap's refits take the first).
        command_line: recorded in the provenance (default: ``sys.argv``).

    Returns:
        The AuditResult, with the verdict.

    Raises:
        InputError: when the scenario cannot be read (bad input); a stage's own failure is
            recorded in the result instead.
    """
    scenario = path_or_scenario if isinstance(path_or_scenario, Scenario) else load_scenario(path_or_scenario)
    plan = plan or ParallelPlan(jobs=1)
    if step_factors is not None:
        scenario = _with_step_factors(scenario, tuple(float(a) for a in step_factors))
    report = on_progress or (lambda stage, fraction: None)
    stages = _Stages()
    limits = scenario.verdict

    report("derivatives", 0.0)
    derivatives = stages.attempt("derivatives", lambda: audit_derivatives(
        scenario, cache=None if out is None else cache_root(out)))
    hint = WRONG_DERIVATIVE if derivatives is not None and derivatives.wrong_columns else ""
    report("derivatives", 1.0)

    request = stages.attempt("sweep", lambda: SweepRequest.from_scenario(
        scenario, points=QUICK_POINTS if quick else None, resolution=QUICK_RESOLUTION if quick else None))
    with ExitStack() as cleanup:
        folder = Path(out) if out is not None else Path(cleanup.enter_context(
            tempfile.TemporaryDirectory(prefix="fitaudit-run-")))
        sweep = None if request is None else stages.attempt("sweep", lambda: run_sweep(
            scenario, request, plan, folder,
            on_progress=lambda done, total, computed: report("sweep", done / max(total, 1))), hint)
    sweep_payload = sweep.to_dict() if sweep is not None else None
    reference = reference_from_json(sweep_payload, scenario.names) if sweep_payload is not None else None

    report("best fit", 0.0)
    best = best_known_fit(scenario.problem, scenario.start, **scenario.solver.fit_options(), reference=reference)
    if best is None:
        stages.skipped["best fit"] = ("no converged fit: neither the sweep nor the scenario's start reached one; "
                                      + (hint or "find a working start or a wider range ('fitaudit sweep')"))
    start_runs = fit_from_start(scenario, best.ssr if best is not None else np.nan, limits.same_ssr_relative)
    report("best fit", 1.0)

    samples = QUICK_SAMPLES if quick else scenario.bootstrap.samples
    refits = total_refits(scenario.problem, samples)
    done = [0]

    def bootstrap_progress(count: int) -> None:
        done[0] += count
        report("bootstrap", done[0] / refits)

    # Without an output folder nothing outlives the run, so nothing is worth storing.
    bootstrap = _after_best(stages, best, "bootstrap", lambda: bootstrap_scenario(
        scenario, samples=samples, known=best, plan=plan, progress=bootstrap_progress,
        folder=None if out is None else Path(out)), hint)
    identifiability = _after_best(stages, best, "identifiability", lambda: identify_scenario(
        scenario, known=best, plan=plan,
        on_step=lambda done, total: report("identifiability", done / max(total, 1))), hint)
    report("identifiability", 1.0)

    asymptotic = statement = residuals = None
    if best is not None:
        asymptotic = stages.attempt("asymptotic", lambda: estimate(scenario.problem, best.params,
                                                                   scenario.bootstrap.confidence), hint)
        residuals = stages.attempt("residuals", lambda: _residual_checks(scenario, best.params, limits), hint)
        if asymptotic is not None:
            statement = stages.attempt("statement", lambda: uncertainty_statement(
                scenario.names, best.params, asymptotic.std_errors, asymptotic.dof, scenario.bootstrap.confidence))
    else:
        for stage in ("residuals", "statement"):
            stages.skipped[stage] = stages.skipped["best fit"]
    report("residuals", 1.0)

    verdict = judge(derivatives=derivatives, start_runs=start_runs, sweep=sweep, bootstrap=bootstrap,
                    identifiability=identifiability, residuals=residuals,
                    skipped=stages.skipped, thresholds=limits)
    return AuditResult(scenario=scenario, quick=quick, derivatives=derivatives, sweep=sweep,
                       sweep_payload=sweep_payload, best_fit=best, start_runs=start_runs, bootstrap=bootstrap,
                       identifiability=identifiability, asymptotic=asymptotic, residuals=residuals,
                       statement=statement, skipped=dict(stages.skipped), verdict=verdict,
                       provenance=provenance(scenario, quick=quick, plan=plan,
                                             command_line=sys.argv if command_line is None else command_line))


def _after_best(stages: _Stages, best, stage: str, work: Callable[[], object], hint: str) -> object | None:
    """Run a stage that needs the best fit; without one, record the best-fit stage's reason."""
    if best is None:
        stages.skipped[stage] = stages.skipped["best fit"]
        return None
    return stages.attempt(stage, work, hint)


def _residual_checks(scenario: Scenario, params: np.ndarray, limits):
    """The residual checks at ``params`` (n,), graded at the scenario's [verdict] levels."""
    problem = scenario.problem
    fitted = problem.predict(params[None, :])[0]
    x = problem.x if problem.x.ndim == 1 else problem.x.T
    return check_residuals(problem.y - fitted, fitted, x, problem.n_params, weights=problem.weights,
                           warn_level=limits.residual_warn_level, fail_level=limits.residual_fail_level)


def _with_step_factors(scenario: Scenario, step_factors: tuple[float, ...]) -> Scenario:
    """The scenario with other [solver] step factors; InputError unless distinct values in (0, 1]."""
    if not step_factors or not all(0 < a <= 1 for a in step_factors) or len(set(step_factors)) != len(step_factors):
        raise InputError(f"--step-factors: need distinct values in (0, 1], got {list(step_factors)}")
    return dataclasses.replace(scenario, solver=dataclasses.replace(scenario.solver, step_factors=step_factors))
