"""fitaudit: a robustness audit for nonlinear least-squares fits (import name ``audit``).

The public API, for notebooks and scripts (each name is loaded on first use, so ``import
audit`` stays fast):

    load_scenario(path)                     a scenario folder or .toml file -> Scenario
    Problem, fit_batch(problem, starts, step_factor, ...) -> BatchFit   the batched engine
    fit_once(problem, start, ...)           one traced fit with asymptotic estimates
    best_known_fit(problem, start, ...)     the fit the local stages audit
    SweepRequest.from_scenario(scenario), run_sweep(scenario, request)   multistart sweep
    audit_derivatives(scenario)             hand-derived vs numeric derivatives
    bootstrap_scenario(scenario)            bootstrap intervals next to asymptotic ones
    identify_scenario(scenario)             weak directions, collinearity, profile likelihood
    check_folder(folder)                    the solver against the NIST StRD certified values
    run_audit(path, quick=..., out=...)      every stage and the verdict -> AuditResult (.verdict,
                                            .to_dict(), .write(folder), shown as HTML in Jupyter)
    Outcome, InputError, ParallelPlan       outcome codes, bad-input error, parallel settings
"""
from __future__ import annotations

import importlib

__version__ = "0.1.0"

#: Public name -> the module that defines it.
_WHERE = {
    "load_scenario": "audit.inputs.scenario", "Scenario": "audit.inputs.scenario",
    "Problem": "audit.engine.problem", "fit_batch": "audit.engine.batch", "BatchFit": "audit.engine.batch",
    "Outcome": "audit.engine.outcomes", "fit_once": "audit.engine.single_fit",
    "best_known_fit": "audit.engine.best_fit",
    "SweepRequest": "audit.sweep.run", "run_sweep": "audit.sweep.run",
    "audit_derivatives": "audit.derivatives.check",
    "bootstrap_scenario": "audit.uncertainty.bootstrap", "run_bootstrap": "audit.uncertainty.bootstrap",
    "identify_scenario": "audit.identifiability.analysis",
    "check_folder": "audit.validation.check",
    "run_audit": "audit.report.run", "AuditResult": "audit.report.result",
    "ParallelPlan": "audit.parallel.plan",
    "InputError": "audit.errors",
}

__all__ = sorted(_WHERE) + ["__version__"]


def __getattr__(name: str):
    if name in _WHERE:
        value = getattr(importlib.import_module(_WHERE[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'audit' has no attribute {name!r}")


def __dir__() -> list[str]:
    return __all__
