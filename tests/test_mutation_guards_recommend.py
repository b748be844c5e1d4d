"""The sweep's advice on hand-made tallies: the safe region's edge (99 % of at least 100 starts),
its half-width and box, the step-factor choice with its tie rule at its exact edges, and the words
of each reason.

Every expected number is counted by hand in the comment beside it; percentiles are checked
against numpy.percentile(method="inverted_cdf").
"""
from __future__ import annotations

import warnings

import numpy as np
import pytest

from audit.sweep.recommend import (
    DISTANCE_BINS,
    SHARE_TIE,
    choose_step_factor,
    histogram_percentile,
    region_box,
    safe_regions,
    start_distances,
)


def test_start_distances_are_the_largest_coordinate_difference():
    unit = np.array([[0.5, 0.5], [0.9, 0.45], [0.0, 1.0], [0.5004, 0.5]])
    distance, bins = start_distances(unit, np.array([0.5, 0.5]))
    np.testing.assert_allclose(distance, [0.0, 0.4, 0.5, 0.0004], atol=1e-15)   # max |Δ| by hand
    # Bins of width 1/1000: 0.4 → 400, 0.5 → 500, 0.0004 → 0; a distance of 1 falls in the last bin.
    assert bins.tolist() == [0, 400, 500, 0]
    assert start_distances(np.array([[1.0]]), np.array([0.0]))[1].tolist() == [DISTANCE_BINS - 1]


def test_histogram_percentile_matches_numpy_inverted_cdf():
    values = np.array([0, 1, 1, 2, 5, 5, 5, 9])
    histogram = np.bincount(values, minlength=10)
    for q in (0.0, 12.5, 50.0, 90.0, 100.0):
        assert histogram_percentile(histogram, q) == np.percentile(values, q, method="inverted_cdf")
    assert np.isnan(histogram_percentile(np.zeros(10), 50.0))


def region_tallies():
    """1000 bins; 100 starts in bin 0 all reaching the best, 100 in bin 10 of which 98 do, 100
    in bin 20 of which 100 do, 100 in bin 30 of which 90 do; farthest distance bin/1000 + 0.0005."""
    total = np.zeros(DISTANCE_BINS)
    best = np.zeros((1, 2, DISTANCE_BINS))
    farthest = np.full(DISTANCE_BINS, -np.inf)
    for bin_, reached in ((0, 100), (10, 98), (20, 100), (30, 90)):
        total[bin_] = 100
        best[0, 0, bin_] = reached
        farthest[bin_] = bin_ / 1000 + 0.0005
    best[0, 1, 0] = 98                                # the second setting: 98 of the first 100
    return total, best, farthest


def test_the_safe_region_is_the_largest_cube_keeping_99_percent():
    total, best, farthest = region_tallies()
    last, radius, starts, share = safe_regions(total, best, farthest)
    # Setting 0: cumulative shares 100/100, 198/200 = 0.99 (exactly the level: safe),
    # 298/300 = 0.9933 up to bin 29, 388/400 = 0.97 from bin 30: the cube ends at bin 29 with
    # 300 starts, its half-width the farthest start inside, 0.0205 (hand count).
    assert last[0, 0] == 29 and starts[0, 0] == 300
    assert radius[0, 0] == pytest.approx(0.0205) and share[0, 0] == pytest.approx(298 / 300)
    # Setting 1: 98/100, then 98/200 ...: never 99 %, no region.
    assert last[0, 1] == -1 and np.isnan(radius[0, 1]) and starts[0, 1] == 0 and np.isnan(share[0, 1])
    # At least 300 starts are still met by the same cube; 301 by none (hand count).
    assert safe_regions(total, best, farthest, min_starts=300)[0][0, 0] == 29
    assert safe_regions(total, best, farthest, min_starts=301)[0][0, 0] == -1


class UnitSpace:
    """A search space whose parameters are 10 × the unit coordinate (linear axes)."""

    @staticmethod
    def from_unit(unit):
        return 10.0 * unit


def test_the_region_box_spans_the_starts_tried_inside():
    unit_low = np.full((DISTANCE_BINS, 2), np.inf)
    unit_high = np.full((DISTANCE_BINS, 2), -np.inf)
    unit_low[0], unit_high[0] = [0.4, 0.45], [0.6, 0.5]
    unit_low[5], unit_high[5] = [0.3, 0.5], [0.5, 0.7]
    lower, upper = region_box(np.array([[5, -1]]), unit_low, unit_high, UnitSpace())
    # Bins 0..5 together span [0.3, 0.6] × [0.45, 0.7], times 10 (hand).
    np.testing.assert_allclose(lower[0, 0], [3.0, 4.5])
    np.testing.assert_allclose(upper[0, 0], [6.0, 7.0])
    assert np.all(np.isnan(lower[0, 1])) and np.all(np.isnan(upper[0, 1]))


STEPS = np.array([1.0, 0.5])


def test_shares_within_half_a_point_tie_and_fewer_iterations_win():
    share = np.array([[0.900, 0.896]])                # 0.4 points apart: a tie (limit 0.5 points)
    median = np.array([[30.0, 12.0]])
    radius = np.array([[0.2, 0.1]])
    choice, reason = choose_step_factor(share, median, STEPS, ("gn",), radius, np.array([[400, 300]]),
                                        np.array([[0.995, 0.99]]))
    assert choice == (0, 1)
    assert reason == ("2 settings reach the best solution from shares within 0.5% of the highest; this one needs "
                      "the fewest iterations among the settings with a safe starting region; safe from starts "
                      "within 0.100 of each range's width around the best fit (99.0% of the 300 starts there "
                      "reached it)")
    apart = np.array([[0.900, 0.894]])                # 0.6 points apart: the higher share wins
    choice, reason = choose_step_factor(apart, median, STEPS, ("gn",), radius, np.array([[400, 300]]),
                                        np.array([[0.995, 0.99]]))
    assert choice == (0, 0) and reason.startswith("highest share of starts reaching the best solution among")


def test_equal_iterations_prefer_the_larger_step_factor_then_the_first_method():
    share = np.full((2, 2), 0.5)
    median = np.full((2, 2), 10.0)
    radius = np.full((2, 2), 0.1)
    choice, _ = choose_step_factor(share, median, STEPS, ("gn", "lm"), radius, np.full((2, 2), 200),
                                   np.full((2, 2), 1.0))
    assert choice == (0, 0)


def test_a_higher_share_without_a_region_is_named_as_not_recommendable():
    share = np.array([[0.6, 0.9]])
    radius = np.array([[0.05, np.nan]])
    choice, reason = choose_step_factor(share, np.array([[10.0, 8.0]]), STEPS, ("gn",), radius,
                                        np.array([[150, 0]]), np.array([[1.0, np.nan]]))
    assert choice == (0, 0)
    assert reason == ("safe from starts within 0.050 of each range's width around the best fit (100.0% of the 150 "
                      "starts there reached it); gn with step factor 0.5 reaches the best from more starts (90.0% "
                      "against 60.0%) but from no box around the best fit reliably, so it cannot be recommended "
                      "from any starting region")


def test_no_region_anywhere_and_no_start_reaching_the_best_say_so():
    nothing = np.full((1, 2), np.nan)
    choice, reason = choose_step_factor(np.array([[0.3, 0.2]]), np.array([[5.0, 4.0]]), STEPS, ("gn",), nothing,
                                        np.zeros((1, 2)), nothing)
    assert choice == (0, 0)
    assert reason == ("highest share of starts reaching the best solution; no setting has a safe starting region (a "
                      "box around the best fit holding at least 100 starts of which 99% reach it), so start close to "
                      "the best fit or sweep more starts to find one")
    assert choose_step_factor(np.zeros((1, 2)), nothing, STEPS, ("gn",), nothing, np.zeros((1, 2)), nothing) == (
        None, "no start reached the best solution (a converged solution inside the searched ranges)")


def test_percentiles_of_stacked_histograms_match_numpy_row_by_row():
    # Rows of a (2, 3, L) stack, each checked against numpy.percentile(method="inverted_cdf") of
    # the values it counts; a single value (total 1) is its own percentile at every level.
    rows = [[0, 1, 1, 2, 5, 5, 5, 9], [3], [7, 7, 8], [0, 0, 0, 0, 9], [4, 6], [2, 2, 2, 2, 2, 2, 2, 8]]
    stack = np.array([np.bincount(values, minlength=10) for values in rows]).reshape(2, 3, 10)
    for q in (0.0, 12.5, 50.0, 90.0, 100.0):
        expected = [np.percentile(values, q, method="inverted_cdf") for values in rows]
        np.testing.assert_array_equal(histogram_percentile(stack, q).ravel(), expected)


def test_the_top_percentile_is_the_largest_value_even_one_in_two_hundred():
    # 199 zeros and a single 1: the 100th percentile is the maximum, 1 (numpy.percentile,
    # inverted_cdf); 199/200 of the count reaches 99.5 % of it, not 100 %.
    values = np.r_[np.zeros(199, dtype=int), 1]
    histogram = np.bincount(values, minlength=4)
    for q in (99.5, 99.6, 100.0):
        assert histogram_percentile(histogram, q) == np.percentile(values, q, method="inverted_cdf")


def test_a_region_can_end_in_the_first_bin_at_exactly_99_percent():
    total = np.zeros(DISTANCE_BINS)
    best = np.zeros((1, 1, DISTANCE_BINS))
    farthest = np.full(DISTANCE_BINS, -np.inf)
    total[[0, 1, 5]] = 100
    farthest[[0, 1, 5]] = [0.0007, 0.0012, 0.0051]
    best[0, 0, [0, 1, 5]] = [99, 50, 100]             # 99/100, then 149/200 = 74.5 %, 249/300
    # 99 of 100 is exactly the level (99/100 rounds to the same double as 0.99), so the cube ends in
    # bin 0 with its 100 starts, half-width the farthest of them, 0.0007 (hand count).
    last, radius, starts, share = safe_regions(total, best, farthest)
    assert last[0, 0] == 0 and starts[0, 0] == 100 and share[0, 0] == 0.99 and radius[0, 0] == 0.0007


def test_empty_leading_bins_are_not_safe_and_raise_no_floating_point_warning():
    total = np.zeros(DISTANCE_BINS)
    best = np.zeros((1, 2, DISTANCE_BINS))
    farthest = np.full(DISTANCE_BINS, -np.inf)
    total[5], farthest[5] = 100, 0.0051               # no start closer than bin 5
    best[0, :, 5] = [100, 98]
    # Bins 0..4 hold 0 of 0 starts: a 0/0 share, which must stay silent (no RuntimeWarning).
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        last, radius, starts, share = safe_regions(total, best, farthest)
    # Setting 0: 100 of 100 from bin 5 on, so the cube runs to the last bin, half-width 0.0051;
    # setting 1: 98 of 100, never 99 % (hand count).
    assert last[0, 0] == DISTANCE_BINS - 1 and starts[0, 0] == 100 and radius[0, 0] == 0.0051
    assert last[0, 1] == -1


def test_a_region_of_the_first_bin_spans_only_its_own_starts():
    unit_low = np.full((DISTANCE_BINS, 2), np.inf)
    unit_high = np.full((DISTANCE_BINS, 2), -np.inf)
    unit_low[0], unit_high[0] = [0.4, 0.45], [0.6, 0.5]
    unit_low[1], unit_high[1] = [0.1, 0.2], [0.9, 0.8]
    lower, upper = region_box(np.array([[0]]), unit_low, unit_high, UnitSpace())
    # Bin 0 alone spans [0.4, 0.6] × [0.45, 0.5], times 10 (hand).
    np.testing.assert_allclose(lower[0, 0], [4.0, 4.5])
    np.testing.assert_allclose(upper[0, 0], [6.0, 5.0])


def test_a_share_exactly_half_a_point_below_the_highest_still_ties():
    # 100 and 99 of 200 starts: 0.5 − 0.005 rounds to exactly 99/200 in binary floating point, so
    # the second is within SHARE_TIE of the first and wins on fewer iterations (the rule: "within").
    assert 100 / 200 - SHARE_TIE == 99 / 200
    choice, reason = choose_step_factor(np.array([[100 / 200, 99 / 200]]), np.array([[20.0, 9.0]]), STEPS, ("gn",),
                                        np.array([[0.1, 0.1]]), np.array([[200, 200]]), np.array([[1.0, 1.0]]))
    assert choice == (0, 1) and reason.startswith("2 settings reach the best solution from shares within 0.5%")


def test_an_unsafe_setting_is_named_only_when_more_than_half_a_point_higher():
    radius, starts, share_inside = np.array([[0.1, np.nan]]), np.array([[150, 0]]), np.array([[1.0, np.nan]])
    plain = ("highest share of starts reaching the best solution among the settings with a safe starting region; "
             "safe from starts within 0.100 of each range's width around the best fit (100.0% of the 150 starts "
             "there reached it)")
    # Unsafe share 100/200 against the chosen 99/200: exactly half a point higher (99/200 + 0.005
    # rounds to 0.5), within the tie, so not named; nor one with a lower share (0.3 against 0.9).
    assert 99 / 200 + SHARE_TIE == 100 / 200
    for shares in ([[99 / 200, 100 / 200]], [[0.9, 0.3]]):
        assert choose_step_factor(np.array(shares), np.array([[10.0, 10.0]]), STEPS, ("gn",), radius, starts,
                                  share_inside) == ((0, 0), plain)
