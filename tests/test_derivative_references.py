"""The derivative audit's references, cross-checked by calling numdifftools directly here (not
through the project's wrapper in audit/derivatives/numeric.py)."""
from __future__ import annotations

from pathlib import Path

import numdifftools
import numpy as np
from scenario_files import LOG_RATE_PARAMETERS, scenario_toml

from audit.derivatives.check import audit_derivatives
from audit.inputs.scenario import load_scenario

BUNDLED = Path(__file__).resolve().parents[1] / "scenarios" / "probe-cooling"


def numdifftools_columns(problem, point: np.ndarray) -> np.ndarray:
    """(n, m) ∂f/∂a_j at ``point`` by numdifftools.Jacobian, steps proportional to each parameter."""
    steps = numdifftools.MaxStepGenerator(base_step=0.1, step_nom=np.abs(point))
    jacobian = numdifftools.Jacobian(lambda a: problem.predict(a[None, :])[0], step=steps)(point)
    return np.asarray(jacobian).reshape(problem.n_obs, problem.n_params).T


def test_bundled_scenario_has_no_false_alarm_and_its_references_match_numdifftools():
    scenario = load_scenario(BUNDLED)
    audit = audit_derivatives(scenario)
    assert audit.reference == "exact" and audit.jacobian_source == "hand"
    assert audit.labels[:2] == ("best fit", "start") and len(audit.labels) == 22
    assert audit.verdict == ("agrees", "agrees", "agrees") and not audit.has_finding
    assert audit.consequences is None
    for k, point in enumerate(audit.points):
        direct = numdifftools_columns(scenario.problem, point)
        scale = np.abs(direct).max(axis=1, keepdims=True)
        # Reference: numdifftools called here. The exact (symbolic) columns, the wrapper's
        # numeric ones and the hand-derived ones all agree with it to 1e-8 of each column's size.
        for name, columns in (("exact", audit.exact[k]), ("numeric", audit.numeric[k]), ("hand", audit.hand[k])):
            assert np.all(np.abs(columns - direct) <= 1e-8 * scale), (audit.labels[k], name)


def test_a_formula_model_is_cross_checked_against_numdifftools(write_scenario):
    # The formula's derivatives come from computer algebra: nothing hand-made, but they are
    # still compared with numdifftools (the outside reference) and must agree.
    toml = scenario_toml(model={"expression": "amplitude * exp(-rate * t) + offset"},
                         parameters={**LOG_RATE_PARAMETERS, "offset": {"start": 1.0, "range": [-2.0, 2.0]}})
    folder = write_scenario(toml, data="""
        t,signal
        0,5.0
        1,3.4
        2,2.4
        3,1.8
        4,1.4
        6,1.1
        """)
    scenario = load_scenario(folder)
    audit = audit_derivatives(scenario, count=8)
    assert audit.jacobian_source == "formula" and audit.reference == "numeric"
    assert audit.verdict == ("agrees",) * 3 and not audit.has_finding
    assert np.nanmax(audit.max_relative_error) < 1e-9
    t = np.array([0, 1, 2, 3, 4, 6.0])
    for k, point in enumerate(audit.points):
        amplitude, rate, _ = point
        direct = numdifftools_columns(scenario.problem, point)
        # Reference: numdifftools called here, and the derivatives by hand:
        # ∂/∂amplitude = e^(−rate·t), ∂/∂rate = −amplitude·t·e^(−rate·t), ∂/∂offset = 1.
        by_hand = np.vstack([np.exp(-rate * t), -amplitude * t * np.exp(-rate * t), np.ones_like(t)])
        np.testing.assert_allclose(direct, by_hand, rtol=1e-8, atol=1e-10)
        np.testing.assert_allclose(audit.hand[k], by_hand, rtol=1e-12, atol=1e-14)
        np.testing.assert_allclose(audit.numeric[k], direct, rtol=1e-8, atol=1e-10)
