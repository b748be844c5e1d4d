"""The derivative audit's references, cross-checked by calling numdifftools directly here (not
through the project's wrapper in audit/derivatives/numeric.py)."""
from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import numdifftools
import numpy as np
from scenario_files import LOG_RATE_PARAMETERS, scenario_toml

from audit.derivatives.check import audit_derivatives, compare_derivatives
from audit.inputs.scenario import load_scenario

ROOT = Path(__file__).resolve().parents[1]
BUNDLED = ROOT / "scenarios" / "probe-cooling"


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


def test_a_rerun_reads_the_exact_reference_back_without_computer_algebra(tmp_path):
    first = audit_derivatives(load_scenario(BUNDLED), count=4, cache=tmp_path / "cache")
    assert first.reference == "exact"
    # The rerun in a fresh interpreter: sympy (computer algebra, about a second to import) must
    # stay unloaded, and the reference read back must be the one computed.
    script = ("import sys, numpy as np\nfrom audit.derivatives.check import audit_derivatives\n"
              "from audit.inputs.scenario import load_scenario\n"
              f"audit = audit_derivatives(load_scenario({str(BUNDLED)!r}), count=4, cache={str(tmp_path / 'cache')!r})\n"
              f"np.save({str(tmp_path / 'exact.npy')!r}, audit.exact)\n"
              "print(audit.reference, 'sympy' in sys.modules)\n")
    done = subprocess.run([sys.executable, "-c", script], cwd=ROOT, capture_output=True, text=True, check=True)
    assert done.stdout.split() == ["exact", "False"]
    again = np.load(tmp_path / "exact.npy")
    assert np.array_equal(again, first.exact)
    for k, point in enumerate(first.points):
        # Reference: numdifftools called here, as in the test of the bundled scenario above.
        direct = numdifftools_columns(load_scenario(BUNDLED).problem, point)
        assert np.all(np.abs(again[k] - direct) <= 1e-8 * np.abs(direct).max(axis=1, keepdims=True))


def test_a_stored_reference_is_not_used_once_the_model_no_longer_matches_the_formula(tmp_path):
    folder = tmp_path / "scenario"
    shutil.copytree(BUNDLED, folder)
    cache = tmp_path / "cache"
    scenario = load_scenario(folder)
    points, labels = np.vstack([scenario.start, 1.1 * scenario.start]), ("start", "beside it")
    stored = compare_derivatives(scenario.problem, points, labels, predictor_names=scenario.x_names, cache=cache)
    assert stored.reference == "exact"
    model = folder / "model.py"
    model.write_text(model.read_text().replace("return T_env + dT", "return T_env + 1.5 * dT"))
    changed = compare_derivatives(load_scenario(folder).problem, points, labels, predictor_names=scenario.x_names,
                                  cache=cache)
    # The formula's values and derivatives at the same points were stored once and read back;
    # the changed model's values are compared with them afresh, and it loses the exact reference.
    assert len(list(cache.iterdir())) == 1
    assert changed.reference == "numeric"
    assert any("does not reproduce the model function" in note for note in changed.notes)
