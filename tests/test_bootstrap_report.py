"""What `fitaudit bootstrap` reports: its numbers from the replicates it lists, its flags, its
options, its table and its exit statuses, each against numpy, scipy or a textbook definition."""
from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest
from scenario_files import csv_text, data_columns, scenario_toml
from scipy.optimize import least_squares

from audit.cli import main
from audit.inputs.scenario import load_scenario
from audit.uncertainty.disagreement import compare_intervals
from audit.uncertainty.resampling import MAMMEN_HIGH, MAMMEN_LOW, build_scheme

BUNDLED = str(Path(__file__).resolve().parents[1] / "scenarios" / "probe-cooling")
SAMPLES = "300"


def bootstrap(capsys, tmp_path, *options: str) -> tuple[int, dict]:
    status = main(["bootstrap", BUNDLED, "--samples", SAMPLES, "--jobs", "1", "-o", str(tmp_path), "--json",
                   *options])
    return status, json.loads(capsys.readouterr().out)


def test_bootstrap_numbers_follow_from_the_listed_replicates(capsys, tmp_path):
    status, report = bootstrap(capsys, tmp_path / "residual")
    assert status == 0 and report["flags"] == [] and report["used"] == report["samples"] == 300
    replicates = np.array(report["replicates"]["params"])
    best = np.array(report["best"])
    # Definitions (Efron & Tibshirani 1993, ch. 6, 10, 13): bias = mean of the replicates minus
    # the estimate; standard error with divisor B − 1; percentile ends at the 2.5 % and 97.5 %
    # quantiles (numpy.quantile, linear interpolation).
    lower, upper = np.quantile(replicates, [0.025, 0.975], axis=0)
    for j, row in enumerate(report["parameters"]):
        boot = row["bootstrap"]
        assert boot["bias"] == pytest.approx(replicates[:, j].mean() - best[j], rel=1e-9)
        assert boot["std_error"] == pytest.approx(replicates[:, j].std(ddof=1), rel=1e-9)
        assert boot["percentile"] == pytest.approx([lower[j], upper[j]], rel=1e-12)
        # Width ratio: the compared interval (BCa here) over the t interval's width.
        width = (boot["bca"][1] - boot["bca"][0]) / (row["asymptotic"]["upper"] - row["asymptotic"]["lower"])
        assert row["width_ratio"] == pytest.approx(width, rel=1e-12)


def test_the_table_prints_the_json_numbers(capsys, tmp_path):
    _, report = bootstrap(capsys, tmp_path)
    assert main(["bootstrap", BUNDLED, "--samples", SAMPLES, "--jobs", "1", "-o", str(tmp_path)]) == 0
    text = capsys.readouterr().out
    assert "residual bootstrap: 300 of 300 refits used" in text
    lines = text.splitlines()
    for row in report["parameters"]:
        # The first table: estimate, standard errors, bias; the intervals table: a row per
        # interval (t, percentile, BCa), the width ratio on the row of the interval compared.
        spread, interval = [k for k, line in enumerate(lines) if re.match(rf"\W*{row['name']}\s+│", line)][:2]
        numbers = [[float(cell) for cell in re.findall(r"-?\d+(?:\.\d+)?(?:e[+-]?\d+)?", line.split("│", 2)[-1])]
                   for line in lines[interval:interval + 3]]
        cells = [float(cell) for cell in re.findall(r"-?\d+(?:\.\d+)?(?:e[+-]?\d+)?", lines[spread])]
        boot = row["bootstrap"]
        printed = {"estimate": cells[0], "t error": cells[1], "boot error": cells[2], "bias": cells[3],
                   "percentile": numbers[1][:2], "width ratio": next(n[2] for n in numbers if len(n) == 3)}
        # Printed to 8, 4, 4 and 3 significant digits; the percentile ends to 8.
        assert printed["estimate"] == pytest.approx(row["estimate"], rel=1e-7)
        assert printed["t error"] == pytest.approx(row["asymptotic"]["std_error"], rel=1e-3)
        assert printed["boot error"] == pytest.approx(boot["std_error"], rel=1e-3)
        assert printed["bias"] == pytest.approx(boot["bias"], rel=1e-2)
        assert printed["percentile"] == pytest.approx(boot["percentile"], rel=1e-5)
        assert printed["width ratio"] == pytest.approx(row["width_ratio"], rel=1e-2)
    assert "bootstrap and linearised intervals agree for every parameter" in text


def test_width_and_bias_flags_at_their_documented_limits():
    # Limits: widths within a factor 1.5 agree (common practice, Monte Carlo error of a 95 %
    # interval at B = 2000); a bias below a quarter of the standard error is ignored (Efron &
    # Tibshirani 1993, ch. 10). Hand-made intervals around an estimate of 10 with a t interval [9, 11].
    names = ("inside", "wide", "narrow", "biased_up", "biased_down")
    estimate, t_lower, t_upper = np.full(5, 10.0), np.full(5, 9.0), np.full(5, 11.0)
    lower = np.array([9.1, 8.4, 9.6, 9.0, 9.0])     # widths 1.8, 3.2, 0.8, 2, 2 → ratios 0.9, 1.6, 0.4, 1, 1
    upper = np.array([10.9, 11.6, 10.4, 11.0, 11.0])
    bias = np.array([0.2, 0.0, 0.0, 0.3, -0.3])      # over a standard error of 1: 0.2 passes, ±0.3 not
    comparison = compare_intervals(names, estimate, t_lower, t_upper, (lower, upper), (lower, upper),
                                   np.ones(5), bias, np.full((10, 5), 10.0))
    flagged = {(flag.parameter, flag.kind): flag.reason for flag in comparison.flags}
    assert set(flagged) == {("wide", "width"), ("narrow", "width"), ("biased_up", "bias"), ("biased_down", "bias")}
    assert "1.60 times as wide" in flagged["wide", "width"] and "understates" in flagged["wide", "width"]
    assert "0.40 times as wide" in flagged["narrow", "width"] and "overstates" in flagged["narrow", "width"]
    assert "0.30 standard errors (above the estimate)" in flagged["biased_up", "bias"]
    assert "(below the estimate)" in flagged["biased_down", "bias"]


def test_leverage_adjusted_residuals_are_divided_by_sqrt_of_one_minus_the_hat_diagonal():
    problem = load_scenario(BUNDLED).problem
    found = least_squares(lambda a: problem.sqrt_weights * (problem.predict(a[None])[0] - problem.y),
                          [20.0, 60.0, 100.0], method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15)
    # Reference: leverages h = diag(J(JᵀJ)⁻¹Jᵀ) of scipy's weighted Jacobian (numpy.linalg), and
    # the adjusted residual r_i/sqrt(1 − h_i) (Davison & Hinkley 1997, §6.2.3), centred.
    hat = np.diag(found.jac @ np.linalg.inv(found.jac.T @ found.jac) @ found.jac.T)
    residuals = -found.fun          # scipy's residual is model − data; ours data − model
    weighted = residuals / np.sqrt(1 - hat)
    plain = build_scheme("residual", problem, found.x)
    adjusted = build_scheme("residual", problem, found.x, leverage_adjusted=True)
    np.testing.assert_allclose(adjusted.pool, weighted - weighted.mean(), rtol=1e-6, atol=1e-9)
    np.testing.assert_allclose(plain.pool, residuals - residuals.mean(), rtol=1e-6, atol=1e-9)
    assert hat.sum() == pytest.approx(3.0, rel=1e-9)   # trace of a hat matrix = number of parameters


def test_leverage_adjusted_and_wild_multiplier_options_reach_the_refits(capsys, tmp_path):
    _, plain = bootstrap(capsys, tmp_path / "plain")
    _, adjusted = bootstrap(capsys, tmp_path / "adjusted", "--leverage-adjusted")
    assert adjusted["leverage_adjusted"] and not plain["leverage_adjusted"]
    # The same draws of larger residuals (each divided by sqrt(1 − h), h > 0) spread the refits wider.
    for before, after in zip(plain["parameters"], adjusted["parameters"]):
        assert after["bootstrap"]["std_error"] > before["bootstrap"]["std_error"]
    _, signs = bootstrap(capsys, tmp_path / "signs", "--resampling", "wild")
    _, mammen = bootstrap(capsys, tmp_path / "mammen", "--resampling", "wild", "--wild-weights", "mammen")
    assert (signs["wild_multipliers"], mammen["wild_multipliers"]) == ("rademacher", "mammen")
    problem = load_scenario(BUNDLED).problem
    best = np.array(mammen["best"])
    scheme = build_scheme("wild", problem, best, wild_multipliers="mammen")
    multipliers = (scheme.draw(np.random.default_rng(0), 50).y - scheme.fitted) / scheme.residuals
    # Reference: Mammen's two points (1 ∓ √5)/2 (Mammen 1993; value from memory).
    np.testing.assert_allclose(np.unique(np.round(multipliers, 9)), [(1 - 5**0.5) / 2, (1 + 5**0.5) / 2])
    assert (MAMMEN_LOW, MAMMEN_HIGH) == pytest.approx(((1 - 5**0.5) / 2, (1 + 5**0.5) / 2))
    assert signs["parameters"][0]["bootstrap"]["std_error"] != mammen["parameters"][0]["bootstrap"]["std_error"]


def test_exit_status_1_when_a_flag_is_raised(write_scenario, capsys, tmp_path):
    # Decay seen over less than one time constant with heavy noise (tests/test_bootstrap.py,
    # noise seed 3): the t interval of tau crosses zero while every refit keeps it positive.
    rng = np.random.default_rng(3)
    x = np.linspace(0.5, 6.0, 25)
    y = 2.5 * np.exp(-x / 7.0) + rng.normal(0.0, 0.6, x.size)
    folder = write_scenario(
        scenario_toml(data=data_columns("x", "y"), model={"expression": "amplitude * exp(-x / tau)"},
                      parameters={"amplitude": {"start": 2.5, "range": [0.1, 10.0]},
                                  "tau": {"start": 7.0, "range": [0.5, 100.0]}}),
        data=csv_text("x,y", x, y))
    status = main(["bootstrap", str(folder), "--samples", SAMPLES, "--jobs", "1", "-o", str(tmp_path), "--json"])
    report = json.loads(capsys.readouterr().out)
    assert status == 1 and ("tau", "bound") in {(flag["parameter"], flag["kind"]) for flag in report["flags"]}
    assert main(["bootstrap", str(folder), "--samples", "1", "-o", str(tmp_path)]) == 2
