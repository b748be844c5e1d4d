"""The derivative audit: correct Jacobians pass, planted mistakes are found and named.

Outside references: numdifftools (the numeric derivative the audit is built on, called here on
its own to confirm that the "correct" Jacobians are correct), sympy (to derive the NIST models'
Jacobians from the model lines of the NIST StRD files), scipy.optimize.least_squares (for the
best fit and the fit consequences), and calculus facts named beside each check.
"""
from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import numdifftools
import numpy as np
import pytest
import sympy
from scipy.optimize import least_squares

from audit import InputError, Outcome, Problem
from audit.cli import main
from audit.derivatives.check import audit_derivatives, compare_derivatives
from audit.engine.estimates import estimate
from audit.figures.derivatives import write_figures
from audit.inputs.scenario import load_scenario

BUNDLED = Path(__file__).resolve().parents[1] / "scenarios" / "probe-cooling"
NIST_FILES = ("BoxBOD Chwirut1 Chwirut2 DanWood ENSO Eckerle4 Gauss1 Gauss2 Kirby2 Lanczos1 Lanczos3 MGH09 "
              "MGH10 MGH17 Misra1a Misra1b Misra1c Misra1d Nelson Rat42 Rat43 Roszman1").split()


# ---------------------------------------------------------------- NIST models, differentiated by sympy
def nist_problem(reference, change=None) -> Problem:
    """The NIST model with a Jacobian derived by sympy from the file's own model lines.

    ``change(columns, x, params)`` may rewrite the list of derivative columns (a planted mistake).
    Nelson's response is modelled as log(y), as its model line says.
    """
    lines = [line for line in reference.model_lines if not re.match(r"\s*pi\s*=", line)]
    text = " ".join(lines).replace("[", "(").replace("]", ")").replace("arctan", "atan")
    left, right = text.split("=", 1)
    right = re.sub(r"\+\s*e\s*$", "", right.strip())
    symbols = {name: sympy.Symbol(name) for name in reference.names + reference.predictors}
    expression = sympy.sympify(right, locals={**symbols, "pi": sympy.pi})
    arguments = [symbols[name] for name in reference.predictors + reference.names]
    value = sympy.lambdify(arguments, expression, "numpy")
    partials = [sympy.lambdify(arguments, sympy.diff(expression, symbols[name]), "numpy") for name in reference.names]

    def rows(x):
        return [x] if len(reference.predictors) == 1 else list(x)

    def model(x, *params):
        return value(*rows(x), *params)

    def jacobian(x, *params):
        shape = np.broadcast_shapes(np.shape(params[0]), np.shape(x)[-1:])
        columns = [np.broadcast_to(partial(*rows(x), *params), shape) for partial in partials]
        return change(columns, x, params) if change else columns

    y = np.log(reference.y) if left.strip().startswith("log") else reference.y
    return Problem(model, reference.x, y, reference.names, jacobian=jacobian)


def nist_points(reference) -> np.ndarray:
    return np.vstack([reference.certified, reference.start1, reference.start2])


NIST_LABELS = ("certified", "start 1", "start 2")


@pytest.mark.parametrize("name", NIST_FILES)
def test_correct_nist_jacobians_raise_no_alarm_at_certified_values_and_both_starts(nist, name):
    reference = nist(name)
    problem = nist_problem(reference)
    points = nist_points(reference)
    # Outside reference: numdifftools on its own, point by point (steps proportional to each
    # parameter, as Kirby2's b5 ~ 1e-6 needs), confirms that the sympy Jacobian is right to 1e-6
    # of each column's size, so any alarm below would be false.
    for point in points:
        steps = numdifftools.MaxStepGenerator(base_step=0.1, step_nom=np.abs(point))
        numeric = numdifftools.Jacobian(lambda p: problem.predict(p[None, :])[0], step=steps)(point)
        hand = problem.derivatives(point[None, :])[0].T
        numeric = numeric.reshape(hand.shape)
        assert np.all(np.abs(hand - numeric) <= 1e-6 * np.abs(numeric).max(axis=0))
    audit = compare_derivatives(problem, points, NIST_LABELS, predictor_names=reference.predictors)
    assert audit.reference == "numeric" and audit.dropped == ()
    assert audit.verdict == ("agrees",) * len(reference.names)
    assert not audit.disagrees.any()
    assert np.nanmax(audit.max_relative_error) < 1e-6
    assert all(diagnosis.kind == "none" for diagnosis in audit.diagnoses)


# ---------------------------------------------------------------- planted mistakes
def replace(column: int, new):
    """A change that puts ``new(columns, x, params)`` into ``column``."""
    def change(columns, x, params):
        columns = list(columns)
        columns[column] = new(columns, x, params)
        return columns
    return change


def swap(first: int, second: int):
    def change(columns, x, params):
        columns = list(columns)
        columns[first], columns[second] = columns[second], columns[first]
        return columns
    return change


#: d/db2 of b1*(1 - (1 + b2*x/2)**(-2)) with the chain rule's inner factor x/2 forgotten.
MISRA1B_WITHOUT_INNER_FACTOR = replace(1, lambda c, x, p: c[1] * 2 / x)

PLANTED = [
    # (file, change, column, expected kind, expected factor or other parameter)
    ("Misra1b", replace(1, lambda c, x, p: -c[1]), 1, "sign_error", -1.0),
    ("Rat43", replace(3, lambda c, x, p: -c[3]), 3, "sign_error", -1.0),
    ("Eckerle4", replace(2, lambda c, x, p: -c[2]), 2, "sign_error", -1.0),
    ("MGH09", replace(0, lambda c, x, p: 2 * c[0]), 0, "constant_factor", 2.0),
    ("Roszman1", replace(3, lambda c, x, p: 0.5 * c[3]), 3, "constant_factor", 0.5),
    ("Lanczos1", replace(5, lambda c, x, p: np.pi * c[5]), 5, "constant_factor", np.pi),
    ("Rat43", swap(1, 2), 1, "swapped", "b3"),
    ("MGH09", swap(0, 3), 3, "swapped", "b1"),
    ("Misra1a", replace(1, lambda c, x, p: c[0]), 1, "copies_other", "b1"),
    ("Gauss1", replace(7, lambda c, x, p: c[4]), 7, "copies_other", "b5"),
    # Chain rule forgotten: d/db3 of exp(b2 - b3*x) without its inner factor -x, which makes it
    # exactly d/db2 (as the audit says).
    ("Rat43", replace(2, lambda c, x, p: -c[2] / x), 2, "copies_other", "b2"),
    # d/db4 of (1 + exp(b2 - b3*x))**(-1/b4) without its factor log(1 + exp(b2 - b3*x)).
    ("Rat43", replace(3, lambda c, x, p: c[3] / np.log1p(np.exp(p[1] - p[2] * x))), 3, "missing_term", None),
    # Quotient rule half done: d/db2 of (b1/b2)*exp(...) without -b1/b2**2 * exp(...).
    ("Eckerle4", replace(1, lambda c, x, p: c[1] + p[0] / p[1] ** 2 * np.exp(-0.5 * ((x - p[2]) / p[1]) ** 2)),
     1, "missing_term", None),
    ("Misra1b", MISRA1B_WITHOUT_INNER_FACTOR, 1, "missing_term", None),
    # A parameter factor forgotten: d/db2 of b1*exp(b2/(x+b3)) without b1.
    ("MGH10", replace(1, lambda c, x, p: c[1] / p[0]), 1, "parameter_factor", "b1**−1"),
]


@pytest.mark.parametrize("name, change, column, kind, detail", PLANTED)
def test_planted_mistakes_in_nist_models_are_found_and_named(nist, name, change, column, kind, detail):
    reference = nist(name)
    audit = compare_derivatives(nist_problem(reference, change), nist_points(reference), NIST_LABELS)
    diagnosis = audit.diagnoses[column]
    assert audit.verdict[column] == "wrong"
    assert diagnosis.kind == kind, diagnosis.summary
    if kind in ("sign_error", "constant_factor"):
        assert diagnosis.factor == pytest.approx(detail, rel=1e-6)
    elif kind in ("swapped", "copies_other"):
        assert diagnosis.other == detail
    elif kind == "parameter_factor":
        assert detail in diagnosis.summary
    untouched = [j for j in range(len(reference.names)) if j != column and audit.verdict[j] == "wrong"]
    assert kind == "swapped" or untouched == []


def test_missing_inner_factor_shows_as_error_correlated_with_x(nist):
    # d/db2 of b1*(1 - (1 + b2*x/2)**(-2)) with the inner factor x/2 forgotten: the error is
    # true·(2/x − 1), so it changes with x and is (anti)correlated with the true column.
    reference = nist("Misra1b")
    problem = nist_problem(reference, MISRA1B_WITHOUT_INNER_FACTOR)
    audit = compare_derivatives(problem, nist_points(reference), NIST_LABELS)
    diagnosis = audit.diagnoses[1]
    assert diagnosis.kind == "missing_term"
    assert abs(diagnosis.correlation_x["x"]) > 0.5
    assert set(diagnosis.correlation_columns) == {"b1", "b2"}
    assert "missing or wrong" in diagnosis.summary


def hinge_problem(jacobian) -> Problem:
    """A broken-stick model a + b·max(x − c, 0) on constructed data (a kink at x = c)."""
    x = np.linspace(0.0, 10.0, 41)

    def model(x, a, b, c):
        return a + b * np.maximum(x - c, 0.0)

    return Problem(model, x, model(x, 1.0, 2.0, 4.1), ("a", "b", "c"), jacobian=jacobian)


def hinge_correct(x, a, b, c):
    # Calculus: d/dc of b·max(x − c, 0) is −b where x > c and 0 where x < c.
    above = (x > c).astype(float)
    return [np.ones_like(above), np.maximum(x - c, 0.0), -b * above]


def test_a_branch_forgotten_is_right_in_part_of_the_range_only():
    def forgot_branch(x, a, b, c):
        columns = hinge_correct(x, a, b, c)
        return columns[:2] + [-b * np.ones_like(columns[2])]

    points = np.array([[1.0, 2.0, 4.1], [0.5, 1.0, 2.3], [2.0, 3.0, 7.7]])
    audit = compare_derivatives(hinge_problem(forgot_branch), points, ("p1", "p2", "p3"))
    diagnosis = audit.diagnoses[2]
    assert audit.verdict == ("agrees", "agrees", "wrong")
    assert diagnosis.kind == "part_of_range"
    # Wrong only below the kink: at the point with c = 7.7, x < 7.7 is where it fails.
    assert "wrong for x in [0, 7.5]" in diagnosis.summary


def test_a_kink_at_an_observation_makes_the_numeric_derivative_unreliable_there():
    # c = 4.0 coincides with an observation: max(x − c, 0) has no derivative in c there
    # (left and right derivatives −b and 0 differ), so that element cannot be judged.
    points = np.array([[1.0, 2.0, 4.0], [1.0, 2.0, 4.1]])
    audit = compare_derivatives(hinge_problem(hinge_correct), points, ("on an observation", "between"))
    assert audit.verdict == ("agrees", "agrees", "agrees")
    assert not audit.smooth[0, 2].all() and audit.smooth[1].all()
    assert (~audit.usable[0, 2]).sum() == 1
    assert audit.diagnoses[2].unreliable_points == ("on an observation",)
    assert "not smooth" in audit.diagnoses[2].summary


def power_problem(jacobian) -> Problem:
    """b1·x**b2 on x from 0 (constructed data)."""
    x = np.linspace(0.0, 4.0, 17)

    def model(x, b1, b2):
        return b1 * x**b2

    return Problem(model, x, model(x, 2.0, 1.5), ("b1", "b2"), jacobian=jacobian)


def test_a_column_that_is_nan_where_the_model_is_finite_is_reported():
    # d/db2 of b1·x**b2 is b1·x**b2·log(x); at x = 0 it is 0·(−inf) = NaN in floating point,
    # while the model is 0 for every b2 > 0, so the true derivative there is 0 (calculus).
    def jacobian(x, b1, b2):
        with np.errstate(divide="ignore", invalid="ignore"):
            return [x**b2, b1 * x**b2 * np.log(x)]

    audit = compare_derivatives(power_problem(jacobian), np.array([[2.0, 1.5], [1.0, 2.5]]), ("p1", "p2"))
    assert audit.verdict == ("agrees", "wrong")
    assert audit.diagnoses[1].kind == "not_finite"
    assert audit.worst_observation[1] == 0


# ---------------------------------------------------------------- scenarios: the bundled one and planted copies
def planted_copy(tmp_path: Path, old: str, new: str, formula: bool = True) -> Path:
    folder = tmp_path / "planted"
    shutil.copytree(BUNDLED, folder)
    model = folder / "model.py"
    text = model.read_text()
    assert old in text
    model.write_text(text.replace(old, new))
    if not formula:
        toml = folder / "scenario.toml"
        toml.write_text(re.sub(r"(?m)^formula = .*\n", "", toml.read_text()))
    return folder


CORRECT_TAU = "dT * time_s * decay / tau**2"


@pytest.mark.parametrize("formula", [True, False])
@pytest.mark.parametrize("new, kind", [
    (f"-{CORRECT_TAU}", "sign_error"),
    (f"{CORRECT_TAU} * 2", "constant_factor"),
    ("dT * time_s * decay / tau", "parameter_factor"),
    ("dT * decay / tau**2", "missing_term"),
])
def test_planted_mistakes_in_the_bundled_model_are_named(tmp_path, new, kind, formula):
    scenario = load_scenario(planted_copy(tmp_path, CORRECT_TAU, new, formula))
    audit = audit_derivatives(scenario, count=6)
    assert audit.reference == ("exact" if formula else "numeric")
    assert audit.verdict == ("agrees", "agrees", "wrong")
    assert audit.diagnoses[2].kind == kind, audit.diagnoses[2].summary
    assert audit.consequences is not None and audit.consequences.jacobians[1] == "hand-derived"


def test_swapped_columns_in_the_bundled_model(tmp_path):
    folder = planted_copy(tmp_path, "[np.ones_like(decay), decay,", "[decay, np.ones_like(decay),")
    audit = audit_derivatives(load_scenario(folder), count=4)
    assert audit.verdict == ("wrong", "wrong", "agrees")
    assert [d.kind for d in audit.diagnoses[:2]] == ["swapped", "swapped"]
    assert audit.diagnoses[0].other == "dT" and audit.diagnoses[1].other == "T_env"
    # Two wrong columns: each is also tried alone among numeric ones.
    assert len(audit.consequences.jacobians) == 4


def scipy_reference_fit(problem: Problem, start: np.ndarray) -> np.ndarray:
    """scipy.optimize.least_squares (MINPACK lm) on the weighted residuals, tight tolerances."""
    def residual(params):
        return problem.sqrt_weights * (problem.predict(params[None, :])[0] - problem.y)
    return least_squares(residual, start, method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15).x


def test_a_wrong_factor_converges_to_the_right_point_with_wrong_standard_errors(tmp_path):
    # ∂f/∂T_env doubled: Gauss-Newton's fixed point (Jᵀr = 0) does not change when a column is
    # scaled, but that parameter's steps are halved and its standard error is halved too
    # (scaling column j of J by c scales Cov_jj by 1/c²: linear algebra).
    scenario = load_scenario(planted_copy(tmp_path, "np.ones_like(decay)", "2 * np.ones_like(decay)"))
    audit = audit_derivatives(scenario, count=4)
    assert audit.diagnoses[0].kind == "constant_factor" and audit.diagnoses[0].factor == pytest.approx(2)
    found = audit.consequences
    assert found.converged.all()
    best = scipy_reference_fit(scenario.problem, scenario.start)
    np.testing.assert_allclose(found.params, np.vstack([best, best]), rtol=1e-6)
    assert found.iterations[1] > found.iterations[0]
    np.testing.assert_allclose(found.std_error_ratio[1], [0.5, 1.0, 1.0], rtol=1e-4)
    # The numeric run's standard errors are the ones computed with the correct Jacobian.
    exact = estimate(load_scenario(BUNDLED).problem, best)
    np.testing.assert_allclose(found.std_errors[0], exact.std_errors, rtol=1e-5)


def test_a_wrong_rate_derivative_stops_the_fit(tmp_path):
    scenario = load_scenario(planted_copy(tmp_path, CORRECT_TAU, f"0.5 * {CORRECT_TAU}"))
    found = audit_derivatives(scenario, count=2).consequences
    assert found.outcome[0] == Outcome.CONVERGED and found.outcome[1] != Outcome.CONVERGED


def test_a_formula_that_does_not_match_the_model_is_not_used(tmp_path):
    folder = planted_copy(tmp_path, "return T_env + dT", "return T_env + 1.5 * dT")
    audit = audit_derivatives(load_scenario(folder), count=2)
    assert audit.reference == "numeric"
    assert any("does not reproduce the model function" in note for note in audit.notes)


# ---------------------------------------------------------------- check points
def test_points_where_the_model_is_not_finite_are_dropped_and_named():
    problem = power_problem(lambda x, b1, b2: [x**b2, b1 * x**b2 * np.log(np.where(x > 0, x, 1.0))])
    audit = compare_derivatives(problem, np.array([[2.0, 1.5], [1.0, -1.0]]), ("fine", "pole at x = 0"))
    assert audit.dropped == ("pole at x = 0",) and audit.labels == ("fine",)
    with pytest.raises(InputError, match="not finite at any"):
        compare_derivatives(problem, np.array([[1.0, -1.0]]), ("pole",))


# ---------------------------------------------------------------- results, figures, command line
def test_result_is_strict_json_and_figures_are_written(tmp_path):
    folder = planted_copy(tmp_path, CORRECT_TAU, f"-{CORRECT_TAU}")
    audit = audit_derivatives(load_scenario(folder), count=3)
    payload = json.loads(json.dumps(audit.to_dict(), allow_nan=False))
    assert payload["columns"][2]["diagnosis"]["kind"] == "sign_error"
    assert payload["consequences"]["jacobians"][0].startswith("numeric")
    paths = write_figures(audit, tmp_path / "figures")
    assert {path.name for path in paths} >= {"derivatives-columns.png", "derivatives-points.png"}
    assert all(path.stat().st_size > 10_000 for path in paths)


def test_command_exit_statuses_and_json(tmp_path, capsys):
    assert main(["derivatives", str(BUNDLED), "--check-points", "3", "-o", str(tmp_path / "ok")]) == 0
    capsys.readouterr()
    planted = planted_copy(tmp_path, CORRECT_TAU, f"-{CORRECT_TAU}")
    assert main(["derivatives", str(planted), "--check-points", "3", "--json", "-o", str(tmp_path / "out")]) == 1
    payload = json.loads(capsys.readouterr().out)
    assert [column["verdict"] for column in payload["columns"]] == ["agrees", "agrees", "wrong"]
    assert (tmp_path / "out" / "figures" / "derivatives-columns.png").is_file()
    assert main(["derivatives", str(BUNDLED), "--check-points", "-1"]) == 2
    assert main(["derivatives", str(tmp_path / "missing")]) == 2


def test_without_a_hand_derived_jacobian_there_is_nothing_to_check(tmp_path, capsys):
    folder = tmp_path / "numeric"
    shutil.copytree(BUNDLED, folder)
    toml = folder / "scenario.toml"
    toml.write_text(re.sub(r'(?m)^jacobian = "jacobian"\n', "", toml.read_text()))
    assert main(["derivatives", str(folder), "--check-points", "3", "-o", str(tmp_path / "out")]) == 0
    text = capsys.readouterr().out
    assert "nothing to check" in text and "digits" in text
    audit = audit_derivatives(load_scenario(folder), count=3)
    assert audit.jacobian_source == "none" and set(audit.verdict) == {"unchecked"}
    # Central differences with step eps**(1/3) carry about 2/3 of the 16 digits (common practice).
    assert np.all(audit.max_central_error < 1e-7)
