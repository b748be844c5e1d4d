"""``fitaudit strd``: the solver checked against the NIST StRD nonlinear regression problems."""
from __future__ import annotations

import argparse

from rich.table import Table

from ..engine.outcomes import Outcome
from ..validation.check import ProblemCheck, StrdReport, StrdSettings, check_folder, reference_files
from ..validation.extended_precision import EXTENDED_DIGITS
from ..validation.grade import THRESHOLDS, VERDICT_LABELS, VERDICT_MEANINGS, Verdict
from .common import (EXIT_FINDING, EXIT_OK, add_command, add_json_option, add_solver_option, add_step_factors_option,
                     out, print_json, print_table, progress_bar)

DEFAULTS = StrdSettings()

DESCRIPTION = f"""\
Check fitaudit's solver against published certified results: fit every NIST StRD nonlinear
regression file (.dat) in DIR from its two published starting points (Start 1 far from the
solution, Start 2 near it), using the file's own model line as a formula with exact symbolic
derivatives, and compare each fit with the certified values.

LRE (log relative error) = -log10(|fitted - certified| / |certified|): the number of agreeing
significant digits, 0 to 11. A run passes when it converged to the certified minimum with
  at least {THRESHOLDS['params']:g} digits in every parameter,
  at least {THRESHOLDS['ssr']:g} digits in the residual sum of squares (SSR),
  at least {THRESHOLDS['sd']:g} digits in every standard deviation (SD).
A run that converged at a higher SSR found another (local) solution and is reported as such,
never as agreement; one at the certified SSR with some parameter more than 10 % off found an
equivalent parameter set (a symmetry of the model), and is not counted as agreement either.

Where double precision cannot resolve the certified SSR at all (the rounding of the data and
of the residuals is as large as the SSR), the converged fit is refined by Gauss-Newton steps in
{EXTENDED_DIGITS}-digit arithmetic on the exact decimal data; only for those problems (marked *) the pass
rule uses the refined SSR and the standard deviations rescaled by it. Parameters are always the
double-precision fit.

Defaults: Levenberg-Marquardt, step factor 1, tolerance {DEFAULTS.tolerance:g}, at most
{DEFAULTS.max_iterations} iterations. A lab validating its installation runs this once and files
the table (or the --json output).

Exit status: 0 every problem passed from both starts, 1 some did not, 2 bad input."""

EXAMPLES = """\
  fitaudit strd ../shared/reference/nist-strd
  fitaudit strd nist/ --solver gn --step-factors 1,0.5,0.25,0.1
  fitaudit strd nist/ --json > strd-validation.json"""


def register(subparsers) -> None:
    parser = add_command(subparsers, "strd", "check the solver against the NIST StRD reference problems",
                         DESCRIPTION, EXAMPLES, run)
    parser.add_argument("folder", metavar="DIR", help="folder holding NIST StRD nonlinear regression .dat files")
    add_solver_option(parser, DEFAULTS.method)
    add_step_factors_option(parser, "1; with several, each start shows its best run and the factors that reached "
                                    "the same verdict")
    parser.add_argument("--tolerance", type=float, default=DEFAULTS.tolerance, metavar="TOL",
                        help="largest relative parameter change that counts as converged "
                             f"(default {DEFAULTS.tolerance:g})")
    parser.add_argument("--max-iterations", type=int, default=DEFAULTS.max_iterations, metavar="N",
                        help=f"iteration limit per run (default {DEFAULTS.max_iterations})")
    add_json_option(parser)


def run(args: argparse.Namespace) -> int:
    settings = StrdSettings(method=args.solver or DEFAULTS.method,
                            step_factors=tuple(args.step_factors or DEFAULTS.step_factors),
                            tolerance=args.tolerance, max_iterations=args.max_iterations)
    total = len(reference_files(args.folder))
    with progress_bar("reference problems", disable=args.json) as progress:
        task = progress.add_task("fitting", total=total, rate="")
        report = check_folder(args.folder, settings,
                              on_problem=lambda name: progress.update(task, advance=1, rate=name))
    if args.json:
        print_json(report.to_dict())
    else:
        show(report)
    return EXIT_OK if report.passed.all() else EXIT_FINDING


def _digits(value: float, needed: float | None = None) -> str:
    if value != value:
        return "—"
    text = f"{value:.1f}"
    return f"[red]{text}[/]" if needed is not None and value < needed else text


def show(report: StrdReport) -> None:
    settings = report.settings
    several = len(settings.step_factors) > 1
    method = "Gauss-Newton" if settings.method == "gn" else "Levenberg-Marquardt"
    factors = ", ".join(f"{factor:g}" for factor in settings.step_factors)
    # A Levenberg-Marquardt step is taken whole unless asked otherwise: naming "step factor 1"
    # for it read as if the method were Gauss-Newton's.
    plain = settings.method == "lm" and tuple(settings.step_factors) == (1.0,)
    scaled = "" if plain else f", step factor {factors}" if settings.method == "gn" else f", steps scaled by {factors}"
    table = Table(title=f"NIST StRD check: {method}{scaled}, tolerance {settings.tolerance:g}, "
                        f"at most {settings.max_iterations} iterations", title_justify="left")
    for heading in ("problem", "difficulty", "start", "outcome", "verdict", "iterations", "LRE params",
                    "LRE SSR", "LRE SDs", "LRE SSR ext.*"):
        table.add_column(heading, justify="left" if heading in ("problem", "difficulty", "outcome", "verdict")
                         else "right")
    if several:
        table.add_column("factors reaching it")
    for check in report.checks:
        for start in range(2):
            table.add_row(*_row(check, start, several), end_section=start == 1)
    print_table(table)
    counts = report.counts()
    out.print(f"passed: {counts['passed_start1']} of {counts['problems']} from Start 1, "
              f"{counts['passed_start2']} of {counts['problems']} from Start 2 "
              f"(needed: parameters ≥ {THRESHOLDS['params']:g}, SSR ≥ {THRESHOLDS['ssr']:g}, "
              f"SDs ≥ {THRESHOLDS['sd']:g} digits)")
    shown = sorted({int(check.grades.verdict[start, check.best[start]])
                    for check in report.checks for start in range(2)})
    for code in shown:
        if code != Verdict.PASS:
            out.print(f"{VERDICT_LABELS[Verdict(code)]}: {VERDICT_MEANINGS[Verdict(code)]}", soft_wrap=True)
    for check in report.checks:
        if check.precision_limited:
            _footnote(check)


def _row(check: ProblemCheck, start: int, several: bool) -> list[str]:
    grades, at = check.grades, (start, int(check.best[start]))
    colour = "green" if grades.verdict[at] == Verdict.PASS else "red"
    # Where double precision cannot resolve the SSR, its digits (and the SDs') are shown but not judged.
    limited = bool(grades.precision_limited[at])
    # A run that did not converge agrees in no meaningful number of digits: a dash, not "0.0".
    converged = grades.outcome[at] == Outcome.CONVERGED
    cells = [
        (f"{check.name}*" if check.precision_limited else check.name) if start == 0 else "",
        check.difficulty if start == 0 else "", str(start + 1), Outcome(int(grades.outcome[at])).label,
        f"[{colour}]{check.label(*at)}[/]", str(int(grades.iterations[at])),
        *(_digits(value, needed) if converged else "—" for value, needed in (
            (grades.lre_params[at], THRESHOLDS["params"]),
            (grades.lre_ssr[at], None if limited else THRESHOLDS["ssr"]),
            (grades.lre_sd[at], None if limited else THRESHOLDS["sd"]),
            (grades.extended_lre_ssr[at], THRESHOLDS["ssr"]))),
    ]
    if several:
        cells.append(", ".join(f"{factor:g}" for factor in check.best_factors[start]))
    return cells


def _footnote(check: ProblemCheck) -> None:
    grades = check.grades
    limited = grades.precision_limited
    out.print(f"* {check.name}: double precision resolves only about {grades.ssr_digits[limited].min():.1f} digits "
              f"of this SSR (certified {check.certified_ssr:.3g}); even at the certified parameters it reproduces "
              f"only {check.lre_ssr_at_certified:.1f} digits. Its pass rule therefore uses the SSR of the fit refined "
              f"in {EXTENDED_DIGITS}-digit arithmetic (LRE SSR ext.) and the SDs rescaled by it "
              f"(LRE {grades.extended_lre_sd[limited].min():.1f}); parameter LREs are those of the double-precision "
              "fit.",
              soft_wrap=True)
