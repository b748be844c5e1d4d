"""The quick audit of a bundled scenario (``fitaudit run --quick``), shared by the gallery tests.

Each bundled scenario is audited once through ``audit.run_audit(name, quick=True)`` (the
command's own small designs: a few hundred starts, coarse basin maps, a few hundred bootstrap
replicates) and cached, so several tests can assert on one audit.
"""
from __future__ import annotations

import functools
from pathlib import Path

import numpy as np

import audit
from audit.parallel.plan import ParallelPlan

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
ONE_CORE = ParallelPlan(jobs=1)


def bundled_names() -> list[str]:
    """Every bundled scenario's folder name."""
    return sorted(path.parent.name for path in SCENARIOS.glob("*/scenario.toml"))


@functools.cache
def quick_audit(name: str):
    """``fitaudit run --quick`` on a bundled scenario, by name: an ``AuditResult``."""
    with np.errstate(all="ignore"):
        return audit.run_audit(name, quick=True, plan=ONE_CORE)


def quick_bootstrap(name: str):
    """The quick audit's bootstrap (from the sweep's in-range best fit)."""
    return quick_audit(name).bootstrap


def quick_identifiability(name: str):
    """The quick audit's identifiability stage (at the sweep's in-range best fit)."""
    return quick_audit(name).identifiability
