"""The verdict: a table of checks over the stage results, each pass / warn / fail / not run.

Every check is a pure function of the stages' result objects and the thresholds of
``inputs.settings.VerdictSettings`` (the one table of them: name, default, meaning; each can be
set in scenario.toml [verdict]). No check recomputes anything: it reads the numbers the stages
stored and says, in words, what the number behind its status is. A stage that did not run gives
its checks the status "not run" with the stage's reason. The overall line is the worst status;
a check that did not run makes it at least "warn", since the audit is then incomplete.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..inputs.settings import VerdictSettings
from ..jsonable import jsonable
from ..sweep.result import BEST, CATEGORIES

PASS, WARN, FAIL, NOT_RUN = "pass", "warn", "fail", "not run"
#: Order of severity for the overall line ("not run" counts as a warning there).
SEVERITY = {PASS: 0, NOT_RUN: 1, WARN: 1, FAIL: 2}


@dataclass(frozen=True)
class CheckLine:
    """One line of the verdict: what was checked, its status, why, and the number behind it."""

    check: str
    status: str
    reason: str
    value: float = float("nan")

    def to_dict(self) -> dict:
        return jsonable({"check": self.check, "status": self.status, "reason": self.reason, "value": self.value})


@dataclass(frozen=True)
class Verdict:
    """The table of checks and the thresholds they used."""

    lines: tuple[CheckLine, ...]
    thresholds: VerdictSettings

    @property
    def overall(self) -> str:
        """The worst status: fail, else warn (a warning or a check that did not run), else pass."""
        worst = max((SEVERITY[line.status] for line in self.lines), default=0)
        return (PASS, WARN, FAIL)[worst]

    @property
    def summary(self) -> str:
        """One line: the overall status and how many checks ended each way."""
        counts = {status: sum(line.status == status for line in self.lines) for status in (PASS, WARN, FAIL, NOT_RUN)}
        return f"overall: {self.overall} ({', '.join(f'{count} {status}' for status, count in counts.items())})"

    def to_dict(self) -> dict:
        return jsonable({"overall": self.overall, "summary": self.summary,
                         "checks": [line.to_dict() for line in self.lines],
                         "thresholds": {name: getattr(self.thresholds, name)
                                        for name, _, _ in VerdictSettings.table()}})


#: A value within this relative distance of a threshold counts as equal to it: shares reach the
#: verdict as 1 − used / total, so 25 failures in 1000 arrive as 0.025000000000000022.
ROUNDING = 1e-9


def grade_above(value: float, warn: float, fail: float) -> str:
    """fail when ``value`` exceeds ``fail``, warn when it exceeds ``warn``, else pass (equal passes)."""
    return FAIL if value > fail * (1 + ROUNDING) else WARN if value > warn * (1 + ROUNDING) else PASS


def grade_below(value: float, warn: float, fail: float) -> str:
    """fail when ``value`` is below ``fail``, warn when below ``warn``, else pass (equal passes)."""
    return FAIL if value < fail * (1 - ROUNDING) else WARN if value < warn * (1 - ROUNDING) else PASS


def judge(*, derivatives, start_runs, sweep, bootstrap, identifiability, residuals,
          skipped: dict[str, str], thresholds: VerdictSettings) -> Verdict:
    """The verdict over the stage results (None for a stage that did not run).

    Args:
        derivatives: ``DerivativeAudit``; start_runs: ``report.start_runs.StartRuns``;
        sweep: ``SweepResult``; bootstrap: ``BootstrapResult``; identifiability:
            ``Identifiability``; residuals: ``ResidualChecks``.
        skipped: stage name -> why it did not run and what to do (the stage names are
            "derivatives", "start", "sweep", "bootstrap", "identifiability", "residuals").
        thresholds: the scenario's [verdict] settings.
    """
    def missing(stage: str, *checks: str) -> list[CheckLine]:
        reason = skipped.get(stage, f"the {stage} stage did not run")
        return [CheckLine(check, NOT_RUN, reason) for check in checks]

    lines: list[CheckLine] = []
    lines += [derivative_check(derivatives)] if derivatives is not None else missing(
        "derivatives", "derivatives agree")
    lines += [start_check(start_runs)] if start_runs is not None else missing(
        "start", "the scenario's start reaches the best fit")
    lines += sweep_checks(sweep, thresholds) if sweep is not None else missing(
        "sweep", "share of starts reaching the best fit", "oscillation share", "divergence share", "other optima")
    lines += [bootstrap_failure_check(bootstrap, thresholds)] if bootstrap is not None else missing(
        "bootstrap", "bootstrap refits that fail")
    lines += [interval_check(bootstrap, identifiability, thresholds)] if bootstrap is not None or \
        identifiability is not None else missing("identifiability", "asymptotic, bootstrap and profile intervals")
    lines += identifiability_checks(identifiability, thresholds) if identifiability is not None else missing(
        "identifiability", "condition number", "strongest correlation", "profile intervals closed")
    lines += [residual_check(residuals)] if residuals is not None else missing("residuals", "residual checks")
    return Verdict(lines=tuple(lines), thresholds=thresholds)


def derivative_check(audit) -> CheckLine:
    """Hand-derived derivatives against the reference; without them, the engine's central differences."""
    name = "derivatives agree"
    if audit.jacobian_source == "none":
        worst = float(np.nanmax(audit.max_central_error))
        if audit.central_poor.any():
            poor = ", ".join(audit.names[j] for j in np.flatnonzero(audit.central_poor))
            return CheckLine(name, FAIL, f"no hand-derived Jacobian; the central differences for {poor} are off by "
                                         f"up to {worst:.2g} of the column's size: too poor to fit with", worst)
        return CheckLine(name, PASS, f"no hand-derived Jacobian; the central differences are within {worst:.2g} "
                                     "of the reference", worst)
    wrong = audit.wrong_columns
    if wrong:
        worst = float(np.nanmax(audit.max_relative_error[wrong]))
        told = "; ".join(f"∂f/∂{audit.names[j]}: {audit.diagnoses[j].headline} ({audit.diagnoses[j].summary})"
                         for j in wrong)
        return CheckLine(name, FAIL, f"the hand-derived Jacobian is wrong: {told}; see the derivative table", worst)
    worst = float(np.nanmax(audit.max_relative_error)) if np.isfinite(audit.max_relative_error).any() else np.nan
    return CheckLine(name, PASS, f"every hand-derived column agrees with the {audit.reference} reference "
                                 f"(largest relative difference {worst:.2g})", worst)


def start_check(runs) -> CheckLine:
    """Whether the scenario's start reaches the best fit with its first step factor, or only with a smaller one."""
    name = "the scenario's start reaches the best fit"
    if not np.isfinite(runs.best_ssr):
        return CheckLine(name, NOT_RUN, "no best fit is known to compare with")
    first = float(runs.excess[0])
    reached = runs.reaches_best
    if reached[0]:
        return CheckLine(name, PASS, f"with step factor {runs.step_factors[0]:g} the fit from the start ends at the "
                                     f"best fit's SSR (relative excess {first:.2g})", first)
    if reached.any():
        others = ", ".join(f"{factor:g}" for factor in runs.step_factors[reached])
        return CheckLine(name, WARN, f"step factor {runs.step_factors[0]:g} does not reach the best fit from the "
                                     f"start; step factor {others} does", first)
    return CheckLine(name, FAIL, f"no step factor ({', '.join(f'{a:g}' for a in runs.step_factors)}) takes the "
                                 "scenario's start to the best fit: change the start (see the safe starting region)",
                     first)


def _setting(sweep) -> tuple[int, int, str]:
    """The recommended (method, step factor) of a sweep, or its first, and how to name it."""
    m, f = sweep.recommended if sweep.recommended is not None else (0, 0)
    label = f"{sweep.methods[m]}, step factor {sweep.step_factors[f]:g}"
    return m, f, label + (" (recommended)" if sweep.recommended is not None else "")


def sweep_checks(sweep, limits: VerdictSettings) -> list[CheckLine]:
    """Basin share, oscillation and divergence shares at the recommended setting; other optima."""
    m, f, setting = _setting(sweep)
    share = float(sweep.shares[m, f, BEST])
    if sweep.recommended is None:
        basin = CheckLine("share of starts reaching the best fit", FAIL,
                          "no run of the sweep reached the best fit" + (f": {sweep.next_step}" if sweep.next_step
                                                                        else ""), share)
    else:
        status = grade_below(share, limits.basin_share_warn, limits.basin_share_fail)
        basin = CheckLine("share of starts reaching the best fit", status,
                          f"{share:.1%} of {sweep.points} starts reach it with {setting} (warn below "
                          f"{limits.basin_share_warn:.0%}, fail below {limits.basin_share_fail:.0%})", share)
    lines = [basin]
    for label, category, warn, fail in (
            ("oscillation share", "oscillating", limits.oscillation_share_warn, limits.oscillation_share_fail),
            ("divergence share", "diverged", limits.divergence_share_warn, limits.divergence_share_fail)):
        value = float(sweep.shares[m, f, CATEGORIES.index(category)])
        lines.append(CheckLine(label, grade_above(value, warn, fail),
                               f"{value:.1%} of the starts end {category} with {setting} (warn above {warn:.0%}, "
                               f"fail above {fail:.0%})", value))
    lines.append(other_optima_check(sweep, limits))
    return lines


def other_optima_check(sweep, limits: VerdictSettings) -> CheckLine:
    """Distinct optima other than the best fit's curve: how close their SSRs come to the best."""
    name = "other optima"
    if not len(sweep.solution_ssr):
        return CheckLine(name, NOT_RUN, "the sweep found no converged solution")
    rivals = np.flatnonzero(~np.asarray(sweep.solution_same_curve, dtype=bool))
    rivals = rivals[rivals > 0]
    lower_outside = [s for s in rivals if not sweep.solution_inside[s] and sweep.solution_ssr[s] < sweep.best_ssr]
    if lower_outside:
        ratio = float(sweep.solution_ssr[lower_outside[0]] / sweep.best_ssr)
        return CheckLine(name, WARN, f"a solution outside the parameter ranges has a lower SSR ({ratio:.4g} × the "
                                     "best): a range may be too narrow", ratio)
    if not len(rivals):
        return CheckLine(name, PASS, "the sweep found no other optimum")
    ratios = sweep.solution_ssr[rivals] / sweep.best_ssr
    closest = float(np.min(ratios))
    status = WARN if closest <= limits.rival_ssr_ratio else PASS
    return CheckLine(name, status, f"{len(rivals)} other optimum(s); the closest has {closest:.4g} × the best SSR "
                                   f"(warn at or below {limits.rival_ssr_ratio:g} ×)", closest)


def bootstrap_failure_check(bootstrap, limits: VerdictSettings) -> CheckLine:
    """Share of bootstrap refits left out of the intervals."""
    share = float(bootstrap.replicates.failure_share)
    status = grade_above(share, limits.bootstrap_failure_warn, limits.bootstrap_failure_fail)
    return CheckLine("bootstrap refits that fail", status,
                     f"{share:.1%} of {len(bootstrap.replicates.fate)} refits did not reach the best fit's solution "
                     f"(warn above {limits.bootstrap_failure_warn:.1%}, "
                     f"fail above {limits.bootstrap_failure_fail:.0%})",
                     share)


def interval_check(bootstrap, identifiability, limits: VerdictSettings) -> CheckLine:
    """Bootstrap and profile interval widths against the asymptotic (t) interval, the worst factor."""
    name = "asymptotic, bootstrap and profile intervals"
    factors = []  # (factor ≥ 1, parameter, which interval, ratio)
    if bootstrap is not None:
        factors += [(r, n, "bootstrap") for n, r in zip(bootstrap.names, bootstrap.comparison.width_ratio)]
    if identifiability is not None:
        profiles, estimates = identifiability.profiles, identifiability.estimates
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = (profiles.upper - profiles.lower) / (estimates.upper - estimates.lower)
        factors += [(r, n, "profile") for n, r in zip(identifiability.names, ratio)]
    finite = [(max(r, 1 / r), r, n, kind) for r, n, kind in factors if np.isfinite(r) and r > 0]
    if not finite:
        return CheckLine(name, NOT_RUN, "no interval could be compared with the asymptotic one")
    worst, ratio, parameter, kind = max(finite)
    status = grade_above(worst, limits.interval_ratio_warn, limits.interval_ratio_fail)
    return CheckLine(name, status, f"widest disagreement: {parameter}'s {kind} interval is {ratio:.3g} × as wide as "
                                   f"the asymptotic one (warn beyond a factor {limits.interval_ratio_warn:g}, fail "
                                   f"beyond {limits.interval_ratio_fail:g})", worst)


def identifiability_checks(result, limits: VerdictSettings) -> list[CheckLine]:
    """Condition number of the scaled Jacobian, the strongest correlation, closed profile intervals."""
    condition = float(result.condition_scaled)
    weak = f"; weakest direction: {result.weak_text[0]}" if len(result.weak_text) else ""
    status = grade_above(condition, limits.condition_warn, limits.condition_fail)
    lines = [CheckLine("condition number", status,
                       f"{condition:.4g} for the Jacobian with unit-length columns "
                       f"(warn above {limits.condition_warn:g}, fail above {limits.condition_fail:g})"
                       + (weak if status != PASS else ""), condition)]
    correlation = np.array(result.estimates.correlation, dtype=float)
    n = len(correlation)
    if n < 2 or not np.isfinite(correlation).all():
        lines.append(CheckLine("strongest correlation", NOT_RUN if n < 2 else FAIL,
                               "one parameter: no pair" if n < 2 else "the correlation matrix is undefined: the "
                               "Jacobian lost rank" + weak))
    else:
        rows, columns = np.triu_indices(n, 1)
        k = int(np.argmax(np.abs(correlation[rows, columns])))
        i, j = rows[k], columns[k]
        r = float(correlation[i, j])
        lines.append(CheckLine("strongest correlation", grade_above(abs(r), limits.correlation_warn,
                                                                     limits.correlation_fail),
                               f"{result.names[i]} and {result.names[j]}: r = {r:+.4f} (warn above "
                               f"{limits.correlation_warn:g}, fail above {limits.correlation_fail:g} in size)", abs(r)))
    profiles = result.profiles
    open_names = [name for name, is_open in zip(result.names, profiles.open) if is_open]
    if result.structural:
        lines.append(CheckLine("profile intervals closed", FAIL, "structurally non-identifiable" + weak,
                               float(len(open_names))))
    elif open_names:
        sides = "; ".join(f"{name}: below {low}, above {high}" for name, low, high, is_open in zip(
            result.names, profiles.lower_status, profiles.upper_status, profiles.open) if is_open)
        lines.append(CheckLine("profile intervals closed", FAIL, f"the data do not bound {', '.join(open_names)} "
                               f"({sides}){weak}", float(len(open_names))))
    else:
        lines.append(CheckLine("profile intervals closed", PASS, "every profile rises above the threshold on both "
                               "sides within the ranges", 0.0))
    return lines


def residual_check(result) -> CheckLine:
    """The worst residual check (runs, lag-1, normality, constant spread) and its p-value."""
    ran = [check for check in result.checks if check.status != "not applicable"]
    if not ran:
        return CheckLine("residual checks", NOT_RUN, result.checks[0].finding)
    worst = min(ran, key=lambda check: (check.p_value if np.isfinite(check.p_value) else np.inf))
    flagged = [check.finding for check in ran if check.status in (WARN, FAIL)]
    reason = "; ".join(flagged) if flagged else f"{len(ran)} checks pass; smallest p-value {worst.p_value:.3g} " \
                                                f"({worst.name})"
    return CheckLine("residual checks", result.status, reason + f" (levels {result.levels.warn:g} and "
                                                                f"{result.levels.fail:g})", float(worst.p_value))
