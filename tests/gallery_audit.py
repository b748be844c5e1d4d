"""A quick audit of a bundled scenario, shared by the gallery tests.

Each stage runs through its public function with a small design (a few hundred starts, coarse
basin maps, a few hundred bootstrap replicates) so that every bundled scenario is audited in
seconds. The stages are cached per scenario, so several tests can assert on one audit.
The tests reach the stages only through ``quick_audit``, ``quick_bootstrap`` and
``quick_identifiability``: once ``fitaudit run --quick`` exists, these three are the one place
to switch to it.
"""
from __future__ import annotations

import functools
from dataclasses import dataclass
from pathlib import Path

import numpy as np

import audit
from audit.parallel.plan import ParallelPlan
from audit.sweep.result import reference_from_json

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
#: The small design of a quick audit: starts, basin map cells per axis, bootstrap replicates.
QUICK_POINTS, QUICK_RESOLUTION, QUICK_SAMPLES, QUICK_PROFILE_POINTS = 256, 11, 300, 21
ONE_CORE = ParallelPlan(jobs=1)


def bundled_names() -> list[str]:
    """Every bundled scenario's folder name."""
    return sorted(path.parent.name for path in SCENARIOS.glob("*/scenario.toml"))


@dataclass(frozen=True)
class QuickAudit:
    scenario: object
    sweep: object
    derivatives: object


@functools.cache
def quick_audit(name: str) -> QuickAudit:
    """Sweep and derivative check of a bundled scenario, by name, with the quick design."""
    scenario = audit.load_scenario(name)
    request = audit.SweepRequest.from_scenario(scenario, points=QUICK_POINTS, resolution=QUICK_RESOLUTION)
    with np.errstate(all="ignore"):
        sweep = audit.run_sweep(scenario, request, ONE_CORE)
    return QuickAudit(scenario=scenario, sweep=sweep, derivatives=audit.audit_derivatives(scenario))


@functools.cache
def quick_bootstrap(name: str):
    """The bootstrap of a bundled scenario from the quick sweep's best fit."""
    found = quick_audit(name)
    return audit.bootstrap_scenario(found.scenario, samples=QUICK_SAMPLES, reference=_reference(found),
                                    plan=ONE_CORE)


@functools.cache
def quick_identifiability(name: str):
    """The identifiability stage of a bundled scenario at the quick sweep's best fit."""
    found = quick_audit(name)
    return audit.identify_scenario(found.scenario, points=QUICK_PROFILE_POINTS, reference=_reference(found),
                                   plan=ONE_CORE)


def _reference(found: QuickAudit):
    """The quick sweep's in-range best fit, which the local stages then audit."""
    return reference_from_json(found.sweep.to_dict(), found.scenario.names)
