"""The bundled scenarios, part 1: every one loads and regenerates its data; the benign weighted
fit passes everything; the wrong derivative, the low-pressure saturation curve and the
Arrhenius forms show the diagnoses their READMEs promise, checked against outside references.

Each scenario is audited once through the stage functions with a small design
(``gallery_audit.quick_audit``).
"""
from __future__ import annotations

import shutil
import subprocess
import sys

import numdifftools as nd
import numpy as np
import pytest
from gallery_audit import SCENARIOS, bundled_names, quick_audit, quick_bootstrap, quick_identifiability
from scipy import stats
from scipy.optimize import least_squares

import audit

R_KJ = 0.0083145   # gas constant in kJ/(mol·K), as written in the catalyst formulas


def scipy_fit(problem, start, free=None, fixed=None):
    """Weighted least squares by scipy from ``start``; ``free`` (n,) bool pins the others at ``fixed``."""
    free = np.ones(problem.n_params, bool) if free is None else free
    full = np.array(start if fixed is None else fixed, dtype=float)

    scale = 1.0 if problem.weights is None else np.sqrt(problem.weights)

    def residuals(values):
        full[free] = values
        return scale * (problem.predict(full[None])[0] - problem.y)

    found = least_squares(residuals, np.asarray(start, float)[free], method="lm", xtol=1e-15, ftol=1e-15,
                          gtol=1e-15, max_nfev=20000)
    full[free] = found.x
    return full.copy(), float(2 * found.cost), found.jac


def unit_column_condition(jacobian: np.ndarray) -> float:
    return float(np.linalg.cond(jacobian / np.linalg.norm(jacobian, axis=0)))


@pytest.mark.parametrize("name", bundled_names())
def test_bundled_scenario_loads_by_name_and_its_generator_rebuilds_its_data(name, tmp_path):
    scenario = audit.load_scenario(name)
    assert scenario.path.resolve() == (SCENARIOS / name).resolve() and scenario.warnings == ()
    folder = SCENARIOS / name
    assert {"scenario.toml", "data.csv", "generate.py", "README.md"} <= {path.name for path in folder.iterdir()}
    # The data are the generator's output with its fixed seed, byte for byte.
    copy = tmp_path / "scenarios"
    shutil.copytree(SCENARIOS, copy, ignore=shutil.ignore_patterns("data.csv", "__pycache__"))
    subprocess.run([sys.executable, "generate.py"], cwd=copy / name, check=True, capture_output=True)
    assert (copy / name / "data.csv").read_bytes() == (folder / "data.csv").read_bytes()


def test_capacitor_charging_is_benign_and_weighted():
    found = quick_audit("capacitor-charging")
    problem, sweep = found.scenario.problem, found.sweep
    sigma = np.sqrt(1 / problem.weights)
    assert sigma.max() / sigma.min() == pytest.approx(10.0)            # two meter ranges, 0.3 and 3 mV
    # Reference: scipy.optimize.least_squares on the weighted residuals (y − f)/sigma.
    params, ssr, jacobian = scipy_fit(problem, found.scenario.start)
    np.testing.assert_allclose(sweep.best_params, params, rtol=1e-7)
    assert len(sweep.solution_ssr) == 1 and sweep.best_ssr == pytest.approx(ssr, rel=1e-9)
    assert sweep.share("best", "gn", 0.1) > 0.95
    # The benign reference passes every check of the verdict (thresholds: the README's table).
    assert found.verdict.overall == "pass"
    assert found.derivatives.verdict == ("agrees",) * 3
    assert quick_bootstrap("capacitor-charging").to_dict()["flags"] == []
    identified = quick_identifiability("capacitor-charging")
    assert identified.findings == [] and not identified.practical.any()
    # Reference: the weighted covariance s²·(JᵀJ)⁻¹ of scipy's Jacobian, by numpy.linalg.inv.
    covariance = ssr / (problem.n_obs - 3) * np.linalg.inv(jacobian.T @ jacobian)
    np.testing.assert_allclose(identified.estimates.std_errors, np.sqrt(np.diag(covariance)), rtol=1e-5)


def test_biofilm_growth_ships_a_sign_error_in_the_t_mid_column():
    found = quick_audit("biofilm-growth")
    derivatives = found.derivatives
    assert derivatives.verdict == ("agrees", "agrees", "wrong")
    assert derivatives.diagnoses[2].kind == "sign_error"
    # Reference: numdifftools differentiates the model itself at every check point; the shipped
    # column is its negative there, the other two columns agree with it.
    problem = found.scenario.problem
    for point in derivatives.points[:5]:
        def model_at(t_mid, point=point):
            return problem.predict(np.r_[point[:2], t_mid][None])[0]
        true = nd.Derivative(model_at)(point[2])
        hand = problem.derivatives(point[None])[0]
        np.testing.assert_allclose(hand[2], -true, rtol=1e-6, atol=1e-9 * np.abs(true).max())
    # With the wrong column no Gauss-Newton run reaches a fit, and the sweep says where to look.
    assert found.sweep.recommended is None
    assert "t_mid" in found.sweep.next_step and "derivatives" in found.sweep.next_step


def test_gas_uptake_at_low_pressure_leaves_capacity_and_affinity_open():
    found = quick_audit("gas-uptake-low-pressure")
    problem = found.scenario.problem
    identified = quick_identifiability("gas-uptake-low-pressure")
    assert list(identified.profiles.upper_status) == ["open_at_bound", "closed"]
    assert list(identified.profiles.lower_status) == ["closed", "open_at_bound"]
    assert identified.estimates.correlation[0, 1] < -0.999
    # Reference: scipy refits. With q_max pinned at its upper range bound (100 mmol/g) and K
    # refitted, the SSR stays below the profile threshold SSR_min·(1 + F(0.95; 1, m−2)/(m−2))
    # (F quantile by scipy.stats): the data cannot bound the capacity from above.
    best, ssr_min, _ = scipy_fit(problem, found.sweep.best_params)
    dof = problem.n_obs - 2
    threshold = ssr_min * (1 + stats.f.ppf(0.95, 1, dof) / dof)
    pinned, ssr_at_bound, _ = scipy_fit(problem, [100.0, best[1]], free=np.array([False, True]))
    assert ssr_at_bound < threshold
    assert pinned[0] * pinned[1] == pytest.approx(best[0] * best[1], rel=0.05)   # the slope q_max·K stays


def test_centred_arrhenius_form_is_better_conditioned_and_converges_more_often():
    raw, centred = quick_audit("catalyst-rate-raw"), quick_audit("catalyst-rate-centred")
    raw_fit, raw_ssr, raw_jacobian = scipy_fit(raw.scenario.problem, raw.sweep.best_params)
    centred_fit, centred_ssr, centred_jacobian = scipy_fit(centred.scenario.problem, centred.sweep.best_params)
    # Same data, same curve: the minima agree, and lnA = ln_k350 + Ea/(R·350) (hand derivation:
    # expand Ea/R·(1/T − 1/350) in the centred exponent).
    assert centred_ssr == pytest.approx(raw_ssr, rel=1e-9)
    assert raw_fit[0] == pytest.approx(centred_fit[0] + centred_fit[1] / (R_KJ * 350), rel=1e-7)
    # Reference: numpy.linalg.cond of the weighted Jacobian with unit-length columns.
    raw_condition, centred_condition = unit_column_condition(raw_jacobian), unit_column_condition(centred_jacobian)
    assert centred_condition < raw_condition / 10
    raw_identified = quick_identifiability("catalyst-rate-raw")
    centred_identified = quick_identifiability("catalyst-rate-centred")
    assert raw_identified.condition_scaled == pytest.approx(raw_condition, rel=1e-4)
    assert centred_identified.condition_scaled == pytest.approx(centred_condition, rel=1e-4)
    assert abs(raw_identified.estimates.correlation[0, 1]) > 0.99
    assert abs(centred_identified.estimates.correlation[0, 1]) < 0.1
    assert np.all(centred.sweep.share("best") > raw.sweep.share("best") + 0.1)
