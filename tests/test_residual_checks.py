"""Residual checks: runs of signs, serial correlation, normality, constant variance and the
bootstrap scheme they suggest, checked against textbook formulas written out here, scipy.stats,
a brute-force enumeration of sign arrangements and published tables and examples."""
from __future__ import annotations

import itertools
import json

import numpy as np
import pytest
from matplotlib.image import imread
from scipy import stats

from audit.errors import InputError
from audit.figures.residuals import write_figures
from audit.residuals import check_residuals
from audit.residuals.sign_runs import runs_p_value


def straight_line_residuals(x: np.ndarray, y: np.ndarray, weights: np.ndarray | None = None):
    """Fitted values and residuals of a (weighted) straight line, by numpy.polyfit."""
    coefficients = np.polyfit(x, y, 1, w=None if weights is None else np.sqrt(weights))
    fitted = np.polyval(coefficients, x)
    return fitted, y - fitted


def reference_runs(signs_in_x_order: np.ndarray) -> tuple[int, float, float, float]:
    """Wald-Wolfowitz runs test, normal form, written out from the textbook (Wald & Wolfowitz
    1940; Siegel, Nonparametric Statistics, 1956): runs R, mean 2·n1·n2/N + 1, variance
    2·n1·n2·(2·n1·n2 − N) / (N²·(N − 1)), z = (R − mean)/sd; returns R, mean, z, two-sided p."""
    runs = 1 + int(np.count_nonzero(signs_in_x_order[1:] != signs_in_x_order[:-1]))
    n1 = int(np.count_nonzero(signs_in_x_order > 0))
    n2 = int(np.count_nonzero(signs_in_x_order < 0))
    total = n1 + n2
    mean = 2 * n1 * n2 / total + 1
    variance = 2 * n1 * n2 * (2 * n1 * n2 - total) / (total**2 * (total - 1))
    z = (runs - mean) / np.sqrt(variance)
    return runs, mean, z, 2 * stats.norm.sf(abs(z))


def test_a_trend_left_in_the_residuals_flags_runs_and_serial_correlation():
    # A straight line fitted to a parabola: residuals + then − then + along x.
    rng = np.random.default_rng(3)
    x = np.linspace(0.0, 1.0, 60)
    y = 4 * x**2 + rng.normal(0, 0.05, x.size)
    fitted, residuals = straight_line_residuals(x, y)
    shuffle = rng.permutation(x.size)  # the checks must sort by x themselves
    result = check_residuals(residuals[shuffle], fitted[shuffle], x[shuffle], n_params=2)

    runs, mean, z, p = reference_runs(np.sign(residuals))
    assert result.runs.details["positive"] + result.runs.details["negative"] == 60
    assert not result.runs.details["exact"]  # more than 20 of each sign: normal form
    assert result.runs.details["runs"] == runs  # textbook count, residuals taken in x order
    assert result.runs.details["expected"] == pytest.approx(mean, rel=1e-12)  # 2·n1·n2/N + 1
    assert result.runs.details["z"] == pytest.approx(z, rel=1e-12)
    assert result.runs.p_value == pytest.approx(p, rel=1e-9, abs=0)  # scipy.stats.norm two-sided
    assert runs <= 5 and result.runs.status == "fail"
    assert "pattern" in result.runs.finding

    # Durbin & Watson (1950): d = Σ(e_t − e_{t−1})² / Σ e_t², residuals in x order.
    d = np.sum(np.diff(residuals) ** 2) / np.sum(residuals**2)
    # Lag-1 autocorrelation, the sample autocorrelation of Box & Jenkins (Time Series Analysis):
    # Σ(e_t − ē)(e_{t−1} − ē) / Σ(e_t − ē)².
    centred = residuals - residuals.mean()
    lag1 = np.sum(centred[1:] * centred[:-1]) / np.sum(centred**2)
    # Large-sample form d ≈ 2(1 − r1) with r1 ~ N(0, 1/m) (Bartlett 1946): d ~ N(2, 4/m).
    z_d = (d - 2) / (2 / np.sqrt(60))
    assert result.serial.statistic == pytest.approx(d, rel=1e-12)
    assert result.serial.details["lag1_autocorrelation"] == pytest.approx(lag1, rel=1e-12)
    assert result.serial.p_value == pytest.approx(2 * stats.norm.sf(abs(z_d)), rel=1e-9, abs=0)
    assert d < 0.5 and result.serial.status == "fail"
    # A misfit is a model doubt: pairs resampling, which does not trust the model's form.
    assert result.scheme == "pairs" and "pattern" in result.scheme_reason


def test_spread_growing_with_the_fitted_values_flags_variance_and_suggests_wild():
    rng = np.random.default_rng(11)
    x = np.linspace(0.0, 10.0, 80)
    y = 2 + 3 * x + rng.normal(0, 0.05 + 0.3 * x)
    fitted, residuals = straight_line_residuals(x, y)
    result = check_residuals(residuals, fitted, x, n_params=2)

    # Breusch-Pagan in Koenker's studentised form: m·R² of the auxiliary regression of e² on
    # [1, fitted] (Koenker 1981), solved here with numpy.linalg.lstsq; chi-square with 1 dof.
    squares = residuals**2
    design = np.column_stack([np.ones_like(fitted), fitted])
    coefficients, *_ = np.linalg.lstsq(design, squares, rcond=None)
    explained = 1 - np.sum((squares - design @ coefficients) ** 2) / np.sum((squares - squares.mean()) ** 2)
    statistic = 80 * explained
    assert result.variance.statistic == pytest.approx(statistic, rel=1e-9)
    assert result.variance.details["r_squared"] == pytest.approx(explained, rel=1e-9)
    assert result.variance.p_value == pytest.approx(stats.chi2.sf(statistic, 1), rel=1e-9, abs=0)  # scipy.stats.chi2
    assert result.variance.status == "fail"

    rank = stats.spearmanr(np.abs(residuals), fitted)  # scipy.stats.spearmanr
    assert result.variance_rank.statistic == pytest.approx(rank.statistic, rel=1e-12)
    assert result.variance_rank.p_value == pytest.approx(rank.pvalue, rel=1e-9, abs=0)
    assert result.variance_rank.statistic > 0.4 and result.variance_rank.status == "fail"

    assert result.runs.status == "pass" and result.serial.status == "pass"
    assert result.scheme == "wild" and "spread" in result.scheme_reason
    # Random predictors (x drawn with y): resample the pairs instead (common practice).
    assert check_residuals(residuals, fitted, x, n_params=2, x_random=True).scheme == "pairs"


def test_weights_turn_the_same_spread_into_constant_variance():
    rng = np.random.default_rng(11)
    x = np.linspace(0.0, 10.0, 80)
    sigma = 0.05 + 0.3 * x
    y = 2 + 3 * x + rng.normal(0, sigma)
    weights = 1 / sigma**2
    fitted, residuals = straight_line_residuals(x, y, weights)
    result = check_residuals(residuals, fitted, x, n_params=2, weights=weights)

    scaled = residuals * np.sqrt(weights)  # weighted residuals r·sqrt(w), by definition
    np.testing.assert_allclose(result.weighted_residuals, scaled, rtol=1e-14)
    # Reference: scipy.stats.shapiro.
    assert result.normality.statistic == pytest.approx(stats.shapiro(scaled).statistic, rel=1e-12)
    assert result.variance.status == "pass" and result.variance_rank.status == "pass"
    assert result.scheme == "residual"


def test_exact_runs_p_values_match_a_brute_force_enumeration():
    # Every distinct arrangement of 5 plus and 7 minus signs is equally likely under
    # independence; count the runs in each and compare tail shares (plain enumeration).
    positive, negative = 5, 7
    counts = []
    for places in itertools.combinations(range(positive + negative), positive):
        signs = -np.ones(positive + negative)
        signs[list(places)] = 1
        counts.append(1 + np.count_nonzero(signs[1:] != signs[:-1]))
    counts = np.array(counts)
    for runs in range(2, 12):
        lower, upper = np.mean(counts <= runs), np.mean(counts >= runs)
        assert runs_p_value(runs, positive, negative) == pytest.approx(min(1.0, 2 * min(lower, upper)), rel=1e-12)


def test_exact_runs_reproduce_the_published_critical_values():
    # Swed & Eisenhart (1943) table of critical run counts, as reproduced in Siegel,
    # Nonparametric Statistics (1956), Table F: for n1 = n2 = 10 a two-sided test at 0.05
    # rejects for r <= 6 or r >= 16 (values from memory).
    assert runs_p_value(6, 10, 10) < 0.05 < runs_p_value(7, 10, 10)
    assert runs_p_value(16, 10, 10) < 0.05 < runs_p_value(15, 10, 10)


def test_shapiro_wilk_reproduces_the_published_example():
    # Shapiro & Wilk (1965, Biometrika 52), worked example: the weights of 11 men,
    # W = 0.79, significant at the 1 % level (values from memory).
    weights_lb = np.array([148, 154, 158, 160, 161, 162, 166, 170, 182, 195, 236], dtype=float)
    residuals = weights_lb - weights_lb.mean()
    result = check_residuals(residuals, np.full(11, weights_lb.mean()), np.arange(11.0), n_params=1)
    assert result.normality.statistic == pytest.approx(0.79, abs=0.005)
    assert result.normality.p_value < 0.01 and result.normality.status == "warn"
    assert result.normality.p_value == pytest.approx(stats.shapiro(residuals).pvalue, rel=1e-12)  # scipy.stats.shapiro


@pytest.mark.parametrize("case, reason", [
    ("zero", "vanish"),
    ("two points", "at least 3"),
    ("no dof", "degrees of freedom"),
])
def test_checks_that_cannot_run_say_why(case, reason):
    x = np.arange(6.0)
    residuals = {"zero": np.zeros(6), "two points": np.array([0.3, -0.2]), "no dof": np.array([0.1, -0.2] * 3)}[case]
    x = x[:residuals.size]
    result = check_residuals(residuals, x + 1, x, n_params=6 if case == "no dof" else 1)
    for check in result.checks:
        assert check.status == "not applicable" and reason in check.finding
        assert np.isnan(check.statistic) and np.isnan(check.p_value)
    assert "not judged" in result.scheme_reason
    json.dumps(result.to_dict())


def test_residuals_of_one_sign_leave_the_runs_test_not_applicable_but_the_rest_run():
    x = np.linspace(0, 1, 12)
    residuals = 0.1 + 0.01 * np.sin(7 * x)
    result = check_residuals(residuals, 2 * x, x, n_params=1)
    assert result.runs.status == "not applicable" and "same sign" in result.runs.finding
    assert result.normality.status != "not applicable"
    # Reference: scipy.stats.shapiro.
    assert result.normality.statistic == pytest.approx(stats.shapiro(residuals).statistic, rel=1e-12)


def test_status_follows_the_levels_given():
    rng = np.random.default_rng(5)
    x = np.linspace(0, 1, 40)
    y = 3 * x**2 + rng.normal(0, 0.15, x.size)
    fitted, residuals = straight_line_residuals(x, y)
    p = check_residuals(residuals, fitted, x, n_params=2).serial.p_value
    assert 1e-12 < p < 0.1
    # Levels placed either side of the measured p: below both warn and fail thresholds it fails,
    # between them it warns, above both it passes.
    assert check_residuals(residuals, fitted, x, n_params=2, warn_level=2 * p, fail_level=p / 2).serial.status == "warn"
    assert check_residuals(residuals, fitted, x, n_params=2, warn_level=p / 2, fail_level=p / 4).serial.status == "pass"
    assert check_residuals(residuals, fitted, x, n_params=2, warn_level=4 * p, fail_level=2 * p).serial.status == "fail"


def test_several_predictors_are_ordered_by_the_first():
    rng = np.random.default_rng(2)
    x = np.column_stack([rng.uniform(0, 1, 30), rng.uniform(0, 1, 30)])
    residuals = rng.normal(0, 1, 30)
    result = check_residuals(residuals, x[:, 1], x, n_params=2)
    np.testing.assert_array_equal(result.order, np.argsort(x[:, 0], kind="stable"))
    ordered = residuals[result.order]
    d = np.sum(np.diff(ordered) ** 2) / np.sum(ordered**2)  # Durbin & Watson (1950)
    assert result.serial.statistic == pytest.approx(d, rel=1e-12)


@pytest.mark.parametrize("change, named", [
    ({"fitted": np.zeros(5)}, "fitted"),
    ({"residuals": np.array([0.1, np.nan, 0.2, -0.1, 0.3, 0.0])}, "residuals"),
    ({"weights": -np.ones(6)}, "weights"),
    ({"x": np.zeros((6, 2, 2))}, "x"),
    ({"warn_level": 0.001, "fail_level": 0.01}, "level"),
    ({"n_params": -1}, "n_params"),
])
def test_bad_input_is_refused_with_a_message(change, named):
    arguments = {"residuals": np.array([0.1, -0.3, 0.2, -0.1, 0.3, 0.0]), "fitted": np.arange(6.0),
                 "x": np.arange(6.0), "n_params": 2}
    arguments.update(change)
    with pytest.raises(InputError, match=named):
        check_residuals(**arguments)


def test_to_dict_is_strict_json_with_every_check():
    x = np.linspace(0, 1, 25)
    residuals = np.random.default_rng(1).normal(0, 1, 25)
    data = json.loads(json.dumps(check_residuals(residuals, x, x, n_params=2).to_dict(), allow_nan=False))
    assert [check["name"] for check in data["checks"]] == ["runs", "serial", "normality", "variance", "variance_rank"]
    assert data["scheme"] in ("residual", "wild", "pairs")
    assert data["checks"][1]["statistic"] == pytest.approx(np.sum(np.diff(residuals) ** 2) / np.sum(residuals**2))


def test_figures_are_written_and_decode(tmp_path):
    x = np.linspace(0, 1, 30)
    residuals = np.random.default_rng(4).normal(0, 0.1, 30)
    result = check_residuals(residuals, 1 + x, x, n_params=2)
    paths = write_figures(result, x, 1 + x, tmp_path, formats=("png", "pdf"))
    assert [path.name for path in paths] == ["residuals.png", "residuals.pdf"]
    image = imread(paths[0])
    assert image.ndim == 3 and image.shape[0] > 200 and image.shape[1] > 400
    assert paths[1].read_bytes().startswith(b"%PDF")
    assert [path.suffix for path in write_figures(result, x, 1 + x, tmp_path / "png")] == [".png"]
