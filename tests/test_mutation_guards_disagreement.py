"""The flags comparing a bootstrap interval with the t interval (uncertainty/disagreement.py): each
flag's boundary, sign and words, which interval is compared, the undefined ratios, the JSON keys.

Every expected number is worked out by hand in the comments from the module's stated rules
(width within a factor 1.5, arms within 1.5, a bias of at most 0.25 standard errors: common
practice and Efron & Tibshirani 1993, ch. 10, value from memory) and IEEE 754 division.
"""
from __future__ import annotations

import json
import warnings

import numpy as np

from audit.uncertainty.disagreement import Flag, compare_intervals


def comparison(estimate, t_lower, t_upper, lower, upper, bias=None, std_error=None, replicates=None, bca=True):
    """compare_intervals on hand-made inputs (the bootstrap interval given as BCa or percentile)."""
    n = len(estimate)
    estimate, lower, upper = (np.asarray(v, dtype=float) for v in (estimate, lower, upper))
    nan = np.full(n, np.nan)
    given = (lower, upper)
    replicates = np.vstack([estimate, estimate]) if replicates is None else np.asarray(replicates, dtype=float)
    return compare_intervals(tuple("abcdefgh"[:n]), estimate, np.asarray(t_lower, float), np.asarray(t_upper, float),
                             given if not bca else (nan, nan), given if bca else (nan, nan),
                             np.ones(n) if std_error is None else np.asarray(std_error, float),
                             np.zeros(n) if bias is None else np.asarray(bias, float), replicates)


def test_flags_stay_quiet_exactly_at_their_limits():
    # Width 3 against 2 is the ratio 1.5; width 1 against 1.5 is 1/1.5; arms 1.5 against 1;
    # bias 0.25 standard errors: all at the limits the module states, none beyond.
    exact = comparison(estimate=[1.0, 1.0], t_lower=[0.0, 0.5], t_upper=[2.0, 2.0], lower=[0.0, 0.5],
                       upper=[3.0, 1.5], bias=[0.25, -0.25])
    assert exact.width_ratio.tolist() == [1.5, 2 / 3]
    assert exact.arm_ratio.tolist() == [2.0, 1.0]
    assert [(flag.parameter, flag.kind) for flag in exact.flags] == [("a", "asymmetry")]
    arms = comparison(estimate=[2.0], t_lower=[0.75], t_upper=[3.25], lower=[1.0], upper=[3.5])
    assert arms.arm_ratio.tolist() == [1.5] and arms.flags == []


def test_each_flag_says_which_way():
    result = comparison(estimate=[1.0, 1.0, 1.0, 1.0], t_lower=[0.5, -1.0, 0.0, 0.0], t_upper=[1.5, 3.0, 2.0, 2.0],
                        lower=[-1.0, 0.5, 0.5, -1.0], upper=[3.0, 1.5, 3.0, 1.5], bias=[0.5, -0.5, 0.0, 0.0],
                        std_error=[1.0, 1.0, 1.0, 1.0], bca=False)
    assert result.compared == ("percentile",) * 4
    reasons = {(flag.parameter, flag.kind): flag.reason for flag in result.flags}
    assert reasons[("a", "width")] == ("the percentile interval is 4.00 times as wide as the t interval: the "
                                       "linearised standard error understates the spread of the refits")
    assert reasons[("b", "width")] == ("the percentile interval is 0.25 times as wide as the t interval: the "
                                       "linearised standard error overstates the spread of the refits")
    assert reasons[("c", "asymmetry")] == ("the percentile interval reaches 4.00 times as far above the estimate as "
                                           "below it, while the t interval is symmetric by construction: the "
                                           "estimate's distribution is skewed")
    assert reasons[("d", "asymmetry")] == ("the percentile interval reaches 4.00 times as far below the estimate as "
                                           "above it, while the t interval is symmetric by construction: the "
                                           "estimate's distribution is skewed")
    assert reasons[("a", "bias")] == ("the bootstrap bias is 0.50 standard errors (above the estimate); above 0.25 "
                                      "it is not negligible")
    assert reasons[("b", "bias")] == ("the bootstrap bias is 0.50 standard errors (below the estimate); above 0.25 "
                                      "it is not negligible")


def test_an_interval_ending_at_the_estimate_does_not_contain_it():
    result = comparison(estimate=[1.0], t_lower=[0.5], t_upper=[1.5], lower=[1.0], upper=[2.0])
    assert np.isnan(result.arm_ratio[0])
    assert [flag.reason for flag in result.flags] == [
        "the BCa interval [1, 2] does not contain the estimate 1: the refits are strongly biased"]


def test_bound_flags_need_every_replicate_strictly_on_one_side():
    replicates = [[2.0, -2.0, 3.0, -3.0], [1.0, -1.0, 0.0, 0.0], [3.0, -3.0, 1.0, -1.0]]
    result = comparison(estimate=[2.0, -2.0, 2.0, -2.0], t_lower=[-0.5, -4.0, -0.5, -4.0],
                        t_upper=[4.0, 0.5, 4.0, 0.5], lower=[0.5, -3.5, 0.5, -3.5], upper=[3.5, -0.5, 3.5, -0.5],
                        replicates=replicates)
    bounds = {flag.parameter: flag.reason for flag in result.flags if flag.kind == "bound"}
    # Parameters c and d have a replicate at exactly zero: not strictly one-signed.
    assert bounds == {
        "a": "the t interval reaches -0.5, below zero, while the estimate and all 3 used replicates are positive: "
             "the linearised interval crosses a bound the parameter respects",
        "b": "the t interval reaches 0.5, above zero, while the estimate and all 3 used replicates are negative: "
             "the linearised interval crosses a bound the parameter respects",
    }


def test_to_dict_keys_carry_the_numbers():
    result = comparison(estimate=[1.0, 2.0], t_lower=[0.0, 1.0], t_upper=[2.0, 3.0], lower=[0.0, 1.5],
                        upper=[3.0, 2.5], bias=[0.5, 0.0], std_error=[2.0, 1.0])
    data = json.loads(json.dumps(result.to_dict()))
    assert data["compared"] == ["bca", "bca"]
    assert data["lower"] == [0.0, 1.5] and data["upper"] == [3.0, 2.5]
    assert data["width_ratio"] == [1.5, 0.5]           # 3/2 and 1/2 by hand
    assert data["arm_ratio"] == [2.0, 1.0]              # (3 − 1)/(1 − 0), (2.5 − 2)/(2 − 1.5)
    assert data["bias_ratio"] == [0.25, 0.0]            # 0.5/2
    assert data["flags"][0] == {"parameter": "a", "kind": "asymmetry", "reason": result.flags[0].reason}


def test_a_bca_interval_defined_at_one_end_only_is_not_used():
    # BCa undefined at one end (NaN) leaves the percentile interval to be compared, for either end:
    # percentile [0.5, 1.5] around 1 against the t interval [0, 2]: width ratio 1/2, arms 1 (hand).
    nan = np.nan
    result = compare_intervals(("a", "b"), np.array([1.0, 1.0]), np.array([0.0, 0.0]), np.array([2.0, 2.0]),
                               (np.array([0.5, 0.5]), np.array([1.5, 1.5])),
                               (np.array([0.2, nan]), np.array([nan, 1.9])),
                               np.ones(2), np.zeros(2), np.ones((3, 2)))
    assert result.compared == ("percentile", "percentile")
    assert result.lower.tolist() == [0.5, 0.5] and result.upper.tolist() == [1.5, 1.5]
    assert result.width_ratio.tolist() == [0.5, 0.5] and result.arm_ratio.tolist() == [1.0, 1.0]
    assert [(flag.parameter, flag.kind) for flag in result.flags] == [("a", "width"), ("b", "width")]
    assert result.flags[0].reason.startswith("the percentile interval is 0.50 times as wide")


def test_a_zero_width_t_interval_and_a_zero_standard_error_give_inf_and_nan_quietly():
    # A parameter the data pin exactly (t interval [1, 1], bootstrap standard error 0): IEEE 754
    # division gives width 1/0 = inf, bias 0/0 = NaN and 0.5/0 = inf; these mean "no ratio", so
    # they raise no width or bias flag and print no numpy RuntimeWarning. For a the estimate sits
    # at the lower end: arms (1.5 − 1)/(1 − 1) = 1/0, not contained, NaN and an asymmetry flag.
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        result = compare_intervals(("a", "b"), np.array([1.0, 1.0]), np.array([1.0, 1.0]), np.array([1.0, 1.0]),
                                   (np.array([1.0, 0.5]), np.array([1.5, 1.5])), (np.full(2, np.nan),) * 2,
                                   np.zeros(2), np.array([0.0, 0.5]), np.ones((3, 2)))
    assert np.isinf(result.width_ratio).all()
    assert np.isnan(result.bias_ratio[0]) and result.bias_ratio[1] == np.inf
    assert np.isnan(result.arm_ratio[0]) and result.arm_ratio[1] == 1.0
    assert [(flag.parameter, flag.kind) for flag in result.flags] == [("a", "asymmetry")]


def test_bound_flags_need_an_estimate_strictly_of_the_replicates_sign():
    # A bound flag needs the estimate and every replicate strictly on one side of zero, and the
    # t interval crossing it (module rule): an estimate of exactly 0 is on neither side (a, b); a
    # small positive estimate counts as positive (c), and is not negative merely for being below 1
    # (d); a t interval ending at 0 reaches the bound without crossing it (e).
    replicates = [[1.0, -1.0, 1.0, -1.0, -1.0], [2.0, -2.0, 2.0, -2.0, -2.0], [3.0, -3.0, 3.0, -3.0, -3.0]]
    result = comparison(estimate=[0.0, 0.0, 0.5, 0.5, -1.0], t_lower=[-1.0, -1.0, -0.5, -0.5, -2.0],
                        t_upper=[1.0, 1.0, 1.5, 1.5, 0.0], lower=[-0.5, -0.5, 0.1, 0.1, -1.5],
                        upper=[0.5, 0.5, 0.9, 0.9, -0.5], replicates=replicates)
    bounds = {flag.parameter: flag.reason for flag in result.flags if flag.kind == "bound"}
    assert bounds == {"c": "the t interval reaches -0.5, below zero, while the estimate and all 3 used replicates "
                           "are positive: the linearised interval crosses a bound the parameter respects"}


def test_an_interval_ending_at_the_estimate_from_above_does_not_contain_it_either():
    # Containing means lower < estimate < upper, strictly (module docstring): an upper end equal to
    # the estimate leaves no arm above it, so the arm ratio is undefined (NaN) and the flag says so.
    result = comparison(estimate=[1.0], t_lower=[0.5], t_upper=[1.5], lower=[0.0], upper=[1.0])
    assert np.isnan(result.arm_ratio[0])
    assert result.flags == [Flag("a", "asymmetry",
                                 "the BCa interval [0, 1] does not contain the estimate 1: "
                                 "the refits are strongly biased")]


def test_an_interval_missing_either_end_raises_no_flag():
    # With no BCa and a percentile end undefined (NaN) there is no interval to compare: no flag,
    # although the t interval crosses zero under positive replicates and the bias is 1 SE.
    nan = np.nan
    result = compare_intervals(("a", "b"), np.array([1.0, 1.0]), np.array([-1.0, -1.0]), np.array([3.0, 3.0]),
                               (np.array([0.5, nan]), np.array([nan, 1.5])), (np.full(2, nan),) * 2,
                               np.ones(2), np.ones(2), np.ones((3, 2)))
    assert result.flags == []


def test_words_follow_the_side_just_past_a_limit_and_the_lower_arm_limit_is_inclusive():
    # a: width 3.6 against 2, ratio 1.8 (past 1.5): wider, so the linearised error understates.
    # b: arms 0.9 above and 0.5 below, ratio 1.8: longer above. c: arms 2 above and 3 below, ratio
    # 2/3 = 1/1.5 exactly (both divisions round to the same double): at the limit, no flag. By hand.
    result = comparison(estimate=[1.0, 1.0, 3.0], t_lower=[0.0, 0.0, 0.0], t_upper=[2.0, 2.0, 6.0],
                        lower=[-0.8, 0.5, 0.0], upper=[2.8, 1.9, 5.0])
    assert [(flag.parameter, flag.kind) for flag in result.flags] == [("a", "width"), ("b", "asymmetry")]
    assert result.flags[0].reason == ("the BCa interval is 1.80 times as wide as the t interval: the linearised "
                                      "standard error understates the spread of the refits")
    assert result.flags[1].reason.startswith(
        "the BCa interval reaches 1.80 times as far above the estimate as below it")
    assert result.arm_ratio[2] == 1 / 1.5
