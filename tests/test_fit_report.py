"""Every number `fitaudit fit` reports, in JSON and in its tables, against scipy and numpy."""
from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest
from scipy import stats
from scipy.optimize import least_squares

from audit.cli import main
from audit.inputs.scenario import load_scenario

BUNDLED = str(Path(__file__).resolve().parents[1] / "scenarios" / "probe-cooling")


@pytest.fixture(scope="module")
def reference() -> dict:
    """The bundled fit's asymptotic numbers computed outside the project.

    scipy.optimize.least_squares gives the minimum and the weighted Jacobian there; the
    covariance is the textbook s²·(JᵀJ)⁻¹ with s² = SSR/(m − n) (Seber & Wild, Nonlinear
    Regression, §2.1), solved with numpy.linalg; correlations are covariances over the product
    of standard errors; the t quantile is scipy.stats.t.ppf.
    """
    problem = load_scenario(BUNDLED).problem
    found = least_squares(lambda a: problem.sqrt_weights * (problem.predict(a[None])[0] - problem.y),
                          [20.0, 60.0, 100.0], method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15)
    m, n = problem.n_obs, problem.n_params
    ssr = float(found.fun @ found.fun)
    covariance = ssr / (m - n) * np.linalg.inv(found.jac.T @ found.jac)
    errors = np.sqrt(np.diag(covariance))
    quantile = stats.t.ppf(0.975, m - n)
    return {"names": problem.names, "params": found.x, "ssr": ssr, "dof": m - n, "covariance": covariance,
            "std_errors": errors, "correlation": covariance / np.outer(errors, errors), "t_quantile": quantile,
            "lower": found.x - quantile * errors, "upper": found.x + quantile * errors}


def test_fit_json_covariance_intervals_and_correlation(capsys, reference):
    assert main(["fit", BUNDLED, "--json"]) == 0
    estimates = json.loads(capsys.readouterr().out)["estimates"]
    assert estimates["dof"] == reference["dof"] == 73
    assert estimates["ssr"] == pytest.approx(reference["ssr"], rel=1e-9)
    # Reference: scipy.stats.t.ppf(0.975, 73), the 95 % two-sided Student t quantile.
    assert estimates["t_quantile"] == pytest.approx(reference["t_quantile"], rel=1e-12)
    # Reference: s²·(JᵀJ)⁻¹ from scipy's Jacobian at its minimum, inverted by numpy.linalg.
    np.testing.assert_allclose(estimates["covariance"], reference["covariance"], rtol=1e-5)
    np.testing.assert_allclose(estimates["std_errors"], reference["std_errors"], rtol=1e-5)
    # Reference: the normalised covariance; its diagonal is exactly one (definition of a correlation).
    np.testing.assert_allclose(estimates["correlation"], reference["correlation"], rtol=1e-5, atol=1e-9)
    np.testing.assert_allclose(np.diag(estimates["correlation"]), 1.0, rtol=1e-12)
    # Reference: params ∓ t·std_error with scipy's t quantile.
    np.testing.assert_allclose(estimates["lower"], reference["lower"], rtol=1e-8)
    np.testing.assert_allclose(estimates["upper"], reference["upper"], rtol=1e-8)
    assert estimates["residual_sd"] == pytest.approx(np.sqrt(reference["ssr"] / 73), rel=1e-9)


def table_row(text: str, title: str, name: str) -> list[str]:
    """The cells of ``name``'s row in the table whose title starts with ``title``."""
    section = text[text.index(title):]
    # A body row: the name in the first cell, then a light cell border (headings use a heavy one).
    line = next(line for line in section.splitlines() if re.match(rf"\W*{re.escape(name)}\s+│", line))
    return re.findall(r"[+-]?\d[\d.]*(?:e[+-]?\d+)?%?", line)


def test_fit_tables_print_the_same_numbers(capsys, reference):
    assert main(["fit", BUNDLED]) == 0
    text = capsys.readouterr().out
    assert f"{reference['dof']} degrees of freedom" in text
    for j, name in enumerate(reference["names"]):
        value, error, relative, lower, upper = table_row(text, "estimates", name)[-5:]
        # Reference: scipy's minimum and the intervals of the fixture, at the digits printed.
        assert float(value) == pytest.approx(reference["params"][j], rel=1e-7)
        assert float(error) == pytest.approx(reference["std_errors"][j], rel=1e-3)
        assert float(relative.rstrip("%")) == pytest.approx(100 * reference["std_errors"][j] / reference["params"][j],
                                                            abs=0.006)
        assert float(lower) == pytest.approx(reference["lower"][j], rel=1e-7)
        assert float(upper) == pytest.approx(reference["upper"][j], rel=1e-7)
        printed = [float(cell) for cell in table_row(text, "correlation", name)]
        # Reference: the normalised covariance, printed to three decimals.
        np.testing.assert_allclose(printed, reference["correlation"][j], atol=6e-4)
