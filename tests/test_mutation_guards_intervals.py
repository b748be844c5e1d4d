"""Bootstrap intervals: tails, ties, the acceleration by hand, BCa against scipy.stats.bootstrap,
the undefined cases (the flags comparing them with the t interval are in
test_mutation_guards_disagreement.py).

References are worked out by hand in the comments (order statistics with linear interpolation,
Hyndman & Fan 1996 type 7; the jackknife acceleration of Efron & Tibshirani 1993, ch. 14) or come
from scipy.special.
"""
from __future__ import annotations

import warnings
from types import SimpleNamespace

import numpy as np
import pytest
from scipy import special, stats

from audit.errors import InputError
from audit.uncertainty.intervals import bca_interval, jackknife_acceleration, percentile_interval


def test_percentile_interval_reads_the_two_tails():
    replicates = np.array([[5.0], [1.0], [4.0], [2.0], [3.0]])
    # Type 7 quantiles of 1..5 at 0.25 and 0.75: positions 0.25·4 = 1 and 0.75·4 = 3 → 2 and 4.
    lower, upper = percentile_interval(replicates, 0.5)
    assert (lower[0], upper[0]) == (2.0, 4.0)
    # At 0.8: tails 0.1 and 0.9, positions 0.4 and 3.6 → 1.4 and 4.6.
    lower, upper = percentile_interval(replicates, 0.8)
    assert lower[0] == pytest.approx(1.4, rel=1e-12) and upper[0] == pytest.approx(4.6, rel=1e-12)


@pytest.mark.parametrize("replicates, confidence, message", [
    (np.ones((1, 2)), 0.9, "at least 2 replicates"),
    (np.ones(5), 0.9, "at least 2 replicates"),
    (np.ones((5, 2)), 0.0, "confidence"),
    (np.ones((5, 2)), 1.0, "confidence"),
])
def test_intervals_refuse_too_few_replicates_or_a_level_outside_zero_one(replicates, confidence, message):
    with pytest.raises(InputError, match=message):
        percentile_interval(replicates, confidence)


def test_two_replicates_are_enough():
    lower, upper = percentile_interval(np.array([[1.0], [3.0]]), 0.5)
    assert (lower[0], upper[0]) == (1.5, 2.5)        # positions 0.25 and 0.75 between 1 and 3


def test_jackknife_acceleration_by_hand():
    # Leave-one-out values 1, 2, 4: mean 7/3, d = mean − θ_(i) = 4/3, 1/3, −5/3;
    # Σd³ = (64 + 1 − 125)/27 = −60/27, Σd² = 42/9, a = Σd³ / (6·(Σd²)^{3/2}).
    acceleration = jackknife_acceleration(np.array([[1.0, 5.0], [2.0, 5.0], [4.0, 5.0]]))
    assert acceleration[0] == pytest.approx((-60 / 27) / (6 * (42 / 9) ** 1.5), rel=1e-12)
    assert np.isnan(acceleration[1])                  # a jackknife that does not move
    with pytest.raises(InputError, match="at least 3"):
        jackknife_acceleration(np.ones((2, 1)))
    with pytest.raises(InputError, match="at least 3"):
        jackknife_acceleration(np.ones(4))


def test_bca_counts_ties_with_the_estimate_as_half():
    # Replicates 1, 2, 3, 3, 4, 5 with the estimate 3: 2 below, 2 tied → share (2 + 4)/12 = 1/2,
    # z0 = Φ⁻¹(1/2) = 0; with a = 0 the levels are Φ(±1.645) = 0.05, 0.95: the percentile interval.
    replicates = np.array([1.0, 2.0, 3.0, 3.0, 4.0, 5.0])[:, None]
    result = bca_interval(replicates, np.array([3.0]), np.array([0.0]), 0.9)
    assert result.bias_correction[0] == 0.0
    lower, upper = np.quantile(replicates[:, 0], [0.05, 0.95])
    assert result.lower[0] == pytest.approx(lower, rel=1e-12) and result.upper[0] == pytest.approx(upper, rel=1e-12)
    # The estimate below every replicate: share 0, z0 = −inf, no BCa interval.
    beyond = bca_interval(replicates, np.array([0.5]), np.array([0.0]), 0.9)
    assert beyond.bias_correction[0] == -np.inf and np.isnan(beyond.lower[0]) and np.isnan(beyond.upper[0])


def test_bca_levels_move_with_bias_and_acceleration():
    # z0 = Φ⁻¹(3/8) with 3 of 8 replicates below 4.5 and none tied; a = 0.1; for z = ∓Φ⁻¹(0.05)
    # level = Φ(z0 + (z0 + z)/(1 − a(z0 + z))) (Efron & Tibshirani 1993, eq. 14.10), by scipy.special.
    replicates = np.arange(1.0, 9.0)[:, None] + np.array([0.0])
    z0 = special.ndtri(3 / 8)
    result = bca_interval(replicates, np.array([3.5]), np.array([0.1]), 0.9)
    assert result.bias_correction[0] == pytest.approx(z0, rel=1e-12)
    levels = [special.ndtr(z0 + (z0 + z) / (1 - 0.1 * (z0 + z))) for z in (special.ndtri(0.05), special.ndtri(0.95))]
    expected = np.quantile(replicates[:, 0], levels)
    assert result.lower[0] == pytest.approx(expected[0], rel=1e-12)
    assert result.upper[0] == pytest.approx(expected[1], rel=1e-12)


def test_acceleration_is_scale_free_also_below_a_unit_spread():
    # a = Σd³ / (6·(Σd²)^{3/2}) is unchanged when every jackknife value is multiplied by c
    # (numerator and denominator both scale by c³; Efron & Tibshirani 1993, ch. 14, by hand):
    # 0.1, 0.2, 0.4 give the a of 1, 2, 4 worked out above, though their Σd² = 0.042/0.9 < 1.
    acceleration = jackknife_acceleration(np.array([[0.1], [0.2], [0.4]]))
    assert acceleration[0] == pytest.approx((-60 / 27) / (6 * (42 / 9) ** 1.5), rel=1e-12)


def test_single_precision_jackknife_values_are_widened_first():
    # Jackknife values handed over in float32 (a model written in single precision) get the
    # acceleration computed in float64: the reference is the same formula in float64 by numpy.
    jackknife = np.array([[0.1], [0.2], [0.4]], dtype=np.float32)
    wide = jackknife.astype(float)[:, 0]
    spread = wide.mean() - wide
    assert jackknife_acceleration(jackknife)[0] == pytest.approx(
        np.sum(spread**3) / (6 * np.sum(spread**2) ** 1.5), rel=1e-12)


def test_two_parameters_each_get_the_bca_interval_scipy_gives_for_that_statistic():
    # Two statistics of one skewed sample, the standard deviation and the mean, bootstrapped
    # together as the columns of (B, 2) replicates: each column must equal what
    # scipy.stats.bootstrap(method="BCa") gives for that statistic alone from the same replicates
    # (its own z0, jackknife acceleration and quantiles), so no count, sum or quantile may mix columns.
    rng = np.random.default_rng(7)
    data = rng.exponential(2.0, size=25)
    statistics = (lambda sample, axis=-1: np.std(sample, axis=axis, ddof=1),
                  lambda sample, axis=-1: np.mean(sample, axis=axis))
    resampled = data[rng.integers(0, data.size, size=(4000, data.size))]
    replicates = np.column_stack([statistic(resampled) for statistic in statistics])
    jackknife = np.array([[statistic(np.delete(data, i)) for statistic in statistics] for i in range(data.size)])
    estimate = np.array([statistic(data) for statistic in statistics])
    ours = bca_interval(replicates, estimate, jackknife_acceleration(jackknife), 0.9)
    for column, statistic in enumerate(statistics):
        given = SimpleNamespace(bootstrap_distribution=replicates[:, column])
        reference = stats.bootstrap((data,), statistic, n_resamples=0, bootstrap_result=given, method="BCa",
                                    confidence_level=0.9).confidence_interval
        assert ours.lower[column] == pytest.approx(reference.low, rel=1e-10)
        assert ours.upper[column] == pytest.approx(reference.high, rel=1e-10)
    # Meaningful: the two columns differ in how many replicates fall below their estimates.
    below = (replicates < estimate).mean(axis=0)
    assert abs(below[0] - below[1]) > 0.02


def test_undefined_cases_give_nan_without_a_warning():
    # The NaN cases the docstrings promise (worked out above: a jackknife that does not move,
    # 0/0; an estimate below every replicate, z0 = Φ⁻¹(0) = −inf, so 0·(−inf) in the level) are
    # answers, not accidents: they must not print numpy's RuntimeWarning into a command's output.
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert np.isnan(jackknife_acceleration(np.array([[5.0], [5.0], [5.0]]))[0])
        beyond = bca_interval(np.array([[1.0], [2.0], [3.0]]), np.array([0.5]), np.array([0.0]), 0.9)
    assert np.isnan(beyond.lower[0]) and np.isnan(beyond.upper[0])
