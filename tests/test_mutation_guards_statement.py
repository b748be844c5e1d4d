"""The GUM statement's edges: where a power of ten starts, the sign of a rounded zero, infinite
degrees of freedom, the JSON keys and every refusal with its message.

k comes from scipy.stats.t (the GUM's G.3.4); roundings are worked out by hand beside each check
following JCGM 100:2008, 7.2.6 (two significant digits of U, the estimate to the same place).
"""
from __future__ import annotations

import json
import math

import pytest
from scipy import stats

from audit.errors import InputError
from audit.uncertainty.statement import round_to_uncertainty, uncertainty_statement


def test_plain_notation_reaches_from_ten_to_the_minus_four_to_ten_to_the_four():
    k = stats.t.ppf(0.975, 10)                      # 2.228 (scipy.stats.t)
    # 1.5e-4 with U = 2.228e-6 → 2.2e-6 keeps the 1e-7 place: 0.0001500 ± 0.0000022 (hand).
    assert uncertainty_statement(["a"], [1.5e-4], [1e-6], dof=10).lines[0] == (
        f"a = 0.0001500 ± 0.0000022 (k = {k:.2f}, p = 95 %, nu = 10)")
    # 12345 with U = 22.28 → 22 keeps the units: 12345 ± 22 (hand).
    assert uncertainty_statement(["a"], [12345.0], [10.0], dof=10).lines[0] == (
        f"a = 12345 ± 22 (k = {k:.2f}, p = 95 %, nu = 10)")
    # One step outside on each side a power of ten is written (hand).
    assert uncertainty_statement(["a"], [9.9e-5], [1e-6], dof=10).lines[0].startswith("a = (9.90 ± 0.22) × 10^-5 ")
    assert uncertainty_statement(["a"], [123456.0], [10.0], dof=10).lines[0].startswith(
        "a = (1.23456 ± 0.00022) × 10^5 ")


def test_a_rounded_zero_has_no_sign():
    # −0.0004 to the 1e-3 place of U = 0.050 is zero, written without a minus sign (hand).
    assert round_to_uncertainty(-0.0004, 0.05) == ("0.000", "0.050")


def test_infinite_degrees_of_freedom_use_the_normal_quantile():
    statement = uncertainty_statement(["a"], [2.0], [0.1], dof=math.inf)
    assert statement.coverage_factor == pytest.approx(stats.norm.ppf(0.975), rel=1e-12)  # scipy.stats.norm
    assert statement.lines[0] == "a = 2.00 ± 0.20 (k = 1.96, p = 95 %, nu = inf)"


def test_to_dict_keys_carry_the_numbers():
    statement = uncertainty_statement(["a"], [2.0], [0.1], dof=7, coverage=0.9)
    data = json.loads(json.dumps(statement.to_dict()))
    k = stats.t.ppf(0.95, 7)                          # scipy.stats.t
    assert (data["dof"], data["coverage"]) == (7.0, 0.9)
    assert data["coverage_factor"] == pytest.approx(k, rel=1e-12)
    entry = data["parameters"][0]
    assert (entry["name"], entry["estimate"], entry["standard_uncertainty"]) == ("a", 2.0, 0.1)
    assert entry["expanded"] == pytest.approx(0.1 * k, rel=1e-12)
    assert entry["lower"] == pytest.approx(2.0 - 0.1 * k, rel=1e-12)
    assert entry["upper"] == pytest.approx(2.0 + 0.1 * k, rel=1e-12)
    assert entry["result"] == statement.results[0]


@pytest.mark.parametrize("arguments, message", [
    ((["a", "b"], [1.0], [0.1, 0.2], 5), r"estimates \(1,\)"),
    ((["a", "b"], [1.0, 2.0], [0.1], 5), r"standard uncertainties \(1,\)"),
    ((["a"], [math.inf], [0.1], 5), "^estimates must be finite numbers$"),
    ((["a"], [1.0], [-0.1], 5), "^standard uncertainties must not be negative$"),
])
def test_each_refusal_names_what_is_wrong(arguments, message):
    with pytest.raises(InputError, match=message):
        uncertainty_statement(*arguments)


@pytest.mark.parametrize("expanded", [0.0, -0.5, math.inf, math.nan])
def test_rounding_needs_a_finite_positive_uncertainty(expanded):
    with pytest.raises(InputError, match="expanded uncertainty must be finite and positive"):
        round_to_uncertainty(1.0, expanded)


def test_whole_numbers_beyond_sixty_four_bits_are_stated_like_any_other_value():
    # Python ints past 2**63 (a count such as 6·10^23 typed as an integer) are numbers like any
    # other: k = t_{0.975, 10} = 2.228 (scipy.stats.t), U = 2.228e21; to the power of ten of the
    # larger, 6e23: U = 0.02228 → 0.022, the estimate to the same place 6.000 (GUM 7.2.6, by hand).
    k = stats.t.ppf(0.975, 10)
    statement = uncertainty_statement(["N"], [6 * 10**23], [10**21], dof=10)
    assert statement.lines[0] == f"N = (6.000 ± 0.022) × 10^23 (k = {k:.2f}, p = 95 %, nu = 10)"
    assert statement.expanded[0] == pytest.approx(k * 1e21, rel=1e-12)
    assert statement.lower[0] == pytest.approx(6e23 - k * 1e21, rel=1e-12)
