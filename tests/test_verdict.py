"""Verdict rules on constructed stage results: every threshold, a value on each side of it.

The stage results are built with only the attributes the rules read (the end-to-end test in
test_run.py feeds them real ones). The numbers behind each status are computed here with numpy
from the constructed counts, never copied from the verdict.
"""
from __future__ import annotations

from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

from audit.errors import InputError
from audit.inputs.settings import VerdictSettings, read_section
from audit.report.verdict import (FAIL, NOT_RUN, PASS, WARN, bootstrap_failure_check, identifiability_checks,
                                  interval_check, judge, other_optima_check, residual_check, start_check, sweep_checks)
from audit.sweep.result import CATEGORIES

LIMITS = VerdictSettings()
STARTS = 1000


def sweep_with(counts: dict[str, int], *, ssr=(10.0,), inside=(True,), same_curve=(False,)) -> SimpleNamespace:
    """A one-method, one-step-factor sweep whose STARTS runs ended as ``counts`` says."""
    tally = np.array([counts.get(label, 0) for label in CATEGORIES], dtype=float)
    tally[0] = STARTS - tally[1:].sum()
    return SimpleNamespace(shares=(tally / STARTS)[None, None, :], recommended=(0, 0), methods=("gn",),
                           step_factors=np.array([0.5]), points=STARTS, next_step="",
                           solution_ssr=np.array(ssr), solution_inside=np.array(inside),
                           solution_same_curve=np.array(same_curve), best_ssr=ssr[0])


def status_of(lines, check: str) -> str:
    return next(line.status for line in lines if line.check == check)


@pytest.mark.parametrize("best_starts, expected", [
    # LIMITS.basin_share_warn = 0.5 and basin_share_fail = 0.1 (the defaults of the one table)
    (501, PASS), (499, WARN), (101, WARN), (99, FAIL)])
def test_basin_share_thresholds(best_starts, expected):
    lines = sweep_checks(sweep_with({"stalled": STARTS - best_starts}), LIMITS)
    line = lines[0]
    assert line.status == expected
    assert line.value == pytest.approx(best_starts / STARTS)  # share = count / starts (numpy-free arithmetic)


@pytest.mark.parametrize("category, check, warn, fail", [
    ("oscillating", "oscillation share", LIMITS.oscillation_share_warn, LIMITS.oscillation_share_fail),
    ("diverged", "divergence share", LIMITS.divergence_share_warn, LIMITS.divergence_share_fail)])
def test_oscillation_and_divergence_thresholds(category, check, warn, fail):
    for runs, expected in ((int(warn * STARTS), PASS), (int(warn * STARTS) + 1, WARN), (int(fail * STARTS), WARN),
                           (int(fail * STARTS) + 1, FAIL)):
        line = next(line for line in sweep_checks(sweep_with({category: runs}), LIMITS) if line.check == check)
        assert (line.status, line.value) == (expected, pytest.approx(runs / STARTS)), runs


def test_no_run_reaching_the_best_fails_with_the_sweeps_next_step():
    sweep = sweep_with({"diverged": STARTS})
    sweep.recommended, sweep.next_step = None, "run the derivative check first"
    assert sweep_checks(sweep, LIMITS)[0].status == FAIL
    assert "run the derivative check first" in sweep_checks(sweep, LIMITS)[0].reason


@pytest.mark.parametrize("rival_ssr, same_curve, inside, expected", [
    (10.0 * LIMITS.rival_ssr_ratio * 1.001, False, True, PASS),   # just beyond 1.1 × the best SSR
    (10.0 * LIMITS.rival_ssr_ratio * 0.999, False, True, WARN),   # within it: a rival optimum
    (10.0, True, True, PASS),                                     # an alias of the best curve is no rival
    (9.0, False, False, WARN)])                                   # lower SSR outside the ranges
def test_other_optima(rival_ssr, same_curve, inside, expected):
    sweep = sweep_with({}, ssr=(10.0, rival_ssr), inside=(True, inside), same_curve=(False, same_curve))
    line = other_optima_check(sweep, LIMITS)
    assert line.status == expected
    if expected == WARN:
        assert line.value == pytest.approx(rival_ssr / 10.0)


@pytest.mark.parametrize("failures, expected", [(25, PASS), (26, WARN), (100, WARN), (101, FAIL)])
def test_bootstrap_failure_thresholds(failures, expected):
    # 1000 refits; defaults 2.5 % (one tail of a 95 % interval) and 10 %
    used = np.arange(1000) >= failures
    replicates = SimpleNamespace(failure_share=1.0 - used.mean(), fate=np.zeros(1000))
    line = bootstrap_failure_check(SimpleNamespace(replicates=replicates), LIMITS)
    assert (line.status, line.value) == (expected, pytest.approx(failures / 1000))


def identifiability_with(condition=5.0, correlation=0.5, lower_status=("closed", "closed"),
                         structural=False, profile=(0.0, 2.0), asymptotic=(0.0, 2.0)) -> SimpleNamespace:
    lower_status = np.array(lower_status)
    upper_status = np.array(["closed", "closed"])
    profiles = SimpleNamespace(lower=np.array([profile[0]] * 2), upper=np.array([profile[1]] * 2),
                               lower_status=lower_status, upper_status=upper_status,
                               open=(lower_status != "closed") | (upper_status != "closed"))
    estimates = SimpleNamespace(correlation=np.array([[1.0, correlation], [correlation, 1.0]]),
                                lower=np.array([asymptotic[0]] * 2), upper=np.array([asymptotic[1]] * 2))
    return SimpleNamespace(names=("a", "b"), condition_scaled=condition, weak_text=["a − b is weak"],
                           estimates=estimates, profiles=profiles, structural=structural)


@pytest.mark.parametrize("condition, expected", [(29.9, PASS), (30.1, WARN), (999.0, WARN), (1001.0, FAIL)])
def test_condition_number_thresholds(condition, expected):
    # Defaults: 30 (Belsley, Kuh & Welsch 1980, "moderate to strong" dependence; value from memory), 1000
    lines = identifiability_checks(identifiability_with(condition=condition), LIMITS)
    assert status_of(lines, "condition number") == expected
    assert ("weak" in lines[0].reason) == (expected != PASS)  # the weak direction is named once it matters


@pytest.mark.parametrize("correlation, expected", [(0.949, PASS), (-0.951, WARN), (0.9989, WARN), (-0.9991, FAIL)])
def test_correlation_thresholds_on_the_size(correlation, expected):
    lines = identifiability_checks(identifiability_with(correlation=correlation), LIMITS)
    line = next(line for line in lines if line.check == "strongest correlation")
    assert (line.status, line.value) == (expected, pytest.approx(abs(correlation)))


def test_open_profile_fails_and_names_the_side():
    lines = identifiability_checks(identifiability_with(lower_status=("open_at_bound", "closed")), LIMITS)
    line = next(line for line in lines if line.check == "profile intervals closed")
    assert line.status == FAIL and "a: below open_at_bound" in line.reason and line.value == 1.0
    closed = identifiability_checks(identifiability_with(), LIMITS)
    assert status_of(closed, "profile intervals closed") == PASS


@pytest.mark.parametrize("profile_width, expected", [(2.9, PASS), (3.1, WARN), (5.9, WARN), (6.1, FAIL),
                                                     (2.0 / 1.49, PASS), (2.0 / 1.51, WARN)])
def test_interval_ratio_thresholds_both_ways(profile_width, expected):
    # Asymptotic width 2; defaults: a factor 1.5 warns and 3 fails, wider or narrower alike
    ident = identifiability_with(profile=(0.0, profile_width))
    line = interval_check(None, ident, LIMITS)
    ratio = profile_width / 2.0
    assert (line.status, line.value) == (expected, pytest.approx(max(ratio, 1 / ratio)))


def test_start_check_pass_warn_fail():
    def runs(excess):
        excess = np.array(excess)
        return SimpleNamespace(best_ssr=10.0, excess=excess, step_factors=np.array([1.0, 0.5]),
                               reaches_best=np.nan_to_num(excess, nan=np.inf) <= LIMITS.same_ssr_relative)
    assert start_check(runs([0.5e-6, 0.0])).status == PASS
    assert start_check(runs([2e-6, 0.0])).status == WARN
    assert start_check(runs([np.nan, 0.3])).status == FAIL


def check(status, p_value, name="runs"):
    return SimpleNamespace(name=name, status=status, p_value=p_value, finding=f"{name}: p = {p_value}")


def test_residual_check_takes_the_stage_status_and_the_smallest_p():
    levels = SimpleNamespace(warn=0.05, fail=0.001)
    flagged = SimpleNamespace(checks=(check("pass", 0.4), check("warn", 0.02, "serial")), status="warn", levels=levels)
    line = residual_check(flagged)
    assert (line.status, line.value) == (WARN, 0.02) and "serial: p = 0.02" in line.reason
    none = SimpleNamespace(checks=(check("not applicable", np.nan),), status="not applicable", levels=levels)
    assert residual_check(none).status == NOT_RUN


def test_overall_is_the_worst_and_not_run_counts_as_a_warning():
    everything_missing = judge(derivatives=None, start_runs=None, sweep=None, bootstrap=None, identifiability=None,
                               residuals=None, skipped={"sweep": "no ranges"}, thresholds=LIMITS)
    assert everything_missing.overall == WARN
    assert all(line.status == NOT_RUN for line in everything_missing.lines)
    assert next(line.reason for line in everything_missing.lines if line.check == "oscillation share") == "no ranges"
    failing = judge(derivatives=None, start_runs=None, sweep=sweep_with({"diverged": 999}), bootstrap=None,
                    identifiability=None, residuals=None, skipped={}, thresholds=LIMITS)
    assert failing.overall == FAIL


def test_verdict_section_checks_keys_values_and_order():
    with pytest.raises(InputError, match="unknown key 'condition_warning'.*did you mean 'condition_warn'"):
        read_section("verdict", {"condition_warning": 10.0}, "s.toml")
    with pytest.raises(InputError, match="condition_fail: must not be below condition_warn"):
        read_section("verdict", {"condition_warn": 100.0, "condition_fail": 50.0}, "s.toml")
    with pytest.raises(InputError, match="basin_share_warn: must lie between 0 and 1"):
        read_section("verdict", {"basin_share_warn": 1.5}, "s.toml")
    assert read_section("verdict", {"condition_warn": 2}, "s.toml").condition_warn == 2.0
    names = [name for name, _, meaning in VerdictSettings.table() if meaning]
    assert len(names) == len(VerdictSettings.table()) == 18


def test_readme_lists_every_threshold_with_its_default():
    # The README is the documentation the verdict's table promises; its rows must match the code.
    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    for name, default, _ in VerdictSettings.table():
        assert f"| `{name}` | {default:g} |" in readme, name
