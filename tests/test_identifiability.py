"""Identifiability against outside references: regression formulas, NIST StRD, closed-form
collinearity indices, scipy refits, and textbook identifiability cases."""
from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from scenario_files import csv_text, data_columns, scenario_toml
from scipy import stats
from scipy.optimize import brentq, least_squares

from audit import Problem
from audit.cli import main
from audit.engine.best_fit import best_known_fit
from audit.identifiability.analysis import analyse, identify_scenario
from audit.identifiability.collinearity import collinearity_indices
from audit.inputs.scenario import load_scenario
from audit.inputs.settings import IdentifiabilitySettings, SolverSettings
from audit.parallel.plan import ParallelPlan
from audit.validation.reference import log_relative_error

BUNDLED = Path(__file__).resolve().parents[1] / "scenarios" / "probe-cooling"
TIGHT = SolverSettings(tolerance=1e-12, max_iterations=1000)


def no_ranges(n: int) -> dict:
    return dict(lower=np.full(n, np.nan), upper=np.full(n, np.nan), log_axis=np.zeros(n, dtype=bool))


def unit_columns(cosines: list[float], m: int = 40, seed: int = 5) -> np.ndarray:
    """(m, k) unit columns whose pairwise cosines are ``cosines`` (a k×k Gram matrix's
    off-diagonal, given row by row for k = 2 or 3), built from an orthonormal basis."""
    basis, _ = np.linalg.qr(np.random.default_rng(seed).standard_normal((m, 3)))
    size = 2 if len(cosines) == 1 else 3
    gram = np.eye(size)
    gram[np.triu_indices(size, 1)] = cosines
    gram = gram + np.triu(gram, 1).T
    factor = np.linalg.cholesky(gram)                  # rows: coordinates of each column in the basis
    return basis[:, :size] @ factor.T


def linear_problem(columns: np.ndarray, weights: np.ndarray | None = None, seed: int = 9) -> Problem:
    """y = Σ a_j·c_j(x) with x the observation index: a model linear in its parameters."""
    m, k = columns.shape
    names = tuple(f"a{j + 1}" for j in range(k))

    def model(x, *params):
        index = x.astype(int)
        return sum(p * columns[index, j] for j, p in enumerate(params))

    noise = np.random.default_rng(seed).standard_normal(m) * 0.05
    y = columns @ np.arange(1.0, k + 1) + noise
    return Problem(model, np.arange(float(m)), y, names, weights=weights)


# ---------------------------------------------------------------- profile = t interval for linear models
def test_profile_interval_of_a_linear_model_is_the_exact_t_interval():
    # Reference: for a model linear in its parameters the profile SSR is exactly quadratic, and the
    # profile level SSR_min·(1 + F(1, ν)/ν) with F(1, ν) = t²(ν) gives β̂ ∓ t·se (any regression text,
    # e.g. Draper & Smith, Applied Regression Analysis); β̂ and se from numpy.linalg (weighted least
    # squares), t from scipy.stats.
    rng = np.random.default_rng(11)
    x = np.linspace(0.0, 4.0, 25)
    sigma = 0.1 + 0.05 * x

    def quadratic(x, b0, b1, b2):
        return b0 + b1 * x + b2 * x**2

    y = quadratic(x, 1.0, -0.5, 0.3) + sigma * rng.standard_normal(x.size)
    problem = Problem(quadratic, x, y, ("b0", "b1", "b2"), weights=1 / sigma**2)
    params, outcome = best_fit(problem, np.zeros(3), TIGHT)
    # 15 steps per side over 4 half-widths: the crossing falls between grid points.
    result = analyse(problem, params, **no_ranges(3), settings=IdentifiabilitySettings(profile_points=31),
                     fit_outcome=outcome)

    design = np.column_stack([np.ones_like(x), x, x**2]) / sigma[:, None]
    beta, ssr, *_ = np.linalg.lstsq(design, y / sigma, rcond=None)
    dof = x.size - 3
    se = np.sqrt(ssr[0] / dof * np.diag(np.linalg.inv(design.T @ design)))
    t = stats.t.ppf(0.975, dof)
    np.testing.assert_allclose(result.params, beta, rtol=1e-9)
    np.testing.assert_allclose(result.profiles.lower, beta - t * se, rtol=1e-7, atol=1e-9)
    np.testing.assert_allclose(result.profiles.upper, beta + t * se, rtol=1e-7, atol=1e-9)
    assert math.isclose(result.profiles.f_quantile, t**2, rel_tol=1e-9)   # F(1, ν) = t²(ν)
    assert not result.flagged


def test_profile_points_agree_with_scipy_refits():
    # Reference: scipy.optimize.least_squares refitting the other parameters with one held fixed.
    scenario = load_scenario(BUNDLED)
    problem = scenario.problem
    result = identify_scenario(scenario, points=11)
    profiles = result.profiles
    checked = 0
    for j in range(problem.n_params):
        for point in (1, 3, 7, 9):
            if not np.isfinite(profiles.ssr[j, point]):
                continue
            fixed = profiles.values[j, point]
            free = np.arange(problem.n_params) != j

            def residual(theta):
                params = result.params.copy()
                params[free], params[j] = theta, fixed
                return problem.sqrt_weights * (problem.predict(params[None, :])[0] - problem.y)

            found = least_squares(residual, result.params[free], method="lm", xtol=1e-14, ftol=1e-14, gtol=1e-14)
            assert math.isclose(profiles.ssr[j, point], 2 * found.cost, rel_tol=1e-9)
            np.testing.assert_allclose(profiles.params[j, point][free], found.x, rtol=1e-6)
            checked += 1
    assert checked == 12


def test_log_axis_profile_walks_in_equal_ratios_and_finds_the_exact_interval():
    # Reference: for y = A·exp(−k·x) the profile over A is closed form (A = e·y / e·e with
    # e = exp(−k·x), a linear least-squares fit), and the interval ends are its crossings of the
    # threshold, found by scipy.optimize.brentq.
    rng = np.random.default_rng(4)
    x = np.linspace(0.0, 0.3, 30)

    def decay(x, amplitude, rate):
        return amplitude * np.exp(-rate * x)

    y = decay(x, 2.0, 0.3) + 0.05 * rng.standard_normal(x.size)
    problem = Problem(decay, x, y, ("amplitude", "rate"))
    params, outcome = best_fit(problem, np.array([1.5, 0.5]), TIGHT)
    result = analyse(problem, params, lower=np.array([0.01, 1e-3]), upper=np.array([100.0, 100.0]),
                     log_axis=np.array([False, True]), fit_outcome=outcome)

    def profile_ssr(rate):
        e = np.exp(-rate * x)
        residual = y - (e @ y / (e @ e)) * e
        return residual @ residual

    dof = x.size - 2
    threshold = profile_ssr(params[1]) * (1 + stats.f.ppf(0.95, 1, dof) / dof)
    exact = [brentq(lambda k: profile_ssr(k) - threshold, low, high) for low, high in ((1e-3, params[1]),
                                                                                        (params[1], 100.0))]
    profiles = result.profiles
    np.testing.assert_allclose([profiles.lower[1], profiles.upper[1]], exact, rtol=1e-4)
    assert list(profiles.log) == [False, True]
    below = profiles.values[1][: len(profiles.values[1]) // 2 + 1]      # the bound (clipped) … the estimate
    assert below[0] == pytest.approx(1e-3) and below[-1] == pytest.approx(params[1])
    np.testing.assert_allclose(below[1:] / below[:-1], below[1] / below[0], rtol=1e-9)
    steps = np.diff(profiles.values[0])
    np.testing.assert_allclose(steps[: len(steps) // 2], steps[0], rtol=1e-9)   # A: even steps


# ---------------------------------------------------------------- NIST StRD standard errors
NIST_MODELS = {
    "Misra1a": lambda x, b1, b2: b1 * (1 - np.exp(-b2 * x)),
    "Chwirut2": lambda x, b1, b2, b3: np.exp(-b1 * x) / (b2 + b3 * x),
    "DanWood": lambda x, b1, b2: b1 * x**b2,
    "Rat42": lambda x, b1, b2, b3: b1 / (1 + np.exp(b2 - b3 * x)),
    "MGH09": lambda x, b1, b2, b3, b4: b1 * (x**2 + x * b2) / (x**2 + x * b3 + b4),
    "Eckerle4": lambda x, b1, b2, b3: (b1 / b2) * np.exp(-0.5 * ((x - b3) / b2) ** 2),
    "Kirby2": lambda x, b1, b2, b3, b4, b5: (b1 + b2 * x + b3 * x**2) / (1 + b4 * x + b5 * x**2),
    "MGH10": lambda x, b1, b2, b3: b1 * np.exp(b2 / (x + b3)),
    "Lanczos3": lambda x, b1, b2, b3, b4, b5, b6: (b1 * np.exp(-b2 * x) + b3 * np.exp(-b4 * x)
                                                   + b5 * np.exp(-b6 * x)),
}


def misra1a_jacobian(x, b1, b2):
    decay = np.exp(-b2 * x)
    return [1 - decay, b1 * x * decay]


@pytest.mark.parametrize("name", sorted(NIST_MODELS))
def test_standard_errors_match_nist_certified_values(nist, name):
    # Reference: the certified standard deviations of the NIST StRD file (LRE ≥ 4).
    reference = nist(name)
    jacobian = misra1a_jacobian if name == "Misra1a" else None      # the others: central differences
    problem = Problem(NIST_MODELS[name], reference.x, reference.y, reference.names, jacobian=jacobian)
    params, outcome = best_fit(problem, reference.start2, TIGHT)
    result = analyse(problem, params, **no_ranges(problem.n_params), settings=IdentifiabilitySettings(profile_points=5),
                     fit_outcome=outcome)
    assert outcome == "converged"
    assert np.all(log_relative_error(result.params, reference.certified) >= 6)
    assert np.all(log_relative_error(result.estimates.std_errors, reference.certified_sd) >= 4)
    assert not result.structural


# ---------------------------------------------------------------- collinearity indices
@pytest.mark.parametrize("degrees", [90.0, 60.0, 25.0, 3.0])
def test_collinearity_index_of_two_columns_at_a_known_angle(degrees):
    # Reference: Brun, Reichert & Künsch (2001): γ = 1/sqrt(λ_min(S̃ᵀS̃)); for two unit columns at
    # angle φ the Gram matrix [[1, cos φ], [cos φ, 1]] has eigenvalues 1 ± cos φ (closed form), so
    # γ = 1/sqrt(1 − |cos φ|).
    cosine = math.cos(math.radians(degrees))
    columns = unit_columns([cosine]) * np.array([7.0, 0.01])    # units must not matter
    found = collinearity_indices(columns, ("a", "b"), limit=15.0)
    assert found.index.shape == (1,)
    assert math.isclose(found.index[0], 1 / math.sqrt(1 - abs(cosine)), rel_tol=1e-10)


def test_collinearity_indices_of_three_equally_inclined_columns():
    # Reference: closed form: three unit columns with equal pairwise cosine c have Gram matrix
    # (1 − c)·I + c·11ᵀ with eigenvalues 1 + 2c and 1 − c (twice); every pair has 1 − c
    # (Brun et al. 2001 formula γ = 1/sqrt(λ_min)). With weights, the stage must use the weighted
    # Jacobian (rows divided by sigma).
    c = 0.9
    target = unit_columns([c, c, c])
    sigma = np.linspace(0.5, 2.0, target.shape[0])
    problem = linear_problem(target * sigma[:, None], weights=1 / sigma**2)
    params, outcome = best_fit(problem, np.zeros(3), TIGHT)
    result = analyse(problem, params, **no_ranges(3), settings=IdentifiabilitySettings(profile_points=5),
                     fit_outcome=outcome)
    collinearity = result.collinearity
    pairs = collinearity.size == 2
    np.testing.assert_allclose(collinearity.index[pairs], 1 / math.sqrt(1 - c), rtol=1e-10)
    np.testing.assert_allclose(collinearity.index[~pairs], 1 / math.sqrt(1 - c), rtol=1e-10)
    assert 1 / math.sqrt(1 - c) < collinearity.limit
    assert [list(subset) for subset in collinearity.largest_identifiable] == [[0, 1, 2]]


def test_collinearity_indices_of_many_subsets_match_numpy_eigenvalues():
    # Reference: numpy.linalg.eigvalsh of each subset's unit-column Gram matrix (Brun et al. 2001:
    # γ_K = 1/sqrt(λ_min)), against fitaudit's batched QR + SVD evaluation.
    rng = np.random.default_rng(3)
    base = rng.standard_normal((60, 7))
    base[:, 6] = base[:, 0] - 0.98 * base[:, 1] + 0.02 * base[:, 6]     # one near-dependence
    found = collinearity_indices(base * rng.uniform(0.1, 50, 7), tuple("abcdefg"), limit=15.0)
    unit = base / np.linalg.norm(base, axis=0)
    assert found.max_size == 6 and len(found.index) == sum(math.comb(7, k) for k in range(2, 7))
    for members, gamma in zip(found.members, found.index):
        subset = members[members >= 0]
        smallest = np.linalg.eigvalsh(unit[:, subset].T @ unit[:, subset])[0]
        assert math.isclose(gamma, 1 / math.sqrt(smallest), rel_tol=1e-6)
    assert found.largest_identifiable.shape[1] == 6
    assert all(not {0, 1, 6} <= set(subset) for subset in found.largest_identifiable)


# ---------------------------------------------------------------- weak directions
def test_weak_direction_of_two_nearly_parallel_columns():
    # Reference: closed form: for unit columns with cosine c > 0 the smallest eigenvector of
    # [[1, c], [c, 1]] is (1, −1)/√2 with eigenvalue 1 − c, so the weak combination is a1 − a2 and
    # the scaled condition number is sqrt((1 + c)/(1 − c)).
    c = 0.9999995                                     # condition number about 2000
    problem = linear_problem(unit_columns([c]) * np.array([3.0, 0.2]))
    params, outcome = best_fit(problem, np.zeros(2), TIGHT)
    result = analyse(problem, params, **no_ranges(2), settings=IdentifiabilitySettings(profile_points=5),
                     fit_outcome=outcome)
    np.testing.assert_allclose(result.directions[-1], np.array([1.0, -1.0]) / math.sqrt(2), atol=1e-8)
    assert math.isclose(result.condition_scaled, math.sqrt((1 + c) / (1 - c)), rel_tol=1e-8)
    assert result.weak_text[0].startswith("a1 and a2 trade off against each other: a1 − 1.00·a2 is barely constrained")


# ---------------------------------------------------------------- flags
def test_structurally_non_identifiable_product_is_flagged():
    # Reference: common practice: in y = a·b·x only the product a·b is determined, so the Jacobian
    # columns x·b and x·a are proportional everywhere and every profile is flat.
    rng = np.random.default_rng(3)
    x = np.linspace(1.0, 10.0, 30)
    problem = Problem(lambda x, a, b: a * b * x, x, 6.0 * x + 0.3 * rng.standard_normal(x.size), ("a", "b"))
    params, outcome = best_fit(problem, np.array([1.0, 1.0]), SolverSettings())
    result = analyse(problem, params, lower=np.array([0.1, 0.1]), upper=np.array([20.0, 20.0]),
                     log_axis=np.array([True, True]), fit_outcome=outcome)
    assert result.structural and result.rank.zero_at_fit and result.rank.zero_at_points.all()
    assert result.flagged and result.practical.all()
    assert set(result.profiles.lower_status) == set(result.profiles.upper_status) == {"open_at_bound"}
    assert "not constrained at all" in result.weak_text[0]


def test_saturation_curve_seen_only_at_low_x_is_practically_non_identifiable():
    # Reference: common practice: with data only at x ≪ K, y = Vmax·x/(K + x) ≈ (Vmax/K)·x, so the
    # data fix the initial slope but not Vmax and K apart: the profiles stay open upwards.
    rng = np.random.default_rng(3)
    x = np.linspace(0.1, 2.0, 25)

    def saturation(x, vmax, k):
        return vmax * x / (k + x)

    problem = Problem(saturation, x, saturation(x, 10.0, 50.0) * (1 + 0.02 * rng.standard_normal(x.size)),
                      ("vmax", "k"))
    params, outcome = best_fit(problem, np.array([8.0, 40.0]), SolverSettings())
    result = analyse(problem, params, lower=np.array([0.1, 0.1]), upper=np.array([1000.0, 1000.0]),
                     log_axis=np.array([True, True]), fit_outcome=outcome)
    assert outcome == "converged" and not result.structural
    assert result.flagged and result.practical.all()
    assert all(status != "closed" for status in result.profiles.upper_status)
    assert list(result.profiles.lower_status) == ["closed", "closed"]


def test_bundled_scenario_is_identifiable():
    # Reference: common practice: a decay observed for several time constants, with its plateau,
    # determines the start level, the jump and the time constant.
    result = identify_scenario(load_scenario(BUNDLED))
    assert not result.flagged and not result.structural and not result.practical.any()
    assert (result.profiles.lower_status == "closed").all() and (result.profiles.upper_status == "closed").all()
    assert result.collinearity.largest_identifiable.shape == (1, 3)


def test_profiles_are_the_same_whatever_runs_them():
    # Reference: common practice: spreading work over processes must not change results.
    scenario = load_scenario(BUNDLED)
    alone = identify_scenario(scenario, points=9)
    spread = identify_scenario(scenario, points=9, plan=ParallelPlan(jobs=2))
    np.testing.assert_array_equal(alone.profiles.ssr, spread.profiles.ssr)
    np.testing.assert_array_equal(alone.profiles.lower, spread.profiles.lower)


# ---------------------------------------------------------------- command line
def test_identify_command_writes_json_and_figures(tmp_path, capsys):
    status = main(["identify", str(BUNDLED), "--profile-points", "15", "--jobs", "1", "-o", str(tmp_path), "--json"])
    printed = json.loads(capsys.readouterr().out)
    assert status == 0
    saved = json.loads((tmp_path / "identifiability.json").read_text())
    assert saved == printed and printed["flagged"] is False
    assert len(printed["profiles"]["parameters"][0]["values"]) == 15
    assert {path.name for path in (tmp_path / "figures").glob("*.png")} == {
        "identifiability-profiles.png", "identifiability-correlation.png",
        "identifiability-weak-directions.png", "identifiability-collinearity.png"}


def test_identify_command_flags_a_product_model_and_rejects_bad_points(write_scenario, capsys, tmp_path):
    x = np.arange(1, 13)
    folder = write_scenario(
        scenario_toml(data=data_columns("x", "y"), parameters={"a": {"start": 1.0, "range": [0.1, 10.0]},
                                                                "b": {"start": 1.0, "range": [0.1, 10.0]}}),
        model="def model(x, a, b):\n    return a * b * x\n",
        data=csv_text("x,y", x, 2.0 * x + 0.1 * (-1.0) ** x, formats=""))
    assert main(["identify", str(folder), "--jobs", "1", "-o", str(tmp_path)]) == 1
    shown = capsys.readouterr().out
    assert "structurally non-identifiable" in shown
    assert main(["identify", str(folder), "--profile-points", "3", "-o", str(tmp_path)]) == 2
    assert "--profile-points 3" in capsys.readouterr().err


def best_fit(problem: Problem, start, solver: SolverSettings) -> tuple[np.ndarray, str]:
    """The fit the identifiability stage audits when no sweep ran: the best from ``start``."""
    known = best_known_fit(problem, np.asarray(start, dtype=float), **solver.fit_options(), accept_lost_rank=True)
    assert known is not None, "nothing from the start converged"
    return known.params, known.outcome
