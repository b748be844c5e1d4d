"""Words that must not hide a finding in `fitaudit identify`: correlations that cannot be computed
are not "none", and a pair correlated to within a thousandth of ±1 is called practically
non-identifiable, with its correlation printed to enough digits to tell it from 1."""
from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest
from scenario_files import csv_text, data_columns, scenario_toml
from scipy.optimize import least_squares

from audit.cli import main


def folder_of(write_scenario, title: str, parameters: dict, model: str, x: np.ndarray, y: np.ndarray) -> Path:
    """A scenario folder fitting ``model`` (a function of x and ``parameters``) to the columns x, y."""
    return write_scenario(scenario_toml(title=title, data=data_columns("x", "y"), parameters=parameters),
                          model=model, data=csv_text("x,y", x, y))


def identify(capsys, folder, tmp_path) -> tuple[int, str]:
    status = main(["identify", str(folder), "--jobs", "1", "-o", str(tmp_path / "out")])
    return status, capsys.readouterr().out


def test_a_product_of_parameters_has_no_correlations_to_list(capsys, write_scenario, tmp_path):
    x = np.linspace(0.5, 5.0, 12)
    y = 6.0 * x + np.random.default_rng(1).normal(0.0, 0.1, x.size)
    folder = folder_of(write_scenario, "product", {"a": {"start": 1.5, "range": [0.5, 10]},
                                                   "b": {"start": 2.5, "range": [0.5, 10]}},
                       "def model(x, a, b):\n    return a * b * x\n", x, y)
    status, text = identify(capsys, folder, tmp_path)
    # Hand derivation: ∂f/∂a = b·x and ∂f/∂b = a·x are proportional, so the Jacobian has rank 1
    # (numpy.linalg.matrix_rank) and JᵀJ has no inverse: the correlations are undefined.
    assert np.linalg.matrix_rank(np.column_stack([2.5 * x, 1.5 * x])) == 1
    line = next(line for line in text.splitlines() if line.startswith("strongly correlated pairs"))
    assert not line.endswith("none") and "undefined" in line
    assert status == 1


def test_a_saturation_fit_correlated_to_within_a_thousandth_is_called_practically_non_identifiable(
        capsys, write_scenario, tmp_path):
    # y = vmax·x/(k + x) measured only far below k: the curve is nearly the straight line
    # (vmax/k)·x, so vmax and k are determined almost only through their ratio.
    x = np.linspace(0.1, 1.0, 15)
    y = 40.0 * x / (20.0 + x) + np.random.default_rng(3).normal(0.0, 0.0005, x.size)
    folder = folder_of(write_scenario, "saturation", {"vmax": {"start": 30.0, "range": [1, 1000]},
                                                      "k": {"start": 15.0, "range": [1, 500]}},
                       "def model(x, vmax, k):\n    return vmax * x / (k + x)\n", x, y)
    status, text = identify(capsys, folder, tmp_path)
    # Reference: scipy.optimize.least_squares' fit and its Jacobian; correlation from
    # numpy.linalg.inv(JᵀJ) (the linearised covariance up to the factor s²).
    fit = least_squares(lambda p: p[0] * x / (p[1] + x) - y, [30.0, 15.0], xtol=1e-15, ftol=1e-15, gtol=1e-15)
    covariance = np.linalg.inv(fit.jac.T @ fit.jac)
    r = covariance[0, 1] / np.sqrt(covariance[0, 0] * covariance[1, 1])
    assert abs(r) > 0.999
    printed = float(re.search(r"vmax–k ([-+]\d\.\d+)", text).group(1))
    assert printed == pytest.approx(r, abs=2e-6) and printed != pytest.approx(1.0, abs=1e-9)
    assert "practically non-identifiable" in text
    assert "ok:" not in text
