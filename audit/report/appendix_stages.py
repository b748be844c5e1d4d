"""The appendix sections of the stages: derivative check, sweep, bootstrap, identifiability, residuals.

Each reads one stage result from an ``AuditResult`` and the figures drawn from it; a stage that
did not run gets its reason instead.
"""
from __future__ import annotations

import numpy as np

from ..derivatives.check import SOURCES
from ..sweep.result import CATEGORIES
from .document import Figure, Paragraph, Section, Table
from .format import interval, not_run, number, share


def derivative_section(result, figures: tuple[Figure, ...]) -> Section:
    title, anchor = "Derivative check", "derivatives"
    audit = result.derivatives
    if audit is None:
        return Section(title, anchor, (not_run(result.skipped.get("derivatives", "")),))
    rows = tuple((name, verdict, number(error, 3), number(central, 3), diagnosis.headline)
                 for name, verdict, error, central, diagnosis in zip(
                     audit.names, audit.verdict, audit.max_relative_error, audit.max_central_error, audit.diagnoses))
    blocks = [Paragraph(f"Derivatives: {SOURCES[audit.jacobian_source]}; compared with the {audit.reference} "
                        f"reference at {len(audit.labels)} points ({', '.join(audit.labels[:3])}, ...)."),
              Table("Each partial derivative against the reference", ("parameter", "verdict",
                    "largest relative difference", "central differences' difference", "diagnosis"), rows,
                    notes=("Relative to the largest |∂f/∂a| of the column at each point.",))]
    blocks += [Paragraph(f"∂f/∂{audit.names[j]}: {audit.diagnoses[j].summary}", "caution")
               for j in audit.wrong_columns]
    blocks += [Paragraph(note, "note") for note in audit.notes]
    return Section(title, anchor, tuple(blocks) + figures)


def sweep_section(result, figures: tuple[Figure, ...]) -> Section:
    title, anchor = "Multistart sweep", "sweep"
    sweep = result.sweep
    if sweep is None:
        return Section(title, anchor, (not_run(result.skipped.get("sweep", "")),))
    rows = tuple((method, f"{factor:g}", *(share(sweep.shares[m, f, k]) for k in range(len(CATEGORIES))),
                  number(sweep.iterations_median[m, f, 0], 3))
                 for m, method in enumerate(sweep.methods) for f, factor in enumerate(sweep.step_factors))
    header = ("solver", "step factor", *(label.replace("_", " ") for label in CATEGORIES), "median iterations")
    solutions = tuple((str(s + 1), number(ssr, 8), ", ".join(f"{name} = {number(value)}" for name, value in
                                                             zip(sweep.names, params)),
                       "yes" if inside else "no", sweep.solution_equivalence[s] or "—")
                      for s, (ssr, params, inside) in enumerate(zip(sweep.solution_ssr, sweep.solution_params,
                                                                    sweep.solution_inside)))
    blocks = [Paragraph(f"{sweep.points} starts ({sweep.design} design, seed {sweep.seed}) with every step factor; "
                        "each run sorted by how it ended."),
              Table("Share of starts ending each way, per step factor", header, rows,
                    notes=("best: converged to the lowest SSR inside the ranges; other: another solution.",)),
              Table("Distinct solutions, lowest SSR first", ("#", "SSR", "parameters", "inside the ranges",
                                                              "same curve as the best"), solutions)]
    blocks += [Paragraph(warning, "note") for warning in sweep.warnings]
    return Section(title, anchor, tuple(blocks) + figures)


def bootstrap_section(result, figures: tuple[Figure, ...]) -> Section:
    title, anchor = "Bootstrap", "bootstrap"
    boot = result.bootstrap
    if boot is None:
        return Section(title, anchor, (not_run(result.skipped.get("bootstrap", "")),))
    rows = tuple((name, number(boot.best[j]), number(boot.std_error[j], 3), number(boot.bias[j], 3),
                  interval(boot.percentile_lower[j], boot.percentile_upper[j]),
                  interval(boot.bca.lower[j], boot.bca.upper[j]), number(boot.comparison.width_ratio[j], 3))
                 for j, name in enumerate(boot.names))
    counts = ", ".join(f"{count} {label.replace('_', ' ')}" for label, count in boot.replicates.counts().items()
                       if count)
    blocks = [Paragraph(f"{boot.samples} replicates ({boot.method} resampling, seed {boot.seed}), each refitted from "
                        f"the best fit; {share(boot.replicates.failure_share)} left out ({counts})."),
              Table(f"Bootstrap statistics at {boot.confidence:.0%}", ("parameter", "estimate", "standard error",
                    "bias", "percentile interval", "BCa interval", "width / asymptotic width"), rows)]
    blocks += [Paragraph(flag.reason, "caution") for flag in boot.flags]
    blocks += [Paragraph(note, "note") for note in boot.notes]
    return Section(title, anchor, tuple(blocks) + figures)


def identifiability_section(result, figures: tuple[Figure, ...]) -> Section:
    title, anchor = "Identifiability", "identifiability"
    ident = result.identifiability
    if ident is None:
        return Section(title, anchor, (not_run(result.skipped.get("identifiability", "")),))
    profiles = ident.profiles
    rows = tuple((name, interval(profiles.lower[j], profiles.upper[j]), profiles.lower_status[j].replace("_", " "),
                  profiles.upper_status[j].replace("_", " ")) for j, name in enumerate(ident.names))
    blocks = [Paragraph("Condition number of the Jacobian with unit-length columns: "
                        f"{number(ident.condition_scaled, 4)} (raw: {number(ident.condition_raw, 4)})."),
              Table(f"Profile intervals at {profiles.confidence:.0%}", ("parameter", "profile interval", "lower end",
                                                                        "upper end"), rows)]
    correlation = np.asarray(ident.estimates.correlation)
    names = ident.names
    blocks.append(Table("Correlations of the estimates", ("", *names),
                        tuple((names[i], *(number(correlation[i, j], 3) for j in range(len(names))))
                              for i in range(len(names)))))
    blocks += [Paragraph(finding["text"], "caution" if finding["level"] == "flag" else "note")
               for finding in ident.findings]
    return Section(title, anchor, tuple(blocks) + figures)


def residual_section(result, figures: tuple[Figure, ...]) -> Section:
    title, anchor = "Residual checks", "residuals"
    checks = result.residuals
    if checks is None:
        return Section(title, anchor, (not_run(result.skipped.get("residuals", "")),))
    rows = tuple((check.name.replace("_", " "), number(check.statistic, 4), number(check.p_value, 3),
                  "not run" if check.status == "not applicable" else check.status, check.finding)
                 for check in checks.checks)
    blocks = (Table("Tests on the weighted residuals", ("check", "statistic", "p-value", "status", "finding"), rows,
                    status_column=3, notes=(f"p below {checks.levels.warn:g} warns, below {checks.levels.fail:g} "
                                            "fails.",)),
              Paragraph(f"Bootstrap scheme these residuals suit: {checks.scheme} ({checks.scheme_reason})."))
    return Section(title, anchor, blocks + figures)
