"""The uncertainty stage: bootstrap schemes, intervals, refit fates and flags, checked against
textbook results for linear models, scipy.stats.bootstrap, the NIST StRD certified standard
deviations and scipy.optimize.least_squares."""
from __future__ import annotations

import json
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
from scipy import stats
from scipy.optimize import least_squares

from audit.cli import main
from audit.engine.batch import RefitSettings, fit_batch
from audit.engine.outcomes import Outcome
from audit.engine.problem import Problem
from audit.figures.bootstrap import write_figures
from audit.inputs.scenario import load_scenario
from audit.parallel.plan import ParallelPlan
from audit.uncertainty.bootstrap import bootstrap_scenario, run_bootstrap
from audit.uncertainty.intervals import bca_interval, jackknife_acceleration, percentile_interval
from audit.uncertainty.replicates import FATES, classify, same_point
from audit.uncertainty.resampling import PairsScheme, WildScheme, leave_one_out, leverages

BUNDLED = Path(__file__).resolve().parents[1] / "scenarios" / "probe-cooling"


def quadratic(x, b0, b1, b2):
    return b0 + b1 * x + b2 * x**2


def decay(x, amplitude, tau):
    return amplitude * np.exp(-x / tau)


def linear_problem(m: int, weighted: bool = False) -> tuple[Problem, np.ndarray]:
    """A quadratic in x (linear in its parameters) with noisy data; returns the problem and X."""
    rng = np.random.default_rng(11)
    x = np.linspace(0.0, 2.0, m)
    sigma = 0.2 + 0.3 * x if weighted else np.full(m, 0.3)
    y = quadratic(x, 1.0, 2.0, -0.7) + rng.normal(0.0, sigma)
    problem = Problem(model=quadratic, x=x, y=y, names=("b0", "b1", "b2"),
                      weights=1.0 / sigma**2 if weighted else None)
    return problem, np.column_stack([np.ones(m), x, x**2])


def monte_carlo_sd_of_sd(values: np.ndarray) -> np.ndarray:
    """Standard error of the standard deviation of B replicates, per column.

    Delta method: Var(s²) ≈ (μ4 − σ⁴)/B, so Var(s) ≈ (μ4 − σ⁴)/(4σ²B), with the moments
    estimated from the replicates themselves (so heavy tails widen the tolerance honestly).
    """
    centred = values - values.mean(axis=0)
    second, fourth = np.mean(centred**2, axis=0), np.mean(centred**4, axis=0)
    return np.sqrt((fourth - second**2) / (4.0 * second * len(values)))


def best_fit(problem: Problem, start) -> np.ndarray:
    fit = fit_batch(problem, np.atleast_2d(start), 1.0)
    assert fit.converged[0]
    return fit.params[0]


# --------------------------------------------------------------------------- linear models
def test_residual_bootstrap_of_a_linear_model_gives_ols_errors_times_sqrt_of_m_minus_p_over_m():
    problem, design = linear_problem(m=10)
    # Reference: numpy.linalg.lstsq for the OLS fit; its standard errors s·sqrt(diag (XᵀX)⁻¹) with
    # s² = SSR/(m − p).
    coefficients, ssr, _, _ = np.linalg.lstsq(design, problem.y, rcond=None)
    m, p = design.shape
    ols_errors = np.sqrt(ssr[0] / (m - p) * np.diag(np.linalg.inv(design.T @ design)))
    result = run_bootstrap(problem, coefficients, method="residual", samples=4000, seed=3)
    assert result.used == 4000 and result.asymptotic.std_errors == pytest.approx(ols_errors, rel=1e-9)
    # Efron & Tibshirani (1993), residual bootstrap of a regression (ch. 9): resampling the m
    # residuals (mean 0 with an intercept) gives Var*(β*) = (SSR/m)(XᵀX)⁻¹, i.e. the OLS
    # standard errors times sqrt((m − p)/m) = 0.837 here. Only Monte Carlo error separates the
    # B = 4000 estimate from it: allow 4 of its standard errors (about 4.5%).
    expected = ols_errors * np.sqrt((m - p) / m)
    tolerance = 4 * monte_carlo_sd_of_sd(result.replicates.params)
    assert np.all(np.abs(result.std_error - expected) < tolerance)
    # The test can tell the scaled from the unscaled errors (16% apart).
    assert np.all(np.abs(result.std_error - ols_errors) > tolerance)


def test_few_observations_are_noted_with_the_shrink_factor_of_the_residual_bootstrap():
    # Efron & Tibshirani (1993), ch. 9, as above: the residual bootstrap's spread is the OLS one
    # times sqrt((m − p)/m), here sqrt(7/10) = 0.84; pairs resampling has no such factor.
    problem, design = linear_problem(m=10)
    coefficients = np.linalg.lstsq(design, problem.y, rcond=None)[0]
    residual = run_bootstrap(problem, coefficients, method="residual", samples=200, seed=3)
    assert any(note.startswith("only 10 observations") and "sqrt(7/10) = 0.84" in note for note in residual.notes)
    pairs = run_bootstrap(problem, coefficients, method="pairs", samples=200, seed=3)
    assert any(note.startswith("only 10 observations") and "sqrt" not in note for note in pairs.notes)
    many, many_design = linear_problem(m=40)
    plenty = run_bootstrap(many, np.linalg.lstsq(many_design, many.y, rcond=None)[0], samples=200, seed=3)
    assert not any("observations" in note for note in plenty.notes)


def test_weighted_residual_bootstrap_resamples_standardised_residuals():
    problem, design = linear_problem(m=12, weighted=True)
    root = np.sqrt(problem.weights)
    coefficients = np.linalg.lstsq(design * root[:, None], problem.y * root, rcond=None)[0]
    standardised = root * (problem.y - design @ coefficients)
    # Reference: weighted least squares by numpy.linalg.lstsq. Drawing the centred standardised
    # residuals e gives Var*(β*) = mean((e − ē)²)·(XᵀWX)⁻¹ exactly (same argument as above).
    information = np.linalg.inv(design.T @ (design * problem.weights[:, None]))
    expected = np.sqrt(np.var(standardised) * np.diag(information))
    result = run_bootstrap(problem, coefficients, method="residual", samples=4000, seed=5)
    assert np.all(np.abs(result.std_error - expected) < 4 * monte_carlo_sd_of_sd(result.replicates.params))


@pytest.mark.parametrize("multipliers", ["rademacher", "mammen"])
def test_wild_bootstrap_of_a_linear_model_gives_the_heteroskedasticity_consistent_errors(multipliers):
    problem, design = linear_problem(m=20)
    coefficients = np.linalg.lstsq(design, problem.y, rcond=None)[0]
    residuals = problem.y - design @ coefficients
    # Reference: White's (1980) HC0 sandwich (XᵀX)⁻¹Xᵀdiag(r²)X(XᵀX)⁻¹, computed with numpy. With
    # multipliers of mean 0 and variance 1 it is exactly the wild-bootstrap covariance of a
    # linear fit (common practice; e.g. Davidson & MacKinnon, value from memory).
    bread = np.linalg.inv(design.T @ design)
    sandwich = bread @ design.T @ (design * residuals[:, None] ** 2) @ bread
    result = run_bootstrap(problem, coefficients, method="wild", wild_multipliers=multipliers, samples=4000, seed=9)
    tolerance = 4 * monte_carlo_sd_of_sd(result.replicates.params)
    assert np.all(np.abs(result.std_error - np.sqrt(np.diag(sandwich))) < tolerance)


def test_mammen_multipliers_have_mean_0_variance_1_and_third_moment_1():
    scheme = WildScheme(fitted=np.zeros(50), residuals=np.ones(50), multipliers="mammen")
    draws = scheme.draw(np.random.default_rng(1), 4000).y.ravel()
    # Reference: Mammen (1993) chose the two-point law for E v = 0, E v² = 1, E v³ = 1 (value from
    # memory). Tolerance: 5 standard errors of each sample moment over the 200,000 draws.
    for power, target in ((1, 0.0), (2, 1.0), (3, 1.0)):
        values = draws**power
        assert abs(values.mean() - target) < 5 * values.std() / np.sqrt(values.size)
    assert set(np.unique(WildScheme(np.zeros(5), np.ones(5)).draw(np.random.default_rng(2), 10).y)) == {-1.0, 1.0}


def test_leverages_are_the_diagonal_of_the_hat_matrix():
    problem, design = linear_problem(m=12, weighted=True)
    weighted = design * np.sqrt(problem.weights)[:, None]
    # Reference: H = X_w (X_wᵀX_w)⁻¹ X_wᵀ with numpy.linalg. The problem has no hand-derived
    # Jacobian, so ours comes from central differences (relative error about 1e-10).
    hat = weighted @ np.linalg.inv(weighted.T @ weighted) @ weighted.T
    assert leverages(problem, np.array([1.0, 2.0, -0.7])) == pytest.approx(np.diag(hat), abs=1e-9)


def test_pairs_and_leave_one_out_refits_equal_least_squares_on_the_same_rows():
    problem, design = linear_problem(m=15, weighted=True)
    start = np.array([1.0, 2.0, -0.7])
    picks = np.random.default_rng(4).integers(0, 15, size=(6, 15))
    data = PairsScheme(problem).draw(np.random.default_rng(4), 6)
    assert np.array_equal(data.x, problem.x[picks]) and np.array_equal(data.weights, problem.weights[picks])
    reduced, held_out = leave_one_out(problem, 3, 4)
    for fit_problem, replicate, rows in ((problem, data, picks),
                                         (reduced, held_out, [np.delete(np.arange(15), k) for k in range(3, 7)])):
        fit = fit_batch(fit_problem, np.tile(start, (len(rows), 1)), 1.0, y=replicate.y, x=replicate.x,
                        weights=replicate.weights)
        for params, chosen in zip(fit.params, rows):
            root = np.sqrt(problem.weights[chosen])
            # Reference: numpy.linalg.lstsq on the very rows the replicate was made of.
            expected = np.linalg.lstsq(design[chosen] * root[:, None], problem.y[chosen] * root, rcond=None)[0]
            assert params == pytest.approx(expected, rel=1e-9, abs=1e-12)


# --------------------------------------------------------------------------- intervals
@pytest.mark.parametrize("confidence", [0.9, 0.95])
def test_bca_equals_scipy_bootstrap_on_the_same_replicates(confidence):
    rng = np.random.default_rng(21)
    data = rng.exponential(2.0, size=30)          # skewed, so z0 and a are far from 0

    def spread(sample, axis=-1):
        return np.std(sample, axis=axis, ddof=1)

    replicates = spread(data[rng.integers(0, data.size, size=(5000, data.size))])
    jackknife = np.array([spread(np.delete(data, i)) for i in range(data.size)])
    ours = bca_interval(replicates[:, None], np.array([spread(data)]), jackknife_acceleration(jackknife[:, None]),
                        confidence)
    # Reference: scipy.stats.bootstrap(method="BCa") handed our replicates (n_resamples=0 with
    # bootstrap_result), so it computes z0, its own jackknife acceleration and the quantiles
    # from the same numbers. Only rounding can separate the two: tolerance 1e-10 relative.
    given = SimpleNamespace(bootstrap_distribution=replicates)   # what `bootstrap_result` must provide
    reference = stats.bootstrap((data,), spread, n_resamples=0, bootstrap_result=given, method="BCa",
                                confidence_level=confidence).confidence_interval
    assert ours.lower[0] == pytest.approx(reference.low, rel=1e-10)
    assert ours.upper[0] == pytest.approx(reference.high, rel=1e-10)
    # Meaningful: BCa here moves well away from the percentile interval.
    lower, upper = percentile_interval(replicates[:, None], confidence)
    assert abs(ours.upper[0] - upper[0]) > 1e-3 * (upper[0] - lower[0])


# --------------------------------------------------------------------------- NIST StRD
def misra1a(x, b1, b2):
    return b1 * (1.0 - np.exp(-b2 * x))


def test_nist_misra1a_bootstrap_errors_within_25_percent_of_the_certified_ones(nist):
    # Misra1a (lower difficulty): y = b1·(1 − exp(−b2·x)), 14 observations. The certified
    # standard deviations are about 1% of the values, so over the confidence region the model
    # is close to its linearisation and the bootstrap should reproduce them: the residual
    # bootstrap up to the factor sqrt((m − p)/m) = 0.93 (see the linear test above).
    reference = nist("Misra1a")
    problem = Problem(model=misra1a, x=reference.x, y=reference.y, names=reference.names)
    result = run_bootstrap(problem, best_fit(problem, reference.start2), method="residual", samples=2000, seed=7)
    # Reference: the certified standard deviations of the NIST StRD file.
    assert result.used == 2000
    assert np.all(np.abs(result.std_error / reference.certified_sd - 1.0) < 0.25)
    assert not [flag for flag in result.flags if flag.kind == "asymmetry"]


# --------------------------------------------------------------------------- nonlinearity
def decay_problem(noise_seed: int) -> Problem:
    """Exponential decay seen over less than one time constant, with heavy noise: the time
    constant is poorly determined and enters nonlinearly, the amplitude enters linearly."""
    rng = np.random.default_rng(noise_seed)
    x = np.linspace(0.5, 6.0, 25)
    return Problem(model=decay, x=x, y=decay(x, 2.5, 7.0) + rng.normal(0.0, 0.6, x.size),
                   names=("amplitude", "tau"))


def simulated_arm_ratios(problem: Problem, best: np.ndarray, residual_sd: float, count: int = 400) -> np.ndarray:
    """(upper − best)/(best − lower) of the central 95% of fits of data simulated from the
    fitted model with normal noise, each fitted by scipy.optimize.least_squares."""
    rng = np.random.default_rng(99)
    fitted = problem.predict(best[None])[0]
    fits = []
    for _ in range(count):
        simulated = fitted + rng.normal(0.0, residual_sd, fitted.size)
        fits.append(least_squares(lambda a: decay(problem.x, *a) - simulated, best, method="lm").x)
    lower, upper = np.quantile(np.array(fits), [0.025, 0.975], axis=0)
    return (upper - best) / (best - lower)


def test_badly_nonlinear_time_constant_gets_an_asymmetric_interval_and_a_flag():
    problem = decay_problem(noise_seed=0)
    result = run_bootstrap(problem, best_fit(problem, [2.5, 7.0]), samples=2000, seed=1)
    amplitude, tau = 0, 1
    asymptotic = result.asymptotic
    assert asymptotic.upper[tau] - result.best[tau] == pytest.approx(result.best[tau] - asymptotic.lower[tau])
    assert result.comparison.arm_ratio[tau] > 2.5
    assert ("tau", "asymmetry") in {(flag.parameter, flag.kind) for flag in result.flags}
    # The amplitude enters linearly: its interval stays about symmetric and is not flagged.
    assert 1 / 1.5 < result.comparison.arm_ratio[amplitude] < 1.5
    assert not [flag for flag in result.flags if flag.parameter == "amplitude"]
    # Reference: the skew is real. Fits by scipy.optimize.least_squares of 400 data sets simulated
    # from the fitted model with normal noise are skewed the same way (tau) and not (amplitude).
    simulated = simulated_arm_ratios(problem, result.best, asymptotic.residual_sd)
    assert simulated[tau] > 2.0 and 1 / 1.5 < simulated[amplitude] < 1.5


def test_t_interval_crossing_zero_for_a_positive_time_constant_is_flagged_and_failures_counted():
    problem = decay_problem(noise_seed=3)
    result = run_bootstrap(problem, best_fit(problem, [2.5, 7.0]), samples=2000, seed=1)
    kinds = {(flag.parameter, flag.kind) for flag in result.flags}
    assert result.asymptotic.lower[1] < 0 < result.bca.lower[1]
    assert ("tau", "bound") in kinds and ("tau", "asymmetry") in kinds
    # Some refits run away (tau → ∞ fits a straight line); they are counted, not used.
    counts = result.replicates.counts()
    assert 0 < result.replicates.failure_share < 0.2 and counts["best"] == result.used
    used = result.replicates.params[result.replicates.used]
    assert result.mean == pytest.approx(used.mean(axis=0)) and np.all(used[:, 1] > 0)
    assert any("left out of the intervals" in note for note in result.notes)


def test_fates_split_converged_refits_by_where_the_descent_from_the_best_fit_ends():
    x = np.linspace(0.0, 6.0, 30)
    problem = Problem(model=lambda x, a, b: a * np.sin(x + b), x=x, y=1.5 * np.sin(x + 0.3), names=("a", "b"))
    y = np.tile(problem.y + np.random.default_rng(8).normal(0.0, 0.1, x.size), (4, 1))
    descent = np.tile([1.5, 0.3], (4, 1))
    refits = np.array([[1.5 + 1e-9, 0.3 - 1e-9],       # the descent's point to solver precision
                       [-1.5, 0.3 + np.pi],             # mirror image: a·sin(x + b) = −a·sin(x + b + π)
                       [1.2, 0.3],                      # a different curve
                       [1.5, 0.3]])
    scale = np.array([0.05, 0.05])
    same = same_point(problem, refits, descent, scale, y=y)
    # Hand derivation: only the first and last are the descent's point; the mirror image gives
    # the same curve (sin(u + π) = −sin u) 60 standard errors away, the third another curve.
    assert same.tolist() == [True, False, False, True]
    outcome = np.array([Outcome.CONVERGED, Outcome.CONVERGED, Outcome.CONVERGED, Outcome.OSCILLATING])
    descent_outcome = np.array([Outcome.CONVERGED] * 4)
    fits = classify(refits, np.zeros(4), outcome, np.zeros(4, dtype=int), descent, descent_outcome, same)
    assert [FATES[k] for k in fits.fate] == ["best", "other", "other", "oscillating"]
    assert fits.other_reasons() == {"another_solution": 2, "descent_failed": 0}
    # Without a converged descent nothing confirms the solution: left out, with its reason.
    stalled = np.array([Outcome.STALLED] + [Outcome.CONVERGED] * 3)
    unconfirmed = classify(refits, np.zeros(4), outcome, np.zeros(4, dtype=int), descent, stalled, same)
    assert FATES[unconfirmed.fate[0]] == "other" and unconfirmed.other_reasons()["descent_failed"] == 1


# --------------------------------------------------------------------------- parallel, CLI, figures
def test_same_results_for_one_and_two_jobs():
    scenario = load_scenario(BUNDLED)
    # 2500 replicates make three chunks (and the jackknife a fourth), so both workers get some.
    results = [bootstrap_scenario(scenario, method="pairs", samples=2500, plan=ParallelPlan(jobs=jobs))
               for jobs in (1, 2)]
    assert np.array_equal(results[0].replicates.params, results[1].replicates.params)
    assert np.array_equal(results[0].jackknife.params, results[1].jackknife.params)
    assert np.array_equal(results[0].bca.lower, results[1].bca.lower, equal_nan=True)


@pytest.mark.slow
def test_same_results_on_a_dask_cluster():
    # The README sends the bootstrap to a Dask scheduler just like the sweep.
    distributed = pytest.importorskip("distributed")
    scenario = load_scenario(BUNDLED)
    local = bootstrap_scenario(scenario, samples=2500, plan=ParallelPlan(jobs=1))
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  dashboard_address=None) as cluster:
        remote = bootstrap_scenario(scenario, samples=2500,
                                    plan=ParallelPlan(backend="dask", scheduler=cluster.scheduler_address))
    assert np.array_equal(local.replicates.params, remote.replicates.params)
    assert np.array_equal(local.jackknife.params, remote.jackknife.params)


def test_step_factor_reaches_the_refits_and_the_result():
    problem = decay_problem(noise_seed=0)
    best = best_fit(problem, [2.5, 7.0])
    full = run_bootstrap(problem, best, samples=50, seed=2)
    damped = run_bootstrap(problem, best, samples=50, seed=2, refit=RefitSettings(step_factor=0.25))
    assert damped.refit.step_factor == 0.25
    assert np.median(damped.replicates.iterations) > np.median(full.replicates.iterations)


def test_best_fit_comes_from_any_step_factor_that_converges(tmp_path):
    # From this start Gauss-Newton with step factor 1 or 0.5 breaks down, 0.25 converges.
    # Reference: scipy.optimize.least_squares (method "lm") on the weighted residuals, from the
    # bundled scenario's own start (from the far start it runs off to tau < 0).
    toml = (BUNDLED / "scenario.toml").read_text()
    for old, new in (("start = 20.0", "start = 0.0"), ("start = 60.0", "start = 150.0"),
                     ("start = 100.0", "start = 500.0")):
        toml = toml.replace(old, new)
    folder = tmp_path / "far-start"
    folder.mkdir()
    (folder / "scenario.toml").write_text(toml)
    for name in ("model.py", "data.csv"):
        (folder / name).write_bytes((BUNDLED / name).read_bytes())
    scenario = load_scenario(folder)
    problem = scenario.problem
    plain = fit_batch(problem, np.tile(scenario.start, (2, 1)), [1.0, 0.5], tol=1e-8)
    assert not plain.converged.any()
    result = bootstrap_scenario(scenario, samples=50)
    reference = least_squares(lambda a: problem.sqrt_weights * (problem.predict(a[None, :])[0] - problem.y),
                              load_scenario(BUNDLED).start, method="lm", xtol=1e-12, ftol=1e-12)
    np.testing.assert_allclose(result.best, reference.x, rtol=1e-6)
    assert result.refit.step_factor == 1.0 and result.used > 40


def test_command_writes_json_and_figures(capsys, tmp_path):
    status = main(["bootstrap", str(BUNDLED), "--samples", "300", "--jobs", "1", "--resampling", "wild",
                   "-o", str(tmp_path), "--json"])
    report = json.loads(capsys.readouterr().out)
    # Exit 0: no flag, every refit used (the bundled errors are homoscedastic; seeded draws).
    assert status == 0 and report["flags"] == [] and report["method"] == "wild" and report["samples"] == 300
    assert [p["name"] for p in report["parameters"]] == ["T_env", "dT", "tau"]
    assert json.loads((tmp_path / "bootstrap.json").read_text())["used"] == report["used"]
    for name in ("bootstrap-histograms.png", "bootstrap-pairs.png"):
        assert (tmp_path / "figures" / name).stat().st_size > 10_000


@pytest.mark.parametrize("options, named", [(["--samples", "1"], "--samples"),
                                             (["--step-factors", "1.5"], "--step-factors"), (["--jobs", "0"], "jobs")])
def test_command_bad_values_exit_2_with_one_line(options, named, capsys):
    status = main(["bootstrap", str(BUNDLED), "--jobs", "1", *options])
    err = capsys.readouterr().err
    assert status == 2 and err.strip().count("\n") == 0 and named in err


def test_command_unknown_method_exits_2(capsys):
    with pytest.raises(SystemExit) as stop:
        main(["bootstrap", str(BUNDLED), "--resampling", "jackknife"])
    assert stop.value.code == 2 and "invalid choice" in capsys.readouterr().err


def test_figures_are_written_for_a_single_parameter_without_pairs(tmp_path):
    problem = Problem(model=lambda x, rate: np.exp(-rate * x), x=np.linspace(0, 3, 15),
                      y=np.exp(-0.8 * np.linspace(0, 3, 15)) + np.random.default_rng(0).normal(0, 0.02, 15),
                      names=("rate",))
    result = run_bootstrap(problem, best_fit(problem, [0.8]), samples=200, seed=1)
    paths = write_figures(result, tmp_path)
    assert [path.name for path in paths] == ["bootstrap-histograms.png"]
