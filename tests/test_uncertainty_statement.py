"""The uncertainty statement in the form of the GUM (JCGM 100:2008), checked against
scipy.stats.t and the GUM's own worked example and rounding rule."""
from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import stats

from audit.errors import InputError
from audit.uncertainty.statement import round_to_uncertainty, uncertainty_statement


def test_the_gum_worked_example_is_reproduced():
    # JCGM 100:2008, 7.2.4: m_S = (100.021 47 ± 0.000 79) g, with u_c = 0.35 mg and k = 2.26
    # from the t-distribution for nu = 9 at a level of confidence of 95 % (values from memory).
    statement = uncertainty_statement(["m_S"], [100.02147], [0.00035], dof=9)
    assert statement.coverage_factor == pytest.approx(stats.t.ppf(0.975, 9), rel=1e-12)  # scipy.stats.t
    assert round(statement.coverage_factor, 2) == 2.26  # the GUM's k
    assert statement.expanded[0] == pytest.approx(stats.t.ppf(0.975, 9) * 0.00035, rel=1e-12)  # U = k·u
    assert statement.lines[0] == "m_S = 100.02147 ± 0.00079 (k = 2.26, p = 95 %, nu = 9)"


def test_values_are_rounded_as_the_gum_asks():
    # JCGM 100:2008, 7.2.6: uncertainties to at most two significant digits, the estimate
    # rounded to match: "if y = 10.057 62 Ω with u_c(y) = 27 mΩ, y should be rounded to
    # 10.058 Ω"; "u(x_i) = 28.05 kHz should be rounded down to 28 kHz" (values from memory).
    assert round_to_uncertainty(10.05762, 0.027) == ("10.058", "0.027")
    assert round_to_uncertainty(1234.4, 28.05) == ("1234", "28")
    # Two significant digits of U = 0.0996 are 0.10: the carry moves the last kept decimal
    # (hand derivation: 0.0996 -> 0.100 at three decimals, which has three significant digits).
    assert round_to_uncertainty(3.14159, 0.0996) == ("3.14", "0.10")
    # U of 380 keeps the tens: the estimate is rounded to tens too.
    assert round_to_uncertainty(12345.6, 381.0) == ("12350", "380")


def test_the_example_line_of_the_brief():
    # k = t_{0.975, 48} = 2.0106 (scipy.stats.t); U = 2.0106 · 0.0189 = 0.0380 (hand derivation).
    statement = uncertainty_statement(["level"], [12.34567], [0.0189], dof=48)
    assert statement.lines[0] == "level = 12.346 ± 0.038 (k = 2.01, p = 95 %, nu = 48)"


@pytest.mark.parametrize("coverage, dof", [(0.95, 3), (0.6827, 20), (0.99, 1000), (0.9, 1)])
def test_coverage_factor_and_interval_follow_student_t(coverage, dof):
    estimates = np.array([1.5, -20.0, 3e-4])
    std_errors = np.array([0.2, 3.0, 1e-5])
    statement = uncertainty_statement(["a", "b", "c"], estimates, std_errors, dof=dof, coverage=coverage)
    k = stats.t.ppf((1 + coverage) / 2, dof)  # scipy.stats.t, the GUM's G.3.4
    assert statement.coverage_factor == pytest.approx(k, rel=1e-12)
    np.testing.assert_allclose(statement.expanded, k * std_errors, rtol=1e-12)
    np.testing.assert_allclose(statement.lower, estimates - k * std_errors, rtol=1e-12)
    np.testing.assert_allclose(statement.upper, estimates + k * std_errors, rtol=1e-12)
    # The stated probability is the coverage asked for (a closed form: P(|T| <= k) = coverage).
    assert stats.t.cdf(k, dof) - stats.t.cdf(-k, dof) == pytest.approx(coverage, rel=1e-10)


def test_tiny_and_huge_values_share_a_power_of_ten():
    # k = t_{0.975, 30} = 2.0423 (scipy.stats.t). U = 2.0423 · 1.7e-11 = 3.47e-11 -> 3.5e-11, so
    # the estimate keeps the 1e-12 place: 1.2346e-9 -> "(1.235 ± 0.035) × 10^-9"; U = 2.0423 ·
    # 4.1e19 = 8.37e19 -> 8.4e19 keeps the 1e18 place: "(6.02214 ± 0.00084) × 10^23"
    # (hand derivation).
    statement = uncertainty_statement(["tiny", "huge"], [1.2346e-9, 6.02214e23], [1.7e-11, 4.1e19], dof=30)
    assert statement.coverage_factor == pytest.approx(2.0423, abs=5e-5)  # scipy.stats.t.ppf(0.975, 30)
    assert statement.lines[0].startswith("tiny = (1.235 ± 0.035) × 10^-9 ")
    assert statement.lines[1].startswith("huge = (6.02214 ± 0.00084) × 10^23 ")


def test_an_unidentified_parameter_gets_words_not_numbers():
    statement = uncertainty_statement(["a", "b", "c"], [1.0, 2.0, 3.0], [0.1, math.inf, math.nan], dof=12)
    assert statement.lines[0].startswith("a = 1.00 ± 0.22")
    for line in statement.lines[1:]:
        assert "not identified" in line and "±" not in line
    assert np.isinf(statement.expanded[1]) and np.isnan(statement.expanded[2])
    data = json.loads(json.dumps(statement.to_dict(), allow_nan=False))
    assert data["parameters"][1]["expanded"] is None and "not identified" in data["parameters"][1]["result"]
    assert data["coverage_factor"] == pytest.approx(stats.t.ppf(0.975, 12))  # scipy.stats.t


def test_no_degrees_of_freedom_and_zero_uncertainty_say_so():
    statement = uncertainty_statement(["a"], [2.5], [0.1], dof=0)
    assert np.isnan(statement.coverage_factor) and "no degrees of freedom" in statement.lines[0]
    exact = uncertainty_statement(["a"], [2.5], [0.0], dof=4)
    assert exact.lines[0].startswith("a = 2.5 ") and "zero" in exact.lines[0]


@pytest.mark.parametrize("arguments, named", [
    ((["a", "b"], [1.0], [0.1], 5), "names"),
    ((["a"], [1.0], [-0.1], 5), "standard"),
    ((["a"], [math.nan], [0.1], 5), "estimates"),
    ((["a"], [1.0], [0.1], -1), "dof"),
    ((["a"], [1.0], [0.1], 2.5), "dof"),
])
def test_bad_input_is_refused(arguments, named):
    with pytest.raises(InputError, match=named):
        uncertainty_statement(*arguments)


@pytest.mark.parametrize("coverage", [0.0, 1.0, 95])
def test_coverage_must_be_a_probability(coverage):
    with pytest.raises(InputError, match="coverage"):
        uncertainty_statement(["a"], [1.0], [0.1], dof=5, coverage=coverage)
