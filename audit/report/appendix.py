"""The appendix of an audit as a ``Document``: sections in reading order, every number from a result.

Nothing here computes: each cell is read from the stage results (through ``AuditResult``) and
formatted. The writers (HTML, Markdown, LaTeX) render the document; strings stay plain text.
"""
from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path

import numpy as np

from ..engine.outcomes import outcome_labels
from .appendix_stages import (bootstrap_section, derivative_section, identifiability_section, residual_section,
                              sweep_section)
from .document import Document, Figure, Paragraph, Preformatted, Section, Table
from .format import interval, not_run, number

#: The caution every appendix ends with, in every format.
CAUTIONS = (
    "This audit is numerical. It shows whether the least-squares fit is found reliably (from many starts "
    "and step factors), whether the hand-derived derivatives are right, how uncertain the parameters are "
    "under the model's own assumptions, and whether the data determine them. It does not show that the model "
    "describes the physics of what was measured, nor that the data are accurate, representative or free of "
    "systematic error: a fit can pass every check here and still be wrong.",
    "Where the fitted values feed a decision that can hurt someone (a structural load rating, a medical dose, "
    "a safety margin or any safety-critical setting), follow the codes and standards that govern that "
    "decision, and have the fit and its use reviewed by a qualified, licensed professional. This appendix "
    "supports that review; it does not replace it.",
)

#: Caption of each figure, by its file stem's start (the first that matches).
CAPTIONS = (
    ("fit-band", "The data with the fitted curve and its pointwise confidence band (delta method on the "
                 "asymptotic covariance); below, the data minus the curve, with the band around zero."),
    ("derivatives-columns", "Hand-derived partial derivatives against the reference, column by column."),
    ("derivatives-points", "Where the derivatives were compared."),
    ("sweep-outcomes", "How the sweep's runs ended, per step factor."),
    ("sweep-basins", "Basin map: which solution each start reaches, per step factor."),
    ("sweep-iterations", "Iterations each start needed, per step factor."),
    ("sweep-cases-map", "Example paths of failed runs drawn on the basin map."),
    ("sweep-cases", "Example paths of failed runs (oscillating, diverging, stalling)."),
    ("bootstrap-histograms", "Bootstrap estimates of each parameter with the intervals."),
    ("bootstrap-pairs", "Bootstrap estimates of parameter pairs with the asymptotic confidence region."),
    ("identifiability-profiles", "Profile of each parameter's residual sum of squares with its interval."),
    ("identifiability-correlation", "Correlations of the parameter estimates."),
    ("identifiability-weak-directions", "The parameter combinations the data determine least."),
    ("identifiability-collinearity", "Collinearity indices of parameter subsets."),
    ("residuals", "Weighted residuals against x and against the fitted values, and a normal quantile plot."),
)


def figures_by_stem(paths: Iterable[Path]) -> dict[str, Figure]:
    """PNG (and PDF where written) of each figure, keyed by file stem, with its caption."""
    pngs = {path.stem: path for path in paths if path.suffix == ".png"}
    pdfs = {path.stem: path for path in paths if path.suffix == ".pdf"}
    return {stem: Figure(png=png, caption=next((text for start, text in CAPTIONS if stem.startswith(start)), stem),
                         pdf=pdfs.get(stem)) for stem, png in pngs.items()}


def pick(figures: dict[str, Figure], prefix: str) -> tuple[Figure, ...]:
    """The figures whose stem starts with ``prefix``, in the order of CAPTIONS, then by name."""
    def place(stem: str) -> tuple[int, str]:
        return next((k for k, (start, _) in enumerate(CAPTIONS) if stem.startswith(start)), len(CAPTIONS)), stem

    return tuple(figures[stem] for stem in sorted(figures, key=place) if stem.startswith(prefix))


def build_appendix(result, figure_paths: Iterable[Path]) -> Document:
    """The appendix of ``result`` (an ``AuditResult``), given the figure files written for it."""
    figures = figures_by_stem(figure_paths)
    scenario = result.scenario
    sections = (
        _scenario_section(scenario),
        _model_section(scenario),
        Section("Data, fitted curve and confidence band", "fit",
                pick(figures, "fit-band") or (not_run(result.skipped.get("asymptotic") or result.skipped.get(
                    "best fit", "no fit")),)),
        _estimates_section(result),
        _verdict_section(result.verdict),
        derivative_section(result, pick(figures, "derivatives")),
        sweep_section(result, pick(figures, "sweep")),
        bootstrap_section(result, pick(figures, "bootstrap")),
        identifiability_section(result, pick(figures, "identifiability")),
        residual_section(result, pick(figures, "residuals")),
        _recommendation_section(result),
        _provenance_section(result.provenance),
        Section("What this audit does and does not show", "cautions",
                tuple(Paragraph(text, "caution") for text in CAUTIONS)),
    )
    mode = "quick first look (small designs)" if result.quick else "full audit"
    return Document(title=f"Robustness audit: {scenario.title}",
                    subtitle=f"{mode}; {result.verdict.summary}", sections=sections)


def _scenario_section(scenario) -> Section:
    rows = (("scenario folder", str(scenario.path)), ("data file", str(scenario.data_path)),
            ("observations", str(scenario.problem.n_obs)), ("predictor(s)", ", ".join(scenario.x_names)),
            ("response", scenario.y_name),
            ("standard deviations", scenario.sigma_name or "none given: every point weighs the same"))
    blocks = [Paragraph(scenario.title)] + ([Paragraph(scenario.description.strip())] if scenario.description else [])
    blocks.append(Table("What was fitted to what", ("item", "value"), rows))
    blocks += [Paragraph(f"warning: {warning}", "note") for warning in scenario.warnings]
    return Section("The scenario and its data", "scenario", tuple(blocks))


def _model_section(scenario) -> Section:
    problem = scenario.problem
    blocks = []
    if problem.formula:
        blocks.append(Preformatted(f"{scenario.y_name} = {problem.formula}"))
    if scenario.model_path is not None:
        blocks.append(Paragraph(f"Model file: {scenario.model_path}; hand-derived Jacobian: "
                                f"{'yes' if problem.jacobian is not None else 'no (central differences)'}."))
    rows = tuple((p.name, number(p.start), interval(p.lower, p.upper), p.axis) for p in scenario.parameters)
    blocks.append(Table("Parameters: the scenario's start and the range searched", ("parameter", "start", "range",
                                                                                    "axis"), rows))
    solver = scenario.solver
    blocks.append(Paragraph(f"Solver: {solver.method}, step factors {', '.join(f'{a:g}' for a in solver.step_factors)}"
                            f", tolerance {solver.tolerance:g}, at most {solver.max_iterations} iterations."))
    return Section("The model and its parameters", "model", tuple(blocks))


def _estimates_section(result) -> Section:
    best, asymptotic = result.best_fit, result.asymptotic
    if best is None or asymptotic is None:
        return Section("Estimates and intervals", "estimates",
                       (not_run(result.skipped.get("best fit") or result.skipped.get("asymptotic", "")),))
    bootstrap, identifiability = result.bootstrap, result.identifiability
    rows = []
    for j, name in enumerate(best.names):
        boot = "—" if bootstrap is None else interval(bootstrap.comparison.lower[j], bootstrap.comparison.upper[j])
        profile = "—" if identifiability is None else interval(identifiability.profiles.lower[j],
                                                               identifiability.profiles.upper[j])
        rows.append((name, number(best.params[j], 8), number(asymptotic.std_errors[j], 3),
                     interval(asymptotic.lower[j], asymptotic.upper[j]), boot, profile))
    level = f"{asymptotic.confidence:.0%}"
    blocks = [Paragraph(best.summary),
              Table(f"Estimates with {level} intervals side by side", ("parameter", "estimate", "standard error",
                    "asymptotic (t)", "bootstrap", "profile"), tuple(rows),
                    notes=(f"SSR {number(best.ssr, 8)}, {asymptotic.dof} degrees of freedom; a dash: the stage did "
                           "not run or the interval stays open.",))]
    if best.warning:
        blocks.append(Paragraph(best.warning, "caution"))
    if result.statement is not None:
        statement = result.statement
        blocks.append(Paragraph("The same uncertainty in the form of the GUM (JCGM 100:2008): standard uncertainty u "
                                "from the asymptotic standard error, coverage factor "
                                f"k = {statement.coverage_factor:.4g} for p = {statement.coverage:.0%}, expanded "
                                "uncertainty U = k·u."))
        blocks.append(Preformatted("\n".join(statement.lines)))
    return Section("Estimates and intervals", "estimates", tuple(blocks))


def _verdict_section(verdict) -> Section:
    rows = tuple((line.check, line.status, number(line.value, 4), line.reason) for line in verdict.lines)
    return Section("Verdict", "verdict", (
        Paragraph(verdict.summary, "plain" if verdict.overall == "pass" else "caution"),
        Table("Checks, each with its status, the number behind it and the reason", ("check", "status", "number",
              "reason"), rows, status_column=1,
              notes=("Thresholds: scenario.toml [verdict]; the README lists them with their defaults.",)),
    ))


def _recommendation_section(result) -> Section:
    blocks = []
    sweep = result.sweep
    if sweep is not None and sweep.recommended is not None:
        m, f = sweep.recommended
        blocks.append(Paragraph(f"Recommended: {sweep.methods[m]} with step factor {sweep.step_factors[f]:g}: "
                                f"{sweep.recommendation_reason}."))
        if np.isfinite(sweep.region_radius[m, f]):
            rows = tuple((name, interval(low, high), "yes" if inside else "no") for name, low, high, inside in zip(
                sweep.names, sweep.region_lower[m, f], sweep.region_upper[m, f], sweep.start_inside_parameter[m, f]))
            blocks.append(Table(f"Safe starting region: starts inside reached the best fit in "
                                f"{sweep.region_share[m, f]:.1%} of {sweep.region_starts[m, f]} cases",
                                ("parameter", "safe range", "scenario's start inside"), rows))
    elif sweep is not None:
        blocks.append(Paragraph(sweep.next_step or "no run of the sweep reached the best fit", "caution"))
    else:
        blocks.append(not_run(result.skipped.get("sweep", "")))
    runs = result.start_runs
    rows = tuple((f"{factor:g}", label, str(iterations), number(ssr, 8), "yes" if reached else "no")
                 for factor, label, iterations, ssr, reached in zip(
                     runs.step_factors, outcome_labels(runs.outcome), runs.iterations, runs.ssr, runs.reaches_best))
    blocks.append(Table("Fits from the scenario's own start", ("step factor", "ended", "iterations", "SSR",
                                                               "reaches the best fit"), rows))
    return Section("Recommendations", "recommendations", tuple(blocks))


def _provenance_section(provenance: dict) -> Section:
    rows = [("fitaudit", provenance["fitaudit"]), ("Python", provenance["python"]), ("numpy", provenance["numpy"]),
            ("scipy", provenance["scipy"]), ("date (UTC)", provenance["date"])]
    rows += [(f"SHA-256 of the {kind} file ({entry['path']})", entry["sha256"])
             for kind, entry in provenance["files"].items()]
    rows += [(f"seed [{section}]", str(seed)) for section, seed in provenance["seeds"].items()]
    return Section("How to rerun this audit", "provenance", (
        Table("Versions, date, file digests and seeds", ("item", "value"), tuple(rows),
              notes=("Every setting is in audit.json under provenance.settings.",)),
        Preformatted(" ".join(provenance["command_line"])),
    ))
