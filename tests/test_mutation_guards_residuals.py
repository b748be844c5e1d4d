"""Residual checks, the edges mutation testing found unguarded: level boundaries, the exact/normal
switch of the runs test, every finding's words and numbers, the JSON keys, input refusal.

Each reference is named beside its check: scipy.stats, numpy.linalg, a textbook formula written
out here, or Python's own (stable) sort.
"""
from __future__ import annotations

import json
import math
import warnings
from fractions import Fraction

import numpy as np
import pytest
from scipy import stats

from audit.errors import InputError
from audit.residuals import check_residuals
from audit.residuals.check import Check, Levels
from audit.residuals.normality import normality_check
from audit.residuals.scheme import recommend_scheme
from audit.residuals.serial import serial_check
from audit.residuals.sign_runs import runs_check
from audit.residuals.spread import spread_checks

LEVELS = Levels()


def runs_normal_form(positive: int, negative: int, runs: int) -> tuple[float, float, float]:
    """Mean, z and two-sided p of the runs test, normal form (Wald & Wolfowitz 1940):
    mean 2·n1·n2/N + 1, variance 2·n1·n2·(2·n1·n2 − N) / (N²·(N − 1))."""
    total = positive + negative
    mean = 2 * positive * negative / total + 1
    variance = 2 * positive * negative * (2 * positive * negative - total) / (total**2 * (total - 1))
    z = (runs - mean) / math.sqrt(variance)
    return mean, z, 2 * stats.norm.sf(abs(z))


def test_a_p_value_equal_to_a_level_is_not_below_it():
    # The rule "p below the level flags" (common practice for a test at level α: reject when p < α).
    assert LEVELS.grade(0.001) == "warn" and LEVELS.grade(0.000999) == "fail"
    assert LEVELS.grade(0.05) == "pass" and LEVELS.grade(0.0499) == "warn"


@pytest.mark.parametrize("warn, fail", [(0.05, 0.0), (0.01, 0.05), (1.0, 0.01), (1.5, 0.01)])
def test_levels_must_be_probabilities_in_order(warn, fail):
    # A significance level is a probability strictly between 0 and 1 (common practice).
    with pytest.raises(InputError, match="fail_level"):
        Levels(warn=warn, fail=fail)


def test_equal_levels_are_allowed():
    assert Levels(warn=0.01, fail=0.01).grade(0.005) == "fail"  # p < 0.01 (common practice)


def test_runs_switch_to_the_normal_form_above_twenty_of_either_sign():
    # 21 positive then 19 negative: two runs. Swed & Eisenhart's tables stop at 20 of a sign,
    # so the normal form (Wald & Wolfowitz 1940, written out above) gives p.
    ordered = np.r_[np.ones(21), -np.ones(19)]
    check = runs_check(ordered, 0.0, LEVELS)
    mean, z, p = runs_normal_form(21, 19, 2)
    assert check.details["exact"] is False
    assert check.details["z"] == pytest.approx(z, rel=1e-12)
    assert check.p_value == pytest.approx(p, rel=1e-9, abs=0)  # scipy.stats.norm, two-sided
    assert check.statistic == 2.0 and isinstance(check.statistic, float)
    assert check.finding == (f"2 runs of signs along x where {mean:.1f} are expected for independent errors "
                             f"(p = {p:.2g}): too few: the residuals follow a pattern along x, the model may "
                             "miss a feature of the data")
    # 20 of each sign: still inside the tables, so the exact distribution (not the normal form).
    assert runs_check(np.r_[np.ones(20), -np.ones(20)], 0.0, LEVELS).details["exact"] is True
    assert runs_check(np.r_[np.ones(19), -np.ones(21)], 0.0, LEVELS).details["exact"] is False


def test_alternating_signs_are_too_many_runs():
    ordered = np.tile([1.0, -1.0], 10)                      # 20 runs among 10 + 10 signs
    check = runs_check(ordered, 0.0, LEVELS)
    # Exact distribution (Swed & Eisenhart 1943): only 2 of C(20, 10) orderings alternate fully,
    # so the two-sided p is 2·2/C(20, 10).
    assert check.p_value == pytest.approx(4 / math.comb(20, 10), rel=1e-12, abs=0)
    assert check.finding.endswith(
        "too many: the signs alternate more than chance allows (negatively correlated errors)")


def test_a_variance_below_one_still_gives_z():
    # n1 = 2, n2 = 1, R = 3: variance 2·2·1·(4 − 3)/(9·2) = 2/9, mean 7/3 (Wald & Wolfowitz 1940).
    check = runs_check(np.array([1.0, -1.0, 1.0]), 0.0, LEVELS)
    assert check.details["z"] == pytest.approx((3 - 7 / 3) / math.sqrt(2 / 9), rel=1e-12)
    assert check.finding.endswith(": no pattern along x")
    # n1 = n2 = 1: variance 2·1·1·(2 − 2)/(4·1) = 0, so there is no z.
    assert math.isnan(runs_check(np.array([1.0, -1.0]), 0.0, LEVELS).details["z"])


@pytest.mark.parametrize("sign, side", [(1.0, "positive"), (-1.0, "negative")])
def test_residuals_of_one_sign_name_their_side(sign, side):
    check = runs_check(sign * np.array([1.0, 2.0, 3.0]), 0.0, LEVELS)
    assert check.name == "runs" and check.status == "not applicable"
    assert f"same sign ({side})" in check.finding


def test_a_single_residual_of_the_other_sign_makes_runs_applicable():
    check = runs_check(np.array([1.0, 2.0, -1.0, 3.0]), 0.0, LEVELS)
    # R = 3 among n1 = 3, n2 = 1: P(R = 3) = C(2,0)·C(0,1) + C(2,1)·C(0,0) = 2 of C(4,3) = 4
    # orderings, P(R ≤ 3) = 1 (Swed & Eisenhart 1943), so p = min(1, 2·min(1, 2/4)) = 1.
    assert check.statistic == 3.0 and check.p_value == 1.0


def test_a_residual_at_the_rounding_bound_carries_no_sign():
    # Fitted values of 1: the bound is 1e-12 · 1 exactly; a residual of exactly −1e-12 is rounding
    # noise, so the signs read + + − + (3 runs), not + − + − + (5 runs): counted by hand.
    residuals = np.array([0.5, -1e-12, 0.4, -0.3, 0.2])
    check = check_residuals(residuals, np.ones(5), np.arange(5.0), n_params=1).runs
    assert check.statistic == 3.0


def serial_reference(ordered: np.ndarray) -> tuple[float, float, float]:
    """Durbin & Watson (1950) d = Σ(e_t − e_{t−1})²/Σ e_t²; lag-1 autocorrelation of the centred
    series (Box & Jenkins); two-sided p of z = (d − 2)·sqrt(m)/2 (Bartlett 1946)."""
    d = np.sum(np.diff(ordered) ** 2) / np.sum(ordered**2)
    centred = ordered - ordered.mean()
    lag1 = np.sum(centred[1:] * centred[:-1]) / np.sum(centred**2)
    return d, lag1, 2 * stats.norm.sf(abs((d - 2) * math.sqrt(ordered.size) / 2))


def test_negatively_correlated_neighbours_are_named():
    # MA(1) errors e_t = u_t − 0.5·u_{t−1}: lag-1 correlation −0.4, d about 2.8 (Box & Jenkins).
    noise = np.random.default_rng(11).normal(size=201) + 0.3    # offset: centring must matter
    ordered = noise[1:] - 0.5 * noise[:-1]
    d, lag1, p = serial_reference(ordered)
    assert 2 < d < 3 and p < 0.001
    check = serial_check(ordered, LEVELS)
    assert check.statistic == pytest.approx(d, rel=1e-12)
    assert check.details["lag1_autocorrelation"] == pytest.approx(lag1, rel=1e-12)
    assert check.p_value == pytest.approx(p, rel=1e-9, abs=0)
    assert check.details["z"] == pytest.approx((d - 2) * math.sqrt(200) / 2, rel=1e-12)
    assert check.finding == (f"Durbin-Watson d = {d:.2f} (2 for independent errors; lag-1 autocorrelation "
                             f"{lag1:.2f}, p = {p:.2g}): neighbours along x alternate in sign: negatively "
                             "correlated errors")


def test_neighbours_sharing_their_sign_and_independent_ones_are_named():
    rng = np.random.default_rng(12)
    trend = np.sin(np.linspace(0, 3, 60)) + 0.05 * rng.normal(size=60)
    assert serial_check(trend, LEVELS).finding.endswith(
        ": neighbours along x share their sign: a pattern the model misses, or correlated errors")
    independent = rng.normal(size=60)
    d, lag1, p = serial_reference(independent)
    assert p > 0.05  # Bartlett's normal form
    assert serial_check(independent, LEVELS).finding == (
        f"Durbin-Watson d = {d:.2f} (2 for independent errors; lag-1 autocorrelation {lag1:.2f}, "
        f"p = {p:.2g}): no sign of correlated neighbours")


def breusch_pagan(weighted: np.ndarray, fitted: np.ndarray) -> tuple[float, float]:
    """Koenker (1981): m·R² of the least-squares regression of r² on [1, fitted] (numpy.linalg),
    chi-square with 1 dof (scipy.stats)."""
    design = np.column_stack([np.ones_like(fitted), fitted])
    squares = weighted**2
    coefficients = np.linalg.lstsq(design, squares, rcond=None)[0]
    r_squared = 1 - np.sum((squares - design @ coefficients) ** 2) / np.sum((squares - squares.mean()) ** 2)
    return weighted.size * r_squared, stats.chi2.sf(weighted.size * r_squared, 1)


def test_spread_shrinking_as_the_fitted_values_grow_is_named():
    fitted = np.linspace(1.0, 2.0, 80)
    signs = np.tile([1.0, -1.0], 40)
    weighted = signs * (3.0 - fitted) * (1 + 0.1 * np.random.default_rng(13).uniform(size=80))
    variance, rank = spread_checks(weighted, fitted, LEVELS)
    statistic, p = breusch_pagan(weighted, fitted)
    assert variance.statistic == pytest.approx(statistic, rel=1e-9)
    assert variance.finding == (f"Breusch-Pagan m·R² = {statistic:.3g} (chi-square, 1 dof, p = {p:.2g}): "
                                "the spread changes with the fitted values")
    spearman = stats.spearmanr(np.abs(weighted), fitted)
    assert rank.statistic == pytest.approx(spearman.statistic, rel=1e-12)  # scipy.stats.spearmanr
    assert rank.finding == (f"rank correlation of |residual| with fitted value {spearman.statistic:.2f} "
                            f"(p = {spearman.pvalue:.2g}): the residuals' size shrinks as the fitted values grow")
    _, growing = spread_checks(signs * fitted * (1 + 0.1 * np.random.default_rng(14).uniform(size=80)), fitted, LEVELS)
    assert growing.finding.endswith(": the residuals' size grows as the fitted values grow")


def test_constant_spread_is_named_and_a_unit_range_still_runs():
    rng = np.random.default_rng(15)
    fitted = np.tile([0.0, 1.0], 20)                         # range exactly 1: the checks run
    weighted = rng.normal(size=40)
    variance, rank = spread_checks(weighted, fitted, LEVELS)
    statistic, p = breusch_pagan(weighted, fitted)
    assert p > 0.05 and variance.statistic == pytest.approx(statistic, rel=1e-9)
    assert variance.finding.endswith(": no sign that the spread changes with the fitted values")
    assert rank.p_value == pytest.approx(stats.spearmanr(np.abs(weighted), fitted).pvalue, rel=1e-12)
    assert rank.finding.endswith(": no trend in the residuals' size")
    sizes_one_apart = np.tile([1.0, -2.0, -1.0, 2.0], 10)    # |r| in {1, 2}: range exactly 1
    assert spread_checks(sizes_one_apart, np.arange(40.0), LEVELS)[0].status != "not applicable"


@pytest.mark.parametrize("weighted, fitted, reason", [
    (np.array([1.0, -2.0, 3.0]), np.full(3, 2.0),
     "every fitted value is the same, so there is nothing to relate the spread to"),
    (np.array([1.0, -1.0, 1.0]), np.arange(3.0), "every residual has the same size, so the spread cannot change"),
])
def test_spread_checks_that_cannot_run_say_why(weighted, fitted, reason):
    variance, rank = spread_checks(weighted, fitted, LEVELS)
    assert (variance.name, rank.name) == ("variance", "variance_rank")
    assert variance.finding == rank.finding == f"not applicable: {reason}"


def test_normality_findings():
    rng = np.random.default_rng(16)
    skewed = rng.exponential(size=100)
    shapiro = stats.shapiro(skewed)                           # scipy.stats.shapiro
    check = check_residuals(skewed - skewed.mean(), np.linspace(1, 2, 100), np.arange(100.0), n_params=1).normality
    assert check.finding == (f"Shapiro-Wilk W = {shapiro.statistic:.3f} (p = {shapiro.pvalue:.2g}): the residuals "
                             "are unlikely to come from a normal distribution (skew, heavy tails or outliers); "
                             "t intervals lean on normality")
    normal = rng.normal(size=50)
    shapiro = stats.shapiro(normal)
    check = check_residuals(normal, np.linspace(1, 2, 50), np.arange(50.0), n_params=1).normality
    assert check.finding == (f"Shapiro-Wilk W = {shapiro.statistic:.3f} (p = {shapiro.pvalue:.2g}): "
                             "no sign of non-normal residuals")
    unit_range = np.tile([0.0, 1.0, 0.0, 0.0], 5)            # range exactly 1: the test runs
    check = check_residuals(unit_range, np.linspace(1, 2, 20), np.arange(20.0), n_params=1).normality
    assert check.statistic == pytest.approx(stats.shapiro(unit_range).statistic, rel=1e-12)


def flagged(status: str) -> Check:
    return Check(name="any", statistic=0.0, p_value=0.0, status=status, finding="")


CLEAN, WARNED = flagged("pass"), flagged("warn")


@pytest.mark.parametrize("checks, x_random, scheme, reason", [
    ((WARNED, CLEAN, CLEAN, CLEAN), False, "pairs", "the residuals show a pattern along x (runs of signs flagged), so "
     "the model's form is in doubt: pairs resampling leans least on it, but revise the model first, since every "
     "scheme assumes independent errors"),
    ((WARNED, WARNED, CLEAN, CLEAN), False, "pairs", "the residuals show a pattern along x (runs of signs and "
     "Durbin-Watson flagged), so the model's form is in doubt: pairs resampling leans least on it, but revise the "
     "model first, since every scheme assumes independent errors"),
    ((CLEAN, CLEAN, WARNED, CLEAN), True, "pairs", "the spread changes with the fitted values and x was drawn at "
     "random with y: resample (x, y) pairs"),
    ((CLEAN, CLEAN, CLEAN, WARNED), False, "wild", "the spread changes with the fitted values: wild resampling keeps "
     "each point's own residual size"),
    ((CLEAN, CLEAN, CLEAN, CLEAN), True, "pairs", "x was drawn at random with y: resampling (x, y) pairs reproduces "
     "how the data arose"),
    ((CLEAN, CLEAN, CLEAN, CLEAN), False, "residual", "no pattern along x and no change of spread: resampling "
     "residuals onto the fitted curve uses the model fully"),
])
def test_the_scheme_and_its_reason(checks, x_random, scheme, reason):
    # The choice rule of common practice, as the module states it: a pattern along x → pairs,
    # a changing spread → wild (pairs when x is random), random x → pairs, else residual.
    assert recommend_scheme(*checks, x_random) == (scheme, reason)


def test_ties_in_x_keep_the_given_order():
    x = np.repeat(np.arange(10.0), 20)[np.random.default_rng(17).permutation(200)]
    residuals = np.random.default_rng(18).normal(size=200)
    result = check_residuals(residuals, np.linspace(1, 2, 200), x, n_params=1)
    # Python's sort is guaranteed stable (language reference), so equal x keep their order.
    assert result.order.tolist() == sorted(range(200), key=lambda i: x[i])


@pytest.mark.parametrize("residual, fitted, weight, vanish", [
    (1e-7, 1e6, 1.0, True),        # 1e-7 ≤ 1e-12 · 1e6: rounding noise of the fitted value
    (1e-12, 1.0, 1.0, True),       # exactly at the bound counts as noise
    (1e-13, 1.0, 100.0, True),     # weighted: 1e-12 ≤ 1e-12 · (1 · 10)
    (2e-12, 1.0, 1.0, False),
])
def test_residuals_vanish_against_the_weighted_fitted_values(residual, fitted, weight, vanish):
    # The bound is 1e-12 times the largest |fitted·sqrt(w)|, products worked out by hand above.
    result = check_residuals(residual * np.array([1.0, -1.0, 1.0, -1.0]), np.full(4, fitted) * [1, 1, 1, 0.5],
                             np.arange(4.0), n_params=1, weights=np.full(4, weight))
    assert (result.runs.status == "not applicable") is vanish
    if vanish:
        assert [check.name for check in result.checks] == ["runs", "serial", "normality", "variance", "variance_rank"]
        assert result.runs.finding == ("not applicable: the residuals vanish to rounding: the model passes through "
                                       "every point, there is no scatter to test")


def test_three_residuals_and_no_parameters_are_enough():
    result = check_residuals(np.array([0.3, -0.1, 0.2]), np.array([1.0, 2.0, 4.0]), np.arange(3.0), n_params=0)
    assert result.normality.statistic == pytest.approx(stats.shapiro([0.3, -0.1, 0.2]).statistic, rel=1e-12)


def test_to_dict_keys_carry_the_numbers():
    rng = np.random.default_rng(19)
    residuals = rng.normal(size=30)
    result = check_residuals(residuals, np.linspace(1, 2, 30), np.arange(30.0), n_params=2,
                             warn_level=0.04, fail_level=0.002)
    data = json.loads(json.dumps(result.to_dict()))
    assert (data["m"], data["n_params"], data["warn_level"], data["fail_level"]) == (30, 2, 0.04, 0.002)
    assert data["status"] == result.status and data["scheme_reason"] == result.scheme_reason
    assert data["weighted_residuals"] == pytest.approx(residuals.tolist(), rel=1e-15)
    assert data["order"] == list(range(30))
    normality = data["checks"][2]
    assert normality["p_value"] == pytest.approx(stats.shapiro(residuals).pvalue, rel=1e-12)  # scipy.stats.shapiro
    assert normality["status"] == result.normality.status and normality["finding"] == result.normality.finding
    assert data["checks"][1]["details"]["z"] == pytest.approx(result.serial.details["z"], rel=1e-15)


@pytest.mark.parametrize("change, message", [
    ({"residuals": np.array([0.1, np.inf, 0.2, -0.1])},
     r"^residuals must be a 1-D array of finite numbers, got shape \(4,\) with non-finite values$"),
    ({"residuals": np.zeros((2, 2))}, r"shape \(2, 2\)$"),
    ({"x": np.arange(5.0)}, "x must be finite"),
    ({"weights": np.array([1.0, 0.0, 1.0, 1.0])}, "weights"),
    ({"n_params": True}, "n_params"),
])
def test_more_bad_input_is_refused(change, message):
    arguments = {"residuals": np.array([0.1, -0.3, 0.2, -0.1]), "fitted": np.arange(4.0), "x": np.arange(4.0),
                 "n_params": 1}
    arguments.update(change)
    with pytest.raises(InputError, match=message):
        check_residuals(**arguments)


def test_residuals_all_of_one_value_leave_normality_not_applicable():
    # A sample without spread has no shape to test (Shapiro-Wilk's W is 0/0 there).
    check = normality_check(np.full(5, 0.2), LEVELS)
    assert check.name == "normality" and math.isnan(check.p_value)
    assert check.finding == ("not applicable: every residual has the same value, which no distribution test "
                             "can judge")


def test_residuals_of_one_value_have_no_lag_one_correlation_and_no_warning():
    # A series without variance has no autocorrelation: r1 = Σc_t·c_{t−1} / Σc_t² is 0/0 (Box &
    # Jenkins' definition); Durbin-Watson d = 0 (no differences), so z = (0 − 2)·sqrt(m)/2 = −3 for
    # m = 9 and p = 2·Φ(−3) (scipy.stats.norm). NaN is the answer, not an accident: numpy's
    # RuntimeWarning must not reach a command's output.
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        check = serial_check(np.full(9, 0.5), LEVELS)
    assert math.isnan(check.details["lag1_autocorrelation"])
    assert check.statistic == 0.0 and check.details["z"] == -3.0
    assert check.p_value == pytest.approx(2 * stats.norm.sf(3.0), rel=1e-12)


def test_exact_fractions_are_read_as_numbers():
    # Residuals, fitted values, x and weights handed over as exact rationals (e.g. from a symbolic
    # computation) are numbers like any other: the checks see the weighted residuals r·sqrt(w) in
    # floats. References: scipy.stats.shapiro and scipy.stats.spearmanr on those floats; the signs
    # + − + − + − in x order make 6 runs, counted by hand.
    residuals = [Fraction(3, 10), Fraction(-1, 10), Fraction(1, 5), Fraction(-2, 5), Fraction(1, 2), Fraction(-3, 10)]
    fitted = [Fraction(k, 3) for k in range(1, 7)]
    weights = [Fraction(k, 2) for k in range(1, 7)]
    result = check_residuals(residuals, fitted, [Fraction(k, 7) for k in range(6)], n_params=1, weights=weights)
    weighted = np.array([float(r) * math.sqrt(float(w)) for r, w in zip(residuals, weights)])
    assert result.normality.statistic == pytest.approx(stats.shapiro(weighted).statistic, rel=1e-12)
    spearman = stats.spearmanr(np.abs(weighted), [float(value) for value in fitted])
    assert result.variance_rank.statistic == pytest.approx(spearman.statistic, rel=1e-12)
    assert result.runs.statistic == 6.0
